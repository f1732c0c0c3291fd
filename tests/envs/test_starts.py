"""Initial-states distributions: YAML errors with lines, noise statistics, constraints, determinism."""

from __future__ import annotations

from pathlib import Path

import mujoco
import numpy as np
import pytest

from kinetome.envs.bench_arm import HOME_START, build_bench_arm
from kinetome.envs.errors import EnvConfigError
from kinetome.envs.rig_env import RigEnv
from kinetome.envs.starts import (
    BallConstraint,
    BoxConstraint,
    Noise,
    RigStart,
    StartDistribution,
    load_start,
    rig_named_state,
)
from kinetome.envs.test_walker import STANDING_START, build_test_walker

ROOT = Path(__file__).resolve().parents[2]
STARTS = ROOT / "configs" / "initial_states"


@pytest.fixture(scope="module")
def arm():
    return build_bench_arm()


def test_shipped_files_equal_the_builtin_defaults():
    assert load_start(STARTS / "arm_home.yaml") == HOME_START
    assert load_start(STARTS / "walker_standing.yaml") == STANDING_START
    wide = load_start(STARTS / "arm_home_wide.yaml")
    assert wide.constraints == (BallConstraint("fingertip", "pick", 0.08),)
    assert wide.qvel_noise == Noise("gaussian", 0.05) and wide.max_tries == 50


def test_same_seed_same_starts_and_same_trajectory(arm):
    a = HOME_START.sample(arm.model, np.random.default_rng(7), 5)
    b = HOME_START.sample(arm.model, np.random.default_rng(7), 5)
    c = HOME_START.sample(arm.model, np.random.default_rng(8), 5)
    np.testing.assert_array_equal(a[0], b[0])
    assert not np.array_equal(a[0], c[0])
    trajectories = []
    for _ in range(2):
        env = RigEnv(build_test_walker())
        obs, _ = env.reset(seed=11)
        rows = [obs]
        for k in range(50):
            rows.append(env.step(np.sin(0.1 * k + np.arange(4)) * 3.0)[0])
        trajectories.append(np.array(rows))
    np.testing.assert_array_equal(trajectories[0], trajectories[1])


def test_uniform_noise_stays_inside_its_half_width_around_the_nominal(arm):
    qpos, qvel = HOME_START.sample(arm.model, np.random.default_rng(0), 2000)
    home = arm.model.key_qpos[0]
    dev = qpos - home
    assert np.all(np.abs(dev) <= 0.02 + 1e-15)
    assert np.all(np.abs(dev).max(axis=0) > 0.019)  # the whole width is used
    np.testing.assert_array_equal(qvel, 0.0)


def test_gaussian_noise_has_the_stated_standard_deviation(arm):
    dist = StartDistribution(name="g", pose="home", qvel_noise=Noise("gaussian", 0.3))
    _, qvel = dist.sample(arm.model, np.random.default_rng(1), 4000)
    # The sample std of n normal draws has relative std 1/sqrt(2n) ~ 1.1 %: 5 % is over 4 sigma.
    np.testing.assert_allclose(qvel.std(axis=0), 0.3, rtol=0.05)
    np.testing.assert_allclose(qvel.mean(axis=0), 0.0, atol=5 * 0.3 / np.sqrt(4000))


def test_per_joint_noise_touches_only_the_named_joints():
    walker = build_test_walker()
    qpos, _ = STANDING_START.sample(walker.model, np.random.default_rng(2), 200)
    np.testing.assert_array_equal(qpos[:, :3], np.tile(walker.model.key_qpos[0, :3], (200, 1)))
    assert np.all(qpos[:, 3:].std(axis=0) > 0.005)


def test_noise_is_clipped_into_joint_limits(arm):
    dist = StartDistribution(name="huge", pose="home", qpos_noise=Noise("uniform", 10.0))
    qpos, _ = dist.sample(arm.model, np.random.default_rng(3), 500)
    lo, hi = arm.model.jnt_range[:, 0], arm.model.jnt_range[:, 1]
    assert np.all(qpos >= lo) and np.all(qpos <= hi)


def test_ball_constraint_by_rejection_sampling(arm):
    wide = load_start(STARTS / "arm_home_wide.yaml")
    qpos, qvel = wide.sample(arm.model, np.random.default_rng(4), 300, named_state=rig_named_state(arm))
    state = rig_named_state(arm)(qpos, qvel)
    pick = arm.model.site("pick").pos
    dist = np.linalg.norm(state["fingertip"] - pick, axis=1)
    assert np.all(dist <= 0.08)
    # Without the constraint about 44 % of candidates fall outside: the ball is active.
    free = StartDistribution(name="free", pose="home", qpos_noise=Noise("uniform", 0.25))
    q2, v2 = free.sample(arm.model, np.random.default_rng(4), 300)
    assert np.mean(np.linalg.norm(rig_named_state(arm)(q2, v2)["fingertip"] - pick, axis=1) > 0.08) > 0.2
    # And it is deterministic too.
    again = wide.sample(arm.model, np.random.default_rng(4), 300, named_state=rig_named_state(arm))
    np.testing.assert_array_equal(qpos, again[0])


def test_box_constraint_on_qpos_needs_no_reader(arm):
    dist = StartDistribution(
        name="box", pose="home", qpos_noise=Noise("uniform", 0.2),
        constraints=(BoxConstraint("qpos", (0.0, -1.2, -0.8), (0.2, -0.8, -0.5)),),
    )
    qpos, _ = dist.sample(arm.model, np.random.default_rng(5), 100)
    assert np.all(qpos >= [0.0, -1.2, -0.8]) and np.all(qpos <= [0.2, -0.8, -0.5])


def test_too_low_acceptance_is_a_clear_error(arm):
    dist = StartDistribution(
        name="needle", pose="home", qpos_noise=Noise("uniform", 0.5),
        constraints=(BallConstraint("fingertip", "tray", 0.001),), max_tries=5,
    )
    with pytest.raises(EnvConfigError, match=r"constraints: only \d+ of 50 candidates \(.*%\) satisfied the constraints, "
                                             r"10 needed within max_tries=5 per state; 'norm\(fingertip - site tray\) "
                                             r"<= 0.001' rejected \d+; narrow the noise"):
        dist.sample(arm.model, np.random.default_rng(6), 10, named_state=rig_named_state(arm))


def test_named_quantity_constraints_need_a_reader(arm):
    wide = load_start(STARTS / "arm_home_wide.yaml")
    with pytest.raises(ValueError, match=r"constraints on \['fingertip'\] need named_state="):
        wide.sample(arm.model, np.random.default_rng(0), 3)
    unbound = RigStart(wide)
    with pytest.raises(RuntimeError, match=r"never bound to a rig"):
        unbound(arm.model, np.random.default_rng(0), 3)
    bound = RigStart(wide)
    bound.bind(arm)
    assert bound(arm.model, np.random.default_rng(0), 3)[0].shape == (3, 3)


MODEL_ERRORS = [
    (StartDistribution(name="k", pose="sitting"), r"nominal.pose: keyframe 'sitting' is not in the model; keyframes: home, tray"),
    (StartDistribution(name="q", qpos=(0.0, 0.1)), r"nominal.qpos: has 2 entries, the model has 3; give 3 numbers"),
    (StartDistribution(name="j", qpos_noise=Noise("uniform", (("knee", 0.1),))),
     r"noise.qpos: joint 'knee' is not in the model; joints: shoulder, elbow, wrist"),
    (StartDistribution(name="l", qvel_noise=Noise("uniform", (0.1, 0.1))),
     r"noise.qvel: has 2 entries, the model has qvel size 3"),
    (StartDistribution(name="c", constraints=(BallConstraint("qpos", (0.0, 0.0), 0.1),)),
     r"constraints: ball center has 2 entries, qpos has 3"),
    (StartDistribution(name="s", constraints=(BallConstraint("qpos", "nowhere", 0.1),)),
     r"constraints: site 'nowhere' is not in the model; sites: tray, pick, fingertip"),
]


@pytest.mark.parametrize("dist,pattern", MODEL_ERRORS, ids=[d.name for d, _ in MODEL_ERRORS])
def test_model_mismatch_errors(arm, dist, pattern):
    with pytest.raises(EnvConfigError, match=pattern):
        dist.sample(arm.model, np.random.default_rng(0), 2)


def _write(tmp_path, text):
    path = tmp_path / "s.yaml"
    path.write_text(text, encoding="utf-8")
    return path


YAML_ERRORS = [
    ("name: a\nnominl:\n  pose: home\n", 2, "nominl: unknown field; did you mean 'nominal'? valid fields: name,"),
    ("name: a\nnominal:\n  pose: home\n  qpos: [0, 0, 0]\n", 4, "nominal.qpos: conflicts with nominal.pose"),
    ("name: a\nnominal:\n  qpos: [0, .nan, 0]\n", 3, "nominal.qpos: must contain finite numbers only"),
    ("name: a\nnominal:\n  qvel: 3\n", 3, "nominal.qvel: must be a non-empty list of numbers, got 3"),
    ("name: a\nnoise:\n  qpos: {distribution: cauchy, scale: 0.1}\n", 3,
     "noise.qpos.distribution: must be one of uniform, gaussian, got 'cauchy'"),
    ("name: a\nnoise:\n  qpos: {distribution: uniform, scale: -0.1}\n", 3, "noise.qpos.scale: must be >= 0, got -0.1"),
    ("name: a\nnoise:\n  qpos: {distribution: uniform}\n", 3, "noise.qpos.scale: missing"),
    ("name: a\nnoise:\n  qvel: {distribution: uniform, scale: {elbow: -1}}\n", 3,
     "noise.qvel.scale: must map joint names to finite numbers >= 0, bad for ['elbow']"),
    ("name: a\nnoise:\n  qpos: {distributon: uniform, scale: 0.1}\n", 3,
     "noise.qpos.distributon: unknown field; did you mean 'distribution'?"),
    ("name: a\nconstraints:\n  - ball: {quantity: fingertip, center: [0, 0, 0], radius: -1}\n", 3,
     "constraints[0].ball.radius: must be a finite number > 0 (m), got -1"),
    ("name: a\nconstraints:\n  - ball: {quantity: fingertip, radius: 0.1}\n", 3, "constraints[0].ball: missing center"),
    ("name: a\nconstraints:\n  - box: {quantity: qpos, low: [0, 0], high: [1]}\n", 3,
     "constraints[0].box.high: has 1 entries, low has 2"),
    ("name: a\nconstraints:\n  - box: {quantity: qpos, low: [1], high: [0]}\n", 3, "constraints[0].box.low: must be <= high"),
    ("name: a\nconstraints:\n  - cylinder: {quantity: qpos}\n", 3, "constraints[0]: must be one mapping 'ball: {...}' or 'box: {...}'"),
    ("name: a\nconstraints: {ball: 1}\n", 2, "constraints: must be a list of ball/box items"),
    ("name: a\nmax_tries: 0\n", 2, "max_tries: must be an integer >= 1, got 0"),
    ("nominal: {pose: home}\n", 1, "name: must be a non-empty string, got None"),
    ("name: a\nnoise: {qpos: {distribution: uniform, scale: 0.1}\n", 3, "yaml: "),
]


@pytest.mark.parametrize("text,line,fragment", YAML_ERRORS, ids=[c[2].split(":")[0] + f"@{c[1]}" for c in YAML_ERRORS])
def test_start_yaml_errors_name_file_line_field(tmp_path, text, line, fragment):
    path = _write(tmp_path, text)
    with pytest.raises(EnvConfigError) as info:
        load_start(path)
    matching = [p for p in info.value.problems if fragment in p]
    assert matching, info.value.problems
    assert matching[0].startswith(f"{path}:{line}: ")


def test_bad_example_reports_every_problem_in_line_order():
    path = ROOT / "tests" / "envs" / "data" / "bad_start.yaml"
    with pytest.raises(EnvConfigError) as info:
        load_start(path)
    lines = [int(p.split(":")[1]) for p in info.value.problems]
    assert lines == sorted(lines) and len(lines) == 6
    assert any("max_tris: unknown field; did you mean 'max_tries'?" in p for p in info.value.problems)


def test_free_joint_quaternions_stay_unit_length():
    model = mujoco.MjModel.from_xml_string(
        "<mujoco><worldbody><body><freejoint/><geom size='0.1'/></body></worldbody></mujoco>"
    )
    dist = StartDistribution(name="free", qpos_noise=Noise("gaussian", 0.3))
    qpos, _ = dist.sample(model, np.random.default_rng(9), 100)
    np.testing.assert_allclose(np.linalg.norm(qpos[:, 3:7], axis=1), 1.0, atol=1e-12)


def test_value_object_validation():
    with pytest.raises(ValueError, match=r"noise distribution must be one of uniform, gaussian, got 'flat'"):
        Noise("flat", 0.1)
    with pytest.raises(ValueError, match=r"noise scale must be finite and >= 0"):
        Noise("uniform", -1.0)
    with pytest.raises(ValueError, match=r"ball radius must be a finite number > 0"):
        BallConstraint("fingertip", (0, 0, 0), 0.0)
    with pytest.raises(EnvConfigError, match=r"give either pose \(a keyframe name\) or qpos, not both"):
        StartDistribution(name="x", pose="home", qpos=(0.0, 0.0, 0.0))
    with pytest.raises(ValueError, match=r"n must be >= 1, got 0"):
        HOME_START.sample(build_bench_arm().model, np.random.default_rng(0), 0)
