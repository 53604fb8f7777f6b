"""The offline run of a parameter file's setups: the bench simulator for independent joints, the
robot simulator for a URDF robot (the run ``cdamp simulate`` makes and the demo compares with ROS)."""
from __future__ import annotations

from compliant_damping.control import controller
from compliant_damping.io.runs import Run
from compliant_damping.sim import robot_sim, simulate

__all__ = ["run_scenario"]


def run_scenario(ctrl, sim, scenario, robot: bool, duration: float | None = None) -> Run:
    """Run ``scenario`` offline with the controller of ``ctrl`` (config.ControllerSetup) on the
    simulated joints or robot of ``sim`` (config.SimSetup) at the controller's rate.

    ``robot``: the links are coupled (a URDF robot: command_files.is_robot); the robot simulator
    then runs with the scenario's contacts and the file's sensors, else the bench simulator.
    ``duration`` (s) defaults to the scenario's. Raises ValueError for a reference the law cannot
    follow (laws.check_reference).
    """
    dt = 1.0 / ctrl.control_rate
    if robot:
        return robot_sim.simulate_robot(robot_sim.robot_plant(sim, scenario), controller.robot(ctrl), scenario,
                                        duration, control_dt=dt, substeps=sim.substeps,
                                        sensors=[j.sensor for j in sim.joints], seed=sim.seed)
    return simulate.simulate(sim.joints, controller.bank(ctrl), scenario, duration, control_dt=dt,
                             substeps=sim.substeps, seed=sim.seed)
