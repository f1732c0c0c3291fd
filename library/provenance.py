"""Where a result came from: the versions of the software and of kinetome's own code.

Read from package metadata and git, never by importing the packages, so recording
provenance stays cheap even in light commands.
"""

from __future__ import annotations

import platform
import subprocess
from functools import lru_cache
from importlib import metadata
from pathlib import Path
from typing import Any

__all__ = ["SOFTWARE_PACKAGES", "software_versions", "code_version"]

# distribution names whose versions can change a simulation, a fit, a proof or a training run
SOFTWARE_PACKAGES = ("mujoco", "gymnasium", "numpy", "torch", "scipy", "z3-solver")


@lru_cache(maxsize=1)
def _software() -> tuple[tuple[str, str | None], ...]:
    out: list[tuple[str, str | None]] = []
    for name in SOFTWARE_PACKAGES:
        try:
            out.append((name, metadata.version(name)))
        except metadata.PackageNotFoundError:
            out.append((name, None))
    out.append(("python", platform.python_version()))
    out.append(("platform", f"{platform.system()}-{platform.machine()}"))
    return tuple(out)


def software_versions() -> dict[str, str | None]:
    """Package versions (None: not installed), the Python version and ``system-machine``."""
    return dict(_software())


def _git(root: Path, *args: str) -> str | None:
    try:
        done = subprocess.run(["git", "-C", str(root), *args], capture_output=True, text=True, timeout=10)
    except (OSError, subprocess.SubprocessError):
        return None
    return done.stdout.strip() if done.returncode == 0 else None


@lru_cache(maxsize=1)
def _code() -> tuple[tuple[str, Any], ...]:
    try:
        version = metadata.version("kinetome")
    except metadata.PackageNotFoundError:
        version = None
    root = Path(__file__).resolve().parents[1]
    commit = _git(root, "rev-parse", "HEAD")
    status = _git(root, "status", "--porcelain", "--untracked-files=no") if commit else None
    return (("kinetome", version), ("git_commit", commit), ("git_dirty", None if status is None else bool(status)))


def code_version() -> dict[str, Any]:
    """kinetome's package version, and the git commit of its source (None outside a checkout)
    with whether tracked files differ from it."""
    return dict(_code())
