"""The matplotlib sketch draws MuJoCo's geoms where MuJoCo's camera sees them."""

from __future__ import annotations

import mujoco
import numpy as np
import pytest
from scipy.spatial import ConvexHull

from kinetome.envs.bench_arm import build_bench_arm
from kinetome.envs.render_backend import SKETCH, choose_backend
from kinetome.envs.render import render_frames
from kinetome.envs.render_sketch import SketchRenderer, convex_hull

# Four separated shapes in the x-z plane, seen side-on by a camera on -y, tilted as our robots' cameras are.
SHAPES_XML = """
<mujoco>
  <visual><global offwidth="320" offheight="240"/></visual>
  <worldbody>
    <camera name="side" pos="0 -2 0.3" xyaxes="1 0 0 0 0.2 1" fovy="45"/>
    <geom name="ball" type="sphere" pos="-0.45 0 0.45" size="0.08" rgba="1 0 0 1"/>
    <geom name="block" type="box" pos="0.4 0 0.45" euler="0 30 0" size="0.1 0.05 0.06" rgba="0 1 0 1"/>
    <geom name="rod" type="capsule" pos="-0.4 0 0.0" euler="0 60 0" size="0.04 0.12" rgba="0 0 1 1"/>
    <geom name="drum" type="cylinder" pos="0.45 0 -0.05" euler="90 0 0" size="0.09 0.05" rgba="1 1 0 1"/>
  </worldbody>
</mujoco>
"""
COLOURS = {"ball": (255, 0, 0), "block": (0, 255, 0), "rod": (0, 0, 255), "drum": (255, 255, 0)}


@pytest.fixture(scope="module")
def shapes():
    model = mujoco.MjModel.from_xml_string(SHAPES_XML)
    data = mujoco.MjData(model)
    mujoco.mj_forward(model, data)
    return model, data


def _pinhole_pixels(model, data, camera_id, points, width, height):
    """Closed-form pinhole projection from MuJoCo's camera pose and vertical field of view
    (MuJoCo XML reference, camera/fovy: vertical field of view in degrees; the camera
    looks along its -z axis with y up)."""
    rel = np.atleast_2d(points) - data.cam_xpos[camera_id]
    cam = rel @ data.cam_xmat[camera_id].reshape(3, 3)  # coordinates on the camera's x, y, z axes
    focal = (height / 2.0) / np.tan(np.deg2rad(model.cam_fovy[camera_id]) / 2.0)
    return np.stack([width / 2.0 + focal * cam[:, 0] / -cam[:, 2], height / 2.0 - focal * cam[:, 1] / -cam[:, 2]], axis=1)


def test_projection_matches_the_pinhole_camera_of_mujoco(shapes):
    model, data = shapes
    sketch = SketchRenderer(model, width=320, height=240, camera="side")
    camera = sketch.update(data)
    expected = _pinhole_pixels(model, data, 0, data.geom_xpos, 320, 240)
    np.testing.assert_allclose(camera.project(data.geom_xpos), expected, atol=1e-3)


def test_drawn_geom_centres_lie_within_one_pixel_of_geom_xpos(shapes):
    model, data = shapes
    frame = SketchRenderer(model, width=320, height=240, camera="side").draw(data, edges=False)
    expected = _pinhole_pixels(model, data, 0, data.geom_xpos, 320, 240)
    for name, colour in COLOURS.items():
        rows, cols = np.nonzero(np.all(np.abs(frame.astype(int) - colour) <= 8, axis=-1))
        assert len(rows) > 100, f"{name} is not drawn"
        centre = np.array([cols.mean() + 0.5, rows.mean() + 0.5])  # pixel (c, r) covers [c, c+1] x [r, r+1]
        gid = mujoco.mj_name2id(model, mujoco.mjtObj.mjOBJ_GEOM, name)
        assert np.linalg.norm(centre - expected[gid]) <= 1.0, (name, centre, expected[gid])


def test_a_geom_moved_out_of_view_is_not_drawn(shapes):
    model, data = shapes
    sketch = SketchRenderer(model, width=320, height=240, camera="side")
    before = {sketch._scene.geoms[i].objid for _, _, i in sketch.outlines(sketch.update(data))}
    assert before == {0, 1, 2, 3}
    moved = mujoco.MjData(model)
    mujoco.mj_forward(model, moved)
    moved.geom_xpos[0] = (0.0, -3.0, 0.3)  # behind the camera
    # mjv_updateScene reads geom_xpos from data: the ball is now behind the camera and dropped.
    outlines = sketch.outlines(sketch.update(moved))
    assert {sketch._scene.geoms[i].objid for _, _, i in outlines} == {1, 2, 3}


def test_convex_hull_matches_scipy():
    rng = np.random.default_rng(3)
    points = rng.normal(size=(200, 2))
    ours = convex_hull(points)
    theirs = points[ConvexHull(points).vertices]  # scipy.spatial.ConvexHull (Qhull), counter-clockwise in 2-D
    assert {tuple(p) for p in ours} == {tuple(p) for p in theirs}
    signed_area = 0.5 * np.sum(ours[:, 0] * np.roll(ours[:, 1], -1) - np.roll(ours[:, 0], -1) * ours[:, 1])
    assert signed_area > 0


def test_convex_hull_of_collinear_points_keeps_the_ends():
    hull = convex_hull(np.array([[0.0, 0.0], [1.0, 1.0], [2.0, 2.0]]))
    assert {tuple(p) for p in hull} == {(0.0, 0.0), (2.0, 2.0)}


@pytest.mark.skipif(choose_backend() == SKETCH, reason="no OpenGL backend on this machine to compare with")
def test_sketch_silhouette_agrees_with_opengl():
    arm = build_bench_arm()
    q = arm.model.key_qpos[:1]
    gl = render_frames(arm, q, width=240, height=180)[0].astype(int)
    sketch = render_frames(arm, q, width=240, height=180, renderer=SKETCH)[0].astype(int)
    # The arm's orange links: a channel test that ignores lighting (rgba 0.75 0.45 0.15 in the MJCF).
    def orange(f):
        return (f[..., 0] > f[..., 2] + 60) & (f[..., 0] > 90)

    a, b = orange(gl), orange(sketch)
    overlap = (a & b).sum() / (a | b).sum()
    assert overlap > 0.6, overlap
