"""The retrain promotion rule: one-sided non-inferiority on fresh episodes, per task, always shown on the parent's task."""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest

from kinetome.library.lineage.promotion import (
    ALPHA,
    MARGIN,
    compare_on_tasks,
    newcombe_interval,
    non_inferiority,
    promotion_seed,
    wilson_interval,
)

ROOT = Path(__file__).resolve().parents[3]
REACH = ROOT / "configs" / "skills" / "arm-reach-tray.yaml"
HEAVY = ROOT / "configs" / "variants" / "heavy_payload.yaml"
HOME = ROOT / "configs" / "initial_states" / "arm_home.yaml"


@pytest.mark.parametrize("x, n", [(0, 10), (3, 10), (10, 10), (56, 70), (199, 200)])
def test_wilson_interval_matches_scipy(x, n):
    from scipy.stats import binomtest

    ref = binomtest(x, n).proportion_ci(confidence_level=0.95, method="wilson")  # scipy's Wilson score interval
    assert wilson_interval(x, n, confidence=0.95) == pytest.approx((ref.low, ref.high), abs=1e-12)


# Newcombe (1998), Statistics in Medicine 17:873-890, Table II, method 10 (hybrid score,
# no continuity correction), 95% limits for p1 - p2; values from memory, to 4 decimals.
NEWCOMBE_TABLE_II = [
    ((56, 70, 48, 80), (0.0524, 0.3339)),
    ((9, 10, 3, 10), (0.1705, 0.8090)),
    ((6, 7, 2, 7), (0.0582, 0.8062)),
    ((5, 56, 0, 29), (-0.0381, 0.1926)),
    ((0, 10, 0, 20), (-0.1611, 0.2775)),
    ((0, 10, 0, 10), (-0.2775, 0.2775)),
    ((10, 10, 0, 20), (0.6791, 1.0000)),
    ((10, 10, 0, 10), (0.6075, 1.0000)),
]


@pytest.mark.parametrize("counts, expected", NEWCOMBE_TABLE_II)
def test_newcombe_interval_matches_the_published_table(counts, expected):
    low, high = newcombe_interval(*counts, confidence=0.95)
    assert (round(low, 4), round(high, 4)) == expected


def test_non_inferiority_yes_and_no():
    assert MARGIN == 0.05 and ALPHA == 0.05
    same = non_inferiority(parent=(380, 400), child=(380, 400))
    assert same.non_inferior and -MARGIN < same.lower_bound < 0
    better = non_inferiority(parent=(12, 400), child=(390, 400))
    assert better.non_inferior and better.lower_bound > 0.9
    worse = non_inferiority(parent=(400, 400), child=(0, 400))
    assert not worse.non_inferior and worse.lower_bound < -0.9
    # a small drop that the episodes cannot rule out beyond the margin: not shown non-inferior
    slightly = non_inferiority(parent=(200, 400), child=(190, 400))
    assert not slightly.non_inferior and -0.1 < slightly.lower_bound < -MARGIN
    # the same drop, measured on many more episodes, is within the margin
    assert non_inferiority(parent=(20000, 40000), child=(19000, 40000)).non_inferior  # 2.5 points worse, bound about -0.031
    with pytest.raises(ValueError, match=r"episodes must be >= 1"):
        non_inferiority(parent=(0, 0), child=(0, 0))


def test_promotion_episodes_are_fresh():
    # training and its own evaluation use seed s (episode i draws from default_rng([s, i]));
    # the promotion test draws from another seed, never a small integer a user would pick
    for seed in (0, 1, 7, 12345):
        fresh = promotion_seed(seed)
        assert fresh != seed and fresh >= 2**32 and promotion_seed(seed) == fresh


def _loaded_pair(scale_gains: float):
    from kinetome.library.runtime.skill import skill_from_spec
    from kinetome.library.spec_load import load_spec

    parent = skill_from_spec(load_spec(REACH), ref="arm-reach-tray@1")
    values = {k: np.array(v) for k, v in parent.controller.parameter_values().items()}
    values["kp"] = values["kp"] * scale_gains
    values["kd"] = values["kd"] * scale_gains
    return parent, values


def test_a_child_that_regresses_on_nominal_is_not_current_there_and_the_parent_task_is_reported():
    from kinetome.library.tasks import load_start_file, load_variant_file

    parent, broken = _loaded_pair(0.0)  # no gains: the arm sags and never reaches the tray
    evidence = compare_on_tasks(
        parent, broken, trained_variant=load_variant_file(HEAVY), parent_task=None,
        initial_states=load_start_file(HOME), episodes=60, seed=0,
    )
    rows = {row["task"]: row for row in evidence["tasks"]}
    assert set(rows) == {"heavy_payload", "nominal"}
    assert "parent's task" in rows["nominal"]["roles"] and "trained" in rows["heavy_payload"]["roles"]
    assert rows["nominal"]["parent"]["successes"] > 50 and rows["nominal"]["child"]["successes"] == 0
    assert not rows["nominal"]["non_inferior"]
    # on the heavy payload the parent fails from these starts too: 0/60 against 0/60 is not worse,
    # so the rule lets the child be current there, and only there
    assert rows["heavy_payload"]["parent"]["successes"] == rows["heavy_payload"]["child"]["successes"] == 0
    assert evidence["current_for"] == ["heavy_payload"]
    assert evidence["margin"] == MARGIN and evidence["alpha"] == ALPHA and evidence["seed"] == promotion_seed(0)


def test_an_equal_child_becomes_current_for_the_trained_task_and_nominal():
    from kinetome.library.tasks import load_start_file, load_variant_file

    parent, same = _loaded_pair(1.0)
    evidence = compare_on_tasks(
        parent, same, trained_variant=load_variant_file(HEAVY), parent_task=None,
        initial_states=load_start_file(HOME), episodes=60, seed=0,
    )
    rows = {row["task"]: row for row in evidence["tasks"]}
    for row in rows.values():
        assert row["parent"] == row["child"]  # same controller, same fresh starts
    assert evidence["current_for"] == [t for t in ("heavy_payload", "nominal") if rows[t]["non_inferior"]]
    assert rows["nominal"]["non_inferior"]  # 60/60 against 60/60: bound above -0.05


def _versions_on_heavy_and_nominal(child_gains: float, episodes: int = 60):
    """A poor parent (@2: no gains), the version current for nominal (@1: the stored gains) and a child
    with ``child_gains`` times the gains, tested on the heavy payload and nominal."""
    from kinetome.library.runtime.skill import skill_from_spec
    from kinetome.library.tasks import load_start_file, load_variant_file

    good, broken = _loaded_pair(0.0)
    _, child = _loaded_pair(child_gains)
    poor_parent = skill_from_spec(good.skill, ref="arm-reach-tray@2", parameter_values=broken)
    return compare_on_tasks(
        poor_parent, child, trained_variant=load_variant_file(HEAVY), parent_task=None,
        initial_states=load_start_file(HOME), episodes=episodes, seed=0, current={"nominal": good},
    )


def test_a_child_equal_to_its_poor_parent_but_worse_than_the_current_version_is_not_current():
    evidence = _versions_on_heavy_and_nominal(0.0)  # the child is as broken as its parent
    rows = {row["task"]: row for row in evidence["tasks"]}
    nominal = rows["nominal"]
    assert nominal["compared_with"] == "arm-reach-tray@1"  # the version it would displace, not its parent
    assert nominal["parent"]["successes"] == nominal["child"]["successes"] == 0
    assert nominal["compared"]["successes"] > 50
    assert not nominal["non_inferior"] and nominal["lower_bound"] < -0.9
    assert "nominal" not in evidence["current_for"]
    # no version is current for the heavy payload: there the child is tested against its parent, as before
    assert rows["heavy_payload"]["compared_with"] == "arm-reach-tray@2"
    assert rows["heavy_payload"]["compared"] == rows["heavy_payload"]["parent"]


def test_a_child_non_inferior_to_the_current_version_is_current():
    evidence = _versions_on_heavy_and_nominal(1.0)  # the child has the current version's gains back
    nominal = {row["task"]: row for row in evidence["tasks"]}["nominal"]
    assert nominal["compared_with"] == "arm-reach-tray@1"
    assert nominal["parent"]["successes"] == 0 and nominal["child"] == nominal["compared"]
    assert nominal["non_inferior"] and "nominal" in evidence["current_for"]


def test_the_store_records_the_version_compared_with_and_skips_a_task_taken_meanwhile(tmp_path):
    from kinetome.library.api import open_store, register, spec_version_files
    from kinetome.library.lineage.retraining import apply_promotion
    from kinetome.library.lineage.view import lineage_view
    from kinetome.library.spec_load import load_spec

    worse, better = _versions_on_heavy_and_nominal(0.0), _versions_on_heavy_and_nominal(1.0)
    with open_store(tmp_path / "store") as store:
        register(REACH, store=store)
        for n in (2, 3, 4, 5):
            files = {**spec_version_files(load_spec(REACH)), "normaliser.safetensors": f"version {n}".encode()}
            store.add("arm-reach-tray", files, parent="arm-reach-tray@1", reason="retrained")
        assert apply_promotion(store, "arm-reach-tray@3", worse) == ["heavy_payload"]
        assert store.currents("arm-reach-tray")["nominal"].version == "arm-reach-tray@1"
        # @3 took the heavy payload after @4's test ran against its parent there (none was current): not @4's
        assert apply_promotion(store, "arm-reach-tray@4", better) == ["nominal"]
        entry = store.currents("arm-reach-tray")["nominal"]
        assert entry.version == "arm-reach-tray@4" and entry.evidence["compared_with"] == "arm-reach-tray@1"
        why = {row["task"]: row["why"] for row in lineage_view(store, "arm-reach-tray")["current"]}
        assert why["nominal"].startswith("retrain non-inferior to arm-reach-tray@1 on nominal: 60/60")
        # @4 took nominal after @5's test ran against @1: @5 was never tested against @4, so it stays out
        assert apply_promotion(store, "arm-reach-tray@5", better) == []
        assert store.currents("arm-reach-tray")["nominal"].version == "arm-reach-tray@4"


def test_the_fewest_promotion_episodes_that_can_promote():
    from statistics import NormalDist

    from kinetome.library.lineage.promotion import episodes_hint, smallest_promotable_episodes

    # Wilson lower limit of n/n is n / (n + z^2) (Wilson 1927 score interval at p = 1), so a perfect tie
    # has the bound -z^2 / (n + z^2); it exceeds -margin once n > z^2 (1 - margin) / margin
    z = NormalDist().inv_cdf(1 - ALPHA)
    expected = math.floor(z * z * (1 - MARGIN) / MARGIN) + 1
    assert smallest_promotable_episodes() == expected == 52
    assert not non_inferiority(parent=(51, 51), child=(51, 51)).non_inferior
    assert non_inferiority(parent=(52, 52), child=(52, 52)).non_inferior
    hint = episodes_hint(50)
    assert "-0.051" in hint and "--promotion-episodes 52" in hint
    assert episodes_hint(52) is None and episodes_hint(400) is None
