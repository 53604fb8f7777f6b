"""Simulation: sensors, scenarios, the closed-loop simulators (bench joints, coupled robot) and the
plant stepper the simulated joint node runs."""
