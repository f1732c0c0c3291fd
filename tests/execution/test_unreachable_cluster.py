"""An address where no Ray head listens is refused at once with a clear error, not after minutes of retries."""

from __future__ import annotations

import socket
import time

import pytest

pytest.importorskip("ray")


def _closed_port() -> int:
    with socket.socket() as s:  # bind, read the port, close: nothing listens there afterwards
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def test_an_address_with_nothing_listening_is_refused_quickly():
    from kinetome.library.errors import ExecutionError
    from kinetome.library.execution.ray_executor import _check_reachable

    address = f"127.0.0.1:{_closed_port()}"
    t0 = time.monotonic()
    with pytest.raises(ExecutionError, match=f"cannot reach the Ray cluster at {address}: nothing answers there"):
        _check_reachable(address)
    assert time.monotonic() - t0 < 10


def test_a_listening_address_passes_the_probe():
    from kinetome.library.execution.ray_executor import _check_reachable

    with socket.socket() as server:
        server.bind(("127.0.0.1", 0))
        server.listen()
        _check_reachable(f"127.0.0.1:{server.getsockname()[1]}")
