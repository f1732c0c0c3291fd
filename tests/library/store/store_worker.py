"""Subprocess helper for the store's crash and concurrency tests (run as a script, not collected).

Usage (STORE BLOBS: a store folder and ``-``, or a postgresql:// URL and its blob folder):
  python store_worker.py crash STORE BLOBS SEED                 add versions forever (until killed)
  python store_worker.py add STORE BLOBS NAME WRITER COUNT GO   COUNT distinct versions after GO exists
  python store_worker.py same STORE BLOBS NAME COUNT GO         COUNT versions whose content depends only on i
  python store_worker.py promote STORE BLOBS NAME COUNT GO      COUNT promotions, alternating NAME@1 and NAME@2
"""

from __future__ import annotations

import hashlib
import random
import sys
import time
from pathlib import Path

CRASH_ROLES = ("spec.json", "params.safetensors", "normalizer.safetensors")


def payload(tag: str, role: str, size: int) -> bytes:
    """Deterministic bytes for (tag, role): the test regenerates them to compare."""
    return hashlib.shake_256(f"{tag}/{role}".encode()).digest(size)


def crash_files(seed: int, i: int) -> tuple[dict[str, bytes], dict]:
    """Files and meta of the i-th version a crash worker with ``seed`` adds."""
    rng = random.Random(seed * 100_003 + i)
    sizes = {role: rng.randint(1, 64 * 1024) for role in CRASH_ROLES}
    tag = f"crash-{seed}-{i}"
    return {role: payload(tag, role, n) for role, n in sizes.items()}, {"seed": seed, "i": i, "sizes": sizes}


def _wait_for(go: Path) -> None:
    deadline = time.monotonic() + 60
    while not go.exists():
        if time.monotonic() > deadline:
            raise SystemExit(f"start file {go} never appeared")
        time.sleep(0.005)


def main(argv: list[str]) -> int:
    from kinetome.library.store import Store

    mode, location, blobs = argv[0], argv[1], None if argv[2] == "-" else argv[2]
    argv = argv[1:]
    store = Store(location, blobs=blobs)  # workers may race to create the store: schema setup is one locked transaction
    if mode == "crash":
        seed = int(argv[2])
        print("ready", flush=True)
        i = 0
        while True:
            files, meta = crash_files(seed, i)
            latest = store.list_skills()
            parent = latest[0].latest_ref if latest else None
            result = store.add("crash", files, parent=parent, reason="retrained" if parent else "registered", meta=meta)
            if i % 3 == 0:
                store.attach_model(result.version.ref, "duration", {"table.bin": payload(f"model-{seed}-{i}", "t", 4096)}, {"i": i})
            if i % 4 == 0:
                store.add_note(result.version.ref, f"note {seed}-{i}")
            i += 1
    if mode == "add":
        name, writer, count, go = argv[2], int(argv[3]), int(argv[4]), Path(argv[5])
        _wait_for(go)
        for i in range(count):
            tag = f"w{writer}-{i}"
            store.add(name, {"spec.json": payload(tag, "spec", 64), "params.safetensors": payload(tag, "p", 512)}, meta={"writer": writer, "i": i})
        return 0
    if mode == "same":
        name, count, go = argv[2], int(argv[3]), Path(argv[4])
        _wait_for(go)
        for i in range(count):
            store.add(name, {"spec.json": payload(f"same-{i}", "spec", 64)}, meta={"i": i})
        return 0
    if mode == "promote":
        name, count, go = argv[2], int(argv[3]), Path(argv[4])
        _wait_for(go)
        for i in range(count):
            store.promote(f"{name}@{1 + i % 2}", evidence={"i": i})
        return 0
    raise SystemExit(f"unknown mode {mode!r}")


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
