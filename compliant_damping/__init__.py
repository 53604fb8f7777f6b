"""Decoupled link-side damping and impedance for series-elastic joints.

Functional core (no ROS), by layer: ``dynamics`` (link dynamics, the elastic-joint plants),
``control`` (laws, safety filter, controllers), ``sim`` (sensors, scenarios, simulators),
``analysis`` (linearisation, modes, tuning), ``io`` (parameter files, runs, metrics, recordings,
plots). ROS shell: ``nodes``; the command-line tool: ``cli``.
"""
