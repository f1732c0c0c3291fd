"""Run a command where no OpenGL library can be loaded: a private mount namespace in which
an empty file is bound over every libGL*/libEGL*/libOSMesa*/libOpenGL* the loader knows.

Stronger than setting MUJOCO_GL: the files themselves are unreadable as libraries, as on
a machine that never had them. Needs Linux, root and util-linux's ``unshare``.
"""

from __future__ import annotations

import os
import re
import shutil
import subprocess
import sys
from pathlib import Path

__all__ = ["gl_library_files", "no_gl_unavailable_reason", "run_without_gl"]

_GL_NAME = re.compile(r"^lib(GL|EGL|OSMesa|OpenGL)[^/]*\.so")
_LIBRARY_DIRS = ("/lib", "/usr/lib", "/lib64", "/usr/lib64", "/usr/local/lib")


def gl_library_files() -> list[str]:
    """Real paths of every OpenGL-family shared library the dynamic loader could find."""
    found: set[str] = set()
    listing = subprocess.run(["ldconfig", "-p"], capture_output=True, text=True, check=False).stdout
    for line in listing.splitlines():
        name, _, path = line.strip().partition(" => ")
        if _GL_NAME.match(name.split(" ")[0]) and path:
            found.add(os.path.realpath(path))
    for top in _LIBRARY_DIRS:
        for path in Path(top).rglob("lib*.so*") if Path(top).is_dir() else ():
            if _GL_NAME.match(path.name) and path.exists():
                found.add(os.path.realpath(path))
    return sorted(p for p in found if os.path.isfile(p))


def no_gl_unavailable_reason() -> str | None:
    """Why this machine cannot hide its GL libraries, or None when it can."""
    if not sys.platform.startswith("linux"):
        return "hiding GL libraries needs a Linux mount namespace"
    if os.geteuid() != 0:
        return "hiding GL libraries needs root (mount namespace)"
    if shutil.which("unshare") is None:
        return "util-linux's unshare is not installed"
    probe = subprocess.run(["unshare", "--mount", "--propagation", "private", "true"], capture_output=True, check=False)
    if probe.returncode != 0:
        return f"unshare --mount is not allowed here: {probe.stderr.decode(errors='replace').strip()}"
    return None


def run_without_gl(argv: list[str], *, empty_file: Path, timeout: float, env: dict[str, str] | None = None):
    """``subprocess.run(argv)`` (text, captured) with every GL library replaced by ``empty_file``."""
    empty_file.write_bytes(b"")
    binds = "".join(f'mount --bind "$0" "{path}"\n' for path in gl_library_files())
    script = f"set -e\n{binds}exec \"$@\"\n"
    return subprocess.run(
        ["unshare", "--mount", "--propagation", "private", "sh", "-c", script, str(empty_file), *argv],
        capture_output=True,
        text=True,
        timeout=timeout,
        env=env,
        check=False,
    )
