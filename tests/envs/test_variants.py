"""Task variants: loading with line-numbered errors, digests, and what each field does to the model."""

from __future__ import annotations

import dataclasses
import math
from pathlib import Path

import mujoco
import numpy as np
import pytest

from kinetome.envs.bench_arm import ASSET as ARM_ASSET, TARGETS as ARM_TARGETS, build_bench_arm
from kinetome.envs.errors import EnvConfigError
from kinetome.envs.test_walker import ASSET as WALKER_ASSET, build_test_walker, walker_targets
from kinetome.envs.variants import (
    NOMINAL,
    TaskVariant,
    VariantTargets,
    apply_variant,
    load_variant,
    resolve_variant,
    variant_digest,
    variant_fields,
    variant_from_mapping,
)

ROOT = Path(__file__).resolve().parents[2]
SHIPPED = sorted((ROOT / "configs" / "variants").glob("*.yaml"))
BAD = ROOT / "tests" / "envs" / "data" / "bad_variant.yaml"


def test_every_dataclass_field_has_a_registered_applier():
    declared = [f.name for f in dataclasses.fields(TaskVariant) if f.name not in ("name", "description", "source")]
    assert declared == list(variant_fields())


@pytest.mark.parametrize("path", SHIPPED, ids=lambda p: p.stem)
def test_shipped_variants_load(path):
    v = load_variant(path)
    assert v.name == path.stem
    assert v.fields_set(), "a shipped variant changes something"
    assert v.source == str(path)


def test_shipped_set_covers_the_brief():
    names = {p.stem for p in SHIPPED}
    assert {"heavy_payload", "low_friction", "moved_tray", "weak_motors", "slope", "moon_gravity"} <= names


def _write(tmp_path, text):
    path = tmp_path / "v.yaml"
    path.write_text(text, encoding="utf-8")
    return path


# (yaml text, expected line, expected fragment of that problem)
ERROR_CASES = [
    ("name: a\npayload_mas: 1.0\n", 2, "payload_mas: unknown field; did you mean 'payload_mass'? valid fields: name,"),
    ("name: a\npayload_mass: -0.5\n", 2, "payload_mass: must be > 0 kg, got -0.5"),
    ("name: a\npayload_mass: 0\n", 2, "payload_mass: must be > 0 kg, got 0"),
    ("name: a\ntimestep: 0\n", 2, "timestep: must be > 0 s, got 0"),
    ("name: a\ntimestep: -0.001\n", 2, "timestep: must be > 0 s, got -0.001"),
    ("name: a\ntimestep: 0.5\n", 2, "timestep: must be <= 0.05 s, got 0.5"),
    ("name: a\n\nfriction: -0.1\n", 3, "friction: must be >= 0, got -0.1"),
    ("name: a\ngravity: [0, -9.81]\n", 2, "gravity: must have 3 entries (x, y, z), got 2"),
    ("name: a\ntarget_position: [0.1, 0, 0.2, 1]\n", 2, "target_position: must have 3 entries (x, y, z), got 4"),
    ("name: a\ngravity: 9.81\n", 2, "gravity: must be a list of 3 numbers in m/s^2, got 9.81"),
    ("name: a\nactuator_gain: .inf\n", 2, "actuator_gain: must be a finite number, got inf"),
    ("name: a\npayload_mass: .nan\n", 2, "payload_mass: must be a finite number in kg, got nan"),
    ("name: a\nactuator_gain: 0\n", 2, "actuator_gain: must be > 0, got 0"),
    ("name: a\nfloor_slope: 90\n", 2, "floor_slope: must lie strictly between -90 and 90 degrees, got 90"),
    ("name: a\npayload_mass: heavy\n", 2, "payload_mass: must be a number in kg, got 'heavy' (str)"),
    ("name: a\npayload_mass: true\n", 2, "payload_mass: must be a number in kg, got True (bool)"),
    ("name: a\njoint_damping: [0.5, -1]\n", 2, "joint_damping: must be >= 0 N m s/rad, got -1"),
    ("name: a\nspeed_command:\n", 2, "speed_command: has no value"),
    ("name: a\nfriction: 0.3\nfriction: 0.4\n", 3, "friction: appears twice in the same mapping"),
    ("description: no name\n", 1, "name: missing; add a line 'name: <variant name>'"),
    ("name: has space\n", 1, "name: must be letters, digits"),
    ("name: a\npayload_mass: [1.0\n", 3, "yaml: "),
    ("- just\n- a list\n", 1, "variant: must be a mapping of field: value, got list"),
]


@pytest.mark.parametrize("text,line,fragment", ERROR_CASES, ids=[c[2].split(":")[0] + f"@{c[1]}" for c in ERROR_CASES])
def test_variant_error_messages_name_file_line_field_and_fix(tmp_path, text, line, fragment):
    path = _write(tmp_path, text)
    with pytest.raises(EnvConfigError) as info:
        load_variant(path)
    matching = [p for p in info.value.problems if fragment in p]
    assert matching, info.value.problems
    assert matching[0].startswith(f"{path}:{line}: ")


def test_bad_example_reports_every_problem_at_once_in_line_order():
    with pytest.raises(EnvConfigError) as info:
        load_variant(BAD)
    problems = info.value.problems
    assert [p.split(":")[1] for p in problems] == ["3", "4", "5", "6", "7"]
    assert "did you mean 'payload_mass'?" in problems[0]
    assert "friction: must be >= 0" in problems[1]
    assert "timestep: must be > 0 s" in problems[2]
    assert "gravity: must have 3 entries" in problems[3]
    assert "actuator_gain: must be a finite number" in problems[4]
    assert str(info.value) == "\n".join(problems)


def test_missing_file_is_a_config_error(tmp_path):
    with pytest.raises(EnvConfigError, match=r"file: cannot be read"):
        load_variant(tmp_path / "nope.yaml")


def test_yaml_tags_that_build_objects_are_refused(tmp_path):
    path = _write(tmp_path, "name: a\npayload_mass: !!python/object/apply:os.system ['true']\n")
    with pytest.raises(EnvConfigError, match=r":2: yaml: "):
        load_variant(path)


def test_constructor_validates_like_the_loader():
    with pytest.raises(EnvConfigError, match=r"payload_mass: must be > 0 kg"):
        TaskVariant(name="x", payload_mass=-1.0)
    with pytest.raises(EnvConfigError, match=r"gravity: must have 3 entries"):
        dataclasses.replace(NOMINAL, gravity=(0.0, -1.0))
    v = TaskVariant(name="x", gravity=[0, 0, -1], joint_damping=[1, 2, 3])
    assert v.gravity == (0.0, 0.0, -1.0) and v.joint_damping == (1.0, 2.0, 3.0)


def test_digest_is_canonical():
    a = TaskVariant(name="x", gravity=(0, 0, -1.62), description="one")
    b = variant_from_mapping({"gravity": [0.0, 0.0, -1.62], "name": "x", "description": "two"})
    assert variant_digest(a) == variant_digest(b) == a.digest
    assert len(a.digest) == 64 and int(a.digest, 16) >= 0
    assert a.digest != TaskVariant(name="x", gravity=(0, 0, -1.63)).digest
    assert a.digest != TaskVariant(name="y", gravity=(0, 0, -1.62)).digest
    assert NOMINAL.digest == TaskVariant(name="nominal").digest


def test_resolve_accepts_path_mapping_variant_and_none():
    path = ROOT / "configs" / "variants" / "heavy_payload.yaml"
    assert resolve_variant(None) is NOMINAL
    assert resolve_variant(path) == resolve_variant(str(path)) == load_variant(path)
    assert resolve_variant({"name": "heavy_payload", "payload_mass": 1.0}).digest == load_variant(path).digest
    with pytest.raises(TypeError, match=r"variant must be None, a YAML path, a mapping or a TaskVariant, got int"):
        resolve_variant(3)
    with pytest.raises(EnvConfigError, match=r"<variant dict>: payload_mas: unknown field"):
        resolve_variant({"name": "a", "payload_mas": 1})


def _compiled(asset, variant, targets):
    spec = mujoco.MjSpec.from_file(str(asset))
    apply_variant(spec, variant, targets)
    return spec


def test_apply_is_deterministic():
    v = TaskVariant(name="all", payload_mass=0.7, joint_damping=(1.0, 2.0, 3.0), gravity=(0, 0, -5),
                    actuator_gain=0.5, target_position=(0.4, 0, 0.3), timestep=0.001)
    assert _compiled(ARM_ASSET, v, ARM_TARGETS).to_xml() == _compiled(ARM_ASSET, v, ARM_TARGETS).to_xml()


def test_each_field_changes_the_model_as_declared():
    nominal = build_bench_arm().model
    arm = build_bench_arm(TaskVariant(name="all", payload_mass=0.7, joint_damping=(1.0, 2.0, 3.0),
                                      gravity=(0, 0, -5), actuator_gain=0.5, target_position=(0.4, 0, 0.3),
                                      timestep=0.001)).model
    payload = arm.body("payload").id
    assert arm.body_mass[payload] == pytest.approx(0.7)
    np.testing.assert_allclose(arm.body_inertia[payload], nominal.body_inertia[payload] * 0.7 / 0.2)
    np.testing.assert_allclose(arm.dof_damping, [1.0, 2.0, 3.0])
    np.testing.assert_allclose(arm.opt.gravity, [0, 0, -5])
    np.testing.assert_allclose(arm.actuator_gear[:, 0], 0.5 * nominal.actuator_gear[:, 0])
    np.testing.assert_allclose(arm.site_pos[arm.site("tray").id], [0.4, 0, 0.3])
    assert arm.opt.timestep == 0.001
    # Everything else is untouched.
    others = [b for b in range(nominal.nbody) if b != payload]
    np.testing.assert_array_equal(arm.body_mass[others], nominal.body_mass[others])

    walker = build_test_walker(TaskVariant(name="w", friction=0.3, floor_slope=10.0, joint_damping=0.9)).model
    for g in ("floor", "front_pad", "hind_pad"):
        assert walker.geom(g).friction[0] == 0.3
    assert walker.geom("chassis").friction[0] == 1.0
    np.testing.assert_allclose(walker.dof_damping[3:], 0.9)
    np.testing.assert_allclose(walker.dof_damping[:3], 0.0)
    data = mujoco.MjData(walker)
    mujoco.mj_kinematics(walker, data)
    normal = data.geom_xmat[walker.geom("floor").id].reshape(3, 3)[:, 2]
    # Floor rising toward +x by 10 degrees: normal (-sin 10, 0, cos 10).
    np.testing.assert_allclose(normal, [-math.sin(math.radians(10)), 0, math.cos(math.radians(10))], atol=1e-12)


def test_weak_motors_scale_the_delivered_torque():
    rig = build_bench_arm(ROOT / "configs" / "variants" / "weak_motors.yaml")
    data = mujoco.MjData(rig.model)
    data.ctrl[:] = [5.0, 4.0, 1.0]
    mujoco.mj_forward(rig.model, data)
    np.testing.assert_allclose(data.qfrc_actuator, 0.6 * np.array([5.0, 4.0, 1.0]))


NOT_APPLICABLE = [
    ("payload_mass", {"payload_mass": 1.0}, "walker", "it has no payload body"),
    ("target_position", {"target_position": (0.1, 0, 0.1)}, "walker", "it has no target site"),
    ("friction", {"friction": 0.3}, "arm", "it has no floor or foot geoms"),
    ("floor_slope", {"floor_slope": 3.0}, "arm", "it has no floor geom"),
    ("speed_command", {"speed_command": 0.3}, "arm", "its task has no commanded speed"),
    ("joint_damping", {"joint_damping": (1.0, 2.0)}, "arm", "it has 3 damped joints (shoulder, elbow, wrist)"),
]


@pytest.mark.parametrize("field,values,robot,reason", NOT_APPLICABLE, ids=[c[0] for c in NOT_APPLICABLE])
def test_fields_that_do_not_apply_are_errors_that_say_so(field, values, robot, reason):
    v = TaskVariant(name="odd", **values)
    asset, targets = (ARM_ASSET, ARM_TARGETS) if robot == "arm" else (WALKER_ASSET, walker_targets(commanded=True))
    spec = mujoco.MjSpec.from_file(str(asset))
    before = spec.to_xml()
    with pytest.raises(EnvConfigError) as info:
        apply_variant(spec, v, targets)
    robot_name = targets.robot
    assert info.value.problems == [
        f"variant odd: {field}: does not apply to robot {robot_name} ({reason}"
        + info.value.problems[0].split(f"({reason}", 1)[1]
    ]
    assert "remove '" in info.value.problems[0] or "give one value" in info.value.problems[0]
    assert spec.to_xml() == before  # nothing was changed


def test_variant_targets_validate():
    with pytest.raises(ValueError, match=r"VariantTargets.robot must name the robot"):
        VariantTargets(robot="")
    with pytest.raises(ValueError, match=r"VariantTargets.foot_geoms must be a tuple of names, got a string"):
        VariantTargets(robot="r", foot_geoms="foot")


def test_rig_records_the_variant_name_and_digest():
    path = ROOT / "configs" / "variants" / "heavy_payload.yaml"
    rig = build_bench_arm(path)
    assert rig.variant.name == "heavy_payload"
    assert rig.variant.digest == load_variant(path).digest == rig.metadata["variant_digest"]
    assert build_bench_arm().variant is NOMINAL
