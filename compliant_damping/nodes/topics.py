"""Options shared by the nodes' publishers and subscriptions.

rclpy gives every publisher and subscription two QoS event handlers by default (a warning on an
incompatible QoS or an incompatible type). Each is a waitable that every executor pass visits
(rclpy/executors.py), and a node answering a 1 kHz joint-state stream makes two passes per
message (rclpy's executor triggers its own guard condition after each callback), so the nodes
create their topics without them (:data:`NO_SUB_EVENTS`, :data:`NO_PUB_EVENTS`);
``benchmarks/node_tick_profile.py`` times the pass. An incompatible peer is still reported: the
event fires on both ends, and rclpy's default handlers on the peer (``ros2 topic pub``/``echo``,
a driver) warn there; the controller also reports activation without joint states.
"""
from __future__ import annotations

from rclpy.event_handler import PublisherEventCallbacks, SubscriptionEventCallbacks

__all__ = ["NO_PUB_EVENTS", "NO_SUB_EVENTS"]

NO_SUB_EVENTS = {"event_callbacks": SubscriptionEventCallbacks(use_default_callbacks=False)}  # create_subscription
NO_PUB_EVENTS = {"event_callbacks": PublisherEventCallbacks(use_default_callbacks=False)}  # create_publisher
