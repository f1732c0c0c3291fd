"""One local Ray (3 CPUs, no dashboard) per test module of this folder that asks for it (stopped after the module)."""

from __future__ import annotations

import pytest


@pytest.fixture(scope="module")  # torn down after each module, so tests elsewhere may start their own Ray
def local_ray():
    ray = pytest.importorskip("ray", reason="Ray is not installed (pip install -e '.[cluster]')")
    if ray.is_initialized():
        pytest.skip("a Ray started elsewhere in this process is running")
    from kinetome.library.execution import executor_for
    from kinetome.library.execution.ray_executor import RayExecutor

    owner = executor_for(3)  # starts the local Ray with 3 CPUs; executors made later reuse it
    assert isinstance(owner, RayExecutor)
    yield owner
    owner.close()
