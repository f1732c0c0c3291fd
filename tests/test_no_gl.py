"""README's first minute on a machine with no OpenGL at all: demo, register and check
run in a process whose GL libraries are hidden, finish cleanly and load no GL module."""

from __future__ import annotations

import json
import os
import subprocess
import sys
from pathlib import Path

import pytest

from tests.no_gl import gl_library_files, no_gl_unavailable_reason, run_without_gl

ROOT = Path(__file__).resolve().parents[1]
REASON = no_gl_unavailable_reason()
pytestmark = pytest.mark.skipif(REASON is not None, reason=str(REASON))

# Runs the CLI, then prints which GL-related modules ended up imported.
_CLI = (
    "import json, sys\n"
    "from kinetome.library.cli.main import main\n"
    "rc = main(sys.argv[1:])\n"
    "gl = sorted(m for m in sys.modules if m.split('.')[0] == 'OpenGL' or m in ('mujoco.egl', 'mujoco.osmesa'))\n"
    "print('GL-MODULES ' + json.dumps(gl))\n"
    "sys.exit(rc)\n"
)


def _env() -> dict[str, str]:
    return {k: v for k, v in os.environ.items() if k not in ("MUJOCO_GL", "PYOPENGL_PLATFORM")}


def _kinetome(tmp: Path, *args: str, timeout: float = 300) -> subprocess.CompletedProcess:
    done = run_without_gl([sys.executable, "-c", _CLI, *args], empty_file=tmp / "empty", timeout=timeout, env=_env())
    assert "Traceback" not in done.stderr + done.stdout, done.stderr[-3000:]
    assert done.returncode == 0, (done.returncode, done.stdout[-2000:], done.stderr[-2000:])
    return done


def _gl_modules(done: subprocess.CompletedProcess) -> list[str]:
    line = next(ln for ln in done.stdout.splitlines() if ln.startswith("GL-MODULES "))
    return json.loads(line.removeprefix("GL-MODULES "))


def test_the_namespace_really_hides_the_gl_libraries(tmp_path: Path) -> None:
    hidden = gl_library_files()
    assert hidden, "expected at least one GL library on this machine to hide"
    probe = "import ctypes, sys\ntry:\n    ctypes.CDLL(sys.argv[1])\nexcept OSError as e:\n    print('refused', e)\n"
    done = run_without_gl([sys.executable, "-c", probe, hidden[0]], empty_file=tmp_path / "empty", timeout=60, env=_env())
    assert done.stdout.startswith("refused"), done.stdout + done.stderr


def test_demo_register_and_check_without_any_gl(tmp_path: Path) -> None:
    out = tmp_path / "demo"
    demo = _kinetome(tmp_path, "demo", "--quick", "--out", str(out), timeout=600)
    summary = json.loads((out / "demo.json").read_text())
    assert summary["filmstrips"] and {s["renderer"] for s in summary["filmstrips"].values()} == {"matplotlib"}
    assert all(Path(s["path"]).stat().st_size > 1000 for s in summary["filmstrips"].values())
    assert "matplotlib sketch" in (out / "report.html").read_text()
    assert "rendered 3 filmstrips (matplotlib)" in demo.stdout

    store = tmp_path / "store"
    skills = [str(ROOT / "configs" / "skills" / f) for f in ("arm-lift.yaml", "walker-walk.yaml")]
    registered = _kinetome(tmp_path, "register", *skills, "--store", str(store))
    assert _gl_modules(registered) == []
    chain = ROOT / "configs" / "chains" / "arm-lift-reach-place.yaml"
    checked = _kinetome(tmp_path, "check", str(chain), "--store", str(out / "store"), "--episodes", "60")  # 59 clean episodes decide 0.95
    assert _gl_modules(checked) == []
    assert "composes" in checked.stdout
