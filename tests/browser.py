"""Headless Chromium for tests: dump a page's DOM after load and take a screenshot."""

from __future__ import annotations

import shutil
import subprocess
import tempfile
from pathlib import Path

__all__ = ["chromium_path", "render_page"]

_FLAGS = [
    "--headless",
    "--no-sandbox",
    "--disable-gpu",
    "--disable-quic",
    "--no-first-run",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
]


def chromium_path() -> str | None:
    return shutil.which("chromium") or shutil.which("chromium-browser") or shutil.which("google-chrome")


def render_page(page: Path, *, width: int = 1200, height: int = 2400) -> tuple[str, Path]:
    """(DOM after load, screenshot PNG path) of a local HTML file, in a fresh profile."""
    exe = chromium_path()
    assert exe is not None
    work = Path(tempfile.mkdtemp(prefix="kt-chromium-"))
    url = page.resolve().as_uri()
    common = [exe, *_FLAGS, f"--user-data-dir={work / 'profile'}"]
    dom = subprocess.run([*common, "--dump-dom", url], capture_output=True, text=True, timeout=120).stdout
    shot = work / "page.png"
    subprocess.run([*common, f"--screenshot={shot}", f"--window-size={width},{height}", url], capture_output=True, timeout=120)
    return dom, shot
