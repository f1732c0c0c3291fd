"""Named state of a live gymnasium MuJoCo env, computed from its plain MjData (no added sensors).

``named_state_of(gymnasium.make("Hopper-v5"))`` gives the same names, shapes
and values as the rig's sensors would for the same simulation state, so
skills can be checked against gymnasium's own envs. gymnasium leaves
positions and contact forces in ``mjData`` one substep stale after a step;
the values here are current: they are read from a copy of the env's data
after ``mj_forward`` (the env itself is not touched).
"""

from __future__ import annotations

from functools import lru_cache
from typing import Any

import mujoco
import numpy as np

from ..named_state import StateLayout
from .gym_task import GymTask, asset_path, task_layout
from .robots import TASKS

__all__ = ["named_state_of", "layout_of", "layout_table", "gym_task", "live_values"]


def gym_task(env_id: str) -> GymTask:
    """The task declaration for a supported gymnasium env id."""
    try:
        return TASKS[env_id]
    except KeyError:
        raise KeyError(
            f"env id must be one of {', '.join(sorted(TASKS))}, got {env_id!r}; other gymnasium envs have no named state here"
        ) from None


@lru_cache(maxsize=None)
def _plain_model(asset: str) -> mujoco.MjModel:
    # gymnasium's own load path (MujocoEnv._initialize_simulation), without our sensors.
    import warnings

    with warnings.catch_warnings():
        warnings.filterwarnings("ignore", message=".*settotalmass.*")
        return mujoco.MjModel.from_xml_path(asset_path(asset))


def layout_of(env_id: str) -> StateLayout:
    """Named-state layout of a gymnasium env id (the same as ``make_rig(env_id).layout``)."""
    task = gym_task(env_id)
    return task_layout(task, _plain_model(task.asset))


def _bounds(values) -> str:
    if values is None:
        return "-"
    return "[" + ", ".join(f"{v:.4g}" for v in values) + "]"


def layout_table(env_id: str) -> str:
    """Markdown table of an env's named-state layout (the tables in ``envs/adapters/README.md``)."""
    task = gym_task(env_id)
    model = _plain_model(task.asset)
    dt = float(model.opt.timestep) * task.frame_skip
    lines = [
        f"### {env_id}",
        "",
        f"robot `{task.robot}`, frame skip {task.frame_skip}, env step {dt:g} s, {task.max_episode_steps} steps",
        "",
        "| name | shape | unit | meaning | low | high | derived |",
        "| --- | --- | --- | --- | --- | --- | --- |",
    ]
    for q in layout_of(env_id):
        shape = "()" if not q.shape else "(" + ", ".join(map(str, q.shape)) + ("," if len(q.shape) == 1 else "") + ")"
        lines.append(
            f"| `{q.name}` | {shape} | {q.unit} | {q.meaning} | {_bounds(q.low)} | {_bounds(q.high)} | "
            f"{'yes' if q.derived else 'no'} |"
        )
    return "\n".join(lines) + "\n"


def live_values(task: GymTask, model: mujoco.MjModel, data: mujoco.MjData) -> dict[str, np.ndarray]:
    """Named state of ``data`` (already forwarded) from MjData fields: name -> (1, *shape)."""
    values: dict[str, np.ndarray] = {}
    for named in task.quantities:
        shape = named.shape_in(model)
        if named.reading is not None:
            raw = named.reading.live(model, data)
        else:
            raw = named.derive(values)
        values[named.name] = np.asarray(raw, dtype=np.float64).reshape((1, *shape))
    return values


def _env_id_of(env: Any) -> str | None:
    for candidate in (env, getattr(env, "unwrapped", None)):
        spec = getattr(candidate, "spec", None)
        if spec is not None and getattr(spec, "id", None):
            return spec.id
    return None


def named_state_of(env: Any, *, env_id: str | None = None) -> dict[str, np.ndarray]:
    """Current named state of a live gymnasium MuJoCo env: name -> (1, *shape).

    ``env_id`` defaults to ``env.spec.id`` (set by ``gymnasium.make``); pass it
    for envs built by calling the class directly.
    """
    base = getattr(env, "unwrapped", env)
    model, data = getattr(base, "model", None), getattr(base, "data", None)
    if not isinstance(model, mujoco.MjModel) or not isinstance(data, mujoco.MjData):
        raise TypeError(
            f"env must be a gymnasium MuJoCo env with .unwrapped.model/.data, got {type(base).__name__}; "
            "make it with gymnasium.make('<Name>-v5')"
        )
    env_id = env_id or _env_id_of(env)
    if env_id is None:
        raise ValueError(f"cannot tell which env {type(base).__name__} is: it has no spec; pass env_id='Hopper-v5' etc.")
    task = gym_task(env_id)
    expected = _plain_model(task.asset)
    if (model.nq, model.nv, model.nu) != (expected.nq, expected.nv, expected.nu):
        raise ValueError(
            f"env {env_id} has nq, nv, nu = {(model.nq, model.nv, model.nu)}, but {task.asset} has "
            f"{(expected.nq, expected.nv, expected.nu)}; named_state_of supports the default asset only"
        )
    current = mujoco.MjData(model)
    mujoco.mj_copyData(current, model, data)
    mujoco.mj_forward(model, current)
    return live_values(task, model, current)
