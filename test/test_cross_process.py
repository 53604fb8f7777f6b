"""The impact claim over ROS: simulated joint and controller as two processes, driven from here.

Per law, ``python -m compliant_damping.nodes.simulated_joint_node`` (lock step) and
``python -m compliant_damping.nodes.controller_node`` (sim time, the law set by ``-p law:=``)
run as child processes in a namespace of their own, with the environment inherited: the test
reads each child's environment from /proc and checks the loopback discovery settings and the
domain. It reads it only once the child's node is on the ROS graph: /proc/PID/environ is empty
until the kernel has finished the child's exec, and Popen can return before that (vfork: the
parent resumes when the new memory map is installed, before the environment is laid out in it;
on the development machine 77 of 100 reads right after Popen of a short child came back empty). A node on the graph
has run Python code, so its exec is complete. The test process then plays the bundled
end_stop_impact scenario on ``link_reference``, records ``joint_states`` and ``motor_effort``
and paces the loop (nodes.scenario_player.play, in process; the joint takes its commands from
the player on config.PACED_EFFORT, so a test process short of CPU slows the run down instead of
letting the controller run on a stale reference).

Checks, on the bundled knee:

* the claim (test_impact.py checks it offline): decoupled_damper's peak motor-torque rate is at
  most half of link_damping's, here as measured over ROS;
* each ROS run reproduces the offline simulator (simulate.simulate) tick for tick: in lock step
  the processes see exactly the offline sequence of readings, so link positions and torques
  agree to 1e-9 rad / N m (float64 round trips through the messages are exact; the tolerance
  only allows for the order of floating-point sums).

Each run takes a few seconds of wall time (2 s of sim time); the player gives up after 50 s.
"""
import argparse
import dataclasses
import os
import sys
import time

import numpy as np
import pytest

rclpy = pytest.importorskip("rclpy", reason="cross-process tests need rclpy")
pytest.importorskip("compliant_damping.nodes.controller_node", reason="the controller node does not exist yet")
pytest.importorskip("compliant_damping.nodes.simulated_joint_node", reason="the simulated joint node does not exist yet")
player = pytest.importorskip("compliant_damping.nodes.scenario_player", reason="the scenario player does not exist yet")

from compliant_damping.io import config, recordings  # noqa: E402
from compliant_damping.control import controller
from compliant_damping import demo
from compliant_damping.sim import scenarios, simulate
from compliant_damping.io.metrics import joint_metrics  # noqa: E402
from compliant_damping.io.runs import Run  # noqa: E402

pytestmark = pytest.mark.ros

SCENARIO = "end_stop_impact"
LAWS = ("link_damping", "decoupled_damper")
NETWORK_ENV = ("ROS_AUTOMATIC_DISCOVERY_RANGE", "ROS_LOCALHOST_ONLY", "ROS_DOMAIN_ID")
CTRL, SIM = config.load(config.bundled())
DT = 1.0 / CTRL.control_rate


def _environ(pid: int) -> dict:
    """Environment of a running child process whose exec has completed (Linux /proc)."""
    raw = open(f"/proc/{pid}/environ", "rb").read().split(b"\0")
    return dict(item.decode().split("=", 1) for item in raw if b"=" in item)


def run_over_ros(law: str, folder) -> Run:
    ns = f"/cdamp_cross_{os.getpid()}_{law}"
    params = demo.namespaced_file(config.bundled(), ns, folder / f"{law}.params.yaml")
    ros_args = ["--ros-args", "-r", f"__ns:={ns}", "-r", f"/clock:={ns}/clock", "-r", f"/diagnostics:={ns}/diagnostics",
                "--params-file", str(params)]
    commands = {
        "simulated_joint": [sys.executable, "-m", "compliant_damping.nodes.simulated_joint_node", *ros_args,
                            "-p", "lock_step:=true", "-r", f"motor_effort:={config.PACED_EFFORT}"],
        "controller": [sys.executable, "-m", "compliant_damping.nodes.controller_node", *ros_args,
                       "-p", "use_sim_time:=true", "-p", f"law:={law}"],
    }
    procs = {}
    try:
        demo.start(commands, folder / law, procs)  # environment inherited
        rclpy.init()
        try:
            node = rclpy.create_node("cross_process_player", namespace=ns)
            on_graph = lambda: {config.SIM_NODE, config.CONTROLLER_NODE} <= {  # noqa: E731
                n for n, space in node.get_node_names_and_namespaces() if space == ns}
            assert player.spin_until(node, on_graph, time.monotonic() + 30.0), f"nodes not up; logs in {folder}"
            for name, proc in procs.items():
                child = _environ(proc.pid)
                assert {k: child.get(k) for k in NETWORK_ENV} == {k: os.environ[k] for k in NETWORK_ENV}, name
            args = argparse.Namespace(config=None, scenario=SCENARIO, duration=None, lead=200, timeout=50.0,
                                      out=str(folder / f"{law}.npz"))
            assert player.play(node, args) == 0, f"run incomplete; logs in {folder}"
            node.destroy_node()
        finally:
            rclpy.shutdown()
    finally:
        codes = {name: demo.stop(proc, 10.0) for name, proc in procs.items()}
    assert all(code == 0 for code in codes.values()), f"exit codes {codes}; logs in {folder}"
    return recordings.read(folder / f"{law}.npz")


@pytest.fixture(scope="module")
def over_ros(tmp_path_factory):
    """Lazily run each law once over ROS; {law: runs.Run}."""
    folder = tmp_path_factory.mktemp("cross_process")
    runs = {}

    def get(law):
        if law not in runs:
            runs[law] = run_over_ros(law, folder)
        return runs[law]
    return get


@pytest.mark.parametrize("law", LAWS)
def test_ros_run_reproduces_the_offline_simulator(over_ros, law):
    scenario = scenarios.streamed(scenarios.make(SCENARIO, SIM.joints))  # the motion as link_trajectory carries it
    ros = over_ros(law)
    offline = simulate.simulate(SIM.joints, controller.bank(dataclasses.replace(CTRL, law=law)),
                                scenario, control_dt=DT, substeps=SIM.substeps, seed=SIM.seed)
    assert ros.q.shape == offline.q.shape == (round(scenario.duration / DT), 1)
    assert ros.control_dt == pytest.approx(DT, rel=1e-12)  # the player's tick, written to the .npz
    np.testing.assert_array_equal(ros.t_cmd, ros.t)  # lock step: one command per state, stamped alike
    assert np.max(ros.q) > SIM.joints[0].plant.stop_upper  # the link really hits the end stop
    np.testing.assert_allclose(ros.q, offline.q, rtol=0, atol=1e-9)
    np.testing.assert_allclose(ros.tau_m, offline.tau_m, rtol=0, atol=1e-9)


def test_decoupled_damper_halves_the_impact_torque_rate_over_ros(over_ros):
    scenario = scenarios.make(SCENARIO, SIM.joints)
    peak = {law: joint_metrics(over_ros(law), scenario)["knee"].peak_torque_rate for law in LAWS}
    print(f"peak motor-torque rate over ROS: {peak} N m/s, ratio {peak['decoupled_damper'] / peak['link_damping']:.3f}")
    assert peak["decoupled_damper"] <= 0.5 * peak["link_damping"]


def test_the_leg_lands_over_ros_as_offline_and_keeps_the_torque_rate_ratio(tmp_path):
    """The demo's landing part (demo.run_part): the bundled leg with motor_pd, link_damping and
    decoupled_damper, each as two processes in lock step on a floor rising at 0.35 m/s (the
    simulated robot's contact.rise_* settings). run_part fails when a ROS run leaves the offline
    robot simulator by more than demo.MAX_DIFFERENCE (1e-9 rad). The claim test_leg_landing.py checks
    offline must hold over ROS: on knee_pitch, where link_damping spikes most, the decoupled damper's
    peak torque rate is at most half of it (offline 4886 vs 13103 N m/s)."""
    landing = next(p for p in demo.parts() if p.scenario == "foot_landing")
    summary = demo.run_part(landing, tmp_path, timeout=50.0)
    rates = {law: entry["ros"]["knee_pitch"]["peak_torque_rate"] for law, entry in summary["laws"].items()}
    differences = {law: entry["max_link_position_difference"] for law, entry in summary["laws"].items()}
    print(f"landing over ROS: knee_pitch peak torque rates {rates} N m/s; max |q_ros - q_offline| {differences} rad")
    assert set(rates) == {"motor_pd", "link_damping", "decoupled_damper"}
    assert max(differences.values()) <= 1e-9
    assert rates["decoupled_damper"] <= 0.5 * rates["link_damping"]
    assert all(fault is None for entry in summary["laws"].values() for fault in entry["offline_faults"])
