"""Checkpoint files: exact round trip, atomic replacement, refusal of damaged/foreign/newer files."""
from __future__ import annotations

import os
import struct

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import libration as lb
from libration.exceptions import FileFormatError
from libration.io import checkpoint as ck


def _content() -> dict:
    rng = np.random.default_rng(7)
    return {
        "propagator": {
            "time": 12.5, "steps": 2**40 + 3, "method": "leapfrog", "flag": True, "none": None,
            "nan": float("nan"), "tiny": 5e-324, "neg_inf": float("-inf"),
            "integrator/position": rng.normal(size=(7, 3)),
            "integrator/ints": np.arange(5, dtype=np.int32),
            "integrator/bool": np.array([True, False]),
            "integrator/empty": np.zeros((0, 3)),
            "integrator/scalar": np.float64(1.0) / 3.0,
            "integrator/text": np.array(["a", "bc"]),
            "text": "Ünïcode ✓",
        },
        "run": {"list": [1, 2.5, "x", [None, False]], "nested": {"k": np.ones(2, dtype=">f8")}},
    }


def _assert_same(a, b) -> None:
    assert type(a) is type(b) or (isinstance(a, np.ndarray) and isinstance(b, np.ndarray))
    if isinstance(a, dict):
        assert a.keys() == b.keys()
        for key in a:
            _assert_same(a[key], b[key])
    elif isinstance(a, list):
        assert len(a) == len(b)
        for x, y in zip(a, b):
            _assert_same(x, y)
    elif isinstance(a, np.ndarray):
        assert a.shape == b.shape and a.dtype.newbyteorder("=") == b.dtype
        assert a.tobytes() == b.astype(a.dtype).tobytes()
    elif isinstance(a, float):
        assert a.hex() == b.hex()  # bit for bit, nan and signed zeros included
    else:
        assert a == b


def test_round_trip_every_kind(tmp_path):
    path = tmp_path / "x.ckpt"
    content = _content()
    ck.write(path, content, kind="run")
    meta, back = ck.read(path)
    assert meta["format_version"] == ck.FORMAT_VERSION and meta["kind"] == "run"
    assert meta["library_version"] == lb.__version__
    content["propagator"]["integrator/scalar"] = float(content["propagator"]["integrator/scalar"])
    _assert_same(content, back)


def test_write_is_atomic_and_keeps_previous(tmp_path):
    path = str(tmp_path / "x.ckpt")
    ck.write(path, {"propagator": {"time": 1.0}})
    assert not os.path.exists(path + ".prev")
    ck.write(path, {"propagator": {"time": 2.0}})
    assert ck.read(path)[1]["propagator"]["time"] == 2.0
    assert ck.read(path + ".prev")[1]["propagator"]["time"] == 1.0
    ck.write(path, {"propagator": {"time": 3.0}})
    assert ck.read(path + ".prev")[1]["propagator"]["time"] == 2.0
    leftovers = sorted(os.listdir(tmp_path))
    assert leftovers == ["x.ckpt", "x.ckpt.prev"]


def test_refuses_unstorable_values(tmp_path):
    with pytest.raises(TypeError, match="object"):
        ck.write(tmp_path / "x.ckpt", {"a": np.array([object()])})
    with pytest.raises(TypeError, match="set"):
        ck.write(tmp_path / "x.ckpt", {"a": {1, 2}})
    assert not os.path.exists(tmp_path / "x.ckpt")


def _written(tmp_path) -> bytes:
    path = tmp_path / "x.ckpt"
    ck.write(path, _content())
    return path.read_bytes()


def test_truncated_file_is_refused(tmp_path):
    data = _written(tmp_path)
    for cut in (0, 5, 40, len(data) // 2, len(data) - 1):
        with pytest.raises(FileFormatError, match="truncated|not a libration checkpoint"):
            ck.decode(data[:cut], "x.ckpt")


def test_flipped_byte_is_refused(tmp_path):
    data = bytearray(_written(tmp_path))
    data[len(data) // 2] ^= 0x10
    with pytest.raises(FileFormatError, match="checksum does not match"):
        ck.decode(bytes(data), "x.ckpt")


def test_foreign_files_are_refused(tmp_path):
    with pytest.raises(FileFormatError, match="not a libration checkpoint"):
        ck.decode(b"hello world, this is text" * 10, "notes.txt")
    with pytest.raises(FileFormatError, match="HDF5 file"):
        ck.decode(b"\x89HDF\r\n\x1a\n" + b"\0" * 100, "run.h5")
    with pytest.raises(FileFormatError, match="does not exist"):
        ck.read(tmp_path / "missing.ckpt")


def test_newer_version_is_refused_with_upgrade_hint(tmp_path):
    data = bytearray(_written(tmp_path))
    struct.pack_into("<I", data, 8, ck.FORMAT_VERSION + 1)
    # re-seal the checksum so the file is intact apart from its version
    import hashlib
    data[-32:] = hashlib.sha256(bytes(data[:-32])).digest()
    with pytest.raises(FileFormatError, match="newer libration.*upgrade"):
        ck.decode(bytes(data), "x.ckpt")


def test_damaged_checkpoint_offers_the_previous_one(tmp_path):
    path = str(tmp_path / "x.ckpt")
    ck.write(path, {"propagator": {"time": 1.0, "steps": 10}})
    ck.write(path, {"propagator": {"time": 2.0, "steps": 20}})
    with open(path, "r+b") as fh:
        fh.seek(40)
        fh.write(b"\xff\xff")
    with pytest.raises(FileFormatError, match=r"damaged.*x\.ckpt\.prev \(time 1\.0, step 10\).*libration resume"):
        ck.read(path)


def test_checkpoint_without_propagator_is_refused(tmp_path):
    path = tmp_path / "x.ckpt"
    ck.write(path, {"something": 1})
    with pytest.raises(FileFormatError, match="without a propagator state"):
        lb.Propagator.load(path)


def test_propagator_save_load_continues_bit_for_bit(tmp_path):
    rng = np.random.default_rng(3)
    mass = np.array([1.0, 1e-3, 1e-4, 0.0, 0.0])
    pos = rng.normal(size=(5, 3)) * 2
    vel = rng.normal(size=(5, 3)) * 0.3
    pos[0] = vel[0] = 0
    system = lb.System(mass, pos, vel)
    path = tmp_path / "p.ckpt"
    for method in ("leapfrog", "yoshida4"):
        one = lb.Propagator(system, method, step=0.01)
        two = lb.Propagator(system, method, step=0.01)
        one.advance(1.0)
        two.advance(0.503)  # off the step grid: finished on a copy
        two.save(path)
        three = lb.Propagator.load(path)
        assert three.time == 0.503 and three.steps == two.steps
        three.advance(1.0)
        assert np.array_equal(one.system.position, three.system.position)
        assert np.array_equal(one.system.velocity, three.system.velocity)


# --- property-based: random damage never crashes and never loads a wrong state -------------
_BASE: dict[str, bytes] = {}


def _base_bytes() -> bytes:
    if "data" not in _BASE:
        pieces = ck.encode({"propagator": {"time": 4.0, "steps": 7, "x": np.arange(12.0).reshape(4, 3),
                                           "names": "a,b"}})
        _BASE["data"] = b"".join(pieces)
    return _BASE["data"]


damage = st.one_of(
    st.tuples(st.just("flip"), st.integers(0, 10_000), st.integers(1, 255)),
    st.tuples(st.just("set"), st.integers(0, 10_000), st.integers(0, 255)),
    st.tuples(st.just("cut"), st.integers(0, 10_000), st.just(0)),
    st.tuples(st.just("insert"), st.integers(0, 10_000), st.integers(0, 255)),
    st.tuples(st.just("delete"), st.integers(0, 10_000), st.just(0)),
)


@settings(max_examples=300, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.lists(damage, min_size=1, max_size=4))
def test_random_damage_never_crashes_and_never_loads_a_wrong_state(edits):
    original = _base_bytes()
    data = bytearray(original)
    for kind, where, value in edits:
        i = where % (len(data) + 1)
        if kind == "flip" and i < len(data):
            data[i] ^= value
        elif kind == "set" and i < len(data):
            data[i] = value
        elif kind == "cut":
            del data[i:]
        elif kind == "insert":
            data[i:i] = bytes([value])
        elif kind == "delete" and i < len(data):
            del data[i]
    try:
        _, content = ck.decode(bytes(data), "damaged.ckpt")
    except FileFormatError:
        assert bytes(data) != original
        return
    # Anything that loads must be exactly the original state.
    assert bytes(data) == original
    assert content["propagator"]["time"] == 4.0
    assert np.array_equal(content["propagator"]["x"], np.arange(12.0).reshape(4, 3))
