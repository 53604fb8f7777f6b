"""The one ``main`` of both nodes: initialise, spin, always shut down."""
from __future__ import annotations

import sys

import rclpy
from rclpy.executors import ExternalShutdownException

from .. import config


def run(node_class, args=None) -> int:
    """Spin one ``node_class`` until Ctrl-C or shutdown; a bad parameter file exits 2 with the key."""
    rclpy.init(args=args)
    node = None
    try:
        node = node_class()
        rclpy.spin(node)
    except config.ConfigError as err:
        print(f"parameter error: {err}", file=sys.stderr)
        return 2
    except (KeyboardInterrupt, ExternalShutdownException):
        pass
    finally:
        if node is not None:
            node.destroy_node()
        rclpy.try_shutdown()
    return 0
