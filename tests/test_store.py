"""Tests of confpop.store: round trip, bad files, two writers, and the content key."""

from __future__ import annotations

import hashlib
import json
import multiprocessing
import os
import pickle
import sqlite3

import numpy as np
import pytest

import confpop
from confpop.errors import InputError, StoreError, StoreWarning
from confpop.store import (APPLICATION_ID, KEY_LIBRARIES, ResultStore, content_key,
                           decode_value, encode_value, library_versions)


def write_many(path, prefix, n, barrier):
    """Worker: wait for the other writer, then put n records one commit at a time."""
    store = ResultStore(path, timeout=10.0)
    barrier.wait()
    for i in range(n):
        store.put(f"{prefix}-{i}", {"i": i, "who": prefix, "x": np.full(3, float(i))},
                  seconds=0.001 * i)
    store.close()


# -- round trip -------------------------------------------------------------------------------
def test_round_trip_keeps_values_and_bookkeeping(tmp_path):
    path = tmp_path / "results.sqlite"
    positions = np.arange(150, dtype=float).reshape(50, 3) / 7.0
    value = {"positions": positions, "energy": -45.123456789, "converged": True, "steps": 37}
    with ResultStore(path) as store:
        assert len(store) == 0 and store.keys() == []
        store.put("b", value, seconds=0.25)
        store.put("a", [1, 2.5, "three", None])
        assert len(store) == 2
        assert store.keys() == ["b", "a"]  # insertion order
        assert "b" in store and "zzz" not in store and 3 not in store
        record = store.record("b")
    assert record.seconds == pytest.approx(0.25, rel=1e-15)
    assert record.version == confpop.__version__
    assert record.created.endswith("+00:00")  # ISO 8601, UTC
    with ResultStore(path) as again:  # persisted
        got = again.get("b")
        np.testing.assert_array_equal(got["positions"], positions)  # bit for bit
        assert got["energy"] == -45.123456789 and got["steps"] == 37 and got["converged"]
        assert again.get("a") == [1, 2.5, "three", None]
        assert again.get("missing") is None
        assert again.get("missing", default="none") == "none"
        assert again.record("missing") is None
        again.put("a", "replaced")
        assert again.get("a") == "replaced" and len(again) == 2


def test_the_file_is_plain_sqlite_in_wal_mode(tmp_path):
    # read back with the standard library's sqlite3 alone (SQLite documentation: PRAGMA
    # journal_mode, PRAGMA application_id [from memory])
    path = tmp_path / "results.sqlite"
    with ResultStore(path) as store:
        store.put("k", 1.5, seconds=2.0)
    conn = sqlite3.connect(path)
    try:
        assert conn.execute("PRAGMA journal_mode").fetchone()[0] == "wal"
        assert conn.execute("PRAGMA application_id").fetchone()[0] == APPLICATION_ID
        meta = dict(conn.execute("SELECT name, value FROM confpop_meta"))
        key, blob, seconds = conn.execute("SELECT key, value, seconds FROM results").fetchone()
    finally:
        conn.close()
    assert meta["application"] == "confpop" and meta["schema_version"] == "2"
    # the value is a JSON text readable with the json module alone
    assert json.loads(bytes(blob)) == {"format": "confpop-value-1", "data": 1.5}
    assert (key, seconds) == ("k", 2.0)


def test_pickled_store_reopens_by_path(tmp_path):
    store = ResultStore(tmp_path / "results.sqlite")
    store.put("k", {"e": -1.0})
    clone = pickle.loads(pickle.dumps(store))
    assert clone is not store and clone.path == store.path
    assert clone.get("k") == {"e": -1.0}
    clone.put("k2", 2)
    assert store.get("k2") == 2
    clone.close()
    store.close()
    store.close()  # closing twice is fine
    with pytest.raises(StoreError, match="is closed"):
        store.get("k")


def test_threads_share_one_store_object(tmp_path):
    import threading

    with ResultStore(tmp_path / "results.sqlite") as store:
        def work(t):
            for i in range(20):
                store.put(f"t{t}-{i}", i)

        threads = [threading.Thread(target=work, args=(t,)) for t in range(3)]
        for thread in threads:
            thread.start()
        for thread in threads:
            thread.join()
        assert len(store) == 60


# -- bad files --------------------------------------------------------------------------------
def test_corrupt_file_raises_store_error_and_is_left_alone(tmp_path):
    path = tmp_path / "noise.sqlite"
    noise = np.random.default_rng(3).integers(0, 256, size=4096, dtype=np.uint8).tobytes()
    path.write_bytes(noise)
    with pytest.raises(StoreError, match=r"noise\.sqlite.*not an SQLite database"):
        ResultStore(path)
    assert path.read_bytes() == noise


def test_damaged_sqlite_file_raises_store_error(tmp_path):
    path = tmp_path / "damaged.sqlite"
    with ResultStore(path) as store:
        store.put("k", 1)
    data = bytearray(path.read_bytes())
    data[16:100] = b"\xff" * 84  # page size and header fields destroyed, magic kept
    path.write_bytes(bytes(data))
    for suffix in ("-wal", "-shm"):
        if os.path.exists(str(path) + suffix):
            os.remove(str(path) + suffix)
    with pytest.raises(StoreError, match=r"damaged\.sqlite.*corrupt"):
        ResultStore(path)


def test_foreign_sqlite_file_raises_store_error_and_is_left_alone(tmp_path):
    path = tmp_path / "address_book.db"
    conn = sqlite3.connect(path)
    conn.execute("CREATE TABLE people (name TEXT, phone TEXT)")
    conn.execute("INSERT INTO people VALUES ('Invented Person', '000')")
    conn.commit()
    conn.close()
    before = path.read_bytes()
    with pytest.raises(StoreError, match=r"address_book\.db.*another application.*people"):
        ResultStore(path)
    assert path.read_bytes() == before  # not switched to WAL, no tables added
    assert not os.path.exists(str(path) + "-wal")


def test_store_of_a_newer_layout_is_refused(tmp_path):
    path = tmp_path / "future.sqlite"
    ResultStore(path).close()
    conn = sqlite3.connect(path)
    conn.execute("UPDATE confpop_meta SET value = '99' WHERE name = 'schema_version'")
    conn.commit()
    conn.close()
    with pytest.raises(StoreError, match="layout version '99'.*newer"):
        ResultStore(path)


def test_bad_paths_and_keys(tmp_path):
    with pytest.raises(StoreError, match="is a directory"):
        ResultStore(tmp_path)
    with pytest.raises(StoreError, match="cannot open"):
        ResultStore(tmp_path / "no_such_folder" / "results.sqlite")
    with pytest.raises(InputError, match="path must be a file path"):
        ResultStore(42)
    with ResultStore(tmp_path / "ok.sqlite") as store:
        with pytest.raises(InputError, match="non-empty str, got 7"):
            store.put(7, "value")
        with pytest.raises(InputError, match="cannot be stored.*function"):
            store.put("k", lambda: None)
        with pytest.raises(InputError, match=r"value\['a'\]: an array of dtype object"):
            store.put("k", {"a": np.array([None, 1])})
        with pytest.raises(InputError, match="dict keys must be str"):
            store.put("k", {1: 2})


# -- two writers ------------------------------------------------------------------------------
def test_two_processes_writing_at_once_lose_nothing(tmp_path):
    path = str(tmp_path / "shared.sqlite")
    ResultStore(path).close()
    context = multiprocessing.get_context("forkserver")
    barrier = context.Barrier(2)
    writers = [context.Process(target=write_many, args=(path, name, 200, barrier))
               for name in ("first", "second")]
    for writer in writers:
        writer.start()
    for writer in writers:
        writer.join(timeout=120)
    assert [writer.exitcode for writer in writers] == [0, 0]
    with ResultStore(path) as store:
        assert len(store) == 400
        for name in ("first", "second"):
            for i in (0, 117, 199):
                value = store.get(f"{name}-{i}")
                assert value["i"] == i and value["who"] == name
                np.testing.assert_array_equal(value["x"], np.full(3, float(i)))


# -- content keys -----------------------------------------------------------------------------
WATER_Z = [8, 1, 1]
# water near its equilibrium geometry, on the 1e-6 angstrom grid (invented coordinates)
WATER_XYZ = np.array([[0.0, 0.0, 0.117176], [0.0, 0.757329, -0.468706],
                      [0.0, -0.757329, -0.468706]])
BASE = dict(charge=0, multiplicity=1, method="gfn2", solvent="water",
            settings={"accuracy": 1.0, "max_iterations": 250}, kind="singlepoint")


def key(numbers=WATER_Z, positions=WATER_XYZ, **changes):
    return content_key(numbers, positions, **{**BASE, **changes})


def test_key_ignores_noise_below_the_rounding_and_negative_zero():
    reference = key()
    assert len(reference) == 64 and int(reference, 16) >= 0
    noise = np.random.default_rng(5).uniform(-1e-8, 1e-8, size=WATER_XYZ.shape)
    assert key(positions=WATER_XYZ + noise) == reference  # 1e-8 << 5e-7 to a boundary
    assert key(positions=np.where(WATER_XYZ == 0.0, -0.0, WATER_XYZ)) == reference
    assert key(positions=WATER_XYZ.tolist()) == reference
    assert key(settings={"max_iterations": 250, "accuracy": 1.0}) == reference  # key order
    assert key(method=" GFN2 ", solvent="Water") == reference
    assert key(numbers=np.array(WATER_Z, dtype=np.int32)) == reference


def test_key_rounds_half_to_even():
    # IEEE 754 roundTiesToEven, as numpy.rint documents; 0.5, 1.5, 2.5 are exact binary
    base = dict(BASE, decimals=0)
    at = lambda x: content_key([1], [[x, 0.0, 0.0]], **base)  # noqa: E731
    assert at(0.5) == at(0.0) == at(-0.5) == at(-0.0)
    assert at(1.5) == at(2.0) == at(2.5)
    assert at(0.5) != at(1.5)


def test_key_changes_with_everything_that_changes_the_result(monkeypatch):
    reference = key()
    moved = WATER_XYZ.copy()
    moved[1, 1] += 2e-6
    variants = [key(method="gfn1"), key(solvent=None), key(solvent="chloroform"),
                key(charge=1, multiplicity=2), key(multiplicity=3), key(kind="optimize"),
                key(settings={"accuracy": 0.1, "max_iterations": 250}), key(settings=None),
                key(positions=moved), key(numbers=[8, 1, 9]),
                key(positions=WATER_XYZ[[1, 0, 2]], numbers=[1, 8, 1]), key(decimals=4)]
    assert len({reference, *variants}) == len(variants) + 1
    monkeypatch.setattr(confpop, "__version__", "999.0")
    assert key() != reference  # results of another confpop version are not reused


def _installed(name):
    from importlib.metadata import PackageNotFoundError, version
    try:
        return version(name)
    except PackageNotFoundError:
        return None


def test_key_changes_with_an_engine_or_library_version(monkeypatch):
    reference = key()
    versions = dict(library_versions())
    assert versions["rdkit"] and versions["xtb"]  # installed by the default test command
    for name in ("xtb", "rdkit"):
        changed = {**versions, name: "0.0.1"}
        monkeypatch.setattr("confpop.store.library_versions", lambda changed=changed: changed)
        assert key() != reference, name


def test_key_is_the_documented_recipe():
    # independent re-computation of the recipe in content_key's Notes, with hashlib and json
    document = {"recipe": "confpop-content-key-2", "numbers": WATER_Z,
                "positions": [[0, 0, 117176], [0, 757329, -468706], [0, -757329, -468706]],
                "decimals": 6, "charge": 0, "multiplicity": 1, "method": "gfn2",
                "solvent": "water", "settings": {"accuracy": 1.0, "max_iterations": 250},
                "kind": "singlepoint", "version": confpop.__version__,
                "libraries": {name: _installed(name) for name in KEY_LIBRARIES}}
    text = json.dumps(document, sort_keys=True, separators=(",", ":"))
    assert key() == hashlib.sha256(text.encode()).hexdigest()


@pytest.mark.parametrize("changes, message", [
    (dict(positions=WATER_XYZ[:2]), r"positions must have shape \(3, 3\)"),
    (dict(positions=np.full((3, 3), np.nan)), "positions must be finite"),
    (dict(numbers=[8.0, 1.0, 1.0]), "numbers must be a non-empty 1-D sequence"),
    (dict(numbers=[8, 0, 1]), "atomic numbers >= 1"),
    (dict(multiplicity=0), "multiplicity must be >= 1, got 0"),
    (dict(charge=0.5), "charge must be an int, got 0.5"),
    (dict(method=""), "method must be a non-empty str"),
    (dict(kind=None), "kind must be a non-empty str"),
    (dict(settings={"callback": print}), r"settings\['callback'\] must hold only"),
    (dict(settings={"x": float("inf")}), r"settings\['x'\] must be finite"),
    (dict(settings=[1, 2]), "settings must be a dict or None, got list"),
    (dict(decimals=12), "decimals must be an int from 0 to 9, got 12"),
])
def test_bad_key_input_raises_input_error(changes, message):
    with pytest.raises(InputError, match=message):
        key(**changes)


# -- data, never code -------------------------------------------------------------------------
def test_values_round_trip_bit_for_bit_with_their_types():
    values = [None, True, 0, -7, 2 ** 70, -45.123456789, float("nan"), float("inf"), "text",
              [1, [2.5, None]], (1, (2, "x")), {"__tuple__": 1, "b": {"__ndarray__": 0}},
              np.float64(0.1), np.int32(-3), np.bool_(True),
              np.arange(12, dtype=">i4").reshape(3, 4), np.array([1 + 2j], dtype=np.complex64),
              np.zeros((0, 3)), np.array([True, False]), np.float64(1) / 3 * np.ones((2, 2, 2))]
    for value in values:
        back = decode_value(encode_value(value))
        if isinstance(value, np.ndarray):
            assert back.dtype == value.dtype and back.shape == value.shape
            np.testing.assert_array_equal(back, value)
            assert back.flags.writeable
        elif isinstance(value, float) and value != value:
            assert back != back
        else:
            assert back == value and type(back) is type(value.item() if isinstance(
                value, np.generic) else value)


def _plant(path, blob):
    conn = sqlite3.connect(path)
    conn.execute("UPDATE results SET value = ?", (blob,))
    conn.commit()
    conn.close()


class _Payload:
    def __reduce__(self):
        return (os.mkdir, (self.target,))


@pytest.mark.parametrize("kind", ["pickle", "garbage", "wrong dtype", "short array",
                                  "deep nesting", "not utf-8"])
def test_a_planted_value_is_never_executed_only_recomputed(tmp_path, kind):
    path = tmp_path / "results.sqlite"
    with ResultStore(path) as store:
        store.put("k", {"x": np.arange(3.0)})
    target = tmp_path / "payload-ran"
    payload = _Payload()
    payload.target = str(target)
    blob = {"pickle": pickle.dumps(payload),
            "garbage": b"\x00\x01 not a value",
            "wrong dtype": b'{"format":"confpop-value-1","data":{"__ndarray__":"","dtype":"O",'
                           b'"shape":[0]}}',
            "short array": b'{"format":"confpop-value-1","data":{"__ndarray__":"AAAA",'
                           b'"dtype":"<f8","shape":[3]}}',
            "deep nesting": b'{"format":"confpop-value-1","data":' + b"[" * 100000 + b"]" * 100000
                            + b"}",
            "not utf-8": b"\xff\xfe\x80"}[kind]
    _plant(path, blob)
    with ResultStore(path) as store:
        with pytest.warns(StoreWarning, match="not confpop data.*computed again"):
            assert store.record("k") is None
        with pytest.warns(StoreWarning):
            assert store.get("k", "missing") == "missing"
        store.put("k", 1.0)  # the recomputed value replaces the row
        assert store.get("k") == 1.0
    assert not target.exists()


def test_a_planted_pickle_costs_one_recomputation_in_run_units(tmp_path):
    from confpop.execution import run_units
    path = tmp_path / "results.sqlite"
    with ResultStore(path) as store:
        first = run_units(abs, [-1.0, -2.0], workers=1, store=store, keys=["a", "b"])
    payload = _Payload()
    payload.target = str(tmp_path / "payload-ran")
    conn = sqlite3.connect(path)
    conn.execute("UPDATE results SET value = ? WHERE key = 'a'", (pickle.dumps(payload),))
    conn.commit()
    conn.close()
    with ResultStore(path) as store, pytest.warns(StoreWarning):
        second = run_units(abs, [-1.0, -2.0], workers=1, store=store, keys=["a", "b"])
    assert [o.value for o in first] == [o.value for o in second] == [1.0, 2.0]
    assert [o.from_store for o in second] == [False, True]
    assert not (tmp_path / "payload-ran").exists()


def test_a_fifo_or_relative_path(tmp_path, monkeypatch):
    fifo = tmp_path / "pipe"
    os.mkfifo(fifo)
    with pytest.raises(StoreError, match="not a regular file"):
        ResultStore(fifo)  # would wait forever for a writer if opened
    monkeypatch.chdir(tmp_path)
    with ResultStore("relative.sqlite") as store:
        assert store.path == str(tmp_path / "relative.sqlite")  # workers elsewhere find it


def test_a_layout_1_store_is_taken_over(tmp_path):
    path = tmp_path / "old.sqlite"
    with ResultStore(path) as store:
        store.put("k", 1)
    conn = sqlite3.connect(path)
    conn.execute("UPDATE confpop_meta SET value = '1' WHERE name = 'schema_version'")
    conn.execute("UPDATE results SET value = ?", (pickle.dumps(1),))
    conn.commit()
    conn.close()
    with ResultStore(path) as store, pytest.warns(StoreWarning):
        assert store.get("k") is None
    conn = sqlite3.connect(path)
    assert conn.execute("SELECT value FROM confpop_meta WHERE name = 'schema_version'"
                        ).fetchone()[0] == "2"
    conn.close()
