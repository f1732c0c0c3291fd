"""What software a worker runs, and the rule that refuses a cluster whose workers differ.

Results are identical bit for bit only when every process computes with the same
MuJoCo, gymnasium, numpy and torch and the same kinetome code, so a worker reports
them before it gets any work and a mismatch stops the run with the node named.
"""

from __future__ import annotations

import json
import os
import platform
import socket
from typing import Any, Mapping

from ..errors import ExecutionError

__all__ = ["COMPARED", "software_report", "compare_reports", "VersionMismatchError", "TEST_OVERRIDE_ENV"]

# what must agree between the driver and every worker
COMPARED = ("mujoco", "gymnasium", "numpy", "torch", "kinetome", "kinetome_commit", "python")

# Test hook: a worker whose environment holds this JSON mapping reports those versions instead
# (the version-mismatch test starts workers with it; nothing else sets it).
TEST_OVERRIDE_ENV = "KINETOME_TEST_WORKER_VERSIONS"


class VersionMismatchError(ExecutionError):
    """A worker runs other software versions than the process that sends it work."""

    exit_code = 2


def software_report() -> dict[str, Any]:
    """This process's versions, host and thread settings (read from package metadata and git)."""
    from ..provenance import code_version, software_versions

    soft, code = software_versions(), code_version()
    report: dict[str, Any] = {name: soft.get(name) for name in ("mujoco", "gymnasium", "numpy", "torch")}
    report["kinetome"] = code.get("kinetome")
    report["kinetome_commit"] = code.get("git_commit")
    report["python"] = platform.python_version()
    override = os.environ.get(TEST_OVERRIDE_ENV)
    if override:
        report.update(json.loads(override))
    report["host"] = socket.gethostname()
    report["pid"] = os.getpid()
    return report


def compare_reports(driver: Mapping[str, Any], worker: Mapping[str, Any], *, node: str) -> list[str]:
    """One line per version that differs (empty: they agree). A git commit is compared only when
    both sides run from a checkout (an installed wheel has none)."""
    lines = []
    for name in COMPARED:
        mine, theirs = driver.get(name), worker.get(name)
        if name == "kinetome_commit" and (mine is None or theirs is None):
            continue
        if mine != theirs:
            lines.append(f"node {node}: {name} {theirs} on the worker, {mine} here")
    return lines


def refuse_mismatches(driver: Mapping[str, Any], reports: Mapping[str, Mapping[str, Any]]) -> None:
    """Raise ``VersionMismatchError`` naming every node and version that differs from the driver."""
    lines = [line for node, report in reports.items() for line in compare_reports(driver, report, node=node)]
    if lines:
        raise VersionMismatchError(
            "the cluster's workers run other software than this process, so results would not be identical; "
            + "; ".join(lines)
            + "; install the same versions on every node (pip install -e '.[cluster]' from the same commit)"
        )
