"""Model method: end states sampled from fitted option models, tested against the next skill's starts_when."""

from __future__ import annotations

import pytest
from checker_testkit import CONFIGS

from kinetome.library.checker import Verdict, check_chain


@pytest.fixture(scope="module")
def fitted(tmp_path_factory):
    """A store with reach-tray, place and release; models fitted for the first two (60 episodes each)."""
    from kinetome.envs.starts import start_from_mapping
    from kinetome.library.api import MODEL_KIND, load
    from kinetome.library.api import register as register_skill
    from kinetome.library.store import Store
    from kinetome.library.tasks import load_start_file, task_rig
    from kinetome.trainers.fitting import collect_and_fit

    folder = tmp_path_factory.mktemp("models")
    store = Store(folder / "store")
    for name in ("arm-reach-tray", "arm-place", "arm-release"):
        register_skill(CONFIGS / "skills" / f"{name}.yaml", store=store)
    rig = task_rig("kinetome/BenchArm-v0")
    home = load_start_file(CONFIGS / "initial_states" / "arm_home.yaml")
    tray = start_from_mapping({"name": "tray", "nominal": {"pose": "tray"}, "noise": {"qpos": {"distribution": "uniform", "scale": 0.003}}})
    for ref, start in (("arm-reach-tray@1", home), ("arm-place@1", tray)):
        models = collect_and_fit(load(ref, store=store, rig=rig), rig, episodes=60, seed=0, start=start)
        store.attach_model(ref, MODEL_KIND, models.to_files(), meta={})
    chain = folder / "chain.yaml"
    chain.write_text(
        "name: with-models\ntask:\n  env: kinetome/BenchArm-v0\n"
        f"  initial_states: {CONFIGS / 'initial_states' / 'arm_home.yaml'}\n"
        "skills: [arm-reach-tray@1, arm-place@1, arm-release@1]\nepisodes: 80\n"
    )
    return store, chain


def test_models_of_an_unchecked_task_inform_but_do_not_decide(fitted):
    store, chain = fitted
    by_model = check_chain(chain, store=store, method="model", model_samples=500)
    first, second = by_model.handoffs
    assert first.verdict is Verdict.UNSURE and second.verdict is Verdict.UNSURE
    ev = second.evidence_of("model")
    assert ev is not None and ev.estimate.n > 400 and ev.estimate.k < ev.estimate.n / 2
    assert ev.candidates and all(c.source == "model" and not c.confirmed for c in ev.candidates)
    by_sim = check_chain(chain, store=store, method="sim")
    assert [h.verdict for h in by_sim.handoffs] == [Verdict.COMPOSES, Verdict.BREAKS]


def test_auto_simulates_when_models_cannot_decide(fitted):
    store, chain = fitted
    result = check_chain(chain, store=store, model_samples=500)
    assert [h.decided_by for h in result.handoffs] == ["sim", "sim"]
    assert result.whole_chain is not None


def test_missing_models_leave_the_handoff_to_simulation(fitted, tmp_path):
    store, _ = fitted
    chain = tmp_path / "release-first.yaml"
    chain.write_text(
        "name: no-models\ntask:\n  env: kinetome/BenchArm-v0\n"
        f"  initial_states: {CONFIGS / 'initial_states' / 'arm_home.yaml'}\n"
        "skills: [arm-release@1, arm-reach-tray@1]\nepisodes: 20\n"
    )
    result = check_chain(chain, store=store, method="model")
    assert result.handoffs[0].evidence_of("model") is None
    assert result.handoffs[0].verdict is Verdict.UNSURE
