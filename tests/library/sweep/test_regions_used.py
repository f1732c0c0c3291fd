"""The stored valid-for region is shown by `kinetome show` and used by the checker: it warns when a
chain's task lies outside a step's region and stays silent when the task is a passing cell."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from kinetome.library import api
from kinetome.library.cli.main import main
from kinetome.library.sweep.regions import region_contains

CONFIGS = Path(__file__).resolve().parents[3] / "configs"
CLEARANCE = CONFIGS / "initial_states" / "arm_clearance.yaml"


@pytest.fixture(scope="module")
def swept(tmp_path_factory):
    """arm-reach-tray@1 swept over payload 0.2 / 1.0 kg: 0.2 passes (40/40), 1.0 fails (0/40)."""
    tmp = tmp_path_factory.mktemp("regions")
    store = api.open_store(tmp / "store")
    api.register(CONFIGS / "skills" / "arm-reach-tray.yaml", store=store)
    result = api.sweep("arm-reach-tray", store=store, axes=["payload_mass=0.2,1.0"], episodes=40, require=0.9, initial_states=CLEARANCE)
    assert result["region"]["cells"] == [{"payload_mass": 0.2}]
    return store, tmp


def _chain(tmp: Path, payload: float) -> Path:
    variant = tmp / f"payload-{payload}.yaml"
    variant.write_text(f"name: payload_{str(payload).replace('.', '_')}\npayload_mass: {payload}\n")
    chain = tmp / f"reach-{payload}.yaml"
    chain.write_text(
        f"name: reach-only\ntask: {{env: kinetome/BenchArm-v0, variant: {variant}, initial_states: {CLEARANCE}}}\n"
        "skills: [arm-reach-tray@1]\nrequire: {handoff: 0.9, chain: 0.9}\n"
    )
    return chain


def _warnings(result) -> list[str]:
    return [n for n in result.notes if n.startswith("warning: ")]


def test_checker_warns_outside_the_region(swept) -> None:
    store, tmp = swept
    result = api.check_chain(_chain(tmp, 1.0), store=store, method="static")
    (warning,) = _warnings(result)
    assert "arm-reach-tray@1 was swept" in warning and "payload_mass=1" in warning and "not one of the 1 cells" in warning
    assert "warning: arm-reach-tray@1 was swept" in result.format_text()


def test_checker_is_silent_inside_the_region(swept) -> None:
    store, tmp = swept
    result = api.check_chain(_chain(tmp, 0.2), store=store, method="static")
    assert _warnings(result) == []


def test_no_interpolation_between_cells() -> None:
    region = {"base_variant": {"fields": {}}, "disturbances": {"exploration": False, "sensor_noise": 0.0, "action_delay_steps": 0, "gain_spread": 0.0},
              "cells": [{"payload_mass": 0.2}, {"payload_mass": 0.6}]}
    quiet = {"exploration": False, "sensor_noise": 0.0, "action_delay_steps": 0, "gain_spread": 0.0}
    assert region_contains(region, {"payload_mass": 0.6}, quiet)
    assert not region_contains(region, {"payload_mass": 0.4}, quiet)  # between two passing cells: not in the region
    assert not region_contains(region, {"payload_mass": 0.6}, {**quiet, "sensor_noise": 0.01})  # measured without noise


def test_show_prints_the_region(swept, capsys) -> None:
    store, _ = swept
    assert main(["--store", str(store.location), "show", "arm-reach-tray@1"]) == 0
    text = capsys.readouterr().out
    assert "valid-for regions" in text and "valid for 1 of 2 evaluated cells (success >= 0.9" in text and "payload_mass=0.2" in text
    assert "Holm-Bonferroni" in text
    assert main(["--store", str(store.location), "show", "arm-reach-tray@1", "--json"]) == 0
    view = json.loads(capsys.readouterr().out)
    assert view["regions"][0]["region"]["cells"] == [{"payload_mass": 0.2}] and view["regions"][0]["own"]


def test_a_sweep_stored_after_a_check_makes_it_run_again_with_the_warning(tmp_path) -> None:
    store = api.open_store(tmp_path / "store")
    api.register(CONFIGS / "skills" / "arm-reach-tray.yaml", store=store)
    chain = _chain(tmp_path, 1.0)
    before = api.check_chain(chain, store=store, method="static")
    assert [n for n in before.to_dict()["notes"] if n.startswith("warning: ")] == []
    api.sweep("arm-reach-tray", store=store, axes=["payload_mass=0.2,1.0"], episodes=40, require=0.9, initial_states=CLEARANCE)
    after = api.check_chain(chain, store=store, method="static")
    assert not getattr(after, "reused", False)  # the warning is part of the check's key: not the stored result
    assert any(n.startswith("warning: arm-reach-tray@1 was swept") for n in after.to_dict()["notes"])
    assert "warning: arm-reach-tray@1 was swept" in after.format_text()
