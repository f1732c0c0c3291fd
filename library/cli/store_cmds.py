"""Store commands: add, list, show, history, diff, note, verify, export, import."""

from __future__ import annotations

import argparse
from typing import Any

from .output import print_json, print_table

__all__ = ["add_parsers"]


def _open_store(args: argparse.Namespace, *, create: bool = True):
    from ..store import Store, resolve_store_root

    return Store(resolve_store_root(getattr(args, "store", None)), create=create)


def add_parsers(sub: Any, common: argparse.ArgumentParser) -> None:
    p = sub.add_parser("add", parents=[common], help="register skills from YAML spec files")
    p.add_argument("specs", nargs="+", metavar="SPEC", help="skill spec YAML file(s)")
    p.add_argument("--json", action="store_true", help="machine-readable output")
    p.set_defaults(handler=_add)

    p = sub.add_parser("list", parents=[common], help="list stored skills and their latest versions")
    p.add_argument("--json", action="store_true")
    p.set_defaults(handler=_list)

    p = sub.add_parser("show", parents=[common], help="show one version: spec, parameters, lineage, models")
    p.add_argument("ref", metavar="NAME[@N]")
    p.add_argument("--json", action="store_true")
    p.set_defaults(handler=_show)

    p = sub.add_parser("history", parents=[common], help="every version of a skill with its lineage")
    p.add_argument("name", metavar="NAME")
    p.add_argument("--json", action="store_true")
    p.set_defaults(handler=_history)

    p = sub.add_parser("diff", parents=[common], help="compare two versions field by field")
    p.add_argument("old", metavar="NAME@N")
    p.add_argument("new", metavar="NAME@M")
    p.add_argument("--json", action="store_true")
    p.set_defaults(handler=_diff)

    p = sub.add_parser("note", parents=[common], help="append a note to a version")
    p.add_argument("ref", metavar="NAME[@N]")
    p.add_argument("text")
    p.set_defaults(handler=_note)

    p = sub.add_parser("verify", parents=[common], help="re-hash every stored blob; exit 1 if any is damaged")
    p.add_argument("--json", action="store_true")
    p.set_defaults(handler=_verify)

    p = sub.add_parser(
        "export",
        parents=[common],
        help="write a version and its lineage to one bundle file",
        description="Write a version with its lineage to a bundle. " + _caution(),
    )
    p.add_argument("ref", metavar="NAME[@N]")
    p.add_argument("-o", "--output", required=True, metavar="FILE")
    p.set_defaults(handler=_export)

    p = sub.add_parser("import", parents=[common], help="import a bundle (refuses unsafe or damaged archives)")
    p.add_argument("bundle", metavar="FILE")
    p.add_argument("--json", action="store_true")
    p.set_defaults(handler=_import)


def _caution() -> str:
    from ..safety import CAUTION

    return CAUTION


def _add(args: argparse.Namespace) -> int:
    from ..api import register_skill
    from ..errors import InvalidInputError

    store = _open_store(args)
    results, problems = [], []
    for path in args.specs:
        try:
            result = register_skill(path, store=store)
        except InvalidInputError as exc:
            problems.extend(exc.problems)
            continue
        results.append({"ref": result.version.ref, "created": result.created, "spec": path})
    if args.json:
        print_json({"added": results, "problems": [str(p) for p in problems]})
    else:
        for r in results:
            word = "registered" if r["created"] else "unchanged (identical content)"
            print(f"{r['ref']}  {word}  <- {r['spec']}")
    if problems:
        raise InvalidInputError(problems)
    return 0


def _list(args: argparse.Namespace) -> int:
    store = _open_store(args)
    rows = [
        {
            "name": s.name,
            "latest": s.latest_ref,
            "versions": s.count,
            "env": s.env,
            "updated": s.latest_created_at[:19].replace("T", " "),
            "description": (s.description or "")[:60],
        }
        for s in store.list_skills()
    ]
    if args.json:
        print_json(rows)
    elif not rows:
        print(f"no skills in {store.root}; register one with: kinetome add SPEC.yaml")
    else:
        print_table(rows, [("name", "NAME"), ("latest", "LATEST"), ("versions", "VERSIONS"), ("env", "ENV"), ("updated", "UPDATED (UTC)"), ("description", "DESCRIPTION")])
    return 0


def _version_view(store: Any, ref: str) -> dict[str, Any]:
    import json

    from ..runtime.files import PARAMS_FILE, SPEC_FILE

    v = store.get(ref)
    spec = json.loads(store.read_file(v, SPEC_FILE).decode("utf-8"))
    params = _read_params(store.read_file(v, PARAMS_FILE)) if PARAMS_FILE in v.roles else {}
    models = []
    for m in store.models(v.ref):
        meta = m.meta
        models.append({"ref": m.ref, "kind": m.kind, "revision": m.revision, "created_at": m.created_at, "errors": meta.get("errors", {}), "episodes": meta.get("episodes")})
    return {
        "ref": v.ref,
        "name": v.name,
        "number": v.number,
        "created_at": v.created_at,
        "reason": v.reason,
        "parent": v.parent,
        "meta": v.meta,
        "spec": spec,
        "parameters": params,
        "files": [{"role": f.role, "digest": f.digest, "size": f.size} for f in v.files],
        "notes": [{"text": n.text, "created_at": n.created_at} for n in store.notes(v.ref)],
        "models": models,
        "lineage": [x.ref for x in store.lineage(v.ref)],
    }


def _read_params(data: bytes) -> dict[str, list]:
    """Parameter values from safetensors bytes, standard library only (show stays fast)."""
    from ..safetensors_view import read_tensors

    return read_tensors(data)


def _fmt_value(value: Any) -> str:
    import json

    text = json.dumps(value)
    return text if len(text) <= 70 else text[:67] + "..."


def _show(args: argparse.Namespace) -> int:
    store = _open_store(args)
    view = _version_view(store, args.ref)
    if args.json:
        print_json(view)
        return 0
    spec = view["spec"]
    c = spec["controller"]
    lines = [
        f"{view['ref']}  ({view['reason']}{', from ' + view['parent'] if view['parent'] else ''}, {view['created_at'][:19].replace('T', ' ')} UTC)",
        f"  description  {spec.get('description') or '-'}",
        f"  env          {spec['env']}",
        f"  controller   {c['kind']}  options {_fmt_value(c.get('options', {}))}",
        f"  starts_when  {spec['starts_when']}",
        f"  stops_when   {spec['stops_when']}",
        f"  max_steps    {spec['max_steps']}",
    ]
    if spec.get("limits"):
        lines.append(f"  limits       {', '.join(f'{k}={v}' for k, v in spec['limits'].items())}")
    if spec.get("tags"):
        lines.append(f"  tags         {', '.join(spec['tags'])}")
    lines.append(f"  lineage      {' <- '.join(view['lineage'])}")
    meta = view["meta"]
    for key in ("variant", "seed", "steps", "metrics_before", "metrics_after"):
        if key in meta:
            lines.append(f"  {key:<12} {_fmt_value(meta[key])}")
    print("\n".join(lines))
    print("\nparameters")
    print_table([{"name": k, "value": _fmt_value(v)} for k, v in view["parameters"].items()], [("name", "NAME"), ("value", "VALUE")])
    print("\nfiles")
    print_table([{**f, "digest": f["digest"][:16]} for f in view["files"]], [("role", "ROLE"), ("digest", "SHA256 (prefix)"), ("size", "BYTES")])
    print("\noption models")
    if view["models"]:
        from ..model_headlines import headlines

        for m in view["models"]:
            print(f"  {m['ref']}  fitted from {m['episodes']} episodes")
            print_table(headlines(m["errors"]), [("check", "HELD-OUT CHECK"), ("value", "VALUE")])
    else:
        print(f"  none; fit them with: kinetome fit {view['ref']}")
    if view["notes"]:
        print("\nnotes")
        for n in view["notes"]:
            print(f"  {n['created_at'][:19].replace('T', ' ')}  {n['text']}")
    return 0


def _history(args: argparse.Namespace) -> int:
    store = _open_store(args)
    rows = []
    for v in store.history(args.name):
        meta = v.meta
        after = meta.get("metrics_after", {})
        rows.append(
            {
                "ref": v.ref,
                "reason": v.reason,
                "parent": v.parent,
                "created": v.created_at[:19].replace("T", " "),
                "variant": (meta.get("variant") or {}).get("name") if isinstance(meta.get("variant"), dict) else meta.get("variant"),
                "success": after.get("success_rate"),
            }
        )
    if args.json:
        print_json(rows)
    else:
        print_table(rows, [("ref", "VERSION"), ("reason", "REASON"), ("parent", "PARENT"), ("created", "CREATED (UTC)"), ("variant", "VARIANT"), ("success", "SUCCESS AFTER")])
    return 0


def _flatten(prefix: str, value: Any, out: dict[str, Any]) -> None:
    if isinstance(value, dict):
        for k, v in value.items():
            _flatten(f"{prefix}.{k}" if prefix else str(k), v, out)
    else:
        out[prefix] = value


def _diff(args: argparse.Namespace) -> int:
    store = _open_store(args)
    old, new = _version_view(store, args.old), _version_view(store, args.new)
    a: dict[str, Any] = {}
    b: dict[str, Any] = {}
    _flatten("", {"spec": old["spec"], "parameters": old["parameters"], "parent": old["parent"], "reason": old["reason"]}, a)
    _flatten("", {"spec": new["spec"], "parameters": new["parameters"], "parent": new["parent"], "reason": new["reason"]}, b)
    rows = [{"field": k, "old": a.get(k), "new": b.get(k)} for k in sorted(set(a) | set(b)) if a.get(k) != b.get(k)]
    if args.json:
        print_json({"old": old["ref"], "new": new["ref"], "changes": rows})
    elif not rows:
        print(f"{old['ref']} and {new['ref']} have identical specs and parameters")
    else:
        print_table([{**r, "old": _fmt_value(r["old"]), "new": _fmt_value(r["new"])} for r in rows], [("field", "FIELD"), ("old", old["ref"]), ("new", new["ref"])])
    return 0


def _note(args: argparse.Namespace) -> int:
    store = _open_store(args)
    store.add_note(args.ref, args.text)
    print(f"note added to {store.get(args.ref).ref}")
    return 0


def _verify(args: argparse.Namespace) -> int:
    store = _open_store(args, create=False)
    report = store.verify()
    if args.json:
        print_json(report.to_dict())
    else:
        print(report.format_text())
    return 0 if report.ok else 1


def _export(args: argparse.Namespace) -> int:
    from ..safety import CAUTION
    from ..store import export_bundle

    store = _open_store(args)
    path = export_bundle(store, args.ref, args.output)
    print(f"exported {store.get(args.ref).ref} with its lineage to {path}")
    print(CAUTION)
    return 0


def _import(args: argparse.Namespace) -> int:
    from ..store import import_bundle

    store = _open_store(args)
    versions = import_bundle(store, args.bundle)
    if args.json:
        print_json([v.ref for v in versions])
    else:
        for v in versions:
            print(f"imported {v.ref} (originally {v.meta.get('imported_from', {}).get('ref', '?') if isinstance(v.meta.get('imported_from'), dict) else v.meta.get('original_ref', '?')})")
    return 0
