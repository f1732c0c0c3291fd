"""One named quantity means one thing on every env: the same unit and the same meaning text."""

from __future__ import annotations

import pytest

from kinetome.envs.named_state import CONVENTIONS, Quantity, StateLayout, convention_problems
from kinetome.envs.rig import make_rig, rig_ids


@pytest.mark.parametrize("env_id", rig_ids())
def test_every_env_follows_the_conventions(env_id) -> None:
    assert convention_problems(make_rig(env_id).layout) == []


def test_shared_quantities_have_one_unit_across_envs() -> None:
    seen: dict[str, set[str]] = {}
    for env_id in rig_ids():
        layout = make_rig(env_id).layout
        for name in layout.names:
            seen.setdefault(name, set()).add(layout[name].unit)
    assert len(seen["foot_contact"]) == 1 and seen["foot_contact"] == {"N"}
    assert {name for name, (unit, _) in CONVENTIONS.items() if unit is not None and len(seen.get(name, {unit})) > 1} == set()


def test_a_departing_unit_or_meaning_is_reported() -> None:
    layout = StateLayout((
        Quantity("foot_contact", (2,), "N", "touch-sensor normal force on the front and hind foot"),
        Quantity("torso_height", (), "cm", "height of the torso above the floor"),
        Quantity("anything", (), "kg", "not a conventional name"),
    ))
    problems = convention_problems(layout)
    assert len(problems) == 2
    assert problems[0].startswith("foot_contact: meaning must start with 'magnitude of the net contact force on each foot")
    assert problems[1] == "torso_height: unit must be 'm', got 'cm'"
