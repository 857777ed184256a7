"""The results store: computed molecules kept across runs (SQLite).

A group screens week after week; a molecule computed once with a protocol is
never computed again.  The store is one SQLite file (default
``~/.cache/dascreen/store.sqlite``, config ``store.path``; the environment
variable ``DASCREEN_STORE`` overrides it, empty disables it) holding, per
structure key and stage protocol,

* ``structures``: the geometry (molblock, with hydrogens) and the route record
  of :func:`screen.structures.build_structure`;
* ``electronic``: the raw engine results of :func:`screen.electronic.vertical_levels`,
  keyed also by a hash of the geometry they were computed on.

The stage protocol id is a hash of that stage's options (the structures
options; the electronic options without ``threads``), so a change of method or
route never reuses a row.  Every row carries its payload's SHA-256 and the
options it was computed with: a row whose checksum, key, stage, geometry or
protocol does not match what is asked for is ignored (and replaced when the
molecule is recomputed), never used.  Only ``ok`` results are stored.

Concurrency: WAL journal mode, a busy timeout, and every write one
``BEGIN IMMEDIATE`` transaction, so several runs (processes) can share one
store; two runs that compute the same molecule at once both write the same
record.  The per-shard journal (:class:`screen.io.Journal`) stays the source of
truth of a running job: a record is journalled first and stored after, so a
killed job loses nothing.  SQLite's locking needs a local file system (not NFS).

Examples
--------
>>> import tempfile, pathlib
>>> store = ResultStore(pathlib.Path(tempfile.mkdtemp()) / "s.sqlite")
>>> pid = stage_protocol_id("electronic", {"method": "GFN2-xTB"})
>>> store.put("electronic", "m0123456789abcdef", {"method": "GFN2-xTB"}, {"status": "ok", "xtb_ip_ev": 9.1})
>>> store.get("electronic", "m0123456789abcdef", pid)["xtb_ip_ev"]
9.1
>>> store.get("electronic", "m0123456789abcdef", stage_protocol_id("electronic", {"method": "GFN1-xTB"})) is None
True
"""

from __future__ import annotations

import contextlib
import hashlib
import json
import os
import sqlite3
import sys
import time
from collections.abc import Callable, Iterator, Mapping
from dataclasses import asdict, is_dataclass
from pathlib import Path

from screen.errors import InputError
from screen.options import EARLIER_PROTOCOL_VALUES, EARLIER_ROUTE_VALUES, route_structures
from screen.provenance import package_version
from screen.schema import section_defaults

__all__ = ["STORE_ENV", "FORMAT", "ResultStore", "StoreCache", "StoredRecord", "StoreProblem", "StoreReadOnly",
           "library_versions", "other_library_versions", "damaged_store_text", "run_store", "run_store_check",
           "run_store_lines", "store_override_note", "stage_protocol", "stage_protocol_id", "geometry_hash",
           "earlier_structures_id", "store_location", "open_store", "resolve_store", "store_text", "export_store",
           "structures_cache", "electronic_cache", "store_row"]

#: environment variable naming the store file (overrides ``store.path``; empty disables the store)
STORE_ENV = "DASCREEN_STORE"
#: version of the row format; part of every protocol id
FORMAT = 1
_APPLICATION = "dascreen results store"
_STAGES = ("structures", "electronic")
#: options that change no number (left out of the stage protocol)
_NOT_PROTOCOL = {"electronic": ("threads",), "structures": ()}
#: libraries whose version changes a stage's numbers (conformer embedding, force field, xTB), keyed in the stage
#: protocol by major.minor version; the electronic stage takes its engine's package
STAGE_LIBRARIES = {"structures": ("rdkit", "tblite"), "electronic": ()}
#: the versions the store's ids were written with before versions were part of them: at these the version is left
#: out of the id (filled stores stay valid); any other version keys rows of its own, so an upgrade never reuses
#: numbers of the old version (an engine audit: a recalibration after an upgrade silently took stored values)
BASE_LIBRARY_VERSIONS = {"rdkit": "2026.9", "tblite": "0.8"}

_SCHEMA = """
CREATE TABLE IF NOT EXISTS info (name TEXT PRIMARY KEY, value TEXT NOT NULL);
CREATE TABLE IF NOT EXISTS results (
    stage TEXT NOT NULL, key TEXT NOT NULL, protocol_id TEXT NOT NULL, geometry TEXT NOT NULL DEFAULT '',
    payload TEXT NOT NULL, sha256 TEXT NOT NULL, created REAL NOT NULL,
    PRIMARY KEY (stage, key, protocol_id, geometry));
"""


def stage_protocol(stage: str, options) -> dict:
    """The options of ``stage`` that determine its numbers, as a plain dict.

    Parameters
    ----------
    stage : {"structures", "electronic"}
    options : dataclass or mapping
        :class:`screen.options.StructureOptions` / :class:`screen.options.ElectronicOptions` or their mapping.

    The versions (major.minor) of the libraries that change the stage's numbers are part of it as
    ``<library>_version`` (:data:`STAGE_LIBRARIES`, the electronic stage's engine package), except at
    :data:`BASE_LIBRARY_VERSIONS`.

    Examples
    --------
    >>> p = stage_protocol("electronic", {"method": "GFN2-xTB", "threads": 4})
    >>> p["method"], "threads" in p
    ('GFN2-xTB', False)
    """
    if stage not in _STAGES:
        raise ValueError(f"unknown stage {stage!r}; allowed: {', '.join(_STAGES)}")
    data = _options_dict(options)
    if stage == "structures":
        data = route_structures(data)
    earlier = EARLIER_ROUTE_VALUES[stage]
    out = {k: v for k, v in sorted(data.items())
           if k not in _NOT_PROTOCOL[stage] and not (k in earlier and v == earlier[k])}
    libraries = STAGE_LIBRARIES[stage] + ((str(data.get("engine") or "tblite"),) if stage == "electronic" else ())
    for lib in libraries:
        version = ".".join(package_version(lib).split(".")[:2])
        if BASE_LIBRARY_VERSIONS.get(lib) != version:
            out[f"{lib}_version"] = version
    return out


def _options_dict(options) -> dict:
    """Stage options as a plain dict (from an options dataclass or a mapping)."""
    return asdict(options) if is_dataclass(options) else dict(options)


def earlier_structures_id(options) -> str:
    """The structures stage id of ``options`` with the newer options at their earlier values
    (:data:`screen.options.EARLIER_PROTOCOL_VALUES`): where molecules those options leave unchanged are stored.

    Examples
    --------
    >>> earlier_structures_id({"rigid_embedding": "fused_system"}) == stage_protocol_id("structures", {})
    True
    """
    data = _options_dict(options)
    return stage_protocol_id("structures", {**data, **EARLIER_PROTOCOL_VALUES["structures"]})


def stage_protocol_id(stage: str, options) -> str:
    """Short id of a stage protocol: ``<stage>-<16 hex digits>`` of its options and :data:`FORMAT`.

    Examples
    --------
    >>> a = stage_protocol_id("structures", {"seed": 1})
    >>> a.startswith("structures-"), a == stage_protocol_id("structures", {"seed": 2})
    (True, False)
    """
    return _protocol_hash(stage, stage_protocol(stage, options))


def _protocol_hash(stage: str, protocol: Mapping) -> str:
    """The id of a stage protocol as it is (no option or library version re-derived): what a row's stored
    protocol must hash to (:func:`_checked`), whichever library versions the reading environment has."""
    text = json.dumps({"format": FORMAT, "stage": stage, "options": dict(protocol)}, sort_keys=True, default=str)
    return f"{stage}-{hashlib.sha256(text.encode()).hexdigest()[:16]}"


def library_versions(stage: str, protocol: Mapping) -> dict[str, str]:
    """The library versions (major.minor) a stage protocol was computed with: its ``<library>_version`` entries,
    :data:`BASE_LIBRARY_VERSIONS` for those it leaves out.

    Examples
    --------
    >>> library_versions("structures", {"seed": 1, "rdkit_version": "2027.3"})
    {'rdkit': '2027.3', 'tblite': '0.8'}
    """
    libraries = STAGE_LIBRARIES.get(stage, ()) + ((str(protocol.get("engine") or "tblite"),)
                                                  if stage == "electronic" else ())
    return {lib: str(protocol.get(f"{lib}_version", BASE_LIBRARY_VERSIONS.get(lib, "?"))) for lib in libraries}


def other_library_versions(stage: str, protocol: Mapping) -> str:
    """``"rdkit 2026.9 (installed 2027.3)"`` for the libraries a stored protocol was computed with at other
    versions than the installed ones (``""``: none): rows another environment wrote, kept as another protocol."""
    out = []
    for lib, version in library_versions(stage, protocol).items():
        installed = ".".join(package_version(lib).split(".")[:2])
        if version != installed:
            out.append(f"{lib} {version} (installed {installed})")
    return ", ".join(out)


def geometry_hash(numbers, positions_a) -> str:
    """Hash of a geometry: atomic numbers and positions rounded to 10⁻⁴ Å (the SD-file precision).

    Parameters
    ----------
    numbers : sequence of int
    positions_a : array_like, shape (n, 3)
        Positions [Å].

    Examples
    --------
    >>> geometry_hash([1, 1], [[0, 0, 0], [0, 0, 0.74]]) == geometry_hash([1, 1], [[0, 0, 0], [0, 0, 0.740001]])
    True
    """
    text = ";".join(f"{int(z)}:{float(x) + 0.0:.4f},{float(y) + 0.0:.4f},{float(w) + 0.0:.4f}"
                    for z, (x, y, w) in zip(numbers, positions_a))
    return hashlib.sha256(text.replace("-0.0000", "0.0000").encode()).hexdigest()[:24]


class StoreProblem(InputError):
    """The results store cannot be used (no SQLite database, damaged, another program's, cannot be opened);
    ``why`` is the reason without the path (the run's console warning, a job log's line)."""

    def __init__(self, message: str, why: str = ""):
        super().__init__(message)
        self.why = why or message


class StoreLocked(StoreProblem):
    """Another process holds a lock on the store longer than the timeout: the store is busy, not broken."""


class StoreReadOnly(StoreProblem):
    """The store can be read but not written (a read-only file, folder or file system)."""


def _damage(exc: sqlite3.DatabaseError) -> str:
    """The reason of an SQLite error that is no passing condition: ``is damaged (...)`` or ``not a usable SQLite
    database (...)``."""
    name = getattr(exc, "sqlite_errorname", "") or ""
    if name.startswith("SQLITE_CORRUPT") or "malformed" in str(exc):
        return f"is damaged ({exc})"
    return f"not a usable SQLite database ({exc})"


def _read_only_file_system(folder: Path) -> bool:
    try:
        return bool(os.statvfs(folder).f_flag & os.ST_RDONLY)
    except (OSError, AttributeError):  # a folder that does not exist, or no statvfs on this system
        return False


def _full_disk_error(exc: sqlite3.OperationalError) -> bool:
    """An SQLite error of a full disk (no room for a write, or for the -shm file a WAL store is read through)."""
    name = getattr(exc, "sqlite_errorname", "") or ""
    return name.startswith(("SQLITE_FULL", "SQLITE_IOERR_SHM")) or "database or disk is full" in str(exc)


#: how long a run or ``dascreen store`` waits for another process's lock on the store [s]: the schema's default of
#: ``store.timeout_s`` (one source; a run's jobs take the configured value); said on standard error as soon as the
#: wait begins (:meth:`ResultStore._patiently`)
LOCK_TIMEOUT_S = float(section_defaults("store")["timeout_s"])


def _locked_error(exc: Exception) -> bool:
    """An SQLite error of a lock another connection holds (busy), not of a broken file.

    Examples
    --------
    >>> _locked_error(sqlite3.OperationalError("database is locked"))
    True
    >>> _locked_error(sqlite3.OperationalError("disk I/O error"))
    False
    """
    name = getattr(exc, "sqlite_errorname", "") or ""
    return name.startswith(("SQLITE_BUSY", "SQLITE_LOCKED")) or "database is locked" in str(exc) or \
        "database table is locked" in str(exc)


def _locked_why(timeout_s: float) -> str:
    """The reason of a store another process kept locked for the whole wait, without the path (an exception's
    ``why``, a job log's line); every message of a locked store says it (:func:`_locked_text`, :func:`run_store_check`).

    Examples
    --------
    >>> _locked_why(60.0)
    'is locked by another process (busy, not broken) after 60 s of waiting'
    """
    return f"is locked by another process (busy, not broken) after {timeout_s:g} s of waiting"


#: the fix of a locked store for ``dascreen store`` (a run says its own: it computes without the store)
_LOCKED_FIX = ("wait for that process to finish and run the command again (moving the file away could lose that "
               "process's results)")
#: the fix of a locked store in a run's warning (:func:`run_store_check`: the run computes without the store)
_LOCKED_RUN_FIX = f"wait for that process to finish and run again to use it, or set {STORE_ENV} to another file"


def _locked_text(path, timeout_s: float, fix: str = _LOCKED_FIX) -> str:
    """The one message of a store another process kept locked: ``results store PATH`` + :func:`_locked_why` + ``fix``.

    Examples
    --------
    >>> _locked_text("/s.sqlite", 0.5, "wait")
    'results store /s.sqlite is locked by another process (busy, not broken) after 0.5 s of waiting: wait'
    """
    return f"{_said(path, _locked_why(timeout_s))}: {fix}"


def _said(path, why: str) -> str:
    """``results store PATH is damaged (...)`` / ``results store PATH: not ...``."""
    return f"results store {path} {why}" if why.startswith("is ") else f"results store {path}: {why}"


def _read_only_error(exc: sqlite3.OperationalError) -> bool:
    """An SQLite error that says the file (or its folder, for the -wal and -shm files) cannot be written."""
    name = getattr(exc, "sqlite_errorname", "") or ""
    text = str(exc)
    return name.startswith(("SQLITE_READONLY", "SQLITE_CANTOPEN", "SQLITE_PERM")) or \
        "readonly database" in text or "unable to open database file" in text


def _move_away(path) -> str:
    """The fix of a damaged store file, one wording for every message that gives it."""
    return f"move it away (e.g. `mv {path} {path}.damaged`)"


#: what moving a damaged store away means for the runs
_AFTER_MOVE = "runs then start a new store and the molecules it held are computed again"


def damaged_store_text(path, exc: Exception, timeout_s: float | None = None) -> str:
    """The one message of a store file SQLite cannot read through (``dascreen store``; exit code 2); ``timeout_s``:
    how long the store waited for a lock (default :data:`LOCK_TIMEOUT_S`)."""
    why = _damage(exc) if isinstance(exc, sqlite3.DatabaseError) and \
        not isinstance(exc, sqlite3.OperationalError) else f"could not be read ({exc})"
    if why.startswith("is damaged"):
        return f"results store {path} {why}: {_move_away(path)}; {_AFTER_MOVE}"
    if _locked_error(exc):  # another process took a lock while the store was read: busy, not broken
        return _locked_text(path, LOCK_TIMEOUT_S if timeout_s is None else timeout_s)
    return f"results store {path}: {why}"


def _digest(text: str) -> str:
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


class ResultStore:
    """One SQLite results store (see the module notes).

    Parameters
    ----------
    path : path-like
        The database file; created (with its folder) on first use.
    timeout_s : float
        How long a reader or writer waits for another process's lock [s] (default :data:`LOCK_TIMEOUT_S`).
    read_only : bool
        Open an existing store without changing it (``dascreen store list|export``): nothing is created, no
        table is added, and a file that is not a dascreen store (an empty file, another program's database) is
        refused instead of being turned into one (a new user's audit: ``store list --store afile`` made an SQLite
        database of ``afile``).

    Raises
    ------
    InputError
        The file exists but is not a SQLite database or is another program's database; read-only: it does not
        exist or holds no dascreen store.
    """

    def __init__(self, path: str | os.PathLike, timeout_s: float | None = None, read_only: bool = False):
        self.path = Path(path).expanduser()
        self.timeout_s = float(LOCK_TIMEOUT_S if timeout_s is None else timeout_s)
        self._said_wait = False
        self._waiting = False  # inside _patiently: an inner call (a transaction while opening) leaves the wait to it
        self.read_only = bool(read_only)
        self._conn: sqlite3.Connection | None = None
        self._pid = None
        #: why the store can only be read (a read-only file, folder or file system), None when it can be written
        self.read_only_reason: str | None = None

    # ------------------------------------------------------------------ connection
    def _patiently(self, conn: sqlite3.Connection, run: Callable):
        """``run()`` at once; when another process holds a lock on the store, say so on standard error (once per
        store) and run it again, waiting up to :attr:`timeout_s` (a filesystem audit: a locked store was waited for
        60 s in silence). Inside another ``_patiently`` (a transaction while opening) ``run()`` only: the outer
        call says the wait and runs it all again."""
        if self._waiting:
            return run()
        self._waiting = True
        try:
            conn.execute("PRAGMA busy_timeout = 0")
            try:
                return run()
            except sqlite3.OperationalError as exc:
                if not _locked_error(exc) or self.timeout_s <= 0:
                    raise
                if not self._said_wait:
                    self._said_wait = True
                    print(f"dascreen: results store {self.path} is locked by another process; waiting up to "
                          f"{self.timeout_s:g} s", file=sys.stderr, flush=True)
            finally:
                conn.execute(f"PRAGMA busy_timeout = {int(self.timeout_s * 1000)}")
            return run()
        finally:
            self._waiting = False

    def _locked(self, fix: str = f"{_LOCKED_FIX}; the file was not changed") -> StoreLocked:
        """The exception of a store another process kept locked for the whole wait (:func:`_locked_text`)."""
        return StoreLocked(_locked_text(self.path, self.timeout_s, fix), why=_locked_why(self.timeout_s))

    @contextlib.contextmanager
    def _transaction(self, conn: sqlite3.Connection) -> Iterator[None]:
        """One write transaction; a wait for another process's lock is said as it begins (:meth:`_patiently`), and
        a lock held for the whole wait raises :class:`StoreLocked` (the file was not changed)."""
        try:
            self._patiently(conn, lambda: conn.execute("BEGIN IMMEDIATE"))
        except sqlite3.OperationalError as exc:
            if _locked_error(exc) and not self._waiting:
                raise self._locked() from None
            raise
        try:
            yield
        except BaseException:
            conn.execute("ROLLBACK")
            raise
        conn.execute("COMMIT")

    def _refusal(self, why: str) -> StoreProblem:
        if why.startswith("is damaged"):  # a fact-check: damage found on opening pointed to another file, not the fix
            return StoreProblem(f"{_said(self.path, why)}: {_move_away(self.path)}; {_AFTER_MOVE}; the file was not "
                                "changed", why=why)
        return StoreProblem(f"{_said(self.path, why)}; give the store file of a run (store.path, default "
                            "~/.cache/dascreen/store.sqlite); the file was not changed", why=why)

    def _open_read_only(self, modes=("rw", "ro", "immutable")) -> sqlite3.Connection:
        """A connection that never writes the file (not even the schema), opened the first of ``modes`` that can
        read it: ``rw`` (told never to write: the connection that closes last removes the -wal and -shm side
        files, which one of mode=ro leaves behind), ``ro`` (a file the user may only read), ``immutable`` (a WAL
        store in a folder nobody may write, where not even the -shm file can be made: read as it is on disk).

        Raises
        ------
        StoreProblem
            The file is no SQLite database, is damaged, or holds no dascreen results store.
        """
        from urllib.parse import quote

        try:
            with open(self.path, "rb") as fh:
                head = fh.read(16)
        except OSError as exc:
            raise self._refusal(f"cannot be read ({exc.strerror or exc})") from None
        if not head:
            raise self._refusal("an empty file, not a results store")
        if head != b"SQLite format 3\x00":
            raise self._refusal("not a results store (not an SQLite database)")
        uri = f"file:{quote(str(self.path.absolute()))}"
        query = {"rw": "?mode=rw", "ro": "?mode=ro", "immutable": "?mode=ro&immutable=1"}
        last: Exception | None = None
        for mode in modes:
            conn = None
            try:
                conn = sqlite3.connect(uri + query[mode], uri=True, timeout=self.timeout_s, isolation_level=None)
                conn.execute("PRAGMA query_only = ON")

                def opened(conn=conn):
                    tables = {r[0] for r in conn.execute("SELECT name FROM sqlite_master WHERE type = 'table'")}
                    app = (conn.execute("SELECT value FROM info WHERE name = 'application'").fetchone() or [None])[0] \
                        if "info" in tables else None
                    return tables, app

                tables, app = self._patiently(conn, opened)
                break
            except sqlite3.OperationalError as exc:  # cannot be opened this way (read-only file or folder): next
                if conn is not None:
                    conn.close()
                if _locked_error(exc):  # busy, not broken: no advice to move a file another process writes
                    raise self._locked() from None
                if not (_read_only_error(exc) or _full_disk_error(exc)):  # e.g. locked: no reading without locks
                    raise self._refusal(f"cannot be read ({exc})") from None
                last = exc
            except sqlite3.DatabaseError as exc:  # damaged or not a database: no other mode reads it either
                if conn is not None:
                    conn.close()
                raise self._refusal(f"{_damage(exc)}") from None
        else:
            raise self._refusal(f"cannot be read ({last})") from None
        if app != _APPLICATION or "results" not in tables:
            conn.close()
            owner = f"belongs to {app!r}" if app else "holds no dascreen results (an SQLite database of another kind)"
            raise self._refusal(f"the database {owner}, not a dascreen results store")
        return conn

    def write_problem(self) -> str | None:
        """Why this process cannot write the store file, as far as the system says before trying (None: it can;
        a file that does not exist yet: whether it can be created is not checked here)."""
        folder = self.path.parent
        if _read_only_file_system(folder):
            return "on a read-only file system"
        if self.path.exists() and not os.access(self.path, os.W_OK):
            return "the file cannot be written: read-only permissions or an immutable file"
        if folder.is_dir() and not os.access(folder, os.W_OK):
            return (f"its folder cannot be written, and SQLite keeps {self.path.name}-wal and {self.path.name}-shm "
                    "beside it")
        return None

    def _connect(self) -> sqlite3.Connection:
        if self._conn is not None and self._pid == os.getpid():
            return self._conn
        if self.read_only:
            self._conn, self._pid = self._open_read_only(), os.getpid()
            return self._conn
        reason = self.write_problem() if self.path.is_file() else None
        if reason is not None:  # read where the system allows it; nothing written, not even the schema
            self._conn, self._pid = self._open_read_only(("ro", "immutable")), os.getpid()
            self.read_only_reason = reason
            return self._conn
        self.path.parent.mkdir(parents=True, exist_ok=True)
        _create_empty(self.path)
        conn = None
        try:
            conn = sqlite3.connect(str(self.path), timeout=self.timeout_s, isolation_level=None)

            def opened(conn=conn):
                tables = {r[0] for r in conn.execute("SELECT name FROM sqlite_master WHERE type = 'table'")}
                if conn.execute("PRAGMA journal_mode").fetchone()[0] != "wal":
                    conn.execute("PRAGMA journal_mode = WAL")
                conn.execute("PRAGMA synchronous = NORMAL")
                if not {"info", "results"} <= tables:  # a new store: its schema (a filled one is never written here)
                    with self._transaction(conn):
                        for statement in filter(str.strip, _SCHEMA.split(";")):
                            conn.execute(statement)
                        conn.execute("INSERT OR IGNORE INTO info VALUES ('application', ?)", (_APPLICATION,))
                        conn.execute("INSERT OR IGNORE INTO info VALUES ('format', ?)", (str(FORMAT),))
                return (conn.execute("SELECT value FROM info WHERE name = 'application'").fetchone() or [None])[0]

            app = self._patiently(conn, opened)
        except sqlite3.OperationalError as exc:
            if conn is not None:
                conn.close()
            if _locked_error(exc):  # busy, not broken: no advice to move a file another process writes
                raise self._locked(f"{_LOCKED_FIX}, or set store.path to another file") from None
            full = _full_disk_error(exc)
            if (_read_only_error(exc) or full) and self.path.is_file():  # a write the system refused unannounced
                self._conn, self._pid = self._open_read_only(("ro", "immutable")), os.getpid()
                self.read_only_reason = f"its disk is full: {exc}" if full else str(exc)
                return self._conn
            raise StoreProblem(f"results store {self.path}: cannot be used ({exc}); move it away or set store.path "
                               "to another file", why=f"cannot be used ({exc})") from None
        except sqlite3.DatabaseError as exc:
            if conn is not None:
                conn.close()
            why = _damage(exc)
            raise StoreProblem(f"{_said(self.path, why)}; move it away or set store.path to another file",
                               why=why) from None
        if app != _APPLICATION:
            conn.close()
            raise StoreProblem(f"results store {self.path}: the database belongs to {app!r}, not dascreen",
                               why=f"the database belongs to {app!r}, not dascreen")
        self._conn, self._pid = conn, os.getpid()
        return conn

    def writable(self) -> bool:
        """Whether new rows can be written (opens the store; False for ``read_only`` or a read-only store)."""
        self._connect()
        return not self.read_only and self.read_only_reason is None

    def _writing(self, what: str) -> sqlite3.Connection:
        conn = self._connect()
        if self.read_only_reason is not None:
            state = "cannot be written" if self.read_only_reason.startswith("its disk is full") else "is read-only"
            raise StoreReadOnly(f"results store {self.path} {state} ({self.read_only_reason}): {what}",
                                why=f"{self.path} {state} ({self.read_only_reason})")
        return conn

    def close(self) -> None:
        """Close the connection (it reopens on the next use)."""
        if self._conn is not None and self._pid == os.getpid():
            self._conn.close()
        self._conn = None

    # ------------------------------------------------------------------ rows
    def put(self, stage: str, key: str, options, record: Mapping, geometry: str = "") -> None:
        """Store one molecule's ``record`` for ``stage`` computed with ``options`` (replaces an older row).

        Parameters
        ----------
        stage : {"structures", "electronic"}
        key : str
            Structure key (``m`` + 16 hex digits).
        options : dataclass or mapping
            The stage options the record was computed with.
        record : mapping
            JSON-serialisable result.
        geometry : str
            :func:`geometry_hash` of the input geometry (electronic rows).
        """
        self.put_rows([store_row(stage, key, options, record, geometry)])

    def put_rows(self, rows) -> None:
        """Store several rows (:func:`store_row`) in one transaction: another run sees all of them or none.

        Raises
        ------
        StoreReadOnly
            The store can only be read (:attr:`read_only_reason`).
        """
        conn = self._writing("new results are not stored")
        with self._transaction(conn):
            conn.executemany("INSERT OR REPLACE INTO results VALUES (?, ?, ?, ?, ?, ?, ?)", rows)

    def get(self, stage: str, key: str, protocol_id: str, geometry: str = "") -> dict | None:
        """The stored record of ``key``, or None when there is none or the row does not check out."""
        row = self._connect().execute(
            "SELECT payload, sha256 FROM results WHERE stage = ? AND key = ? AND protocol_id = ? AND geometry = ?",
            (stage, key, protocol_id, geometry)).fetchone()
        if row is None:
            return None
        return _checked(row[0], row[1], stage, key, protocol_id, geometry)

    def rows(self, stage: str | None = None, protocol_id: str | None = None) -> Iterator[dict]:
        """Every row (optionally of one stage / protocol), checked: ``stage, key, protocol_id, geometry,
        created, ok, record`` (record None for a row that does not check out)."""
        sql, args = "SELECT stage, key, protocol_id, geometry, created, payload, sha256 FROM results", []
        where = [(c, v) for c, v in (("stage", stage), ("protocol_id", protocol_id)) if v]
        if where:
            sql += " WHERE " + " AND ".join(f"{c} = ?" for c, _ in where)
            args = [v for _, v in where]
        for st, key, pid, geom, created, payload, sha in self._connect().execute(sql + " ORDER BY stage, key", args):
            record = _checked(payload, sha, st, key, pid, geom)
            yield {"stage": st, "key": key, "protocol_id": pid, "geometry": geom, "created": created,
                   "ok": record is not None, "record": record,
                   "protocol": (_loads(payload) or {}).get("protocol") if record is not None else None}

    def check(self) -> ResultStore:
        """Open the store now (a file that is not a store is refused here, before any work); return it."""
        self._connect()
        return self

    def stored_protocol(self, stage: str, protocol_id: str) -> dict | None:
        """The protocol (options and library versions) one row of ``stage`` / ``protocol_id`` was computed with
        (None when there is no row or its protocol does not hash to the id)."""
        row = self._connect().execute("SELECT payload FROM results WHERE stage = ? AND protocol_id = ? LIMIT 1",
                                      (stage, protocol_id)).fetchone()
        protocol = (_loads(row[0]) or {}).get("protocol") if row else None
        return protocol if isinstance(protocol, dict) and _protocol_hash(stage, protocol) == protocol_id else None

    def protocols(self) -> list[str]:
        """The stage protocol ids the store holds rows of, sorted."""
        return sorted({row["protocol_id"] for row in self.summary()})

    def summary(self) -> list[dict]:
        """Rows per stage and protocol: ``stage, protocol_id, entries, first, last`` (Unix times)."""
        cur = self._connect().execute(
            "SELECT stage, protocol_id, COUNT(*), MIN(created), MAX(created) FROM results "
            "GROUP BY stage, protocol_id ORDER BY stage, MAX(created) DESC")
        return [{"stage": s, "protocol_id": p, "entries": n, "first": a, "last": b} for s, p, n, a, b in cur]

    def prune(self, *, protocols=(), older_than_s: float | None = None, dry_run: bool = False) -> dict:
        """Delete rows of some protocols, rows older than ``older_than_s`` and rows that do not check out.

        Returns
        -------
        dict
            ``{'protocol': n, 'old': n, 'corrupt': n}`` rows deleted (or that would be, with ``dry_run``).
        """
        if not dry_run:  # refused before anything is counted: a read-only store deletes nothing
            self._writing("nothing can be deleted; `dascreen store prune --dry-run` counts what would be")
        now = time.time()
        doomed: dict[str, list] = {"protocol": [], "old": [], "corrupt": []}
        for row in self.rows():
            ident = (row["stage"], row["key"], row["protocol_id"], row["geometry"])
            if not row["ok"]:
                doomed["corrupt"].append(ident)
            elif row["protocol_id"] in protocols:
                doomed["protocol"].append(ident)
            elif older_than_s is not None and now - row["created"] > older_than_s:
                doomed["old"].append(ident)
        if not dry_run:
            conn = self._connect()
            with self._transaction(conn):
                for idents in doomed.values():
                    conn.executemany("DELETE FROM results WHERE stage = ? AND key = ? AND protocol_id = ? AND "
                                     "geometry = ?", idents)
            self._patiently(conn, lambda: conn.execute("VACUUM"))
        return {k: len(v) for k, v in doomed.items()}


def store_row(stage: str, key: str, options, record: Mapping, geometry: str = "") -> tuple:
    """The table row of one record (arguments as :meth:`ResultStore.put`): stage, key, protocol id,
    geometry, payload, its SHA-256 and the time."""
    protocol = stage_protocol(stage, options)
    pid = stage_protocol_id(stage, protocol)
    payload = json.dumps({"stage": stage, "key": key, "protocol_id": pid, "protocol": protocol,
                          "geometry": geometry, "record": dict(record)}, sort_keys=True, default=_plain)
    return stage, key, pid, geometry, payload, _digest(payload), time.time()


def _plain(obj):
    try:
        import numpy as np

        if isinstance(obj, np.generic):
            return obj.item()
    except ImportError:  # pragma: no cover
        pass
    raise TypeError(f"not JSON serialisable: {type(obj).__name__}")


def _loads(text: str):
    try:
        return json.loads(text)
    except (TypeError, ValueError):
        return None


def _checked(payload: str, sha: str, stage: str, key: str, protocol_id: str, geometry: str) -> dict | None:
    """The record of a row if its checksum, identity and protocol all match; else None."""
    if not isinstance(payload, str) or _digest(payload) != sha:
        return None
    data = _loads(payload)
    if not isinstance(data, dict) or not isinstance(data.get("record"), dict):
        return None
    if (data.get("stage"), data.get("key"), data.get("protocol_id"), data.get("geometry")) != \
            (stage, key, protocol_id, geometry):
        return None
    # the row's own protocol, hashed as stored: re-deriving it (stage_protocol) put the installed library versions
    # in, so a prune from an environment with another RDKit or tblite deleted every row of the other version
    if not isinstance(data.get("protocol"), dict) or _protocol_hash(stage, data["protocol"]) != protocol_id:
        return None
    return data["record"]


# --------------------------------------------------------------------------- the stages' side

def _create_empty(path: Path) -> None:
    """Create a new store file empty with the permissions the umask gives (``0o666 & ~umask``; SQLite then makes
    it a database, and its ``-wal`` and ``-shm`` files take its permissions). SQLite creates a file itself with
    ``rw-r--r--`` at most, so a group sharing a store under umask 002 could not write it (an audit of unusual
    environments). Nothing happens when the file exists or cannot be created (SQLite says why)."""
    try:
        os.close(os.open(path, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o666))
    except OSError:
        pass


class StoredRecord(dict):
    """A journal record rebuilt from the results store: a dict like any record, whose journal line is marked
    (:attr:`screen.io.Journal.STORE_FIELD`) so the progress display leaves it out of the rate; the record read
    back from the journal is the same plain dict.

    Examples
    --------
    >>> rec = StoredRecord({"key": "m1"})
    >>> rec == {"key": "m1"}, rec.from_store
    (True, True)
    """

    from_store = True


class StoreCache:
    """What a compute stage's per-molecule loop asks the store (:func:`screen.batch.run_journalled`).

    Parameters
    ----------
    store : ResultStore
    stage : {"structures", "electronic"}
    options : dataclass or mapping
        The stage options (the protocol).
    key : callable
        ``key(item)`` → structure key.
    geometry : callable, optional
        ``geometry(item)`` → :func:`geometry_hash` of the item's input geometry ("" for none; None: the
        item is not looked up nor stored).
    base : callable, optional
        ``base(item)`` → fields of the journal record that come from the item itself (not stored;
        merged into a stored record on the way out).
    valid : callable, optional
        ``valid(record)`` → False for a stored record that must not be used (e.g. an unreadable molblock).
    idle : callable, optional
        ``idle(item)`` → option values that give this item the same numbers as ``options`` (e.g. the
        earlier value of an option that changes nothing for this molecule); its protocol id is that of
        ``options`` with them, so a new default recomputes only the molecules it changes.

    Notes
    -----
    A store that cannot be read or written never stops a stage: the molecule is
    computed, a warning goes to the job's log and the log's last lines say the store
    was not usable (:attr:`read_problem`) or new results were not stored
    (:attr:`write_problem`).
    """

    def __init__(self, store: ResultStore, stage: str, options, key: Callable, geometry: Callable | None = None,
                 base: Callable | None = None, valid: Callable | None = None, idle: Callable | None = None):
        self.store, self.stage, self.options = store, stage, stage_protocol(stage, options)
        self.protocol_id = stage_protocol_id(stage, self.options)
        self._data = _options_dict(options)
        self._idle, self._protocols = idle or (lambda item: {}), {}
        self._key, self._geometry = key, geometry or (lambda item: "")
        self._base, self._valid = base or (lambda item: {}), valid or (lambda rec: True)
        self.hits = self.misses = 0
        #: why the store could not be read (its molecules were computed) / written (new results not kept); the
        #: job log's last lines say so instead of counting "0 of N molecules from the results store"
        self.read_problem: str | None = None
        self.write_problem: str | None = None

    def lookup(self, item) -> dict | None:
        """The journal record of ``item`` rebuilt from the store, or None (compute it)."""
        geometry = self._geometry(item)
        if geometry is None:  # nothing to look up (e.g. the structure failed)
            return None
        try:
            rec = self.store.get(self.stage, self._key(item), self.protocol_of(item)[1], geometry)
        except (sqlite3.Error, InputError, OSError) as exc:
            self._warn(exc, reading=True)
            rec = None
        if rec is None or rec.get("status") != "ok" or not self._valid(rec):
            self.misses += 1
            return None
        self.hits += 1
        return StoredRecord({**rec, **self._base(item), "key": self._key(item)})

    def protocol_of(self, item) -> tuple[dict, str]:
        """The stage protocol of ``item`` and its id (:attr:`options` unless ``idle(item)`` names values)."""
        same = self._idle(item)
        if not same:
            return self.options, self.protocol_id
        marker = tuple(sorted(same.items()))
        if marker not in self._protocols:
            options = stage_protocol(self.stage, {**self._data, **same})
            self._protocols[marker] = (options, stage_protocol_id(self.stage, options))
        return self._protocols[marker]

    def remember(self, item, record: Mapping) -> None:
        """Store a freshly computed ``ok`` record (without the item's own fields)."""
        self.write([self.row(item, record)])

    def row(self, item, record: Mapping) -> tuple | None:
        """The store row of a freshly computed record (:func:`store_row`); None when it is not stored
        (not ``ok``, or an item without geometry)."""
        geometry = self._geometry(item)
        if record.get("status") != "ok" or geometry is None:
            return None
        own = self._base(item)
        return store_row(self.stage, self._key(item), self.protocol_of(item)[0],
                         {k: v for k, v in record.items() if k not in own}, geometry)

    def keep(self, item, record: Mapping) -> None:
        """Store ``record`` of ``item`` unless the store holds it already.

        For the last record of a resumed journal: a job killed between that journal
        line and its store write left the molecule journalled but not stored.
        """
        row = self.row(item, record)
        if row is None:
            return
        try:
            held = self.store.get(self.stage, self._key(item), self.protocol_of(item)[1], self._geometry(item))
        except (sqlite3.Error, InputError, OSError) as exc:
            self._warn(exc, reading=True)
            return
        try:
            if held is None:
                self.store.put_rows([row])
        except (sqlite3.Error, InputError, OSError) as exc:
            self._warn(exc, reading=False)

    def write(self, rows) -> None:
        """Store rows of :meth:`row` (of this or another stage's cache; Nones skipped) in one transaction."""
        rows = [r for r in rows if r is not None]
        if not rows:
            return
        try:
            self.store.put_rows(rows)
        except (sqlite3.Error, InputError, OSError) as exc:
            self._warn(exc, reading=False)

    def _warn(self, exc: Exception, reading: bool) -> None:
        """Say the first problem of each kind in the job's log (standard error) and keep it for the last lines."""
        text = getattr(exc, "why", None) or str(exc) or type(exc).__name__
        if reading and self.read_problem is None:
            self.read_problem = text
            print(f"dascreen: results store {self.store.path} was not usable: {text}; the molecules are computed",
                  file=sys.stderr, flush=True)
        elif not reading and self.write_problem is None and self.read_problem is None:
            self.write_problem = text
            print(f"dascreen: results store {self.store.path}: new results were not stored: {text}",
                  file=sys.stderr, flush=True)


def _molblock_ok(record: Mapping) -> bool:
    from rdkit import Chem, rdBase

    with rdBase.BlockLogs():
        mol = Chem.MolFromMolBlock(str(record.get("molblock", "")), removeHs=False)
    return mol is not None and mol.GetNumConformers() == 1


def structures_cache(store, options, idle: Callable | None = None) -> StoreCache | None:
    """The cache of :func:`screen.structures.run_structures` (items are ``(key, smiles)``); None without a store.

    A stored geometry is used only when its molblock reads back as one conformer. ``idle``: as in
    :class:`StoreCache` (:func:`screen.structures.idle_options`).
    """
    store = resolve_store(store)
    if store is None:
        return None
    return StoreCache(store, "structures", options, key=lambda item: item[0], valid=_molblock_ok, idle=idle)


def electronic_cache(store, options, mols: Mapping, carried) -> StoreCache | None:
    """The cache of :func:`screen.electronic.run_electronic` (items are structure-table rows); None without a store.

    Rows are keyed by the structure key and :func:`geometry_hash` of the geometry in
    ``mols`` (so results computed on another geometry are never used); the fields the
    row itself carries (``carried`` and ``structure_wall_s``) are not stored.
    """
    store = resolve_store(store)
    if store is None:
        return None

    def geometry(row):
        mol = mols.get(row["key"])
        if row.get("status") != "ok" or mol is None:
            return None
        return geometry_hash([a.GetAtomicNum() for a in mol.GetAtoms()], mol.GetConformer().GetPositions())

    def base(row):
        return {**{c: row.get(c, "") for c in carried}, "structure_wall_s": row.get("wall_s", "")}

    return StoreCache(store, "electronic", options, key=lambda row: row["key"], geometry=geometry, base=base)


# --------------------------------------------------------------------------- where the store is

def store_location(config=None) -> Path | None:
    """The store file a run uses: ``$DASCREEN_STORE`` if set (empty: none), else ``store.path``.

    Parameters
    ----------
    config : screen.config.Config or mapping, optional
        With a ``store`` section; without one the environment alone decides.

    Examples
    --------
    >>> import os
    >>> saved = os.environ.pop(STORE_ENV, None)
    >>> store_location({"store": {"path": "/tmp/x.sqlite"}}).as_posix()
    '/tmp/x.sqlite'
    >>> os.environ[STORE_ENV] = ""
    >>> store_location({"store": {"path": "/tmp/x.sqlite"}}) is None
    True
    >>> _ = os.environ.pop(STORE_ENV) if saved is None else os.environ.update({STORE_ENV: saved})
    """
    if STORE_ENV in os.environ:
        text = os.environ[STORE_ENV].strip()
    else:
        text = ((config or {}).get("store") or {}).get("path") or ""
    return Path(text).expanduser().absolute() if text else None


def open_store(config=None) -> ResultStore | None:
    """The run's :class:`ResultStore` (None when disabled), see :func:`store_location`."""
    path = store_location(config)
    if path is None:
        return None
    timeout = ((config or {}).get("store") or {}).get("timeout_s", LOCK_TIMEOUT_S)
    return ResultStore(path, timeout_s=timeout)


#: below this much free space on the store's disk [MB], a run's check of the store warns that new results may not be
#: stored (a row is a few kB: 64 MB keep some ten thousand molecules)
LOW_SPACE_MB = 64
#: a store file up to this size [MB] is checked for damage before a run (``PRAGMA quick_check`` reads every page:
#: well under a second for this size on a local disk); a larger one is left to the jobs, which say a damaged page in
#: their logs
CHECK_MAX_MB = 512


def run_store_lines(path: Path | None, why_none: str = "store.path is null") -> list[str]:
    """The console lines of a run about its store: which file it uses, and one warning when it cannot be used
    (:func:`run_store_check`)."""
    return run_store_check(path, why_none)[0]


def run_store_check(path: Path | None, why_none: str = "store.path is null") -> tuple[list[str], bool]:
    """Check the store a run is to use, without changing it; return the console lines and whether the jobs use it.

    A concurrency audit: a store that could not be used (a folder, a path under a file, not a database, damaged,
    read-only, a full disk) was said only in the job logs. Now one line says which store the run uses (a new one:
    that the run creates it, with its folder), or one warning why it cannot be used: not a refusal, the run computes
    every molecule (and the jobs get no store, so the console and the logs agree). A read-only store is read (new
    results are not stored), and a nearly full disk is said. Damage is looked for in files up to
    :data:`CHECK_MAX_MB`.

    Examples
    --------
    >>> run_store_lines(None, "DASCREEN_STORE is empty")
    ['dascreen: results store: none (DASCREEN_STORE is empty): every molecule is computed and nothing is kept']
    """
    if path is None:
        return [f"dascreen: results store: none ({why_none}): every molecule is computed and nothing is kept"], False
    path = Path(path)
    elsewhere = f"set {STORE_ENV} or store.path to another file"

    def unusable(why: str, fix: str = "") -> tuple[list[str], bool]:
        return [f"dascreen: warning: {_said(path, why)}: this run does not use it, every molecule is computed and "
                f"nothing is kept; {fix or elsewhere}"], False

    if path.is_dir():
        return unusable("is a folder, not a store file", f"give a file, e.g. {STORE_ENV}={path / 'store.sqlite'}")
    if not path.exists():
        folder = path.parent
        while not folder.exists() and folder != folder.parent:
            folder = folder.parent
        if not folder.is_dir():
            return unusable(f"cannot be created: {folder} is a file")
        read_only_fs = _read_only_file_system(folder)
        if read_only_fs or not os.access(folder, os.W_OK | os.X_OK):
            why = "is on a read-only file system" if read_only_fs else "cannot be written"
            return unusable(f"cannot be created: {folder} {why}")
        made = f", with the folder {path.parent}" if folder != path.parent else ""
        return [f"dascreen: results store {path} (new: this run creates it{made})"] + _low_space(path, folder), True
    if not path.is_file():
        return unusable("is not a regular file")
    if path.stat().st_size == 0:
        return [f"dascreen: results store {path} (an empty file: this run makes it a results store)"], True
    store = ResultStore(path, read_only=True)
    try:
        conn = store._connect()
        if path.stat().st_size <= CHECK_MAX_MB * 1e6:
            try:
                verdict = store._patiently(conn, lambda: conn.execute("PRAGMA quick_check").fetchone()[0])
            except sqlite3.OperationalError as exc:
                if _locked_error(exc):
                    return unusable(_locked_why(store.timeout_s), _LOCKED_RUN_FIX)  # busy: never "move it away"
                return unusable(f"cannot be read ({exc})")
            except sqlite3.DatabaseError as exc:
                verdict = str(exc)
            if verdict != "ok":  # quick_check lists one problem per line: the first, on the warning's one line
                verdict = str(verdict).strip().splitlines()[0] if str(verdict).strip() else "quick_check failed"
                return unusable(f"is damaged ({verdict})", f"{_move_away(path)}: runs then start a new store")
    except StoreLocked as exc:
        return unusable(exc.why, _LOCKED_RUN_FIX)  # busy: never "move it away"
    except StoreProblem as exc:
        return unusable(exc.why, f"move it away or {elsewhere}")
    finally:
        store.close()
    problem = ResultStore(path).write_problem()
    if problem:
        return [f"dascreen: warning: results store {path} is read-only ({problem}): the molecules it holds are read, "
                "new results will not be stored"], True
    return [f"dascreen: results store {path}"] + _low_space(path, path.parent), True


def _low_space(path: Path, folder: Path) -> list[str]:
    import shutil

    try:
        free = shutil.disk_usage(folder).free
    except OSError:
        return []
    if free >= LOW_SPACE_MB * 1e6:
        return []
    left = f"{free / 1e6:.0f} MB" if free >= 1e6 else f"{free / 1e3:.0f} kB"
    return [f"dascreen: warning: results store {path}: only {left} free on its disk; new results may not be stored"]


#: :func:`run_store_check` verdicts of this process, by store path and whether the file exists: a command that
#: starts the workflow twice for one run (``dascreen dyecell``: compute, then rank) checks an existing store once,
#: not twice (its quick_check reads every page of a file up to CHECK_MAX_MB); between the two, only this run's own
#: jobs have written to it. A store the first check found missing is checked again once it exists.
_CHECKED: dict[tuple[str, str, bool], tuple[list[str], bool]] = {}


def run_store(config, record_in=None) -> tuple[Path | None, list[str]]:
    """The store a run's jobs use (None: none) and the console lines about it (:func:`run_store_check`, once per
    store and process, and :func:`store_override_note`)."""
    path = store_location(config)
    why_none = f"{STORE_ENV} is empty" if STORE_ENV in os.environ else "store.path is null"
    seen = (str(path), why_none, path is not None and Path(path).exists())
    if seen not in _CHECKED:
        _CHECKED[seen] = run_store_check(path, why_none)
    lines, usable = _CHECKED[seen]
    note = store_override_note(config, record_in)
    return (path if usable else None), ([note] if note else []) + lines


def store_override_note(config, record_in=None) -> str | None:
    """The note when :data:`STORE_ENV` overrides a ``store.path`` the settings give (``--set``, ``--config``): the
    run uses the environment's store, as documented, and records it (a concurrency audit: the run's config.yaml
    recorded the ``--set`` path while the jobs used another store). None when nothing is overridden.

    Examples
    --------
    >>> import os
    >>> saved = os.environ.pop(STORE_ENV, None)
    >>> store_override_note({"store": {"path": "/tmp/b.sqlite"}}) is None
    True
    >>> os.environ[STORE_ENV] = "/tmp/a.sqlite"
    >>> store_override_note({"store": {"path": "/tmp/b.sqlite"}})
    'dascreen: note: DASCREEN_STORE=/tmp/a.sqlite overrides store.path /tmp/b.sqlite: this run uses /tmp/a.sqlite'
    >>> _ = os.environ.pop(STORE_ENV) if saved is None else os.environ.update({STORE_ENV: saved})
    """
    if STORE_ENV not in os.environ:
        return None
    given = ((config or {}).get("store") or {}).get("path")
    if not given or str(given) == _DEFAULT_PATH:  # the default is no choice the environment overrides
        return None
    used = store_location(config)
    if used == Path(str(given)).expanduser().absolute():
        return None
    where = f" (recorded in {record_in})" if record_in else ""
    return (f"dascreen: note: {STORE_ENV}={os.environ[STORE_ENV]} overrides store.path {given}: this run uses "
            f"{used or 'no results store'}{where}")


#: ``store.path`` of the configuration schema's default
_DEFAULT_PATH = "~/.cache/dascreen/store.sqlite"


def resolve_store(store) -> ResultStore | None:
    """A stage's ``store`` argument: a :class:`ResultStore` or path as given, ``None`` → from the
    environment (:data:`STORE_ENV`, set by ``dascreen run`` for its jobs), ``False`` → no store.

    Examples
    --------
    >>> resolve_store(False) is None
    True
    >>> resolve_store("/tmp/a.sqlite").path.name
    'a.sqlite'
    """
    if store is False:
        return None
    if isinstance(store, ResultStore):
        return store
    if store is None:
        text = os.environ.get(STORE_ENV, "").strip()
        return ResultStore(text) if text else None
    return ResultStore(store)


# --------------------------------------------------------------------------- dascreen store list | export

def store_text(store: ResultStore, keys: bool = False, used: Mapping[str, str] | None = None) -> str:
    """``dascreen store list``: rows per stage and protocol (and every row with ``keys``); ``used``: a note per
    protocol id that the current settings read (the others are what a prune may remove)."""
    import datetime

    def when(t):
        return datetime.datetime.fromtimestamp(t).strftime("%Y-%m-%d %H:%M") if t else "-"

    size = store.path.stat().st_size / 1e6 if store.path.is_file() else 0.0
    lines = [f"results store {store.path} ({size:.1f} MB)"]
    summary = store.summary()
    if not summary:
        return lines[0] + "\n  (empty)\n"
    used = used or {}
    lines.append(f"  {'stage':11s} {'protocol id':28s} {'rows':>7s}  {'first':16s}  {'last':16s}"
                 + ("  read by these settings" if used else ""))
    for row in summary:
        note = used.get(row["protocol_id"], "")
        if used and not note:  # rows another environment wrote: kept as a protocol of their own, said which
            protocol = store.stored_protocol(row["stage"], row["protocol_id"])
            other = other_library_versions(row["stage"], protocol) if protocol is not None else ""
            note = f"no: other library versions: {other}" if other else ""
        lines.append((f"  {row['stage']:11s} {row['protocol_id']:28s} {row['entries']:7d}  {when(row['first']):16s}  "
                      f"{when(row['last']):16s}  {note}").rstrip())
    if keys:
        lines.append("")
        for row in store.rows():
            state = "ok" if row["ok"] else "does not check out (ignored)"
            lines.append(f"  {row['stage']:11s} {row['key']} {row['protocol_id']} {row['geometry'] or '-'} {state}")
    return "\n".join(lines) + "\n"


def export_store(store: ResultStore, target, protocol=None) -> int:
    """Write the store's rows to ``target``: ``.sdf`` (geometries with their route and the raw
    electronic results computed on them) or ``.csv`` (every checked row, one line each).

    Parameters
    ----------
    store : ResultStore
    target : path-like
    protocol : list of str, optional
        Only rows of these stage protocol ids.

    Returns
    -------
    int
        Records written.
    """
    from screen.io import atomic_path

    target = Path(target)
    wanted = set(protocol or ())
    rows = [r for r in store.rows() if r["ok"] and (not wanted or r["protocol_id"] in wanted)]
    if target.suffix.lower() == ".csv":
        import pandas as pd

        from screen.io import write_csv

        flat = [{"stage": r["stage"], "key": r["key"], "protocol_id": r["protocol_id"], "geometry": r["geometry"],
                 "created": r["created"], **{k: v for k, v in r["record"].items() if k != "molblock"}} for r in rows]
        write_csv(pd.DataFrame(flat), target)
        return len(flat)
    from rdkit import Chem

    electronic = {}
    for r in store.rows(stage="electronic"):
        if r["ok"]:
            electronic.setdefault(r["geometry"], []).append(r)
    written = 0
    with atomic_path(target) as tmp:
        writer = Chem.SDWriter(str(tmp))
        for r in rows:
            if r["stage"] != "structures":
                continue
            mol = Chem.MolFromMolBlock(r["record"].get("molblock", ""), removeHs=False)
            if mol is None:
                continue
            mol.SetProp("_Name", r["key"])
            mol.SetProp("structures_protocol_id", r["protocol_id"])
            for k, v in r["record"].items():
                if k not in ("molblock", "key") and not isinstance(v, (dict, list)):
                    mol.SetProp(k, str(v))
            pos = mol.GetConformer().GetPositions()
            for e in electronic.get(geometry_hash([a.GetAtomicNum() for a in mol.GetAtoms()], pos), []):
                for k in ("xtb_ip_ev", "xtb_ea_ev", "xtb_homo_ev", "xtb_lumo_ev", "xtb_gap_ev"):
                    if k in e["record"]:
                        mol.SetProp(f"{e['protocol_id']}:{k}", str(e["record"][k]))
            writer.write(mol)
            written += 1
        writer.close()
    return written
