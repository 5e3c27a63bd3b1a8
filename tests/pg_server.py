"""A throw-away PostgreSQL server for the tests: ``initdb`` into a temporary folder, ``pg_ctl`` on loopback.

The server runs as the ``postgres`` system user when the tests run as root
(PostgreSQL refuses to run as root), listens on 127.0.0.1 on a free port and
on a Unix socket in its own folder, trusts local connections, and is stopped
(``pg_ctl stop -m fast``) and removed when the session ends. Every start and
stop is bounded in time.
"""

from __future__ import annotations

import contextlib
import glob
import os
import shutil
import socket
import subprocess
import tempfile
import uuid
from dataclasses import dataclass
from pathlib import Path

START_TIMEOUT_S = 60


def find_bin_dir() -> Path | None:
    """The folder holding ``initdb`` and ``pg_ctl`` (Debian keeps them under /usr/lib/postgresql/<ver>/bin)."""
    found = shutil.which("initdb")
    if found:
        return Path(found).resolve().parent
    for candidate in sorted(glob.glob("/usr/lib/postgresql/*/bin"), reverse=True):
        if (Path(candidate) / "initdb").exists():
            return Path(candidate)
    return None


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


@dataclass
class PgServer:
    folder: Path
    port: int
    user: str
    _bin: Path
    _as: list[str]

    def url(self, dbname: str) -> str:
        return f"postgresql://{self.user}@127.0.0.1:{self.port}/{dbname}"

    def archive_url(self, dbname: str, objects: os.PathLike | str) -> str:
        return f"{self.url(dbname)}?objects={objects}"

    def psql_conn(self, dbname: str = "postgres"):
        import psycopg

        return psycopg.connect(self.url(dbname), autocommit=True)

    def create_database(self, template: str | None = None) -> str:
        name = "t_" + uuid.uuid4().hex[:16]
        with self.psql_conn() as db:
            db.execute(f"CREATE DATABASE {name}" + (f" TEMPLATE {template}" if template else ""))
        return name

    def drop_database(self, name: str) -> None:
        with self.psql_conn() as db:
            db.execute(f"DROP DATABASE IF EXISTS {name} WITH (FORCE)")

    def stop(self) -> None:
        subprocess.run(
            [*self._as, str(self._bin / "pg_ctl"), "-D", str(self.folder / "data"), "stop", "-m", "fast", "-w"],
            capture_output=True,
            timeout=START_TIMEOUT_S,
        )
        shutil.rmtree(self.folder, ignore_errors=True)


def start_server(*, fsync: bool = False) -> PgServer:
    """Start a server; raises RuntimeError with the reason when it cannot (no binaries, no postgres user).

    ``fsync`` off (the default, for tests: a crash of the test server loses nothing of value) makes
    commits cheaper than on a production server; benchmarks turn it on.
    """
    bin_dir = find_bin_dir()
    if bin_dir is None:
        raise RuntimeError("PostgreSQL server binaries (initdb, pg_ctl) not found; apt-get install postgresql")
    run_as: list[str] = []
    user = os.environ.get("USER") or "postgres"
    folder = Path(tempfile.mkdtemp(prefix="surfinspect-pg-"))
    if os.geteuid() == 0:
        if shutil.which("runuser") is None:
            raise RuntimeError("running as root and runuser is missing: cannot start PostgreSQL as another user")
        import pwd

        try:
            pw = pwd.getpwnam("postgres")
        except KeyError:
            raise RuntimeError("running as root and there is no 'postgres' user to run the server as") from None
        os.chown(folder, pw.pw_uid, pw.pw_gid)
        run_as, user = ["runuser", "-u", "postgres", "--"], "postgres"
    else:
        import getpass

        user = getpass.getuser()
    data, sock = folder / "data", folder / "sock"
    port = _free_port()
    try:
        subprocess.run([*run_as, "mkdir", str(sock)], check=True, capture_output=True)
        subprocess.run(
            [*run_as, str(bin_dir / "initdb"), "-D", str(data), "-A", "trust", "-U", user, "-E", "UTF8", "--no-sync"],
            check=True,
            capture_output=True,
            timeout=START_TIMEOUT_S,
        )
        options = f"-c listen_addresses=127.0.0.1 -p {port} -k {sock} -c max_connections=60"
        options += "" if fsync else " -c fsync=off"
        subprocess.run(
            [
                *run_as,
                str(bin_dir / "pg_ctl"),
                "-D",
                str(data),
                "-o",
                options,
                "-l",
                str(folder / "log"),
                "-w",
                "start",
            ],
            check=True,
            capture_output=True,
            timeout=START_TIMEOUT_S,
        )
    except (subprocess.CalledProcessError, subprocess.TimeoutExpired) as exc:
        err = getattr(exc, "stderr", b"") or b""
        log = (folder / "log").read_text(errors="replace")[-500:] if (folder / "log").exists() else ""
        with contextlib.suppress(Exception):
            shutil.rmtree(folder)
        raise RuntimeError(f"PostgreSQL did not start ({exc}): {err.decode(errors='replace')[-300:]} {log}") from None
    return PgServer(folder, port, user, bin_dir, run_as)
