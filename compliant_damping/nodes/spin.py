"""The one ``main`` of both nodes: initialise, spin, always shut down."""
from __future__ import annotations

import signal
import sys

import rclpy
from rclpy.executors import ExternalShutdownException, SingleThreadedExecutor
from rclpy.signals import SignalHandlerOptions

from .. import config


def run(node_class, args=None, on_exit=None) -> int:
    """Spin one ``node_class`` until Ctrl-C, SIGTERM or shutdown; returns the exit code.

    The signals only set a flag that the spin loop reads between callbacks (the executor wakes
    at least every 0.1 s), so no callback is cut short and the ROS context is still valid for
    ``on_exit(node)``, e.g. the controller's ramp to zero torque. rclpy's own handlers would
    shut the context down under running callbacks. A bad parameter file exits 2 naming the key.
    """
    rclpy.init(args=args, signal_handler_options=SignalHandlerOptions.NO)
    stop = []
    for sig in (signal.SIGINT, signal.SIGTERM):
        signal.signal(sig, lambda signum, _frame: stop.append(signum))
    node = None
    try:
        node = node_class()
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
