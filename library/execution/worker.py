"""What runs inside a worker process: one thread per library, then the named function.

Work is sent as the dotted path of a module-level kinetome function plus plain data
(dicts, numpy arrays, bytes), never as pickled user objects or code.
"""

from __future__ import annotations

import os
from importlib import import_module
from typing import Any, Callable

__all__ = ["THREAD_ENV", "function_path", "resolve_function", "prepare_worker", "call", "report"]

# one BLAS/OpenMP thread per worker process: the workers are the parallelism
THREAD_ENV = {"OMP_NUM_THREADS": "1", "OPENBLAS_NUM_THREADS": "1", "MKL_NUM_THREADS": "1", "MKL_CBWR": "AUTO,STRICT"}

_PREPARED = False


def function_path(fn: Callable[..., Any]) -> str:
    """``module:qualname`` of a module-level kinetome function (what a worker imports)."""
    module, name = getattr(fn, "__module__", None), getattr(fn, "__qualname__", "")
    if not module or not module.startswith("kinetome.") or "<" in name or "." in name:
        raise ValueError(
            f"work sent to workers must be a module-level function of kinetome, got {module}:{name}; "
            "move it to a kinetome module (workers import it by name)"
        )
    return f"{module}:{name}"


def resolve_function(path: str) -> Callable[..., Any]:
    module, _, name = path.partition(":")
    if not module.startswith("kinetome.") or not name:
        raise ValueError(f"function path must be kinetome.<module>:<name>, got {path!r}")
    return getattr(import_module(module), name)


def prepare_worker() -> None:
    """Once per worker process: one BLAS, OpenMP and torch thread (MuJoCo runs one thread per batch by default)."""
    global _PREPARED
    if _PREPARED:
        return
    os.environ.update(THREAD_ENV)
    import torch

    torch.set_num_threads(1)
    _PREPARED = True


def call(path: str, item: Any) -> Any:
    """Run ``path(item)`` in this worker."""
    prepare_worker()
    return resolve_function(path)(item)


def report() -> dict[str, Any]:
    """Versions, host, pid and thread settings of this worker (checked before it gets work)."""
    prepare_worker()
    import torch

    from .versions import software_report

    return {**software_report(), "torch_threads": torch.get_num_threads(),
            "thread_env": {k: os.environ.get(k) for k in THREAD_ENV}}
