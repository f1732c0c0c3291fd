"""Benchmark: store add rate, and `kinetome list` / `kinetome show` start-to-exit time on a 10,000-version store.

Run by hand (not collected by pytest):

    python tests/bench/bench_store.py [--adds 1000] [--versions 10000] [--names 9] [--runs 7] [--keep DIR]

1. ``--adds`` distinct specs (configs/skills/arm-reach-tray.yaml with kp[0]
   varied) are written to a temp folder and registered one by one with
   ``kinetome.library.api.register(path, store=Store(root))`` in this
   process (validation, controller build and store add: what ``kinetome add``
   does per file); then ``--adds`` raw ``Store.add`` calls of small distinct
   files give the store's own add rate.
2. The store is filled to ``--versions`` versions with more raw adds spread over
   ``--names`` filler names (meta like a registered spec's).
3. ``kinetome --store ROOT list`` and ``kinetome --store ROOT show
   arm-reach-tray`` run as whole processes (the console script beside this
   Python), ``--runs`` times each, interleaved with the baseline
   ``python -c "import yaml, sqlite3"``; medians are compared.
   Target: each read command under 3x the baseline. A command that misses gets
   its slowest imports listed from ``python -X importtime``.

``--what-if`` adds rows for changes proposed in files this benchmark does not
own, applied by patching inside this run only: register with one rig per
env and a cached schema validator (``make_rig`` and ``spec_schema`` memoised),
and ``show`` with the numpy import (via ``runtime.skill``'s file-name
constants) and the tarfile import (via ``store.bundle``) kept out of the process.

Prints markdown tables.
"""

from __future__ import annotations

import argparse
import json
import os
import re
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
SPEC = ROOT / "configs" / "skills" / "arm-reach-tray.yaml"
SKILL = "arm-reach-tray"
TARGET = 3.0


def write_specs(folder: Path, n: int) -> list[Path]:
    """n spec files that differ only in the shoulder gain kp[0] (30.000, 30.001, ...)."""
    text = SPEC.read_text(encoding="utf-8")
    pattern = re.compile(r"(?m)^(\s*kp:\s*\[)\s*30\.0\s*,")
    if not pattern.search(text):
        raise SystemExit(f"{SPEC}: expected a line 'kp: [30.0, ...]' to vary; update bench_store.py")
    folder.mkdir(parents=True, exist_ok=True)
    paths = []
    for i in range(n):
        path = folder / f"{SKILL}-{i:05d}.yaml"
        path.write_text(pattern.sub(lambda m: f"{m.group(1)}{30.0 + 0.001 * i:.3f},", text, count=1), encoding="utf-8")
        paths.append(path)
    return paths


def register_all(root: Path, paths: list[Path]) -> float:
    """api.register on every path with one Store; returns adds/s (all must create a version)."""
    from kinetome.library.api import register
    from kinetome.library.store import Store

    store = Store(root)
    t = time.perf_counter()
    for path in paths:
        result = register(path, store=store)
        if not result.is_new:
            raise SystemExit(f"{path}: register returned the existing {result.version.ref}; specs must differ")
    rate = len(paths) / (time.perf_counter() - t)
    store.close()
    return rate


def memoised_register_rate(root: Path, paths: list[Path]) -> float:
    """What-if: register_rate with make_rig and spec_schema/validator memoised for this run."""
    import functools

    import jsonschema

    import kinetome.envs
    import kinetome.library.spec_load as spec_load

    saved = (kinetome.envs.make_rig, spec_load.spec_schema, jsonschema.Draft202012Validator)
    kinetome.envs.make_rig = functools.lru_cache(maxsize=None)(saved[0])
    spec_load.spec_schema = functools.lru_cache(maxsize=None)(saved[1])
    validators: dict[int, object] = {}
    jsonschema.Draft202012Validator = lambda schema: validators.setdefault(id(schema), saved[2](schema))
    try:
        return register_all(root, paths)
    finally:
        kinetome.envs.make_rig, spec_load.spec_schema, jsonschema.Draft202012Validator = saved


# What-if runner for ``show``: stand-ins for the two heavy modules it imports only for names.
_LEAN_SHOW = """
import sys, types
skill = types.ModuleType("kinetome.library.runtime.skill")
skill.SPEC_FILE, skill.PARAMS_FILE = "spec.json", "params.safetensors"
bundle = types.ModuleType("kinetome.library.store.bundle")
bundle.MAX_MEMBER_BYTES = bundle.MAX_MEMBERS = bundle.MAX_TOTAL_BYTES = 0
bundle.export_bundle = bundle.import_bundle = None
sys.modules.update({skill.__name__: skill, bundle.__name__: bundle})
from kinetome.library.cli.main import main
sys.exit(main(sys.argv[1:]))
"""


def _filler(name: str, i: int) -> tuple[dict[str, bytes], dict]:
    spec = json.dumps({"name": name, "bench_index": i}).encode()
    meta = {"description": f"benchmark filler {name}", "env": "kinetome/BenchArm-v0", "kind": "joint_pd",
            "tags": ["bench"], "source_file": f"{name}.yaml"}
    return {"spec.json": spec, "params.safetensors": i.to_bytes(8, "little")}, meta


def raw_adds(root: Path, names: list[str], count: int, start: int) -> float:
    """``count`` Store.add calls of distinct small files, round-robin over ``names``; returns adds/s."""
    from kinetome.library.store import Store

    store = Store(root)
    t = time.perf_counter()
    for k in range(start, start + count):
        files, meta = _filler(names[k % len(names)], k)
        if not store.add(names[k % len(names)], files, meta=meta).created:
            raise SystemExit(f"raw add {k} was deduplicated; filler files must differ")
    rate = count / max(time.perf_counter() - t, 1e-9)
    store.close()
    return rate


def count_versions(root: Path) -> int:
    import sqlite3

    conn = sqlite3.connect(root / "index.sqlite")
    try:
        return int(conn.execute("SELECT COUNT(*) FROM versions").fetchone()[0])
    finally:
        conn.close()


def console_script() -> str:
    """The kinetome script installed beside this interpreter (not a version-manager shim)."""
    beside = Path(sys.executable).with_name("kinetome")
    if beside.exists():
        return str(beside)
    found = shutil.which("kinetome")
    if found is None:
        raise SystemExit("no kinetome console script found; run pip install -e . first")
    return found


def _env() -> dict[str, str]:
    env = dict(os.environ)
    env.pop("KINETOME_STORE", None)
    return env


def time_process(argv: list[str], env: dict[str, str] | None = None) -> float:
    """Wall seconds of one whole process (environment: ``env``, else this one without $KINETOME_STORE)."""
    t = time.perf_counter()
    done = subprocess.run(argv, capture_output=True, env=_env() if env is None else env, stdin=subprocess.DEVNULL)
    wall = time.perf_counter() - t
    if done.returncode != 0:
        raise SystemExit(f"{' '.join(argv)} exited {done.returncode}: {done.stderr.decode(errors='replace')[-2000:]}")
    return wall


def slowest_imports(args: list[str], top: int) -> list[tuple[int, int, str]]:
    """(cumulative us, self us, module) of the slowest imports of one CLI run, from -X importtime."""
    code = "import sys; from kinetome.library.cli.main import main; sys.exit(main(sys.argv[1:]))"
    done = subprocess.run([sys.executable, "-X", "importtime", "-c", code, *args], capture_output=True,
                          env=_env(), stdin=subprocess.DEVNULL)
    rows = []
    for line in done.stderr.decode(errors="replace").splitlines():
        m = re.match(r"import time:\s+(\d+) \|\s+(\d+) \|(\s*)(\S+)", line)
        if m:
            rows.append((int(m.group(2)), int(m.group(1)), m.group(3).count(" ") - 1, m.group(4)))
    top_level = [(cum, own, name) for cum, own, depth, name in rows if depth <= 2]
    return sorted(top_level, reverse=True)[:top]


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--adds", type=int, default=1000, help="api.register calls, and raw Store.add calls (default 1000)")
    ap.add_argument("--versions", type=int, default=10000, help="fill the store to this many versions (default 10000)")
    ap.add_argument("--names", type=int, default=9, help="filler skill names (default 9)")
    ap.add_argument("--runs", type=int, default=7, help="runs per timed command, >= 5 (default 7)")
    ap.add_argument("--top", type=int, default=12, help="slowest imports listed for a command that misses")
    ap.add_argument("--what-if", action="store_true", help="add rows for proposed changes (see above)")
    ap.add_argument("--keep", metavar="DIR", help="build the store in DIR and keep it (default: a temp dir, removed)")
    a = ap.parse_args()
    if a.runs < 5:
        raise SystemExit(f"--runs must be >= 5 for a median, got {a.runs}")
    if a.versions < 2 * a.adds:
        raise SystemExit(f"--versions must be >= 2 x --adds ({2 * a.adds}), got {a.versions}")

    work = Path(a.keep) if a.keep else Path(tempfile.mkdtemp(prefix="kinetome-bench-store-"))
    root = work / "store"
    if root.exists():
        raise SystemExit(f"{root} exists; pass an empty --keep folder")
    try:
        paths = write_specs(work / "specs", a.adds)
        register_rate = register_all(root, paths)
        what_if_rate = None
        if a.what_if:
            what_if_rate = memoised_register_rate(work / "store-what-if", write_specs(work / "specs-what-if", a.adds))
        names = [f"bench-filler-{j}" for j in range(a.names)]
        raw_rate = raw_adds(root, names, a.adds, 0)
        t = time.perf_counter()
        fill = a.versions - count_versions(root)
        raw_adds(root, names, fill, a.adds)
        fill_s = time.perf_counter() - t
        total = count_versions(root)

        script, py = console_script(), sys.executable
        commands = {
            'python -c "import yaml, sqlite3"': [py, "-c", "import yaml, sqlite3"],
            "kinetome list": [script, "--store", str(root), "list"],
            f"kinetome show {SKILL}": [script, "--store", str(root), "show", SKILL],
        }
        if a.what_if:
            commands[f"kinetome show {SKILL}, without numpy and tarfile imports (what-if)"] = [
                py, "-c", _LEAN_SHOW, "--store", str(root), "show", SKILL]
        for argv in commands.values():  # warm the page cache and .pyc files
            time_process(argv)
        times: dict[str, list[float]] = {label: [] for label in commands}
        for _ in range(a.runs):  # interleaved, so load changes hit every command alike
            for label, argv in commands.items():
                times[label].append(time_process(argv))
        med = {label: statistics.median(ts) for label, ts in times.items()}
        base_label = next(iter(commands))
        base = med[base_label]

        print(f"store: {total:,} versions in {root} ({a.names + 1} names); filled {fill:,} raw adds in {fill_s:.1f} s; "
              f"1-min load average {os.getloadavg()[0]:.1f} on {os.cpu_count()} CPUs")
        print()
        print("| add path | adds | adds/s |")
        print("| --- | ---: | ---: |")
        print(f"| api.register(path, store=Store(root)), one process | {a.adds:,} | {register_rate:,.1f} |")
        if what_if_rate is not None:
            print(f"| api.register, make_rig and schema validator memoised (what-if) | {a.adds:,} | {what_if_rate:,.1f} |")
        print(f"| Store.add, small distinct files | {a.adds:,} | {raw_rate:,.1f} |")
        print()
        print(f"| command ({total:,} versions) | median s ({a.runs} runs) | min s | ratio vs baseline | target < {TARGET:g}x |")
        print("| --- | ---: | ---: | ---: | --- |")
        missed = []
        for label, ts in times.items():
            ratio = med[label] / base
            ok = "baseline" if label == base_label else ("met" if ratio < TARGET else "MISSED")
            if ok == "MISSED" and "what-if" not in label:
                missed.append(label)
            print(f"| `{label}` | {med[label]:.3f} | {min(ts):.3f} | {ratio:.2f} | {ok} |")
        for label in missed:
            args = commands[label][1:]
            print()
            print(f"slowest imports of `{label}` (python -X importtime, two outer levels; us):")
            print()
            print("| module | cumulative us | self us |")
            print("| --- | ---: | ---: |")
            for cum, own, name in slowest_imports(args, a.top):
                print(f"| {name} | {cum:,} | {own:,} |")
    finally:
        if not a.keep:
            shutil.rmtree(work, ignore_errors=True)


if __name__ == "__main__":
    main()
