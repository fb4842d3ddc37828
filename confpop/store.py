"""The SQLite result store that makes long runs resumable.

A :class:`ResultStore` is one SQLite file holding finished results under a content key: the
SHA-256 of everything that determines a calculation (:func:`content_key`). A run that is
stopped (a crash, a time limit, Ctrl-C) and started again finds its finished results in the
store and computes only what is missing.

Trust model
-----------
Values are stored as pickles, so reading a value can run code chosen by whoever wrote the
file. Open only stores that you (or your own runs) made, as with any pickle.

Concurrency
-----------
The file is kept in SQLite's write-ahead-log (WAL) mode: readers never block the writer and
several processes may write to the same store at once (writers take turns; a writer that finds
the file busy waits up to ``timeout`` seconds and then retries). WAL needs a local file system
(not NFS). Each thread and each process uses its own connection, opened when first needed, so
one :class:`ResultStore` object may be shared by threads, and pickling it (to hand it to a
worker process) pickles only its path.
"""

from __future__ import annotations

import datetime as _dt
import hashlib
import json
import logging
import os
import pickle
import random
import sqlite3
import threading
import time
from dataclasses import dataclass
from typing import Any

import numpy as np

from .errors import InputError, StoreError

__all__ = ["ResultStore", "StoredRecord", "content_key", "SCHEMA_VERSION"]

logger = logging.getLogger(__name__)

#: version of the table layout written by this module
SCHEMA_VERSION = 1
#: SQLite ``PRAGMA application_id`` of a confpop store (the bytes "cpop")
APPLICATION_ID = int.from_bytes(b"cpop", "big")
_SQLITE_MAGIC = b"SQLite format 3\x00"
_META_TABLE = "confpop_meta"
_RESULTS_TABLE = "results"
# version tag of the key recipe in content_key; change it whenever the recipe changes
_KEY_RECIPE = "confpop-content-key-1"


def _package_version() -> str:
    from . import __version__

    return __version__


def _utc_now() -> str:
    return _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds")


def _is_busy(exc: sqlite3.OperationalError) -> bool:
    text = str(exc).lower()
    return "locked" in text or "busy" in text


@dataclass(frozen=True)
class StoredRecord:
    """One stored result with its bookkeeping.

    Attributes
    ----------
    key : str
        The content key.
    value : object
        The stored Python object.
    created : str
        When it was stored, ISO 8601, UTC.
    seconds : float or None
        Wall time the calculation took, seconds (as reported by the writer).
    version : str
        The confpop version that wrote it.
    """

    key: str
    value: Any
    created: str
    seconds: float | None
    version: str


class ResultStore:
    """A file of finished results keyed by content, safe for several writers.

    Parameters
    ----------
    path : str or os.PathLike
        The SQLite file. A missing or empty file becomes a new store; an existing file must be
        a confpop store.
    timeout : float, seconds
        How long one operation waits for a busy file before it retries (default 30 s); an
        operation gives up with :class:`~confpop.errors.StoreError` after 5 such waits.

    Raises
    ------
    StoreError
        If the file is not an SQLite database (corrupt, or another kind of file), is an SQLite
        database of another application, was written by a newer confpop store layout, or
        cannot be opened or written.

    Notes
    -----
    Table ``results``: ``key TEXT PRIMARY KEY, value BLOB (pickle), created TEXT (ISO 8601,
    UTC), seconds REAL, version TEXT`` (the confpop version that wrote the row). Table
    ``confpop_meta`` (name, value) holds ``application = confpop`` and ``schema_version``;
    the SQLite header's ``application_id`` is also set, so ``file(1)``-like tools can tell.

    Only successful results belong in a store: a failed unit is not stored and is tried again
    by the next run.

    Examples
    --------
    >>> import os, tempfile
    >>> with tempfile.TemporaryDirectory() as folder:
    ...     path = os.path.join(folder, "results.sqlite")
    ...     with ResultStore(path) as store:
    ...         store.put("abc", {"energy": -5.07}, seconds=0.03)
    ...     with ResultStore(path) as again:  # a later run
    ...         print(again.get("abc"), "abc" in again, len(again), again.get("xyz"))
    {'energy': -5.07} True 1 None
    """

    def __init__(self, path: str | os.PathLike, *, timeout: float = 30.0):
        if isinstance(path, bytes) or not isinstance(path, (str, os.PathLike)):
            raise InputError("path must be a file path (str or os.PathLike), "
                             f"got {type(path).__name__}")
        self.path = os.fspath(path)
        if not self.path:
            raise InputError("path must be a file path, got an empty string")
        if not (isinstance(timeout, (int, float)) and timeout > 0):
            raise InputError(f"timeout must be a number of seconds > 0, got {timeout!r}")
        self.timeout = float(timeout)
        self._local = threading.local()
        self._connections: list[tuple[int, sqlite3.Connection]] = []
        self._lock = threading.Lock()
        self._closed = False
        self._connection()  # open and check now, so a bad file fails at once

    # -- connections -------------------------------------------------------------------------
    def _connection(self) -> sqlite3.Connection:
        if self._closed:
            raise StoreError(f"result store {self.path!r} is closed")
        conn = getattr(self._local, "conn", None)
        if conn is not None and self._local.pid == os.getpid():
            return conn
        conn = self._open()
        self._local.conn = conn
        self._local.pid = os.getpid()
        with self._lock:
            self._connections.append((os.getpid(), conn))
        return conn

    def _open(self) -> sqlite3.Connection:
        self._check_header()
        try:
            conn = sqlite3.connect(self.path, timeout=self.timeout, isolation_level=None,
                                   check_same_thread=False)
        except sqlite3.Error as exc:
            raise StoreError(f"cannot open result store {self.path!r}: {exc}") from exc
        try:
            self._prepare(conn)
        except BaseException:
            conn.close()
            raise
        return conn

    def _check_header(self) -> None:
        # Look at the first bytes before SQLite does: SQLite opens any file lazily and would
        # only fail later, and must not touch (switch to WAL) a file that is not ours.
        try:
            with open(self.path, "rb") as handle:
                head = handle.read(len(_SQLITE_MAGIC))
        except FileNotFoundError:
            return
        except IsADirectoryError:
            raise StoreError(
                f"result store path {self.path!r} is a directory, not a file") from None
        except OSError as exc:
            raise StoreError(f"cannot read result store {self.path!r}: {exc}") from exc
        if head and head != _SQLITE_MAGIC:
            raise StoreError(
                f"{self.path!r} is not a confpop result store: it is not an SQLite database "
                "(the file is corrupt or of another kind); move it away or choose another path")

    def _prepare(self, conn: sqlite3.Connection) -> None:
        """Check that ``conn`` is a confpop store (or empty), then create tables and set WAL."""
        for attempt in range(5):
            try:
                self._check_identity(conn)
                mode = conn.execute("PRAGMA journal_mode=WAL").fetchone()[0]
                if str(mode).lower() != "wal":
                    logger.debug("result store %s: journal mode %s (WAL unavailable)",
                                 self.path, mode)
                conn.execute("PRAGMA synchronous=NORMAL")
                self._create_tables(conn)
                return
            except sqlite3.OperationalError as exc:
                if not _is_busy(exc) or attempt == 4:
                    raise StoreError(f"cannot open result store {self.path!r}: {exc}") from exc
                time.sleep(0.05 * (attempt + 1) * (1 + random.random()))
            except sqlite3.DatabaseError as exc:
                raise StoreError(
                    f"{self.path!r} is not a usable confpop result store: the SQLite file is "
                    f"corrupt ({exc})") from exc

    def _check_identity(self, conn: sqlite3.Connection) -> None:
        app_id = conn.execute("PRAGMA application_id").fetchone()[0]
        tables = {row[0] for row in conn.execute(
            "SELECT name FROM sqlite_master WHERE type = 'table'")}
        if app_id not in (0, APPLICATION_ID) or (tables and _META_TABLE not in tables):
            raise StoreError(
                f"{self.path!r} is not a confpop result store: it is an SQLite database of "
                f"another application (tables: {', '.join(sorted(tables)) or 'none'}); "
                "choose another path")
        if _META_TABLE in tables:
            meta = dict(conn.execute(f"SELECT name, value FROM {_META_TABLE}").fetchall())
            if meta.get("application") != "confpop":
                raise StoreError(f"{self.path!r} is not a confpop result store: its metadata "
                                 f"names application {meta.get('application')!r}")
            schema = str(meta.get("schema_version", SCHEMA_VERSION))
            if not schema.isdigit() or int(schema) > SCHEMA_VERSION:
                raise StoreError(
                    f"result store {self.path!r} has layout version {schema!r} (made by a newer "
                    f"confpop?); this version ({_package_version()}) reads layout {SCHEMA_VERSION}")

    def _create_tables(self, conn: sqlite3.Connection) -> None:
        conn.execute("BEGIN IMMEDIATE")
        try:
            conn.execute(f"CREATE TABLE IF NOT EXISTS {_META_TABLE} "
                         "(name TEXT PRIMARY KEY, value TEXT NOT NULL)")
            conn.execute(f"CREATE TABLE IF NOT EXISTS {_RESULTS_TABLE} (key TEXT PRIMARY KEY, "
                         "value BLOB NOT NULL, created TEXT NOT NULL, seconds REAL, "
                         "version TEXT NOT NULL)")
            conn.executemany(f"INSERT OR IGNORE INTO {_META_TABLE} (name, value) VALUES (?, ?)",
                             [("application", "confpop"),
                              ("schema_version", str(SCHEMA_VERSION)),
                              ("created", _utc_now()),
                              ("created_by_version", _package_version())])
            if conn.execute("PRAGMA application_id").fetchone()[0] != APPLICATION_ID:
                conn.execute(f"PRAGMA application_id = {APPLICATION_ID}")
            conn.execute("COMMIT")
        except BaseException:
            conn.execute("ROLLBACK")
            raise

    def _run(self, what: str, function):
        """Run ``function(conn)``, retrying while the file is locked by another writer."""
        conn = self._connection()
        for attempt in range(5):
            try:
                return function(conn)
            except sqlite3.OperationalError as exc:
                if not _is_busy(exc) or attempt == 4:
                    raise StoreError(f"result store {self.path!r}: cannot {what}: {exc}") from exc
                logger.debug("result store %s busy (%s); retry %d", self.path, exc, attempt + 1)
                time.sleep(0.05 * (attempt + 1) * (1 + random.random()))
            except sqlite3.DatabaseError as exc:
                raise StoreError(f"result store {self.path!r}: cannot {what}: {exc}") from exc

    # -- the mapping -------------------------------------------------------------------------
    @staticmethod
    def _check_key(key) -> str:
        if not isinstance(key, str) or not key:
            raise InputError(f"a store key must be a non-empty str, got {key!r}")
        return key

    def put(self, key: str, value: Any, *, seconds: float | None = None) -> None:
        """Store ``value`` under ``key`` (replacing an earlier value), committed at once.

        Parameters
        ----------
        key : str
            Content key, usually from :func:`content_key`.
        value : object
            Any picklable object (plain Python objects, numpy arrays, frozen dataclasses).
        seconds : float, optional
            Wall time the calculation took, seconds.

        Raises
        ------
        InputError
            If ``key`` is not a non-empty string or ``value`` cannot be pickled.
        StoreError
            If the file cannot be written.
        """
        key = self._check_key(key)
        try:
            blob = pickle.dumps(value, protocol=pickle.HIGHEST_PROTOCOL)
        except Exception as exc:
            raise InputError(f"value for key {key!r} cannot be pickled: "
                             f"{type(exc).__name__}: {exc}") from exc
        row = (key, sqlite3.Binary(blob), _utc_now(),
               None if seconds is None else float(seconds), _package_version())
        self._run("write", lambda conn: conn.execute(
            f"INSERT OR REPLACE INTO {_RESULTS_TABLE} (key, value, created, seconds, version) "
            "VALUES (?, ?, ?, ?, ?)", row))

    def record(self, key: str) -> StoredRecord | None:
        """The stored record for ``key`` with its bookkeeping, or None if there is none."""
        key = self._check_key(key)
        row = self._run("read", lambda conn: conn.execute(
            f"SELECT value, created, seconds, version FROM {_RESULTS_TABLE} WHERE key = ?",
            (key,)).fetchone())
        if row is None:
            return None
        try:
            value = pickle.loads(row[0])
        except Exception as exc:
            raise StoreError(f"result store {self.path!r}: the value under key {key!r} cannot "
                             f"be read ({type(exc).__name__}: {exc})") from exc
        return StoredRecord(key, value, row[1], row[2], row[3])

    def get(self, key: str, default: Any = None) -> Any:
        """The value stored under ``key``, or ``default`` (None) if there is none."""
        record = self.record(key)
        return default if record is None else record.value

    def __contains__(self, key) -> bool:
        if not isinstance(key, str):
            return False
        return self._run("read", lambda conn: conn.execute(
            f"SELECT 1 FROM {_RESULTS_TABLE} WHERE key = ?", (key,)).fetchone()) is not None

    def __len__(self) -> int:
        return self._run("read", lambda conn: conn.execute(
            f"SELECT COUNT(*) FROM {_RESULTS_TABLE}").fetchone()[0])

    def keys(self) -> list[str]:
        """All keys, in insertion order."""
        rows = self._run("read", lambda conn: conn.execute(
            f"SELECT key FROM {_RESULTS_TABLE} ORDER BY rowid").fetchall())
        return [row[0] for row in rows]

    # -- life cycle --------------------------------------------------------------------------
    def close(self) -> None:
        """Close every connection this object opened (in this process). Safe to repeat."""
        with self._lock:
            connections, self._connections = self._connections, []
            self._closed = True
        for pid, conn in connections:
            if pid != os.getpid():  # inherited through fork: the parent's, not ours to close
                continue
            try:
                conn.close()
            except sqlite3.Error:  # pragma: no cover - closing is best effort
                pass

    def __enter__(self) -> ResultStore:
        return self

    def __exit__(self, *exc_info) -> None:
        self.close()

    def __getstate__(self) -> dict:
        return {"path": self.path, "timeout": self.timeout}

    def __setstate__(self, state: dict) -> None:
        self.__init__(state["path"], timeout=state["timeout"])

    def __repr__(self) -> str:
        return f"ResultStore({self.path!r})"


def _canonical(value, name: str):
    """``value`` as plain JSON types (numpy scalars/arrays and tuples included)."""
    if value is None or isinstance(value, (bool, str)):
        return value
    if isinstance(value, (int, np.integer)):
        return int(value)
    if isinstance(value, (float, np.floating)):
        value = float(value)
        if not np.isfinite(value):
            raise InputError(f"{name} must be finite, got {value!r}")
        return value + 0.0  # -0.0 -> 0.0
    if isinstance(value, np.ndarray):
        return _canonical(value.tolist(), name)
    if isinstance(value, (list, tuple)):
        return [_canonical(v, f"{name}[{i}]") for i, v in enumerate(value)]
    if isinstance(value, dict):
        out = {}
        for k, v in value.items():
            if not isinstance(k, str):
                raise InputError(f"{name} keys must be str, got {k!r}")
            out[k] = _canonical(v, f"{name}[{k!r}]")
        return out
    raise InputError(f"{name} must hold only numbers, strings, None, lists, tuples and dicts, "
                     f"got {type(value).__name__}")


def content_key(numbers, positions, *, charge: int, multiplicity: int, method: str,
                solvent: str | None, settings: dict | None, kind: str,
                decimals: int = 6) -> str:
    """A hex SHA-256 naming one calculation by everything that determines its result.

    Parameters
    ----------
    numbers : (n_atoms,) sequence of int
        Atomic numbers.
    positions : (n_atoms, 3) array, angstrom
        Coordinates; rounded to ``decimals`` before hashing.
    charge : int
        Total charge.
    multiplicity : int
        Spin multiplicity 2S+1 (>= 1).
    method : str
        Method name (compared without case or surrounding blanks).
    solvent : str or None
        Implicit solvent (compared without case or surrounding blanks), None for gas phase.
    settings : dict or None
        Everything else that changes the result (convergence, engine options); keys are str,
        values numbers, strings, None, lists or dicts. Key order does not matter.
    kind : str
        What is computed, e.g. ``"singlepoint"``, ``"optimize"``, ``"hessian"``.
    decimals : int
        Coordinates are rounded to ``10**-decimals`` angstrom (default 6).

    Returns
    -------
    str
        64 hexadecimal digits.

    Raises
    ------
    InputError
        If an argument has the wrong type or shape, or a number is not finite.

    Notes
    -----
    The hash is over a canonical JSON text (sorted keys, no blanks) of: a recipe tag, the
    atomic numbers, the coordinates as integers ``rint(x * 10**decimals)`` (round half to
    even; -0.0 and 0.0 give the same integer), charge, multiplicity, method, solvent, the
    settings, the kind, and the confpop version (``confpop.__version__``), so results made
    by another version are never reused. Coordinate noise well below the rounding step gives
    the same key, except for a coordinate that lies within the noise of a rounding boundary.

    Examples
    --------
    >>> a = content_key([1, 1], [[0, 0, 0], [0, 0, 0.74]], charge=0, multiplicity=1,
    ...                 method="gfn2", solvent=None, settings={}, kind="singlepoint")
    >>> b = content_key([1, 1], [[0, 0, -0.0], [0, 0, 0.74 + 1e-9]], charge=0,
    ...                 multiplicity=1, method="GFN2", solvent=None, settings=None,
    ...                 kind="singlepoint")
    >>> a == b, len(a)
    (True, 64)
    """
    try:
        z = np.asarray(numbers)
    except Exception as exc:  # ragged input
        raise InputError(f"numbers must be a sequence of atomic numbers: {exc}") from exc
    if z.ndim != 1 or z.size == 0 or not np.issubdtype(z.dtype, np.integer) or np.any(z < 1):
        raise InputError(f"numbers must be a non-empty 1-D sequence of atomic numbers >= 1, "
                         f"got {numbers!r}"[:300])
    try:
        xyz = np.asarray(positions, dtype=float)
    except (TypeError, ValueError) as exc:
        raise InputError(f"positions must be an (n_atoms, 3) array of numbers: {exc}") from exc
    if xyz.shape != (z.size, 3):
        raise InputError(f"positions must have shape ({z.size}, 3) to match numbers, "
                         f"got {xyz.shape}")
    if not np.all(np.isfinite(xyz)):
        raise InputError("positions must be finite numbers, got NaN or infinity")
    if isinstance(decimals, bool) or not isinstance(decimals, (int, np.integer)) \
            or not 0 <= decimals <= 9:
        raise InputError(f"decimals must be an int from 0 to 9, got {decimals!r}")
    if np.max(np.abs(xyz)) * 10.0 ** decimals >= 2.0 ** 62:
        raise InputError("positions are too large to round at this many decimals")
    for name, value in (("charge", charge), ("multiplicity", multiplicity)):
        if isinstance(value, bool) or not isinstance(value, (int, np.integer)):
            raise InputError(f"{name} must be an int, got {value!r}")
    if multiplicity < 1:
        raise InputError(f"multiplicity must be >= 1, got {multiplicity}")
    for name, value, optional in (("method", method, False), ("solvent", solvent, True),
                                  ("kind", kind, False)):
        if value is None and optional:
            continue
        if not isinstance(value, str) or not value.strip():
            raise InputError(f"{name} must be a non-empty str{' or None' if optional else ''}, "
                             f"got {value!r}")
    if settings is None:
        settings = {}
    if not isinstance(settings, dict):
        raise InputError(f"settings must be a dict or None, got {type(settings).__name__}")
    grid = np.rint(xyz * 10.0 ** decimals).astype(np.int64)  # rint: round half to even
    document = {
        "recipe": _KEY_RECIPE,
        "numbers": z.tolist(),
        "positions": grid.tolist(),
        "decimals": int(decimals),
        "charge": int(charge),
        "multiplicity": int(multiplicity),
        "method": method.strip().lower(),
        "solvent": None if solvent is None else solvent.strip().lower(),
        "settings": _canonical(settings, "settings"),
        "kind": kind.strip().lower(),
        "version": _package_version(),
    }
    text = json.dumps(document, sort_keys=True, separators=(",", ":"), ensure_ascii=True,
                      allow_nan=False)
    return hashlib.sha256(text.encode("ascii")).hexdigest()
