"""Choose how frames are drawn: a MuJoCo OpenGL backend if one works here, else the sketch.

Nothing here runs at import. The first call of ``choose_backend`` tries each
OpenGL backend in a child process (EGL first: Mesa's EGL renders in software
with no display; then OSMesa), so a missing or broken GL library can never
crash this process, and remembers the first one that draws a frame. The chosen
backend is loaded into this process only when a GL renderer is opened, and
only for that call: the process environment and mujoco's own default context
are left as they were.

A user who sets ``MUJOCO_GL`` keeps that choice: ``egl``/``osmesa``/``glfw``/``glx``
is the only backend tried; ``disable`` (or ``off``, ``0``, ...) draws sketches.
"""

from __future__ import annotations

import contextlib
import importlib
import os
import platform
import subprocess
import sys
from typing import Any, Iterator

__all__ = [
    "SKETCH",
    "RENDERER_LABELS",
    "choose_backend",
    "gl_candidates",
    "probe_backend",
    "gl_context_for",
]

SKETCH = "matplotlib"
RENDERER_LABELS = {
    "egl": "MuJoCo OpenGL (EGL)",
    "osmesa": "MuJoCo OpenGL (OSMesa)",
    "glfw": "MuJoCo OpenGL (GLFW)",
    SKETCH: "matplotlib sketch of MuJoCo's geoms (no OpenGL backend loaded)",
}
_OFF = ("disable", "disabled", "off", "false", "0")
_PROBE_SECONDS = 60.0
# Draws one 8x8 frame of a one-sphere model with the backend named by MUJOCO_GL
# and prints the module of the context class mujoco picked (constant code, no user text).
_PROBE = (
    "import mujoco\n"
    "m = mujoco.MjModel.from_xml_string('<mujoco><worldbody><geom size=\"0.1\"/></worldbody></mujoco>')\n"
    "d = mujoco.MjData(m)\n"
    "mujoco.mj_forward(m, d)\n"
    "r = mujoco.Renderer(m, 8, 8)\n"
    "r.update_scene(d)\n"
    "assert r.render().shape == (8, 8, 3)\n"
    "r.close()\n"
    "print(mujoco.GLContext.__module__)\n"
)
_chosen: str | None = None


def gl_candidates() -> tuple[str, ...]:
    """OpenGL backends to try, in order: the user's ``MUJOCO_GL`` if set, else EGL then OSMesa."""
    wanted = os.environ.get("MUJOCO_GL", "").strip().lower()
    if wanted in _OFF:
        return ()
    if wanted:
        return (wanted,)
    return ("egl", "osmesa") if platform.system() == "Linux" else ("glfw",)


def probe_backend(backend: str) -> str | None:
    """The context mujoco used to render one frame in a child process with ``MUJOCO_GL=backend``
    (``egl``, ``osmesa``, ``glfw``), or None when that child could not render."""
    env = dict(os.environ, MUJOCO_GL=backend)
    if backend in ("egl", "osmesa"):
        env["PYOPENGL_PLATFORM"] = backend
    try:
        done = subprocess.run(
            [sys.executable, "-c", _PROBE], env=env, capture_output=True, text=True, timeout=_PROBE_SECONDS, check=False
        )
    except (OSError, subprocess.TimeoutExpired):
        return None
    if done.returncode != 0:
        return None
    drawn_by = done.stdout.strip().rsplit(".", 1)[-1]
    return drawn_by if drawn_by in RENDERER_LABELS else None


def choose_backend() -> str:
    """The first OpenGL backend that works here (probed once per process), else ``SKETCH``."""
    global _chosen
    if _chosen is None:
        drawn = (probe_backend(b) for b in gl_candidates())
        _chosen = next((b for b in drawn if b is not None), SKETCH)
    return _chosen


@contextlib.contextmanager
def gl_context_for(backend: str) -> Iterator[None]:
    """While inside, ``mujoco.Renderer`` creates its context with ``backend``.

    Raises ImportError when the backend cannot be loaded into this process
    (for example PyOpenGL was already bound to another platform).
    """
    from mujoco.rendering.classic import gl_context

    context_class = _context_class(backend, gl_context)
    previous = getattr(gl_context, "GLContext", None)
    gl_context.GLContext = context_class
    try:
        yield
    finally:
        gl_context.GLContext = previous


def _context_class(backend: str, gl_context: Any) -> type:
    current = getattr(gl_context, "GLContext", None)
    if current is not None and current.__module__ == f"mujoco.{backend}":
        return current
    saved = os.environ.get("PYOPENGL_PLATFORM")
    try:
        # mujoco.egl / mujoco.osmesa set PYOPENGL_PLATFORM when unset and PyOpenGL
        # reads it once, at its first import; restore the environment afterwards.
        module = importlib.import_module(f"mujoco.{backend}")
    except Exception as exc:  # a GL library that loads half-way raises AttributeError/OSError too
        raise ImportError(f"cannot load the {backend} OpenGL backend in this process: {exc}") from exc
    finally:
        if saved is None:
            os.environ.pop("PYOPENGL_PLATFORM", None)
        else:
            os.environ["PYOPENGL_PLATFORM"] = saved
    return module.GLContext
