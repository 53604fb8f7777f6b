"""ROS 2 nodes: thin rclpy adapters around the core."""
