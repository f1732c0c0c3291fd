"""`kinetome learn-initiation` end to end on the coast rig (MuJoCo), whose success region is known
in closed form (coast_rig.py): labels, convergence, storage, adoption, a static proof against the
adopted version, and "no region found"."""

from __future__ import annotations

import json
import re

import numpy as np
import pytest
from coast_rig import COAST, TRUE_HIGH, TRUE_LOW, true_success, write_coast_spec

from kinetome.library import api
from kinetome.library.cli.main import main
from kinetome.library.errors import NoRegionFoundError
from kinetome.library.initiation.learn import ARTIFACT_KIND, SAMPLES_FILE, read_samples


@pytest.fixture()
def coast_store(tmp_path):
    store = api.open_store(tmp_path / "store")
    api.register(write_coast_spec(tmp_path), store=store)
    return store


def _bounds(text: str) -> tuple[float, float]:
    low, _, high = (t.strip() for t in text.split("<="))
    assert _ == "qpos[0]", text
    return float(low), float(high)


def test_labels_are_the_closed_form_and_the_region_converges(coast_store):
    errors, widths = [], []
    for n in (1000, 4000, 16000):
        r = api.learn_initiation("coast", store=coast_store, widen=["none"], episodes=n, seed=2)
        low, high = _bounds(r["proposed"])
        errors.append(abs(low - TRUE_LOW) + abs(high - TRUE_HIGH))
        widths.append(r["recall"]["interval"][1] - r["recall"]["interval"][0])
        artifact = coast_store.artifacts("coast@1", kind=ARTIFACT_KIND)[0]
        starts, success, split = read_samples(coast_store.read_artifact(artifact, SAMPLES_FILE))
        assert np.array_equal(success, true_success(starts["qpos"][:, 0]))  # MuJoCo agrees with the closed form
        assert sorted(np.unique(split).tolist()) == [0, 1, 2]
    # At precision 0.95 the widest admissible interval may reach past the true one by up to
    # 0.05 * 0.595 / 0.95 = 0.031 in total, so that is the limit the error can shrink to.
    # (The pure kernel's test shows the error itself shrinking over samples of one seed.)
    assert max(errors) <= 0.08 and errors[-1] <= 0.035, errors
    assert widths[-1] < widths[0] / 2, widths
    assert r["recall"]["rate"] >= 0.95 and r["precision"]["interval"][0] >= 0.95


def test_cli_prints_both_sets_and_adopt_stores_a_child_the_checker_proves_against(coast_store, tmp_path, capsys):
    s = ["--store", str(coast_store.location)]
    assert main([*s, "learn-initiation", "coast", "--widen", "none", "--episodes", "2000", "--adopt", "--quiet", "--out", str(tmp_path / "out")]) == 0
    text = capsys.readouterr().out
    assert re.search(r"proposed\s+[-0-9.]+ <= qpos\[0\] <= [0-9.]+\s+\d+/\d+ = ", text), text
    assert re.search(r"current\s+abs\(qvel\[0\]\) < 1\s+\d+/\d+", text) and "adopted   coast@2" in text and "ISO 12100" in text
    child = coast_store.get("coast@2")
    assert child.reason == "initiation-learned" and child.parent == "coast@1"
    assert coast_store.get("coast").ref == "coast@2"  # current for nominal
    learned = str(api.load("coast@2", store=coast_store).skill.starts_when)
    # the hand-written clause over qvel (which the proposal does not constrain) is kept, conjoined
    proposed_text, kept = learned.split(" and ")
    assert kept == "abs(qvel[0]) < 1" and "kept from the current starts_when (quantities the proposal does not constrain): abs(qvel[0]) < 1" in text
    low, high = _bounds(proposed_text)
    assert abs(low - TRUE_LOW) < 0.05 and abs(high - TRUE_HIGH) < 0.05
    assert coast_store.artifacts("coast@2", kind=ARTIFACT_KIND) and (tmp_path / "out" / "initiation.png").stat().st_size > 10_000
    # A skill that stops inside the learned region hands over; the solver proves containment.
    api.register(write_coast_spec(tmp_path, name="coast-in", stops_when="qpos[0] >= 0.7 and qpos[0] <= 0.8 and abs(qvel[0]) <= 0.5"), store=coast_store)
    chain = tmp_path / "chain.yaml"
    chain.write_text(f"name: coast-chain\ntask: {{env: {COAST}}}\nskills: [coast-in, coast@2]\n", encoding="utf-8")
    result = api.check_chain(chain, store=coast_store, method="static")
    handoff = result.handoffs[-1]
    assert handoff.handoff.target == "coast@2"
    assert handoff.evidence_of("static").details["containment"] == "proved"  # liveness is left to simulation
    # and not against a region that misses part of the stop set (both directions)
    api.register(write_coast_spec(tmp_path, name="coast-out", stops_when="qpos[0] >= 0.3 and qpos[0] <= 0.8 and abs(qvel[0]) <= 0.5"), store=coast_store)
    chain.write_text(f"name: coast-chain\ntask: {{env: {COAST}}}\nskills: [coast-out, coast@2]\n", encoding="utf-8")
    refused = api.check_chain(chain, store=coast_store, method="static").handoffs[-1]
    assert refused.evidence_of("static").details["containment"] in ("counterexample", "candidate")


def test_no_region_found_exits_1_and_stores_nothing(coast_store, tmp_path, capsys):
    api.register(write_coast_spec(tmp_path, name="coast-never", stops_when="qpos[0] > 100.0"), store=coast_store)
    before = (coast_store.audit_log(), [v.ref for v in coast_store.history("coast-never")], coast_store.artifacts("coast-never@1"))
    code = main(["--store", str(coast_store.location), "learn-initiation", "coast-never", "--widen", "none", "--episodes", "600", "--adopt", "--quiet"])
    err = capsys.readouterr().err
    assert code == 1 and "no region found for coast-never@1" in err and "nothing stored" in err
    after = (coast_store.audit_log(), [v.ref for v in coast_store.history("coast-never")], coast_store.artifacts("coast-never@1"))
    assert after == before
    with pytest.raises(NoRegionFoundError):
        api.learn_initiation("coast-never", store=coast_store, widen=["none"], episodes=600)


@pytest.mark.parametrize("argv, message", [
    (["--widen", "qpos=-1"], "must be QUANTITY=HALF_WIDTH with a finite number >= 0"),
    (["--widen", "fingertip=0.1"], "--widen fingertip: is not a named quantity of test/Coast-v0; widen one of qpos, qvel"),
    (["--widen", "qpos[3]=0.1"], "qpos has 1 components"),
    (["--episodes", "50"], "--episodes must be >= 100"),
    (["--precision", "1.5"], "--precision must be in (0, 1)"),
    (["--precision", "0"], "--precision must be in (0, 1)"),
    (["--precision", "1"], "--precision must be in (0, 1)"),
    (["--episodes", "0"], "--episodes must be >= 100"),
    (["--max-clauses", "0"], "--max-clauses must be between 1 and 8"),
    (["--threads", "0"], "--threads must be >= 1"),
    (["--threads", "-2"], "--threads must be >= 1"),
])
def test_bad_options_exit_2_with_a_clear_message(coast_store, argv, message, capsys):
    code = main(["--store", str(coast_store.location), "learn-initiation", "coast", *argv, "--quiet"])
    assert code == 2 and message in capsys.readouterr().err


def test_json_output_carries_schema_and_caution(coast_store, capsys):
    assert main(["--store", str(coast_store.location), "learn-initiation", "coast", "--widen", "qpos=0.1", "--episodes", "1500", "--json"]) == 0
    data = json.loads(capsys.readouterr().out)
    assert data["schema"] == "kinetome.learn-initiation/1" and "ISO 12100" in data["caution"]
    assert data["widening"] == ["qpos=0.1"] and data["classifier"]["model"] in ("logistic", "boosted-trees")
    assert data["calibration"]["reliability"] and data["current"]["starts_when"] == "abs(qvel[0]) < 1"


def test_adopted_starts_when_keeps_hand_written_clauses_over_other_quantities():
    from kinetome.library.initiation.learn import adopted_starts_when
    from kinetome.library.predicates import parse_predicate

    shapes = {"qpos": (3,), "torso_height": ()}
    proposed = parse_predicate("1.1 <= qpos[2] <= 1.3", shapes)
    current = parse_predicate("torso_height > 0.3 and abs(qpos[2] - 1.2) < 0.5", shapes)
    text, kept = adopted_starts_when(proposed, current)
    assert kept == ["torso_height > 0.3"]  # the qpos clause is replaced by the proposal, the other kept
    adopted = parse_predicate(text, shapes)
    fallen = {"qpos": np.array([[0.0, 0.0, 1.2]]), "torso_height": np.array([0.1])}
    standing = {"qpos": np.array([[0.0, 0.0, 1.2]]), "torso_height": np.array([0.9])}
    assert not adopted.evaluate(fallen).any() and adopted.evaluate(standing).all()
    assert adopted_starts_when(proposed, None) == (str(proposed), [])


def test_api_threads_keyword_and_its_old_spelling(coast_store):
    """``threads=`` is the MuJoCo thread count in api.learn_initiation / retrain / train; ``workers=`` there is
    its old spelling: it still works with a warning naming the new one (``workers=`` elsewhere means Ray processes)."""
    import inspect

    from kinetome.library.errors import InvalidInputError
    from kinetome.library.renamed_keys import RenamedKeyWarning

    with pytest.raises(InvalidInputError, match="--threads must be >= 1"):
        api.learn_initiation("coast", store=coast_store, widen=["none"], threads=0)
    with pytest.warns(RenamedKeyWarning, match="'workers' is an old spelling; write 'threads'"):
        with pytest.raises(InvalidInputError, match="--threads must be >= 1"):  # the old keyword reaches the same check
            api.learn_initiation("coast", store=coast_store, widen=["none"], workers=0)
    for fn in (api.retrain, api.train):
        params = inspect.signature(fn).parameters
        assert "threads" in params and "workers" not in params, fn.__name__
        with pytest.raises(TypeError, match="pass only 'threads'"):
            fn("x", store=coast_store, variant="v.yaml", threads=1, workers=1) if fn is api.retrain else fn("x", store=coast_store, threads=1, workers=1)
