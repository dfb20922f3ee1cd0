"""A throwaway PostgreSQL server for the tests: initdb into a temporary folder, listen on a
unix socket there and on a free port of 127.0.0.1 (password logins), stop and delete at the end.

initdb and postgres refuse to run as root, so as root the server runs as the `postgres`
system user (else `nobody`), through setpriv. Without server binaries or the driver the
PostgreSQL tests are skipped with the reason, unless BANDWATCH_REQUIRE_POSTGRES=1 (CI sets it):
then they fail, so CI cannot pass without having run them.
"""
from __future__ import annotations

import glob
import os
import pwd
import shutil
import socket
import subprocess
import tempfile
import time
from dataclasses import dataclass
from pathlib import Path

REQUIRE_VARIABLE = "BANDWATCH_REQUIRE_POSTGRES"
ADMIN = "bandwatch_test_admin"  # the superuser initdb makes (local socket logins, trust)


class ServerUnavailable(Exception):
    """No PostgreSQL server can be started here (the reason says why)."""


def required() -> bool:
    return os.environ.get(REQUIRE_VARIABLE, "") not in ("", "0")


def server_binaries() -> Path | None:
    """The folder of initdb/pg_ctl/postgres: on PATH, else the newest /usr/lib/postgresql/*/bin."""
    found = shutil.which("initdb")
    if found and shutil.which("pg_ctl"):
        return Path(os.path.realpath(found)).parent
    candidates = sorted(glob.glob("/usr/lib/postgresql/*/bin/initdb"), key=lambda p: int(p.split("/")[4]) if p.split("/")[4].isdigit() else 0)
    return Path(candidates[-1]).parent if candidates else None


def _free_port() -> int:
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as probe:
        probe.bind(("127.0.0.1", 0))
        return int(probe.getsockname()[1])


@dataclass
class PgServer:
    """One running server; `url(db, user)` gives a connection URL (socket, or TCP with `tcp`)."""

    bin_dir: Path
    base: Path
    port: int
    run_as: str | None

    @property
    def data(self) -> Path:
        return self.base / "data"

    @property
    def socket_dir(self) -> Path:
        return self.base / "socket"

    def url(self, database: str = "postgres", user: str = ADMIN, *, tcp: bool = False) -> str:
        if tcp:
            return f"postgresql://{user}@127.0.0.1:{self.port}/{database}"
        return f"postgresql://{user}@/{database}?host={self.socket_dir}&port={self.port}"

    def _command(self, *args: str) -> list[str]:
        if self.run_as is None:
            return list(args)
        account = pwd.getpwnam(self.run_as)
        return ["setpriv", f"--reuid={account.pw_uid}", f"--regid={account.pw_gid}", "--clear-groups", *args]

    def run(self, *args: str, check: bool = True) -> subprocess.CompletedProcess[str]:
        return subprocess.run(self._command(*args), capture_output=True, text=True, check=check, cwd=self.base)

    def start(self) -> None:
        self.run(str(self.bin_dir / "pg_ctl"), "-D", str(self.data), "-l", str(self.base / "server.log"),
                 "-w", "-t", "60", "start")

    def stop(self, mode: str = "fast") -> None:
        self.run(str(self.bin_dir / "pg_ctl"), "-D", str(self.data), "-m", mode, "-w", "-t", "60", "stop", check=False)

    def running(self) -> bool:
        return self.run(str(self.bin_dir / "pg_ctl"), "-D", str(self.data), "status", check=False).returncode == 0

    def admin(self, sql: str, database: str = "postgres") -> None:
        """Run SQL as the superuser (autocommit: CREATE DATABASE and the like)."""
        import psycopg

        with psycopg.connect(self.url(database), autocommit=True) as conn:
            conn.execute(sql)

    def destroy(self) -> None:
        self.stop("immediate")
        shutil.rmtree(self.base, ignore_errors=True)


def start_server(*, durable: bool = False) -> PgServer:
    """Make and start a new server; ServerUnavailable with the reason when it cannot be done.
    `durable` keeps the server's own defaults (fsync on): for benchmarks against the file."""
    try:
        import psycopg  # noqa: F401
    except ImportError:
        raise ServerUnavailable("the PostgreSQL driver psycopg is not installed (pip install -e '.[test]')") from None
    bin_dir = server_binaries()
    if bin_dir is None:
        raise ServerUnavailable("no PostgreSQL server binaries (initdb, pg_ctl) on PATH or in /usr/lib/postgresql/*/bin")
    run_as: str | None = None
    if os.geteuid() == 0:
        for name in ("postgres", "nobody"):
            try:
                pwd.getpwnam(name)
            except KeyError:
                continue
            run_as = name
            break
        if run_as is None or shutil.which("setpriv") is None:
            raise ServerUnavailable("running as root with no unprivileged account (postgres, nobody) or no setpriv")
    base = Path(tempfile.mkdtemp(prefix="bandwatch-pg-"))
    (base / "socket").mkdir()
    if run_as is not None:
        account = pwd.getpwnam(run_as)
        for path in (base, base / "socket"):
            os.chown(path, account.pw_uid, account.pw_gid)
        os.chmod(base, 0o755)
    server = PgServer(bin_dir, base, _free_port(), run_as)
    try:
        server.run(str(bin_dir / "initdb"), "-D", str(server.data), "-U", ADMIN, "--auth-local=trust",
                   "--auth-host=scram-sha-256", "-E", "UTF8", "--locale=C", "--no-sync")
        with open(server.data / "postgresql.conf", "a", encoding="utf-8") as conf:
            conf.write(
                f"\nport = {server.port}\nlisten_addresses = '127.0.0.1'\n"
                f"unix_socket_directories = '{server.socket_dir}'\nmax_connections = 200\nshared_buffers = 64MB\n"
            )
            if not durable:
                # a test server need not survive the machine crashing; commits stay synchronous
                # (an acknowledged commit survives the server being killed: the outage test)
                conf.write("fsync = off\nfull_page_writes = off\n")
        server.start()
    except subprocess.CalledProcessError as error:
        shutil.rmtree(base, ignore_errors=True)
        raise ServerUnavailable(f"the server did not start: {(error.stderr or error.stdout or '').strip()[:300]}") from None
    deadline = time.monotonic() + 30
    while True:
        try:
            server.admin("SELECT 1")
            return server
        except Exception as error:  # the server is still starting: try again until the deadline
            if time.monotonic() > deadline:
                server.destroy()
                raise ServerUnavailable(f"the server did not answer: {error}") from None
            time.sleep(0.2)
