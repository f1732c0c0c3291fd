"""Registering a structured spec needs numpy and MuJoCo only: no torch, even for semantic errors,
and the stored files are byte for byte what the torch-built controller would store."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest

from kinetome.library.api import spec_version_files, version_files
from kinetome.library.runtime.skill import skill_from_spec
from kinetome.library.spec_load import load_spec

ROOT = Path(__file__).resolve().parents[3]
SPECS = sorted((ROOT / "configs" / "skills").glob("*.yaml"))
# Runs the CLI in a fresh process, then prints the heavy modules it imported.
_CLI = (
    "import json, sys\n"
    "from kinetome.library.cli.main import main\n"
    "rc = main(sys.argv[1:])\n"
    "print('HEAVY ' + json.dumps(sorted({m.split('.')[0] for m in sys.modules} & {'torch', 'z3', 'OpenGL'})))\n"
    "sys.exit(rc)\n"
)


def _run(*args: str) -> tuple[int, list[str], str]:
    done = subprocess.run([sys.executable, "-c", _CLI, *args], capture_output=True, text=True, timeout=120, check=False)
    line = next(ln for ln in done.stdout.splitlines() if ln.startswith("HEAVY "))
    return done.returncode, json.loads(line.removeprefix("HEAVY ")), done.stderr


@pytest.mark.parametrize("spec", SPECS, ids=[p.stem for p in SPECS])
def test_spec_files_equal_the_torch_built_ones(spec: Path) -> None:
    skill = load_spec(spec)
    assert spec_version_files(skill) == version_files(skill_from_spec(skill))


def test_register_of_pd_and_cpg_specs_imports_no_torch(tmp_path: Path) -> None:
    pd, cpg = ROOT / "configs/skills/arm-lift.yaml", ROOT / "configs/skills/walker-walk.yaml"
    rc, heavy, err = _run("register", str(pd), str(cpg), "--store", str(tmp_path / "s"))
    assert rc == 0, err
    assert heavy == []


def test_semantic_errors_import_no_torch(tmp_path: Path) -> None:
    text = (ROOT / "configs/skills/arm-lift.yaml").read_text().replace("kp: [30.0, 20.0, 6.0]", "kp: [30.0, 20.0]")
    bad = tmp_path / "bad.yaml"
    bad.write_text(text)
    rc, heavy, err = _run("register", str(bad), "--store", str(tmp_path / "s"))
    assert rc == 2 and "controller.parameters.kp: must have shape (3,), got (2,)" in err
    assert heavy == []


def test_building_a_controller_still_uses_torch() -> None:
    # The yes-case beside the no-torch tests: running a skill builds the torch module.
    loaded = skill_from_spec(load_spec(ROOT / "configs/skills/arm-lift.yaml"))
    import torch

    assert isinstance(loaded.controller, torch.nn.Module)
