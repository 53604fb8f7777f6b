"""The one ``main`` of both nodes: initialise, spin, always shut down."""
from __future__ import annotations

import signal
import sys

import rclpy
from rclpy.executors import ExternalShutdownException, SingleThreadedExecutor
from rclpy.impl.implementation_singleton import rclpy_implementation as _rclpy
from rclpy.signals import SignalHandlerOptions

from compliant_damping.io import config


def params_files(args) -> list:
    """Paths given as ``--params-file PATH`` in a ROS command line (all of them, in order)."""
    return [path for flag, path in zip(args, args[1:]) if flag == "--params-file"]


def _refused_by_rcl(args, err) -> int:
    """Report why rcl refused the command line; exit code 2.

    rcl parses each --params-file itself and says only "near line N"; PyYAML gives the line and
    column of a syntax error (``FILE:LINE:COL: reason``). A file that is YAML but breaks a rule
    of ROS parameter files (e.g. a list mixing types) gets rcl's own message.
    """
    for path in params_files(args):
        try:
            config.read(path)
        except config.ConfigError as bad:
            print(f"parameter error: {bad}", file=sys.stderr)
            return 2
    print(f"parameter error: {err}", file=sys.stderr)
    return 2


def run(node_class, args=None, on_exit=None) -> int:
    """Spin one ``node_class`` until Ctrl-C, SIGTERM or shutdown; returns the exit code.

    The signals only set a flag that the spin loop reads between callbacks (the executor wakes
    at least every 0.1 s), so no callback is cut short and the ROS context is still valid for
    ``on_exit(node)``, e.g. the controller's ramp to zero torque. rclpy's own handlers would
    shut the context down under running callbacks. A bad parameter file exits 2 naming the key
    (a YAML syntax error: the file, line and column), without a traceback.
    """
    try:
        rclpy.init(args=args, signal_handler_options=SignalHandlerOptions.NO)
    except _rclpy.RCLError as err:  # rcl refused the command line, e.g. a --params-file
        return _refused_by_rcl(sys.argv if args is None else args, err)
    stop = []
    for sig in (signal.SIGINT, signal.SIGTERM):
        signal.signal(sig, lambda signum, _frame: stop.append(signum))
    node = None
    try:
        node = node_class(own_process=True)
        executor = SingleThreadedExecutor()
        executor.add_node(node)
        while rclpy.ok() and not stop:
            executor.spin_once(timeout_sec=0.1)
    except config.ConfigError as err:
        print(f"parameter error: {err}", file=sys.stderr)
        return 2
    except ExternalShutdownException:
        pass
    finally:
        if node is not None:
            if on_exit is not None and rclpy.ok():
                on_exit(node)
            node.destroy_node()
        rclpy.try_shutdown()
    return 0
