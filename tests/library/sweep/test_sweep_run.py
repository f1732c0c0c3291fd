"""Sweeps on the bench arm: cells are independent of each other and of grouping, the region follows the
marks, results are stored on the version and reused, and bad axes are refused before any simulation."""

from __future__ import annotations

import copy
import json
from pathlib import Path

import pytest

from kinetome.library import api
from kinetome.library.cli.main import main
from kinetome.library.errors import InvalidInputError
from kinetome.library.sweep.build import build_spec
from kinetome.library.sweep.cells import cell_seed, evaluate_cell
from kinetome.library.execution import InProcessExecutor
from kinetome.library.sweep.run import SWEEP_KIND, resolve_target

ROOT = Path(__file__).resolve().parents[3]
CONFIGS = ROOT / "configs"
CLEARANCE = CONFIGS / "initial_states" / "arm_clearance.yaml"


@pytest.fixture(scope="module")
def store(tmp_path_factory):
    s = api.open_store(tmp_path_factory.mktemp("sweep") / "store")
    for path in sorted((CONFIGS / "skills").glob("arm-*.yaml")):
        api.register(path, store=s)
    return s


def _sweep(store, **kw):
    args = dict(axes=["payload_mass=0.2,1.0"], episodes=40, require=0.9, initial_states=CLEARANCE)
    args.update(kw)
    return api.sweep("arm-reach-tray", store=store, **args)


def test_light_payload_passes_heavy_fails_and_region_is_stored(store) -> None:
    result = _sweep(store)
    marks = {c["values"]["payload_mass"]: c["mark"] for c in result["cells"]}
    # nominal arm-reach-tray: 40/40 with 0.2 kg (p = 0.9**40 = 0.0148 <= 0.05/2: Holm passes it); 0/40 with 1.0 kg
    assert marks == {0.2: "pass", 1.0: "fail"}
    assert [c["episodes_run"] for c in result["cells"]] == [40, 40]
    assert result["region"]["cells"] == [{"payload_mass": 0.2}]
    assert "Holm-Bonferroni" in result["region"]["method"]
    assert result["schema"] == "kinetome.sweep/1" and result["caution"].startswith("Caution")
    art = store.get_artifact("arm-reach-tray@1", SWEEP_KIND)
    assert art.ref == result["artifact"] and list(art.computed_on) == [store.get("arm-reach-tray@1").identity]


def test_the_same_sweep_is_read_back_and_a_changed_one_is_not(store) -> None:
    first = _sweep(store)
    again = _sweep(store)
    assert again["reused"] and again["artifact"] == first["artifact"]
    assert [c["successes"] for c in again["cells"]] == [c["successes"] for c in first["cells"]]
    other = _sweep(store, episodes=41)
    assert not other["reused"]
    forced = _sweep(store, reuse=False)
    assert not forced["reused"] and [c["successes"] for c in forced["cells"]] == [c["successes"] for c in first["cells"]]


def test_a_cell_gives_the_same_result_alone_and_in_any_order(store) -> None:
    spec = build_spec("arm-reach-tray", axes=["payload_mass=0.2,0.6", "sensor_noise=0,0.02"], episodes=6, initial_states=CLEARANCE)
    from kinetome.library.sweep.axes import cell_disturbances, cell_variant_fields
    from kinetome.library.sweep.cells import cell_item

    target = resolve_target(spec, store)
    items = [cell_item(target, index=i, variant_fields=cell_variant_fields({}, c), disturbances=cell_disturbances(target.disturbances, c),
                       episodes=6, seed=0) for i, c in enumerate(spec.cells())]
    together = InProcessExecutor().map(evaluate_cell, items)
    backwards = InProcessExecutor().map(evaluate_cell, items[::-1])[::-1]
    alone = evaluate_cell(copy.deepcopy(items[3]))  # a worker receives a copy of the plain data
    assert "store" not in items[3] and all(set(e) == {"ref", "files", "built_for"} for e in items[3]["skills"])
    assert together == backwards and alone == together[3]
    assert cell_seed(0, 3) != cell_seed(0, 2) and cell_seed(0, 3) != cell_seed(1, 3)


def test_an_axis_the_robot_lacks_is_refused_before_simulating(store) -> None:
    with pytest.raises(InvalidInputError, match="friction: does not apply to robot bench_arm"):
        api.sweep("arm-reach-tray", store=store, axes=["friction=0.5,1.0"], episodes=2)


def test_a_chain_sweep_counts_whole_chain_success(store) -> None:
    result = api.sweep(CONFIGS / "chains" / "arm-lift-reach-place.yaml", store=store, axes=["payload_mass=0.2,1.0"], episodes=8)
    assert result["target"]["kind"] == "chain" and len(result["target"]["skills"]) == 3
    rates = {c["values"]["payload_mass"]: c["success_rate"] for c in result["cells"]}
    assert rates[0.2] == 1.0 and rates[1.0] < 1.0
    assert result["region"]["require"] == 0.95  # the chain file's require.chain


def test_cli_json_and_bad_input(store, capsys, tmp_path) -> None:
    code = main(["--store", str(store.location), "sweep", "arm-reach-tray", "--axis", "actuator_gain=0.6,1.0", "--episodes", "3",
                 "--initial-states", str(CLEARANCE), "--json", "--out", str(tmp_path / "o")])
    out = json.loads(capsys.readouterr().out)
    assert code == 0 and out["schema"] == "kinetome.sweep/1" and len(out["cells"]) == 2
    assert (tmp_path / "o" / "heatmap.png").is_file() and (tmp_path / "o" / "sweep.txt").is_file()
    code = main(["--store", str(store.location), "sweep", "arm-reach-tray", "--axis", "payload_mass=-1", "--episodes", "3"])
    err = capsys.readouterr().err
    assert code == 2 and "axes.payload_mass[0]: must be > 0 kg" in err
