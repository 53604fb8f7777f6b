"""Parameter fields: dataclass fields that carry their unit, validity check and meaning.

``io/config.py`` validates files and run-time changes from this metadata, and the nodes
declare their ROS parameters from it, so a key is described in one place only.
"""
from __future__ import annotations

from dataclasses import MISSING, field

__all__ = ["CHECKS", "param"]

CHECKS = ("positive", "nonnegative", "finite", "not_nan", "limit")


def param(unit: str, check: str, doc: str, default=MISSING, required: bool = False):
    """Field with ``unit``, a ``check`` from CHECKS and a one-line ``doc``.

    No ``default``: the dataclass needs the value. ``required``: the dataclass has a
    default for code and tests, but a parameter file must state the value.
    """
    assert check in CHECKS, check
    return field(default=default, metadata={"unit": unit, "check": check, "doc": doc, "required": required})
