"""A real, throwaway PostgreSQL server for the tests and the log benchmark.

``initdb`` in a temporary folder and ``pg_ctl start`` on a free loopback port, with
password (SCRAM) logins over TCP, as a shop's server would have. The programs are the
distribution's (Debian's ``postgresql`` package puts them in
``/usr/lib/postgresql/VERSION/bin``) or any on PATH. PostgreSQL refuses to run as root,
so as root the server runs as the unprivileged user 'nobody'. Passwords go into a
``pgpass`` file that ``PGPASSFILE`` names, the way a station would keep them.
"""

from __future__ import annotations

import glob
import os
import secrets
import shutil
import socket
import subprocess
import tempfile
import time
from pathlib import Path

ADMIN = "flatsight_admin"
HOST = "127.0.0.1"


class ServerUnavailable(Exception):
    """No PostgreSQL server can be started here; the message says why."""


def find_bindir() -> Path | None:
    """The folder holding initdb and pg_ctl: the newest Debian one, else the one on PATH."""
    debian = sorted(glob.glob("/usr/lib/postgresql/*/bin/pg_ctl"),
                    key=lambda p: int(Path(p).parts[-3]) if Path(p).parts[-3].isdigit() else 0)
    if debian:
        return Path(debian[-1]).parent
    found = shutil.which("pg_ctl")
    return Path(found).resolve().parent if found else None


def _free_port() -> int:
    with socket.socket() as s:
        s.bind((HOST, 0))
        return s.getsockname()[1]


class PostgresServer:
    """One server in its own folder; :meth:`stop` and :meth:`start` it at will."""

    def __init__(self, bindir: Path, root: Path):
        self.bindir, self.root = bindir, root
        self.data = root / "data"
        self.port = _free_port()
        self.passwords = {ADMIN: secrets.token_urlsafe(18)}
        self.pgpass = root / "pgpass"
        self._run_as: dict = {}
        if os.geteuid() == 0:
            import pwd

            nobody = pwd.getpwnam("nobody")
            self._run_as = {"user": nobody.pw_uid, "group": nobody.pw_gid,
                            "extra_groups": []}
            self._owner = (nobody.pw_uid, nobody.pw_gid)
        else:
            self._owner = None

    def _tool(self, name: str, *args: str, timeout: float = 120) -> None:
        done = subprocess.run([str(self.bindir / name), *args], capture_output=True,
                              text=True, timeout=timeout, cwd=self.root, **self._run_as)
        if done.returncode != 0:
            raise ServerUnavailable(f"{name} failed: {(done.stderr or done.stdout).strip()}")

    def init(self) -> None:
        self.root.chmod(0o755)
        pwfile = self.root / "admin-password"
        pwfile.write_text(self.passwords[ADMIN] + "\n")
        if self._owner:
            os.chown(self.root, *self._owner)
            os.chown(pwfile, *self._owner)
        try:
            self._tool("initdb", "-D", str(self.data), "-U", ADMIN, f"--pwfile={pwfile}",
                       "--auth-local=trust", "--auth-host=scram-sha-256", "-E", "UTF8",
                       "--no-locale", "--no-sync")
        finally:
            pwfile.unlink()
        with open(self.data / "postgresql.conf", "a") as conf:
            conf.write(f"\nport = {self.port}\nlisten_addresses = '{HOST}'\n"
                       f"unix_socket_directories = '{self.data}'\nmax_connections = 100\n")
        self._write_pgpass()

    def _write_pgpass(self) -> None:
        lines = [f"{HOST}:{self.port}:*:{user}:{pw}" for user, pw in self.passwords.items()]
        self.pgpass.write_text("\n".join(lines) + "\n")
        self.pgpass.chmod(0o600)
        if self._owner:  # the file is read by this process, not by the server
            os.chown(self.pgpass, 0, 0)

    def start(self) -> None:
        self._tool("pg_ctl", "-D", str(self.data), "-l", str(self.root / "server.log"),
                   "-w", "-t", "60", "start")

    def stop(self) -> None:
        self._tool("pg_ctl", "-D", str(self.data), "-m", "immediate", "-w", "stop")

    def url(self, database: str, user: str = ADMIN) -> str:
        """The log's URL, as a station would be given it: no password in it."""
        return f"postgresql://{user}@{HOST}:{self.port}/{database}"

    def admin(self, statement, params=(), database: str = "postgres") -> list:
        """Run SQL (text or a ``psycopg.sql`` composition) as the administrator."""
        import psycopg

        with psycopg.connect(self.url(database), autocommit=True,
                             password=self.passwords[ADMIN]) as con:
            cur = con.execute(statement, params)
            return cur.fetchall() if cur.description else []

    def create_database(self, name: str) -> str:
        """A new, empty database; its URL for the administrator."""
        from psycopg import sql

        self.admin(sql.SQL("CREATE DATABASE {}").format(sql.Identifier(name)))
        return self.url(name)

    def create_role(self, name: str, *, password: str | None = None) -> str:
        """A login role whose password (random unless given) goes into the pgpass file."""
        from psycopg import sql

        self.passwords[name] = password or secrets.token_urlsafe(18)
        self.admin(sql.SQL("CREATE ROLE {} LOGIN PASSWORD {}").format(
            sql.Identifier(name), sql.Literal(self.passwords[name])))
        self._write_pgpass()
        return name

    def close(self) -> None:
        try:
            self.stop()
        except ServerUnavailable:
            pass
        shutil.rmtree(self.root, ignore_errors=True)


def start_server() -> PostgresServer:
    """A started server in a new temporary folder, ``PGPASSFILE`` pointing at its pgpass.

    Raises
    ------
    ServerUnavailable
        No PostgreSQL programs here, or the server would not start.
    """
    bindir = find_bindir()
    if bindir is None or not (bindir / "initdb").exists():
        raise ServerUnavailable("no PostgreSQL server programs (initdb, pg_ctl) on this "
                                "machine: install Debian's 'postgresql' package")
    # outside pytest's private temporary tree, so 'nobody' can reach it
    server = PostgresServer(bindir, Path(tempfile.mkdtemp(prefix="flatsight-pg-")))
    try:
        server.init()
        server.start()
    except (ServerUnavailable, OSError, subprocess.TimeoutExpired) as exc:
        shutil.rmtree(server.root, ignore_errors=True)
        raise ServerUnavailable(str(exc)) from None
    os.environ["PGPASSFILE"] = str(server.pgpass)
    deadline = time.monotonic() + 30
    while True:  # pg_ctl -w waited for it; a first login proves the password works
        try:
            server.admin("SELECT 1")
            return server
        except Exception as exc:
            if time.monotonic() > deadline:
                server.close()
                raise ServerUnavailable(f"the server started but takes no logins: {exc}") from None
            time.sleep(0.2)
