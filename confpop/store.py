"""The SQLite result store that makes long runs resumable.

A :class:`ResultStore` is one SQLite file holding finished results under a content key: the
SHA-256 of everything that determines a calculation (:func:`content_key`). A run that is
stopped (a crash, a time limit, Ctrl-C) and started again finds its finished results in the
store and computes only what is missing.

Trust model
-----------
The store holds data, never code. Each value is a JSON text (:func:`encode_value`): numbers,
strings, None, lists, tuples and dicts as themselves, non-finite floats as tagged strings,
numpy arrays as their raw bytes (base64) with dtype and shape; only numeric and boolean
dtypes are accepted. Reading a value parses JSON and copies bytes into a numeric array,
nothing else: a value that is not such a text (a pickle planted by someone else, garbage, a
row written by an older confpop) is never executed; it is ignored with a
:class:`~confpop.errors.StoreWarning` and that unit is computed again.

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

import base64
import datetime as _dt
import functools
import hashlib
import json
import logging
import os
import random
import sqlite3
import stat
import threading
import time
import warnings
from dataclasses import dataclass
from typing import Any

import numpy as np

from .errors import InputError, StoreError, StoreWarning

__all__ = ["ResultStore", "StoredRecord", "content_key", "encode_value", "decode_value",
           "SCHEMA_VERSION", "VALUE_FORMAT"]

logger = logging.getLogger(__name__)

#: version of the table layout written by this module (1: pickled values; 2: JSON values)
SCHEMA_VERSION = 2
#: tag of the value format (:func:`encode_value`)
VALUE_FORMAT = "confpop-value-1"
#: SQLite ``PRAGMA application_id`` of a confpop store (the bytes "cpop")
APPLICATION_ID = int.from_bytes(b"cpop", "big")
_SQLITE_MAGIC = b"SQLite format 3\x00"
_META_TABLE = "confpop_meta"
_RESULTS_TABLE = "results"
# version tag of the key recipe in content_key; change it whenever the recipe changes
_KEY_RECIPE = "confpop-content-key-2"
# distributions whose versions enter every key: the engines and the libraries that shape a
# result (an upgrade of any of them may change the numbers, so its results are not reused)
KEY_LIBRARIES = ("rdkit", "numpy", "scipy", "xtb", "tblite", "geometric", "pyscf", "dftd3")
# numpy dtype kinds a stored array may have: bool, signed/unsigned int, float, complex
_ARRAY_KINDS = "biufc"
_TAGS = ("__ndarray__", "__tuple__", "__float__", "__dict__")
# undecodable values warned about one by one per store object, before one summary note
_WARN_BAD_VALUES = 3


def _package_version() -> str:
    from . import __version__

    return __version__


def _utc_now() -> str:
    return _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds")


def _is_busy(exc: sqlite3.OperationalError) -> bool:
    text = str(exc).lower()
    return "locked" in text or "busy" in text


@functools.lru_cache(maxsize=1)
def library_versions() -> dict:
    """Installed versions of :data:`KEY_LIBRARIES` (None for one that is not installed)."""
    from importlib.metadata import PackageNotFoundError, version

    out = {}
    for name in KEY_LIBRARIES:
        try:
            out[name] = version(name)
        except PackageNotFoundError:
            out[name] = None
    return out


def _encode(value, where: str):
    if value is None or isinstance(value, (bool, str)):
        return value
    if isinstance(value, np.generic) and not isinstance(value, np.ndarray):
        if value.dtype.kind not in "biuf":
            raise InputError(f"{where}: a numpy {value.dtype} scalar cannot be stored")
        return _encode(value.item(), where)
    if isinstance(value, int):
        return int(value)
    if isinstance(value, float):
        if np.isfinite(value):
            return float(value)
        return {"__float__": "nan" if np.isnan(value) else ("inf" if value > 0 else "-inf")}
    if isinstance(value, np.ndarray):
        if value.dtype.kind not in _ARRAY_KINDS:
            raise InputError(f"{where}: an array of dtype {value.dtype} cannot be stored "
                             "(only bool, integer, float and complex arrays)")
        data = np.ascontiguousarray(value)
        return {"__ndarray__": base64.b64encode(data.tobytes()).decode("ascii"),
                "dtype": data.dtype.str, "shape": list(data.shape)}
    if isinstance(value, tuple):
        return {"__tuple__": [_encode(v, f"{where}[{i}]") for i, v in enumerate(value)]}
    if isinstance(value, list):
        return [_encode(v, f"{where}[{i}]") for i, v in enumerate(value)]
    if isinstance(value, dict):
        out = {}
        for k, v in value.items():
            if not isinstance(k, str):
                raise InputError(f"{where}: dict keys must be str to be stored, got {k!r}")
            out[k] = _encode(v, f"{where}[{k!r}]")
        return {"__dict__": out} if any(k in _TAGS for k in out) else out
    raise InputError(f"{where}: a {type(value).__name__} cannot be stored (the store holds "
                     "numbers, strings, None, lists, tuples, dicts and numeric numpy arrays)")


def encode_value(value) -> bytes:
    """``value`` as the store's self-describing JSON text (UTF-8 bytes).

    Parameters
    ----------
    value : None, bool, int, float, str, list, tuple, dict (str keys) or numpy array
        Nested freely. Arrays must have a bool, integer, float or complex dtype; they are
        kept as raw bytes (base64) with their dtype (byte order included) and shape, so they
        come back bit for bit. numpy scalars come back as Python numbers.

    Raises
    ------
    InputError
        For any other type (the message names where in ``value`` it sits).

    Examples
    --------
    >>> import numpy as np
    >>> decode_value(encode_value({"e": -5.07, "x": np.arange(3.0), "t": (1, None)}))
    {'e': -5.07, 'x': array([0., 1., 2.]), 't': (1, None)}
    """
    document = {"format": VALUE_FORMAT, "data": _encode(value, "value")}
    return json.dumps(document, separators=(",", ":"), allow_nan=False).encode("utf-8")


def _decode(node):
    if isinstance(node, list):
        return [_decode(v) for v in node]
    if not isinstance(node, dict):
        if isinstance(node, (int, float, str, bool)) or node is None:
            return node
        raise ValueError(f"unexpected JSON item {type(node).__name__}")
    keys = set(node)
    if "__ndarray__" in keys:
        if keys != {"__ndarray__", "dtype", "shape"}:
            raise ValueError("an array entry must have exactly __ndarray__, dtype and shape")
        dtype = np.dtype(str(node["dtype"]))
        if dtype.kind not in _ARRAY_KINDS or dtype.hasobject:
            raise ValueError(f"array dtype {dtype} is not a numeric dtype")
        shape = node["shape"]
        if not isinstance(shape, list) or not all(
                isinstance(n, int) and not isinstance(n, bool) and n >= 0 for n in shape):
            raise ValueError(f"array shape {shape!r} is not a list of sizes")
        raw = base64.b64decode(str(node["__ndarray__"]).encode("ascii"), validate=True)
        if len(raw) != int(np.prod(shape, dtype=np.int64)) * dtype.itemsize:
            raise ValueError(f"array of {len(raw)} bytes does not match dtype {dtype} and "
                             f"shape {tuple(shape)}")
        return np.frombuffer(raw, dtype=dtype).reshape(shape).copy()
    if "__tuple__" in keys:
        if keys != {"__tuple__"} or not isinstance(node["__tuple__"], list):
            raise ValueError("a tuple entry must be {'__tuple__': [...]}")
        return tuple(_decode(v) for v in node["__tuple__"])
    if "__float__" in keys:
        text = node["__float__"]
        if keys != {"__float__"} or text not in ("nan", "inf", "-inf"):
            raise ValueError(f"a float entry must be nan, inf or -inf, got {text!r}")
        return float(text)
    if "__dict__" in keys:
        if keys != {"__dict__"} or not isinstance(node["__dict__"], dict):
            raise ValueError("a dict entry must be {'__dict__': {...}}")
        node = node["__dict__"]
    return {k: _decode(v) for k, v in node.items()}


def decode_value(blob) -> Any:
    """The value of :func:`encode_value`'s text; never runs code.

    Raises
    ------
    ValueError
        If ``blob`` is not such a text (a pickle, garbage, another format).
    """
    if isinstance(blob, memoryview):
        blob = blob.tobytes()
    if isinstance(blob, str):
        blob = blob.encode("utf-8")
    if not isinstance(blob, bytes):
        raise ValueError(f"expected bytes, got {type(blob).__name__}")
    try:
        document = json.loads(blob.decode("utf-8"))
    except (UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise ValueError(f"not a JSON text ({exc})") from None
    except RecursionError:
        raise ValueError("nested too deeply") from None
    if not isinstance(document, dict) or set(document) != {"format", "data"} \
            or document["format"] != VALUE_FORMAT:
        raise ValueError(f"not a {VALUE_FORMAT} document")
    try:
        return _decode(document["data"])
    except RecursionError:
        raise ValueError("nested too deeply") from None
    except (TypeError, ValueError, OverflowError, MemoryError) as exc:
        raise ValueError(str(exc)) from None


@dataclass(frozen=True)
class StoredRecord:
    """One stored result with its bookkeeping.

    Attributes
    ----------
    key : str
        The content key.
    value : object
        The stored value (see :func:`encode_value` for what a value may hold).
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
        a confpop store (a regular file: a FIFO, device or folder is refused). A relative path
        is made absolute at once, so worker processes in other folders open the same file.
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
    Table ``results``: ``key TEXT PRIMARY KEY, value BLOB (UTF-8 JSON text of
    :func:`encode_value`), created TEXT (ISO 8601, UTC), seconds REAL, version TEXT`` (the
    confpop version that wrote the row). A value that cannot be decoded (see the module's
    trust model) counts as missing: :meth:`record` and :meth:`get` warn with
    :class:`~confpop.errors.StoreWarning` and answer as for a missing key. Table
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
        if not os.fspath(path):
            raise InputError("path must be a file path, got an empty string")
        self.path = os.path.abspath(os.path.expanduser(os.fspath(path)))
        if not (isinstance(timeout, (int, float)) and timeout > 0):
            raise InputError(f"timeout must be a number of seconds > 0, got {timeout!r}")
        self.timeout = float(timeout)
        self._local = threading.local()
        self._connections: list[tuple[int, sqlite3.Connection]] = []
        self._lock = threading.Lock()
        self._closed = False
        self._bad_values = 0
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
            mode = os.stat(self.path).st_mode
        except FileNotFoundError:
            return
        except OSError as exc:
            raise StoreError(f"cannot read result store {self.path!r}: {exc}") from exc
        if stat.S_ISDIR(mode):
            raise StoreError(f"result store path {self.path!r} is a directory, not a file")
        if not stat.S_ISREG(mode):  # opening a FIFO would wait forever for a writer
            raise StoreError(f"result store path {self.path!r} is not a regular file (a FIFO, "
                             "socket or device); give the path of a file")
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
            # a layout-1 store (pickled values) is taken over: its old rows are never decoded
            # (their keys use an older recipe, and a pickle is not read), new rows are JSON
            conn.execute(f"UPDATE {_META_TABLE} SET value = ? WHERE name = 'schema_version' "
                         "AND CAST(value AS INTEGER) < ?", (str(SCHEMA_VERSION), SCHEMA_VERSION))
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
            Numbers, strings, None, lists, tuples, dicts with str keys and numeric numpy
            arrays, nested freely (see :func:`encode_value`).
        seconds : float, optional
            Wall time the calculation took, seconds.

        Raises
        ------
        InputError
            If ``key`` is not a non-empty string or ``value`` holds another type.
        StoreError
            If the file cannot be written.
        """
        key = self._check_key(key)
        try:
            blob = encode_value(value)
        except InputError as exc:
            raise InputError(f"value for key {key!r} cannot be stored: {exc}") from None
        row = (key, sqlite3.Binary(blob), _utc_now(),
               None if seconds is None else float(seconds), _package_version())
        self._run("write", lambda conn: conn.execute(
            f"INSERT OR REPLACE INTO {_RESULTS_TABLE} (key, value, created, seconds, version) "
            "VALUES (?, ?, ?, ?, ?)", row))

    def record(self, key: str) -> StoredRecord | None:
        """The stored record for ``key`` with its bookkeeping, or None if there is none.

        A value that is not confpop data (see the module's trust model) is never executed:
        it gives a :class:`~confpop.errors.StoreWarning` and None, so the unit is computed
        again and its row replaced.
        """
        key = self._check_key(key)
        row = self._run("read", lambda conn: conn.execute(
            f"SELECT value, created, seconds, version FROM {_RESULTS_TABLE} WHERE key = ?",
            (key,)).fetchone())
        if row is None:
            return None
        try:
            value = decode_value(row[0])
        except ValueError as exc:
            self._bad_values += 1
            if self._bad_values <= _WARN_BAD_VALUES:
                more = ("" if self._bad_values < _WARN_BAD_VALUES else
                        "; further such values in this store are recomputed without a warning")
                warnings.warn(f"result store {self.path!r}: the value under key {key[:16]}... "
                              f"is not confpop data ({str(exc)[:200]}); it is ignored (never "
                              f"executed) and computed again{more}", StoreWarning, stacklevel=2)
            return None
        try:
            seconds = None if row[2] is None else float(row[2])
        except (TypeError, ValueError):
            seconds = None
        return StoredRecord(key, value, str(row[1]), seconds, str(row[3]))

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
    settings, the kind, the confpop version (``confpop.__version__``) and the installed
    versions of the engines and libraries in :data:`KEY_LIBRARIES` (None for one that is
    missing), so results made by another version of any of them are never reused. Coordinate noise well below the rounding step gives
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
        "libraries": library_versions(),
    }
    text = json.dumps(document, sort_keys=True, separators=(",", ":"), ensure_ascii=True,
                      allow_nan=False)
    return hashlib.sha256(text.encode("ascii")).hexdigest()
