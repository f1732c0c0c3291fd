"""read_state (precomputed per-rig index plan) against an obvious re-implementation, on every rig.

The reference below is the plain definition of named state: for each source,
fancy-index its field at the listed flat indices and reshape to the layout's
shape; then each derived quantity in order. Random raw arrays (not physically
consistent: read_state is pure indexing, so any numbers do) must give
bit-identical values, keys, shapes and dtypes at several batch sizes.
"""

from __future__ import annotations

import functools

import mujoco
import numpy as np
import pytest

from kinetome.envs import make_rig, rig_ids
from kinetome.envs.named_state import Quantity, StateLayout
from kinetome.envs.rig import Rig, Source, read_state
from kinetome.envs.rig_env import RigEnv

FIELDS = ("qpos", "qvel", "sensordata", "ctrl")


@functools.lru_cache(maxsize=None)
def _rig(env_id: str) -> Rig:
    return make_rig(env_id)


def _reference(rig: Rig, raw: dict[str, np.ndarray]) -> dict[str, np.ndarray]:
    """Obvious loop: index each source row by row, reshape, then derived quantities in order."""
    batch = raw["qpos"].shape[0]
    values: dict[str, np.ndarray] = {}
    for name, src in rig.sources.items():
        shape = rig.layout[name].shape
        rows = [np.array([raw[src.field][b, i] for i in src.index]).reshape(shape) for b in range(batch)]
        values[name] = np.array(rows).reshape((batch, *shape))
    for name, fn in rig.derived.items():
        values[name] = np.asarray(fn(values), dtype=np.float64).reshape((batch, *rig.layout[name].shape))
    return values


def _raw(rig: Rig, batch: int, seed: int) -> dict[str, np.ndarray]:
    m = rig.model
    rng = np.random.default_rng(seed)
    sizes = {"qpos": m.nq, "qvel": m.nv, "sensordata": m.nsensordata, "ctrl": m.nu}
    return {f: rng.normal(size=(batch, n)) for f, n in sizes.items()}


def _assert_same(got: dict[str, np.ndarray], want: dict[str, np.ndarray]) -> None:
    assert list(got) == list(want)
    for name in want:
        assert got[name].shape == want[name].shape, name
        assert got[name].dtype == want[name].dtype, name
        np.testing.assert_array_equal(got[name], want[name], err_msg=name)


@pytest.mark.parametrize("env_id", rig_ids())
@pytest.mark.parametrize("batch", [1, 3, 64])
def test_read_state_matches_reference_on_random_arrays(env_id, batch):
    rig = _rig(env_id)
    raw = _raw(rig, batch, seed=batch)
    got = read_state(rig, **raw)
    _assert_same(got, _reference(rig, raw))
    assert list(got) == [*rig.sources, *rig.derived]
    for name, value in got.items():
        assert value.shape == (batch, *rig.layout[name].shape), name
        if name in rig.sources:  # derived values are laid out by the rig's own functions
            assert value.flags.c_contiguous, name
        for field in FIELDS:
            # fresh arrays: callers may keep them while the simulation moves on
            assert not np.shares_memory(value, raw[field]), (name, field)


@pytest.mark.parametrize("env_id", rig_ids())
def test_read_state_is_repeatable_and_ignores_later_writes(env_id):
    """The second call on the same rig (cached plan) equals the first; values do not alias the inputs."""
    rig = _rig(env_id)
    raw = _raw(rig, 2, seed=11)
    first = read_state(rig, **raw)
    frozen = {k: v.copy() for k, v in first.items()}
    for a in raw.values():
        a += 1.0
    _assert_same(first, frozen)
    _assert_same(read_state(rig, **raw), _reference(rig, raw))


@pytest.mark.parametrize("env_id", ["kinetome/BenchArm-v0", "Hopper-v5", "kinetome/TestWalker-v0"])
def test_one_dimensional_inputs_are_a_batch_of_one_and_ctrl_defaults_to_zero(env_id):
    rig = _rig(env_id)
    raw = _raw(rig, 1, seed=3)
    flat = read_state(rig, qpos=raw["qpos"][0], qvel=raw["qvel"][0], sensordata=raw["sensordata"][0])
    want = _reference(rig, {**raw, "ctrl": np.zeros((1, rig.model.nu))})
    _assert_same(flat, want)


@pytest.mark.parametrize("env_id", rig_ids())
def test_rig_env_named_state_after_steps_matches_reference(env_id):
    """RigEnv reuses the post-step state as the next step's before-state; it must equal a fresh read."""
    rig = _rig(env_id)
    env = RigEnv(rig)
    env.reset(seed=0)
    rng = np.random.default_rng(0)
    for _ in range(3):
        action = rng.uniform(rig.action_low, rig.action_high)
        _, _, terminated, _, info = env.step(action)
        d = env.data
        raw = {"qpos": d.qpos[None].copy(), "qvel": d.qvel[None].copy(),
               "sensordata": d.sensordata[None].copy(), "ctrl": d.ctrl[None].copy()}
        _assert_same(info["named_state"], _reference(rig, raw))
        _assert_same(env.named_state(), info["named_state"])
        if terminated:
            break


def test_rig_env_reward_uses_state_before_the_step_after_set_state():
    """After set_state the cached state is dropped: the reward's before-state is the new one.

    Hopper's forward reward is (x_after - x_before) / dt (gymnasium Hopper-v5 docs), so a
    stale before-state would show up in it.
    """
    rig = _rig("Hopper-v5")
    env, fresh = RigEnv(rig), RigEnv(rig)
    env.reset(seed=0)
    env.step(np.zeros(rig.n_act))
    qpos = rig.model.qpos0.copy()
    qpos[0] = 0.7
    qvel = np.zeros(rig.model.nv)
    env.set_state(qpos, qvel)
    fresh.set_state(qpos, qvel)
    action = np.full(rig.n_act, 0.2)
    a, b = env.step(action), fresh.step(action)
    assert a[1] == b[1]
    assert a[4]["reward_terms"] == b[4]["reward_terms"]
    np.testing.assert_array_equal(a[0], b[0])


def _tiny_rig(sources: dict[str, Source], layout: tuple[Quantity, ...]) -> Rig:
    model = mujoco.MjModel.from_xml_string(
        "<mujoco><worldbody><body><joint name='h' type='hinge'/><geom size='0.1'/></body></worldbody>"
        "<actuator><motor joint='h'/></actuator></mujoco>"
    )
    zero = lambda *a: (np.zeros(1), {})  # noqa: E731
    return Rig(env_id="tiny", model=model, frame_skip=1, layout=StateLayout(layout), sources=sources,
               reward=zero, terminated=lambda s: np.zeros(1, bool), observe=lambda s: s["qpos"],
               start=lambda m, r, n: (np.zeros((n, 1)), np.zeros((n, 1))))


def test_tiny_rig_scalar_and_matrix_shapes():
    """Scalars come out as (B,), matrices as (B, r, c) in row-major order of the listed indices."""
    rig = _tiny_rig(
        {"angle": Source("qpos", (0,)), "grid": Source("qvel", (0, 0, 0, 0)), "torque": Source("ctrl", (0,))},
        (Quantity("angle", (), "rad", "a"), Quantity("grid", (2, 2), "rad/s", "g"), Quantity("torque", (1,), "N m", "t")),
    )
    raw = {"qpos": np.array([[0.5], [1.5]]), "qvel": np.array([[2.0], [3.0]]), "sensordata": np.zeros((2, 0))}
    got = read_state(rig, **raw)
    _assert_same(got, _reference(rig, {**raw, "ctrl": np.zeros((2, 1))}))
    assert got["angle"].shape == (2,) and got["grid"].shape == (2, 2, 2)
    np.testing.assert_array_equal(got["torque"], np.zeros((2, 1)))


@pytest.mark.parametrize(
    "raw, message",
    [
        ({"qpos": np.zeros((2, 1)), "qvel": np.zeros((3, 1)), "sensordata": np.zeros((2, 0))},
         "read_state: qvel must have the batch size of qpos (2), got shape (3, 1); pass one row per simulation"),
        ({"qpos": np.zeros((2, 1)), "qvel": np.zeros((2, 1)), "sensordata": np.zeros((2, 0)), "ctrl": np.zeros((1, 1))},
         "read_state: ctrl must have the batch size of qpos (2), got shape (1, 1)"),
    ],
)
def test_batch_size_mismatch_is_an_error(raw, message):
    rig = _tiny_rig({"qpos": Source("qpos", (0,)), "qvel": Source("qvel", (0,)), "torque": Source("ctrl", (0,))},
                    (Quantity("qpos", (1,), "rad", "q"), Quantity("qvel", (1,), "rad/s", "v"),
                     Quantity("torque", (1,), "N m", "t")))
    with pytest.raises(ValueError) as err:
        read_state(rig, **raw)
    assert message in str(err.value)


def test_source_with_wrong_index_count_is_an_error():
    rig = _tiny_rig({"qpos": Source("qpos", (0, 0))}, (Quantity("qpos", (1,), "rad", "q"),))
    with pytest.raises(ValueError, match=r"rig tiny: source of 'qpos' must list 1 indices for shape \(1,\), got 2; fix the rig's sources"):
        read_state(rig, qpos=np.zeros((1, 1)), qvel=np.zeros((1, 1)), sensordata=np.zeros((1, 0)))


@pytest.mark.parametrize("env_id", ["kinetome/BenchArm-v0", "Hopper-v5"])
def test_batched_reads_match_rig_env_rows(env_id):
    """SimBatch's whole-batch calls (ids=None: bound arrays straight into read_state) equal
    explicit ids and, row by row, RigEnv: the same read_state on the same MuJoCo numbers."""
    from kinetome.library.runtime.sim import SimBatch

    rig = _rig(env_id)
    n = 3
    rng = np.random.default_rng(5)
    qpos, qvel = rig.start(rig.model, rng, n)
    actions = rng.uniform(rig.action_low, rig.action_high, size=(4, n, rig.n_act))
    whole, by_ids = SimBatch(rig, n), SimBatch(rig, n)
    whole.reset(qpos, qvel)
    by_ids.reset(qpos, qvel, np.arange(n))
    envs = [RigEnv(rig) for _ in range(n)]
    for i, env in enumerate(envs):
        env.set_state(qpos[i], qvel[i])
    for step_actions in actions:
        whole.step(step_actions)
        by_ids.step(step_actions, np.arange(n))
        rows = [env.step(a)[4]["named_state"] for env, a in zip(envs, step_actions)]
        got = whole.state()
        _assert_same(got, by_ids.state(np.arange(n)))
        _assert_same(got, {k: np.concatenate([r[k] for r in rows]) for k in rows[0]})
