"""Checkpoint files: everything needed to continue a run bit for bit, in a format of our own.

Layout (all integers little-endian)::

    offset  size  field
    0       8     magic  b"\\x89LBRCKP\\n"  (the high byte and newline catch text-mode damage)
    8       4     format version (uint32), currently 1
    12      4     flags (uint32), 0
    16      8     header length H (uint64)
    24      8     payload length P (uint64)
    32      H     header: UTF-8 JSON (see below)
    32+H    P     payload: the raw bytes of every array, little-endian, each 8-byte aligned
    32+H+P  32    SHA-256 of bytes [0, 32+H+P)

The JSON header holds ``format`` ("libration-checkpoint"), ``library_version``, ``created``
(UTC, ISO 8601) and ``content``: a tree of tagged nodes, one per value::

    {"t": "a", "dtype": "<f8", "shape": [n, 3], "offset": o, "nbytes": b}   array (payload slice)
    {"t": "f", "v": "0x1.8p+1"}     float, as float.hex() so it round-trips exactly (inf and nan too)
    {"t": "i", "v": 12}             int            {"t": "b", "v": true}   bool
    {"t": "s", "v": "text"}         str            {"t": "n"}              None
    {"t": "l", "v": [node, ...]}    list / tuple   {"t": "d", "v": {key: node}}  dict (str keys)

Nothing is ever unpickled: arrays are restricted to numeric, boolean and fixed-width string
dtypes, and every node is checked while it is decoded.  The whole file is verified against its
checksum *before* anything is decoded, so a damaged file is refused, never half-loaded.

Writes are atomic: the new checkpoint goes to ``<name>.tmp``, is flushed and fsync'ed, the
current file is kept as ``<name>.prev`` (a hard link where the file system allows, otherwise a
copy), then ``<name>.tmp`` is renamed over ``<name>`` and the directory is fsync'ed.  At every
instant ``<name>`` is either the old or the new complete checkpoint.
"""
from __future__ import annotations

import datetime as _dt
import hashlib
import json
import os
import shutil
import struct
from typing import Any

import numpy as np

from .._version import __version__
from ..exceptions import FileFormatError

MAGIC = b"\x89LBRCKP\n"
FORMAT_VERSION = 1
FORMAT_NAME = "libration-checkpoint"
_FIXED = struct.Struct("<8sIIQQ")  # magic, version, flags, header length, payload length
_DIGEST = 32
_ALLOWED_KINDS = set("biufcSU")  # numpy dtype kinds we accept (no objects, no void records)


# ---------------------------------------------------------------------------------------------
# encoding
# ---------------------------------------------------------------------------------------------
class _Encoder:
    def __init__(self) -> None:
        self.chunks: list[bytes | memoryview] = []
        self.size = 0

    def node(self, value: Any, where: str) -> dict:
        if isinstance(value, (bool, np.bool_)):
            return {"t": "b", "v": bool(value)}
        if isinstance(value, (int, np.integer)):
            return {"t": "i", "v": int(value)}
        if isinstance(value, (float, np.floating)):
            return {"t": "f", "v": float(value).hex()}
        if isinstance(value, str):
            return {"t": "s", "v": value}
        if value is None:
            return {"t": "n"}
        if isinstance(value, np.ndarray):
            return self.array(value, where)
        if isinstance(value, (list, tuple)):
            return {"t": "l", "v": [self.node(v, f"{where}[{i}]") for i, v in enumerate(value)]}
        if isinstance(value, dict):
            out = {}
            for key, v in value.items():
                if not isinstance(key, str):
                    raise TypeError(f"checkpoint content {where}: dict keys must be str, got {key!r}")
                out[key] = self.node(v, f"{where}.{key}")
            return {"t": "d", "v": out}
        raise TypeError(f"checkpoint content {where}: cannot store a value of type {type(value).__name__}")

    def array(self, value: np.ndarray, where: str) -> dict:
        if value.dtype.kind not in _ALLOWED_KINDS:
            raise TypeError(f"checkpoint content {where}: arrays of dtype {value.dtype} cannot be stored")
        data = np.ascontiguousarray(value, dtype=value.dtype.newbyteorder("<"))
        raw = data.tobytes()
        pad = (-self.size) % 8
        if pad:
            self.chunks.append(b"\0" * pad)
            self.size += pad
        node = {"t": "a", "dtype": data.dtype.str, "shape": list(data.shape),
                "offset": self.size, "nbytes": len(raw)}
        self.chunks.append(raw)
        self.size += len(raw)
        return node


def encode(content: dict, kind: str = "propagator") -> list[bytes]:
    """Serialise ``content`` (a dict tree of arrays and scalars) into the checkpoint layout.

    Returns the file as a list of byte chunks (header first, checksum last).
    """
    enc = _Encoder()
    tree = enc.node(content, "content")
    header = {
        "format": FORMAT_NAME,
        "kind": kind,
        "library_version": __version__,
        "created": _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds"),
        "content": tree,
    }
    head = json.dumps(header, separators=(",", ":"), allow_nan=False).encode("utf-8")
    fixed = _FIXED.pack(MAGIC, FORMAT_VERSION, 0, len(head), enc.size)
    digest = hashlib.sha256()
    pieces: list[bytes] = [fixed, head]
    pieces.extend(bytes(c) for c in enc.chunks)
    for piece in pieces:
        digest.update(piece)
    pieces.append(digest.digest())
    return pieces


# ---------------------------------------------------------------------------------------------
# decoding
# ---------------------------------------------------------------------------------------------
class _Damaged(Exception):
    """Internal: the file passed its checksum but its header does not decode (a writer bug)."""


def _decode(node: Any, payload: memoryview) -> Any:
    if not isinstance(node, dict) or "t" not in node:
        raise _Damaged("node is not a tagged object")
    tag = node["t"]
    if tag == "a":
        dtype = np.dtype(str(node["dtype"]))
        if dtype.kind not in _ALLOWED_KINDS or dtype.hasobject:
            raise _Damaged(f"array dtype {dtype} is not allowed")
        shape = tuple(int(s) for s in node["shape"])
        offset, nbytes = int(node["offset"]), int(node["nbytes"])
        if any(s < 0 for s in shape) or offset < 0 or nbytes < 0 or offset + nbytes > len(payload):
            raise _Damaged("array extends past the payload")
        if int(np.prod(shape, dtype=np.int64)) * dtype.itemsize != nbytes:
            raise _Damaged("array size does not match its shape")
        arr = np.frombuffer(payload[offset:offset + nbytes], dtype=dtype).reshape(shape)
        return arr.astype(dtype.newbyteorder("="), copy=True)
    if tag == "f":
        return float.fromhex(str(node["v"]))
    if tag == "i":
        value = node["v"]
        if not isinstance(value, int) or isinstance(value, bool):
            raise _Damaged("int node holds a non-integer")
        return value
    if tag == "b":
        if not isinstance(node["v"], bool):
            raise _Damaged("bool node holds a non-bool")
        return node["v"]
    if tag == "s":
        if not isinstance(node["v"], str):
            raise _Damaged("str node holds a non-string")
        return node["v"]
    if tag == "n":
        return None
    if tag == "l":
        return [_decode(v, payload) for v in node["v"]]
    if tag == "d":
        return {str(k): _decode(v, payload) for k, v in node["v"].items()}
    raise _Damaged(f"unknown node tag {tag!r}")


def decode(data: bytes, source: str = "<bytes>") -> tuple[dict, dict]:
    """Verify and decode a checkpoint held in memory.

    Returns ``(meta, content)`` where ``meta`` has ``format_version``, ``kind``,
    ``library_version`` and ``created``.  Raises :class:`FileFormatError` for anything that is
    not a complete, intact checkpoint this version can read.
    """
    if len(data) < len(MAGIC) or data[:len(MAGIC)] != MAGIC:
        if data[:8] == b"\x89HDF\r\n\x1a\n":
            raise FileFormatError(f"{source} is an HDF5 file (an output file?), not a libration "
                                  "checkpoint; use `libration info` to see what it holds")
        raise FileFormatError(f"{source} is not a libration checkpoint (its first bytes are not the "
                              "checkpoint signature); pass the .ckpt file that `run` wrote")
    if len(data) < _FIXED.size + _DIGEST:
        raise FileFormatError(f"{source} is truncated ({len(data)} bytes, shorter than the fixed "
                              "header); the write was cut off or the file was damaged")
    _, version, _flags, head_len, payload_len = _FIXED.unpack_from(data, 0)
    expected = _FIXED.size + head_len + payload_len + _DIGEST
    newer = version > FORMAT_VERSION
    if expected != len(data):
        if newer:
            raise FileFormatError(f"{source} was written by a newer libration (checkpoint format "
                                  f"{version}; this version {__version__} reads up to {FORMAT_VERSION}) "
                                  "or is damaged; upgrade libration to read it")
        what = "truncated" if expected > len(data) else "longer than its header says"
        raise FileFormatError(f"{source} is damaged: {what} ({len(data)} bytes, the header announces "
                              f"{expected}); the write was cut off or the file was altered")
    body = memoryview(data)[:len(data) - _DIGEST]
    if hashlib.sha256(body).digest() != data[len(data) - _DIGEST:]:
        if newer:
            raise FileFormatError(f"{source} was written by a newer libration (checkpoint format "
                                  f"{version}; this version reads up to {FORMAT_VERSION}) or is "
                                  "damaged; upgrade libration to read it")
        raise FileFormatError(f"{source} is damaged: its SHA-256 checksum does not match the "
                              "contents (a flipped or overwritten byte); it was not loaded")
    if newer:
        raise FileFormatError(f"{source} was written by a newer libration (checkpoint format "
                              f"{version}; this version {__version__} reads up to {FORMAT_VERSION}); "
                              "upgrade libration to read it")
    start = _FIXED.size
    try:
        header = json.loads(bytes(body[start:start + head_len]).decode("utf-8"))
        if not isinstance(header, dict) or header.get("format") != FORMAT_NAME:
            raise _Damaged("header does not name the checkpoint format")
        payload = body[start + head_len:]
        content = _decode(header["content"], payload)
        if not isinstance(content, dict):
            raise _Damaged("content is not a dict")
        meta = {"format_version": version, "kind": str(header.get("kind", "")),
                "library_version": str(header.get("library_version", "?")),
                "created": str(header.get("created", "?"))}
    except (_Damaged, ValueError, KeyError, TypeError, UnicodeDecodeError, OverflowError) as exc:
        raise FileFormatError(f"{source} has a valid checksum but its contents do not decode "
                              f"({exc}); it was not loaded") from None
    return meta, content


# ---------------------------------------------------------------------------------------------
# files
# ---------------------------------------------------------------------------------------------
def _fsync_dir(directory: str) -> None:
    try:
        fd = os.open(directory, os.O_RDONLY)
    except OSError:  # pragma: no cover - platforms without directory handles
        return
    try:
        os.fsync(fd)
    except OSError:  # pragma: no cover
        pass
    finally:
        os.close(fd)


def write(path: str | os.PathLike, content: dict, kind: str = "propagator") -> None:
    """Write ``content`` to the checkpoint ``path`` atomically, keeping the old one as ``.prev``.

    Parameters
    ----------
    path : str or path-like
        Destination file.  ``<path>.tmp`` is used while writing and ``<path>.prev`` receives
        the checkpoint that ``path`` held before (if any).
    content : dict
        A tree of dicts (str keys), lists, arrays, ints, floats, strs, bools and None.
    kind : str
        Recorded in the header: "propagator" (``save``) or "run" (written by ``run``).
    """
    path = os.fspath(path)
    pieces = encode(content, kind)
    tmp, prev = path + ".tmp", path + ".prev"
    with open(tmp, "wb") as fh:
        for piece in pieces:
            fh.write(piece)
        fh.flush()
        os.fsync(fh.fileno())
    if os.path.exists(path):
        prev_tmp = prev + ".tmp"
        if os.path.lexists(prev_tmp):
            os.remove(prev_tmp)
        try:
            os.link(path, prev_tmp)
        except OSError:
            shutil.copy2(path, prev_tmp)
        os.replace(prev_tmp, prev)
    os.replace(tmp, path)
    _fsync_dir(os.path.dirname(os.path.abspath(path)))


def _read_one(path: str) -> tuple[dict, dict]:
    try:
        with open(path, "rb") as fh:
            data = fh.read()
    except FileNotFoundError:
        raise FileFormatError(f"checkpoint {path} does not exist") from None
    except IsADirectoryError:
        raise FileFormatError(f"checkpoint {path} is a directory, not a file") from None
    except OSError as exc:
        raise FileFormatError(f"cannot read checkpoint {path}: {exc.strerror or exc}") from None
    return decode(data, path)


def read(path: str | os.PathLike) -> tuple[dict, dict]:
    """Read and verify the checkpoint at ``path``: returns ``(meta, content)``.

    Raises
    ------
    FileFormatError
        If the file is missing, truncated, damaged, foreign or newer.  When ``<path>.prev``
        holds an intact older checkpoint, the message says so and how to resume from it.
    """
    path = os.fspath(path)
    try:
        return _read_one(path)
    except FileFormatError as exc:
        hint = _previous_hint(path)
        if hint:
            raise FileFormatError(f"{exc}. {hint}") from None
        raise


def _previous_hint(path: str) -> str:
    for candidate in (path + ".prev", path + ".tmp"):
        if candidate == path or not os.path.exists(candidate):
            continue
        try:
            _, content = _read_one(candidate)
        except FileFormatError:
            continue
        where = ""
        memory = content.get("propagator") if isinstance(content, dict) else None
        if isinstance(memory, dict) and "time" in memory:
            where = f" (time {memory['time']!r}, step {memory.get('steps', '?')})"
        return (f"An intact checkpoint {candidate}{where} is available: `libration resume {candidate}` "
                "or lb.Propagator.load on it")
    return ""


def save(propagator, path: str | os.PathLike) -> None:
    """Save a propagator's complete state to ``path`` (atomic; see :func:`write`)."""
    write(path, {"propagator": propagator.to_memory()}, kind="propagator")


def load(path: str | os.PathLike):
    """Load a propagator saved by :func:`save` or by a run's checkpoint.

    Returns a :class:`libration.Propagator` that continues bit for bit where the saved one was.
    """
    from ..propagator import Propagator

    _, content = read(path)
    memory = content.get("propagator")
    if not isinstance(memory, dict):
        raise FileFormatError(f"{os.fspath(path)} is a libration checkpoint without a propagator state")
    return Propagator.from_memory(memory)
