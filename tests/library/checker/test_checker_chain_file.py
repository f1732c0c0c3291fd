"""Chain files: valid ones load; every kind of bad input is reported with FILE:LINE, a fix, and exit code 2."""

from __future__ import annotations

import re

import pytest
from checker_testkit import CONFIGS

from kinetome.library.checker import Chain, check_chain, load_chain
from kinetome.library.errors import InvalidInputError


@pytest.fixture(scope="module")
def store(tmp_path_factory):
    from kinetome.library.api import register as register_skill
    from kinetome.library.store import Store

    s = Store(tmp_path_factory.mktemp("store"))
    register_skill(CONFIGS / "skills" / "arm-reach-tray.yaml", store=s)
    register_skill(CONFIGS / "skills" / "arm-place.yaml", store=s)
    return s


GOOD = """name: arm-demo
description: reach and place
task:
  env: kinetome/BenchArm-v0
  initial_states: {start}
skills: [arm-reach-tray@1, {{skill: arm-place, may_time_out: true}}]
require: {{handoff: 0.9, chain: 0.8}}
confidence: 0.99
episodes: 50
seed: 3
disturbances: {{exploration: true, sensor_noise: 0.01, action_delay_steps: 2, gain_spread: 0.1}}
"""
OLD = """chain: arm-demo
env: kinetome/BenchArm-v0
start: {start}
steps: [arm-reach-tray@1, arm-place]
require: 0.9
"""


def _write(tmp_path, text, name="chain.yaml"):
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    return path


def test_good_chain_loads_with_paths_relative_to_the_file(tmp_path, store):
    from kinetome.library.runtime.disturbances import Disturbances

    (tmp_path / "initial_states").mkdir()
    (tmp_path / "initial_states" / "home.yaml").write_text((CONFIGS / "initial_states" / "arm_home.yaml").read_text())
    chain = load_chain(_write(tmp_path, GOOD.format(start="initial_states/home.yaml")), store=store)
    assert chain.name == "arm-demo"
    assert chain.skills == ("arm-reach-tray@1", "arm-place")
    assert chain.may_time_out == (False, True)
    assert chain.initial_states == (tmp_path / "initial_states" / "home.yaml").resolve()
    assert (chain.require_handoff, chain.chain_requirement, chain.confidence, chain.episodes, chain.seed) == (0.9, 0.8, 0.99, 50, 3)
    assert chain.disturbances == Disturbances(exploration=True, sensor_noise=0.01, action_delay_steps=2, gain_spread=0.1)
    assert chain.n_handoffs == 1
    assert chain.line("skills[1]") == 6
    assert chain.line("task.initial_states") == 5


def test_chain_requirement_defaults_to_the_handoff_requirement(tmp_path):
    text = GOOD.format(start=CONFIGS / "initial_states" / "arm_home.yaml").replace("require: {handoff: 0.9, chain: 0.8}", "require: {handoff: 0.9}")
    text = text.replace("arm-reach-tray@1", str(CONFIGS / "skills" / "arm-reach-tray.yaml")).replace("skill: arm-place", f"skill: {CONFIGS / 'skills' / 'arm-place.yaml'}")
    chain = load_chain(_write(tmp_path, text))
    assert chain.require_chain is None and chain.chain_requirement == 0.9


def test_inline_initial_states_are_accepted(tmp_path):
    text = GOOD.replace("  initial_states: {start}\n", "  initial_states:\n    name: inline\n    nominal: {{pose: home}}\n")
    chain = load_chain(_write(tmp_path, text.format()))
    assert chain.initial_states["name"] == "inline"


def test_wave1_chain_file_loads_with_one_warning_per_old_key(tmp_path, store):
    from kinetome.library.renamed_keys import RenamedKeyWarning

    path = _write(tmp_path, OLD.format(start=CONFIGS / "initial_states" / "arm_home.yaml"))
    with pytest.warns(RenamedKeyWarning) as caught:
        chain = load_chain(path, store=store)
    messages = [str(w.message) for w in caught]
    assert len(messages) == 5, messages
    for old, new in [("chain", "name"), ("env", "task.env"), ("start", "task.initial_states"), ("steps", "skills")]:
        assert any(f"'{old}' is an old spelling; write '{new}' instead" in m for m in messages), messages
    assert any("'require' is written in an old form" in m and "require: {handoff: P}" in m for m in messages)
    assert all(m.startswith(str(path)) for m in messages)
    assert chain.skills == ("arm-reach-tray@1", "arm-place") and chain.require_handoff == 0.9 and chain.env == "kinetome/BenchArm-v0"


def test_wave1_fixture_chain_still_loads():
    from kinetome.library.renamed_keys import RenamedKeyWarning

    fixture = CONFIGS.parent / "tests" / "fixtures" / "wave1" / "chain_old.yaml"
    with pytest.warns(RenamedKeyWarning):
        chain = load_chain(fixture)
    assert chain.name == "fixture-lift-reach" and chain.skills == ("arm-lift", "arm-reach-tray@1") and chain.require_handoff == 0.9


def test_old_and_new_spelling_together_is_an_error(tmp_path):
    text = GOOD.format(start=CONFIGS / "initial_states" / "arm_home.yaml") + "steps: [arm-place]\n"
    with pytest.raises(InvalidInputError, match="steps: old spelling of 'skills', which is given too"):
        load_chain(_write(tmp_path, text))


BAD = [
    # (label, edit of the good file, expected fragments of one problem line)
    ("unknown field", lambda t: t + "confidnce: 0.9\n", ["chain.yaml:12: confidnce: unknown field", "did you mean 'confidence'?"]),
    ("unknown task field", lambda t: t.replace("  env:", "  envv: x\n  env:"), ["chain.yaml:4: task.envv: unknown field", "did you mean 'env'?"]),
    ("empty chain", lambda t: t.replace("[arm-reach-tray@1, {skill: arm-place, may_time_out: true}]", "[]"), ["chain.yaml:6: skills: must list at least one skill, got an empty chain"]),
    ("unknown skill", lambda t: t.replace("skill: arm-place", "skill: arm-plaice"), ["chain.yaml:6: skills[1]: no skill named 'arm-plaice'", "did you mean 'arm-place'"]),
    ("missing version", lambda t: t.replace("arm-reach-tray@1", "arm-reach-tray@7"), ["skills[0]: arm-reach-tray@7 does not exist; arm-reach-tray has versions 1"]),
    ("bad may_time_out", lambda t: t.replace("may_time_out: true", "may_time_out: sometimes"), ["skills[1].may_time_out: must be true or false, got 'sometimes'"]),
    ("item without skill", lambda t: t.replace("{skill: arm-place, may_time_out: true}", "{may_time_out: true}"), ["skills[1]: a mapping item needs 'skill'"]),
    ("unknown variant", lambda t: t.replace("  env: kinetome/BenchArm-v0\n", "  env: kinetome/BenchArm-v0\n  variant: ../variants/heavy_paylod.yaml\n"), ["chain.yaml:5: task.variant: variant file '../variants/heavy_paylod.yaml' cannot be read: file not found"]),
    ("unreadable initial states", lambda t: t.replace("{start}", "nowhere/home.yaml"), ["chain.yaml:5: task.initial_states: initial states 'nowhere/home.yaml' cannot be read: file not found"]),
    ("invalid initial states", lambda t: t.replace("{start}", "broken_start.yaml"), ["chain.yaml:5: task.initial_states: initial states", "is invalid", "noise"]),
    ("require above 1", lambda t: t.replace("handoff: 0.9", "handoff: 1.5"), ["chain.yaml:7: require.handoff: must be a number strictly between 0 and 1, got 1.5"]),
    ("chain requirement 0", lambda t: t.replace("chain: 0.8", "chain: 0"), ["chain.yaml:7: require.chain: must be a number strictly between 0 and 1, got 0"]),
    ("require not a mapping", lambda t: t.replace("require: {handoff: 0.9, chain: 0.8}", "require: [0.9]"), ["chain.yaml:7: require: must be a mapping of handoff, chain, got [0.9]"]),
    ("unknown require key", lambda t: t.replace("chain: 0.8", "chian: 0.8"), ["require.chian: unknown field", "did you mean 'chain'?"]),
    ("confidence 0", lambda t: t.replace("confidence: 0.99", "confidence: 0"), ["chain.yaml:8: confidence: must be a number strictly between 0 and 1, got 0"]),
    ("require not a number", lambda t: t.replace("handoff: 0.9", "handoff: high"), ["require.handoff: must be a number strictly between 0 and 1, got 'high'"]),
    ("unknown env", lambda t: t.replace("kinetome/BenchArm-v0", "kinetome/BenchArm-v9"), ["chain.yaml:4: task.env: unknown env 'kinetome/BenchArm-v9'", "did you mean 'kinetome/BenchArm-v0'?"]),
    ("missing env", lambda t: t.replace("  env: kinetome/BenchArm-v0\n", ""), ["task: env is required but missing"]),
    ("missing task", lambda t: "name: x\nskills: [arm-place]\n", ["task: is required but missing"]),
    ("bad skill syntax", lambda t: t.replace("skill: arm-place", "skill: Arm Place"), ["skills[1]: must be a skill name, name@N (N >= 1), name@id:HEX (an identity) or a spec file ending in .yaml, got 'Arm Place'"]),
    ("zero episodes", lambda t: t.replace("episodes: 50", "episodes: 0"), ["episodes: must be a whole number >= 1, got 0"]),
    ("negative sensor noise", lambda t: t.replace("sensor_noise: 0.01", "sensor_noise: -1"), ["chain.yaml:11: disturbances.sensor_noise: must be a number >= 0 (a standard deviation), got -1"]),
    ("fractional delay", lambda t: t.replace("action_delay_steps: 2", "action_delay_steps: 1.5"), ["disturbances.action_delay_steps: must be a whole number >= 0, got 1.5"]),
    ("gain spread 1", lambda t: t.replace("gain_spread: 0.1", "gain_spread: 1.0"), ["disturbances.gain_spread: must be a number in [0, 1), got 1.0"]),
    ("exploration not bool", lambda t: t.replace("exploration: true", "exploration: 0.2"), ["disturbances.exploration: must be true or false, got 0.2"]),
    ("unknown disturbance", lambda t: t.replace("gain_spread: 0.1", "gain_spred: 0.1"), ["disturbances.gain_spred: unknown field", "did you mean 'gain_spread'?"]),
    ("not a mapping", lambda t: "- just\n- a list\n", ["a chain file must be a mapping of field: value, got list"]),
    ("bad yaml", lambda t: t + "skills: [unclosed\n", ["not valid YAML"]),
]


@pytest.mark.parametrize("label, edit, fragments", BAD, ids=[b[0] for b in BAD])
def test_bad_input_is_reported_with_line_and_fix(tmp_path, store, label, edit, fragments):
    (tmp_path / "broken_start.yaml").write_text("name: broken\nnoise:\n  qpos: {distribution: cauchy, scale: 0.1}\n")
    good_start = CONFIGS / "initial_states" / "arm_home.yaml"
    text = edit(GOOD.replace("{{", "{").replace("}}", "}"))
    text = text.replace("{start}", str(good_start))
    path = _write(tmp_path, text)
    with pytest.raises(InvalidInputError) as info:
        load_chain(path, store=store)
    assert info.value.exit_code == 2
    lines = info.value.lines()
    joined = "\n".join(lines)
    for fragment in fragments:
        assert fragment in joined, joined
    for line in lines:
        assert re.match(r"^\S+chain\.yaml(:\d+)?: ", line), line


def test_every_problem_is_reported_at_once(tmp_path, store):
    text = GOOD.format(start="nowhere.yaml").replace("handoff: 0.9", "handoff: 2").replace("skill: arm-place", "skill: arm-plaice") + "sklls: []\n"
    with pytest.raises(InvalidInputError) as info:
        load_chain(_write(tmp_path, text), store=store)
    fields = [line.split(": ")[1] for line in info.value.lines()]
    assert fields == ["task.initial_states", "skills[1]", "require.handoff", "sklls"]  # sorted by line


def test_check_chain_raises_the_same_errors(tmp_path, store):
    path = _write(tmp_path, GOOD.format(start=CONFIGS / "initial_states" / "arm_home.yaml").replace("@1", "@4"))
    with pytest.raises(InvalidInputError, match="arm-reach-tray@4 does not exist"):
        check_chain(path, store=store)


def test_stored_skills_need_a_store(tmp_path):
    path = _write(tmp_path, GOOD.format(start=CONFIGS / "initial_states" / "arm_home.yaml"))
    with pytest.raises(InvalidInputError, match="names stored skills but no store was given"):
        check_chain(path, store=None)


@pytest.mark.parametrize(
    "kwargs, message",
    [
        (dict(skills=()), "skills: must list at least one skill, got an empty chain"),
        (dict(require_handoff=1.0), "require.handoff: must be a number strictly between 0 and 1, got 1.0"),
        (dict(require_chain=0.0), "require.chain: must be a number strictly between 0 and 1, got 0.0"),
        (dict(confidence=-0.1), "confidence: must be a number strictly between 0 and 1, got -0.1"),
        (dict(name="Bad Name"), "name: must be a name of lowercase letters"),
        (dict(episodes=True), "episodes: must be a whole number >= 1, got True"),
        (dict(may_time_out=(True, False)), "skills: needs one may_time_out flag per skill, got 2 for 1"),
    ],
)
def test_chain_value_object_validates(kwargs, message):
    fields = dict(name="ok", env="kinetome/BenchArm-v0", skills=("a",))
    fields.update(kwargs)
    with pytest.raises(InvalidInputError, match=re.escape(message)):
        Chain(**fields)


def test_chain_file_round_trips_through_to_dict(tmp_path):
    text = GOOD.format(start=CONFIGS / "initial_states" / "arm_home.yaml")
    text = text.replace("arm-reach-tray@1", str(CONFIGS / "skills" / "arm-reach-tray.yaml")).replace("skill: arm-place", f"skill: {CONFIGS / 'skills' / 'arm-place.yaml'}")
    chain = load_chain(_write(tmp_path, text))
    import yaml

    again = load_chain(_write(tmp_path, yaml.safe_dump({k: v for k, v in chain.to_dict().items() if k != "source"}), "again.yaml"))
    assert again == chain
