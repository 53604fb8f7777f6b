"""Files and formats: parameter schema, files and checks, the robot section, joint-state messages
(decoding, without rclpy), runs and their metrics, recordings and plots."""
