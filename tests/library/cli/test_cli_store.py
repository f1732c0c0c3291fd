"""The store commands end to end, as a user runs them: register, list, show, lineage, diff,
verify, export/import, crash safety of `kinetome register`, light imports, old command names."""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest

from kinetome.library.cli.main import main

ROOT = Path(__file__).resolve().parents[3]
REACH = ROOT / "configs" / "skills" / "arm-reach-tray.yaml"
LIFT = ROOT / "configs" / "skills" / "arm-lift.yaml"


def _cli(capsys, *args: str) -> tuple[int, str, str]:
    code = main(list(args))
    out = capsys.readouterr()
    return code, out.out, out.err


def _spec_variant(tmp_path: Path, i: int) -> Path:
    text = REACH.read_text().replace("kd: [3.0, 2.0, 0.3]", f"kd: [3.0, 2.0, {0.3 + i * 0.001:.3f}]")
    path = tmp_path / f"reach-{i}.yaml"
    path.write_text(text)
    return path


def test_register_list_show_lineage_diff(tmp_path, capsys) -> None:
    store = str(tmp_path / "store")
    code, out, _ = _cli(capsys, "--store", store, "register", str(REACH), str(LIFT))
    assert code == 0 and "arm-reach-tray@1  registered" in out
    code, out, _ = _cli(capsys, "--store", store, "register", str(REACH), "--json")
    again = json.loads(out)
    assert code == 0 and again["schema"] == "kinetome.register/1"
    assert again["versions"] == [{"ref": "arm-reach-tray@1", "is_new": False, "reason": "registered", "spec": str(REACH)}]  # identical content: same version
    _cli(capsys, "--store", store, "register", str(_spec_variant(tmp_path, 5)))
    code, out, _ = _cli(capsys, "list", "--store", store, "--json")
    listed = json.loads(out)
    rows = {r["name"]: r for r in listed["skills"]}
    assert listed["schema"] == "kinetome.list/1"
    assert rows["arm-reach-tray"]["current"] == "arm-reach-tray@2" and rows["arm-reach-tray"]["versions"] == 2
    assert rows["arm-reach-tray"]["updated_at"].endswith("Z")
    code, out, _ = _cli(capsys, "--store", store, "show", "arm-reach-tray@1")
    assert code == 0 and "stops_when   norm(fingertip - target) < 0.02" in out and "setpoint" in out
    view = json.loads(_cli(capsys, "--store", store, "show", "arm-reach-tray", "--json")[1])
    assert view["ref"] == "arm-reach-tray@2" and view["parameters"]["kd"][2] == pytest.approx(0.305)
    assert view["schema"] == "kinetome.show/1" and view["created_at"].endswith("Z") and "settings" in view["spec"]["controller"]
    code, out, _ = _cli(capsys, "--store", store, "lineage", "arm-reach-tray")
    assert "arm-reach-tray@1" in out and "arm-reach-tray@2" in out
    lineage = json.loads(_cli(capsys, "--store", store, "lineage", "arm-reach-tray", "--json")[1])
    assert lineage["schema"] == "kinetome.lineage/1" and [v["ref"] for v in lineage["versions"]] == ["arm-reach-tray@1", "arm-reach-tray@2"]
    assert all(v["created_at"].endswith("Z") for v in lineage["versions"])
    diff = json.loads(_cli(capsys, "--store", store, "diff", "arm-reach-tray@1", "arm-reach-tray@2", "--json")[1])
    assert diff["schema"] == "kinetome.diff/1"
    fields = {c["field"] for c in diff["changes"]}
    assert "parameters.kd" in fields and "spec.controller.parameters.kd" in fields


def test_bad_spec_exit_2_every_problem_nothing_stored(tmp_path, capsys) -> None:
    store = str(tmp_path / "store")
    bad = tmp_path / "bad.yaml"
    bad.write_text(REACH.read_text().replace("stops_when:", "stop_when:").replace("max_steps: 150", "max_steps: 0"))
    code, out, err = _cli(capsys, "--store", store, "register", str(bad))
    assert code == 2
    lines = [l for l in err.splitlines() if l]
    assert any(f"{bad}:" in l and "unknown field 'stop_when'; did you mean 'stops_when'?" in l for l in lines)
    assert any("max_steps" in l for l in lines) and "Traceback" not in err
    code, out, _ = _cli(capsys, "--store", store, "list", "--json")
    assert json.loads(out)["skills"] == []


def test_unknown_ref_is_a_clean_error(tmp_path, capsys) -> None:
    store = str(tmp_path / "store")
    _cli(capsys, "--store", store, "register", str(REACH))
    code, _, err = _cli(capsys, "--store", store, "show", "arm-reach-tray@7")
    assert code == 2 and "arm-reach-tray@7" in err and "Traceback" not in err


def test_verify_names_damaged_blob_and_versions(tmp_path, capsys) -> None:
    store = tmp_path / "store"
    _cli(capsys, "--store", str(store), "register", str(REACH))
    assert _cli(capsys, "--store", str(store), "verify")[0] == 0
    assert json.loads(_cli(capsys, "--store", str(store), "verify", "--json")[1])["schema"] == "kinetome.verify/1"
    view = json.loads(_cli(capsys, "--store", str(store), "show", "arm-reach-tray@1", "--json")[1])
    digest = next(f["digest"] for f in view["files"] if f["role"] == "params.safetensors")
    blob = next(p for p in (store / "blobs").rglob(digest))
    data = bytearray(blob.read_bytes())
    data[len(data) // 2] ^= 0x01
    os.chmod(blob, 0o644)
    blob.write_bytes(bytes(data))
    code, out, _ = _cli(capsys, "--store", str(store), "verify")
    assert code == 1 and digest in out and "arm-reach-tray@1" in out


def test_export_import_round_trip_with_caution(tmp_path, capsys) -> None:
    a, b = str(tmp_path / "a"), str(tmp_path / "b")
    _cli(capsys, "--store", a, "register", str(REACH))
    code, out, _ = _cli(capsys, "--store", a, "export", "arm-reach-tray", "--out", str(tmp_path / "reach.bundle"))
    assert code == 0 and "ISO 12100" in out and "current editions" in out
    code, out, _ = _cli(capsys, "--store", b, "import", str(tmp_path / "reach.bundle"))
    assert code == 0 and "arm-reach-tray@1" in out
    assert "Notice from the bundle: Caution:" in out and "ISO 12100" in out  # the bundle's own notice
    imported = json.loads(_cli(capsys, "--store", str(tmp_path / "c"), "import", str(tmp_path / "reach.bundle"), "--json")[1])
    assert imported["schema"] == "kinetome.import/1" and imported["notice"].startswith("Caution:")
    assert [(v["ref"], v["origin"]["ref"], v["is_new"]) for v in imported["versions"]] == [("arm-reach-tray@1", "arm-reach-tray@1", True)]
    shown = json.loads(_cli(capsys, "--store", b, "show", "arm-reach-tray@1", "--json")[1])
    assert shown["reason"] == "registered" and shown["origin"]["ref"] == "arm-reach-tray@1"  # imports keep the reason


@pytest.mark.parametrize("command", [["list"], ["show", "arm-lift"], ["lineage", "arm-lift"], ["history", "arm-lift"]])
def test_read_commands_do_not_import_heavy_libraries(tmp_path, capsys, command) -> None:
    store = str(tmp_path / "store")
    _cli(capsys, "--store", store, "register", str(LIFT))
    probe = (
        "import sys\nfrom kinetome.library.cli.main import main\n"
        f"code = main(['--store', {store!r}, *{command!r}])\n"
        "heavy = sorted({m.split('.')[0] for m in sys.modules} & {'torch', 'mujoco', 'z3', 'gymnasium'})\n"
        "print('HEAVY', heavy, code)\n"
    )
    out = subprocess.run([sys.executable, "-c", probe], capture_output=True, text=True, check=True).stdout
    assert "HEAVY [] 0" in out, out


FAULT_POINTS = ("store.blob-before-rename", "store.blobs-written", "store.version-row-uncommitted")


@pytest.mark.parametrize("point", FAULT_POINTS)
def test_killed_register_leaves_no_partial_version(tmp_path, point) -> None:
    """`kinetome register` killed with SIGKILL inside the write (at an armed fault point); the store stays whole."""
    from kinetome.library.fault_points import FAULT_POINT_ENV

    store = tmp_path / "store"
    env = {**os.environ, "KINETOME_STORE": str(store)}
    exe = [sys.executable, "-m", "kinetome.library.cli.main"]
    subprocess.run([*exe, "register", str(REACH)], env=env, check=True, capture_output=True)
    ready = tmp_path / "ready"
    armed = {**env, FAULT_POINT_ENV: f"{point}@{ready}"}
    proc = subprocess.Popen([*exe, "register", str(_spec_variant(tmp_path, 1))], env=armed, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    deadline = time.monotonic() + 120
    while not ready.exists() and proc.poll() is None and time.monotonic() < deadline:
        time.sleep(0.02)
    assert ready.read_text() == point, "the write must reach the armed point"
    assert proc.poll() is None, "the process waits at the point to be killed"
    proc.send_signal(signal.SIGKILL)
    proc.wait()
    verify = subprocess.run([*exe, "verify"], env=env, capture_output=True, text=True)
    assert verify.returncode == 0, verify.stdout + verify.stderr
    assert _lineage_refs(exe, env) == ["arm-reach-tray@1"]  # nothing half-written is visible
    # the same register, not armed, completes and takes the next number
    done = subprocess.run([*exe, "register", str(_spec_variant(tmp_path, 1)), "--json"], env=env, capture_output=True, text=True, check=True)
    assert json.loads(done.stdout)["versions"][0]["is_new"]
    refs = _lineage_refs(exe, env)
    assert refs == ["arm-reach-tray@1", "arm-reach-tray@2"]
    for ref in refs:  # every visible version is complete and readable
        shown = subprocess.run([*exe, "show", ref, "--json"], env=env, capture_output=True, text=True)
        assert shown.returncode == 0 and json.loads(shown.stdout)["parameters"]


def _lineage_refs(exe: list[str], env: dict[str, str]) -> list[str]:
    out = subprocess.run([*exe, "lineage", "arm-reach-tray", "--json"], env=env, capture_output=True, text=True, check=True).stdout
    return [v["ref"] for v in json.loads(out)["versions"]]


def test_unarmed_fault_points_do_nothing(monkeypatch, tmp_path) -> None:
    from kinetome.library.fault_points import FAULT_POINT_ENV, fault_point

    monkeypatch.setenv(FAULT_POINT_ENV, f"another.point@{tmp_path / 'ready'}")
    started = time.monotonic()
    fault_point("store.blobs-written")
    monkeypatch.delenv(FAULT_POINT_ENV)
    fault_point("store.blobs-written")
    assert time.monotonic() - started < 1.0 and not (tmp_path / "ready").exists()


@pytest.mark.parametrize(
    "old, new, message",
    [
        (["add", str(REACH)], ["register", str(REACH)], "'kinetome add' is an old spelling; write 'kinetome register' instead"),
        (["history", "arm-reach-tray"], ["lineage", "arm-reach-tray"], "'kinetome history' is an old spelling; write 'kinetome lineage' instead"),
    ],
)
def test_old_command_names_still_work_with_one_warning(tmp_path, capsys, old, new, message) -> None:
    store = str(tmp_path / "store")
    _cli(capsys, "--store", store, "register", str(REACH))
    code_new, out_new, err_new = _cli(capsys, "--store", store, *new)
    code_old, out_old, err_old = _cli(capsys, "--store", store, *old)
    assert (code_old, out_old) == (code_new, out_new.replace("registered", "unchanged (identical content)") if new[0] == "register" else out_new)
    assert err_new == "" and err_old.splitlines() == [f"kinetome: warning: {message}"]
    help_text = _help(capsys)
    assert f"    {old[0]} " not in help_text and f"    {new[0]} " in help_text  # old names stay out of --help


def _help(capsys) -> str:
    with pytest.raises(SystemExit):
        main(["--help"])
    return capsys.readouterr().out


def test_export_old_output_option_still_works(tmp_path, capsys) -> None:
    store = str(tmp_path / "store")
    _cli(capsys, "--store", store, "register", str(REACH))
    code, _, err = _cli(capsys, "--store", store, "export", "arm-reach-tray", "-o", str(tmp_path / "a.tar"))
    assert code == 0 and (tmp_path / "a.tar").is_file() and "'-o' is an old spelling; write '--out' instead" in err


def test_version_option(capsys) -> None:
    from importlib.metadata import version

    with pytest.raises(SystemExit) as info:
        main(["--version"])
    assert info.value.code == 0 and capsys.readouterr().out.strip() == f"kinetome {version('kinetome')}"


def test_export_without_out_is_a_clean_error(tmp_path, capsys) -> None:
    store = str(tmp_path / "store")
    _cli(capsys, "--store", store, "register", str(REACH))
    code, _, err = _cli(capsys, "--store", store, "export", "arm-reach-tray")
    assert code == 2 and "export needs --out FILE" in err
