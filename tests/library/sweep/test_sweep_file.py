"""Sweep files and command-line axes: valid files load; every mistake is reported with file, line and a fix."""

from __future__ import annotations

from pathlib import Path

import pytest

from kinetome.library.errors import InvalidInputError
from kinetome.library.sweep import Axis, SweepSpec, load_sweep, parse_axis_option
from kinetome.library.sweep.build import build_spec

CONFIGS = Path(__file__).resolve().parents[3] / "configs"

GOOD = """\
name: reach-payload-gain
skill: arm-reach-tray
task: {initial_states: %s}
axes:
  payload_mass: [0.2, 0.6]
  actuator_gain: [0.8, 1.0]
episodes: 20
require: {success: 0.9}
correction: bonferroni
disturbances: {sensor_noise: 0.001}
""" % (CONFIGS / "initial_states" / "arm_clearance.yaml")


def test_a_good_file_loads(tmp_path: Path) -> None:
    path = tmp_path / "s.yaml"
    path.write_text(GOOD)
    spec = load_sweep(path)
    assert spec.skill == "arm-reach-tray" and spec.require == 0.9 and spec.correction == "bonferroni"
    assert spec.cells() == [{"payload_mass": 0.2, "actuator_gain": 0.8}, {"payload_mass": 0.2, "actuator_gain": 1.0},
                            {"payload_mass": 0.6, "actuator_gain": 0.8}, {"payload_mass": 0.6, "actuator_gain": 1.0}]
    assert spec.disturbances.sensor_noise == 0.001


@pytest.mark.parametrize(
    "edit,line,needle",
    [
        (("  payload_mass: [0.2, 0.6]", "  payload_mas: [0.2, 0.6]"), 5, "unknown axis; did you mean 'payload_mass'?"),
        (("  payload_mass: [0.2, 0.6]", "  payload_mass: [0.2, -1]"), 5, "axes.payload_mass[1]: must be > 0 kg"),
        (("  payload_mass: [0.2, 0.6]", "  payload_mass: [0.2, 0.2]"), 5, "lists a value twice"),
        (("episodes: 20", "episodes: 0"), 7, "episodes: must be a whole number >= 1"),
        (("require: {success: 0.9}", "require: {success: 1.5}"), 8, "strictly between 0 and 1"),
        (("correction: bonferroni", "correction: sidak"), 9, "correction: must be one of holm, bonferroni"),
        (("disturbances: {sensor_noise: 0.001}", "disturbances: {sensor_noise: -1}"), 10, "sensor_noise: must be a number >= 0"),
        (("episodes: 20", "episodes: 20\nrepeats: 3"), 8, "repeats: unknown field"),
        (("  actuator_gain: [0.8, 1.0]", "  actuator_gain: {low: 0.5, high: 1.0}"), 6, "is a range but the sweep is a grid"),
    ],
)
def test_every_mistake_names_file_line_and_fix(tmp_path: Path, edit: tuple[str, str], line: int, needle: str) -> None:
    path = tmp_path / "bad.yaml"
    path.write_text(GOOD.replace(*edit))
    with pytest.raises(InvalidInputError) as err:
        load_sweep(path)
    text = "\n".join(str(p) for p in err.value.problems)
    assert needle in text
    assert f"{path}:{line}:" in text


def test_no_target_and_two_targets_are_refused() -> None:
    with pytest.raises(InvalidInputError, match="exactly one target"):
        SweepSpec(name="x", axes=(Axis("payload_mass", (1.0,)),))
    with pytest.raises(InvalidInputError, match="exactly one target"):
        SweepSpec(name="x", skill="a", chain=Path("c.yaml"), axes=(Axis("payload_mass", (1.0,)),))


def test_random_cells_are_seeded_and_inside_the_ranges() -> None:
    spec = SweepSpec(name="r", skill="a", samples=12, seed=3,
                     axes=(Axis("payload_mass", (), 0.2, 1.5), Axis("action_delay_steps", (), 0, 3)))
    cells = spec.cells()
    assert cells == spec.cells() and len(cells) == 12
    assert all(0.2 <= c["payload_mass"] <= 1.5 and c["action_delay_steps"] in (0, 1, 2, 3) for c in cells)
    assert cells != SweepSpec(name="r", skill="a", samples=12, seed=4, axes=spec.axes).cells()


def test_axis_option_parsing_and_errors() -> None:
    assert parse_axis_option("payload_mass=0.2,0.6,1") == Axis("payload_mass", (0.2, 0.6, 1))
    assert parse_axis_option("actuator_gain=0.5:1.2") == Axis("actuator_gain", (), 0.5, 1.2)
    with pytest.raises(InvalidInputError, match="NAME=V1,V2"):
        parse_axis_option("payload_mass")
    with pytest.raises(InvalidInputError, match="'heavy' is not a number"):
        parse_axis_option("payload_mass=heavy")


def test_command_line_axes_replace_the_files(tmp_path: Path) -> None:
    path = tmp_path / "s.yaml"
    path.write_text(GOOD)
    spec = build_spec(path, axes=["payload_mass=1.0"], episodes=5)
    assert [a.name for a in spec.axes] == ["actuator_gain", "payload_mass"]
    assert spec.episodes == 5 and spec.axes[1].values == (1.0,)


def test_a_yaml_target_that_is_missing_or_of_no_known_kind_is_named(tmp_path):
    # a missing file or a typo'd key used to surface as "axes: must list at least one axis" or as spec errors
    from kinetome.library.errors import InvalidInputError
    from kinetome.library.sweep.build import build_spec

    with pytest.raises(InvalidInputError, match="nosuch.yaml: file not found"):
        build_spec(str(tmp_path / "nosuch.yaml"))
    typo = tmp_path / "typo.yaml"
    typo.write_text("name: t\nskill: arm-reach-tray\naxis:\n  payload_mass: [0.2, 0.6]\n")
    with pytest.raises(InvalidInputError, match="not a sweep file .* did you mean 'axes:'"):
        build_spec(str(typo), axes=["payload_mass=0.2,0.6"])
