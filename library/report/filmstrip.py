"""Filmstrips of one chain episode: frames spread over the whole chain, each labelled
with its time and running skill, handoff frames marked.

Frames are chosen by motion, not by clock: the first and last state and the state at
each handoff are always shown; the others sit at equal steps of the distance the
robot's joints travelled, so a robot that waits shows one frame of the wait, not five.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import Any, Sequence

import numpy as np

__all__ = ["StripFrame", "pick_frames", "label_frame", "chain_filmstrip"]

HANDOFF_COLOUR = (230, 120, 20)
_SAME_POSE = 1e-3  # rad or m: frames closer than this in every coordinate look alike


@dataclass(frozen=True)
class StripFrame:
    """One frame: the traced step, its time, the skill running there, and the handoff it shows (if any)."""

    step: int
    time_s: float
    skill: str
    handoff: str | None = None


def _handoff_steps(segment: np.ndarray) -> list[int]:
    """Last step of each skill before the next one starts: the state the next skill starts from."""
    return [i - 1 for i in range(1, len(segment)) if segment[i] != segment[i - 1] and segment[i] >= 0 and i > 0]


def pick_frames(qpos: np.ndarray, segment: np.ndarray, count: int) -> list[int]:
    """Indices (ascending) of at most ``count`` traced steps to show (first, handoffs, last, then by motion).

    ``qpos`` (T, nq) with NaN rows as padding, ``segment`` (T,) skill index per step (-1 padding).
    """
    valid = np.flatnonzero((segment >= 0) & ~np.isnan(qpos).all(axis=1))
    if valid.size == 0:
        return []
    qpos, segment = qpos[: valid[-1] + 1], segment[: valid[-1] + 1]
    fixed = sorted({0, *_handoff_steps(segment), len(segment) - 1})
    chosen = set(fixed[: max(count, 1)])
    travelled = np.concatenate([[0.0], np.cumsum(np.linalg.norm(np.diff(qpos, axis=0), axis=1))])
    spare = count - len(chosen)
    if spare > 0 and travelled[-1] > _SAME_POSE:
        for target in np.linspace(0.0, travelled[-1], spare + 2)[1:-1]:
            candidate = int(np.searchsorted(travelled, target))
            if all(np.max(np.abs(qpos[candidate] - qpos[c])) > _SAME_POSE for c in chosen):
                chosen.add(candidate)
    return sorted(chosen)


def label_frame(image: np.ndarray, lines: Sequence[str], *, handoff: bool) -> np.ndarray:
    """``image`` with ``lines`` of text on a light band at the top; a coloured border on handoff frames."""
    from PIL import Image, ImageDraw, ImageFont

    picture = Image.fromarray(np.ascontiguousarray(image[..., :3]))
    draw = ImageDraw.Draw(picture, "RGBA")
    font = ImageFont.load_default()
    line_height = 12
    draw.rectangle((0, 0, picture.width, 4 + line_height * len(lines)), fill=(255, 255, 255, 200))
    for k, text in enumerate(lines):
        draw.text((4, 2 + line_height * k), text, fill=(20, 20, 20, 255), font=font)
    if handoff:
        for inset in range(4):
            draw.rectangle((inset, inset, picture.width - 1 - inset, picture.height - 1 - inset), outline=HANDOFF_COLOUR)
    return np.asarray(picture)


def chain_filmstrip(
    rig: Any,
    qpos: np.ndarray,
    segment: np.ndarray,
    skills: Sequence[str],
    path: str | Path,
    *,
    count: int = 8,
    width: int = 200,
    height: int = 150,
    renderer: str | None = None,
    footer: str | None = None,
) -> dict[str, Any]:
    """Render and label frames of one traced chain episode; write the strip PNG (with ``footer``) to ``path``.

    Returns {"path", "renderer", "frames": [StripFrame as dict, ...]}.
    """
    from kinetome.envs.render import filmstrip_png, render_frames

    picks = pick_frames(qpos, segment, count)
    handoffs = set(_handoff_steps(segment))
    frames = []
    for i in picks:
        running = skills[int(segment[i])]
        handoff = f"{running} -> {skills[int(segment[i + 1])]}" if i in handoffs else None
        frames.append(StripFrame(step=i, time_s=round(i * float(rig.dt), 3), skill=running, handoff=handoff))
    drawn = render_frames(rig, qpos[picks], width=width, height=height, camera=None, renderer=renderer)
    labelled = [
        label_frame(image, [f"t = {f.time_s:.2f} s", f.handoff or f.skill], handoff=f.handoff is not None)
        for image, f in zip(drawn, frames)
    ]
    filmstrip_png(labelled, path, footer=footer)
    return {"path": Path(path), "renderer": drawn.renderer, "frames": [f.__dict__ for f in frames]}
