"""Chain files: valid ones load; every kind of bad input is reported with FILE:LINE, a fix, and exit code 2."""

from __future__ import annotations

import re

import pytest
from checker_testkit import CONFIGS

from kinetome.library.checker import Chain, check_chain, load_chain
from kinetome.library.errors import InvalidInputError


@pytest.fixture(scope="module")
def store(tmp_path_factory):
    from kinetome.library.api import register_skill
    from kinetome.library.store import Store

    s = Store(tmp_path_factory.mktemp("store"))
    register_skill(CONFIGS / "skills" / "arm-reach-tray.yaml", store=s)
    register_skill(CONFIGS / "skills" / "arm-place.yaml", store=s)
    return s


GOOD = """chain: arm-demo
description: reach and place
env: kinetome/BenchArm-v0
start: {start}
steps: [arm-reach-tray@1, arm-place]
require: 0.9
confidence: 0.99
episodes: 50
seed: 3
"""


def _write(tmp_path, text, name="chain.yaml"):
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    return path


def test_good_chain_loads_with_paths_relative_to_the_file(tmp_path, store):
    (tmp_path / "starts").mkdir()
    (tmp_path / "starts" / "home.yaml").write_text((CONFIGS / "initial_states" / "arm_home.yaml").read_text())
    chain = load_chain(_write(tmp_path, GOOD.format(start="starts/home.yaml")), store=store)
    assert chain.name == "arm-demo"
    assert chain.steps == ("arm-reach-tray@1", "arm-place")
    assert chain.start == (tmp_path / "starts" / "home.yaml").resolve()
    assert (chain.require, chain.confidence, chain.episodes, chain.seed) == (0.9, 0.99, 50, 3)
    assert chain.n_handoffs == 1
    assert chain.line("steps[1]") == 5


def test_inline_start_mapping_is_accepted(tmp_path):
    text = GOOD.replace("start: {start}\n", "start:\n  name: inline\n  nominal: {pose: home}\n")
    chain = load_chain(_write(tmp_path, text))
    assert chain.start["name"] == "inline"


BAD = [
    # (label, edit of the good file, expected fragments of one problem line)
    ("unknown field", lambda t: t + "confidnce: 0.9\n", ["chain.yaml:10: confidnce: unknown field", "did you mean 'confidence'?"]),
    ("empty chain", lambda t: t.replace("[arm-reach-tray@1, arm-place]", "[]"), ["chain.yaml:5: steps: must list at least one skill, got an empty chain"]),
    ("unknown skill", lambda t: t.replace("arm-place]", "arm-plaice]"), ["chain.yaml:5: steps[1]: no skill named 'arm-plaice'", "did you mean 'arm-place'"]),
    ("missing version", lambda t: t.replace("arm-reach-tray@1", "arm-reach-tray@7"), ["steps[0]: arm-reach-tray@7 does not exist; arm-reach-tray has versions 1"]),
    ("unknown variant", lambda t: t + "variant: ../variants/heavy_paylod.yaml\n", ["chain.yaml:10: variant: variant file '../variants/heavy_paylod.yaml' not found"]),
    ("unreadable start", lambda t: t.replace("{start}", "nowhere/home.yaml"), ["chain.yaml:4: start: initial-states file 'nowhere/home.yaml' cannot be read: file not found"]),
    ("invalid start", lambda t: t.replace("{start}", "broken_start.yaml"), ["chain.yaml:4: start: start distribution", "is invalid", "noise"]),
    ("require above 1", lambda t: t.replace("require: 0.9", "require: 1.5"), ["chain.yaml:6: require: must be a number strictly between 0 and 1, got 1.5"]),
    ("confidence 0", lambda t: t.replace("confidence: 0.99", "confidence: 0"), ["chain.yaml:7: confidence: must be a number strictly between 0 and 1, got 0"]),
    ("require not a number", lambda t: t.replace("require: 0.9", "require: high"), ["require: must be a number strictly between 0 and 1, got 'high'"]),
    ("unknown env", lambda t: t.replace("kinetome/BenchArm-v0", "kinetome/BenchArm-v9"), ["chain.yaml:3: env: unknown env 'kinetome/BenchArm-v9'", "did you mean 'kinetome/BenchArm-v0'?"]),
    ("missing env", lambda t: t.replace("env: kinetome/BenchArm-v0\n", ""), ["env: is required but missing"]),
    ("bad step syntax", lambda t: t.replace("arm-place]", "Arm Place]"), ["steps[1]: must be a skill name, name@N (N >= 1), name@id:HEX (an identity) or a spec file ending in .yaml, got 'Arm Place'"]),
    ("zero episodes", lambda t: t.replace("episodes: 50", "episodes: 0"), ["episodes: must be a whole number >= 1, got 0"]),
    ("not a mapping", lambda t: "- just\n- a list\n", ["a chain file must be a mapping of field: value, got list"]),
    ("bad yaml", lambda t: t + "steps: [unclosed\n", ["not valid YAML"]),
]


@pytest.mark.parametrize("label, edit, fragments", BAD, ids=[b[0] for b in BAD])
def test_bad_input_is_reported_with_line_and_fix(tmp_path, store, label, edit, fragments):
    (tmp_path / "broken_start.yaml").write_text("name: broken\nnoise:\n  qpos: {distribution: cauchy, scale: 0.1}\n")
    good_start = CONFIGS / "initial_states" / "arm_home.yaml"
    text = edit(GOOD)
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
    text = GOOD.format(start="nowhere.yaml").replace("require: 0.9", "require: 2").replace("arm-place]", "arm-plaice]") + "stpes: []\n"
    with pytest.raises(InvalidInputError) as info:
        load_chain(_write(tmp_path, text), store=store)
    fields = [line.split(": ")[1] for line in info.value.lines()]
    assert fields == ["start", "steps[1]", "require", "stpes"]  # sorted by line


def test_check_chain_raises_the_same_errors(tmp_path, store):
    path = _write(tmp_path, GOOD.format(start=CONFIGS / "initial_states" / "arm_home.yaml").replace("@1", "@4"))
    with pytest.raises(InvalidInputError, match="arm-reach-tray@4 does not exist"):
        check_chain(path, store=store)


def test_stored_steps_need_a_store(tmp_path):
    path = _write(tmp_path, GOOD.format(start=CONFIGS / "initial_states" / "arm_home.yaml"))
    with pytest.raises(InvalidInputError, match="names stored skills but no store was given"):
        check_chain(path, store=None)


@pytest.mark.parametrize(
    "kwargs, message",
    [
        (dict(steps=()), "steps: must list at least one skill, got an empty chain"),
        (dict(require=1.0), "require: must be a number strictly between 0 and 1, got 1.0"),
        (dict(confidence=-0.1), "confidence: must be a number strictly between 0 and 1, got -0.1"),
        (dict(name="Bad Name"), "chain: must be a name of lowercase letters"),
        (dict(episodes=True), "episodes: must be a whole number >= 1, got True"),
    ],
)
def test_chain_value_object_validates(kwargs, message):
    fields = dict(name="ok", env="kinetome/BenchArm-v0", steps=("a",))
    fields.update(kwargs)
    with pytest.raises(InvalidInputError, match=re.escape(message)):
        Chain(**fields)
