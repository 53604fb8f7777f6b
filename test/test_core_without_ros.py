"""The functional core runs without ROS, and its compiled plant kernel is cached on disk."""
import json
import subprocess
import sys

# Refuses any import of rclpy, then imports every core module (all but nodes/) and runs a
# short closed-loop simulation of the bundled joint.
WITHOUT_RCLPY = """
import importlib, json, pkgutil, sys

class NoRclpy:
    def find_spec(self, name, path=None, target=None):
        if name == "rclpy" or name.startswith("rclpy."):
            raise ImportError(f"blocked for this test: {name}")
        return None

sys.meta_path.insert(0, NoRclpy())
import compliant_damping
core = sorted(m.name[len("compliant_damping."):]
              for m in pkgutil.walk_packages(compliant_damping.__path__, "compliant_damping.")
              if not m.name.startswith("compliant_damping.nodes"))
for name in core:
    importlib.import_module(f"compliant_damping.{name}")
from compliant_damping.io import config
from compliant_damping.control import controller
from compliant_damping.sim import scenarios, simulate
ctrl, sim = config.load(config.bundled())
scenario = scenarios.make("setpoint_step", sim.joints)
result = simulate.simulate(sim.joints, controller.bank(ctrl), scenario, 0.3)
print(json.dumps({"core": core, "rclpy_loaded": "rclpy" in sys.modules,
                  "q_end": float(result.q[-1, 0]), "faults": result.faults}))
"""

# Runs the plant kernel once and reports numba's cache statistics for it.
KERNEL_RUN = """
import json
import numpy as np
from compliant_damping.dynamics import bench_plant
x = np.array([[0.0, 0.0, 0.01, 0.0]])
params = bench_plant.pack([bench_plant.JointParams(link_inertia=0.2, motor_inertia=0.1, spring_stiffness=100.0)])
bench_plant.advance(x, params, np.zeros(1), bench_plant.NO_EXTERNAL, 0.0, 1e-4, 10)
stats = bench_plant.advance.stats
print(json.dumps({"hits": sum(stats.cache_hits.values()), "misses": sum(stats.cache_misses.values()),
                  "path": str(stats.cache_path)}))
"""


def _run(code):
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120)
    assert out.returncode == 0, out.stderr
    return json.loads(out.stdout.strip().splitlines()[-1])


def test_core_imports_and_simulates_without_rclpy():
    report = _run(WITHOUT_RCLPY)
    assert not report["rclpy_loaded"]
    assert {"dynamics.bench_plant", "control.laws", "control.safety", "control.controller", "sim.simulate",
            "io.config", "cli"} <= set(report["core"])
    assert report["faults"] == [None]
    assert 0.0 < report["q_end"] < 0.1  # the 0.05 rad set-point step was followed, roughly


def test_plant_kernel_loads_from_numba_disk_cache():
    """Where the package is installed (the venv's editable install: its own __pycache__),
    numba writes the compiled kernel on first use, and a new process loads it instead of compiling.
    """
    _run(KERNEL_RUN)  # compiles and writes the cache if it is not there yet
    second = _run(KERNEL_RUN)
    assert second["hits"] >= 1 and second["misses"] == 0, second
