"""Analysis: linearisation of the running closed loop (one joint: ``linear``; a coupled robot:
``robot_linear``), modes, rendered stiffness and admittance, and the tuning sweep."""
