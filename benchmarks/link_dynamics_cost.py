"""Per-call cost of forward dynamics + model-based jerk, independent links against URDF chains.

What a law tick asks of the link dynamics: q''_m = forward(q, q', tau) and
q'''_m = jerk(q, q', tau, tau'). Measured side by side in one run (interleaved rounds, median):
the bench pendulum as IndependentLinks (closed form) and as pendulum.urdf through Pinocchio,
IndependentLinks with 3 and 7 joints, the 3-joint compliant_leg.urdf and a 7-joint spatial chain
generated here. Prints microseconds per call and ratios.

    .venv/bin/python benchmarks/link_dynamics_cost.py     (the venv of `make test`, package installed)
"""
from __future__ import annotations

import statistics
import time

import numpy as np

from compliant_damping.dynamics import IndependentLinks, UrdfChain, bundled_urdf

CALLS, ROUNDS = 4000, 7
AXES = ("0 1 0", "1 0 0", "0 0 1")


def seven_joint_urdf(n: int = 7) -> str:
    """An invented spatial arm: n revolute joints cycling through the y, x and z axes, 0.25 m
    apart, cylinder-like links from 4 kg down to 1 kg."""
    parts = ['<robot name="bench_chain"><link name="base"/>']
    parent = "base"
    for i in range(n):
        m = 4.0 - 3.0 * i / (n - 1)
        parts.append(
            f'<joint name="j{i}" type="revolute"><parent link="{parent}"/><child link="l{i}"/>'
            f'<origin xyz="0 0 {0.25 if i else 0.0}"/><axis xyz="{AXES[i % 3]}"/>'
            f'<limit lower="-3" upper="3" effort="100" velocity="5"/></joint>'
            f'<link name="l{i}"><inertial><origin xyz="0 0 0.12"/><mass value="{m}"/>'
            f'<inertia ixx="{0.02 * m}" ixy="0" ixz="0" iyy="{0.02 * m}" iyz="0" izz="{0.004 * m}"/>'
            f'</inertial></link>')
        parent = f"l{i}"
    parts.append("</robot>")
    return "".join(parts)


def per_call(links, states) -> float:
    """Seconds per forward + jerk pair over the given (q, dq, tau, dtau) states."""
    start = time.perf_counter()
    for q, dq, tau, dtau in states:
        links.forward(q, dq, tau)
        links.jerk(q, dq, tau, dtau)
    return (time.perf_counter() - start) / len(states)


def main() -> None:
    rng = np.random.default_rng(0)
    cases = {
        "pendulum, IndependentLinks": IndependentLinks([0.25], [2.0], [0.0], ["knee"]),
        "pendulum.urdf, UrdfChain": UrdfChain.from_file(bundled_urdf("pendulum.urdf"), ["knee"]),
        "3 joints, IndependentLinks": IndependentLinks([0.25] * 3, [2.0] * 3, [0.0] * 3),
        "compliant_leg.urdf, UrdfChain": UrdfChain.from_file(bundled_urdf("compliant_leg.urdf"),
                                                             ["hip_pitch", "knee_pitch", "ankle_pitch"]),
        "7 joints, IndependentLinks": IndependentLinks([0.25] * 7, [2.0] * 7, [0.0] * 7),
        "7-joint chain, UrdfChain": UrdfChain(seven_joint_urdf(), [f"j{i}" for i in range(7)]),
    }
    states = {name: [tuple(rng.uniform(-1.0, 1.0, links.n) for _ in range(4)) for _ in range(CALLS)]
              for name, links in cases.items()}
    samples = {name: [] for name in cases}
    for _ in range(ROUNDS):  # interleaved, so drifts of the machine hit every case alike
        for name, links in cases.items():
            samples[name].append(per_call(links, states[name]))
    cost = {name: statistics.median(s) for name, s in samples.items()}
    base = cost["pendulum, IndependentLinks"]
    print(f"forward + jerk per call, median of {ROUNDS} rounds of {CALLS} calls")
    print(f"{'case':32s} {'us/call':>9s} {'/ pendulum closed form':>23s}")
    for name, c in cost.items():
        print(f"{name:32s} {c * 1e6:9.2f} {c / base:23.2f}")
    names = list(cost)
    for closed, chain in zip(names[::2], names[1::2]):
        print(f"UrdfChain / IndependentLinks at the same joint count ({chain}): {cost[chain] / cost[closed]:.2f}")


if __name__ == "__main__":
    main()
