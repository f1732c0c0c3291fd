"""A private PostgreSQL server for tests, benchmarks and CI: a real server on 127.0.0.1.

Standard library only, so ``.ci/run`` can start it before kinetome is installed:

    python tests/pg_server.py start DIR    # prints `export KINETOME_TEST_PG=... PGPASSFILE=...`
    python tests/pg_server.py stop DIR

The server authenticates with a password (scram-sha-256) that only the password file in
DIR holds, so tests connect the way a team does: URL without a password plus ~/.pgpass.
initdb refuses to run as root, so as root the server runs as the ``postgres`` user.
"""

from __future__ import annotations

import glob
import os
import secrets
import shutil
import socket
import subprocess
import sys
from dataclasses import dataclass
from pathlib import Path

__all__ = ["SERVER_ENV_VAR", "PgServer", "find_bin_dir", "start_server", "stop_server", "server_from_env"]

# a running server to use instead of starting one: postgresql://USER@HOST:PORT/DB (password in PGPASSFILE)
SERVER_ENV_VAR = "KINETOME_TEST_PG"
USER = "kinetome"
DATABASE = "kinetome"


@dataclass(frozen=True)
class PgServer:
    url: str  # no password: it is in ``passfile``
    passfile: Path | None
    data_dir: Path | None  # None: a server this module did not start


def find_bin_dir() -> Path | None:
    """The folder holding initdb and pg_ctl (Debian keeps them out of PATH), or None."""
    found = sorted(glob.glob("/usr/lib/postgresql/*/bin/initdb"), key=lambda p: int(Path(p).parts[-3]))
    if found:
        return Path(found[-1]).parent
    initdb = shutil.which("initdb")
    return Path(initdb).parent if initdb else None


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


def _as_server_user(cmd: list[str]) -> list[str]:
    if os.geteuid() != 0:
        return cmd
    return ["runuser", "-u", "postgres", "--", *cmd]


def _chown_to_server_user(path: Path) -> None:
    if os.geteuid() == 0:
        shutil.chown(path, user="postgres", group="postgres")


def start_server(base: Path, *, fsync: bool = False) -> PgServer:
    """initdb a cluster under ``base`` and start it on 127.0.0.1 (a free port). ``fsync=False``
    suits tests (a killed client, not a power cut, is what they simulate)."""
    bin_dir = find_bin_dir()
    if bin_dir is None:
        raise RuntimeError("PostgreSQL is not installed (no initdb); install it with: apt-get install postgresql")
    base.mkdir(parents=True, exist_ok=True)
    server_dir = base / "server"
    server_dir.mkdir(mode=0o700, exist_ok=True)
    _chown_to_server_user(server_dir)
    password = secrets.token_hex(16)
    pwfile = server_dir / "pw"
    pwfile.write_text(password + "\n")
    _chown_to_server_user(pwfile)
    data = server_dir / "data"
    subprocess.run(
        _as_server_user([str(bin_dir / "initdb"), "-D", str(data), "-U", USER, "--auth=scram-sha-256",
                         f"--pwfile={pwfile}", "-E", "UTF8", "--locale=C.UTF-8"]),
        check=True, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE,
    )
    pwfile.unlink()
    port = _free_port()
    options = (
        f"-c listen_addresses=127.0.0.1 -c port={port} -c unix_socket_directories={server_dir} "
        f"-c max_connections=300 -c fsync={'on' if fsync else 'off'} -c synchronous_commit={'on' if fsync else 'off'}"
    )
    subprocess.run(
        _as_server_user([str(bin_dir / "pg_ctl"), "-D", str(data), "-l", str(server_dir / "log"), "-o", options, "-w", "start"]),
        check=True, stdout=subprocess.DEVNULL,
    )
    passfile = base / "pgpass"
    passfile.write_text(f"127.0.0.1:{port}:*:{USER}:{password}\n")
    passfile.chmod(0o600)
    url = f"postgresql://{USER}@127.0.0.1:{port}/postgres"
    _psql(bin_dir, url, passfile, f"CREATE DATABASE {DATABASE}")
    return PgServer(url=url.rsplit("/", 1)[0] + f"/{DATABASE}", passfile=passfile, data_dir=data)


def _psql(bin_dir: Path, url: str, passfile: Path, sql: str) -> None:
    psql = bin_dir / "psql" if (bin_dir / "psql").exists() else Path(shutil.which("psql") or "psql")
    env = {**os.environ, "PGPASSFILE": str(passfile)}
    subprocess.run([str(psql), url, "-q", "-v", "ON_ERROR_STOP=1", "-c", sql], check=True, env=env, stdout=subprocess.DEVNULL)


def stop_server(data_dir: Path) -> None:
    bin_dir = find_bin_dir()
    if bin_dir is not None and data_dir.exists():
        subprocess.run(_as_server_user([str(bin_dir / "pg_ctl"), "-D", str(data_dir), "-m", "immediate", "stop"]),
                       check=False, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)


def server_from_env() -> PgServer | None:
    url = os.environ.get(SERVER_ENV_VAR, "").strip()
    if not url:
        return None
    passfile = os.environ.get("PGPASSFILE")
    return PgServer(url=url, passfile=Path(passfile) if passfile else None, data_dir=None)


def main(argv: list[str]) -> int:
    if len(argv) != 2 or argv[0] not in ("start", "stop"):
        print("usage: python tests/pg_server.py start|stop DIR", file=sys.stderr)
        return 2
    base = Path(argv[1]).resolve()
    if argv[0] == "stop":
        stop_server(base / "server" / "data")
        return 0
    server = start_server(base)
    print(f"export {SERVER_ENV_VAR}={server.url} PGPASSFILE={server.passfile}")
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
