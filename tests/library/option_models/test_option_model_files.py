"""Option models round-trip through their files bit for bit, and bad files are rejected clearly."""

from __future__ import annotations

import json

import numpy as np
import pytest
from safetensors.numpy import load, save

from kinetome.library.errors import InvalidInputError
from kinetome.library.option_models import DurationModel, EndStateModel, OptionModels, RewardModel

from option_model_examples import random_models


@pytest.mark.parametrize("expansion", ["linear", "poly2", "rff"])
@pytest.mark.parametrize("with_end_state, with_timed_out", [(True, True), (True, False), (False, True), (False, False)])
def test_bundle_round_trip_is_bit_for_bit(expansion: str, with_end_state: bool, with_timed_out: bool) -> None:
    models = random_models(3, expansion=expansion, with_end_state=with_end_state, with_timed_out=with_timed_out)
    files = models.to_files()
    again = OptionModels.from_files(files)
    assert again.to_files() == files
    rng = np.random.default_rng(1)
    start = {"x": rng.normal(size=(7, 3))}
    for key, value in models.duration.predict(start).items():
        np.testing.assert_array_equal(again.duration.predict(start)[key], value)
    np.testing.assert_array_equal(again.reward.expected_return(start), models.reward.expected_return(start))
    if with_end_state:
        a = models.end_state.sample(start, np.random.default_rng(5), 4)
        b = again.end_state.sample(start, np.random.default_rng(5), 4)
        for key in a:
            np.testing.assert_array_equal(a[key], b[key])
    else:
        assert again.end_state is None and "end_state.json" not in files
    assert (again.end_state_timed_out is not None) == with_timed_out == ("end_state_timed_out.json" in files)
    assert again.summary() == models.summary()


def test_files_are_json_and_safetensors_never_pickle() -> None:
    files = random_models(0, with_timed_out=True).to_files()
    assert sorted(files) == [
        "duration.json", "duration.safetensors", "end_state.json", "end_state.safetensors",
        "end_state_timed_out.json", "end_state_timed_out.safetensors",
        "models.json", "reward.json", "reward.safetensors",
    ]
    for name, data in files.items():
        if name.endswith(".json"):
            json.loads(data)
        else:
            assert all(v.dtype == np.float64 for v in load(data).values())


@pytest.mark.parametrize("cls", [DurationModel, RewardModel, EndStateModel])
def test_each_model_round_trips_alone(cls) -> None:
    models = random_models(2)
    model = {DurationModel: models.duration, RewardModel: models.reward, EndStateModel: models.end_state}[cls]
    files = model.to_files()
    assert cls.from_files(files).to_files() == files


def _replace_array(data: bytes, name: str, value: np.ndarray) -> bytes:
    arrays = load(data)
    arrays[name] = value
    return save(arrays)


def _edit_json(data: bytes, fn) -> bytes:
    obj = json.loads(data)
    fn(obj)
    return json.dumps(obj).encode()


BAD_FILES = [
    # (description, edit(files), expected text in the error)
    ("missing json", lambda f: f.pop("duration.json"), "duration.json: file is missing"),
    ("missing arrays", lambda f: f.pop("reward.safetensors"), "reward.safetensors: file is missing"),
    ("missing bundle", lambda f: f.pop("models.json"), "models.json: file is missing"),
    ("missing end state", lambda f: f.pop("end_state.safetensors"), "end_state.safetensors: file is missing"),
    ("missing timed-out end state", lambda f: f.pop("end_state_timed_out.json"), "end_state_timed_out.json: file is missing"),
    (
        "unknown end-state outcome",
        lambda f: f.__setitem__("models.json", _edit_json(f["models.json"], lambda o: o.__setitem__("end_states", ["fell"]))),
        "models.json: end_states: must list outcomes among ['stopped', 'timed_out'], got ['fell']",
    ),
    ("bad json", lambda f: f.__setitem__("duration.json", b"{not json"), "duration.json: is not valid JSON"),
    ("bad safetensors", lambda f: f.__setitem__("reward.safetensors", b"\x00\x01junk"), "reward.safetensors: is not a readable safetensors file"),
    ("wrong format", lambda f: f.__setitem__("duration.json", _edit_json(f["duration.json"], lambda o: o.__setitem__("format", "other/9"))), "duration.json: format: must be 'kinetome.option_models/1'"),
    ("wrong kind", lambda f: f.__setitem__("reward.json", _edit_json(f["reward.json"], lambda o: o.__setitem__("kind", "duration"))), "reward.json: kind: must be 'reward'"),
    (
        "weights wrong shape, json and arrays agree",
        lambda f: (
            f.__setitem__("duration.safetensors", _replace_array(f["duration.safetensors"], "head.weights", np.zeros((2, 4)))),
            f.__setitem__("duration.json", _edit_json(f["duration.json"], lambda o: o["arrays"].__setitem__("head.weights", [2, 4]))),
        ),
        "duration.safetensors: does not form a valid duration model: duration head reads 2 features but the feature map makes 3",
    ),
    (
        "array shape differs from json",
        lambda f: f.__setitem__("end_state.safetensors", _replace_array(f["end_state.safetensors"], "residuals", np.zeros((40, 2)))),
        "end_state.safetensors: residuals: must have shape (40, 3) as end_state.json declares, got (40, 2)",
    ),
    (
        "array missing from safetensors",
        lambda f: f.__setitem__("reward.safetensors", save({k: v for k, v in load(f["reward.safetensors"]).items() if k != "head.bias"})),
        "arrays must match reward.json; missing ['head.bias']",
    ),
    (
        "wrong dtype",
        lambda f: f.__setitem__("reward.safetensors", _replace_array(f["reward.safetensors"], "head.bias", np.zeros(2, np.float32))),
        "reward.safetensors: head.bias: must be float64, got float32",
    ),
    (
        "bad meta",
        lambda f: f.__setitem__("models.json", _edit_json(f["models.json"], lambda o: o["meta"].__setitem__("gamma", 1.5))),
        "models.json: meta: is not valid model metadata: models gamma must be in (0, 1], got 1.5",
    ),
    (
        "mixed exports",
        lambda f: f.update(random_models(9, expansion="poly2").duration.to_files()),
        "models do not fit together",
    ),
]


@pytest.mark.parametrize("label, edit, expected", BAD_FILES, ids=[b[0] for b in BAD_FILES])
def test_from_files_rejects_bad_files(label: str, edit, expected: str) -> None:
    files = dict(random_models(4, with_timed_out=True).to_files())
    edit(files)
    with pytest.raises(InvalidInputError) as info:
        OptionModels.from_files(files)
    assert expected in str(info.value)
