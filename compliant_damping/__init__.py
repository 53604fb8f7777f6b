"""Decoupled link-side damping and impedance for series-elastic joints.

Functional core (no ROS): ``model`` (plant), ``laws`` (control laws),
``safety`` (safety filter), ``controller`` (law + filter per joint),
``simulate`` (closed loop), ``config`` (parameter files). ROS shell: ``nodes``.
"""
