"""Store commands: register, list, show, lineage, diff, note, verify, export, import, copy-store, store-settings."""

from __future__ import annotations

import argparse
from typing import Any

from ..output_schema import tagged
from .old_spellings import add_old_option, warn_old_command
from .output import print_json, print_table

__all__ = ["add_parsers"]

JSON_HELP = "print machine-readable JSON (with a schema field) instead of text"
SIGNING_KEY_HELP = "{what} with the team's shared key in FILE (HMAC-SHA256; default: the file named by $KINETOME_SIGNING_KEY_FILE)"


def _open_store(args: argparse.Namespace, *, create: bool = True, read_only: bool = False):
    from ..api import open_store

    return open_store(getattr(args, "store", None), blobs=getattr(args, "blobs", None), create=create, read_only=read_only)


def _register_parser(p: argparse.ArgumentParser, handler: Any) -> None:
    p.add_argument("specs", nargs="+", metavar="SPEC", help="skill spec YAML file(s), e.g. configs/skills/*.yaml")
    p.add_argument("--json", action="store_true", help=JSON_HELP)
    p.set_defaults(handler=handler)


def _lineage_parser(p: argparse.ArgumentParser, handler: Any) -> None:
    p.add_argument("name", metavar="NAME", help="skill name (every version of it is listed)")
    p.add_argument("--log", action="store_true", help="also list the audit log of the skill: who registered, retrained, promoted, rolled back or imported what, and when")
    p.add_argument("--json", action="store_true", help=JSON_HELP)
    p.set_defaults(handler=handler)


def add_parsers(sub: Any, common: argparse.ArgumentParser) -> None:
    _register_parser(sub.add_parser("register", parents=[common], help="store skills from YAML spec files as versions"), _register)
    _register_parser(sub.add_parser("add", parents=[common]), _add_old_name)  # old name, hidden

    p = sub.add_parser("list", parents=[common], help="list stored skills with their current (nominal) and newest versions")
    p.add_argument("--json", action="store_true", help=JSON_HELP)
    p.set_defaults(handler=_list)

    p = sub.add_parser("show", parents=[common], help="show one version: spec, parameters, lineage, models")
    p.add_argument("ref", metavar="NAME[@N]", help="a skill name (its current version) or one version name@N")
    p.add_argument("--json", action="store_true", help=JSON_HELP)
    p.set_defaults(handler=_show)

    _lineage_parser(sub.add_parser("lineage", parents=[common], help="every version of a skill: parent, reason, variant, success"), _lineage)
    _lineage_parser(sub.add_parser("history", parents=[common]), _history_old_name)  # old name, hidden

    p = sub.add_parser("diff", parents=[common], help="compare two versions field by field")
    p.add_argument("old", metavar="NAME@N", help="the version to compare from")
    p.add_argument("new", metavar="NAME@M", help="the version to compare to")
    p.add_argument("--json", action="store_true", help=JSON_HELP)
    p.set_defaults(handler=_diff)

    p = sub.add_parser("note", parents=[common], help="append a note to a version")
    p.add_argument("ref", metavar="NAME[@N]", help="the version to annotate (a name means its current version)")
    p.add_argument("text", help="the note, one argument (quote it)")
    p.set_defaults(handler=_note)

    p = sub.add_parser("verify", parents=[common], help="re-hash every stored blob; exit 1 if any is damaged")
    p.add_argument("--json", action="store_true", help=JSON_HELP)
    p.set_defaults(handler=_verify)

    p = sub.add_parser(
        "export",
        parents=[common],
        help="write a version and its lineage to one bundle file",
        description="Write a version with its lineage to a bundle. " + _caution(),
    )
    p.add_argument("ref", metavar="NAME[@N]", help="the version to export (its ancestors come with it)")
    p.add_argument("--out", metavar="FILE", help="bundle file to write (.tar or .tar.gz); required")
    add_old_option(p, "-o", "--out", dest="out")
    add_old_option(p, "--output", "--out", dest="out")
    p.add_argument("--signing-key", metavar="FILE", help=SIGNING_KEY_HELP.format(what="sign the bundle"))
    p.set_defaults(handler=_export)

    p = sub.add_parser("import", parents=[common], help="import a bundle (refuses unsafe or damaged archives)")
    p.add_argument("bundle", metavar="FILE", help="bundle written by kinetome export")
    p.add_argument("--renumber", action="store_true", help="store versions whose number is taken here under the next free number (identity and origin stay)")
    p.add_argument("--signing-key", metavar="FILE", help=SIGNING_KEY_HELP.format(what="check the bundle's signature"))
    p.add_argument("--json", action="store_true", help=JSON_HELP)
    p.set_defaults(handler=_import)

    p = sub.add_parser(
        "copy-store", parents=[common], help="copy the whole store (--store/--blobs) into another, empty store",
        description="Copy every version, file, artifact, note, current version and audit entry of the store named by "
        "--store/--blobs into an empty store, e.g. from a folder to a PostgreSQL database and back; both are verified after.",
    )
    p.add_argument("target", metavar="TARGET", help="the empty store to fill: a folder or a postgresql:// URL (no password in it)")
    p.add_argument("--target-blobs", metavar="BLOBS", help="where TARGET keeps its files: a folder or s3://bucket/prefix (needed for a new postgresql:// store)")
    p.add_argument("--json", action="store_true", help=JSON_HELP)
    p.set_defaults(handler=_copy_store)

    p = sub.add_parser(
        "store-settings", parents=[common], help="show or change the store's settings (whether imports must be signed)",
        description="Print the store's settings; with an option, change that setting first (recorded in the audit log).",
    )
    p.add_argument(
        "--require-signatures", choices=("on", "off"),
        help="on: import refuses bundles that are unsigned or not verified with the team's key; off: signatures are checked only when a key is given",
    )
    p.add_argument("--json", action="store_true", help=JSON_HELP)
    p.set_defaults(handler=_store_settings)


def _caution() -> str:
    from ..safety import CAUTION

    return CAUTION


def _register(args: argparse.Namespace) -> int:
    from ..api import register
    from ..errors import InvalidInputError

    # Each file is registered on its own: good files are stored, bad ones are reported
    # with every problem and stored nothing; the exit code is 2 when any file was refused.
    store = _open_store(args)
    results, problems, refused = [], [], []
    for path in args.specs:
        try:
            result = register(path, store=store)
        except InvalidInputError as exc:
            problems.extend(exc.problems)
            refused.append(path)
            continue
        results.append({"ref": result.version.ref, "is_new": result.is_new, "reason": result.version.reason, "spec": path})
    if args.json:
        print_json(tagged("register", {"versions": results, "refused": refused, "problems": [str(p) for p in problems]}))
    else:
        for r in results:
            word = r["reason"] if r["is_new"] else "unchanged (identical content)"
            print(f"{r['ref']}  {word}  <- {r['spec']}")
    if problems:
        if len(args.specs) > 1:
            problems.append(
                f"registered {len(results)} of {len(args.specs)} files; not stored: {', '.join(refused)} "
                "(each file is registered on its own: fix these and register them again)"
            )
        raise InvalidInputError(problems)
    return 0


def _add_old_name(args: argparse.Namespace) -> int:
    warn_old_command("add", "register")
    return _register(args)


def _list(args: argparse.Namespace) -> int:
    store = _open_store(args, read_only=True)
    rows = [
        {
            "name": s.name,
            "current": s.current_ref,
            "newest": s.latest_ref,
            "versions": s.count,
            "env": s.env,
            "updated_at": s.latest_created_at,
            "description": s.description or "",
        }
        for s in store.list_skills()
    ]
    if args.json:
        print_json(tagged("list", {"skills": rows}))
    elif not rows:
        print(f"no skills in {store.location}; register one with: kinetome register SPEC.yaml")
    else:
        table = [{**r, "updated_at": _when(r["updated_at"]), "description": r["description"][:60]} for r in rows]
        print_table(table, [("name", "NAME"), ("current", "CURRENT"), ("newest", "NEWEST"), ("versions", "VERSIONS"), ("env", "ENV"), ("updated_at", "UPDATED (UTC)"), ("description", "DESCRIPTION")])
    return 0


def _when(timestamp: str) -> str:
    """A stored ISO timestamp as ``YYYY-MM-DD HH:MM:SS``."""
    return timestamp[:19].replace("T", " ")


def _version_view(store: Any, ref: str) -> dict[str, Any]:
    import json

    from ..runtime.files import PARAMS_FILE, SPEC_FILE

    from ..renamed_keys import SPEC_RENAMES, rename_keys
    from ..stored_meta import current_meta
    from ..sweep.regions import stored_regions

    v = store.get(ref)
    spec, _ = rename_keys(json.loads(store.read_file(v, SPEC_FILE).decode("utf-8")), SPEC_RENAMES, source=f"{v.ref} spec", warn=False)
    params = _read_params(store.read_file(v, PARAMS_FILE)) if PARAMS_FILE in v.roles else {}
    models, artifacts = [], []
    for m in store.artifacts(v.ref):
        meta = m.meta
        artifacts.append({"ref": m.ref, "kind": m.kind, "revision": m.revision, "created_at": m.created_at, "digest": m.digest, "task": m.task, "settings": m.settings, "software": m.software})
        if m.kind == "option-models":
            models.append({"ref": m.ref, "kind": m.kind, "revision": m.revision, "created_at": m.created_at, "errors": _current_errors(meta.get("errors", {})), "episodes": meta.get("episodes")})
    return {
        "ref": v.ref,
        "name": v.name,
        "number": v.number,
        "identity": v.identity,
        "created_at": v.created_at,
        "reason": v.reason,
        "parent": v.parent,
        "parent_identity": v.parent_identity,
        "origin": v.origin,
        "current_for": store.current_tasks(v.ref),
        "meta": current_meta(v.meta),
        "artifacts": artifacts,
        "spec": spec,
        "parameters": params,
        "files": [{"role": f.role, "digest": f.digest, "size": f.size} for f in v.files],
        "notes": [{"text": n.text, "created_at": n.created_at} for n in store.notes(v.ref)],
        "models": models,
        "regions": stored_regions(store, v.ref),
        "lineage": [x.ref for x in store.lineage(v.ref)],
    }


def _current_errors(errors: dict[str, Any]) -> dict[str, Any]:
    """Held-out errors of option models under today's names (older fits read silently)."""
    from ..renamed_keys import DURATION_OUTPUT_RENAMES, OUTCOME_RENAMES

    out = dict(errors)
    if isinstance(out.get("duration"), dict):
        out["duration"] = {DURATION_OUTPUT_RENAMES.get(k, k): v for k, v in out["duration"].items()}
    if isinstance(out.get("outcomes"), dict):
        out["outcomes"] = {OUTCOME_RENAMES.get(k, k): v for k, v in out["outcomes"].items()}
    return out


def _read_params(data: bytes) -> dict[str, list]:
    """Parameter values from safetensors bytes, standard library only (show stays fast)."""
    from ..safetensors_view import read_tensors

    return read_tensors(data)


def _fmt_value(value: Any) -> str:
    import json

    text = json.dumps(value)
    return text if len(text) <= 70 else text[:67] + "..."


def _show(args: argparse.Namespace) -> int:
    from ..stored_meta import success_text

    store = _open_store(args, read_only=True)
    view = _version_view(store, args.ref)
    if args.json:
        print_json(tagged("show", view))
        return 0
    spec = view["spec"]
    c = spec["controller"]
    lines = [
        f"{view['ref']}  ({view['reason']}{', from ' + view['parent'] if view['parent'] else ''}, {_when(view['created_at'])} UTC)",
        f"  identity     {view['identity']}",
        f"  current for  {', '.join(view['current_for']) or '-'}",
        f"  description  {spec.get('description') or '-'}",
        f"  env          {spec['env']}",
        f"  controller   {c['kind']}  settings {_fmt_value(c.get('settings', {}))}",
        f"  starts_when  {spec['starts_when']}",
        f"  stops_when   {spec['stops_when']}",
        f"  max_steps    {spec['max_steps']}",
    ]
    if spec.get("limits"):
        lines.append(f"  limits       {', '.join(f'{k}={v}' for k, v in spec['limits'].items())}")
    if spec.get("tags"):
        lines.append(f"  tags         {', '.join(spec['tags'])}")
    lines.append(f"  lineage      {' <- '.join(view['lineage'])}")
    if view["origin"]:
        lines.append(f"  origin       {view['origin'].get('ref') or '?'} in store {view['origin'].get('store') or '(unknown)'}")
    lines.append(f"  pin          {view['name']}@id:{view['identity'][:16]} (the same version in every store)")
    meta = view["meta"]
    for key in ("method", "variant", "seed", "env_steps"):
        if key in meta:
            lines.append(f"  {key:<12} {_fmt_value(meta[key])}")
    for key, label in (("metrics_before", "before"), ("metrics_after", "after")):
        if key in meta:
            lines.append(f"  {label:<12} success {success_text(meta[key])}, mean return {meta[key]['mean_return']:.4g}, mean duration {meta[key]['mean_duration']:.4g} steps")
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
    _print_regions(view)
    if view["notes"]:
        print("\nnotes")
        for n in view["notes"]:
            print(f"  {_when(n['created_at'])}  {n['text']}")
    return 0


def _print_regions(view: dict[str, Any]) -> None:
    """The valid-for regions of the version's stored sweeps (kinetome sweep), newest first."""
    from ..sweep.text import format_region

    print("\nvalid-for regions")
    if not view["regions"]:
        print(f"  none; map one with: kinetome sweep {view['ref']} --axis payload_mass=0.2,0.6,1.0")
        return
    for r in view["regions"]:
        target = r.get("target") or {}
        what = "this version" if r["own"] else f"{target.get('kind', 'chain')} {target.get('label')} ({', '.join(target.get('skills', []))})"
        print(f"  {r['artifact']}  sweep {r['name']} of {what} on {r['env']}")
        print("\n".join(format_region(r["region"], indent="    ")))


def _lineage(args: argparse.Namespace) -> int:
    from ..lineage.view import lineage_view

    store = _open_store(args)
    view = lineage_view(store, args.name)
    if args.json:
        if getattr(args, "log", False):
            view["log"] = _log_entries(store, args.name)
        print_json(tagged("lineage", view))
        return 0
    rows = [
        {**v, "identity": v["identity"][:12], "created_at": _when(v["created_at"]), "current_for": ", ".join(v["current_for"]) or None}
        for v in view["versions"]
    ]
    print_table(rows, [("ref", "VERSION"), ("identity", "IDENTITY"), ("reason", "REASON"), ("method", "METHOD"), ("parent", "PARENT"), ("created_at", "CREATED (UTC)"), ("task", "TASK"), ("success_on_task", "SUCCESS ON TASK"), ("current_for", "CURRENT FOR")])
    print("\ncurrent versions")
    if view["current"]:
        print_table(view["current"], [("task", "TASK"), ("version", "VERSION"), ("why", "WHY")])
    else:
        print(f"  none set: unpinned references resolve to the newest version; set one with kinetome promote {args.name}@N")
    if len(view["changes"]) > len(view["current"]):
        print(f"\n{len(view['changes'])} changes of current versions; see them with --json (changes) or --log")
    if getattr(args, "log", False):
        _print_log(store, args.name)
    return 0


def _log_entries(store: Any, name: str) -> list[dict[str, Any]]:
    return [e.to_dict() for e in store.audit_log(name)]


def _print_log(store: Any, name: str) -> None:
    entries = _log_entries(store, name)
    print("\naudit log")
    if not entries:
        print("  empty: nothing was recorded for this skill (stores made before the audit log start it empty)")
        return
    rows = [{**e, "created_at": _when(e["created_at"]), "detail": _log_detail(e["detail"])} for e in entries]
    print_table(rows, [("seq", "#"), ("created_at", "WHEN (UTC)"), ("actor", "WHO"), ("action", "ACTION"), ("subject", "WHAT"), ("detail", "DETAIL")])


def _log_detail(detail: dict[str, Any]) -> str:
    parts = []
    if detail.get("parent"):
        parts.append(f"parent {detail['parent']}")
    if detail.get("from"):
        parts.append(f"was {detail['from']}")
    if detail.get("reason") and "task" in detail:
        parts.append(f"why {detail['reason']}")
    origin = detail.get("origin") or {}
    if origin.get("ref"):
        parts.append(f"from {origin['ref']} in {detail.get('bundle')}")
    return "; ".join(parts)


def _history_old_name(args: argparse.Namespace) -> int:
    warn_old_command("history", "lineage")
    return _lineage(args)


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
        print_json(tagged("diff", {"old": old["ref"], "new": new["ref"], "changes": rows}))
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
        print_json(tagged("verify", report.to_dict()))
    else:
        print(report.format_text())
    return 0 if report.ok else 1


def _export(args: argparse.Namespace) -> int:
    from ..safety import CAUTION
    from ..store import export_bundle

    from ..errors import InvalidInputError

    if getattr(args, "out", None) is None:
        raise InvalidInputError("export needs --out FILE, the bundle to write; e.g. --out reach.tar.gz")
    key = _signing_key(args)
    store = _open_store(args)
    path = export_bundle(store, args.ref, args.out, signing_key=key)
    print(f"exported {store.get(args.ref).ref} with its lineage to {path}")
    if key is not None:
        print(f"signed with key id {key.key_id} ({key.source})")
    print(CAUTION)
    return 0


def _import(args: argparse.Namespace) -> int:
    from ..store import import_bundle

    key = _signing_key(args)
    store = _open_store(args)
    report = import_bundle(store, args.bundle, renumber=args.renumber, signing_key=key)
    notice = _bundle_notice(args.bundle)
    if args.json:
        versions = [{"ref": v.ref, "identity": v.identity, "origin": v.origin, "is_new": v.ref in report.added} for v in report.versions]
        print_json(tagged("import", {"versions": versions, "current_set": list(report.currents_set), "root_identity": report.root_identity, "warnings": list(report.warnings), "notice": notice,
                                          "signature": {"status": report.signature, "key_id": report.signed_with}}))
        return 0
    for warning in report.warnings:
        print(f"warning: {warning}")
    for v in report.versions:
        word = "imported" if v.ref in report.added else "already here"
        origin = (v.origin or {}).get("ref")
        moved = f" (originally {origin})" if origin and origin != v.ref else ""
        print(f"{word:<12} {v.ref}{moved}  identity {v.identity[:16]}")
    for text in report.currents_set:
        print(f"current      {text}")
    if report.signature == "verified":
        print(f"signature    verified with key id {report.signed_with}")
    if notice:
        print(f"Notice from the bundle: {notice}")
    return 0


def _copy_store(args: argparse.Namespace) -> int:
    from ..store import Store, copy_store, resolve_store_root

    source = _open_store(args, create=False)
    target = Store(resolve_store_root(args.target), blobs=args.target_blobs)
    report = copy_store(source, target)
    if args.json:
        print_json(tagged("copy-store", report.to_dict()))
        return 0 if report.ok else 1
    print(
        f"copied {report.versions} versions, {report.artifacts} artifact revisions, {report.blobs} blobs "
        f"({report.bytes} bytes) and {report.audit_entries} audit entries from {report.source} to {report.target} "
        f"(blobs at {target.blobs_location})"
    )
    for what, r in (("source", report.source_report), ("copy", report.target_report)):
        print(f"{what}: " + r.lines()[-1])
        for line in r.lines()[:-1]:
            print(f"  {line}")
    return 0 if report.ok else 1


def _signing_key(args: argparse.Namespace):
    from ..store.signing import signing_key_from

    return signing_key_from(getattr(args, "signing_key", None))


def _store_settings(args: argparse.Namespace) -> int:
    store = _open_store(args, create=False)
    changed = None
    if args.require_signatures is not None:
        changed = store.set_require_signatures(args.require_signatures == "on")
    settings = store.settings()
    changes = [e.to_dict() for e in store.audit_log() if e.action == "settings-changed"]
    if args.json:
        print_json(tagged("store-settings", {"store": store.location, "settings": settings, "changed": changed, "changes": changes}))
        return 0
    if changed is not None:
        print(f"require_signatures {'changed to' if changed else 'was already'} {args.require_signatures}")
    for name, value in settings.items():
        last = next((e for e in reversed(changes) if e["subject"] == name), None)
        since = f"  (set by {last['actor']} at {_when(last['created_at'])} UTC)" if last else ""
        print(f"{name:<20} {'on' if value else 'off'}{since}")
    return 0


def _bundle_notice(path: str) -> str | None:
    """The notice written into the bundle's manifest (read after import validated the archive)."""
    import json
    import tarfile

    with tarfile.open(path) as tar:
        member = tar.extractfile("manifest.json")
        notice = json.loads(member.read().decode("utf-8")).get("notice") if member is not None else None
    return notice if isinstance(notice, str) else None
