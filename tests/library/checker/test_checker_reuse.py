"""Stored check results are reused: the same check over the same identities, task, settings and
software returns the stored result without simulating; any change of identity re-runs."""

from __future__ import annotations

import json

import pytest
from checker_testkit import CONFIGS, write_chain

from kinetome.library.checker import Verdict, check_chain
from kinetome.library.checker import check as check_module
from kinetome.library.checker import reuse

SKILLS = CONFIGS / "skills"
HOME = str(CONFIGS / "initial_states" / "arm_home.yaml")
HEAVY = str(CONFIGS / "variants" / "heavy_payload.yaml")


@pytest.fixture
def store(tmp_path):
    from kinetome.library.api import register
    from kinetome.library.store import Store

    s = Store(tmp_path / "store")
    for name in ("arm-reach-tray", "arm-place"):
        register(SKILLS / f"{name}.yaml", store=s)
    return s


@pytest.fixture
def runs(monkeypatch):
    """Counts the checks that actually ran (simulated), as opposed to being read back."""
    count = {"n": 0}
    real = check_module.run_check

    def counted(ctx):
        count["n"] += 1
        return real(ctx)

    monkeypatch.setattr(check_module, "run_check", counted)
    return count


def _chain(tmp_path, **fields):
    fields.setdefault("episodes", 60)
    return write_chain(tmp_path, "reach-place", ["arm-reach-tray", "arm-place"], start=HOME, **fields)


def test_same_check_again_returns_the_stored_result_and_says_so(tmp_path, store, runs):
    path = _chain(tmp_path)
    first = check_chain(path, store=store, method="sim")
    assert runs["n"] == 1 and not first.reused
    assert first.stored["reused"] is False and first.stored["artifact"] == "arm-reach-tray@1/check-result#1"
    again = check_chain(path, store=store, method="sim")
    assert runs["n"] == 1  # nothing simulated the second time
    assert again.reused and again.exit_code == first.exit_code
    assert again.verdicts == first.verdicts and again.chain_verdict is first.chain_verdict
    assert [h.verdict for h in again.handoffs] == [Verdict.COMPOSES]
    a, b = first.to_dict(), again.to_dict()
    assert b["stored"]["reused"] is True and b["stored"]["digest"] == a["stored"]["digest"]
    assert {k: v for k, v in a.items() if k != "stored"} == {k: v for k, v in b.items() if k != "stored"}
    text = again.format_text()
    assert text.startswith("reused: the stored result arm-reach-tray@1/check-result#1")
    assert text.endswith(first.format_text())
    art = store.get_artifact("arm-reach-tray@1", "check-result")
    ids = [store.get(r).identity for r in ("arm-reach-tray@1", "arm-place@1")]
    assert list(art.computed_on) == ids and art.task["env"] == "kinetome/BenchArm-v0"
    assert art.software["mujoco"] and art.settings["seed"] == 0 and art.settings["episodes"] == 60


@pytest.mark.parametrize(
    "change",
    ["seed", "episodes", "method", "require", "disturbances", "variant", "initial_states", "fresh", "software", "region_note"],
)
def test_any_change_of_identity_runs_again(tmp_path, store, runs, monkeypatch, change):
    path = _chain(tmp_path)
    check_chain(path, store=store, method="sim")
    kw: dict = {"method": "sim"}
    if change == "seed":
        kw["seed"] = 1
    elif change == "episodes":
        kw["episodes"] = 61
    elif change == "method":
        kw["method"] = "auto"
    elif change == "require":
        path = _chain(tmp_path, require=0.9)
    elif change == "disturbances":
        path = _chain(tmp_path, disturbances={"sensor_noise": 0.001})
    elif change == "variant":
        path = _chain(tmp_path, variant=HEAVY)
    elif change == "initial_states":
        path = write_chain(tmp_path, "reach-place", ["arm-reach-tray", "arm-place"],
                           start=str(CONFIGS / "initial_states" / "arm_home_wide.yaml"), episodes=60)
    elif change == "fresh":
        kw["reuse"] = False
    elif change == "region_note":  # a sweep stored since then puts this task outside a valid-for region
        from kinetome.library.sweep import regions

        monkeypatch.setattr(regions, "region_warnings", lambda *a, **k: ["outside arm-place@1's valid-for region"])
    elif change == "software":
        real = reuse._software
        monkeypatch.setattr(reuse, "_software", lambda: {**real(), "mujoco": "0.0.0"})
    result = check_chain(path, store=store, **kw)
    assert runs["n"] == 2 and not result.reused


def test_a_new_version_of_a_skill_runs_again_and_a_pin_reuses(tmp_path, store, runs):
    from kinetome.library.api import register

    path = _chain(tmp_path)
    check_chain(path, store=store, method="sim")
    spec = (SKILLS / "arm-place.yaml").read_text().replace("max_steps: 100", "max_steps: 101")
    (tmp_path / "arm-place.yaml").write_text(spec.replace("../initial_states/", f"{CONFIGS}/initial_states/"))
    assert register(tmp_path / "arm-place.yaml", store=store).version.ref == "arm-place@2"  # now current
    revised = check_chain(path, store=store, method="sim")
    assert runs["n"] == 2 and not revised.reused
    assert revised.to_dict()["handoffs"][1]["to"] == "arm-place@2"
    pinned = write_chain(tmp_path, "reach-place", ["arm-reach-tray", "arm-place@1"], start=HOME, episodes=60)
    assert check_chain(pinned, store=store, method="sim").reused and runs["n"] == 2  # same identities as the first


def test_new_option_models_run_auto_again(tmp_path, store, runs):
    path = _chain(tmp_path)
    check_chain(path, store=store)
    assert check_chain(path, store=store).reused
    store.attach_artifact("arm-place@1", "option-models", {"models.json": b"{}"}, task={"env": "kinetome/BenchArm-v0"})
    assert not check_chain(path, store=store).reused and runs["n"] == 2


def test_spec_file_chains_are_not_stored(tmp_path, store, runs):
    path = write_chain(tmp_path, "files", [str(SKILLS / "arm-reach-tray.yaml"), str(SKILLS / "arm-place.yaml")], start=HOME, episodes=60)
    first = check_chain(path, store=store, method="sim")
    again = check_chain(path, store=store, method="sim")
    assert runs["n"] == 2 and first.stored is None and not again.reused
    assert store.artifacts("arm-reach-tray@1", kind="check-result") == []


def test_cli_says_reused_and_fresh_runs(tmp_path, store, capsys):
    from kinetome.library.cli.main import main

    path = str(_chain(tmp_path))
    args = ["--store", str(store.root), "check", path, "--method", "sim"]
    code = main(args + ["--json"])
    first = json.loads(capsys.readouterr().out)
    assert first["stored"]["reused"] is False
    assert main(args) == code
    out = capsys.readouterr().out
    assert out.startswith("reused: the stored result arm-reach-tray@1/check-result#1")
    assert main(args + ["--json", "--fresh"]) == code
    fresh = json.loads(capsys.readouterr().out)
    assert fresh["stored"]["reused"] is False and fresh["stored"]["artifact"] == "arm-reach-tray@1/check-result#2"
    assert main(args + ["--out", str(tmp_path / "report")]) == code
    assert "reused" in capsys.readouterr().out and (tmp_path / "report" / "PLOTS.txt").exists()
    assert json.loads((tmp_path / "report" / "result.json").read_text())["stored"]["reused"] is True
