"""A two-node Ray cluster on this machine (`ray start --head` plus a second `ray start --address`):
`kinetome check --address` on it prints the same JSON as a run in one process, and both nodes
report their versions before any work.

The nodes listen on loopback addresses 127.0.0.2 and 127.0.0.3 (Ray rewrites 127.0.0.1 to the
machine's network address, and two nodes on one address collide), with a token of this test's
own (not the shared ~/.ray/auth_token). Their processes are started here with `--block` and
stopped here by their ids.
"""

from __future__ import annotations

import json
import os
import secrets
import signal
import socket
import subprocess
import sys
import time
from pathlib import Path

import pytest

pytest.importorskip("ray", reason="Ray is not installed (pip install -e '.[cluster]')")

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "library" / "checker"))
from checker_testkit import CONFIGS, write_chain  # noqa: E402

THREADS = {"OMP_NUM_THREADS": "1", "OPENBLAS_NUM_THREADS": "1", "MKL_NUM_THREADS": "1"}
HEAD, SECOND = "127.0.0.2", "127.0.0.3"
ENV = {**os.environ, **THREADS, "RAY_AUTH_MODE": "token", "RAY_AUTH_TOKEN": secrets.token_hex(16)}


def _free_port() -> int:
    with socket.socket() as s:
        s.bind((HEAD, 0))
        return s.getsockname()[1]


def _descendants(root: int) -> list[int]:
    children: dict[int, list[int]] = {}
    for entry in Path("/proc").iterdir():
        if entry.name.isdigit():
            try:
                ppid = int((entry / "stat").read_text().rsplit(")", 1)[1].split()[1])
            except (OSError, IndexError, ValueError):
                continue
            children.setdefault(ppid, []).append(int(entry.name))
    out, todo = [], [root]
    while todo:
        for child in children.get(todo.pop(), []):
            out.append(child)
            todo.append(child)
    return out


def _ray_start(*args: str) -> subprocess.Popen:
    cmd = [sys.executable, "-m", "ray.scripts.scripts", "start", "--block", "--num-cpus=1", "--disable-usage-stats", *args]
    return subprocess.Popen(cmd, env=ENV, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)


def _stop(node: subprocess.Popen) -> None:
    """Stop one `ray start --block` and everything it started (only those processes)."""
    family = _descendants(node.pid)
    node.send_signal(signal.SIGTERM)
    try:
        node.wait(timeout=20)
    except subprocess.TimeoutExpired:
        node.kill()
    for pid in family:
        try:
            os.kill(pid, signal.SIGKILL)
        except ProcessLookupError:
            pass


def _driver(code: str, timeout: float = 180) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-c", code], env=ENV, capture_output=True, text=True, timeout=timeout)


@pytest.fixture(scope="module")
def two_nodes():
    port = _free_port()
    address = f"{HEAD}:{port}"
    head = _ray_start("--head", f"--port={port}", f"--node-ip-address={HEAD}", "--include-dashboard=false")
    nodes = [head]
    try:
        _wait_for_nodes(address, 1)
        nodes.append(_ray_start(f"--address={address}", f"--node-ip-address={SECOND}"))
        _wait_for_nodes(address, 2)
        yield address
    finally:
        for node in reversed(nodes):
            _stop(node)
        latest = Path("/tmp/ray/ray_current_cluster")  # `ray start --head` names itself the default cluster
        if latest.exists() and latest.read_text().strip() == address:
            latest.unlink()


def _wait_for_nodes(address: str, n: int, timeout: float = 120) -> None:
    code = (
        "import ray, logging; ray.init(address=%r, _node_ip_address=%r, logging_level=logging.ERROR); "
        "print(sum(1 for x in ray.nodes() if x['Alive'] and x['Resources'].get('CPU', 0) >= 1))" % (address, HEAD)
    )
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        done = _driver(code, timeout=60)
        if done.returncode == 0 and done.stdout.strip().splitlines() and int(done.stdout.strip().splitlines()[-1]) >= n:
            return
        time.sleep(1)
    raise AssertionError(f"the Ray cluster at {address} did not reach {n} nodes with CPUs")


def test_check_on_a_two_node_cluster_equals_one_process(two_nodes, tmp_path) -> None:
    skills = [str(CONFIGS / "skills" / "arm-reach-tray.yaml"), str(CONFIGS / "skills" / "arm-place.yaml")]
    chain = write_chain(tmp_path, "two-nodes", skills, start=CONFIGS / "initial_states" / "arm_home_wide.yaml", episodes=48,
                        disturbances={"exploration": True, "gain_spread": 0.1})
    cli = [sys.executable, "-m", "kinetome.library.cli.main", "check", str(chain), "--method", "sim", "--json"]
    env = {**ENV, "KINETOME_STORE": str(tmp_path / "store")}
    here = subprocess.run(cli, capture_output=True, text=True, env=env, timeout=300)
    there = subprocess.run([*cli, "--address", two_nodes], capture_output=True, text=True, env=env, timeout=300)
    assert there.returncode == here.returncode, there.stderr
    a, b = json.loads(here.stdout), json.loads(there.stdout)
    a.pop("timings_s"), b.pop("timings_s")
    assert a == b and a["handoffs"]

    code = (
        "from kinetome.library.execution import executor_for; import json; "
        "e = executor_for(address=%r); print(json.dumps({'workers': e.workers, 'nodes': sorted(e.reports)})); e.close()" % two_nodes
    )
    done = _driver(code)
    assert done.returncode == 0, done.stderr
    seen = json.loads(done.stdout.strip().splitlines()[-1])
    assert seen["workers"] == 2  # one CPU on each node
    assert [n.split()[0] for n in seen["nodes"]] == [HEAD, SECOND]  # both nodes reported their versions
