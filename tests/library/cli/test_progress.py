"""Progress: a tqdm bar on a terminal, plain lines at least every N seconds elsewhere, nothing when quiet."""

from __future__ import annotations

import io
import re
import subprocess
import sys
import time
from pathlib import Path

from kinetome.library.cli.progress import Progress, plain_line

ROOT = Path(__file__).resolve().parents[3]


class _Terminal(io.StringIO):
    def isatty(self) -> bool:
        return True


def test_plain_line_says_done_rate_and_time_left() -> None:
    assert plain_line("retrain", 4096, 20480, "env steps", 2.0) == (
        "retrain: 4,096/20,480 env steps (20.0%), 2,048 env steps/s, about 8 s left"
    )
    assert plain_line("run", 10, None, "steps", 0.5) == "run: 10 steps, 20 steps/s"
    assert plain_line("x", 100, 100, "steps", 1.0) == "x: 100/100 steps (100.0%), 100 steps/s"


def test_plain_lines_come_at_least_every_period_while_work_runs() -> None:
    out = io.StringIO()
    with Progress("job", total=1000, unit="steps", stream=out, every=0.05) as p:
        for done in range(0, 1001, 100):
            p.update(done)
            time.sleep(0.03)
    lines = out.getvalue().splitlines()
    beats = [ln for ln in lines if re.match(r"job: [\d,]+/1,000 steps \(\d+\.\d%\), [\d,]+ steps/s", ln)]
    assert len(beats) >= 3, lines
    assert lines[-1].startswith("job: finished in") and lines[-1].endswith("(1,000 steps)")
    assert "\r" not in out.getvalue()


def test_no_line_before_the_work_reports_in() -> None:
    out = io.StringIO()
    with Progress("static check", stream=out, every=0.02):
        time.sleep(0.1)
    assert out.getvalue() == ""


def test_terminal_gets_a_redrawn_bar() -> None:
    out = _Terminal()
    with Progress("train", total=50, unit="steps", stream=out) as p:
        p.update(25)
        p.update(50)
    text = out.getvalue()
    assert "\r" in text and "train" in text and "100%" in text


def test_quiet_writes_nothing_anywhere() -> None:
    for stream in (io.StringIO(), _Terminal()):
        with Progress("job", total=10, stream=stream, quiet=True, every=0.01) as p:
            p.update(5)
            time.sleep(0.05)
            p.update(10)
        assert stream.getvalue() == ""


def _run_cli(tmp_path: Path, *extra: str) -> subprocess.CompletedProcess:
    store = tmp_path / "store"
    exe = [sys.executable, "-m", "kinetome.library.cli.main"]
    subprocess.run([*exe, "register", str(ROOT / "configs/skills/arm-lift.yaml"), "--store", str(store)], check=True, capture_output=True)
    return subprocess.run([*exe, "run", "arm-lift", "--episodes", "20", "--store", str(store), *extra],
                          capture_output=True, text=True, timeout=300, check=True)


def test_cli_prints_a_plain_progress_line_when_piped(tmp_path: Path) -> None:
    done = _run_cli(tmp_path)
    assert re.search(r"run arm-lift \(20 episodes\): finished in \d+ s \([\d,]+ steps\)", done.stderr), done.stderr


def test_cli_quiet_prints_no_progress(tmp_path: Path) -> None:
    done = _run_cli(tmp_path, "--quiet")
    assert "finished in" not in done.stderr and "steps/s" not in done.stderr
    assert "success" in done.stdout
