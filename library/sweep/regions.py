"""Valid-for regions stored on a version: read them back, test whether a task lies inside, and
the checker's warning when a chain's task lies outside a step's region.

Light: standard library only (``show`` stays fast). A task lies inside a region only when it is
exactly the task of an evaluated cell that passed (variant fields and disturbances equal up to
round-off): no interpolation between cells, no extrapolation beyond them.
"""

from __future__ import annotations

import json
from typing import Any, Mapping

from .axes import cell_disturbances, cell_variant_fields
from .region import same_task

__all__ = ["stored_regions", "region_contains", "region_warnings"]

SWEEP_KIND = "sweep"


def stored_regions(store: Any, ref: str) -> list[dict[str, Any]]:
    """Every distinct sweep stored on ``ref`` (newest per task and settings), newest first:
    ``{artifact, name, computed_on, own, env, region}``; ``own`` when it was computed on this version alone."""
    from ..evidence import RESULT_FILE

    version = store.get(ref)
    seen, out = set(), []
    for art in reversed(store.artifacts(version.ref, kind=SWEEP_KIND, all_revisions=True)):
        key = (art.task_json, art.settings_json, tuple(art.computed_on))
        if key in seen:
            continue
        seen.add(key)
        result = json.loads(store.read_artifact(art, RESULT_FILE))
        out.append({
            "artifact": art.ref, "name": result.get("name"), "computed_on": list(art.computed_on),
            "own": list(art.computed_on) == [version.identity], "env": result.get("env"),
            "target": result.get("target"), "region": result["region"],
        })
    return out


def region_contains(region: Mapping[str, Any], variant_fields: Mapping[str, Any], disturbances: Mapping[str, Any]) -> bool:
    """Whether the task (variant fields, disturbances mapping) is exactly a passing cell's task."""
    base = region["base_variant"]["fields"]
    for cell in region["cells"]:
        if same_task(cell_variant_fields(base, cell), _plain(variant_fields)) and \
                same_task(cell_disturbances(region["disturbances"], cell), dict(disturbances)):
            return True
    return False


def _plain(fields: Mapping[str, Any]) -> dict[str, Any]:
    return {k: list(v) if isinstance(v, tuple) else v for k, v in fields.items()}


def _describe(fields: Mapping[str, Any], disturbances: Mapping[str, Any], axes: list[str]) -> str:
    both = {**_plain(fields), **{k: v for k, v in disturbances.items() if k in axes}}
    shown = {k: both.get(k, "unset") for k in axes}
    return ", ".join(f"{k}={v:g}" if isinstance(v, (int, float)) and not isinstance(v, bool) else f"{k}={v}" for k, v in shown.items())


def region_warnings(store: Any, skills: list[Any], *, env: str, variant: Any, disturbances: Mapping[str, Any]) -> list[str]:
    """One warning per stored step whose own sweeps (on this env) all leave the chain's task outside
    their valid-for region; silent for steps without a stored sweep and for tasks inside one."""
    if store is None:
        return []
    fields = variant.fields_set() if variant is not None else {}
    out = []
    for skill in skills:
        try:
            regions = [r for r in stored_regions(store, skill.ref) if r["own"] and r["env"] == env]
        except Exception:  # a spec-file step, or a ref this store does not hold: no region to consult
            continue
        if not regions or any(region_contains(r["region"], fields, disturbances) for r in regions):
            continue
        r = regions[0]["region"]
        out.append(
            f"warning: {skill.ref} was swept ({regions[0]['artifact']}) and this chain's task "
            f"({getattr(variant, 'name', 'nominal')}: {_describe(fields, disturbances, r['axes'])}) is not one of the "
            f"{len(r['cells'])} cells of its valid-for region (success >= {r['require']:g}, {r['correction']} correction); "
            f"no interpolation between cells: sweep this task or check it here in simulation"
        )
    return out
