"""Offscreen rendering of rig poses: frames for a qpos sequence and PNG filmstrips.

Works without a display: if ``MUJOCO_GL`` is unset this module sets it to
``osmesa`` (software OpenGL) before mujoco is imported. MuJoCo picks its GL
backend when it is first imported; if that happened earlier with MUJOCO_GL
unset (so it chose GLFW, which needs a display) and there is no display, this
module switches mujoco's Renderer to the OSMesa context on import.
"""

from __future__ import annotations

import io
import os
import platform

if platform.system() == "Linux":
    os.environ.setdefault("MUJOCO_GL", "osmesa")

from pathlib import Path  # noqa: E402
from typing import Any, Sequence  # noqa: E402

import mujoco  # noqa: E402
import numpy as np  # noqa: E402

__all__ = ["render_frames", "filmstrip_png"]


def _offscreen_fallback() -> None:
    """Use OSMesa when mujoco already chose GLFW (MUJOCO_GL unset at its import) but no display exists."""
    if platform.system() != "Linux" or os.environ.get("DISPLAY") or os.environ.get("WAYLAND_DISPLAY"):
        return
    try:
        from mujoco.rendering.classic import gl_context
    except ImportError:
        return
    chosen = getattr(gl_context, "_MUJOCO_GL", "osmesa")
    if chosen not in ("", "glfw", "enable", "enabled", "on", "true", "1"):
        return  # the user picked a backend on purpose (osmesa, egl, ...): keep it
    try:
        from mujoco.osmesa import GLContext as OSMesaContext
    except ImportError:
        return  # PyOpenGL already bound to another platform: leave mujoco's choice alone
    gl_context.GLContext = OSMesaContext


_offscreen_fallback()


def render_frames(
    rig: Any,
    qpos_seq: Sequence[np.ndarray] | np.ndarray,
    *,
    width: int = 320,
    height: int = 240,
    camera: str | int | None = None,
) -> list[np.ndarray]:
    """RGB frames (height, width, 3) uint8, one per qpos row, from ``camera``
    (default: the rig's ``metadata['camera']``, else the free camera).

    Each frame: set qpos (qvel zero), ``mj_forward``, render. Rows that are all
    NaN (padding in traced rollouts) are skipped.
    """
    model = rig.model
    if width < 1 or height < 1:
        raise ValueError(f"width and height must be >= 1, got {width} x {height}")
    if width > model.vis.global_.offwidth or height > model.vis.global_.offheight:
        raise ValueError(
            f"frame {width} x {height} exceeds the model's offscreen buffer "
            f"{model.vis.global_.offwidth} x {model.vis.global_.offheight}; "
            f"raise <visual><global offwidth/offheight> in the MJCF or render smaller"
        )
    cam = rig.metadata.get("camera", -1) if camera is None else camera
    if isinstance(cam, str) and mujoco.mj_name2id(model, mujoco.mjtObj.mjOBJ_CAMERA, cam) < 0:
        names = [mujoco.mj_id2name(model, mujoco.mjtObj.mjOBJ_CAMERA, i) for i in range(model.ncam)]
        raise ValueError(f"camera {cam!r} is not in the model; cameras: {', '.join(map(str, names)) or '(none)'}")
    qpos_seq = np.atleast_2d(np.asarray(qpos_seq, dtype=np.float64))
    if qpos_seq.shape[1] != model.nq:
        raise ValueError(f"qpos rows must have nq={model.nq} entries, got {qpos_seq.shape[1]}")
    data = mujoco.MjData(model)
    frames = []
    renderer = mujoco.Renderer(model, height=height, width=width)
    try:
        for qpos in qpos_seq:
            if np.all(np.isnan(qpos)):
                continue
            data.qpos[:] = qpos
            data.qvel[:] = 0.0
            mujoco.mj_forward(model, data)
            renderer.update_scene(data, camera=cam)
            frames.append(renderer.render().copy())
    finally:
        renderer.close()
    return frames


def filmstrip_png(frames: Sequence[np.ndarray], path: str | Path | None = None, *, gap: int = 4) -> bytes:
    """Frames side by side (``gap`` white pixels between) as PNG bytes; also written to ``path`` if given."""
    from PIL import Image

    if not frames:
        raise ValueError("filmstrip needs at least one frame, got 0")
    shapes = {f.shape for f in frames}
    if len(shapes) != 1:
        raise ValueError(f"all frames must have the same shape, got {sorted(shapes)}")
    h, w = frames[0].shape[:2]
    strip = np.full((h, len(frames) * w + (len(frames) - 1) * gap, 3), 255, dtype=np.uint8)
    for i, frame in enumerate(frames):
        x = i * (w + gap)
        strip[:, x : x + w] = frame[..., :3]
    buf = io.BytesIO()
    Image.fromarray(strip).save(buf, format="PNG")
    png = buf.getvalue()
    if path is not None:
        Path(path).write_bytes(png)
    return png
