"""What each node does once it is set up: its one start-up log line (parameter files, law and
joints) and freezing the heap it built, so garbage collection cannot stall the control loop."""
from __future__ import annotations

import gc
import sys


def params_files(argv) -> list:
    """Paths given as ``--params-file PATH`` inside ``--ros-args ... [--]`` sections of ``argv``, in order."""
    files, ros = [], False
    for arg, following in zip(argv, [*argv[1:], None]):
        if arg in ("--ros-args", "--"):
            ros = arg == "--ros-args"
        elif ros and arg == "--params-file" and following is not None:
            files.append(following)
    return files


def start_line(files, joint_names, law: str | None = None) -> str:
    """``parameter file(s) A, B; law L; joints j1, j2`` (the law part only for a controller)."""
    parts = [f"parameter file(s) {', '.join(files) if files else 'none (overrides and defaults only)'}"]
    if law is not None:
        parts.append(f"law {law}")
    parts.append(f"joints {', '.join(joint_names)}")
    return "; ".join(parts)


def log_start(node, joint_names, law: str | None = None, argv=None) -> None:
    """Log :func:`start_line` at info level, the files read from ``argv`` (default ``sys.argv``)."""
    node.get_logger().info(start_line(params_files(sys.argv if argv is None else argv), joint_names, law))


def freeze_heap() -> None:
    """Collect garbage, then move every object alive into the collector's permanent generation
    (``gc.freeze``), so later collections look only at objects made since. A node freezes once its
    models are built: before, a full collection of the controller's heap (its URDF model, the
    numerical libraries' objects) stalled the loop for 44-56 ms once in about 500 ticks
    (benchmarks/node_tick_profile.py, benchmarks/node_latency.py). Objects frozen by an earlier
    call are thawed first, so what a reconfigured node let go of is still collected."""
    gc.unfreeze()
    gc.collect()
    gc.freeze()
