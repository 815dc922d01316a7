"""Tests of simloop.store (the SQLite results store) and of the store key of a sweep point.

The store is checked from the outside as well as through its own API: a second, plain ``sqlite3``
connection (the Python standard library's SQLite binding, read-only) reads the tables, so the
claims of the module docstring (plain SQL tables, write-ahead log, one row per harmonic) are
checked against SQLite itself. The point documents are invented for the tests (shaped like a
sweep point: status, parameters, harmonics rows); nothing here runs the engine.
"""

from __future__ import annotations

import json
import math
import sqlite3
from pathlib import Path

import pytest

from simloop.analyse import RunSettings
from simloop.errors import InputError
from simloop.files import clean_json
from simloop.netlist import load_circuit
from simloop.steady import SteadySettings
from simloop.store import SCHEMA_VERSION, ResultStore
from simloop.sweep import circuit_hash, point_key, settings_identity

SETTINGS_IDENTITY = {"harmonics": 10, "probe": "v(out)"}


def _harmonic(n: int, sim_v: float, phase_deg: float) -> dict[str, float | int | None]:
    return {"n": n, "freq_hz": 50.0 * n, "ideal_v": None if n % 2 and n > 1 else 1.0 / (n + 1),
            "ideal_phase_deg": 0.0, "estimate_v": 0.9 / (n + 1), "sim_v": sim_v,
            "sim_phase_deg": phase_deg, "delta_db": None, "estimate_delta_db": -0.25}


def _document(*, scale: float = 1.0, orders: int = 4, status: str = "ok") -> dict:
    """An invented sweep-point document (the shape simloop.sweep stores)."""
    return {
        "status": status,
        "error": None if status == "ok" else "invented reason",
        "circuit": "half-wave",
        "parameters": {"vpk": 12.0 * scale, "rload": 100.0},
        "choices": {"diode": "sl_rect1a"},
        "steady_state": {"converged": status == "ok", "periods_simulated": 12, "drift": 1e-9},
        "metrics": {"dc_v": 3.5 * scale, "rms_v": 5.25 * scale, "thd": None},
        "harmonics": [_harmonic(n, scale * 0.1 * (n + 1), -12.5 * n) for n in range(orders + 1)],
        "engine_version": "ngspice-39",
        "varied": {"vpk": 12.0 * scale},
        "index": 0,
    }


def _put(store: ResultStore, key: str, document: dict) -> None:
    store.put(key, circuit="half-wave", circuit_hash="c0ffee", settings=SETTINGS_IDENTITY,
              engine_version="ngspice-39", document=document)


def _read_only(path: Path) -> sqlite3.Connection:
    """A second connection that cannot change the file (SQLite URI ``mode=ro``)."""
    return sqlite3.connect(f"file:{path}?mode=ro", uri=True)


# ------------------------------------------------------------------------------------- store
def test_result_store_round_trip(tmp_path):
    doc = _document()
    with ResultStore(tmp_path / "r.db") as store:
        _put(store, "k1", doc)
        assert store.get("k1") == doc
        assert store.get("no-such-key") is None
        assert store.count() == 1


def test_result_store_harmonics_queryable_with_sqlite3(tmp_path):
    doc = _document(orders=6)
    path = tmp_path / "r.db"
    with ResultStore(path) as store:
        _put(store, "k1", doc)
        _put(store, "k2", _document(scale=2.0, orders=6))
    db = _read_only(path)
    try:
        rows = db.execute("SELECT n, sim_v, sim_phase_deg FROM harmonics WHERE point_key = ? "
                          "ORDER BY n", ("k1",)).fetchall()
        status = db.execute("SELECT status, circuit, engine_version FROM points WHERE key = 'k1'"
                            ).fetchone()
        params = json.loads(db.execute("SELECT parameters FROM points WHERE key = 'k2'").fetchone()[0])
        total = db.execute("SELECT COUNT(*) FROM harmonics").fetchone()[0]
    finally:
        db.close()
    assert rows == [(h["n"], h["sim_v"], h["sim_phase_deg"]) for h in doc["harmonics"]]
    assert status == ("ok", "half-wave", "ngspice-39")
    assert params == {"vpk": 24.0, "rload": 100.0}
    assert total == 2 * 7


def test_result_store_uses_write_ahead_log(tmp_path):
    path = tmp_path / "r.db"
    with ResultStore(path) as store:
        _put(store, "k1", _document())
        db = _read_only(path)  # the mode is a property of the file, seen by any connection
        try:
            mode = db.execute("PRAGMA journal_mode").fetchone()[0]
        finally:
            db.close()
    assert mode == "wal"


def test_result_store_commits_each_point_at_once(tmp_path):
    # A reader on another connection sees a point as soon as put() returns (no close needed):
    # what lets a sweep killed with SIGKILL keep every finished point.
    path = tmp_path / "r.db"
    store = ResultStore(path)
    try:
        _put(store, "k1", _document())
        db = _read_only(path)
        try:
            seen = db.execute("SELECT COUNT(*) FROM points").fetchone()[0]
        finally:
            db.close()
    finally:
        store.close()
    assert seen == 1


def test_result_store_reopen_keeps_points(tmp_path):
    path = tmp_path / "sub" / "r.db"  # the folder is created
    first, second = _document(), _document(scale=3.0, status="unconverged")
    with ResultStore(path) as store:
        _put(store, "k1", first)
    with ResultStore(path) as store:
        assert store.count() == 1
        assert store.get("k1") == first
        _put(store, "k2", second)
    with ResultStore(path) as store:
        assert (store.get("k1"), store.get("k2")) == (first, second)


def test_result_store_other_schema_refused(tmp_path):
    path = tmp_path / "r.db"
    with ResultStore(path) as store:
        _put(store, "k1", _document())
    db = sqlite3.connect(path)
    with db:
        db.execute("UPDATE meta SET value = '999' WHERE key = 'schema'")
    db.close()
    assert SCHEMA_VERSION != "999"
    with pytest.raises(InputError, match=r"schema 999.*writes " + SCHEMA_VERSION) as info:
        ResultStore(path)
    assert "\n" not in str(info.value)
    assert str(path) in str(info.value)


def test_result_store_put_replaces_same_key(tmp_path):
    path = tmp_path / "r.db"
    old, new = _document(orders=6), _document(scale=2.0, orders=3)
    with ResultStore(path) as store:
        _put(store, "k1", old)
        _put(store, "k1", new)
        assert store.get("k1") == new
        assert store.count() == 1
    db = _read_only(path)
    try:
        rows = db.execute("SELECT n, sim_v FROM harmonics WHERE point_key = 'k1' ORDER BY n").fetchall()
    finally:
        db.close()
    assert rows == [(h["n"], h["sim_v"]) for h in new["harmonics"]]  # no rows of the old point left


def test_result_store_failed_point_has_no_harmonics(tmp_path):
    doc = _document(status="failed") | {"harmonics": None, "metrics": None, "steady_state": None}
    path = tmp_path / "r.db"
    with ResultStore(path) as store:
        _put(store, "k1", doc)
        assert store.get("k1") == doc
    db = _read_only(path)
    try:
        status, error = db.execute("SELECT status, error FROM points").fetchone()
        count = db.execute("SELECT COUNT(*) FROM harmonics").fetchone()[0]
    finally:
        db.close()
    assert (status, error, count) == ("failed", "invented reason", 0)


def test_result_store_unwritable_path_refused(tmp_path):
    blocker = tmp_path / "plain-file"
    blocker.write_text("not a folder\n")
    with pytest.raises(InputError, match="cannot open the result store") as info:
        ResultStore(blocker / "sub" / "r.db")
    assert "\n" not in str(info.value)


def test_result_store_non_database_file_refused(tmp_path):
    path = tmp_path / "notes.db"
    path.write_text("these are notes, not a database\n" * 20)
    with pytest.raises(InputError, match="not a database"):
        ResultStore(path)
    assert path.read_text().startswith("these are notes")


def test_result_store_foreign_database_refused(tmp_path):
    # The class docstring: "Raises InputError ... if the file ... is not a simloop store".
    path = tmp_path / "inventory.db"
    db = sqlite3.connect(path)
    with db:
        db.execute("CREATE TABLE parts (id INTEGER, label TEXT)")
    db.close()
    with pytest.raises(InputError, match="store"):
        ResultStore(path).close()


def test_result_store_foreign_database_left_unchanged(tmp_path):
    path = tmp_path / "inventory.db"
    db = sqlite3.connect(path)
    with db:
        db.execute("CREATE TABLE parts (id INTEGER, label TEXT)")
    before = db.execute("PRAGMA journal_mode").fetchone()[0]
    db.close()
    with pytest.raises(InputError):
        ResultStore(path).close()
    db = _read_only(path)
    try:
        after = db.execute("PRAGMA journal_mode").fetchone()[0]
        tables = [r[0] for r in db.execute("SELECT name FROM sqlite_master WHERE type='table'")]
    finally:
        db.close()
    assert tables == ["parts"]
    assert (before, after) == ("delete", "delete")  # SQLite's default rollback journal


def test_result_store_put_non_finite_level(tmp_path):
    doc = _document()
    doc["harmonics"][3]["delta_db"] = -math.inf  # what compare gives a harmonic of amplitude 0
    with ResultStore(tmp_path / "r.db") as store:
        _put(store, "k1", doc)
        assert store.get("k1") == clean_json(doc)


# ------------------------------------------------------------------------------- point key
BASE_KEY = dict(circuit_hash="a" * 64, parameters={"vpk": 12.0, "rload": 100.0},
                choices={"diode": "sl_rect1a"}, settings={"harmonics": 10, "tolerance": 1e-6},
                engine_version="ngspice-39")


@pytest.mark.parametrize(
    ("field", "value"),
    [
        ("circuit_hash", "b" * 64),
        ("parameters", {"vpk": 12.0, "rload": 101.0}),
        ("parameters", {"vpk": 12.0, "rload": 100.0, "rsrc": 0.5}),
        ("choices", {"diode": "sl_schottky"}),
        ("choices", {}),
        ("settings", {"harmonics": 12, "tolerance": 1e-6}),
        ("settings", {"harmonics": 10, "tolerance": 1e-7}),
        ("engine_version", "ngspice-40"),
    ],
)
def test_point_key_changes_with_identity(field, value):
    assert point_key(**(BASE_KEY | {field: value})) != point_key(**BASE_KEY)


def test_point_key_independent_of_dict_order():
    reordered = dict(
        engine_version="ngspice-39",
        settings={"tolerance": 1e-6, "harmonics": 10},
        choices={"diode": "sl_rect1a"},
        parameters={"rload": 100.0, "vpk": 12.0},
        circuit_hash="a" * 64,
    )
    assert point_key(**reordered) == point_key(**BASE_KEY)


def test_point_key_integer_and_float_values_agree():
    # --vary rload=100 and a stored default of 100.0 are the same point.
    assert point_key(**(BASE_KEY | {"parameters": {"vpk": 12, "rload": 100}})) == point_key(**BASE_KEY)


def test_point_key_is_sha256_hex():
    key = point_key(**BASE_KEY)
    assert len(key) == 64 and int(key, 16) >= 0


def test_settings_identity_ignores_timeout():
    short = RunSettings(steady=SteadySettings(timeout=5.0))
    long = RunSettings(steady=SteadySettings(timeout=600.0))
    assert settings_identity(short) == settings_identity(long)
    keys = [point_key(**(BASE_KEY | {"settings": settings_identity(s)})) for s in (short, long)]
    assert keys[0] == keys[1]


@pytest.mark.parametrize(
    "changed",
    [
        RunSettings(harmonics=12),
        RunSettings(probe="v(an,out)"),
        RunSettings(method="linear"),
        RunSettings(steady=SteadySettings(tolerance=1e-7)),
        RunSettings(steady=SteadySettings(max_periods=500)),
        RunSettings(steady=SteadySettings(tmax=1e-6)),
    ],
    ids=["harmonics", "probe", "resampling", "tolerance", "max_periods", "tmax"],
)
def test_settings_identity_changes_with_result_settings(changed):
    base = settings_identity(RunSettings())
    assert settings_identity(changed) != base
    assert (point_key(**(BASE_KEY | {"settings": settings_identity(changed)}))
            != point_key(**(BASE_KEY | {"settings": base})))


def test_settings_identity_is_json_data():
    identity = settings_identity(RunSettings(steady=SteadySettings(tmax=2e-6)))
    assert json.loads(json.dumps(identity)) == identity


# ----------------------------------------------------------------------------- circuit hash
NETLIST = """* invented test rectifier
.include parts.lib
.param vm=10 f=1k rl=1k
V1 src 0 SIN(0 {vm} {f})
D1 src out dx
Rl out 0 {rl}
.end
"""
PARTS = ".model dx D(IS=2.5e-9 N=1.75 RS=0.5)\n"


def _circuit(folder: Path, *, netlist: str = NETLIST, parts: str = PARTS, sidecar: str | None = None):
    folder.mkdir(parents=True, exist_ok=True)
    (folder / "rect.cir").write_text(netlist)
    (folder / "parts.lib").write_text(parts)
    if sidecar is not None:
        (folder / "rect.toml").write_text(sidecar)
    return load_circuit(folder / "rect.cir")


def test_circuit_hash_same_content_same_hash(tmp_path):
    # The key follows the content, not the file's place: two copies hash alike.
    assert circuit_hash(_circuit(tmp_path / "a")) == circuit_hash(_circuit(tmp_path / "b"))


def test_circuit_hash_changes_with_netlist(tmp_path):
    base = circuit_hash(_circuit(tmp_path / "a"))
    edited = circuit_hash(_circuit(tmp_path / "b", netlist=NETLIST.replace("Rl out 0 {rl}",
                                                                            "Rl out 0 {rl*1.01}")))
    assert edited != base


def test_circuit_hash_changes_with_included_model(tmp_path):
    base = circuit_hash(_circuit(tmp_path / "a"))
    edited = circuit_hash(_circuit(tmp_path / "b", parts=PARTS.replace("N=1.75", "N=1.80")))
    assert edited != base


def test_circuit_hash_changes_with_metadata(tmp_path):
    sidecar = ('title = "invented test rectifier"\nideal_kind = "half-wave"\n'
               'fundamental_param = "f"\namplitude_param = "vm"\ndefault_probe = "v(out)"\n'
               '[parameters]\nrl = { unit = "ohm", min = 1, max = 1e6 }\n')
    first = circuit_hash(_circuit(tmp_path / "a", sidecar=sidecar))
    second = circuit_hash(_circuit(tmp_path / "b", sidecar=sidecar.replace("max = 1e6", "max = 1e5")))
    assert first != second
    assert first != circuit_hash(_circuit(tmp_path / "c"))
