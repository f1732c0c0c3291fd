"""Frames of rig poses and PNG filmstrips, with or without OpenGL.

``open_renderer`` draws with MuJoCo's OpenGL renderer when a backend works on
this machine (EGL, then OSMesa; see ``render_backend``) and otherwise with the
matplotlib sketch of MuJoCo's own geoms (``render_sketch``). Nothing here loads
a GL library or changes the environment at import; only opening a renderer does.
"""

from __future__ import annotations

import io
import warnings
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Iterator, Protocol, Sequence

import mujoco
import numpy as np

from .render_backend import RENDERER_LABELS, SKETCH, choose_backend, gl_context_for
from .render_sketch import SketchRenderer

__all__ = ["FrameRenderer", "RenderedFrames", "open_renderer", "render_frames", "filmstrip_png", "RENDERER_LABELS"]


class FrameRenderer(Protocol):
    """Draws RGB frames of one model from one camera; ``name`` says how (a key of RENDERER_LABELS)."""

    name: str

    def draw(self, data: mujoco.MjData) -> np.ndarray: ...

    def close(self) -> None: ...


class _GLRenderer:
    """MuJoCo's OpenGL renderer through one backend."""

    def __init__(self, model: mujoco.MjModel, *, width: int, height: int, camera: str | int, backend: str):
        with gl_context_for(backend):
            self._renderer = mujoco.Renderer(model, height=height, width=width)
        self.name = backend
        self._camera = camera

    def draw(self, data: mujoco.MjData) -> np.ndarray:
        self._renderer.update_scene(data, camera=self._camera)
        return self._renderer.render().copy()

    def close(self) -> None:
        self._renderer.close()


def open_renderer(
    model: mujoco.MjModel, *, width: int, height: int, camera: str | int = -1, backend: str | None = None
) -> FrameRenderer:
    """A renderer for ``model``: ``backend`` ('egl', 'osmesa', 'glfw' or 'matplotlib'), else the best one here.

    When the chosen OpenGL backend cannot be opened in this process, warns and
    falls back to the matplotlib sketch.
    """
    backend = backend or choose_backend()
    if backend not in RENDERER_LABELS:
        raise ValueError(f"renderer must be one of {', '.join(RENDERER_LABELS)}, got {backend!r}")
    if backend != SKETCH:
        try:
            return _GLRenderer(model, width=width, height=height, camera=camera, backend=backend)
        except Exception as exc:  # GL libraries fail in many ways (ImportError, RuntimeError, OSError, ...)
            first_line = (str(exc).splitlines() or [type(exc).__name__])[0]
            warnings.warn(f"OpenGL backend {backend} failed ({first_line}); drawing matplotlib sketches instead", stacklevel=2)
    return SketchRenderer(model, width=width, height=height, camera=camera)


@dataclass(frozen=True)
class RenderedFrames:
    """Frames (each (height, width, 3) uint8) and the renderer that drew them (a key of RENDERER_LABELS)."""

    images: tuple[np.ndarray, ...]
    renderer: str

    def __len__(self) -> int:
        return len(self.images)

    def __iter__(self) -> Iterator[np.ndarray]:
        return iter(self.images)

    def __getitem__(self, i: int) -> np.ndarray:
        return self.images[i]


def render_frames(
    rig: Any,
    qpos_seq: Sequence[np.ndarray] | np.ndarray,
    *,
    width: int = 320,
    height: int = 240,
    camera: str | int | None = None,
    renderer: str | None = None,
) -> RenderedFrames:
    """RGB frames (height, width, 3) uint8, one per qpos row, from ``camera``
    (default: the rig's ``metadata['camera']``, else the free camera), drawn by
    ``renderer`` (default: the best one here, see ``open_renderer``).

    Each frame: set qpos (qvel zero), ``mj_forward``, draw. Rows that are all
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
    drawer = open_renderer(model, width=width, height=height, camera=cam, backend=renderer)
    try:
        for qpos in qpos_seq:
            if np.all(np.isnan(qpos)):
                continue
            data.qpos[:] = qpos
            data.qvel[:] = 0.0
            mujoco.mj_forward(model, data)
            frames.append(drawer.draw(data))
    finally:
        drawer.close()
    return RenderedFrames(tuple(frames), drawer.name)


def filmstrip_png(frames: Sequence[np.ndarray], path: str | Path | None = None, *, gap: int = 4, footer: str | None = None) -> bytes:
    """Frames side by side (``gap`` white pixels between) as PNG bytes; also written to ``path`` if given.

    ``footer`` is drawn in a white band under the frames and stored as the PNG's
    ``Caution`` text chunk (kinetome passes its one-line caution).
    """
    from PIL import Image, ImageDraw
    from PIL.PngImagePlugin import PngInfo

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
    image, info = Image.fromarray(strip), PngInfo()
    if footer:
        band = Image.new("RGB", (image.width, image.height + 16), "white")
        band.paste(image, (0, 0))
        ImageDraw.Draw(band).text((4, image.height + 2), footer, fill=(60, 60, 60))
        image = band
        info.add_text("Caution", footer)
    buf = io.BytesIO()
    image.save(buf, format="PNG", pnginfo=info)
    png = buf.getvalue()
    if path is not None:
        Path(path).write_bytes(png)
    return png
