"""HDF5 output files: snapshots streamed in chunks, read back as numpy arrays.

Schema (format "libration-output", version 1); every name below is ours and documented in
README.md ("Long runs").  ``k`` is the number of snapshots, ``n`` the number of bodies at the
start of the run::

    /                       attributes: format, format_version, library_version, created,
                            units, G, length_unit, mass_unit, time_unit, method,
                            options (JSON), step, tolerance, softening, every, t_start,
                            complete (set when the run closed the file)
    /scenario               scalar UTF-8 string: the scenario text ("" when none)
    /bodies/names           (n,)      UTF-8 strings; bodies keep their column for the whole file
    /bodies/radius          (n,)      length unit
    /snapshots/time         (k,)      time unit
    /snapshots/steps        (k,)      int64, the propagator's step count
    /snapshots/mass         (k, n)    mass unit (nan once a body is gone: merged or removed)
    /snapshots/position     (k, n, 3) length unit, inertial frame
    /snapshots/velocity     (k, n, 3) length unit / time unit
    /diagnostics/energy                  (k,)   total energy
    /diagnostics/energy_error            (k,)   (E - E0) / |E0|, E0 at the start of the run
    /diagnostics/angular_momentum        (k, 3) total angular momentum
    /diagnostics/angular_momentum_error  (k,)   |L - L0| / |L0|
    /elements/<name>        (k, n)    optional: semi_major_axis, eccentricity, inclination,
                                      ascending_node, argument_of_periapsis, mean_anomaly
                                      (angles in radians) about the primary named in the
                                      ``primary`` attribute of /elements; nan for the primary
    /events/log             scalar UTF-8 JSON: the propagator's event log (written on close)
    /metadata_digest        (32,) uint8: SHA-256 of the root and group attributes, body names
                            and radii, the scenario text and the event log (canonical JSON; see
                            _metadata_digest)

The file is written in HDF5 single-writer/multiple-reader mode, so it stays readable while a
run writes it and after a run is killed.  The snapshot datasets carry a Fletcher-32 checksum
per chunk (HDF5's metadata has its own), so damaged data is refused when read.  ``len(/snapshots/time)`` is the number of complete
snapshots: within each chunk it is extended last.
"""
from __future__ import annotations

import datetime as _dt
import json
import os
import threading
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from .._version import __version__
from ..exceptions import FileFormatError

FORMAT_NAME = "libration-output"
FORMAT_VERSION = 1
ELEMENT_NAMES = ("semi_major_axis", "eccentricity", "inclination", "ascending_node",
                 "argument_of_periapsis", "mean_anomaly")
_BUFFER_BYTES = 4 << 20  # snapshots held before a write: bounded, independent of the span
_CHECKSUMS = True  # Fletcher-32 per chunk: a damaged byte in the data is refused when read


def _h5py():
    try:
        import h5py
    except ImportError as exc:  # pragma: no cover - h5py is a hard dependency
        raise ImportError("HDF5 output needs h5py: pip install h5py") from exc
    return h5py


def _canonical(value: Any) -> Any:
    """A JSON-able, exact, version-independent form of an attribute or small dataset value."""
    if isinstance(value, bytes):
        return value.decode("utf-8", "replace")
    if isinstance(value, np.ndarray):
        return [_canonical(v) for v in value.tolist()]
    if isinstance(value, np.generic):
        value = value.item()
    if isinstance(value, float):
        return value.hex()
    if isinstance(value, (list, tuple)):
        return [_canonical(v) for v in value]
    return value


def _metadata_digest(f) -> np.ndarray:
    """SHA-256 of everything outside the chunked datasets: attributes, names, radii, scenario.

    HDF5 checksums its object headers but not attribute heaps or contiguous data, so the
    reader checks this digest (kept in the checksummed /metadata_digest) instead.
    """
    import hashlib

    record = {"attrs": {k: _canonical(v) for k, v in f.attrs.items()},
              "groups": {g: {k: _canonical(v) for k, v in f[g].attrs.items()}
                         for g in ("snapshots", "elements", "diagnostics") if g in f},
              "names": _canonical(f["bodies/names"][()]), "radius": _canonical(f["bodies/radius"][()]),
              "scenario": _canonical(f["scenario"][()]),
              "events": _canonical(f["events/log"][()]) if "events/log" in f else None}
    text = json.dumps(record, sort_keys=True, separators=(",", ":"))
    return np.frombuffer(hashlib.sha256(text.encode("utf-8")).digest(), dtype=np.uint8)


def _seal(f) -> None:
    """Write (or rewrite) /metadata_digest for the file's current metadata."""
    digest = _metadata_digest(f)
    if "metadata_digest" in f:
        f["metadata_digest"][...] = digest
    else:
        f.create_dataset("metadata_digest", data=digest, chunks=(32,), fletcher32=True)


def _chunk_rows(n: int) -> int:
    """Snapshots per HDF5 chunk of the per-body datasets (chunks of at most 256 KiB)."""
    return int(max(1, min(1024, (256 << 10) // max(1, 24 * n))))


def _row_datasets(n: int, elements: bool) -> dict[str, tuple[tuple[int, ...], str]]:
    """Every growable dataset: path -> (shape of one row, dtype).  'snapshots/time' last."""
    rows: dict[str, tuple[tuple[int, ...], str]] = {
        "snapshots/steps": ((), "i8"),
        "snapshots/mass": ((n,), "f8"),
        "snapshots/position": ((n, 3), "f8"),
        "snapshots/velocity": ((n, 3), "f8"),
        "diagnostics/energy": ((), "f8"),
        "diagnostics/energy_error": ((), "f8"),
        "diagnostics/angular_momentum": ((3,), "f8"),
        "diagnostics/angular_momentum_error": ((), "f8"),
    }
    if elements:
        for name in ELEMENT_NAMES:
            rows[f"elements/{name}"] = ((n,), "f8")
    rows["snapshots/time"] = ((), "f8")
    return rows


class OutputWriter:
    """Append snapshots to an HDF5 output file, holding at most a few MB in memory.

    Parameters
    ----------
    path : str
        The file to create (replaced if it exists).
    names : list of str
        Body names, one column each for the whole file.
    radius : ndarray
        Body radii (length unit).
    attrs : dict
        Root attributes (units, G, method, options, ...).
    scenario_text : str
        Stored in /scenario.
    elements_primary : str or None
        Name of the primary for orbital elements; None writes no elements.
    """

    def __init__(self, path: str, names: list[str], radius: np.ndarray, attrs: dict[str, Any],
                 scenario_text: str = "", elements_primary: str | None = None, *,
                 _append: bool = False) -> None:
        h5py = _h5py()
        self.path = os.fspath(path)
        self.names = list(names)
        self.n = len(self.names)
        self.elements = elements_primary is not None
        self._rows = _row_datasets(self.n, self.elements)
        if _append:
            self.file = h5py.File(self.path, "r+", libver="latest")
            self.written = int(self.file["snapshots/time"].shape[0])
        else:
            self.file = h5py.File(self.path, "w", libver="latest")
            self._create(radius, attrs, scenario_text, elements_primary)
            self.written = 0
        self.file.swmr_mode = True
        self._datasets = {key: self.file[key] for key in self._rows}
        row_bytes = sum(8 * int(np.prod(shape, dtype=np.int64)) for shape, _ in self._rows.values())
        # A whole number of chunks per write: no chunk is written twice (no read-modify-write).
        rows = _chunk_rows(self.n)
        self.capacity = int(max(1, min(4096, _BUFFER_BYTES // max(row_bytes, 1)) // rows)) * rows
        self._buffer = {key: np.empty((self.capacity,) + shape, dtype) for key, (shape, dtype) in self._rows.items()}
        self._buffered = 0
        # A full buffer is written by a background thread while the run goes on (the kernels
        # release the GIL); at most one write is in flight, and flush() waits for it, so what
        # a checkpoint records as written is on disk.
        self._spare: dict[str, np.ndarray] | None = None
        self._writer: threading.Thread | None = None
        self._in_flight = 0
        self._in_flight_buffer: dict[str, np.ndarray] | None = None
        self._write_error: BaseException | None = None
        self._column = {name: i for i, name in enumerate(self.names)}
        self._same_names: list[str] | None = None

    def _create(self, radius, attrs, scenario_text, elements_primary) -> None:
        h5py = _h5py()
        f = self.file
        f.attrs["format"] = FORMAT_NAME
        f.attrs["format_version"] = FORMAT_VERSION
        f.attrs["library_version"] = __version__
        f.attrs["created"] = _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds")
        f.attrs["complete"] = False
        for key, value in attrs.items():
            f.attrs[key] = "" if value is None else value
        text = h5py.string_dtype("utf-8")
        f.create_dataset("scenario", data=scenario_text or "", dtype=text)
        f.create_dataset("bodies/names", data=np.array(self.names, dtype=object), dtype=text)
        f.create_dataset("bodies/radius", data=np.asarray(radius, dtype=np.float64))
        chunk_rows = _chunk_rows(self.n)
        for key, (shape, dtype) in self._rows.items():
            f.create_dataset(key, shape=(0,) + shape, maxshape=(None,) + shape, dtype=dtype,
                             chunks=(chunk_rows if shape else 1024,) + shape, fletcher32=_CHECKSUMS)
        if elements_primary is not None:
            f["elements"].attrs["primary"] = elements_primary
            f["elements"].attrs["angle_unit"] = "radian"
        f["snapshots"].attrs["time_unit"] = str(f.attrs.get("time_unit", ""))
        f.create_group("events")
        _seal(f)

    @property
    def count(self) -> int:
        """Snapshots accepted so far (written, being written and buffered)."""
        return self.written + self._in_flight + self._buffered

    def append(self, row: dict[str, Any], names: list[str] | None = None) -> None:
        """Add one snapshot.  ``row`` maps each growable dataset's path in the schema
        (``"snapshots/position"``, ``"diagnostics/energy"``, ...) to its value for the current bodies.

        When ``names`` differs from the file's columns (bodies merged or removed), per-body
        values are placed by name and missing bodies get nan.
        """
        i = self._buffered
        remap = None
        if names is not None and names is not self._same_names:
            if list(names) == self.names:
                self._same_names = names  # the propagator keeps this list until bodies change
            else:
                remap = [self._column.get(name, -1) for name in names]
        for key, buf in self._buffer.items():
            value = row[key]
            if remap is not None and key.split("/")[0] in ("snapshots", "elements") and buf.ndim > 1:
                buf[i] = np.nan
                value = np.asarray(value)
                for j, column in enumerate(remap):
                    if column >= 0:
                        buf[i, column] = value[j]
            else:
                buf[i] = value
        self._buffered += 1
        if self._buffered == self.capacity:
            self._write_in_background()

    def _write_rows(self, buffer: dict[str, np.ndarray], start: int, k: int) -> None:
        for key, dataset in self._datasets.items():  # 'snapshots/time' comes last
            dataset.resize(start + k, axis=0)
            dataset[start:start + k] = buffer[key][:k]
        self.file.flush()

    def _wait(self) -> None:
        """Wait for the write in flight (if any); re-raise its error here."""
        if self._writer is None:
            return
        self._writer.join()
        self._writer = None
        self.written += self._in_flight
        self._in_flight = 0
        self._spare, self._in_flight_buffer = self._in_flight_buffer, None
        if self._write_error is not None:
            error, self._write_error = self._write_error, None
            raise error

    def _write_in_background(self) -> None:
        self._wait()
        k, buffer = self._buffered, self._buffer
        if self._spare is None:
            self._spare = {key: np.empty_like(value) for key, value in buffer.items()}
        self._buffer, self._spare = self._spare, None
        self._buffered = 0
        self._in_flight, self._in_flight_buffer = k, buffer
        start = self.written

        def write() -> None:
            try:
                self._write_rows(buffer, start, k)
            except BaseException as exc:  # handed to the main thread by _wait()
                self._write_error = exc

        self._writer = threading.Thread(target=write, name="libration-output", daemon=True)
        self._writer.start()

    def flush(self) -> None:
        """Write the buffered snapshots and flush the file (data on disk when this returns)."""
        self._wait()
        k = self._buffered
        if k:
            self._write_rows(self._buffer, self.written, k)
            self.written += k
            self._buffered = 0
        else:
            self.file.flush()

    def close(self, event_log: list | None = None) -> None:
        """Flush, leave single-writer mode, record the event log and mark the file complete."""
        if self.file is None:
            return
        self.flush()
        self.file.close()
        self.file = None
        h5py = _h5py()
        with h5py.File(self.path, "r+", libver="latest") as f:
            events = f.require_group("events")
            if "log" in events:
                del events["log"]
            events.create_dataset("log", data=json.dumps(event_log or []), dtype=h5py.string_dtype("utf-8"))
            f.attrs["complete"] = True
            _seal(f)

    def abandon(self) -> None:
        """Flush and close without marking the file complete (interrupted runs)."""
        if self.file is None:
            return
        try:
            self.flush()
        finally:
            self.file.close()
            self.file = None

    @classmethod
    def reopen(cls, path: str, cursor: int) -> OutputWriter:
        """Continue an output file after a resume: keep exactly its first ``cursor`` snapshots.

        The file is rebuilt (copied up to the cursor into ``<path>.rebuild``, then renamed over
        ``path``), which also repairs a file left open by a killed writer.
        """
        h5py = _h5py()
        path = os.fspath(path)
        source = _open_for_reading(path)
        try:
            _check_format(source, path)
            have = int(source["snapshots/time"].shape[0])
            if have < cursor:
                raise FileFormatError(f"output file {path} holds {have} snapshots but the checkpoint "
                                      f"expects at least {cursor}; it was replaced or damaged since "
                                      "the checkpoint was written")
            names = [_text(v) for v in source["bodies/names"][()]]
            elements = "elements" in source and len(source["elements"].keys()) > 0
            rows = _row_datasets(len(names), elements)
            tmp = path + ".rebuild"
            with h5py.File(tmp, "w", libver="latest") as dest:
                for key, value in source.attrs.items():
                    dest.attrs[key] = value
                dest.attrs["complete"] = False
                dest.create_group("events")
                for key in ("scenario", "bodies/names", "bodies/radius"):
                    source.copy(source[key], dest, name=key)
                for group in ("snapshots", "elements", "diagnostics"):
                    if group in source:
                        g = dest.require_group(group)
                        for key, value in source[group].attrs.items():
                            g.attrs[key] = value
                for key, (shape, dtype) in rows.items():
                    if key not in source:
                        raise FileFormatError(f"output file {path} is damaged: dataset /{key} is missing")
                    src = source[key]
                    out = dest.create_dataset(key, shape=(cursor,) + shape, maxshape=(None,) + shape,
                                              dtype=dtype, chunks=src.chunks, fletcher32=_CHECKSUMS)
                    block = max(1, src.chunks[0] * 8)
                    for start in range(0, cursor, block):
                        stop = min(cursor, start + block)
                        out[start:stop] = src[start:stop]
                _seal(dest)
        except (OSError, KeyError, ValueError, TypeError, RuntimeError, UnicodeDecodeError) as exc:
            if isinstance(exc, FileFormatError):
                raise
            if os.path.exists(path + ".rebuild"):
                os.remove(path + ".rebuild")
            raise FileFormatError(f"output file {path} is damaged and cannot be continued ({exc}); "
                                  "restore it from a backup, or start the run again") from None
        finally:
            source.close()
        os.replace(tmp, path)
        return cls(path, names, np.zeros(len(names)), {}, elements_primary="" if elements else None,
                   _append=True)


# ---------------------------------------------------------------------------------------------
# reading
# ---------------------------------------------------------------------------------------------
def _text(value: Any) -> str:
    return value.decode("utf-8") if isinstance(value, bytes) else str(value)


def _open_for_reading(path: str):
    """Open an output file read-only, also when a writer holds it or was killed while writing."""
    h5py = _h5py()
    if not os.path.exists(path):
        raise FileFormatError(f"output file {path} does not exist")
    try:
        return h5py.File(path, "r", libver="latest")
    except (OSError, KeyError, ValueError, RuntimeError) as exc:
        first = str(exc)
    if "open for write" in first or "consistency flags" in first:
        try:  # single-writer/multiple-reader: readable while (or after) a writer had it open
            return h5py.File(path, "r", libver="latest", swmr=True)
        except (OSError, KeyError, ValueError, RuntimeError):
            pass
    with open(path, "rb") as fh:
        magic = fh.read(8)
    if magic == b"\x89LBRCKP\n":
        raise FileFormatError(f"{path} is a libration checkpoint, not an output file; use "
                              "`libration info` or lb.Propagator.load")
    if magic != b"\x89HDF\r\n\x1a\n":
        raise FileFormatError(f"{path} is not an HDF5 file, so not a libration output file")
    raise FileFormatError(f"output file {path} is damaged or truncated and HDF5 cannot read it ({first})")


def _check_format(f, path: str) -> None:
    fmt = _text(f.attrs.get("format", ""))
    if fmt != FORMAT_NAME:
        raise FileFormatError(f"{path} is an HDF5 file but not a libration output file (its 'format' "
                              f"attribute is {fmt!r}, expected {FORMAT_NAME!r})")
    version = int(f.attrs.get("format_version", -1))
    if version > FORMAT_VERSION:
        raise FileFormatError(f"{path} was written by a newer libration (output format {version}; "
                              f"this version {__version__} reads up to {FORMAT_VERSION}); upgrade to read it")
    if version < 1:
        raise FileFormatError(f"{path} has an invalid output format version {version}")
    for key in ("snapshots/time", "snapshots/position", "bodies/names", "bodies/radius", "scenario",
                "metadata_digest"):
        if key not in f:
            raise FileFormatError(f"{path} is damaged: dataset /{key} is missing")
    if not np.array_equal(f["metadata_digest"][()], _metadata_digest(f)):
        raise FileFormatError(f"{path} is damaged: its attributes, body names, radii or scenario text do "
                              "not match their recorded SHA-256 digest; it was not loaded")


@dataclass
class Output:
    """A libration output file read into numpy arrays (see the schema in :mod:`libration.io.output`).

    Attributes are the datasets by their last path component (``time``, ``steps``, ``mass``,
    ``position``, ``velocity``, ``energy``, ``energy_error``, ``angular_momentum``,
    ``angular_momentum_error``), ``names``, ``radius``, ``elements`` (dict of arrays or None),
    ``attrs`` (root attributes), ``scenario`` (text), ``event_log`` and ``complete`` (False for
    a run that is still going or was interrupted).
    """

    path: str
    attrs: dict[str, Any]
    names: list[str]
    radius: np.ndarray
    time: np.ndarray
    steps: np.ndarray
    mass: np.ndarray
    position: np.ndarray
    velocity: np.ndarray
    energy: np.ndarray
    energy_error: np.ndarray
    angular_momentum: np.ndarray
    angular_momentum_error: np.ndarray
    elements: dict[str, np.ndarray] | None
    elements_primary: str | None
    scenario: str
    event_log: list = field(default_factory=list)
    complete: bool = False

    def __len__(self) -> int:
        return int(self.time.shape[0])

    def __getitem__(self, key: str) -> Any:
        return getattr(self, key)

    @property
    def units(self) -> str:
        """Name of the unit system."""
        return str(self.attrs.get("units", ""))

    @property
    def G(self) -> float:
        """Gravitational constant in the file's units."""
        return float(self.attrs.get("G", float("nan")))


def open_output(path: str | os.PathLike, snapshots: slice | None = None) -> Output:
    """Read a libration output file into numpy arrays.

    Parameters
    ----------
    path : str or path-like
        An HDF5 file written by ``Propagator.run`` or ``libration run``.
    snapshots : slice, optional
        Which snapshots to read (default: all).

    Raises
    ------
    FileFormatError
        If the file is missing, not HDF5, not a libration output file, damaged or newer.
    """
    path = os.fspath(path)
    f = _open_for_reading(path)
    try:
        try:
            _check_format(f, path)
            count = int(f["snapshots/time"].shape[0])
            start, stop, stride = (0, count, 1) if snapshots is None else snapshots.indices(count)
            if stride < 1:
                raise ValueError(f"snapshots must be a slice with a positive step, got {snapshots!r}")

            def rows(key: str, shape: tuple[int, ...]) -> np.ndarray:
                if key not in f:
                    return np.full((0,) + shape, np.nan)
                data = f[key]
                if min(count, int(data.shape[0])) < count:
                    raise FileFormatError(f"output file {path} is damaged: /{key} holds "
                                          f"{data.shape[0]} rows, /snapshots/time {count}")
                if stop <= start:
                    return np.zeros((0,) + shape, dtype=data.dtype)
                return np.asarray(data[start:stop:stride], dtype=data.dtype)

            names = [_text(v) for v in f["bodies/names"][()]]
            n = len(names)
            elements = None
            primary = None
            if "elements" in f and len(f["elements"].keys()):
                elements = {name: rows(f"elements/{name}", (n,)) for name in ELEMENT_NAMES}
                primary = _text(f["elements"].attrs.get("primary", ""))
            event_log: list = []
            if "events/log" in f:
                event_log = json.loads(_text(f["events/log"][()]))
            attrs = {k: (_text(v) if isinstance(v, bytes) else (v.item() if isinstance(v, np.generic) else v))
                     for k, v in f.attrs.items()}
            return Output(
                path=path, attrs=attrs, names=names,
                radius=np.asarray(f["bodies/radius"][()]) if "bodies/radius" in f else np.zeros(n),
                time=rows("snapshots/time", ()), steps=rows("snapshots/steps", ()),
                mass=rows("snapshots/mass", (n,)), position=rows("snapshots/position", (n, 3)),
                velocity=rows("snapshots/velocity", (n, 3)), energy=rows("diagnostics/energy", ()),
                energy_error=rows("diagnostics/energy_error", ()),
                angular_momentum=rows("diagnostics/angular_momentum", (3,)),
                angular_momentum_error=rows("diagnostics/angular_momentum_error", ()),
                elements=elements, elements_primary=primary,
                scenario=_text(f["scenario"][()]) if "scenario" in f else "",
                event_log=event_log, complete=bool(f.attrs.get("complete", False)))
        except (OSError, KeyError, ValueError, TypeError, RuntimeError, UnicodeDecodeError) as exc:
            if isinstance(exc, FileFormatError):
                raise
            raise FileFormatError(f"output file {path} is damaged: {exc}") from None
    finally:
        f.close()
