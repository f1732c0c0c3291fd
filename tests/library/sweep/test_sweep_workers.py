"""A sweep on 1 and 2 local Ray worker processes gives the same cells, bit for bit."""

from __future__ import annotations

from pathlib import Path

import pytest

ray = pytest.importorskip("ray", reason="Ray is not installed (pip install -e '.[cluster]')")

from kinetome.library import api  # noqa: E402

CONFIGS = Path(__file__).resolve().parents[3] / "configs"


def test_one_and_two_workers_give_identical_cells(tmp_path, monkeypatch) -> None:
    if ray.is_initialized():
        pytest.skip("a Ray started elsewhere in this process is running")
    monkeypatch.setenv("RAY_ADDRESS", "local")  # a private Ray even if another process runs a cluster on this machine
    store = api.open_store(tmp_path / "store")
    api.register(CONFIGS / "skills" / "arm-reach-tray.yaml", store=store)
    args = dict(store=store, axes=["payload_mass=0.2,0.6", "sensor_noise=0,0.05"], episodes=6, reuse=False,
                initial_states=CONFIGS / "initial_states" / "arm_clearance.yaml")
    one = api.sweep("arm-reach-tray", workers=1, **args)
    two = api.sweep("arm-reach-tray", workers=2, **args)
    assert one["cells"] == two["cells"] and one["region"] == two["region"]
    assert not ray.is_initialized()  # the sweep shut down the Ray it started
