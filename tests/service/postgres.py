"""A throw-away PostgreSQL server on 127.0.0.1 for the tests (bounded start-up)."""

from __future__ import annotations

import glob
import os
import pwd
import shutil
import socket
import subprocess
import tempfile
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path


def _binary(name: str) -> str | None:
    found = shutil.which(name)
    if found:
        return found
    candidates = sorted(glob.glob(f"/usr/lib/postgresql/*/bin/{name}"))
    return candidates[-1] if candidates else None


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


@contextmanager
def temporary_postgres() -> Iterator[str | None]:
    """Yield a SQLAlchemy URL of a fresh server, or None if PostgreSQL is not installed."""
    initdb, pg_ctl = _binary("initdb"), _binary("pg_ctl")
    if not (initdb and pg_ctl):
        yield None
        return
    base = Path(tempfile.mkdtemp(prefix="fanfold-pg-"))
    prefix: list[str] = []
    if os.geteuid() == 0:  # PostgreSQL refuses to run as root
        user = pwd.getpwnam("postgres")
        os.chown(base, user.pw_uid, user.pw_gid)
        prefix = ["runuser", "-u", "postgres", "--"]
    data, port = base / "data", _free_port()
    run = {"check": True, "capture_output": True, "timeout": 120}
    subprocess.run([*prefix, initdb, "-D", str(data), "-A", "trust", "-U", "fanfold",
                    "--no-sync", "-E", "UTF8"], **run)
    options = f"-c listen_addresses=127.0.0.1 -p {port} -c unix_socket_directories={base} " \
              "-c fsync=off"
    subprocess.run([*prefix, pg_ctl, "-D", str(data), "-o", options, "-l",
                    str(base / "log"), "-w", "-t", "60", "start"], **run)
    try:
        yield f"postgresql+psycopg://fanfold@127.0.0.1:{port}/postgres"
    finally:
        subprocess.run([*prefix, pg_ctl, "-D", str(data), "-m", "immediate", "-w", "-t", "30",
                        "stop"], check=False, capture_output=True, timeout=60)
        shutil.rmtree(base, ignore_errors=True)
