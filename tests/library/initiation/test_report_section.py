"""The demo report's learned-initiation section shows the proposal (or why there is none)."""

from __future__ import annotations

from library.report.demo_report import _initiation_section
from library.report.html import Report


def _rate(s: int, n: int) -> dict:
    return {"successes": s, "episodes": n, "rate": s / n, "interval": [0.8, 0.99]}


def _learned(no_region=None) -> dict:
    return {"skill": "walker-stand@1", "episodes": 400, "widening_text": "widened 2x", "successes": 300,
            "confidence": 0.95, "precision_target": 0.9, "classifier": {"model": "logistic"},
            "calibration": {"brier": 0.05}, "proposed": "qpos[2] >= 1.1 and qpos[2] <= 1.3",
            "precision": _rate(90, 100), "recall": _rate(80, 90),
            "current": {"starts_when": "torso_height > 0.3", "precision": _rate(50, 100), "recall": _rate(70, 90)},
            "no_region": no_region}


def _render(learned: dict) -> str:
    report = Report("t")
    _initiation_section(report, learned)
    return report.render()


def test_section_shows_the_proposal_when_no_region_is_none():
    html = _render(_learned(None))
    assert "qpos[2] &gt;= 1.1" in html or "qpos[2] >= 1.1" in html
    assert "torso_height" in html
    assert "90/100" in html


def test_section_shows_the_reason_when_there_is_no_region():
    html = _render(_learned("no episode ended by stops_when"))
    assert "no episode ended by stops_when" in html
    assert "qpos[2]" not in html
