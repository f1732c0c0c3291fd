"""Blocks on Ray worker processes: local ones started here, or a running cluster's.

Imported only when Ray is wanted. Work goes out as a function path plus plain data;
at most ``workers`` items are in flight, results come back in item order, and a task
whose worker process dies is run again (``max_retries``), which cannot change its
result because a block's contents depend only on the block.
"""

from __future__ import annotations

import ipaddress
import logging
import os
from typing import Any, Callable, Iterable, Iterator

import ray

from ..errors import ExecutionError, KinetomeError
from . import worker as _worker
from .versions import refuse_mismatches, software_report

__all__ = ["RayExecutor", "MAX_RETRIES"]

MAX_RETRIES = 3  # runs of a task whose worker died before Ray gives up


@ray.remote(max_retries=MAX_RETRIES)
def run_item(path: str, item: Any) -> Any:
    return _worker.call(path, item)


@ray.remote(max_retries=MAX_RETRIES)
def worker_report() -> dict[str, Any]:
    return _worker.report()


def _start_local(workers: int) -> None:
    """A private local Ray with ``workers`` CPUs (never a cluster found through RAY_ADDRESS or `ray start`);
    workers inherit one-thread settings."""
    saved = {k: os.environ.get(k) for k in _worker.THREAD_ENV}
    os.environ.update(_worker.THREAD_ENV)  # the raylet, and so every worker, starts with them
    constants = getattr(getattr(ray, "_private", None), "ray_constants", None)
    multi_node = getattr(constants, "ENABLE_RAY_CLUSTER", None)
    if multi_node is not None:
        constants.ENABLE_RAY_CLUSTER = False  # a private Ray of this machine: every process on 127.0.0.1
    try:
        ray.init(address="local", num_cpus=workers, include_dashboard=False, logging_level=logging.ERROR, log_to_driver=False,
                 runtime_env={"env_vars": dict(_worker.THREAD_ENV)})
    finally:
        if multi_node is not None:
            constants.ENABLE_RAY_CLUSTER = multi_node
        for k, v in saved.items():
            if v is None:
                os.environ.pop(k, None)
            else:
                os.environ[k] = v


def _loopback_host(address: str) -> str | None:
    """The host of ``address`` when it is a loopback address (a cluster on this machine), else None."""
    host = address.rsplit(":", 1)[0]
    try:
        return host if ipaddress.ip_address(host).is_loopback else None
    except ValueError:
        return None


def _check_reachable(address: str, timeout_s: float = 5.0) -> None:
    """Refuse at once when nothing listens at ``host:port`` (Ray itself retries for minutes before giving up)."""
    import socket

    host, sep, port = address.rpartition(":")
    if not sep or not port.isdigit() or address == "auto":
        return  # 'auto' and other forms are Ray's to resolve
    try:
        socket.create_connection((host, int(port)), timeout=timeout_s).close()
    except OSError as exc:
        raise ExecutionError(f"cannot reach the Ray cluster at {address}: nothing answers there ({exc}); start one with "
                             "`ray start --head` or check the address (host:port of the head node, or 'auto')") from None


def _connect(address: str) -> None:
    _check_reachable(address)
    # a head on a loopback address (nodes of one machine, e.g. tests) is reached from that same address
    local = {"_node_ip_address": _loopback_host(address)} if _loopback_host(address) else {}
    try:
        ray.init(address=address, logging_level=logging.ERROR, log_to_driver=False,
                 runtime_env={"env_vars": dict(_worker.THREAD_ENV)}, **local)
    except (ConnectionError, RuntimeError, ValueError) as exc:
        raise ExecutionError(f"cannot reach the Ray cluster at {address}: {exc}; start one with `ray start --head` "
                             "or check the address (host:port of the head node, or 'auto')") from None


class RayExecutor:
    """``workers`` items at a time on Ray worker processes (a cluster's CPUs when ``workers`` is None)."""

    def __init__(self, *, workers: int | None, address: str | None, worker_env: dict[str, str] | None = None):
        self._started_here = False
        if not ray.is_initialized():
            if address is None:
                _start_local(int(workers or 1))
            else:
                _connect(address)
            self._started_here = True
        cpus = int(ray.cluster_resources().get("CPU", 0))
        if cpus < 1:
            raise ExecutionError(f"the Ray cluster{'' if address is None else ' at ' + address} has no CPUs for workers")
        self.workers = int(workers) if workers is not None else cpus
        self.where = f"{self.workers} Ray workers" + ("" if address is None else f" on the cluster at {address}")
        self._options: dict[str, Any] = {"runtime_env": {"env_vars": dict(worker_env)}} if worker_env else {}
        self.reports = self._check_versions()

    def _check_versions(self) -> dict[str, dict[str, Any]]:
        """Ask one worker on every node with CPUs for its versions; refuse the cluster on a mismatch."""
        from ray.util.scheduling_strategies import NodeAffinitySchedulingStrategy

        nodes = [n for n in ray.nodes() if n.get("Alive") and n.get("Resources", {}).get("CPU", 0) >= 1]
        refs = {
            f"{n['NodeManagerAddress']} ({n.get('NodeManagerHostname', '?')}, id {n['NodeID'][:12]})": worker_report.options(
                scheduling_strategy=NodeAffinitySchedulingStrategy(n["NodeID"], soft=False), **self._options).remote()
            for n in nodes
        }
        reports = {node: self._get(ref, what="the version report") for node, ref in refs.items()}
        refuse_mismatches(software_report(), reports)
        return reports

    def map(self, fn: Callable[[Any], Any], items: Iterable[Any]) -> list[Any]:
        return list(self.imap(fn, items))

    def imap(self, fn: Callable[[Any], Any], items: Iterable[Any]) -> Iterator[Any]:
        """Results in item order, at most ``workers`` tasks in flight; stopping early cancels the rest."""
        path = _worker.function_path(fn)
        todo = iter(enumerate(items))
        pending: dict[int, Any] = {}
        ready: dict[int, Any] = {}
        following = 0
        try:
            self._fill(path, todo, pending)
            while pending:
                done, _ = ray.wait(list(pending.values()), num_returns=1)
                index = next(i for i, ref in pending.items() if ref == done[0])
                ready[index] = pending.pop(index)
                self._fill(path, todo, pending)
                while following in ready:
                    yield self._get(ready.pop(following), what=f"item {following}")
                    following += 1
        finally:
            for ref in pending.values():
                ray.cancel(ref, force=False)

    def _fill(self, path: str, todo: Iterator[tuple[int, Any]], pending: dict[int, Any]) -> None:
        while len(pending) < self.workers:
            nxt = next(todo, None)
            if nxt is None:
                return
            pending[nxt[0]] = run_item.options(**self._options).remote(path, nxt[1])

    def _get(self, ref: Any, *, what: str) -> Any:
        try:
            return ray.get(ref)
        except ray.exceptions.RayTaskError as exc:
            cause = getattr(exc, "cause", None)
            if isinstance(cause, KinetomeError):
                raise cause from None
            raise
        except (ray.exceptions.WorkerCrashedError, ray.exceptions.NodeDiedError, ray.exceptions.ObjectLostError) as exc:
            raise ExecutionError(f"{what} failed on {MAX_RETRIES + 1} tries: its worker process or node kept dying ({type(exc).__name__})") from None

    def close(self) -> None:
        if self._started_here and ray.is_initialized():
            ray.shutdown()
        self._started_here = False

    def __enter__(self) -> "RayExecutor":
        return self

    def __exit__(self, *exc: Any) -> None:
        self.close()
