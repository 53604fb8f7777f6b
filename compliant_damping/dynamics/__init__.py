"""Link-side rigid-body dynamics of the robot: independent joints or a URDF chain (Pinocchio).

``UrdfChain`` imports Pinocchio only when a chain is built; the rest needs no Pinocchio.
"""
from compliant_damping.dynamics.links import ForwardDerivatives, IndependentLinks, LinkDynamics, RobotModelError
from compliant_damping.dynamics.urdf_chain import STANDARD_GRAVITY, UrdfChain, bundled_urdf

__all__ = ["LinkDynamics", "IndependentLinks", "UrdfChain", "ForwardDerivatives", "RobotModelError",
           "bundled_urdf", "STANDARD_GRAVITY"]
