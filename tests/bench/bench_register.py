"""Benchmark: whole-process `kinetome register` of a PD spec against `python -c "import numpy, yaml, mujoco"`.

Run by hand (not collected by pytest):

    python tests/bench/bench_register.py [--runs 9] [--spec configs/skills/arm-lift.yaml]

Each round runs, as whole processes and interleaved so machine load hits both alike,
(a) `kinetome register SPEC --store <new empty folder>` (the console script beside this
Python) and (b) the baseline `python -c "import numpy, yaml, mujoco"`. One warm-up
round first writes the bytecode caches (PYTHONDONTWRITEBYTECODE is dropped from the
children's environment, as on a user's machine). Target: median(a) <= 2 x median(b).
Also reports whether the register process imported torch (it must not for PD and CPG specs).
Prints a markdown table.
"""

from __future__ import annotations

import argparse
import os
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
BASELINE = [sys.executable, "-c", "import numpy, yaml, mujoco"]
TORCH_PROBE = (
    "import sys\nfrom kinetome.library.cli.main import main\nmain(sys.argv[1:])\n"
    "print('TORCH', 'torch' in sys.modules)\n"
)


def _kinetome() -> list[str]:
    script = Path(sys.executable).with_name("kinetome")
    return [str(script)] if script.exists() else [shutil.which("kinetome") or "kinetome"]


def _timed(argv: list[str], env: dict[str, str]) -> float:
    start = time.perf_counter()
    subprocess.run(argv, env=env, check=True, stdout=subprocess.DEVNULL)
    return time.perf_counter() - start


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--runs", type=int, default=9, help="timed rounds (after one warm-up round)")
    parser.add_argument("--spec", default=str(ROOT / "configs" / "skills" / "arm-lift.yaml"), help="spec file to register")
    args = parser.parse_args()
    env = {k: v for k, v in os.environ.items() if k != "PYTHONDONTWRITEBYTECODE"}
    work = Path(tempfile.mkdtemp(prefix="kt-bench-register-"))
    adds, bases = [], []
    try:
        for i in range(args.runs + 1):
            add = _timed([*_kinetome(), "register", args.spec, "--store", str(work / f"store{i}")], env)
            base = _timed(BASELINE, env)
            if i:  # round 0 warms the bytecode caches
                adds.append(add)
                bases.append(base)
        probe = subprocess.run(
            [sys.executable, "-c", TORCH_PROBE, "register", args.spec, "--store", str(work / "probe")],
            env=env, capture_output=True, text=True, check=True,
        )
    finally:
        shutil.rmtree(work, ignore_errors=True)
    a, b = statistics.median(adds), statistics.median(bases)
    torch_loaded = "TORCH True" in probe.stdout
    print(f"| command | median s ({args.runs} runs) | ratio to baseline | target |")
    print("| --- | --- | --- | --- |")
    print(f"| `python -c \"import numpy, yaml, mujoco\"` | {b:.3f} | 1.00 | |")
    print(f"| `kinetome register {Path(args.spec).name}` | {a:.3f} | {a / b:.2f} | <= 2x {'met' if a <= 2 * b else 'MISSED'} |")
    print(f"\ntorch imported by add: {torch_loaded}")


if __name__ == "__main__":
    main()
