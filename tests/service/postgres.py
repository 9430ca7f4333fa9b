"""A throw-away PostgreSQL server on 127.0.0.1 for the tests and benchmarks (bounded
start-up and shutdown; run as the ``postgres`` user when this process is root, since
PostgreSQL refuses to run as root)."""

from __future__ import annotations

import glob
import os
import pwd
import shutil
import socket
import subprocess
import tempfile
import uuid
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path

__all__ = ["PostgresUnavailable", "drop_postgres_database", "fresh_postgres_database",
           "postgres_binaries", "temporary_postgres"]


class PostgresUnavailable(RuntimeError):
    """PostgreSQL is not installed here, or its server did not start (the reason)."""


def _binary(name: str) -> str | None:
    found = shutil.which(name)
    if found:
        return found
    candidates = sorted(glob.glob(f"/usr/lib/postgresql/*/bin/{name}"),
                        key=lambda p: int(Path(p).parts[-3]) if Path(p).parts[-3].isdigit()
                        else 0)
    return candidates[-1] if candidates else None


def postgres_binaries() -> tuple[str, str] | None:
    """``(initdb, pg_ctl)`` from PATH or /usr/lib/postgresql/*/bin (newest), or None."""
    initdb, pg_ctl = _binary("initdb"), _binary("pg_ctl")
    return (initdb, pg_ctl) if initdb and pg_ctl else None


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def _tail(path: Path, lines: int = 15) -> str:
    try:
        return "\n".join(path.read_text(errors="replace").splitlines()[-lines:])
    except OSError:
        return "(no server log)"


@contextmanager
def temporary_postgres(*, durable: bool = False, max_connections: int = 200) -> Iterator[str]:
    """Yield the SQLAlchemy URL (database ``postgres``, user ``fanfold``, no password) of
    a fresh server listening on 127.0.0.1 only; stopped and deleted on exit.

    ``durable=False`` turns fsync off (tests: nothing needs to survive a power cut);
    benchmarks pass ``durable=True`` to measure what production would do. Raises
    :class:`PostgresUnavailable` when the binaries are missing or the server does not
    start within a minute.
    """
    binaries = postgres_binaries()
    if binaries is None:
        raise PostgresUnavailable("the server binaries initdb and pg_ctl are neither on "
                                  "PATH nor under /usr/lib/postgresql/*/bin (Debian: "
                                  "apt-get install postgresql)")
    initdb, pg_ctl = binaries
    base = Path(tempfile.mkdtemp(prefix="fanfold-pg-"))
    prefix: list[str] = []
    if os.geteuid() == 0:  # PostgreSQL refuses to run as root
        try:
            user = pwd.getpwnam("postgres")
        except KeyError as exc:
            shutil.rmtree(base, ignore_errors=True)
            raise PostgresUnavailable("running as root and there is no 'postgres' user to "
                                      "run the server as") from exc
        os.chown(base, user.pw_uid, user.pw_gid)
        prefix = ["runuser", "-u", "postgres", "--"]
    data, port, log = base / "data", _free_port(), base / "log"
    options = (f"-c listen_addresses=127.0.0.1 -p {port} -c unix_socket_directories={base} "
               f"-c max_connections={max_connections}"
               + ("" if durable else " -c fsync=off -c synchronous_commit=off"))
    try:
        try:
            subprocess.run([*prefix, initdb, "-D", str(data), "-A", "trust", "-U", "fanfold",
                            "--no-sync", "-E", "UTF8"], check=True, capture_output=True,
                           timeout=120)
            subprocess.run([*prefix, pg_ctl, "-D", str(data), "-o", options, "-l", str(log),
                            "-w", "-t", "60", "start"], check=True, capture_output=True,
                           timeout=90)
        except (subprocess.CalledProcessError, subprocess.TimeoutExpired, OSError) as exc:
            stderr = getattr(exc, "stderr", None) or b""
            raise PostgresUnavailable(
                f"{exc}; {stderr.decode(errors='replace').strip()}\n{_tail(log)}") from exc
        yield f"postgresql+psycopg://fanfold@127.0.0.1:{port}/postgres"
    finally:
        if (data / "postmaster.pid").exists():  # also a server that started too slowly
            subprocess.run([*prefix, pg_ctl, "-D", str(data), "-m", "immediate", "-w", "-t",
                            "30", "stop"], check=False, capture_output=True, timeout=60)
        shutil.rmtree(base, ignore_errors=True)


def fresh_postgres_database(server_url: str, name: str | None = None) -> str:
    """Create an empty database (``name``, else a random one) on the server of
    ``server_url``; its SQLAlchemy URL."""
    import sqlalchemy as sa

    name = name or f"t_{uuid.uuid4().hex[:16]}"
    if not name.isidentifier():
        raise ValueError(f"database name {name!r} is not a plain identifier")
    admin = sa.create_engine(server_url, isolation_level="AUTOCOMMIT")
    try:
        with admin.connect() as conn:
            conn.exec_driver_sql(f"CREATE DATABASE {name}")
    finally:
        admin.dispose()
    return server_url.rsplit("/", 1)[0] + f"/{name}"


def drop_postgres_database(server_url: str, url: str) -> None:
    """Drop a database made by :func:`fresh_postgres_database`, closing the connections
    that still use it (PostgreSQL 13+)."""
    import sqlalchemy as sa

    admin = sa.create_engine(server_url, isolation_level="AUTOCOMMIT")
    try:
        with admin.connect() as conn:
            conn.exec_driver_sql(f"DROP DATABASE IF EXISTS {url.rsplit('/', 1)[1]} "
                                 "WITH (FORCE)")
    finally:
        admin.dispose()
