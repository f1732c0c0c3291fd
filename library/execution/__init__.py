"""One execution layer for run, fit and check: episode blocks on this process, local Ray workers or a Ray cluster.

Blocks (``plan_blocks``) are cut independently of the worker count; ``executor_for``
chooses where they run; ``Executor.map`` returns results in block order. So a run
gives the same bits on one process, N local workers or a cluster. Ray is optional
(``pip install -e '.[cluster]'``) and imported only when workers are asked for.
"""

from __future__ import annotations

from .blocks import DEFAULT_BLOCK_SIZE, Block, plan_blocks
from .executors import Executor, InProcessExecutor, describe_workers, executor_for
from .versions import VersionMismatchError

__all__ = [
    "Block", "plan_blocks", "DEFAULT_BLOCK_SIZE", "Executor", "InProcessExecutor", "executor_for", "describe_workers",
    "VersionMismatchError",
]
