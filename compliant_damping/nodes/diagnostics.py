"""The controller node's ``/diagnostics`` statuses (diagnostic_msgs): one per joint, from plain values."""
from __future__ import annotations

from diagnostic_msgs.msg import DiagnosticStatus, KeyValue

__all__ = ["joint_statuses"]


def joint_statuses(node_name: str, joint_names, faults, law: str, mode: str, waiting: bool, counters: dict) -> list:
    """DiagnosticStatus per joint: ERROR with the fault's code and reason in safe mode, WARN while
    active but waiting for joint states, else OK; ``counters`` ({key: str}) are shared by every joint."""
    statuses = []
    for name, fault in zip(joint_names, faults):
        values = {"law": law, "mode": "safe" if fault else mode,
                  "fault_code": fault.code.value if fault else "", "fault": fault.reason if fault else "", **counters}
        statuses.append(DiagnosticStatus(
            level=DiagnosticStatus.ERROR if fault else DiagnosticStatus.WARN if waiting else DiagnosticStatus.OK,
            name=f"{node_name}: {name}", hardware_id=name, message=str(fault) if fault else f"{mode}, law {law}",
            values=[KeyValue(key=k, value=v) for k, v in values.items()]))
    return statuses
