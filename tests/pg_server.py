"""A throwaway PostgreSQL server on loopback for the team-store tests and benchmarks.

It runs Debian's own server binaries (`initdb`, `pg_ctl`) on a temporary folder and a
free port, with password authentication; the password reaches clients only through a
`PGPASSFILE`, as it would for a user. When run as root the server runs as the `postgres`
system user, since PostgreSQL refuses to run as root."""

from __future__ import annotations

import glob
import os
import pwd
import secrets
import shutil
import socket
import subprocess
import tempfile
from dataclasses import dataclass
from pathlib import Path

__all__ = ["PgServer", "start_server", "server_binaries"]


def server_binaries() -> Path | None:
    """The folder holding initdb and pg_ctl, or None if no server is installed."""
    for name in ("initdb", "pg_ctl"):
        found = shutil.which(name)
        if found:
            return Path(found).resolve().parent
    candidates = sorted(glob.glob("/usr/lib/postgresql/*/bin/initdb"))
    return Path(candidates[-1]).parent if candidates else None


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


@dataclass
class PgServer:
    """A running server: its URL (no password), password file and how to stop it."""

    folder: Path
    bin: Path
    port: int
    user: str
    password: str
    passfile: Path
    run_as: str | None

    @property
    def url(self) -> str:
        return f"postgresql://{self.user}@127.0.0.1:{self.port}/postgres"

    def url_for(self, database: str) -> str:
        return f"postgresql://{self.user}@127.0.0.1:{self.port}/{database}"

    def env(self) -> dict:
        """Environment for a client process: the password file, nothing else."""
        return {**os.environ, "PGPASSFILE": str(self.passfile)}

    def psql(self, sql: str, database: str = "postgres") -> str:
        out = subprocess.run([str(self.bin / "psql"), "-X", "-q", "-A", "-t", "-h",
                              "127.0.0.1", "-p", str(self.port), "-U", self.user, "-d",
                              database, "-v", "ON_ERROR_STOP=1", "-c", sql],
                             env=self.env(), capture_output=True, text=True, check=True)
        return out.stdout.strip()

    def create_database(self, name: str) -> str:
        """A fresh empty database; returns its URL."""
        self.psql(f'drop database if exists "{name}"')
        self.psql(f'create database "{name}"')
        return self.url_for(name)

    def stop(self) -> None:
        _run(self.run_as, [str(self.bin / "pg_ctl"), "-D", str(self.folder / "data"), "-m", "fast",
                    "-w", "stop"], check=False)
        shutil.rmtree(self.folder, ignore_errors=True)
        shutil.rmtree(self.passfile.parent, ignore_errors=True)


def _run(run_as: str | None, argv, check=True):
    """Run a server command, as the `run_as` user when given."""
    if run_as:
        argv = ["runuser", "-u", run_as, "--", *argv]
    return subprocess.run(argv, capture_output=True, text=True, check=check)


def start_server(max_connections: int = 100) -> PgServer:
    """initdb + pg_ctl start on a free loopback port; raise RuntimeError if impossible."""
    bin_dir = server_binaries()
    if bin_dir is None:
        raise RuntimeError("no PostgreSQL server binaries (initdb, pg_ctl) found; install "
                           "Debian's `postgresql` package (.ci/run does this).")
    run_as = None
    if os.geteuid() == 0:
        try:
            pwd.getpwnam("postgres")
        except KeyError:
            raise RuntimeError("running as root and no `postgres` user to run the server "
                               "as; install Debian's `postgresql` package.") from None
        run_as = "postgres"
    folder = Path(tempfile.mkdtemp(prefix="foldwise-pg-"))
    os.chmod(folder, 0o755)
    password = secrets.token_hex(12)
    pwfile = folder / "pw"
    pwfile.write_text(password + "\n")
    if run_as:
        info = pwd.getpwnam(run_as)
        os.chown(folder, info.pw_uid, info.pw_gid)
        os.chown(pwfile, info.pw_uid, info.pw_gid)
    user = "foldwise"
    port = _free_port()
    data = folder / "data"
    _run(run_as, [str(bin_dir / "initdb"), "-D", str(data), "-U", user, "--pwfile",
                  str(pwfile), "--auth=scram-sha-256", "-E", "UTF8", "--no-sync"])
    pwfile.unlink()
    _run(run_as, [str(bin_dir / "pg_ctl"), "-D", str(data), "-l", str(folder / "log"), "-w",
                  "-o", f"-h 127.0.0.1 -p {port} -k {folder} -c fsync=off "
                        f"-c max_connections={max_connections}", "start"])
    passfile = Path(tempfile.mkdtemp(prefix="foldwise-pgpass-")) / "pgpass"
    passfile.write_text(f"127.0.0.1:{port}:*:{user}:{password}\n")
    passfile.chmod(0o600)
    return PgServer(folder, bin_dir, port, user, password, passfile, run_as)
