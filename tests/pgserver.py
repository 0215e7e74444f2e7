"""A throw-away PostgreSQL server for tests and benchmarks: initdb + pg_ctl in a temporary folder,
listening on a Unix socket only (no TCP port), removed on stop.

PostgreSQL refuses to run as root, and CI runs as root: there the server runs as an unprivileged
system user (``streamtab-pg``, created with ``useradd --system`` when missing) that owns the
temporary folder. Run as anyone else, it runs as that user. The binaries come from Debian's
``postgresql`` package (``/usr/lib/postgresql/<major>/bin``) or ``$PATH``.
"""

from __future__ import annotations

import glob
import os
import pwd
import shutil
import subprocess
import tempfile
import time
from pathlib import Path

__all__ = ["PgServer", "find_bindir", "PG_USER"]

PG_USER = "streamtab-pg"
SUPERUSER = "streamtab"
#: A role that must give a password (scram-sha-256) even on the socket, for the libpq tests.
PASSWORD_ROLE = "office"


def find_bindir() -> Path | None:
    found = sorted(
        glob.glob("/usr/lib/postgresql/*/bin/initdb"),
        key=lambda p: int(Path(p).parent.parent.name) if Path(p).parent.parent.name.isdigit() else 0,
    )
    if found:
        return Path(found[-1]).parent
    exe = shutil.which("initdb")
    return Path(exe).resolve().parent if exe else None


def _ensure_user() -> pwd.struct_passwd:
    try:
        return pwd.getpwnam(PG_USER)
    except KeyError:
        pass
    nologin = "/usr/sbin/nologin" if os.path.exists("/usr/sbin/nologin") else "/bin/false"
    # several test runs may race here: a failed useradd is fine when the user now exists
    subprocess.run(
        ["useradd", "--system", "--no-create-home", "--shell", nologin, PG_USER],
        check=False,
        capture_output=True,
        timeout=30,
    )
    return pwd.getpwnam(PG_USER)


class PgServer:
    """``with PgServer() as pg: psycopg.connect(pg.conninfo())``.

    ``durable=False`` (tests) turns fsync off; benchmarks keep the defaults.
    """

    def __init__(self, *, durable: bool = False) -> None:
        self.durable = durable
        self.bindir = find_bindir()
        if self.bindir is None:
            raise RuntimeError(
                "PostgreSQL is not installed (initdb not found); `make test` installs Debian's postgresql package"
            )
        self.root: Path | None = None
        self._as: dict = {}

    # -- paths -------------------------------------------------------------------------------
    @property
    def socket_dir(self) -> str:
        assert self.root is not None
        return str(self.root / "sock")

    def conninfo(self, dbname: str = "postgres", user: str = SUPERUSER) -> str:
        return f"host={self.socket_dir} port=5432 dbname={dbname} user={user}"

    def url(self, dbname: str = "postgres", user: str = SUPERUSER) -> str:
        from urllib.parse import quote

        return f"postgresql://{user}@/{dbname}?host={quote(self.socket_dir, safe='')}&port=5432"

    def _run(self, *args: str, timeout: float = 120) -> subprocess.CompletedProcess:
        assert self.bindir is not None
        return subprocess.run(
            [str(self.bindir / args[0]), *args[1:]],
            check=True,
            capture_output=True,
            text=True,
            timeout=timeout,
            **self._as,
        )

    # -- life cycle ----------------------------------------------------------------------------
    def start(self) -> PgServer:
        self.root = Path(tempfile.mkdtemp(prefix="streamtab-pg-"))
        if os.geteuid() == 0:
            pw = _ensure_user()
            os.chown(self.root, pw.pw_uid, pw.pw_gid)
            self._as = {
                "user": pw.pw_uid,
                "group": pw.pw_gid,
                "extra_groups": [],
                "env": {"PATH": os.environ.get("PATH", "/usr/bin:/bin"), "LC_ALL": "C", "HOME": str(self.root)},
                "cwd": str(self.root),
            }
        else:
            self._as = {"env": {**os.environ, "LC_ALL": "C"}, "cwd": str(self.root)}
        data = self.root / "data"
        self._run(
            "initdb",
            "-D",
            str(data),
            "-U",
            SUPERUSER,
            "-E",
            "UTF8",
            "--locale=C",
            "--auth-local=trust",
            "--auth-host=reject",
            "--no-sync",
        )
        hba = data / "pg_hba.conf"
        lines = hba.read_text().splitlines()
        # the password role must authenticate even on the socket; it comes before the trust lines
        hba.write_text("\n".join([f"local all {PASSWORD_ROLE} scram-sha-256", *lines]) + "\n")
        (self.root / "sock").mkdir()
        if self._as.get("user") is not None:
            os.chown(self.root / "sock", self._as["user"], self._as["group"])
        opts = (
            f"-c listen_addresses='' -c unix_socket_directories='{self.socket_dir}' -c port=5432"
            " -c max_connections=20 -c shared_buffers=64MB"
        )
        if not self.durable:
            opts += " -c fsync=off -c synchronous_commit=off -c full_page_writes=off"
        self._run("pg_ctl", "start", "-D", str(data), "-w", "-t", "60", "-l", str(self.root / "server.log"), "-o", opts)
        return self

    def stop(self) -> None:
        if self.root is None:
            return
        try:
            self._run("pg_ctl", "stop", "-D", str(self.root / "data"), "-m", "fast", "-w", "-t", "60")
        except (subprocess.CalledProcessError, subprocess.TimeoutExpired):
            pass
        shutil.rmtree(self.root, ignore_errors=True)
        self.root = None

    def __enter__(self) -> PgServer:
        return self.start()

    def __exit__(self, *exc: object) -> None:
        self.stop()

    # -- databases -------------------------------------------------------------------------------
    def create_database(self, name: str) -> str:
        """A fresh, empty database; returns its conninfo."""
        import psycopg

        with psycopg.connect(self.conninfo(), autocommit=True) as conn:
            conn.execute(f'DROP DATABASE IF EXISTS "{name}"')
            conn.execute(f'CREATE DATABASE "{name}"')
        return self.conninfo(name)

    def wait_ready(self, deadline_s: float = 30.0) -> None:
        import psycopg

        end = time.monotonic() + deadline_s
        while True:
            try:
                psycopg.connect(self.conninfo(), connect_timeout=2).close()
                return
            except psycopg.OperationalError:
                if time.monotonic() > end:
                    raise
                time.sleep(0.2)
