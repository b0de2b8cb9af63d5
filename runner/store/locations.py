"""Where a store lives: a DuckDB file on this machine, or a PostgreSQL database that a team
shares, reached through DuckDB's PostgreSQL extension so that every query keeps one SQL
dialect. Each location only opens DuckDB connections; the SQL of the store is in
`store.py`.

The extension comes from the `duckdb-extension-postgres` package that matches the pinned
DuckDB version (`pip install 'foldwise[team]'`) and is loaded from that package's file;
foldwise never lets DuckDB download an extension. Credentials never pass through
foldwise: libpq reads them from PGPASSWORD or a password file (~/.pgpass, PGPASSFILE),
and a store URL that carries a password is refused."""

from __future__ import annotations

import os
import re
import tempfile
from pathlib import Path
from urllib.parse import parse_qsl, quote, urlsplit, urlunsplit

from ..errors import StoreError

__all__ = ["FileLocation", "ServerLocation", "locate", "is_server_url", "url_problem",
           "SERVER_SCHEMES"]

SERVER_SCHEMES = ("postgresql", "postgres")
_NO_DOWNLOADS = {"autoinstall_known_extensions": False, "autoload_known_extensions": False}
_LOCK_WORDS = ("lock", "Conflicting lock", "being used by another process")
_HOLDER = re.compile(r"held in (?P<program>.+?) \(PID (?P<pid>\d+)\)")
_READ_ONLY_SESSION = "-c default_transaction_read_only=on"


def is_server_url(location) -> bool:
    """True if `location` names a database server rather than a file."""
    return isinstance(location, str) and location.split("://", 1)[0] in SERVER_SCHEMES \
        and "://" in location


def locate(location) -> "FileLocation | ServerLocation":
    """The location a `--store` value or spec `store` field names."""
    if isinstance(location, (FileLocation, ServerLocation)):
        return location
    return ServerLocation(location) if is_server_url(location) else FileLocation(location)


class FileLocation:
    """A DuckDB file: one writer at a time, so a busy file is worth waiting for."""

    kind = "file"
    shared = False

    def __init__(self, path):
        self.path = Path(path)

    def __str__(self) -> str:
        return str(self.path)

    def exists(self) -> bool:
        return self.path.exists()

    def check_writable(self) -> None:
        folder = self.path.parent if str(self.path.parent) else Path(".")
        if not folder.exists():
            raise StoreError(f"store folder {folder} does not exist. Create it, or set `store` "
                             "in the spec (or --store) to a path in an existing folder.")
        if self.path.exists() and (not os.access(self.path, os.W_OK)
                                   or not self.path.stat().st_mode & 0o222):
            raise StoreError(f"store {self.path} is read-only. Make it writable or choose "
                             "another store path.")
        if not self.path.exists() and not os.access(folder, os.W_OK):
            raise StoreError(f"store folder {folder} is not writable. Choose another path.")

    def connect(self, *, read_only: bool, config: dict | None = None, reach=()):
        """A connection to the file that downloads and loads no extension and reaches no
        other file nor the network, except the files and folders of `reach` (None: any),
        so that a view or macro in a store passed on by someone else reads nothing else."""
        import duckdb

        con = duckdb.connect(str(self.path), read_only=read_only,
                             config={**_NO_DOWNLOADS, **(config or {})})
        if reach is not None:
            try:
                confine(con, reach)
            except BaseException:
                con.close()
                raise
        return con

    def reach(self) -> list[Path]:
        """The files attaching this store reads: the file and its write-ahead log."""
        return [self.path, self.path.with_name(self.path.name + ".wal")]

    def attach_into(self, con, alias: str, *, read_only: bool = True) -> None:
        """Open this store inside another DuckDB connection, as catalog `alias`."""
        mode = " (read_only)" if read_only else ""
        con.execute(f"attach '{_quote(self.path)}' as {alias}{mode}")

    @staticmethod
    def is_busy(exc: Exception) -> bool:
        import duckdb

        return isinstance(exc, duckdb.IOException) and any(w in str(exc) for w in _LOCK_WORDS)

    def open_error(self, exc: Exception) -> StoreError:
        if self._not_duckdb():
            return StoreError(f"cannot open store {self.path}: it is not a DuckDB database "
                              "file (a foldwise store file is one), so it was not opened. "
                              "Choose a store file, a postgresql:// URL or, to merge, a "
                              "folder written by `foldwise export`.")
        return StoreError(f"cannot open store {self.path}: {exc}".rstrip(".") + ". If another "
                          "program holds the file open, close it; if the file is not a "
                          "foldwise store, choose another path.")

    def _not_duckdb(self) -> bool:
        """A regular file whose header lacks DuckDB's magic bytes (b'DUCK' at offset 8)."""
        try:
            with open(self.path, "rb") as f:
                head = f.read(12)
        except OSError:
            return False
        return len(head) == 12 and head[8:12] != b"DUCK"

    def busy_message(self, exc: Exception, *, writing: bool, limit: float,
                     gave_up: bool = False) -> str:
        """Who holds the file (process id, command line, reading or writing, where DuckDB's
        message and /proc tell) and what happens next, in one paragraph."""
        found = _HOLDER.search(str(exc))
        who, mode = "another process", None if writing else "writing"
        if found:
            pid = int(found["pid"])
            who = f"process {pid} ({_command_line(pid) or found['program']})"
            mode = _lock_mode(self.path, pid) or mode
        held = f"{who} holds it open for {mode}" if mode else f"{who} holds it open"
        if gave_up:
            return (f"store {self.path} is still busy after {limit:g} s: {held}. DuckDB lets "
                    "one process write a file or many read it; try again when it has "
                    "finished.")
        if writing:
            return (f"store {self.path} is busy: {held}. DuckDB lets one process write a file "
                    "or many read it, so this write waits until the file is free, however "
                    "long that takes (Ctrl-C stops; rows already written are kept)...")
        return (f"store {self.path} is busy: {held}; waiting for it to finish (up to "
                f"{limit:g} s)...")


class ServerLocation:
    """A PostgreSQL database, attached to an in-memory DuckDB connection as `team`.

    PostgreSQL takes many writers at once and enforces the primary keys, so concurrent
    sweeps from many machines neither wait for each other nor duplicate a row."""

    kind = "server"
    shared = True
    alias = "team"

    def __init__(self, url: str):
        problem = url_problem(url)
        if problem:
            raise StoreError(problem)
        self.url = url

    def __str__(self) -> str:
        return self.url

    @property
    def path(self) -> str:
        return self.url

    def exists(self) -> bool:
        return True

    def check_writable(self) -> None:
        """Reaching the server is the only check worth making here; `connect` makes it
        (the store checks the role's privileges once the tables are known)."""
        import duckdb

        try:
            self.connect(read_only=False).close()
        except duckdb.Error as exc:
            raise self.open_error(exc) from None

    def connect(self, *, read_only: bool, config: dict | None = None, reach=()):
        """A DuckDB connection whose default catalog is the attached PostgreSQL database.

        Loading the extension and attaching cost about half a second, so foldwise's own
        operations share one attached DuckDB instance per process and each gets a cursor
        of it. A user's query never runs here (runner/sandbox.py). With files to `reach`
        (merging a store file or an export), the connection is an instance of its own
        that reaches no other file (see `confine`), so no view of theirs reads one."""
        if reach:
            private = self._open()
            try:
                confine(private, reach)
            except BaseException:
                private.close()
                raise
            return private
        shared = self._shared_instance()
        cursor = shared.cursor()
        try:
            cursor.execute(f"use {self.alias}")
        except BaseException:
            cursor.close()
            raise
        return cursor

    def read_only_instance(self):
        """A DuckDB instance of its own with the database attached read-only, in a server
        session whose transactions are read-only too; for copying rows out, nothing else."""
        import duckdb

        con = duckdb.connect(config=_NO_DOWNLOADS)
        url = read_only_session(self.url)
        try:
            con.execute(f"load '{_quote(postgres_extension())}'")
            con.execute(f"attach '{_quote(url)}' as {self.alias} (type postgres, read_only)")
            con.execute(f"use {self.alias}")
        except duckdb.Error as exc:
            con.close()
            raise self.open_error(RuntimeError(str(exc).replace(url, self.url))) from None
        return con

    _instances: dict = {}

    def _shared_instance(self):
        key = (self.url, os.getpid())
        if key not in ServerLocation._instances:
            ServerLocation._instances[key] = self._open()
        return ServerLocation._instances[key]

    def forget_catalog(self) -> None:
        """Make the shared instance read the server's table list afresh (another process may
        just have created the tables)."""
        key = (self.url, os.getpid())
        if key in ServerLocation._instances:
            ServerLocation._instances[key].execute("call pg_clear_cache()")

    def _open(self):
        import duckdb

        con = duckdb.connect(config=_NO_DOWNLOADS)
        try:
            self.attach_into(con, self.alias, read_only=False)
            con.execute(f"use {self.alias}")
        except BaseException:
            con.close()
            raise
        return con

    def attach_into(self, con, alias: str, *, read_only: bool = True) -> None:
        """Open this database inside a DuckDB connection, as catalog `alias`; loads the
        PostgreSQL extension from its package first (loading twice is harmless)."""
        mode = ", read_only" if read_only else ""
        con.execute(f"load '{_quote(postgres_extension())}'")
        con.execute(f"attach '{_quote(self.url)}' as {alias} (type postgres{mode})")

    @staticmethod
    def is_busy(exc: Exception) -> bool:
        return False

    def busy_message(self, exc: Exception, *, writing: bool, limit: float,
                     gave_up: bool = False) -> str:
        return f"team store {self.url} is busy: {exc}"

    def open_error(self, exc: Exception) -> StoreError:
        reason = " ".join(str(exc).split(": ", 1)[-1].split()).rstrip(".?")
        hint = ""
        if "password" in reason or "authentication" in reason:
            hint = (" Give the password to PostgreSQL's client through PGPASSWORD or a line "
                    "in ~/.pgpass (HOST:PORT:DATABASE:USER:PASSWORD, mode 600).")
        elif "does not exist" in reason:
            hint = " Ask the server's owner to create it (createdb), or fix the URL."
        else:
            hint = " Check the host, port and that the server accepts connections from here."
        return StoreError(f"cannot open team store {self.url}: {reason}.{hint}")


def confine(con, reach=()) -> None:
    """Turn off `con`'s access to files and the network for good, except to the files and
    folders (with all they hold) of `reach`; its own database files stay open to it."""
    where = {"allowed_paths": set(), "allowed_directories": set()}
    for item in map(Path, reach):
        kind = "allowed_directories" if item.is_dir() else "allowed_paths"
        where[kind] |= {str(item.absolute()), str(item.resolve())}
    for setting, names in where.items():
        if names:
            listed = ", ".join(f"'{_quote(n)}'" for n in sorted(names))
            con.execute(f"set {setting} = [{listed}]")
    con.execute("set enable_external_access = false")


def url_problem(url: str) -> str | None:
    """Why a server URL cannot be used as it is (a password in it, no database), or None."""
    parts = urlsplit(url)
    if parts.password is not None or any(k.lower() == "password"
                                         for k, _ in parse_qsl(parts.query)):
        shown = urlunsplit(parts._replace(netloc=_netloc(parts),
                                          query=_no_password(parts.query)))
        return (f"the store URL {shown} carries a password; foldwise never keeps a password "
                "in a spec, a command line or the store. Remove it from the URL and give it "
                "to PostgreSQL's client the usual way: the PGPASSWORD environment variable "
                "or a line in ~/.pgpass (or the file PGPASSFILE names).")
    if not parts.path.strip("/"):
        return (f"the store URL {url} names no database; write it as "
                "postgresql://USER@HOST[:PORT]/DATABASE.")
    return None


def read_only_session(url: str) -> str:
    """The URL with libpq's `options` asking the server for read-only transactions."""
    parts = urlsplit(url)
    pairs = parse_qsl(parts.query, keep_blank_values=True)
    given = [v for k, v in pairs if k == "options"]
    pairs = [(k, v) for k, v in pairs if k != "options"]
    pairs.append(("options", " ".join([*given, _READ_ONLY_SESSION])))
    query = "&".join(f"{quote(k, safe='')}={quote(v, safe='')}" for k, v in pairs)
    return urlunsplit(parts._replace(query=query))


def _command_line(pid: int) -> str:
    """A process's command line, shortened, or '' where /proc does not say."""
    try:
        raw = Path(f"/proc/{pid}/cmdline").read_bytes()
    except OSError:
        return ""
    text = " ".join(raw.decode(errors="replace").replace("\0", " ").split())
    return text if len(text) <= 90 else text[:87] + "..."


def _lock_mode(path: Path, pid: int) -> str | None:
    """'reading' or 'writing' if /proc/locks shows `pid` holding a lock on this file."""
    try:
        st = path.stat()
        lines = Path("/proc/locks").read_text().splitlines()
    except OSError:
        return None
    where = f"{os.major(st.st_dev):02x}:{os.minor(st.st_dev):02x}:{st.st_ino}"
    for line in lines:
        fields = line.split()
        if len(fields) >= 6 and fields[4] == str(pid) and fields[5] == where:
            return {"READ": "reading", "WRITE": "writing"}.get(fields[3])
    return None


def postgres_extension() -> Path:
    """The PostgreSQL extension file shipped by the pinned `duckdb-extension-postgres`.

    Its entry point is named `postgres_scanner`, which DuckDB derives from the file name,
    so it is loaded through a link of that name in a private cache folder."""
    import importlib.util

    import duckdb

    spec = importlib.util.find_spec("duckdb_extension_postgres")
    if spec is None or not spec.submodule_search_locations:
        raise StoreError("a team store on PostgreSQL needs DuckDB's PostgreSQL extension, "
                         "which is not installed. Install it with pip install "
                         "'foldwise[team]' (it matches DuckDB " + duckdb.__version__ + ").")
    folder = Path(spec.submodule_search_locations[0])
    wanted = f"v{duckdb.__version__}"
    found = [p for p in folder.rglob("*.duckdb_extension") if wanted in p.parts]
    if not found:
        raise StoreError(f"the installed duckdb-extension-postgres does not match DuckDB "
                         f"{duckdb.__version__}. Reinstall with pip install 'foldwise[team]', "
                         "which pins the two together.")
    cache = Path(os.environ.get("XDG_CACHE_HOME") or Path.home() / ".cache") / "foldwise" / wanted
    link = cache / "postgres_scanner.duckdb_extension"
    try:
        cache.mkdir(parents=True, exist_ok=True)
        if not link.exists() or link.resolve() != found[0].resolve():
            tmp = cache / f".link-{os.getpid()}"
            tmp.unlink(missing_ok=True)
            tmp.symlink_to(found[0])
            os.replace(tmp, link)
    except OSError:
        link = Path(tempfile.mkdtemp(prefix="foldwise-ext-")) / link.name
        link.symlink_to(found[0])
    return link


def _quote(text) -> str:
    return str(text).replace("'", "''")


def _netloc(parts) -> str:
    host = parts.hostname or ""
    if parts.port:
        host = f"{host}:{parts.port}"
    return f"{parts.username}:***@{host}" if parts.username else f"***@{host}"


def _no_password(query: str) -> str:
    return "&".join(f"{k}={'***' if k.lower() == 'password' else v}"
                    for k, v in parse_qsl(query))
