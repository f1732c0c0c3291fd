"""Two retrains of the same skill at once on a PostgreSQL store: both children are stored, numbered
without a gap, with their records, and every promotion they make is in the audit log."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

from kinetome.library.store import Store

ROOT = Path(__file__).resolve().parents[3]
SPEC = ROOT / "configs" / "skills" / "arm-lift.yaml"
VARIANT = ROOT / "configs" / "variants" / "heavy_payload.yaml"
# the smallest run that still trains, tests promotion and refits option models
SMALL = "env_step_budget: 2048\nparallel_envs: 32\nsegment_steps: 64\neval_episodes: 16\n"


def test_two_concurrent_retrains_get_unique_gap_free_numbers(pg_url, tmp_path):
    url, blobs = pg_url(), str(tmp_path / "shared")
    exe = [sys.executable, "-m", "kinetome.library.cli.main", "--store", url, "--blobs", blobs]
    subprocess.run([*exe, "register", str(SPEC)], check=True, capture_output=True)
    config = tmp_path / "small.yaml"
    config.write_text(SMALL)
    runs = [
        subprocess.Popen(
            [*exe, "retrain", "arm-lift@1", "--variant", str(VARIANT), "--config", str(config), "--seed", str(seed),
             "--promotion-episodes", "16", "--out", str(tmp_path / f"run-{seed}"), "--quiet", "--json"],
            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
        )
        for seed in (0, 1)
    ]
    outputs = [p.communicate(timeout=900) for p in runs]
    assert all(p.returncode == 0 for p in runs), [err[-2000:] for _, err in outputs]
    with Store(url, create=False) as store:
        history = store.history("arm-lift")
        assert [v.number for v in history] == [1, 2, 3]
        assert {v.reason for v in history[1:]} == {"retrained"} and {v.parent for v in history[1:]} == {"arm-lift@1"}
        assert {v.meta["seed"] for v in history[1:]} == {0, 1}
        assert all("record.json" in v.roles for v in history[1:])
        log = store.audit_log("arm-lift")
        assert sorted(e.subject for e in log if e.action == "retrained") == ["arm-lift@2", "arm-lift@3"]
        promoted = [e for e in log if e.action in ("promoted", "rolled-back")]
        assert len(promoted) == len(store.current_history("arm-lift")) - 1  # each change after registering, once
        assert store.verify().ok
