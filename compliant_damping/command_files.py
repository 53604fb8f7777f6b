"""The parameter files a `cdamp` command reads (--config, --layer, --law) and what they describe."""
from __future__ import annotations

from compliant_damping.io import config

__all__ = ["is_robot", "load_files"]


def load_files(args):
    """(ControllerSetup, SimSetup) from --config (default: the bundled one-joint file), --layer files and --law."""
    paths = [args.config or config.bundled()] + (getattr(args, "layer", None) or [])
    ctrl = config.layered_parameters(paths, config.CONTROLLER_NODE)
    if getattr(args, "law", None):
        ctrl["law"] = args.law
    return config.controller_setup(ctrl), config.sim_setup(config.layered_parameters(paths, config.SIM_NODE))


def is_robot(ctrl, sim) -> bool:
    """True when either node's section names a URDF: the run is a robot with coupled links."""
    if ctrl.urdf_source is None and sim.urdf_source is None:
        return False
    if ctrl.joint_names != sim.joint_names:
        raise ValueError(f"joint_names: the controller's {ctrl.joint_names} and the simulated robot's "
                         f"{sim.joint_names} must be the same joints in the same order")
    return True
