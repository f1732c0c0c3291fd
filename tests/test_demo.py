"""`kinetome demo --quick`: the whole job end to end, and a report a browser renders."""

from __future__ import annotations

import json
import re
from pathlib import Path

import numpy as np
import pytest
from PIL import Image

from kinetome.library.cli.main import main
from tests.browser import chromium_path, render_page

SECTIONS = ("skills", "chains", "plan", "models", "retrain", "sweep", "filmstrips", "safety")


@pytest.fixture(scope="module")
def demo(tmp_path_factory) -> Path:
    out = tmp_path_factory.mktemp("demo")
    assert main(["demo", "--quick", "--out", str(out)]) == 0
    return out


def test_demo_registers_fits_checks_and_retrains(demo: Path) -> None:
    summary = json.loads((demo / "demo.json").read_text())
    refs = {r["ref"] for r in summary["registered"]}
    assert {"arm-lift@1", "arm-reach-tray@1", "walker-walk@1"} <= refs
    assert sum("model" in m for m in summary["models"].values()) >= 4
    verdicts = {c["name"]: {j["verdict"] for j in c["result"]["handoffs"] if j["kind"] == "handoff"} for c in summary["checks"]}
    assert verdicts["arm-lift-reach-place"] == {"composes"}
    assert "breaks" in verdicts["arm-place-release"]
    decided = {j["decided_by"] for c in summary["checks"] for j in c["result"]["handoffs"]}
    assert "static" in decided and "sim" in decided
    plan = summary["plan"]  # the search finds the workshop's chain, adding the settling skill nobody listed
    assert plan["exit_code"] == 0 and plan["winner"] == ["arm-lift@1", "arm-reach-tray@1", "arm-place@1"]
    assert plan["listed"] == ["arm-lift"] and "arm-place@1" in plan["chosen_by_search"]
    assert plan["confirmed"][0]["lower_bound"] >= 0.95
    retrain = summary["retrain"]
    assert retrain["child"] == "arm-reach-tray@2" and retrain["lineage"] == ["arm-reach-tray@2", "arm-reach-tray@1"]
    assert retrain["after"]["mean_return"] > retrain["before"]["mean_return"]


def test_demo_sweeps_the_reach_skill_before_and_after_the_retrain(demo: Path) -> None:
    summary = json.loads((demo / "demo.json").read_text())
    before, after = summary["sweeps"]
    assert (before["label"], before["ref"], after["label"], after["ref"]) == ("before", "arm-reach-tray@1", "after", "arm-reach-tray@2")

    def marks(entry):
        return {(c["values"]["payload_mass"], c["values"]["actuator_gain"]): c["mark"] for c in entry["result"]["cells"]}

    # the nominal skill holds the light part and drops the heavy one; the retrained child holds the heavy one
    assert marks(before)[(0.2, 1.0)] == "pass" and marks(before)[(1.0, 1.0)] == "fail"
    assert marks(after)[(1.0, 1.0)] == "pass"
    assert {r["axis"] for r in after["result"]["axis_ranking"]} == {"payload_mass", "actuator_gain"}
    for entry in (before, after):
        png = Path(entry["result"]["files"]["heat map"])
        assert png.is_file() and "Caution" in Image.open(png).text
    html = (demo / "report.html").read_text()
    assert "before the retrain: arm-reach-tray@1" in html and "after the retrain: arm-reach-tray@2" in html


def test_report_is_self_contained_with_every_section(demo: Path) -> None:
    html = (demo / "report.html").read_text()
    for anchor in SECTIONS:
        assert f'id="{anchor}"' in html
    assert "<script" not in html and not re.search(r'src="https?:', html)
    assert html.count("data:image/png;base64,") >= 5  # handoff plots, timelines, curve, filmstrips
    assert "ISO 12100" in html
    assert "verdict-breaks" in html and "verdict-composes" in html
    # the learned-initiation section shows the proposal (or why there is none), never an empty "-"
    learned = json.loads((demo / "demo.json").read_text()).get("initiation") or {}
    section = html[html.index('id="initiation"'):].split("</section>", 1)[0]
    assert "<p>-</p>" not in section
    if learned.get("proposed"):
        assert learned["proposed"].split(" ")[0] in section


@pytest.mark.skipif(chromium_path() is None, reason="Chromium is not installed (optional: apt-get install chromium chromium-driver)")
def test_report_renders_in_headless_chromium(demo: Path) -> None:
    dom, shot = render_page(demo / "report.html", width=1280, height=4000)
    for anchor in SECTIONS:
        assert f'id="{anchor}"' in dom
    assert dom.count("<img") >= 5
    pixels = np.asarray(Image.open(shot).convert("L"), dtype=np.float64)
    assert pixels.std() > 10  # text, tables and images were painted, not a blank page


def test_demo_json_has_a_schema_a_caution_and_the_vocabulary(demo: Path) -> None:
    from tests.test_vocabulary import old_json_keys

    summary = json.loads((demo / "demo.json").read_text())
    assert summary["schema"] == "kinetome.demo/1" and "ISO 12100" in summary["caution"]
    assert old_json_keys(summary) == []
