"""Running moments (Chan, Golub & LeVeque 1979 parallel update) and the normalisers' storage."""

import numpy as np
import pytest

from kinetome.trainers.normaliser import (
    ObservationNormaliser,
    ReturnNormaliser,
    RunningMoments,
    load_normalisers,
    save_normalisers,
)


def test_batched_updates_equal_numpy_moments():
    rng = np.random.default_rng(0)
    data = rng.normal(3.0, 2.0, size=(1000, 4))
    m = RunningMoments((4,))
    for chunk in np.array_split(data, [1, 7, 100, 101, 640]):
        m.update(chunk)
    # reference: numpy's two-pass mean and population variance
    np.testing.assert_allclose(m.mean, data.mean(axis=0), rtol=1e-12)
    np.testing.assert_allclose(m.var, data.var(axis=0), rtol=1e-10)
    assert m.count == 1000


def test_observation_normaliser_standardises_and_clips():
    rng = np.random.default_rng(1)
    x = rng.normal([1.0, -5.0], [0.1, 10.0], size=(5000, 2))
    norm = ObservationNormaliser(2, clip=3.0)
    norm.update(x)
    z = norm(x)
    assert np.all(np.abs(z) <= 3.0)
    np.testing.assert_allclose(z.mean(axis=0), 0.0, atol=0.02)
    assert norm(np.array([[1e9, 0.0]]))[0, 0] == 3.0


def test_return_normaliser_tracks_discounted_return():
    ret = ReturnNormaliser(1, gamma=0.5)
    for r in [1.0, 1.0, 1.0]:
        ret.update(np.array([r]), np.array([False]))
    # running returns 1, 1.5, 1.75 -> population variance of those three
    assert ret.moments.var == pytest.approx(np.var([1.0, 1.5, 1.75]))
    ret.update(np.array([1.0]), np.array([True]))
    assert ret.running[0] == 0.0
    assert ret(np.array([2.0]))[0] == pytest.approx(2.0 / np.sqrt(np.var([1, 1.5, 1.75, 1.875]) + 1e-8))


def test_round_trip_through_safetensors(tmp_path):
    rng = np.random.default_rng(2)
    obs, ret = ObservationNormaliser(3, clip=5.0), ReturnNormaliser(4, gamma=0.99)
    obs.update(rng.normal(size=(50, 3)))
    ret.update(rng.normal(size=4), np.array([0, 1, 0, 0], bool))
    data = save_normalisers(tmp_path / "norm.safetensors", obs, ret)
    assert (tmp_path / "norm.safetensors").read_bytes() == data
    obs2, ret2 = ObservationNormaliser(3), ReturnNormaliser(4, gamma=0.5)
    load_normalisers(tmp_path / "norm.safetensors", obs2, ret2)
    x = rng.normal(size=(2, 3))
    np.testing.assert_array_equal(obs2(x), obs(x))
    assert ret2.scale == ret.scale and ret2.gamma == 0.99
    np.testing.assert_array_equal(ret2.running, ret.running)


def test_loading_a_wrong_shape_is_an_error():
    obs = ObservationNormaliser(3)
    data = save_normalisers(None, ObservationNormaliser(2))
    with pytest.raises(ValueError, match=r"must have shape \(3,\)"):
        load_normalisers(data, obs)
