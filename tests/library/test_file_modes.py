"""Everything kinetome writes for people (reports, curves, bundles, store blobs, checkpoints)
gets the user's umask: 0644 under umask 022, 0600 under 077, never a fixed 0600."""

from __future__ import annotations

import os
import stat
from pathlib import Path

import pytest

from kinetome.library.file_modes import current_umask
from kinetome.library.report.html import Report
from kinetome.library.store import Store
from kinetome.library.store.bundle import export_bundle
from kinetome.trainers.atomic import write_atomic

ROOT = Path(__file__).resolve().parents[2]


@pytest.fixture(params=[0o022, 0o077, 0o002], ids=["umask022", "umask077", "umask002"])
def umask(request):
    old = os.umask(request.param)
    yield request.param
    os.umask(old)


def _mode(path: Path) -> int:
    return stat.S_IMODE(path.stat().st_mode)


def test_current_umask_reads_without_changing_it(umask: int) -> None:
    assert current_umask() == umask
    assert current_umask() == umask


def test_atomic_writes_get_the_umask(tmp_path: Path, umask: int) -> None:
    write_atomic(tmp_path / "curve.csv", b"steps,return\n")
    assert _mode(tmp_path / "curve.csv") == 0o666 & ~umask


def test_reports_get_the_umask(tmp_path: Path, umask: int) -> None:
    path = Report(title="t", subtitle="s", caution="c").write(tmp_path / "report.html")
    assert _mode(path) == 0o666 & ~umask


def test_bundles_and_store_blobs_get_the_umask(tmp_path: Path, umask: int) -> None:
    from kinetome.library.api import register

    store = Store(tmp_path / "store")
    result = register(ROOT / "configs/skills/arm-lift.yaml", store=store)
    blobs = [p for p in (tmp_path / "store").rglob("*") if p.is_file() and "blobs" in p.parts]
    assert blobs and all(_mode(p) == 0o666 & ~umask for p in blobs)
    target = export_bundle(store, result.version.ref, tmp_path / "arm-lift.kinetome.tar.gz")
    assert _mode(Path(target)) == 0o666 & ~umask
