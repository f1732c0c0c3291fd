"""Model method: option models that know their task (env, variant digest, version), asked only
inside their fitted support, with intervals widened by their held-out error."""

from __future__ import annotations

import numpy as np
import pytest
from checker_testkit import CONFIGS

from kinetome.library.checker import Verdict, check_chain

HOME = CONFIGS / "initial_states" / "arm_home.yaml"


def _chain(folder, name, *, variant=None, start=HOME, skills="[arm-reach-tray@1, arm-place@1, arm-release@1]"):
    text = f"name: {name}\ntask:\n  env: kinetome/BenchArm-v0\n  initial_states: {start}\n"
    if variant:
        text += f"  variant: {variant}\n"
    path = folder / f"{name}.yaml"
    # 0.8: the models' own limits (outcomes never seen keep a floor of about 3/n, the rule of three,
    # from memory; 50 held-out episodes bound their error to about 0.1) leave no room to certify
    # 0.95 from 200 fitted episodes.
    path.write_text(text + f"skills: {skills}\nrequire: {{handoff: 0.8}}\nepisodes: 80\n")
    return path


@pytest.fixture(scope="module")
def fitted(tmp_path_factory):
    """reach-tray, place and release; models of the first two fitted on the nominal task from
    200 rollouts of the chain (as the demo does) and attached with their task."""
    from kinetome.library.api import attach_models, register
    from kinetome.library.checker import CheckOptions, load_chain, prepare_context
    from kinetome.library.runtime.execute import run_chain
    from kinetome.trainers.fitting import fit_option_models

    folder = tmp_path_factory.mktemp("models")
    from kinetome.library.store import Store

    store = Store(folder / "store")
    for name in ("arm-reach-tray", "arm-place", "arm-release"):
        register(CONFIGS / "skills" / f"{name}.yaml", store=store)
    chain = _chain(folder, "with-models")
    ctx = prepare_context(load_chain(chain, store=store), store=store, options=CheckOptions())
    rollout = run_chain(list(ctx.skills), ctx.rig, starts=ctx.start_states(200, seed=99), seed=99)
    for k, skill in enumerate(ctx.skills[:2]):
        models = fit_option_models(rollout, k, seed=0, envelope=ctx.rig.layout, skill_ref=skill.ref)
        attach_models(store, skill.ref, models, rig=ctx.rig, settings={"episodes": 200}, meta={})
    return store, chain, folder


def test_models_fitted_on_this_task_decide_and_agree_with_simulation(fitted):
    store, chain, _ = fitted
    by_model = check_chain(chain, store=store, method="model", model_samples=500)
    first, second = by_model.handoffs
    assert first.decided_by == "model" and first.verdict is Verdict.COMPOSES
    assert second.decided_by == "model" and second.verdict is Verdict.BREAKS
    assert "option models (arm-reach-tray@1/option-models#1" in first.reason and "held-out error" in first.reason
    ev = second.evidence_of("model")
    assert ev.details["task"]["variant"] == "nominal" and ev.details["outside_support"] <= 0.05
    assert second.counterexamples and all(c.source == "model" and not c.confirmed for c in second.counterexamples)
    by_sim = check_chain(chain, store=store, method="sim")
    assert [h.verdict for h in by_sim.handoffs] == [h.verdict for h in by_model.handoffs]
    # arm-release has no models: the whole chain cannot be predicted, so it stays unsure without simulation.
    assert by_model.chain_verdict is Verdict.UNSURE


def test_model_interval_includes_the_held_out_error(fitted):
    from kinetome.library.checker.stats import lower_bound

    store, chain, _ = fitted
    # reuse=False: an earlier test stored this check; the evidence objects need a fresh run
    h = check_chain(chain, store=store, method="model", model_samples=500, reuse=False).handoffs[0]
    ev = h.evidence_of("model")
    err = ev.details["held_out_error"]
    assert err > 0  # at least the exact half-width of the held-out rate
    est = ev.estimate
    prefix_k, prefix_n = est.low_from
    assert est.low == pytest.approx(max(0.0, lower_bound(prefix_k, prefix_n, 0.95) - err))


def test_models_of_another_task_are_refused_and_the_check_is_not_exit_0(fitted):
    store, _, folder = fitted
    heavy = _chain(folder, "heavy", variant=CONFIGS / "variants" / "heavy_payload.yaml", skills="[arm-reach-tray@1, arm-place@1]")
    by_model = check_chain(heavy, store=store, method="model", model_samples=300)
    assert by_model.exit_code != 0
    assert all(h.evidence_of("model") is None and h.verdict is Verdict.UNSURE for h in by_model.handoffs)
    assert any("fitted on kinetome/BenchArm-v0 / nominal; this chain runs kinetome/BenchArm-v0 / heavy_payload" in n for n in by_model.notes)
    auto = check_chain(heavy, store=store, model_samples=300)  # the simulation decides: the reach times out
    assert auto.exit_code == 1 and auto.handoffs[0].decided_by == "sim"


def test_queries_outside_the_fitted_support_are_left_to_simulation(fitted):
    store, _, folder = fitted
    wide = _chain(folder, "wide", start=CONFIGS / "initial_states" / "arm_home_wide.yaml", skills="[arm-reach-tray@1, arm-place@1]")
    h = check_chain(wide, store=store, method="model", model_samples=300).handoffs[0]
    ev = h.evidence_of("model")
    assert ev.details["outside_support"] > 0.05 and ev.verdict is Verdict.UNSURE
    assert "outside the models' support, simulation decides" in ev.reason


def test_stopped_end_states_satisfy_stops_when(fitted):
    from dataclasses import replace

    from kinetome.library.api import load
    from kinetome.library.checker.model_method import stopped_end_states
    from kinetome.library.option_models import OptionModels
    from kinetome.library.predicates import parse_predicate

    store, _, _ = fitted
    art = store.artifacts("arm-reach-tray@1", kind="option-models")[0]
    models = OptionModels.from_files({r: store.read_artifact(art, r) for r in art.roles})
    skill = load("arm-reach-tray@1", store=store)
    starts = {k: np.repeat(v, 20, axis=0) for k, v in models.held_out.starts.items()}
    raw = {k: v[:, 0] for k, v in models.end_state.sample(starts, np.random.default_rng(3), 1).items()}
    # A stop region as narrow as the median model draw: half of the plain draws fall outside it.
    dist = np.linalg.norm(raw["fingertip"] - raw["target"], axis=1)
    narrow = parse_predicate(f"norm(fingertip - target) < {float(np.median(dist))!r}", dict(skill.stops_when.shapes))
    skill = replace(skill, stops_when=narrow)
    assert not np.all(narrow.evaluate(raw))
    ends, failed = stopped_end_states(models, skill, starts, np.random.default_rng(3))
    # Every returned state stops; starts whose draws never do are flagged (the method counts them unknown).
    assert np.all(narrow.evaluate({k: v[~failed] for k, v in ends.items()})) and 0 < failed.mean() < 1


def test_an_outcome_never_seen_in_training_has_no_zero_probability(fitted):
    from kinetome.library.option_models import OptionModels

    store, _, _ = fitted
    art = store.artifacts("arm-reach-tray@1", kind="option-models")[0]
    models = OptionModels.from_files({r: store.read_artifact(art, r) for r in art.roles})
    assert models.meta.outcomes["timed_out"] == 0 and models.meta.outcomes["env_ended"] == 0
    p = models.duration.predict(models.held_out.starts)
    floor = 1 - 0.05 ** (1 / models.duration.errors["n_train"])  # exact one-sided zero-failure bound
    np.testing.assert_allclose(p["p_timed_out"], floor)
    assert np.all(p["p_stopped"] <= 1 - 2 * floor + 1e-12)


def test_models_record_their_provenance(fitted):
    store, _, _ = fitted
    art = store.artifacts("arm-reach-tray@1", kind="option-models")[0]
    assert art.task["env"] == "kinetome/BenchArm-v0" and art.task["variant"] == "nominal" and art.task["variant_digest"]
    assert art.computed_on == (store.get("arm-reach-tray@1").identity,) or list(art.computed_on) == [store.get("arm-reach-tray@1").identity]
    assert {"mujoco", "gymnasium", "numpy", "torch"} <= set(art.software)


def test_missing_models_leave_the_handoff_to_simulation(fitted, tmp_path):
    store, _, _ = fitted
    chain = _chain(tmp_path, "release-first", skills="[arm-release@1, arm-reach-tray@1]")
    result = check_chain(chain, store=store, method="model")
    assert result.handoffs[0].evidence_of("model") is None
    assert result.handoffs[0].verdict is Verdict.UNSURE
