"""The store commands end to end, as a user runs them: add, list, show, history, diff,
verify, export/import, crash safety of `kinetome add`, and light imports."""

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


def test_add_list_show_history_diff(tmp_path, capsys) -> None:
    store = str(tmp_path / "store")
    code, out, _ = _cli(capsys, "--store", store, "add", str(REACH), str(LIFT))
    assert code == 0 and "arm-reach-tray@1  registered" in out
    code, out, _ = _cli(capsys, "--store", store, "add", str(REACH))
    assert code == 0 and "arm-reach-tray@1  unchanged" in out  # identical content: same version
    _cli(capsys, "--store", store, "add", str(_spec_variant(tmp_path, 5)))
    code, out, _ = _cli(capsys, "list", "--store", store, "--json")
    rows = {r["name"]: r for r in json.loads(out)}
    assert rows["arm-reach-tray"]["latest"] == "arm-reach-tray@2" and rows["arm-reach-tray"]["versions"] == 2
    code, out, _ = _cli(capsys, "--store", store, "show", "arm-reach-tray@1")
    assert code == 0 and "stops_when   norm(fingertip - target) < 0.02" in out and "setpoint" in out
    view = json.loads(_cli(capsys, "--store", store, "show", "arm-reach-tray", "--json")[1])
    assert view["ref"] == "arm-reach-tray@2" and view["parameters"]["kd"][2] == pytest.approx(0.305)
    code, out, _ = _cli(capsys, "--store", store, "history", "arm-reach-tray")
    assert "arm-reach-tray@1" in out and "arm-reach-tray@2" in out
    diff = json.loads(_cli(capsys, "--store", store, "diff", "arm-reach-tray@1", "arm-reach-tray@2", "--json")[1])
    fields = {c["field"] for c in diff["changes"]}
    assert "parameters.kd" in fields and "spec.controller.parameters.kd" in fields


def test_bad_spec_exit_2_every_problem_nothing_stored(tmp_path, capsys) -> None:
    store = str(tmp_path / "store")
    bad = tmp_path / "bad.yaml"
    bad.write_text(REACH.read_text().replace("stops_when:", "stop_when:").replace("max_steps: 150", "max_steps: 0"))
    code, out, err = _cli(capsys, "--store", store, "add", str(bad))
    assert code == 2
    lines = [l for l in err.splitlines() if l]
    assert any(f"{bad}:" in l and "unknown field 'stop_when'; did you mean 'stops_when'?" in l for l in lines)
    assert any("max_steps" in l for l in lines) and "Traceback" not in err
    code, out, _ = _cli(capsys, "--store", store, "list", "--json")
    assert json.loads(out) == []


def test_unknown_ref_is_a_clean_error(tmp_path, capsys) -> None:
    store = str(tmp_path / "store")
    _cli(capsys, "--store", store, "add", str(REACH))
    code, _, err = _cli(capsys, "--store", store, "show", "arm-reach-tray@7")
    assert code == 2 and "arm-reach-tray@7" in err and "Traceback" not in err


def test_verify_names_damaged_blob_and_versions(tmp_path, capsys) -> None:
    store = tmp_path / "store"
    _cli(capsys, "--store", str(store), "add", str(REACH))
    assert _cli(capsys, "--store", str(store), "verify")[0] == 0
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
    _cli(capsys, "--store", a, "add", str(REACH))
    code, out, _ = _cli(capsys, "--store", a, "export", "arm-reach-tray", "-o", str(tmp_path / "reach.bundle"))
    assert code == 0 and "ISO 12100" in out
    code, out, _ = _cli(capsys, "--store", b, "import", str(tmp_path / "reach.bundle"))
    assert code == 0 and "arm-reach-tray@1" in out
    assert json.loads(_cli(capsys, "--store", b, "show", "arm-reach-tray@1", "--json")[1])["reason"] == "imported"


@pytest.mark.parametrize("command", [["list"], ["show", "arm-lift"], ["history", "arm-lift"]])
def test_read_commands_do_not_import_heavy_libraries(tmp_path, capsys, command) -> None:
    store = str(tmp_path / "store")
    _cli(capsys, "--store", store, "add", str(LIFT))
    probe = (
        "import sys\nfrom kinetome.library.cli.main import main\n"
        f"code = main(['--store', {store!r}, *{command!r}])\n"
        "heavy = sorted({m.split('.')[0] for m in sys.modules} & {'torch', 'mujoco', 'z3', 'gymnasium'})\n"
        "print('HEAVY', heavy, code)\n"
    )
    out = subprocess.run([sys.executable, "-c", probe], capture_output=True, text=True, check=True).stdout
    assert "HEAVY [] 0" in out, out


def test_killed_add_leaves_no_partial_version(tmp_path) -> None:
    """`kinetome add` killed with SIGKILL at random moments, 30 times; the store stays whole."""
    store = tmp_path / "store"
    env = {**os.environ, "KINETOME_STORE": str(store)}
    exe = [sys.executable, "-m", "kinetome.library.cli.main"]
    subprocess.run([*exe, "add", str(REACH)], env=env, check=True, capture_output=True)  # warm caches
    rng = np.random.default_rng(2026)
    killed = 0
    for i in range(30):
        proc = subprocess.Popen([*exe, "add", str(_spec_variant(tmp_path, i))], env=env, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
        time.sleep(float(rng.uniform(0.05, 0.8)))  # seeded: spans import, validation and the write (add takes ~0.7 s)
        if proc.poll() is None:
            proc.send_signal(signal.SIGKILL)
            killed += 1
        proc.wait()
    assert killed >= 5, "the kills must land while add is running"
    verify = subprocess.run([*exe, "verify"], env=env, capture_output=True, text=True)
    assert verify.returncode == 0, verify.stdout + verify.stderr
    rows = json.loads(subprocess.run([*exe, "history", "arm-reach-tray", "--json"], env=env, capture_output=True, text=True, check=True).stdout)
    numbers = [int(r["ref"].split("@")[1]) for r in rows]
    assert numbers == list(range(1, len(numbers) + 1))  # gap-free
    for r in rows:  # every visible version is complete and readable
        shown = subprocess.run([*exe, "show", r["ref"], "--json"], env=env, capture_output=True, text=True)
        assert shown.returncode == 0 and json.loads(shown.stdout)["parameters"]
