"""Rendering: offscreen frames of the right size that show something, and PNG filmstrips."""

from __future__ import annotations

import io

import numpy as np
import pytest
from PIL import Image

from kinetome.envs.bench_arm import build_bench_arm
from kinetome.envs.render import RENDERER_LABELS, filmstrip_png, render_frames
from kinetome.envs.rig_env import RigEnv
from kinetome.envs.test_walker import build_test_walker


@pytest.fixture(scope="module")
def arm():
    return build_bench_arm()


def _not_blank(frame):
    return frame.std() > 1.0 and len(np.unique(frame.reshape(-1, 3), axis=0)) > 10


@pytest.mark.parametrize("renderer", [None, "matplotlib"])
def test_frames_have_the_requested_size_and_are_not_blank(arm, renderer):
    qpos = arm.model.key_qpos[:2]
    frames = render_frames(arm, qpos, width=160, height=120, renderer=renderer)
    assert len(frames) == 2 and frames.renderer in RENDERER_LABELS
    assert renderer is None or frames.renderer == renderer
    for f in frames:
        assert f.shape == (120, 160, 3) and f.dtype == np.uint8
        assert _not_blank(f)
    # Different poses give different pictures.
    assert np.abs(frames[0].astype(int) - frames[1].astype(int)).sum() > 0


@pytest.mark.parametrize("renderer", [None, "matplotlib"])
def test_walker_tracking_camera_and_nan_padding_is_skipped(renderer):
    walker = build_test_walker()
    q = np.tile(walker.model.key_qpos[0], (3, 1))
    q[2] = np.nan
    frames = render_frames(walker, q, width=96, height=64, renderer=renderer)
    assert len(frames) == 2 and all(_not_blank(f) for f in frames)


def test_filmstrip_png_puts_frames_side_by_side(arm, tmp_path):
    frames = render_frames(arm, arm.model.key_qpos[:2], width=80, height=60)
    path = tmp_path / "strip.png"
    png = filmstrip_png(frames, path, gap=4)
    assert path.read_bytes() == png
    image = Image.open(io.BytesIO(png))
    assert image.size == (2 * 80 + 4, 60)
    np.testing.assert_array_equal(np.asarray(image)[:, :80], frames[0])
    assert filmstrip_png(frames, None) == png


def test_rig_env_renders_rgb_array(arm):
    env = RigEnv(arm, render_mode="rgb_array", width=64, height=48)
    env.reset(seed=0)
    frame = env.render()
    env.close()
    assert frame.shape == (48, 64, 3) and _not_blank(frame)


@pytest.mark.parametrize(
    "kwargs,pattern",
    [
        ({"width": 4000, "height": 100}, r"exceeds the model's offscreen buffer 1280 x 960"),
        ({"width": 0, "height": 10}, r"width and height must be >= 1"),
        ({"camera": "overhead"}, r"camera 'overhead' is not in the model; cameras: bench_view"),
        ({"renderer": "vulkan"}, r"renderer must be one of egl, osmesa, glfw, matplotlib, got 'vulkan'"),
    ],
)
def test_render_errors(arm, kwargs, pattern):
    opts = {"width": 32, "height": 24, **kwargs}
    with pytest.raises(ValueError, match=pattern):
        render_frames(arm, arm.model.key_qpos[:1], **opts)


def test_filmstrip_errors():
    with pytest.raises(ValueError, match=r"at least one frame"):
        filmstrip_png([], None)
    with pytest.raises(ValueError, match=r"same shape"):
        filmstrip_png([np.zeros((2, 2, 3), np.uint8), np.zeros((3, 2, 3), np.uint8)], None)
