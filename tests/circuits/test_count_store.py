"""The on-disk cache of gate counts and path matrices (qgp.circuits.count_store)."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from qiskit import transpile

from qgp.circuits import count_store, decomposition
from qgp.circuits.count_store import PieceCounts
from qgp.circuits.decomposition import OPTIMIZATION_LEVEL, decompose_circuit
from qgp.circuits.inversion import build_inversion
from qgp.circuits.resources import BASES
from qgp.settings import CircuitSettings


def _random_spd(m: int, seed: int) -> np.ndarray:
    g = np.random.default_rng(seed).normal(size=(2**m, 2**m))
    return g @ g.T / 2**m + 0.5 * np.eye(2**m)


# The circuit of tests/circuits/test_resources.py::test_composed_counts_and_depth_equal_a_direct_transpile
# (exact and Trotter oracles, where the composed counts equal a direct transpile).
SPD = _random_spd(2, 7)
SPD_BOUNDS = (0.9 * np.linalg.eigvalsh(SPD)[0], 1.1 * np.linalg.eigvalsh(SPD)[-1])
B = np.random.default_rng(8).normal(size=4)
ORACLES = {
    "exact": CircuitSettings(clock_qubits=3, evolution="exact"),
    "trotter": CircuitSettings(clock_qubits=3, evolution="trotter", trotter_steps=2, trotter_order=2),
}


def _circuit(oracle: str):
    return build_inversion(SPD, ORACLES[oracle], "inverse", SPD_BOUNDS, prepare=B, form="gate").circuit


def _cold() -> None:
    """Forget every lowered piece in memory, as a fresh process would."""
    decomposition._CACHE.clear()
    decomposition._COUNTS.clear()


def _counts_and_depths(dec) -> dict:
    return {key: (dec.gate_counts(basis), dec.depth(basis)) for key, basis in BASES.items()}


@pytest.fixture
def cache(tmp_path, monkeypatch):
    """A fresh cache root for one test, and cold in-memory caches before and after it."""
    root = tmp_path / "cache"
    monkeypatch.setenv("QGP_CACHE_DIR", str(root))
    _cold()
    yield root / count_store.SUBFOLDER
    _cold()


def _entries(folder) -> list:
    return sorted(folder.glob("*.json")) if folder.exists() else []


@pytest.mark.parametrize("oracle", list(ORACLES))
def test_counts_and_depth_from_the_disk_equal_a_direct_transpile(cache, oracle, monkeypatch):
    # Common practice (as in test_resources): the composed counts and depth must be what qiskit
    # reports for the whole circuit transpiled at the stated level; read back from the disk in a
    # cold process, with the transpiler made unusable, they must not change.
    qc = _circuit(oracle)
    direct = {}
    for key, basis in BASES.items():
        out = transpile(qc, basis_gates=list(basis), optimization_level=OPTIMIZATION_LEVEL)
        direct[key] = (dict(sorted(out.count_ops().items())), out.depth())
    dec = decompose_circuit(qc)
    assert _counts_and_depths(dec) == direct
    assert len(_entries(cache)) == len(dec.pieces) * len(BASES)

    _cold()

    def refuse(*args, **kwargs):
        raise AssertionError("transpile called although every piece is in the disk cache")

    monkeypatch.setattr(decomposition, "transpile", refuse)
    assert _counts_and_depths(decompose_circuit(qc)) == direct


def test_an_entry_round_trips_with_minus_infinity():
    # Common practice: JSON has no infinities (RFC 8259 §6), so −inf is written as null and read back.
    paths = np.array([[0.0, -math.inf], [3.0, 2.0]])
    entry = PieceCounts(counts={"cx": 1, "u": 4}, paths=paths)
    text = count_store.encode_entry("abc", ("u", "cx"), 0, "9.9.9", entry)
    assert "Infinity" not in text and "null" in text
    back = count_store.decode_entry(text, "abc", ("u", "cx"), 0, "9.9.9", n_qubits=2)
    assert back.counts == {"cx": 1, "u": 4}
    np.testing.assert_array_equal(back.paths, paths)
    assert back.depth == 3


@pytest.mark.parametrize(
    "corrupt",
    [
        b"",  # an empty file (a crash before the atomic rename cannot leave one, a full disk could)
        b"{\"format\": 1, \"counts\": {",  # truncated JSON
        b"\xff\xfe not text",  # not UTF-8
        b"[1, 2, 3]",  # JSON, but not an object
        b"{\"format\": 1}",  # fields missing
    ],
)
def test_a_corrupt_entry_is_ignored_and_rewritten(cache, corrupt):
    # Common practice for caches: a damaged entry is a miss, never an error or a wrong count.
    qc = _circuit("exact")
    want = _counts_and_depths(decompose_circuit(qc))
    files = _entries(cache)
    assert files
    for f in files:
        f.write_bytes(corrupt)
    _cold()
    assert _counts_and_depths(decompose_circuit(qc)) == want
    for f in files:
        doc = json.loads(f.read_text())  # rewritten whole
        assert doc["qiskit"] == count_store.qiskit_version() and doc["format"] == count_store.FORMAT_VERSION


@pytest.mark.parametrize(
    "field, value",
    [
        ("counts", {"cx": -1}),  # a negative count
        ("counts", {"not_in_basis": 1}),  # a gate outside the basis
        ("counts", {"cx": 1.5}),  # not an integer
        ("counts", {"cx": True}),  # JSON true is not a count
        ("paths", [[0.0]]),  # wrong shape
        ("paths", [[0.0, -1.0], [0.0, 0.0]]),  # a negative path length
        ("paths", "nonsense"),
        ("basis", ["cx", "u"]),  # another key than the file name says
        ("optimization_level", 3),
    ],
)
def test_a_malformed_entry_is_a_miss(tmp_path, field, value):
    # Common practice: a well-formed JSON file with wrong contents is not trusted either.
    entry = PieceCounts(counts={"cx": 2}, paths=np.zeros((2, 2)))
    path = count_store.store("d", ("u", "cx"), 0, entry, folder=tmp_path)
    assert count_store.load("d", ("u", "cx"), 0, 2, folder=tmp_path) is not None
    doc = json.loads(path.read_text())
    doc[field] = value
    path.write_text(json.dumps(doc))
    assert count_store.load("d", ("u", "cx"), 0, 2, folder=tmp_path) is None


def test_a_non_finite_number_is_a_miss(tmp_path):
    # RFC 8259 §6: NaN and Infinity are not JSON, though Python's json module reads them.
    entry = PieceCounts(counts={"cx": 2}, paths=np.zeros((2, 2)))
    path = count_store.store("d", ("u", "cx"), 0, entry, folder=tmp_path)
    for bad in ("NaN", "Infinity"):
        path.write_text(count_store.encode_entry("d", ("u", "cx"), 0, count_store.qiskit_version(), entry).replace(
            "0.0", bad, 1))
        assert count_store.load("d", ("u", "cx"), 0, 2, folder=tmp_path) is None


def test_an_entry_of_another_qiskit_version_is_ignored(cache, monkeypatch):
    # Common practice: transpiler output can change between qiskit versions, so the version is part
    # of the key (another file name) and is checked on read (a stored entry claiming another one).
    now = count_store.qiskit_version()
    key = ("digest", ("u", "cx"), OPTIMIZATION_LEVEL, now)
    assert count_store.entry_key(*key) != count_store.entry_key(*key[:3], now + ".post1")

    qc = _circuit("exact")
    want = _counts_and_depths(decompose_circuit(qc))
    files = _entries(cache)
    for f in files:
        doc = json.loads(f.read_text())
        doc["qiskit"] = "0.0.0"
        doc["counts"] = {name: n + 1 for name, n in doc["counts"].items()}  # would show if it were read
        f.write_text(json.dumps(doc))
    _cold()
    assert _counts_and_depths(decompose_circuit(qc)) == want
    assert all(json.loads(f.read_text())["qiskit"] == now for f in files)

    # Entries written under another version are simply not found.
    _cold()
    monkeypatch.setattr(count_store, "qiskit_version", lambda: "0.0.0")
    decompose_circuit(qc).gate_counts(BASES["u_cx"])
    assert len(_entries(cache)) > len(files)


def test_the_disabled_cache_writes_nothing(tmp_path, monkeypatch):
    # Documented switch (docs/config.md): QGP_CACHE_DIR=off turns the disk cache off, whatever the
    # home and XDG folders are.
    monkeypatch.setenv("QGP_CACHE_DIR", "off")
    monkeypatch.setenv("XDG_CACHE_HOME", str(tmp_path / "xdg"))
    monkeypatch.setenv("HOME", str(tmp_path / "home"))
    assert count_store.cache_dir() is None
    _cold()
    try:
        qc = _circuit("exact")
        dec = decompose_circuit(qc)
        counts = dec.gate_counts(BASES["u_cx"])
        assert counts and dec.depth(BASES["u_cx"]) > 0
        assert count_store.store("d", ("u", "cx"), 0, PieceCounts({}, np.zeros((0, 0)))) is None
        assert count_store.load("d", ("u", "cx"), 0, 0) is None
    finally:
        _cold()
    assert list(tmp_path.rglob("*")) == []


def test_cache_location(tmp_path):
    # XDG base-directory specification: $XDG_CACHE_HOME if set to an absolute path, else ~/.cache;
    # an empty variable counts as unset (and so does an empty QGP_CACHE_DIR).
    home = tmp_path / "home"
    sub = count_store.SUBFOLDER
    assert count_store.cache_dir({"QGP_CACHE_DIR": str(tmp_path / "c")}) == tmp_path / "c" / sub
    assert count_store.cache_dir({"QGP_CACHE_DIR": "OFF"}) is None
    xdg = {"XDG_CACHE_HOME": str(tmp_path / "x"), "HOME": str(home)}
    assert count_store.cache_dir(xdg) == tmp_path / "x" / "qgp" / sub
    assert count_store.cache_dir({**xdg, "QGP_CACHE_DIR": ""}) == tmp_path / "x" / "qgp" / sub


def test_cache_location_defaults_to_home(tmp_path, monkeypatch):
    # XDG base-directory specification: a relative $XDG_CACHE_HOME is ignored.
    monkeypatch.setenv("HOME", str(tmp_path))
    got = count_store.cache_dir({"XDG_CACHE_HOME": "relative/path"})
    assert got == tmp_path / ".cache" / "qgp" / count_store.SUBFOLDER


def test_an_unwritable_cache_folder_does_not_break_counting(tmp_path, monkeypatch):
    # Common practice: a cache is an optimisation; a root that is a file (so no folder can be made
    # there, whoever runs the test) leaves counting exact and writes nothing.
    blocker = tmp_path / "a-file"
    blocker.write_text("not a folder")
    monkeypatch.setenv("QGP_CACHE_DIR", str(blocker))
    _cold()
    try:
        qc = _circuit("exact")
        out = transpile(qc, basis_gates=list(BASES["u_cx"]), optimization_level=OPTIMIZATION_LEVEL)
        assert decompose_circuit(qc).gate_counts(BASES["u_cx"]) == dict(sorted(out.count_ops().items()))
    finally:
        _cold()
    assert sorted(p.name for p in tmp_path.iterdir()) == ["a-file"]


def test_lower_piece_still_gives_circuits_after_a_disk_hit(cache):
    # qgp.circuits.qasm and qgp.reports.export need the transpiled circuits: a disk hit for the
    # counts must not stand in for them.
    qc = _circuit("exact")
    decompose_circuit(qc).gate_counts(BASES["u_cx"])
    _cold()
    dec = decompose_circuit(qc)
    dec.gate_counts(BASES["u_cx"])  # from the disk
    for key, lp in dec.lowered(BASES["u_cx"]).items():
        assert lp.circuit.num_qubits == dec.pieces[key].n_qubits
        assert dict(lp.circuit.count_ops()) == dict(lp.counts)
        assert lp.depth == lp.circuit.depth()
