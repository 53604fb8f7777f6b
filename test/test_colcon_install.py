"""The package builds with colcon in a fresh workspace and installs where ROS 2 tools look.

Reference: the ament_python layout that ``ros2 run`` and ``ros2 launch`` rely on (REP 122 and the
ament resource index): executables in ``lib/<package>``, data in ``share/<package>``, and the
marker ``share/ament_index/resource_index/packages/<package>``. The source is copied into a
temporary ``src/`` and built with the pinned colcon (colcon-core, colcon-ros); a few seconds.
"""
import os
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

pytest.importorskip("colcon_core", reason="the install-layout test needs colcon (colcon-core, colcon-ros)")

ROOT = Path(__file__).resolve().parent.parent
PACKAGE = "compliant_damping"
SOURCES = ("package.xml", "setup.py", "setup.cfg", "resource", PACKAGE, "config", "launch", "urdf")
EXECUTABLES = ("cdamp", "damping_controller", "simulated_joint", "scenario_player")


@pytest.fixture(scope="module")
def install(tmp_path_factory) -> Path:
    ws = tmp_path_factory.mktemp("colcon_ws")
    src = ws / "src" / PACKAGE
    src.mkdir(parents=True)
    for name in SOURCES:
        if (ROOT / name).is_dir():
            shutil.copytree(ROOT / name, src / name, ignore=shutil.ignore_patterns("__pycache__", "*.egg-info"))
        elif (ROOT / name).is_file():
            shutil.copy2(ROOT / name, src / name)
    out = subprocess.run([sys.executable, "-m", "colcon", "--log-base", str(ws / "log"), "build",
                          "--base-paths", str(ws / "src"), "--build-base", str(ws / "build"),
                          "--install-base", str(ws / "install"), "--event-handlers", "console_direct-"],
                         cwd=ws, capture_output=True, text=True, timeout=300,
                         env={**os.environ, "COLCON_HOME": str(ws / ".colcon")})
    assert out.returncode == 0, out.stdout[-3000:] + out.stderr[-3000:]
    return ws / "install" / PACKAGE


def _installed(share: Path, folder: str) -> set:
    return {p.relative_to(share / folder).as_posix() for p in (share / folder).rglob("*") if p.is_file()}


def test_executables_in_lib_package(install):
    lib = install / "lib" / PACKAGE
    for name in EXECUTABLES:
        assert (lib / name).is_file() and os.access(lib / name, os.X_OK), name


def test_data_files_in_share_package(install):
    share = install / "share" / PACKAGE
    assert (share / "package.xml").read_text() == (ROOT / "package.xml").read_text()
    for folder in ("config", "launch", "urdf"):
        if (ROOT / folder).is_dir():  # urdf/ ships once the package has robot descriptions
            source = {p.relative_to(ROOT / folder).as_posix() for p in (ROOT / folder).rglob("*") if p.is_file()
                      and "__pycache__" not in p.parts}
            assert _installed(share, folder) == source, folder


def test_ament_index_marker(install):
    marker = install / "share" / "ament_index" / "resource_index" / "packages" / PACKAGE
    assert marker.is_file()


def test_installed_package_is_importable_from_the_install(install):
    """The installed module, not the source tree, answers: its file lies under the install prefix."""
    site = next(install.glob("lib/python3*/site-packages"))
    out = subprocess.run([sys.executable, "-c", f"import {PACKAGE}; print({PACKAGE}.__file__)"], cwd=install,
                         env={**os.environ, "PYTHONPATH": str(site)}, capture_output=True, text=True, timeout=60,
                         check=True)
    assert Path(out.stdout.strip()).is_relative_to(install)
