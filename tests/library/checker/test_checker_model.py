"""Model method: end states sampled from fitted option models decide handoffs, in agreement with simulation."""

from __future__ import annotations

import pytest
from checker_testkit import CONFIGS

from kinetome.library.checker import Verdict, check_chain


@pytest.fixture(scope="module")
def fitted(tmp_path_factory):
    """A store with reach-tray, place and release; models fitted for the first two (60 episodes each)."""
    from kinetome.envs.starts import start_from_mapping
    from kinetome.library.api import MODEL_KIND, load, register_skill
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
        "chain: with-models\nenv: kinetome/BenchArm-v0\n"
        f"start: {CONFIGS / 'initial_states' / 'arm_home.yaml'}\n"
        "steps: [arm-reach-tray@1, arm-place@1, arm-release@1]\nepisodes: 80\n"
    )
    return store, chain


def test_model_method_decides_and_agrees_with_simulation(fitted):
    store, chain = fitted
    by_model = check_chain(chain, store=store, method="model", model_samples=500)
    first, second = by_model.handoffs
    assert first.decided_by == "model" and first.verdict is Verdict.COMPOSES
    assert second.decided_by == "model" and second.verdict is Verdict.BREAKS
    assert second.estimate.n > 400  # particles thinned only by the duration model's stop probability
    assert second.counterexamples and all(c.source == "model" and not c.confirmed for c in second.counterexamples)
    by_sim = check_chain(chain, store=store, method="sim")
    assert [h.verdict for h in by_sim.handoffs] == [h.verdict for h in by_model.handoffs]


def test_auto_uses_models_before_simulation(fitted):
    store, chain = fitted
    result = check_chain(chain, store=store, model_samples=500)
    assert [h.decided_by for h in result.handoffs] == ["static", "model"]
    assert result.chain_stats is None  # everything was decided without simulating


def test_missing_models_leave_the_handoff_to_simulation(fitted, tmp_path):
    store, _ = fitted
    chain = tmp_path / "release-first.yaml"
    chain.write_text(
        "chain: no-models\nenv: kinetome/BenchArm-v0\n"
        f"start: {CONFIGS / 'initial_states' / 'arm_home.yaml'}\n"
        "steps: [arm-release@1, arm-reach-tray@1]\nepisodes: 20\n"
    )
    result = check_chain(chain, store=store, method="model")
    assert result.handoffs[0].evidence_of("model") is None
    assert result.handoffs[0].verdict is Verdict.UNSURE
