"""Frames without OpenGL: MuJoCo's own scene geoms drawn as flat shapes with matplotlib.

``mujoco.mjv_updateScene`` needs no GL: it gives the geoms MuJoCo would draw
(pose, size, colour after materials, visibility groups) and the camera it would
draw them from. Each geom becomes the convex outline of its projected surface
points (box corners, capsule and sphere rims facing the camera, cylinder rims,
mesh vertices), painted far to near. Planes are clipped at the near plane.
Good for our planar robots seen side-on; no lighting, textures or shadows.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import mujoco
import numpy as np

__all__ = ["SketchCamera", "SketchRenderer", "convex_hull"]

_BACKGROUND = (0.86, 0.90, 0.95)
_RIM_POINTS = 48
_ROUND_POINTS = 256


@dataclass(frozen=True)
class SketchCamera:
    """A pinhole (or orthographic) camera in world coordinates, as MuJoCo's renderer would use it."""

    position: np.ndarray  # (3,)
    forward: np.ndarray  # (3,) unit
    up: np.ndarray  # (3,) unit
    half_height: float  # frustum half-height at distance `near` (orthographic: in world units)
    near: float
    orthographic: bool
    width: int
    height: int

    def depth(self, points: np.ndarray) -> np.ndarray:
        """Distance along the viewing axis, (n,)."""
        return (np.asarray(points) - self.position) @ self.forward

    def project(self, points: np.ndarray) -> np.ndarray:
        """Pixel coordinates (n, 2) of world points (n, 3): x right from the left edge, y down from the top."""
        rel = np.atleast_2d(points) - self.position
        right = np.cross(self.forward, self.up)
        x, y, z = rel @ right, rel @ self.up, rel @ self.forward
        scale = 1.0 if self.orthographic else self.near / z
        pixels_per_unit = (self.height / 2.0) / self.half_height
        return np.stack(
            [self.width / 2.0 + x * scale * pixels_per_unit, self.height / 2.0 - y * scale * pixels_per_unit], axis=1
        )


def convex_hull(points: np.ndarray) -> np.ndarray:
    """Corners (k, 2) of the convex hull of 2-D points, counter-clockwise (Andrew's monotone chain)."""
    pts = np.unique(np.asarray(points, dtype=np.float64), axis=0)
    if len(pts) < 3:
        return pts

    def half(seq: np.ndarray) -> list[np.ndarray]:
        out: list[np.ndarray] = []
        for p in seq:
            while len(out) >= 2 and _turn(out[-2], out[-1], p) <= 0:
                out.pop()
            out.append(p)
        return out

    lower, upper = half(pts), half(pts[::-1])
    return np.array(lower[:-1] + upper[:-1])


class SketchRenderer:
    """Draws frames of ``model`` at ``width`` x ``height`` from ``camera`` (name, id or -1 for the free camera)."""

    name = "matplotlib"

    def __init__(self, model: mujoco.MjModel, *, width: int, height: int, camera: str | int = -1):
        self.model = model
        self.width, self.height = int(width), int(height)
        self._scene = mujoco.MjvScene(model, maxgeom=max(1000, 2 * (model.ngeom + model.nsite)))
        self._camera = mujoco.MjvCamera()
        self._option = mujoco.MjvOption()
        self._perturb = mujoco.MjvPerturb()
        cam_id = mujoco.mj_name2id(model, mujoco.mjtObj.mjOBJ_CAMERA, camera) if isinstance(camera, str) else int(camera)
        if cam_id >= 0:
            self._camera.type = mujoco.mjtCamera.mjCAMERA_FIXED
            self._camera.fixedcamid = cam_id
        else:
            mujoco.mjv_defaultFreeCamera(model, self._camera)

    def update(self, data: mujoco.MjData) -> SketchCamera:
        """Fill the scene from ``data`` (after ``mj_forward``) and return the camera it is seen from."""
        mujoco.mjv_updateScene(
            self.model, data, self._option, self._perturb, self._camera, mujoco.mjtCatBit.mjCAT_ALL, self._scene
        )
        eye = mujoco.mjv_averageCamera(self._scene.camera[0], self._scene.camera[1])
        return SketchCamera(
            position=np.array(eye.pos, dtype=np.float64),
            forward=np.array(eye.forward, dtype=np.float64),
            up=np.array(eye.up, dtype=np.float64),
            half_height=float(eye.frustum_top - eye.frustum_bottom) / 2.0,
            near=float(eye.frustum_near),
            orthographic=bool(eye.orthographic),
            width=self.width,
            height=self.height,
        )

    def outlines(self, camera: SketchCamera) -> list[tuple[np.ndarray, np.ndarray, int]]:
        """(pixel outline (k, 2), rgba (4,), geom index in the scene) per visible geom, far to near."""
        shapes = []
        for i in range(self._scene.ngeom):
            geom = self._scene.geoms[i]
            if geom.rgba[3] <= 0.0:
                continue
            points = _surface_points(self.model, geom, camera)
            if points is None:
                continue
            points = _in_front(points, camera, is_plane=geom.type == mujoco.mjtGeom.mjGEOM_PLANE)
            if len(points) < 3:
                continue
            is_plane = geom.type == mujoco.mjtGeom.mjGEOM_PLANE
            rgba = np.array(geom.rgba, dtype=np.float64)
            if is_plane:  # floors are often white under a texture: shade them off the background
                rgba[:3] *= 0.85
            order = (not is_plane, -float(camera.depth(points).max()))
            shapes.append((order, convex_hull(camera.project(points)), rgba, i))
        shapes.sort(key=lambda s: s[0])
        return [(outline, rgba, i) for _, outline, rgba, i in shapes]

    def draw(self, data: mujoco.MjData, *, edges: bool = True) -> np.ndarray:
        """RGB frame (height, width, 3) uint8 of ``data`` (call ``mj_forward`` first)."""
        from matplotlib.figure import Figure
        from matplotlib.backends.backend_agg import FigureCanvasAgg
        from matplotlib.patches import Polygon

        camera = self.update(data)
        dpi = 100.0
        figure = Figure(figsize=(self.width / dpi, self.height / dpi), dpi=dpi, facecolor=_BACKGROUND)
        canvas = FigureCanvasAgg(figure)
        axes = figure.add_axes((0.0, 0.0, 1.0, 1.0))
        axes.set_xlim(0, self.width)
        axes.set_ylim(self.height, 0)
        axes.set_axis_off()
        for outline, rgba, _ in self.outlines(camera):
            edge = (*(rgba[:3] * 0.55), rgba[3]) if edges else "none"
            axes.add_patch(Polygon(outline, closed=True, facecolor=rgba, edgecolor=edge, linewidth=0.6 if edges else 0))
        canvas.draw()
        return np.asarray(canvas.buffer_rgba())[..., :3].copy()

    def close(self) -> None:
        """Nothing to free (kept for the renderer interface)."""


def _turn(a: np.ndarray, b: np.ndarray, c: np.ndarray) -> float:
    """z of (b - a) x (c - a): > 0 when a, b, c turn counter-clockwise."""
    return float((b[0] - a[0]) * (c[1] - a[1]) - (b[1] - a[1]) * (c[0] - a[0]))


def _surface_points(model: mujoco.MjModel, geom: Any, camera: SketchCamera) -> np.ndarray | None:
    """World points whose projected convex hull is the geom's outline, or None for kinds not drawn."""
    kind, size = geom.type, np.array(geom.size, dtype=np.float64)
    pos, mat = np.array(geom.pos, dtype=np.float64), np.array(geom.mat, dtype=np.float64).reshape(3, 3)
    axis = mat[:, 2]
    if kind == mujoco.mjtGeom.mjGEOM_SPHERE:
        return _facing_rim(pos, size[0], camera)
    if kind == mujoco.mjtGeom.mjGEOM_CAPSULE:
        ends = (pos + axis * size[2], pos - axis * size[2])
        return np.vstack([_facing_rim(end, size[0], camera) for end in ends])
    if kind == mujoco.mjtGeom.mjGEOM_CYLINDER:
        t = np.linspace(0.0, 2 * np.pi, _RIM_POINTS, endpoint=False)
        rim = np.stack([size[0] * np.cos(t), size[0] * np.sin(t), np.zeros_like(t)], axis=1)
        local = np.vstack([rim + [0, 0, size[2]], rim - [0, 0, size[2]]])
    elif kind == mujoco.mjtGeom.mjGEOM_BOX:
        local = np.array([[sx, sy, sz] for sx in (-1, 1) for sy in (-1, 1) for sz in (-1, 1)]) * size
    elif kind == mujoco.mjtGeom.mjGEOM_ELLIPSOID:
        local = _unit_sphere(_ROUND_POINTS) * size
    elif kind == mujoco.mjtGeom.mjGEOM_PLANE:
        half = np.where(size[:2] > 0, size[:2], camera.near * 1e4)
        local = np.array([[-half[0], -half[1], 0], [half[0], -half[1], 0], [half[0], half[1], 0], [-half[0], half[1], 0]])
    elif kind == mujoco.mjtGeom.mjGEOM_MESH and geom.dataid >= 0:
        mesh = geom.dataid // 2  # the scene stores 2 * mesh id (+1 for the convex hull)
        start, count = model.mesh_vertadr[mesh], model.mesh_vertnum[mesh]
        local = np.asarray(model.mesh_vert[start : start + count], dtype=np.float64)
    else:
        return None  # height fields, SDFs and decorations are not sketched
    return pos + local @ mat.T


def _facing_rim(centre: np.ndarray, radius: float, camera: SketchCamera) -> np.ndarray:
    """Circle of ``radius`` around ``centre`` at right angles to the line of sight: a sphere's outline."""
    sight = centre - camera.position if not camera.orthographic else camera.forward
    sight = sight / (np.linalg.norm(sight) or 1.0)
    a = np.cross(sight, camera.up)
    a = a / (np.linalg.norm(a) or 1.0)
    b = np.cross(a, sight)
    t = np.linspace(0.0, 2 * np.pi, _RIM_POINTS, endpoint=False)
    return centre + radius * (np.outer(np.cos(t), a) + np.outer(np.sin(t), b))


def _unit_sphere(n: int) -> np.ndarray:
    """``n`` points spread evenly over the unit sphere (Fibonacci lattice)."""
    k = np.arange(n) + 0.5
    z = 1.0 - 2.0 * k / n
    r = np.sqrt(1.0 - z * z)
    phi = np.pi * (1.0 + 5**0.5) * k
    return np.stack([r * np.cos(phi), r * np.sin(phi), z], axis=1)


def _in_front(points: np.ndarray, camera: SketchCamera, *, is_plane: bool) -> np.ndarray:
    """Points in front of the near plane; a plane's polygon is clipped there (Sutherland-Hodgman)."""
    depth = camera.depth(points)
    limit = camera.near * 1.01
    if not is_plane or camera.orthographic:
        return points[depth > limit] if not camera.orthographic else points
    kept = []
    for j in range(len(points)):
        p, q, dp, dq = points[j], points[(j + 1) % len(points)], depth[j], depth[(j + 1) % len(points)]
        if dp > limit:
            kept.append(p)
        if (dp > limit) != (dq > limit):
            kept.append(p + (q - p) * (limit - dp) / (dq - dp))
    return np.array(kept).reshape(-1, 3)
