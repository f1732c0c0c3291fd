"""Benchmark: the team store (PostgreSQL index + shared-folder blobs) against the embedded one.

Run by hand (not collected by pytest); needs PostgreSQL (``apt-get install postgresql``):

    python tests/bench/bench_team_store.py [--versions 10000] [--names 9] [--runs 7] [--writers 4] [--adds 50]

1. An embedded (SQLite) store gets arm-reach-tray registered and is filled to ``--versions``
   versions over ``--names`` more skill names (the filler of bench_store.py), then copied with ``copy_store`` into a PostgreSQL
   store whose blobs are in a separate folder (standing in for a shared mount).
2. ``kinetome --store S list`` and ``kinetome --store S show arm-reach-tray`` run as whole processes
   on both stores: one warm-up round (it writes the bytecode caches: PYTHONDONTWRITEBYTECODE is
   dropped from the commands' environment, as on a user's machine), then ``--runs`` rounds with
   both stores in an order rotated per round; medians are compared.
   Target: PostgreSQL at most 1.5x SQLite for each command.
3. ``--writers`` processes add ``--adds`` distinct versions each to one skill name of a new
   empty store at the same moment, on each backend; adds per second over the wall time from
   the start signal to the last writer's exit.

The server: ``$KINETOME_TEST_PG`` (with ``PGPASSFILE``) if set, else a private one started
for this run with fsync on (tests/pg_server.py), so both backends pay for durable commits.
Prints markdown tables. A loaded machine skews both backends, and the writers more than the reads.
"""

from __future__ import annotations

import argparse
import os
import resource
import shutil
import subprocess
import sys
import tempfile
import time
import uuid
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
sys.path.insert(0, str(HERE.parents[1]))

from bench_store import SKILL, SPEC, _filler, console_script, time_process  # noqa: E402
from rounds import column, load, median, ratios, run_rounds, summary  # noqa: E402

from tests.pg_server import find_bin_dir, server_from_env, start_server, stop_server  # noqa: E402

TARGET = 1.5


def fill(root: Path, names: list[str], count: int) -> None:
    """The demo's reach skill (what ``show`` reads) plus filler versions up to ``count``."""
    from kinetome.library.api import register
    from kinetome.library.store import Store

    with Store(root) as store:
        register(SPEC, store=store)
        for k in range(count - 1):
            name = names[k % len(names)]
            files, meta = _filler(name, k)
            store.add(name, files, meta=meta)


def fresh_url(server_url: str) -> str:
    import psycopg

    schema = f"bench_{uuid.uuid4().hex[:12]}"
    with psycopg.connect(server_url, autocommit=True) as conn:
        conn.execute(f"CREATE SCHEMA {schema}")
    return f"{server_url}?options=-csearch_path%3D{schema}"


def _children_cpu() -> float:
    usage = resource.getrusage(resource.RUSAGE_CHILDREN)
    return usage.ru_utime + usage.ru_stime


def _child_env() -> dict[str, str]:
    """The commands' environment: no $KINETOME_STORE, and bytecode caches written as on a user's machine."""
    return {k: v for k, v in os.environ.items() if k not in ("KINETOME_STORE", "PYTHONDONTWRITEBYTECODE")}


def _timed(argv: list[str], env: dict[str, str], cpu: list[float]) -> float:
    """Wall seconds of one whole process; its CPU seconds (user + system) go to ``cpu``."""
    before = _children_cpu()
    wall = time_process(argv, env)
    cpu.append(_children_cpu() - before)
    return wall


def read_rows(stores: dict[str, list[str]], name: str, runs: int) -> list[str]:
    """Per command: one warm-up round, then ``runs`` rounds of both stores in rotated order. Median wall
    time (the target), the median of the per-round ratios [min-max], and median CPU time (less skewed
    by other jobs on a shared machine); the load average before and after."""
    exe, env = console_script(), _child_env()
    rows = []
    for command in (["list"], ["show", name]):
        cpu: dict[str, list[float]] = {backend: [] for backend in stores}
        configs = {b: (lambda b=b: _timed([exe, *stores[b], *command], env, cpu[b])) for b in stores}
        run_rounds(configs, 1)  # bytecode caches written, files and server caches warm
        for values in cpu.values():
            values.clear()
        load_before = load()
        measured = run_rounds(configs, runs)
        lite, pg = median(column(measured, "sqlite")), median(column(measured, "postgresql"))
        lite_cpu, pg_cpu = median(cpu["sqlite"]), median(cpu["postgresql"])
        verdict = "met" if pg / lite <= TARGET else "MISSED"
        rows.append(
            f"| `kinetome {command[0]}` | {lite:.3f} s | {pg:.3f} s | {pg / lite:.2f}x "
            f"| {summary(ratios(measured, 'postgresql', 'sqlite'))} | <= {TARGET}x {verdict} "
            f"| CPU {lite_cpu:.3f} s / {pg_cpu:.3f} s = {pg_cpu / lite_cpu:.2f}x | {load_before} -> {load()} |"
        )
    return rows


def writer(location: str, blobs: str, writer_id: int, count: int, go: str) -> None:
    from kinetome.library.store import Store

    store = Store(location, blobs=None if blobs == "-" else blobs)
    while not os.path.exists(go):
        time.sleep(0.001)
    for i in range(count):
        files, meta = _filler("shared", writer_id * 1_000_000 + i)
        store.add("shared", files, meta=meta)
    store.close()


def add_rate(location: str, blobs: str | None, writers: int, count: int, tmp: Path) -> float:
    from kinetome.library.store import Store

    Store(location, blobs=blobs).close()
    go = tmp / f"go-{uuid.uuid4().hex[:6]}"
    procs = [
        subprocess.Popen([sys.executable, __file__, "--writer", location, str(blobs or "-"), str(w), str(count), str(go)])
        for w in range(writers)
    ]
    time.sleep(2.0)  # every writer imported and connected
    t = time.perf_counter()
    go.touch()
    if any(p.wait() != 0 for p in procs):
        raise SystemExit("a writer failed")
    wall = time.perf_counter() - t
    with Store(location, blobs=blobs, create=False) as store:
        numbers = [v.number for v in store.history("shared")]
        if numbers != list(range(1, writers * count + 1)):
            raise SystemExit(f"version numbers are not 1..{writers * count}: {numbers[:5]}...")
    return writers * count / wall


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--versions", type=int, default=10000, help="versions in the read benchmark's stores (default 10000)")
    ap.add_argument("--names", type=int, default=9, help="skill names they are spread over (default 9)")
    ap.add_argument("--runs", type=int, default=7, help="runs per timed command (default 7)")
    ap.add_argument("--writers", type=int, default=4, help="concurrent writer processes (default 4)")
    ap.add_argument("--adds", type=int, default=50, help="adds per writer (default 50)")
    ap.add_argument("--writer", nargs=5, help=argparse.SUPPRESS)
    args = ap.parse_args()
    if args.writer:
        location, blobs, w, count, go = args.writer
        writer(location, blobs, int(w), int(count), go)
        return

    from kinetome.library.store import Store, copy_store

    server, base = server_from_env(), None
    if server is None:
        if find_bin_dir() is None:
            raise SystemExit("PostgreSQL is not installed; apt-get install postgresql, or set KINETOME_TEST_PG")
        base = Path(tempfile.mkdtemp(prefix="kinetome-bench-pg-"))
        base.chmod(0o755)
        server = start_server(base, fsync=True)
        os.environ["PGPASSFILE"] = str(server.passfile)
    tmp = Path(tempfile.mkdtemp(prefix="kinetome-bench-team-"))
    try:
        names = [f"bench-{i}" for i in range(args.names)]
        t = time.perf_counter()
        fill(tmp / "embedded", names, args.versions)
        url = fresh_url(server.url)
        with Store(tmp / "embedded") as source, Store(url, blobs=tmp / "shared-blobs") as team:
            copy_store(source, team)
        print(f"filled both stores with {args.versions} versions in {time.perf_counter() - t:.1f} s\n")
        stores = {"sqlite": ["--store", str(tmp / "embedded")], "postgresql": ["--store", url]}
        print(
            f"| command, whole process, {args.versions} versions | SQLite | PostgreSQL + shared folder | ratio of medians "
            "| per-round ratio, median [min-max] | target | CPU time | load average before -> after |"
        )
        print("| --- | --- | --- | --- | --- | --- | --- | --- |")
        for row in read_rows(stores, SKILL, args.runs):
            print(row)
        print(f"\n| {args.writers} concurrent writers x {args.adds} adds | adds/s |\n| --- | --- |")
        rate = add_rate(str(tmp / "writers-sqlite"), None, args.writers, args.adds, tmp)
        print(f"| SQLite (embedded) | {rate:.0f} |")
        rate = add_rate(fresh_url(server.url), str(tmp / "writers-blobs"), args.writers, args.adds, tmp)
        print(f"| PostgreSQL + shared folder | {rate:.0f} |")
        print(f"\nload average at the end: {os.getloadavg()[0]:.1f}")
    finally:
        shutil.rmtree(tmp, ignore_errors=True)
        if base is not None:
            stop_server(server.data_dir)
            shutil.rmtree(base, ignore_errors=True)


if __name__ == "__main__":
    main()
