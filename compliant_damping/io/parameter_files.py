"""Parameter files as text: reading (YAML errors at their line and column), the node sections
(``/**/NODE`` and namespaced ones), layering several files key by key as ROS 2 does, the bundled
files' folder, and the errors every parameter problem raises. Validation is io/config.py's.
"""
from __future__ import annotations

from pathlib import Path

import yaml

__all__ = ["ConfigError", "YamlSyntaxError", "flatten", "node_parameters", "read", "layered_parameters",
           "share_dir", "bundled"]


class ConfigError(ValueError):
    """A parameter is missing, unknown, of the wrong type or physically impossible."""

    def __init__(self, key: str, reason: str):
        super().__init__(f"{key}: {reason}")
        self.key = key
        self.reason = reason


class YamlSyntaxError(ConfigError):
    """A parameter file that is not YAML; ``line`` and ``column`` count from 1 (key ``FILE:LINE:COL``)."""

    def __init__(self, path: str, line: int, column: int, reason: str):
        super().__init__(f"{path}:{line}:{column}", reason)
        self.path, self.line, self.column = path, line, column


def flatten(tree: dict, prefix: str = "") -> dict:
    """Nested YAML mapping to ROS's dotted parameter names."""
    flat = {}
    for key, value in tree.items():
        if isinstance(value, dict):
            flat.update(flatten(value, f"{prefix}{key}."))
        else:
            flat[f"{prefix}{key}"] = value
    return flat


def node_parameters(document: dict, node: str, required: bool = True) -> dict:
    """Flat parameters for ``node`` from a parsed parameter file (``/**`` and namespaced sections merge).

    ``required=False``: a file without a section for ``node`` gives an empty mapping.
    """
    if not isinstance(document, dict):
        raise ConfigError("<file>", "a parameter file is a mapping of node names to ros__parameters")
    flat = {}
    for section, body in document.items():
        if section == "/**" or str(section).rstrip("/").split("/")[-1] == node:
            if not isinstance(body, dict) or not isinstance(body.get("ros__parameters"), dict):
                raise ConfigError(str(section), "expected a 'ros__parameters' mapping")
            flat.update(flatten(body["ros__parameters"]))
    if not flat and required:
        raise ConfigError(node, "no section for this node in the parameter file")
    return flat


def read(path) -> dict:
    """Parsed parameter file.

    A YAML syntax error raises :class:`YamlSyntaxError` at PyYAML's problem mark (0-based
    there, 1-based here, as editors count); an unreadable file a ConfigError naming it.
    """
    try:
        text = Path(path).read_text()
    except OSError as err:
        raise ConfigError(str(path), f"cannot read the file: {err.strerror}") from None
    try:
        return yaml.safe_load(text) or {}
    except yaml.MarkedYAMLError as err:
        mark, start = err.problem_mark or err.context_mark, err.context_mark
        reason = err.problem or err.context
        if err.context and err.problem and start is not None:
            reason += f" ({err.context} started at {start.line + 1}:{start.column + 1})"
        raise YamlSyntaxError(str(path), mark.line + 1, mark.column + 1, reason) from None
    except yaml.YAMLError as err:
        raise ConfigError(str(path), f"not valid YAML: {err}") from None


def layered_parameters(paths, node: str) -> dict:
    """Flat parameters for ``node`` from several parameter files in order.

    A later file overrides an earlier one key by key, as ROS 2 does with several
    ``--params-file`` arguments; files without a section for ``node`` are skipped.
    """
    paths = [paths] if isinstance(paths, (str, Path)) else list(paths)
    flat = {}
    for path in paths:
        flat.update(node_parameters(read(path), node, required=False))
    if not flat:
        raise ConfigError(node, f"no section for this node in {', '.join(str(p) for p in paths) or 'no file'}")
    return flat


def share_dir() -> Path:
    """Folder holding config/ and launch/: the source tree, or the install's share/compliant_damping."""
    here = Path(__file__).resolve().parents[2]  # compliant_damping/io/ -> the source tree
    if (here / "config").is_dir():
        return here
    try:
        from ament_index_python.packages import get_package_share_directory
        return Path(get_package_share_directory("compliant_damping"))
    except Exception:  # noqa: BLE001 - no ament index: fall back to the Python prefix
        import sys
        return Path(sys.prefix) / "share" / "compliant_damping"


def bundled(name: str = "one_joint.yaml") -> Path:
    """Path of a bundled parameter file in config/."""
    return share_dir() / "config" / name
