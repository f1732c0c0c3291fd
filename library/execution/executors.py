"""Where blocks run: in this process, on N local Ray worker processes, or on a running Ray cluster.

``executor_for(workers, address)`` picks one. Every executor returns results in item
order, so what a caller computes from them does not depend on where they ran.
"""

from __future__ import annotations

import sys
from typing import Any, Callable, Iterable, Iterator, Protocol

from ..errors import InvalidInputError

__all__ = ["Executor", "InProcessExecutor", "executor_for", "describe_workers"]

_NOTICES: set[str] = set()


class Executor(Protocol):
    """Runs a module-level kinetome function over plain-data items."""

    workers: int  # how many items run at once
    where: str  # in words, for notes and errors

    def map(self, fn: Callable[[Any], Any], items: Iterable[Any]) -> list[Any]:
        """``[fn(item) for item in items]``, in item order."""
        ...

    def imap(self, fn: Callable[[Any], Any], items: Iterable[Any]) -> Iterator[Any]:
        """The same results one by one, in item order; closing the iterator early drops the rest."""
        ...

    def close(self) -> None: ...


class InProcessExecutor:
    """Runs every item here, one after another (the reference every other executor must equal)."""

    def __init__(self, note: str = "in this process"):
        self.workers = 1
        self.where = note

    def map(self, fn: Callable[[Any], Any], items: Iterable[Any]) -> list[Any]:
        return list(self.imap(fn, items))

    def imap(self, fn: Callable[[Any], Any], items: Iterable[Any]) -> Iterator[Any]:
        from .worker import function_path

        function_path(fn)  # the same rule as for workers, so in-process runs cannot hide a bad function
        for item in items:
            yield fn(item)

    def close(self) -> None:
        return None

    def __enter__(self) -> "InProcessExecutor":
        return self

    def __exit__(self, *exc: Any) -> None:
        self.close()


def notice(text: str) -> None:
    """Say ``text`` once per process on stderr (a fallback the user should know about)."""
    if text not in _NOTICES:
        _NOTICES.add(text)
        sys.stderr.write(f"kinetome: note: {text}\n")


def _check_arguments(workers: int | None, address: str | None) -> None:
    problems = []
    if workers is not None and (isinstance(workers, bool) or not isinstance(workers, int) or workers < 1):
        problems.append(f"--workers must be a whole number >= 1, got {workers!r}")
    if address is not None and (not isinstance(address, str) or not address.strip()):
        problems.append(f"--address must be a Ray cluster address such as 127.0.0.1:6379 or 'auto', got {address!r}")
    if problems:
        raise InvalidInputError(problems)


def executor_for(workers: int | None = None, address: str | None = None, *, worker_env: dict[str, str] | None = None) -> Any:
    """An executor for ``workers`` worker processes, or a Ray cluster at ``address``.

    None/1 worker and no address: in this process. N workers: N local Ray worker processes
    (one MuJoCo, BLAS and torch thread each; a Ray already started in this process is reused).
    ``address``: a running Ray cluster (``ray start --head``), using ``workers`` of its CPUs
    (default all). Without Ray installed, N workers fall back to this process, with a note.
    ``worker_env``: extra environment variables for the workers.
    """
    _check_arguments(workers, address)
    if address is None and (workers is None or workers == 1):
        return InProcessExecutor()
    try:
        import ray  # noqa: F401
    except ImportError:
        if address is not None:
            raise InvalidInputError(
                f"--address {address} needs Ray, which is not installed; install it with pip install -e '.[cluster]'"
            ) from None
        notice(f"Ray is not installed, so --workers {workers} runs every block in this process, one after another "
               "(same results); pip install -e '.[cluster]' for worker processes")
        return InProcessExecutor(note="in this process (Ray is not installed)")
    from .ray_executor import RayExecutor

    return RayExecutor(workers=workers, address=address, worker_env=worker_env)


def describe_workers(workers: int | None, address: str | None) -> str:
    """How work is spread, in words, e.g. for a progress label."""
    if address is not None:
        return f"Ray cluster {address}" + ("" if workers is None else f", {workers} workers")
    return "this process" if workers in (None, 1) else f"{workers} local Ray workers"
