"""Chain filmstrips: frames cover the whole chain, differ from each other, carry time and skill labels,
and handoff frames are marked."""

from __future__ import annotations

import numpy as np
from PIL import Image

from kinetome.envs.bench_arm import build_bench_arm
from kinetome.library.report.filmstrip import HANDOFF_COLOUR, label_frame, pick_frames, chain_filmstrip


def _episode() -> tuple[np.ndarray, np.ndarray]:
    """Skill 0 moves for 10 steps, skill 1 waits still for 50 steps then moves for 10; NaN padding after."""
    moving = np.linspace(0.0, 1.0, 10)[:, None] * np.ones((1, 3))
    still = np.ones((50, 3))
    moving_again = 1.0 + np.linspace(0.0, 0.5, 10)[:, None] * np.ones((1, 3))
    qpos = np.vstack([moving, still, moving_again, np.full((5, 3), np.nan)])
    segment = np.array([0] * 10 + [1] * 60 + [-1] * 5)
    return qpos, segment


def test_frames_cover_first_handoff_last_and_skip_the_wait() -> None:
    qpos, segment = _episode()
    picks = pick_frames(qpos, segment, 8)
    assert picks[0] == 0 and picks[-1] == 69 and 9 in picks  # 9: last step of skill 0, the handoff state
    waiting = [i for i in picks if 10 <= i < 59]
    assert len(waiting) <= 1  # one frame of the still wait, not many
    for a in picks:
        for b in picks:
            if a < b:
                assert np.max(np.abs(qpos[a] - qpos[b])) > 1e-3  # every frame differs from every other


def test_a_still_robot_gets_only_its_fixed_frames() -> None:
    qpos = np.zeros((30, 2))
    segment = np.zeros(30, dtype=int)
    assert pick_frames(qpos, segment, 8) == [0, 29]


def test_labels_and_handoff_border() -> None:
    image = np.full((60, 80, 3), 128, dtype=np.uint8)
    plain = label_frame(image, ["t = 0.10 s", "arm-lift@1"], handoff=False)
    marked = label_frame(image, ["t = 0.10 s", "a -> b"], handoff=True)
    assert plain.shape == image.shape
    assert (plain[:20] != 128).any() and (plain[40:, 20:60] == 128).all()  # text band on top, picture below
    assert tuple(marked[-1, 40]) == HANDOFF_COLOUR and tuple(plain[-1, 40]) != HANDOFF_COLOUR


def test_chain_filmstrip_writes_labelled_frames(tmp_path) -> None:
    arm = build_bench_arm()
    keys = arm.model.key_qpos[:2]
    qpos = np.vstack([np.linspace(keys[0], keys[1], 20), np.linspace(keys[1], keys[0], 20)])
    segment = np.array([0] * 20 + [1] * 20)
    strip = chain_filmstrip(arm, qpos, segment, ["a@1", "b@1"], tmp_path / "strip.png", count=5, width=80, height=60, renderer="matplotlib")
    frames = strip["frames"]
    assert strip["renderer"] == "matplotlib" and len(frames) == 5
    assert [f["handoff"] for f in frames].count("a@1 -> b@1") == 1
    assert frames[0]["skill"] == "a@1" and frames[-1]["skill"] == "b@1"
    assert frames[-1]["time_s"] == round(39 * arm.dt, 3)
    assert Image.open(strip["path"]).size[0] == 5 * 80 + 4 * 4
