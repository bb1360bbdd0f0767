"""Ensembles: many independent runs of one system with varied parameters, on any executor.

An :class:`Ensemble` is a base system (a :class:`~libration.System`, or a function that
builds one from a parameter dict) plus one parameter set per member: a grid over named
parameters, an explicit list, or seeded random perturbations.  Every member runs with the
same method and span.  :meth:`Ensemble.run` submits the members to any
:class:`concurrent.futures.Executor`: by default a local process pool sized to the cores;
for a cluster, the executor of a ``dask.distributed.Client`` (``client.get_executor()``, or
the client itself).

Files (the ensemble directory)::

    ensemble.json           manifest: definition, fingerprint, one entry per member
    summary.csv, summary.h5 one row per member (rewritten at the end of each run)
    members/00012/state.ckpt    the member's checkpoint (libration checkpoint format)
    members/00012/summary.json  written when the member has finished (or stopped)
    members/00012/failure.json  written when the member has failed, with the message
    members/00012/series.csv    sampled time series of the tracked bodies
    members/00012/output.h5     HDF5 snapshots (with ``output_every``)

The member files are the truth; the manifest is rewritten from them by the process that
called :meth:`Ensemble.run` (one writer, atomic replace).  Running an ensemble again in the
same directory skips members with a ``summary.json``, resumes those with only a checkpoint
and starts the others; a directory holding a different ensemble is refused.

Determinism: a member's trajectory depends only on its initial state and settings, which
depend only on the definition (random perturbations use a generator seeded with
``(seed, member index)``).  No worker-dependent state enters a member, so 1 process, 2
processes and a Dask cluster give bit-identical member results.
"""
from __future__ import annotations

import concurrent.futures as cf
import csv
import hashlib
import importlib
import itertools
import json
import math
import os
import socket
import time as _time
import warnings
from collections.abc import Callable, Iterable, Mapping, Sequence
from typing import Any

import numpy as np

from ._version import __version__
from .exceptions import FileFormatError, ScenarioError, ValidationError
from .system import System
from .units import get_units

MANIFEST = "ensemble.json"
FORMAT_NAME = "libration-ensemble"
FORMAT_VERSION = 1

ELEMENT_FIELDS = ("semi_major_axis", "eccentricity", "inclination", "ascending_node",
                  "argument_of_periapsis", "mean_anomaly")
CARTESIAN_FIELDS = ("x", "y", "z", "vx", "vy", "vz")
BODY_FIELDS = ("mass", "radius")
PARAMETER_FIELDS = BODY_FIELDS + ELEMENT_FIELDS + CARTESIAN_FIELDS
STOP_CONDITIONS = ("encounter", "escape")
FINISHED = ("finished", "stopped")  # statuses of members that need no more work

# Result fields of every member (parameters and tracked bodies add their own columns).
_RESULT_FIELDS = [("status", "U12"), ("time", "f8"), ("steps", "i8"), ("energy_error", "f8"),
                  ("min_separation_hill", "f8"), ("first_encounter_time", "f8"),
                  ("first_collision_time", "f8"), ("first_escape_time", "f8")]
_TRACKED_FIELDS = ("max_eccentricity", "semi_major_axis", "eccentricity", "inclination")
# Result column of a tracked body's field (parameters take the plain "<body>.<field>" names).
_TRACKED_COLUMNS = {"max_eccentricity": "max_eccentricity", "semi_major_axis": "final_semi_major_axis",
                    "eccentricity": "final_eccentricity", "inclination": "final_inclination"}
_MESSAGE_WIDTH = 200
_SERIES_ROWS = 10000


# ============================================================================== small helpers
def _json_safe(value: Any) -> Any:
    """Plain JSON values (NaN and infinities as strings "nan"/"inf"/"-inf", exact floats)."""
    if isinstance(value, dict):
        return {str(k): _json_safe(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_json_safe(v) for v in value]
    if isinstance(value, np.ndarray):
        return _json_safe(value.tolist())
    if isinstance(value, (bool, np.bool_)):
        return bool(value)
    if isinstance(value, (int, np.integer)):
        return int(value)
    if isinstance(value, (float, np.floating)):
        value = float(value)
        if math.isnan(value):
            return "nan"
        if math.isinf(value):
            return "inf" if value > 0 else "-inf"
        return value  # json writes repr(value), which reads back to the same double
    return value


def _float(value: Any) -> float:
    """Inverse of :func:`_json_safe` for one number (None -> nan)."""
    if value is None:
        return math.nan
    return float(value)  # float("nan"), float("inf") parse the string forms


def _write_json_atomic(path: str, payload: Any) -> None:
    """Write JSON to ``path``: temporary file, flush, fsync, rename (never half-written)."""
    tmp = f"{path}.tmp{os.getpid()}"
    with open(tmp, "w", encoding="utf-8") as fh:
        json.dump(_json_safe(payload), fh, indent=1, allow_nan=False)
        fh.write("\n")
        fh.flush()
        os.fsync(fh.fileno())
    os.replace(tmp, path)


def _read_json(path: str) -> Any:
    try:
        with open(path, encoding="utf-8") as fh:
            return json.load(fh)
    except json.JSONDecodeError as exc:
        raise FileFormatError(f"{path} is not valid JSON ({exc}); it may be damaged") from None


def _fingerprint(definition: dict) -> str:
    text = json.dumps(_json_safe(definition), sort_keys=True, separators=(",", ":"), allow_nan=False)
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def _system_to_json(system: System) -> dict:
    return {"units": system.units.name, "names": list(system.names), "mass": system.mass.tolist(),
            "position": system.position.tolist(), "velocity": system.velocity.tolist(),
            "radius": system.radius.tolist()}


def _system_from_json(data: Mapping[str, Any]) -> System:
    return System(np.array(data["mass"], dtype=np.float64), np.array(data["position"], dtype=np.float64),
                  np.array(data["velocity"], dtype=np.float64), get_units(str(data["units"])),
                  list(data["names"]), np.array(data["radius"], dtype=np.float64))


def _callable_path(function: Callable) -> str:
    module = getattr(function, "__module__", None)
    qualname = getattr(function, "__qualname__", None)
    if not module or not qualname or "<" in qualname:
        raise ValidationError(f"base must be a System or a module-level function (importable by the "
                              f"workers), got {function!r}")
    return f"{module}:{qualname}"


def _import_callable(path: str) -> Callable:
    module, _, qualname = path.partition(":")
    target: Any = importlib.import_module(module)
    for part in qualname.split("."):
        target = getattr(target, part)
    return target


# ============================================================================ member parameters
def _split_parameter(name: str) -> tuple[str, str]:
    body, dot, field = name.rpartition(".")
    if not dot or not body or field not in PARAMETER_FIELDS:
        raise ValidationError(
            f"parameter {name!r} must be '<body>.<field>' with field one of {', '.join(PARAMETER_FIELDS)} "
            "(body: a name or an index)")
    return body, field


def _some_names(names: Sequence[str], limit: int = 12) -> str:
    shown = ", ".join(names[:limit])
    return shown if len(names) <= limit else f"{shown}, ... ({len(names)} bodies)"


def _body_index(system: System, body: str, parameter: str) -> int:
    if body in system.names:
        return system.names.index(body)
    try:
        index = int(body)
    except ValueError:
        index = -1
    if not 0 <= index < system.n:
        raise ValidationError(f"parameter {parameter!r}: no body named or numbered {body!r}; the bodies "
                              f"are {_some_names(system.names)}")
    return index


def base_value(system: System, name: str, frame: str = "jacobi", primary: int = 0) -> float:
    """The value of parameter ``name`` (``"<body>.<field>"``) in ``system``.

    Element fields are the body's osculating elements in ``frame`` about ``primary``
    (length unit, radians); ``x``...``vz`` its Cartesian coordinates; ``mass`` and
    ``radius`` in the mass and length units.
    """
    body, field = _split_parameter(name)
    index = _body_index(system, body, name)
    if field == "mass":
        return float(system.mass[index])
    if field == "radius":
        return float(system.radius[index])
    if field in CARTESIAN_FIELDS:
        k = CARTESIAN_FIELDS.index(field)
        return float((system.position if k < 3 else system.velocity)[index, k % 3])
    if index == primary:
        raise ValidationError(f"parameter {name!r}: the primary (body {primary}) has no orbital elements")
    elements = system.elements(frame=frame, primary=primary)
    return float(getattr(elements, field)[index - (1 if index > primary else 0)])


def apply_parameters(system: System, parameters: Mapping[str, float], frame: str = "jacobi",
                     primary: int = 0) -> System:
    """Return a copy of ``system`` with the named parameters set.

    Parameters
    ----------
    system : System
        The base system (not modified).
    parameters : mapping of str to float
        ``"<body>.<field>"`` (body by name or index) to value.  Fields: ``mass`` (mass unit),
        ``radius`` (length unit), the orbital elements ``semi_major_axis`` (length unit),
        ``eccentricity``, ``inclination``, ``ascending_node``, ``argument_of_periapsis``,
        ``mean_anomaly`` (radians), and the Cartesian ``x``, ``y``, ``z`` (length unit),
        ``vx``, ``vy``, ``vz`` (length unit / time unit).
    frame : {"jacobi", "heliocentric"}
        Frame of the elements.  When an element is set, the whole system is rebuilt from its
        elements in this frame about body ``primary`` (which must be body 0) and returned in
        the barycentric frame; other bodies keep their elements.
    primary : int
        The central body (0).

    Returns
    -------
    System
    """
    mass = system.mass.copy()
    radius = system.radius.copy()
    position = system.position.copy()
    velocity = system.velocity.copy()
    element_changes: dict[tuple[int, str], float] = {}
    cartesian_changes: list[tuple[int, str, float]] = []
    for name, value in parameters.items():
        body, field = _split_parameter(name)
        index = _body_index(system, body, name)
        value = float(value)
        if not math.isfinite(value):
            raise ValidationError(f"parameter {name!r} must be finite, got {value!r}")
        if field == "mass":
            mass[index] = value
        elif field == "radius":
            radius[index] = value
        elif field in CARTESIAN_FIELDS:
            cartesian_changes.append((index, field, value))
        else:
            if index == primary:
                raise ValidationError(f"parameter {name!r}: the primary (body {primary}) has no orbital "
                                      "elements")
            element_changes[(index, field)] = value
    if element_changes:
        if primary != 0:
            raise ValidationError(f"element parameters need the primary to be body 0, got primary={primary}")
        elements = {f: np.array(v, dtype=np.float64)
                    for f, v in system.elements(frame=frame, primary=0)._asdict().items()}
        for (index, field), value in element_changes.items():
            elements[field][index - 1] = value
        rebuilt = System.from_elements(mass[0], mass[1:], *(elements[f] for f in ELEMENT_FIELDS),
                                       units=system.units, frame=frame, names=system.names, radius=radius)
        position, velocity = rebuilt.position.copy(), rebuilt.velocity.copy()
    for index, field, value in cartesian_changes:
        k = CARTESIAN_FIELDS.index(field)
        (position if k < 3 else velocity)[index, k % 3] = value
    return System(mass, position, velocity, system.units, system.names, radius)


# ================================================================================ member runner
class _Tracker:
    """Diagnostics sampled along one member's run; its memory travels in the checkpoint."""

    def __init__(self, task: Mapping[str, Any], system: System) -> None:
        self.primary = int(task["primary"])
        self.tracked = [system.names.index(name) for name in task["track"]]
        self.names = list(task["track"])
        self.encounter_hill = float(task["encounter_hill"])
        self.next_sample = 1
        self.energy0 = math.nan
        self.max_energy_error = 0.0
        self.min_hill = math.inf
        self.first_encounter_time = math.nan
        self.first_encounter_bodies = ""
        self.first_escape_time = math.nan
        self.first_escape_body = ""
        self.escape_distance = float(task["escape_distance"]) if task["escape_distance"] is not None else math.nan
        self.max_eccentricity = np.zeros(len(self.tracked))
        self.series: list[list[float]] = []
        self.last_row: list[float] = []
        # series.csv keeps at most about _SERIES_ROWS rows (plus the last sample).
        settings = task["settings"]
        every = abs(settings["sample_every"])
        if settings["step"] is not None:  # fixed steps: samples fall on the step grid
            every = max(1, round(every / abs(settings["step"]))) * abs(settings["step"])
        samples = abs(settings["until"] - settings["start"]) / every
        self.series_stride = max(1, math.ceil(samples / _SERIES_ROWS))
        self.stop_reason = ""
        self.angular_momentum0 = np.full(3, np.nan)
        self.output_cursor = 0
        self.output_sample = -1  # index of the last sample written to the output file

    # ---- persistence (the checkpoint format takes dicts of scalars, strings and arrays)
    def memory(self) -> dict[str, Any]:
        columns = 1 + 3 * len(self.tracked)
        return {"next_sample": self.next_sample, "energy0": self.energy0,
                "max_energy_error": self.max_energy_error, "min_hill": self.min_hill,
                "first_encounter_time": self.first_encounter_time,
                "first_encounter_bodies": self.first_encounter_bodies,
                "first_escape_time": self.first_escape_time, "first_escape_body": self.first_escape_body,
                "escape_distance": self.escape_distance, "stop_reason": self.stop_reason,
                "angular_momentum0": self.angular_momentum0.copy(), "output_cursor": self.output_cursor,
                "output_sample": self.output_sample,
                "max_eccentricity": self.max_eccentricity.copy(),
                "series": np.array(self.series, dtype=np.float64).reshape(-1, columns),
                "last_row": np.array(self.last_row, dtype=np.float64)}

    def restore(self, memory: Mapping[str, Any]) -> None:
        for key in ("next_sample", "energy0", "max_energy_error", "min_hill", "first_encounter_time",
                    "first_encounter_bodies", "first_escape_time", "first_escape_body", "escape_distance",
                    "stop_reason"):
            setattr(self, key, memory[key])
        self.next_sample = int(self.next_sample)
        self.angular_momentum0 = np.array(memory["angular_momentum0"], dtype=np.float64)
        self.output_cursor = int(memory["output_cursor"])
        self.output_sample = int(memory["output_sample"])
        self.max_eccentricity = np.array(memory["max_eccentricity"], dtype=np.float64)
        self.series = np.asarray(memory["series"], dtype=np.float64).tolist()
        self.last_row = np.asarray(memory["last_row"], dtype=np.float64).tolist()

    # ---- sampling
    def sample(self, propagator) -> str:
        """Record the state at ``propagator.time``; return a stop condition met ("" if none)."""
        system = propagator.system
        t = propagator.time
        if not (np.isfinite(system.position).all() and np.isfinite(system.velocity).all()):
            raise FloatingPointError(f"the state became non-finite at time {t!r}")
        energy = system.energy(propagator.softening)
        if math.isnan(self.energy0):
            self.energy0 = energy
            self.angular_momentum0 = system.angular_momentum()
        scale = abs(self.energy0) if self.energy0 != 0 else 1.0
        self.max_energy_error = max(self.max_energy_error, abs(energy - self.energy0) / scale)
        met = ""
        row = [t]
        if self.tracked:
            names = list(system.names)
            # Bodies may have been merged or removed by events: follow them by name.
            present = [(k, names.index(name)) for k, name in enumerate(self.names) if name in names]
            p = self.primary
            mu = system.G * (system.mass[p] + system.mass)
            rel_r = system.position - system.position[p]
            rel_v = system.velocity - system.velocity[p]
            distance = np.sqrt(np.einsum("ij,ij->i", rel_r, rel_r))
            a_row = np.full(len(self.names), np.nan)
            e_row = np.full(len(self.names), np.nan)
            i_row = np.full(len(self.names), np.nan)
            ks = np.array([k for k, _ in present], dtype=np.intp)
            js = np.array([j for _, j in present], dtype=np.intp)
            if present:
                a_row[ks], e_row[ks], i_row[ks] = _two_body(mu[js], rel_r[js], rel_v[js])
                self.max_eccentricity[ks] = np.fmax(self.max_eccentricity[ks], e_row[ks])
            if math.isnan(self.escape_distance):
                self.escape_distance = 10.0 * float(distance[js].max()) if present else math.inf
            if math.isnan(self.first_escape_time) and present:
                gone = np.flatnonzero((distance[js] > self.escape_distance) & ~(e_row[ks] < 1.0))
                if gone.size:
                    self.first_escape_time, self.first_escape_body = t, self.names[int(ks[gone[0]])]
                    met = "escape"
            massive = [(k, j) for k, j in present if system.mass[j] > 0]
            if len(massive) >= 2:
                pairs = np.array(list(itertools.combinations(range(len(massive)), 2)), dtype=np.intp)
                mk = np.array([k for k, _ in massive], dtype=np.intp)
                mj = np.array([j for _, j in massive], dtype=np.intp)
                j1, j2 = mj[pairs[:, 0]], mj[pairs[:, 1]]
                gap = system.position[j1] - system.position[j2]
                separation = np.sqrt(np.einsum("ij,ij->i", gap, gap))
                hill = np.cbrt((system.mass[j1] + system.mass[j2]) / (3.0 * system.mass[p])) \
                    * 0.5 * (distance[j1] + distance[j2])
                ratio = separation / hill
                self.min_hill = min(self.min_hill, float(ratio.min()))
                close = np.flatnonzero(ratio < self.encounter_hill)
                if close.size and math.isnan(self.first_encounter_time):
                    first = pairs[close[0]]
                    self.first_encounter_time = t
                    self.first_encounter_bodies = f"{self.names[mk[first[0]]]}+{self.names[mk[first[1]]]}"
                    met = met or "encounter"
            row.extend(a_row.tolist() + e_row.tolist() + i_row.tolist())
        self.last_row = row
        if (self.next_sample - 1) % self.series_stride == 0:
            self.series.append(row)
        return met


def _two_body(mu: np.ndarray, r: np.ndarray, v: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Osculating semi-major axes, eccentricities and inclinations (rad) about a primary.

    ``mu`` shape (k,), ``r`` and ``v`` shape (k, 3) relative to the primary; nan where the
    distance or ``mu`` is zero.
    """
    with np.errstate(divide="ignore", invalid="ignore"):
        radius = np.sqrt(np.einsum("ij,ij->i", r, r))
        h = np.stack([r[:, 1] * v[:, 2] - r[:, 2] * v[:, 1], r[:, 2] * v[:, 0] - r[:, 0] * v[:, 2],
                      r[:, 0] * v[:, 1] - r[:, 1] * v[:, 0]], axis=1)
        v2 = np.einsum("ij,ij->i", v, v)
        rv = np.einsum("ij,ij->i", r, v)
        # e = ((v^2 - mu/r) r - (r.v) v) / mu
        e_vec = ((v2 - mu / radius)[:, None] * r - rv[:, None] * v) / mu[:, None]
        energy = 0.5 * v2 - mu / radius
        a = -mu / (2.0 * energy)
        h_norm = np.sqrt(np.einsum("ij,ij->i", h, h))
        inclination = np.where(h_norm > 0, np.arccos(np.clip(h[:, 2] / h_norm, -1.0, 1.0)), 0.0)
        e = np.sqrt(np.einsum("ij,ij->i", e_vec, e_vec))
    bad = (radius == 0) | (mu == 0)
    return np.where(bad, np.nan, a), np.where(bad, np.nan, e), np.where(bad, np.nan, inclination)


class _MemberOutput:
    """A member's HDF5 snapshots (schema of :mod:`libration.io.output`), every
    ``output_stride``-th sample and the last one; resumable at the checkpoint's cursor."""

    FILENAME = "output.h5"

    def __init__(self, task: Mapping[str, Any], writer) -> None:
        self.task = task
        self.writer = writer
        self.stride = int(task["output_stride"])
        self.state = None

    @classmethod
    def create(cls, task: Mapping[str, Any], propagator, tracker: _Tracker) -> _MemberOutput:
        from .io.output import OutputWriter
        from .io.runner import output_attributes

        state = cls._state(task, propagator, tracker)
        writer = OutputWriter(os.path.join(task["directory"], cls.FILENAME), propagator.names,
                              propagator.integrator.radius, output_attributes(propagator, state), "",
                              state["elements_primary"])
        self = cls(task, writer)
        self.state = state
        self.sample(propagator, tracker, final=False)
        return self

    @classmethod
    def resume(cls, task: Mapping[str, Any], tracker: _Tracker) -> _MemberOutput:
        from .io.output import OutputWriter

        writer = OutputWriter.reopen(os.path.join(task["directory"], cls.FILENAME), tracker.output_cursor)
        return cls(task, writer)

    @staticmethod
    def _state(task, propagator, tracker: _Tracker) -> dict[str, Any]:
        settings = task["settings"]
        return {"energy0": tracker.energy0, "angular_momentum0": tracker.angular_momentum0,
                "elements": True, "elements_primary": propagator.names[int(task["primary"])],
                "every": abs(settings["sample_every"]) * int(task["output_stride"]),
                "t_start": settings["start"]}

    def sample(self, propagator, tracker: _Tracker, final: bool) -> None:
        from .io.runner import snapshot_row

        index = tracker.next_sample - 1
        if index == tracker.output_sample or not (final or index % self.stride == 0):
            return
        if self.state is None:
            self.state = self._state(self.task, propagator, tracker)
        row, names = snapshot_row(propagator, self.state)
        self.writer.append(row, names)
        tracker.output_sample = index

    def flush(self, tracker: _Tracker) -> None:
        self.writer.flush()
        tracker.output_cursor = self.writer.count

    def close(self, event_log) -> None:
        self.writer.close(event_log)

    def abandon(self) -> None:
        if self.writer.file is not None:
            self.writer.abandon()


def _event_times(event_log: Sequence[Mapping[str, Any]]) -> dict[str, float]:
    """First time of each event family in a propagator's event log (nan when absent)."""
    found = {"encounter": math.nan, "collision": math.nan, "escape": math.nan}
    for event in event_log:
        kind = str(event.get("kind", ""))
        for family in found:
            if family in kind and math.isnan(found[family]):
                found[family] = float(event.get("time", math.nan))
    return found


def _member_system(task: Mapping[str, Any]) -> System:
    base = task["base"]
    if "function" in base:
        system = _import_callable(base["function"])(dict(task["parameters"]))
        if not isinstance(system, System):
            raise ValidationError(f"the base function {base['function']} must return a libration.System, "
                                  f"got {type(system).__name__}")
        return system
    return apply_parameters(_system_from_json(base["system"]), task["parameters"], task["frame"],
                            int(task["primary"]))


def _save_member(path: str, propagator, tracker: _Tracker, task: Mapping[str, Any],
                 output: _MemberOutput | None = None) -> None:
    from .io import checkpoint

    if output is not None:  # the output file holds every snapshot the checkpoint counts
        output.flush(tracker)

    checkpoint.write(path, {"propagator": propagator.to_memory(), "tracker": tracker.memory(),
                            "member": {"index": int(task["index"]), "fingerprint": task["fingerprint"]}},
                     kind="ensemble-member")


def run_member(task: Mapping[str, Any]) -> dict[str, Any]:
    """Run (or resume) one member; the function every executor runs.

    ``task`` is a plain dict (picklable, built by :meth:`Ensemble.tasks`).  Any exception in
    the member is caught and recorded in ``failure.json``; the returned dict is the summary
    (also written to ``summary.json``) or the failure record.
    """
    from .propagator import Propagator

    directory = task["directory"]
    os.makedirs(directory, exist_ok=True)
    state_path = os.path.join(directory, "state.ckpt")
    wall_start = _time.perf_counter()
    output: _MemberOutput | None = None
    try:
        tracker: _Tracker
        if os.path.exists(state_path):
            from .io import checkpoint

            _, content = checkpoint.read(state_path)
            member = content.get("member", {})
            if member.get("fingerprint") != task["fingerprint"] or int(member.get("index", -1)) != task["index"]:
                raise FileFormatError(f"{state_path} belongs to another ensemble or member; remove it to "
                                      "start this member afresh")
            propagator = Propagator.from_memory(content["propagator"])
            tracker = _Tracker(task, propagator.system)
            tracker.restore(content["tracker"])
            resumed_at = propagator.time
            output = _MemberOutput.resume(task, tracker) if task["output_stride"] else None
        else:
            system = _member_system(task)
            settings = task["settings"]
            propagator = Propagator(system, settings["method"], step=settings["step"],
                                    tolerance=settings["tolerance"], softening=settings["softening"],
                                    threads=settings["threads"], events=settings["events"],
                                    time=settings["start"], **settings["options"])
            tracker = _Tracker(task, system)
            met = tracker.sample(propagator)
            if met in task["stop_on"]:
                tracker.stop_reason = f"stopped on {met} at time {propagator.time!r}"
            resumed_at = None
            output = _MemberOutput.create(task, propagator, tracker) if task["output_stride"] else None
        start, until, every = task["settings"]["start"], task["settings"]["until"], task["settings"]["sample_every"]
        interval = float(task["checkpoint_interval"])
        stop_on = set(task["stop_on"])
        last_save = _time.perf_counter()
        reason = tracker.stop_reason
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)  # a stopped integration is a result here
            step = task["settings"]["step"]
            # Fixed step: samples on the step grid (t0 + n * step, as the propagator counts),
            # so no sample needs a partial step finished on a copy.
            stride = max(1, round(every / step)) if step is not None else 0
            while propagator.time != until and not reason:
                if stride:
                    target = propagator.t0 + (tracker.next_sample * stride) * step
                else:
                    target = start + tracker.next_sample * every
                if (target - until) * (until - start) >= 0:
                    target = until
                propagator.advance(target)
                tracker.next_sample += 1
                met = tracker.sample(propagator)
                if propagator.time != target:
                    reason = propagator.message or "a stopping event"
                    if propagator.event_log:
                        last = propagator.event_log[-1]
                        reason = f"stopped by {last.get('kind', 'an event')} at time {last.get('time')!r}"
                elif propagator.status != 0:
                    reason = propagator.message or f"integration status {propagator.status}"
                elif met in stop_on:
                    reason = f"stopped on {met} at time {propagator.time!r}"
                tracker.stop_reason = reason
                if output is not None:
                    output.sample(propagator, tracker, final=bool(reason) or propagator.time == until)
                if _time.perf_counter() - last_save >= interval:
                    _save_member(state_path, propagator, tracker, task, output)
                    last_save = _time.perf_counter()
        _save_member(state_path, propagator, tracker, task, output)
        if output is not None:
            output.close(propagator.event_log)
        events = _event_times(propagator.event_log)
        first_encounter = tracker.first_encounter_time
        if not math.isnan(events["encounter"]) and not events["encounter"] >= first_encounter:
            first_encounter = events["encounter"]
        first_escape = tracker.first_escape_time
        if not math.isnan(events["escape"]) and not events["escape"] >= first_escape:
            first_escape = events["escape"]
        final = tracker.last_row
        if not tracker.series or tracker.series[-1][0] != final[0]:
            tracker.series.append(final)
        _write_series(os.path.join(directory, "series.csv"), tracker)
        k = len(tracker.names)
        summary = {
            "index": task["index"], "status": "stopped" if reason else "finished", "message": reason,
            "time": propagator.time, "steps": propagator.steps, "energy_error": tracker.max_energy_error,
            "min_separation_hill": tracker.min_hill, "first_encounter_time": first_encounter,
            "first_encounter_bodies": tracker.first_encounter_bodies,
            "first_collision_time": events["collision"], "first_escape_time": first_escape,
            "first_escape_body": tracker.first_escape_body,
            "tracked": {name: {"max_eccentricity": tracker.max_eccentricity[i], "semi_major_axis": final[1 + i],
                               "eccentricity": final[1 + k + i], "inclination": final[1 + 2 * k + i]}
                        for i, name in enumerate(tracker.names)},
            "samples": tracker.next_sample, "events": len(propagator.event_log),
            "resumed_at": resumed_at, "wall_seconds": _time.perf_counter() - wall_start,
            "process": f"{socket.gethostname()}:{os.getpid()}",
            "fingerprint": task["fingerprint"],
        }
        _write_json_atomic(os.path.join(directory, "summary.json"), summary)
        failure_path = os.path.join(directory, "failure.json")
        if os.path.exists(failure_path):
            os.remove(failure_path)
        return summary
    except Exception as exc:  # noqa: BLE001 - a member's failure is a result, never the ensemble's
        if output is not None:
            output.abandon()
        failure = {"index": task["index"], "status": "failed",
                   "message": f"{type(exc).__name__}: {exc}", "fingerprint": task["fingerprint"],
                   "wall_seconds": _time.perf_counter() - wall_start}
        _write_json_atomic(os.path.join(directory, "failure.json"), failure)
        return failure


def _write_series(path: str, tracker: _Tracker) -> None:
    header = ["time"] + [f"{name}.{field}" for field in ("semi_major_axis", "eccentricity", "inclination")
                         for name in tracker.names]
    tmp = f"{path}.tmp{os.getpid()}"
    with open(tmp, "w", newline="", encoding="utf-8") as fh:
        writer = csv.writer(fh)
        writer.writerow(header)
        for row in tracker.series:
            writer.writerow([repr(float(x)) for x in row])
    os.replace(tmp, path)


# ==================================================================================== executors
class SequentialExecutor(cf.Executor):
    """Runs each submitted call at once in the calling process (for debugging and tests)."""

    def submit(self, fn, /, *args, **kwargs):  # type: ignore[override]
        future: cf.Future = cf.Future()
        try:
            future.set_result(fn(*args, **kwargs))
        except Exception as exc:  # noqa: BLE001 - handed to the caller through the future
            future.set_exception(exc)
        return future  # (KeyboardInterrupt and SystemExit propagate at once)


def _cores() -> int:
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:  # pragma: no cover - not on Linux
        return max(1, os.cpu_count() or 1)


def default_executor(workers: int | None = None) -> cf.Executor:
    """A local process pool with ``workers`` processes (default: one per available core).

    Workers start with the ``forkserver`` method where available (``spawn`` elsewhere), so no
    thread or lock of the calling process is inherited.
    """
    import multiprocessing

    workers = _cores() if workers is None else int(workers)
    if workers < 1:
        raise ValidationError(f"workers must be an integer >= 1, got {workers!r}")
    methods = multiprocessing.get_all_start_methods()
    context = multiprocessing.get_context("forkserver" if "forkserver" in methods else "spawn")
    return cf.ProcessPoolExecutor(max_workers=workers, mp_context=context)


def _resolve_executor(executor: Any, workers: int | None) -> tuple[cf.Executor, bool]:
    """(executor, owned): ``owned`` executors are shut down by :meth:`Ensemble.run`."""
    if executor is None:
        return default_executor(workers), True
    if isinstance(executor, str):
        if executor == "sequential":
            return SequentialExecutor(), True
        if executor == "processes":
            return default_executor(workers), True
        raise ValidationError(f"executor must be an Executor, a dask Client, 'processes' or 'sequential', "
                              f"got {executor!r}")
    if not isinstance(executor, cf.Executor) and hasattr(executor, "get_executor"):
        # A dask.distributed.Client.  pure=False: a rerun must run members again, never be
        # answered from results (or errors) the cluster still remembers under the same key.
        return executor.get_executor(pure=False), False
    if not hasattr(executor, "submit"):
        raise ValidationError(f"executor must provide submit() (a concurrent.futures.Executor or a dask "
                              f"Client), got {type(executor).__name__}")
    return executor, False


class _DirectoryLock:
    """An exclusive advisory lock on ``path`` while an ensemble runs (POSIX ``flock``), so two
    runs of one directory never write the same members; a no-op where ``flock`` is missing."""

    def __init__(self, path: str) -> None:
        self.path = path
        self.handle = None

    def __enter__(self) -> _DirectoryLock:
        try:
            import fcntl
        except ImportError:  # pragma: no cover - not POSIX
            return self
        self.handle = open(self.path, "a+", encoding="utf-8")
        try:
            fcntl.flock(self.handle, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except BlockingIOError:
            self.handle.seek(0)
            holder = self.handle.read().strip() or "another process"
            self.handle.close()
            self.handle = None
            raise ValidationError(f"{os.path.dirname(self.path)} is being run by {holder}; wait for it "
                                  "to end (or stop it) before running this ensemble again") from None
        except OSError:  # a file system without locks (some network mounts): run unlocked
            return self
        self.handle.seek(0)
        self.handle.truncate()
        self.handle.write(f"process {os.getpid()} on {socket.gethostname()}\n")
        self.handle.flush()
        return self

    def __exit__(self, *exc_info) -> None:
        if self.handle is not None:
            self.handle.close()  # closing releases the lock
            self.handle = None


# ===================================================================================== ensemble
class Ensemble:
    """Many runs of one system with varied parameters, durable and resumable.

    Parameters
    ----------
    base : System or callable
        The system every member starts from (parameters are applied with
        :func:`apply_parameters`), or a module-level function ``f(parameters: dict) ->
        System`` that builds a member's system from its parameter values.
    directory : str or path-like
        The ensemble directory (created when missing).
    until : float
        End time of every member, in the time unit of the system.
    method : str
        Stepping method (see :class:`~libration.Propagator`).
    step, tolerance : float, optional
        Fixed step or relative tolerance, as for :class:`~libration.Propagator`.
    grid : mapping of str to sequence of float, optional
        The members are the Cartesian product of these values (first name slowest).
    members : sequence of mappings, optional
        One parameter dict per member.
    perturb : mapping of str to float, optional
        Standard deviation of a Gaussian perturbation added to each named parameter's base
        value; ``count`` members, member k drawn from ``numpy.random.default_rng((seed, k))``.
    count : int, optional
        Number of perturbed members (with ``perturb``).
    seed : int
        Seed of the perturbations (default 0).
    start : float
        Initial time, time unit (default 0).
    sample_every : float, optional
        Diagnostics (energy, elements, separations) are sampled at ``start + k * sample_every``
        (time unit; default: 1000 samples over the span; with a fixed step, rounded to a
        whole number of steps so samples fall on the step grid).  Sampling never changes the
        trajectory.  Close encounters are detected at samples: ``sample_every`` should be a
        small fraction of the shortest orbital period of interest (or use ``events=`` for
        per-step detection in the compiled loop).
    checkpoint_interval : float
        Wall-clock seconds between a member's checkpoints (default 60).  A lost worker costs
        at most this much of one member's work.
    track : sequence of str, optional
        Bodies whose elements (about ``primary``) are recorded; default every body but the
        primary (the massive ones only when there are more than 16 bodies).
    primary : int
        The central body (default 0).
    frame : {"jacobi", "heliocentric"}
        Frame of element parameters (default "jacobi").
    encounter_hill : float
        A close encounter is a separation below this many mutual Hill radii,
        ``((m_i + m_j) / (3 m_primary))^(1/3) (r_i + r_j) / 2`` (default 1).
    escape_distance : float, optional
        An escape is a tracked body unbound from the primary beyond this distance (length
        unit; default 10 times the largest initial distance of a tracked body).
    stop_on : sequence of {"encounter", "escape"}
        End a member at the first such event (its status is then "stopped").
    softening, events, threads : optional
        As for :class:`~libration.Propagator` (``threads`` per member, default 1).
    options : mapping, optional
        Method options.
    output_every : float, optional
        Each member also writes HDF5 snapshots (``members/NNNNN/output.h5``, the schema of
        :mod:`libration.io.output`, with elements about ``primary``) every this much time
        (rounded to a whole number of samples) and at its end; needs h5py.  Default: none
        (the sampled ``series.csv`` only).

    Examples
    --------
    A grid over the outer planet's orbit, on the local cores, then on a Dask cluster (the
    same script: members already finished are skipped, interrupted ones resume)::

        scan = lb.Ensemble(system, "scan", until=1e6, method="wisdom-holman", step=20.0,
                           grid={"c.semi_major_axis": np.linspace(1.3, 1.8, 51),
                                 "c.eccentricity": np.linspace(0.0, 0.3, 31)},
                           sample_every=50.0, stop_on=["encounter"])
        table = scan.run()                       # a process pool, one worker per core
        table = scan.run(distributed.Client("tcp://scheduler:8786"))
        scan.plot_map("c.semi_major_axis", "c.eccentricity", "first_encounter_time")
    """

    def __init__(self, base: System | Callable[[dict], System], directory: str | os.PathLike, *,
                 until: float, method: str = "leapfrog", step: float | None = None,
                 tolerance: float | None = None, grid: Mapping[str, Sequence[float]] | None = None,
                 members: Sequence[Mapping[str, float]] | None = None,
                 perturb: Mapping[str, float] | None = None, count: int | None = None, seed: int = 0,
                 start: float = 0.0, sample_every: float | None = None, checkpoint_interval: float = 60.0,
                 track: Sequence[str] | None = None, primary: int = 0, frame: str = "jacobi",
                 encounter_hill: float = 1.0, escape_distance: float | None = None,
                 stop_on: Iterable[str] = (), softening: float = 0.0, events: dict | None = None,
                 threads: int = 1, options: Mapping[str, Any] | None = None,
                 output_every: float | None = None) -> None:
        from .methods import get_method

        self.directory = os.path.abspath(os.fspath(directory))
        start, until = _number(start, "start"), _number(until, "until")
        if until == start:
            raise ValidationError(f"until must differ from start ({start!r}), got {until!r}")
        if sample_every is None:
            sample_every = abs(until - start) / 1000.0
        sample_every = _number(sample_every, "sample_every")
        if sample_every <= 0:
            raise ValidationError(f"sample_every must be > 0 (time unit), got {sample_every!r}")
        sample_every = math.copysign(sample_every, until - start)
        output_stride = 0
        if output_every is not None:
            output_every = _number(output_every, "output_every")
            if output_every <= 0:
                raise ValidationError(f"output_every must be > 0 (time unit), got {output_every!r}")
            output_stride = max(1, round(output_every / abs(sample_every)))
        checkpoint_interval = _number(checkpoint_interval, "checkpoint_interval")
        if checkpoint_interval < 0:
            raise ValidationError(f"checkpoint_interval must be >= 0 seconds, got {checkpoint_interval!r}")
        encounter_hill = _number(encounter_hill, "encounter_hill")
        if encounter_hill <= 0:
            raise ValidationError(f"encounter_hill must be > 0 mutual Hill radii, got {encounter_hill!r}")
        if escape_distance is not None:
            escape_distance = _number(escape_distance, "escape_distance")
            if escape_distance <= 0:
                raise ValidationError(f"escape_distance must be > 0 (length unit), got {escape_distance!r}")
        stop_on = tuple(stop_on) if not isinstance(stop_on, str) else (stop_on,)
        for condition in stop_on:
            if condition not in STOP_CONDITIONS:
                raise ValidationError(f"stop_on entries must be among {', '.join(STOP_CONDITIONS)}, "
                                      f"got {condition!r}")
        if frame not in ("jacobi", "heliocentric"):
            raise ValidationError(f"frame must be 'jacobi' or 'heliocentric', got {frame!r}")
        get_method(method)  # an unknown method fails here, not in every member

        self.parameter_sets = _parameter_sets(grid, members, perturb, count, seed, base, frame, primary)
        self.parameters = list(self.parameter_sets[0]) if self.parameter_sets else []
        if isinstance(base, System):
            probe = base
            for name in self.parameters:  # names are checked here; values per member, in the worker
                _body_index(base, _split_parameter(name)[0], name)
            base_json: dict[str, Any] = {"system": _system_to_json(base)}
        elif callable(base):
            base_json = {"function": _callable_path(base)}
            probe = base(dict(self.parameter_sets[0]))
            if not isinstance(probe, System):
                raise ValidationError(f"the base function must return a libration.System, got "
                                      f"{type(probe).__name__}")
        else:
            raise ValidationError(f"base must be a libration.System or a function returning one, got "
                                  f"{type(base).__name__}")
        if track is None:
            candidates = range(probe.n) if probe.n <= 16 else range(probe.n_active)
            track = [probe.names[i] for i in candidates if i != primary]
        track = [str(name) for name in track]
        for name in track:
            if name not in probe.names:
                raise ValidationError(f"track: no body named {name!r}; the bodies are {_some_names(probe.names)}")
        if not 0 <= int(primary) < probe.n_active:
            raise ValidationError(f"primary must index a massive body, 0..{probe.n_active - 1}, got {primary!r}")
        self.track = track
        reserved = {"index", "message", "wall_seconds"} | {f for f, _ in _RESULT_FIELDS} | {
            f"{b}.{_TRACKED_COLUMNS[f]}" for b in track for f in _TRACKED_FIELDS}
        clash = [name for name in self.parameters if name in reserved]
        if clash:
            raise ValidationError(f"parameter names {clash} clash with result columns; rename them")
        self.settings = {"method": method, "step": None if step is None else float(step),
                         "tolerance": None if tolerance is None else float(tolerance),
                         "softening": float(softening), "threads": int(threads), "events": events,
                         "options": dict(options or {}), "start": start, "until": until,
                         "sample_every": sample_every}
        self.definition = {"base": base_json, "settings": self.settings, "parameters": self.parameters,
                           "members": self.parameter_sets, "track": track, "primary": int(primary),
                           "frame": frame, "encounter_hill": encounter_hill,
                           "escape_distance": escape_distance, "stop_on": list(stop_on),
                           "output_stride": output_stride}
        self.fingerprint = _fingerprint(self.definition)
        self.checkpoint_interval = checkpoint_interval
        # Misuse of the method settings raises now rather than once per member.
        from .propagator import Propagator

        Propagator(probe, method, step=step, tolerance=tolerance, softening=softening, threads=threads,
                   events=events, time=start, **dict(options or {}))

    # ------------------------------------------------------------------ basics
    def __len__(self) -> int:
        return len(self.parameter_sets)

    def __repr__(self) -> str:
        return (f"Ensemble({len(self)} members, parameters={self.parameters}, "
                f"method={self.settings['method']!r}, directory={self.directory!r})")

    def member_directory(self, index: int) -> str:
        """Directory of member ``index``."""
        return os.path.join(self.directory, "members", f"{int(index):05d}")

    def tasks(self) -> list[dict[str, Any]]:
        """The plain-dict task of every member (what :func:`run_member` receives)."""
        common = {key: self.definition[key] for key in ("base", "settings", "track", "primary", "frame",
                                                        "encounter_hill", "escape_distance", "stop_on",
                                                        "output_stride")}
        return [dict(common, index=i, parameters=dict(p), directory=self.member_directory(i),
                     fingerprint=self.fingerprint, checkpoint_interval=self.checkpoint_interval)
                for i, p in enumerate(self.parameter_sets)]

    # --------------------------------------------------------------- manifest
    @property
    def manifest_path(self) -> str:
        return os.path.join(self.directory, MANIFEST)

    def _prepare_directory(self) -> None:
        os.makedirs(os.path.join(self.directory, "members"), exist_ok=True)
        if os.path.exists(self.manifest_path):
            existing = _read_json(self.manifest_path)
            if existing.get("format") != FORMAT_NAME:
                raise FileFormatError(f"{self.manifest_path} is not a libration ensemble manifest")
            if existing.get("fingerprint") != self.fingerprint:
                raise ValidationError(
                    f"{self.directory} holds a different ensemble (fingerprint "
                    f"{str(existing.get('fingerprint'))[:12]!r}..., "
                    f"this one {self.fingerprint[:12]!r}...); use another directory or remove it")
        else:
            self._write_manifest()

    def member_records(self) -> list[dict[str, Any]]:
        """Status and summary of every member, read from the member directories."""
        return [self._member_record(i) for i in range(len(self.parameter_sets))]

    def _member_record(self, index: int) -> dict[str, Any]:
        directory = self.member_directory(index)
        record: dict[str, Any] = {"index": index, "parameters": self.parameter_sets[index], "status": "pending",
                                  "message": ""}
        summary_path = os.path.join(directory, "summary.json")
        failure_path = os.path.join(directory, "failure.json")
        if os.path.exists(summary_path):
            summary = _read_json(summary_path)
            if summary.get("fingerprint") == self.fingerprint:
                record.update(status=summary["status"], message=summary.get("message", ""), summary=summary)
        elif os.path.exists(failure_path):
            failure = _read_json(failure_path)
            if failure.get("fingerprint") == self.fingerprint:
                record.update(status="failed", message=failure.get("message", ""))
        if record["status"] == "pending" and os.path.exists(os.path.join(directory, "state.ckpt")):
            record["status"] = "interrupted"
            record["message"] = "has a checkpoint; resumes on the next run"
        return record

    def _write_manifest(self, records: list[dict[str, Any]] | None = None) -> None:
        os.makedirs(self.directory, exist_ok=True)
        records = records if records is not None else self.member_records()
        counts: dict[str, int] = {}
        for record in records:
            counts[record["status"]] = counts.get(record["status"], 0) + 1
        _write_json_atomic(self.manifest_path, {
            "format": FORMAT_NAME, "format_version": FORMAT_VERSION, "library_version": __version__,
            "fingerprint": self.fingerprint, "checkpoint_interval": self.checkpoint_interval,
            "counts": counts, "definition": self.definition, "members": records})

    def status(self) -> dict[str, int]:
        """Number of members in each status (pending, interrupted, finished, stopped, failed)."""
        counts: dict[str, int] = {}
        for record in self.member_records():
            counts[record["status"]] = counts.get(record["status"], 0) + 1
        return counts

    # -------------------------------------------------------------------- run
    def run(self, executor: Any = None, *, workers: int | None = None, retry_failed: bool = False,
            progress: Callable[[int, int], None] | None = None) -> np.ndarray:
        """Run every member that has not finished; return :meth:`results`.

        Parameters
        ----------
        executor : Executor, dask Client, "processes", "sequential" or None
            Where members run.  None or "processes": a local process pool of ``workers``
            processes (default one per core), shut down at the end.  A dask
            ``distributed.Client`` (or its ``get_executor()``) runs them on its cluster.
            A caller's executor is left running.
        workers : int, optional
            Size of the default process pool.
        retry_failed : bool
            Run failed members again (default: keep their failure).
        progress : callable, optional
            Called as ``progress(done, total)`` after each member completes (and once at the
            start), counting members of the whole ensemble.

        Returns
        -------
        numpy.ndarray
            The structured summary (see :meth:`results`).  Members whose worker was lost
            (a killed process, a lost Dask worker) stay "interrupted" with a warning; run
            again to resume them from their checkpoints.
        """
        self._prepare_directory()
        with _DirectoryLock(os.path.join(self.directory, "run.lock")):
            return self._run(executor, workers, retry_failed, progress)

    def _run(self, executor, workers, retry_failed, progress) -> np.ndarray:
        records = self.member_records()
        todo_status = {"pending", "interrupted"} | ({"failed"} if retry_failed else set())
        tasks = [task for task, record in zip(self.tasks(), records) if record["status"] in todo_status]
        for task in tasks:
            if retry_failed:
                failure_path = os.path.join(task["directory"], "failure.json")
                if os.path.exists(failure_path):
                    os.remove(failure_path)
        total = len(records)
        done = total - len(tasks)
        if progress is not None:
            progress(done, total)
        lost: list[tuple[int, str]] = []
        if tasks:
            pool, owned = _resolve_executor(executor, workers)
            try:
                futures = {pool.submit(run_member, task): task["index"] for task in tasks}
                last_manifest, manifest_cost = _time.monotonic(), 0.0
                for future in cf.as_completed(futures):
                    index = futures[future]
                    try:
                        future.result()
                    except Exception as exc:  # noqa: BLE001 - the worker, not the member, failed
                        lost.append((index, f"{type(exc).__name__}: {exc}"))
                    records[index] = self._member_record(index)
                    done += 1
                    if progress is not None:
                        progress(done, total)
                    # Keep the manifest current without letting its rewrites dominate.
                    if _time.monotonic() - last_manifest > max(2.0, 20.0 * manifest_cost):
                        began = _time.monotonic()
                        self._write_manifest(records)
                        last_manifest = _time.monotonic()
                        manifest_cost = last_manifest - began
            finally:
                if owned:
                    pool.shutdown(wait=True, cancel_futures=True)
        records = self.member_records()
        self._write_manifest(records)
        table = self.results(records)
        self.to_csv(os.path.join(self.directory, "summary.csv"), table)
        try:
            self.to_hdf5(os.path.join(self.directory, "summary.h5"), table)
        except ImportError:  # pragma: no cover - h5py missing: the CSV is the summary
            pass
        if lost:
            first = lost[0][1]
            warnings.warn(f"{len(lost)} member(s) were lost with their worker (first: {first}); they are "
                          "interrupted and resume from their checkpoints when the ensemble is run again",
                          RuntimeWarning, stacklevel=3)
        return table

    # ---------------------------------------------------------------- results
    def result_dtype(self) -> np.dtype:
        """The dtype of :meth:`results`."""
        fields = [("index", "i8")] + [(name, "f8") for name in self.parameters] + list(_RESULT_FIELDS)
        fields += [(f"{body}.{_TRACKED_COLUMNS[field]}", "f8") for body in self.track for field in _TRACKED_FIELDS]
        fields += [("wall_seconds", "f8"), ("message", f"U{_MESSAGE_WIDTH}")]
        return np.dtype(fields)

    def results(self, records: list[dict[str, Any]] | None = None) -> np.ndarray:
        """One row per member: index, parameters, status, time reached, steps, maximum relative
        energy error, minimum separation (mutual Hill radii), first encounter / collision /
        escape times (nan when none), maximum and final elements of the tracked bodies, wall
        time and message."""
        records = self.member_records() if records is None else records
        table = np.zeros(len(records), dtype=self.result_dtype())
        for name in table.dtype.names:
            if table.dtype[name].kind == "f":
                table[name] = np.nan
        for row, record in zip(table, records):
            row["index"] = record["index"]
            for name in self.parameters:
                row[name] = record["parameters"][name]
            row["status"] = record["status"]
            row["message"] = str(record.get("message", ""))[:_MESSAGE_WIDTH]
            summary = record.get("summary")
            if summary is None:
                row["steps"] = -1
                continue
            for name in ("time", "energy_error", "min_separation_hill", "first_encounter_time",
                         "first_collision_time", "first_escape_time", "wall_seconds"):
                row[name] = _float(summary.get(name))
            row["steps"] = int(summary["steps"])
            for body, values in summary.get("tracked", {}).items():
                for field in _TRACKED_FIELDS:
                    column = f"{body}.{_TRACKED_COLUMNS[field]}"
                    if column in table.dtype.names:
                        row[column] = _float(values.get(field))
        return table

    def to_csv(self, path: str | os.PathLike | None = None, table: np.ndarray | None = None) -> str:
        """Write :meth:`results` as CSV (floats written exactly, via repr); return the path."""
        path = os.fspath(path) if path is not None else os.path.join(self.directory, "summary.csv")
        table = self.results() if table is None else table
        tmp = f"{path}.tmp{os.getpid()}"
        with open(tmp, "w", newline="", encoding="utf-8") as fh:
            writer = csv.writer(fh)
            writer.writerow(table.dtype.names)
            for row in table:
                writer.writerow([repr(float(v)) if isinstance(v, np.floating) else str(v) for v in row.tolist()])
        os.replace(tmp, path)
        return path

    def to_hdf5(self, path: str | os.PathLike | None = None, table: np.ndarray | None = None) -> str:
        """Write :meth:`results` to HDF5 (dataset ``summary``; needs h5py); return the path."""
        try:
            import h5py
        except ImportError as exc:  # pragma: no cover - h5py is a dependency of libration
            raise ImportError("to_hdf5 needs h5py (pip install h5py); to_csv works without it") from exc
        path = os.fspath(path) if path is not None else os.path.join(self.directory, "summary.h5")
        table = self.results() if table is None else table
        # HDF5 has no fixed-width unicode: store the strings as UTF-8 bytes.
        # (a U<k> field holds 4 k bytes: room for k characters of up to 4 UTF-8 bytes each).
        dtype = [(name, f"S{table.dtype[name].itemsize}" if table.dtype[name].kind == "U"
                  else table.dtype[name]) for name in table.dtype.names]
        converted = np.zeros(table.shape, dtype=dtype)
        for name in table.dtype.names:
            converted[name] = (np.char.encode(table[name], "utf-8") if table.dtype[name].kind == "U"
                               else table[name])
        tmp = f"{path}.tmp{os.getpid()}"
        with h5py.File(tmp, "w") as fh:
            dataset = fh.create_dataset("summary", data=converted)
            dataset.attrs["format"] = FORMAT_NAME
            dataset.attrs["fingerprint"] = self.fingerprint
            dataset.attrs["library_version"] = __version__
        os.replace(tmp, path)
        return path

    def dataframe(self):
        """:meth:`results` as a pandas DataFrame (needs pandas)."""
        try:
            import pandas
        except ImportError as exc:
            raise ImportError("dataframe() needs pandas; results() gives the same table as a numpy "
                              "structured array") from exc
        return pandas.DataFrame.from_records(self.results(), index="index")

    def final_system(self, index: int) -> System:
        """The system at the last checkpoint of member ``index`` (its end once finished)."""
        from .propagator import Propagator

        path = os.path.join(self.member_directory(index), "state.ckpt")
        if not os.path.exists(path):
            raise FileFormatError(f"member {index} has no checkpoint yet ({path})")
        return Propagator.load(path).system

    # --------------------------------------------------------------- plotting
    def plot_map(self, x: str, y: str | None = None, value: str = "first_encounter_time",
                 path: str | os.PathLike | None = None, *, log: bool | None = None) -> str:
        """Draw a stability map: ``value`` over parameters ``x`` and ``y`` as a PNG.

        Parameters
        ----------
        x, y : str
            Parameter names (the grid axes).  With ``y`` None, ``value`` is drawn against ``x``.
        value : str
            A result column (default the time of the first close encounter; members without
            one are drawn at the time they reached, marked as survivors).
        path : str, optional
            Output PNG (default ``<directory>/map_<value>.png``).
        log : bool, optional
            Logarithmic colour scale (default: on for times spanning more than a decade).

        Returns
        -------
        str
            The path written.
        """
        return plot_results(self.results(), x, y, value, path or os.path.join(self.directory, f"map_{value}.png"),
                            log=log, title=f"{len(self)} members, {self.settings['method']}")

    # ------------------------------------------------------------- reopening
    @classmethod
    def open(cls, directory: str | os.PathLike, base: Callable[[dict], System] | None = None) -> Ensemble:
        """Reopen the ensemble stored in ``directory`` (from its manifest).

        An ensemble defined by a base function needs the function again (``base=``) to run.
        """
        directory = os.path.abspath(os.fspath(directory))
        path = os.path.join(directory, MANIFEST)
        if not os.path.exists(path):
            raise FileFormatError(f"{directory} holds no ensemble manifest ({MANIFEST})")
        manifest = _read_json(path)
        if manifest.get("format") != FORMAT_NAME:
            raise FileFormatError(f"{path} is not a libration ensemble manifest")
        if int(manifest.get("format_version", 0)) > FORMAT_VERSION:
            raise FileFormatError(f"{path} was written by a newer libration (format "
                                  f"{manifest.get('format_version')}); upgrade to read it")
        d = manifest["definition"]
        s = d["settings"]
        if "system" in d["base"]:
            base_obj: Any = _system_from_json(d["base"]["system"])
        elif base is not None:
            base_obj = base
        else:
            base_obj = _import_callable(d["base"]["function"])
        members = [{k: _float(v) for k, v in m.items()} for m in d["members"]]
        self = cls(base_obj, directory, until=s["until"], method=s["method"], step=s["step"],
                   tolerance=s["tolerance"], members=members, start=s["start"], sample_every=abs(s["sample_every"]),
                   checkpoint_interval=manifest.get("checkpoint_interval", 60.0), track=d["track"],
                   primary=d["primary"], frame=d["frame"], encounter_hill=d["encounter_hill"],
                   escape_distance=d["escape_distance"], stop_on=d["stop_on"], softening=s["softening"],
                   events=s["events"], threads=s["threads"], options=s["options"],
                   output_every=d["output_stride"] * abs(s["sample_every"]) if d.get("output_stride") else None)
        if self.fingerprint != manifest["fingerprint"]:
            raise FileFormatError(f"{path}: the stored definition does not reproduce its fingerprint; the "
                                  "manifest was edited or damaged")
        return self


def _number(value: Any, name: str) -> float:
    try:
        number = float(value)
    except (TypeError, ValueError):
        raise ValidationError(f"{name} must be a finite number, got {value!r}") from None
    if not math.isfinite(number):
        raise ValidationError(f"{name} must be finite, got {value!r}")
    return number


def _parameter_sets(grid, members, perturb, count, seed, base, frame, primary) -> list[dict[str, float]]:
    given = [name for name, v in (("grid", grid), ("members", members), ("perturb", perturb)) if v is not None]
    if len(given) != 1:
        raise ValidationError(f"give exactly one of grid=, members= or perturb= (with count=), got "
                              f"{', '.join(given) or 'none'}")
    if grid is not None:
        if not isinstance(grid, Mapping) or not grid:
            raise ValidationError(f"grid must map parameter names to sequences of values, got {grid!r}")
        names = [str(n) for n in grid]
        axes = []
        for name, values in grid.items():
            array = np.asarray(values, dtype=np.float64).ravel()
            if array.size == 0 or not np.isfinite(array).all():
                raise ValidationError(f"grid[{name!r}] must be a non-empty sequence of finite numbers, "
                                      f"got {values!r}")
            axes.append(array.tolist())
        return [dict(zip(names, combo)) for combo in itertools.product(*axes)]
    if members is not None:
        sets = [{str(k): _number(v, f"members[{i}][{k!r}]") for k, v in dict(m).items()}
                for i, m in enumerate(members)]
        if not sets:
            raise ValidationError("members must hold at least one parameter dict, got none")
        if any(set(s) != set(sets[0]) for s in sets):
            raise ValidationError("every entry of members must name the same parameters")
        return [{name: s[name] for name in sets[0]} for s in sets]
    if not isinstance(perturb, Mapping) or not perturb:
        raise ValidationError(f"perturb must map parameter names to standard deviations, got {perturb!r}")
    if isinstance(count, bool) or not isinstance(count, (int, np.integer)) or count < 1:
        raise ValidationError(f"count must be an integer >= 1 with perturb=, got {count!r}")
    if isinstance(seed, bool) or not isinstance(seed, (int, np.integer)) or seed < 0:
        raise ValidationError(f"seed must be an integer >= 0, got {seed!r}")
    if not isinstance(base, System):
        raise ValidationError("perturb= needs a System as base (perturbations add to its values)")
    names = [str(n) for n in perturb]
    sigma = [_number(perturb[n], f"perturb[{n!r}]") for n in names]
    centre = [base_value(base, name, frame, primary) for name in names]
    sets = []
    for k in range(int(count)):
        rng = np.random.default_rng([int(seed), k])
        draws = rng.standard_normal(len(names))
        sets.append({name: float(c + s * d) for name, c, s, d in zip(names, centre, sigma, draws)})
    return sets


# ================================================================================= plotting
def plot_results(table: np.ndarray, x: str, y: str | None, value: str, path: str | os.PathLike, *,
                 log: bool | None = None, title: str = "") -> str:
    """Draw ``value`` over the parameter(s) ``x`` (and ``y``) of a results table into a PNG."""
    try:
        import matplotlib

        matplotlib.use("Agg")
        import matplotlib.pyplot as plt
    except ImportError as exc:
        raise ImportError("plotting needs matplotlib (pip install matplotlib)") from exc
    names = table.dtype.names
    for name in (x, y, value):
        if name is not None and name not in names:
            raise ValidationError(f"{name!r} is not a column of the ensemble results; columns: {', '.join(names)}")
    data = np.array(table[value], dtype=np.float64)
    survivors = np.zeros(data.shape, dtype=bool)
    label = value
    if value.endswith("_time"):
        # No event: the member survived to the time it reached; draw it there.
        survivors = np.isnan(data) & np.isin(table["status"], FINISHED)
        data = np.where(survivors, table["time"], data)
        label = f"{value} (no event: time reached)"
    path = os.fspath(path)
    fig, ax = plt.subplots(figsize=(6.4, 4.8), dpi=120)
    finite = data[np.isfinite(data) & (data > 0)]
    if log is None:
        log = finite.size > 0 and finite.max() > 10 * finite.min()
    if y is None:
        order = np.argsort(table[x], kind="stable")
        ax.plot(table[x][order], data[order], "o-", ms=3)
        ax.plot(table[x][survivors], data[survivors], "^", color="tab:green", label="no event")
        ax.set_ylabel(label)
        if log:
            ax.set_yscale("log")
        if survivors.any():
            ax.legend()
    else:
        from matplotlib.colors import LogNorm

        norm = LogNorm() if log and finite.size else None
        xs, xi = np.unique(table[x], return_inverse=True)
        ys, yi = np.unique(table[y], return_inverse=True)
        cells = set(zip(xi.tolist(), yi.tolist()))
        if xs.size * ys.size == len(table) == len(cells):  # a full grid: a colour map
            grid = np.full((ys.size, xs.size), np.nan)
            grid[yi, xi] = data
            mesh = ax.pcolormesh(_edges(xs), _edges(ys), np.ma.masked_invalid(grid), norm=norm, shading="flat")
        else:  # scattered members (random perturbations, lists): coloured points
            mesh = ax.scatter(table[x], table[y], c=data, norm=norm, s=30, edgecolors="none")
            if survivors.any():
                ax.scatter(table[x][survivors], table[y][survivors], s=60, facecolors="none",
                           edgecolors="k", label="no event")
                ax.legend()
        fig.colorbar(mesh, ax=ax, label=label)
        ax.set_ylabel(y)
    ax.set_xlabel(x)
    if title:
        ax.set_title(title)
    fig.tight_layout()
    fig.savefig(path)
    plt.close(fig)
    return path


def _edges(centres: np.ndarray) -> np.ndarray:
    if centres.size == 1:
        return np.array([centres[0] - 0.5, centres[0] + 0.5])
    middle = 0.5 * (centres[1:] + centres[:-1])
    return np.concatenate([[2 * centres[0] - middle[0]], middle, [2 * centres[-1] - middle[-1]]])


def plot_path(path: str | os.PathLike, x: str | None = None, y: str | None = None,
              value: str = "first_encounter_time", output: str | os.PathLike | None = None) -> str:
    """Plot an ensemble directory (or its manifest); default axes: its first two parameters."""
    path = os.fspath(path)
    directory = os.path.dirname(path) if os.path.basename(path) == MANIFEST else path
    ensemble = Ensemble.open(directory)
    x = x or ensemble.parameters[0]
    if y is None and len(ensemble.parameters) > 1:
        y = ensemble.parameters[1]
    return ensemble.plot_map(x, y, value, output)


# ================================================================================ scenario files
_ENSEMBLE_KEYS = {"directory", "until", "start", "grid", "members", "perturb", "count", "seed",
                  "sample_every", "checkpoint_interval", "track", "primary", "frame", "encounter_hill",
                  "escape_distance", "stop_on", "workers", "threads", "output_every"}


def ensemble_options(table: Mapping[str, Any], where: str = "[ensemble]") -> dict[str, Any]:
    """Validate an ``[ensemble]`` table of a scenario file; return Ensemble keyword arguments.

    The table (all times in the scenario's time unit)::

        [ensemble]
        directory = "scan"             # relative to the scenario file
        until = 3650.0                 # optional: default the scenario's end time
        sample_every = 5.0
        checkpoint_interval = 30.0     # wall seconds
        stop_on = ["encounter"]
        encounter_hill = 1.0
        workers = 2                    # local processes (command line --workers wins)
        [ensemble.grid]                # or [ensemble.perturb] with count/seed, or members = [...]
        "planet2.semi_major_axis" = { start = 1.2, stop = 1.6, count = 21 }
        "planet2.eccentricity" = [0.0, 0.05, 0.1]

    A grid axis is a list of values or ``{start, stop, count}`` (inclusive, evenly spaced).
    """
    if not isinstance(table, Mapping):
        raise ScenarioError(f"{where} must be a table, got {type(table).__name__}")
    unknown = sorted(set(table) - _ENSEMBLE_KEYS)
    if unknown:
        raise ScenarioError(f"{where}: unknown key(s) {', '.join(unknown)}; "
                            f"known: {', '.join(sorted(_ENSEMBLE_KEYS))}")
    options = {k: v for k, v in table.items() if k not in ("grid", "workers", "directory")}
    if "grid" in table:
        grid = {}
        if not isinstance(table["grid"], Mapping):
            raise ScenarioError(f"{where}.grid must be a table of parameter = values")
        for name, axis in table["grid"].items():
            if isinstance(axis, Mapping):
                missing = {"start", "stop", "count"} - set(axis)
                if missing or set(axis) - {"start", "stop", "count"}:
                    raise ScenarioError(f"{where}.grid.{name!r} must be a list or {{start, stop, count}}, "
                                        f"got {dict(axis)!r}")
                count = axis["count"]
                if isinstance(count, bool) or not isinstance(count, int) or count < 1:
                    raise ScenarioError(f"{where}.grid.{name!r}.count must be an integer >= 1, got {count!r}")
                grid[name] = np.linspace(float(axis["start"]), float(axis["stop"]), count).tolist()
            elif isinstance(axis, list):
                grid[name] = axis
            else:
                raise ScenarioError(f"{where}.grid.{name!r} must be a list or {{start, stop, count}}, got {axis!r}")
        options["grid"] = grid
    return options


def ensemble_from_scenario(path: str | os.PathLike, directory: str | os.PathLike | None = None
                           ) -> tuple[Ensemble, int | None]:
    """Build the :class:`Ensemble` described by a scenario file with an ``[ensemble]`` table.

    The scenario (read by :mod:`libration.scenario`) gives the base system, method,
    step/tolerance, softening, options, events, start and end time (``[run] until``, which
    ``[ensemble] until`` overrides).  Element parameters are about each body's primary
    (``frame = "heliocentric"`` unless the table says otherwise) and angles (parameter values
    and perturbation widths alike) are in the scenario's ``angle_unit``.  ``directory``
    overrides ``[ensemble] directory``.  Returns ``(ensemble, workers)``.
    """
    import tomllib

    from . import scenario as scenario_module

    path = os.fspath(path)
    try:
        with open(path, encoding="utf-8") as fh:
            text = fh.read()
    except OSError as exc:
        raise ScenarioError(f"cannot read scenario file {path}: {exc.strerror or exc}") from None
    except UnicodeDecodeError:
        raise ScenarioError(f"{path}: not UTF-8 text; a scenario is a TOML text file") from None
    loaded = scenario_module.parse(text, path, os.path.dirname(os.path.abspath(path)))  # checks the TOML
    table = tomllib.loads(text).get("ensemble")
    if table is None:
        raise ScenarioError(f"{path} has no [ensemble] table; add one to run the scenario as an ensemble")
    options = ensemble_options(table)
    base = loaded.system()
    options.setdefault("until", loaded.until)
    if options["until"] is None:
        raise ScenarioError(f"{path}: give the end time as [run] until or [ensemble] until")
    options.setdefault("start", loaded.start)
    options.setdefault("frame", "heliocentric")
    if loaded.checkpoint_interval is not None:
        options.setdefault("checkpoint_interval", loaded.checkpoint_interval)
    options.update(method=loaded.method, step=loaded.step, tolerance=loaded.tolerance,
                   softening=loaded.softening, events=loaded.events, options=loaded.options or None)
    if loaded.angle_unit == "degree":
        _degrees_to_radians(options)
    where = directory if directory is not None else table.get("directory")
    if where is None:
        where = os.path.splitext(path)[0] + "_ensemble"
    elif directory is None and not os.path.isabs(os.fspath(where)):
        where = os.path.join(os.path.dirname(os.path.abspath(path)), os.fspath(where))
    workers = table.get("workers")
    if workers is not None and (isinstance(workers, bool) or not isinstance(workers, int) or workers < 1):
        raise ScenarioError(f"{path}: [ensemble] key 'workers' must be an integer >= 1, got {workers!r}")
    try:
        return Ensemble(base, where, **options), workers
    except ScenarioError:
        raise
    except ValidationError as exc:
        raise ScenarioError(f"{path}: [ensemble]: {exc}") from None


_ANGLE_FIELDS = ("inclination", "ascending_node", "argument_of_periapsis", "mean_anomaly")


def _degrees_to_radians(options: dict[str, Any]) -> None:
    def is_angle(name: str) -> bool:
        return name.rpartition(".")[2] in _ANGLE_FIELDS

    scale = math.pi / 180.0
    if "grid" in options:
        options["grid"] = {k: [float(x) * scale for x in v] if is_angle(k) else v
                           for k, v in options["grid"].items()}
    if "perturb" in options and isinstance(options["perturb"], Mapping):
        options["perturb"] = {k: float(v) * scale if is_angle(k) else v for k, v in options["perturb"].items()}
    if "members" in options and isinstance(options["members"], list):
        options["members"] = [{k: float(v) * scale if is_angle(k) else v for k, v in dict(m).items()}
                              for m in options["members"]]


def demo_ensemble(directory: str | os.PathLike, count: int = 8, years: float = 20.0, seed: int = 1) -> Ensemble:
    """The demo system (planets only) with its second planet's mean anomaly and semi-major axis
    perturbed (standard deviations 1e-3 rad and 1e-4 au): ``count`` members over ``years``."""
    from .demo import demo_system

    system = demo_system(belt_count=0)
    planet = system.names[2]
    return Ensemble(system, directory, until=years * 365.25, method="yoshida4", step=4.0,
                    perturb={f"{planet}.mean_anomaly": 1e-3, f"{planet}.semi_major_axis": 1e-4},
                    count=count, seed=seed, sample_every=20.0, checkpoint_interval=10.0)


# ================================================================================= command line
def add_cli_arguments(parser) -> None:
    """Arguments of ``libration ensemble`` (the command itself is :func:`cli_command`)."""
    parser.add_argument("source", nargs="?", default=None,
                        help="a scenario file with an [ensemble] table, or an ensemble directory to resume")
    parser.add_argument("--demo", action="store_true",
                        help="the demo system with perturbed initial conditions (8 members, 20 years)")
    parser.add_argument("--directory", default=None, help="ensemble directory (overrides the scenario's)")
    parser.add_argument("--workers", type=int, default=None, help="local worker processes (default: cores)")
    parser.add_argument("--scheduler", default=None,
                        help="address of a running Dask scheduler (tcp://host:port) to run the members on")
    parser.add_argument("--sequential", action="store_true", help="run the members one by one in this process")
    parser.add_argument("--retry-failed", action="store_true", help="run failed members again")
    parser.add_argument("--plot", nargs="*", metavar="X [Y]", default=None,
                        help="afterwards draw a stability map over parameters X (and Y); default the first two")
    parser.add_argument("--value", default="first_encounter_time",
                        help="result column drawn by --plot (default first_encounter_time)")
    parser.add_argument("--no-progress", action="store_true", help="no progress bar on stderr")


def _progress_bar(stream) -> Callable[[int, int], None]:
    try:
        from tqdm import tqdm
    except ImportError:
        tqdm = None
    if tqdm is not None:
        bar: dict[str, Any] = {}

        def advance(done: int, total: int) -> None:
            if "bar" not in bar:
                bar["bar"] = tqdm(total=total, initial=done, unit="member", file=stream, dynamic_ncols=True)
            else:
                bar["bar"].update(done - bar["bar"].n)
            if done == total:
                bar["bar"].close()
        return advance

    def show(done: int, total: int) -> None:
        width = 30
        filled = int(width * done / total) if total else width
        stream.write(f"\rmembers {done}/{total} [{'#' * filled}{'.' * (width - filled)}]")
        if done == total:
            stream.write("\n")
        stream.flush()
    return show


def cli_command(args) -> int:
    """Run ``libration ensemble``; returns the exit code (0 all done, 1 some failed or lost)."""
    import sys

    workers = args.workers
    if args.demo:
        ensemble = demo_ensemble(args.directory or "demo_ensemble")
    elif args.source is None:
        raise ValidationError("give a scenario file with an [ensemble] table, an ensemble directory, or --demo")
    elif os.path.isdir(args.source):
        ensemble = Ensemble.open(args.source)
    else:
        ensemble, scenario_workers = ensemble_from_scenario(args.source, args.directory)
        workers = workers if workers is not None else scenario_workers
    executor: Any = "sequential" if args.sequential else None
    client = None
    if args.scheduler:
        try:
            from distributed import Client
        except ImportError:
            raise ValidationError("--scheduler needs dask.distributed (pip install 'dask[distributed]')") from None
        client = executor = Client(args.scheduler)
    print(f"ensemble: {len(ensemble)} members in {ensemble.directory}", file=sys.stderr)
    try:
        progress = None if args.no_progress else _progress_bar(sys.stderr)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)
            table = ensemble.run(executor, workers=workers, retry_failed=args.retry_failed, progress=progress)
    except KeyboardInterrupt:
        ensemble._write_manifest()
        print(f"\ninterrupted: run `libration ensemble {ensemble.directory}` to resume", file=sys.stderr)
        return 130
    finally:
        if client is not None:
            client.close()
    counts = {status: int(np.count_nonzero(table["status"] == status)) for status in np.unique(table["status"])}
    print("status: " + ", ".join(f"{k} {v}" for k, v in sorted(counts.items())))
    for row in table[table["status"] == "failed"][:5]:
        print(f"member {row['index']} failed: {row['message']}")
    print(f"summary: {os.path.join(ensemble.directory, 'summary.csv')}")
    if args.plot is not None:
        axes = list(args.plot) or ensemble.parameters[:2]
        path = ensemble.plot_map(axes[0], axes[1] if len(axes) > 1 else None, args.value)
        print(f"map: {path}")
    unfinished = sum(v for k, v in counts.items() if k not in FINISHED)
    return 1 if unfinished else 0


def plot_cli(path: str | os.PathLike, output: str | os.PathLike | None = None, x: str | None = None,
             y: str | None = None, value: str = "first_encounter_time") -> str | None:
    """For ``libration plot``: draw the map of an ensemble directory, manifest or summary.csv;
    None when ``path`` is not an ensemble (so the caller tries other file kinds)."""
    path = os.fspath(path)
    if os.path.basename(path) == "summary.csv":
        path = os.path.dirname(os.path.abspath(path))
    if os.path.isdir(path) and os.path.exists(os.path.join(path, MANIFEST)) or os.path.basename(path) == MANIFEST:
        return plot_path(path, x, y, value, output)
    return None


def extend_plot_command(commands) -> None:
    """Let ``libration plot`` also draw the stability map of an ensemble directory (or of its
    ``ensemble.json`` / ``summary.csv``); other files go to the plot command as before."""
    plot = commands.choices.get("plot")
    if plot is None:
        return
    original = plot.get_default("func")
    plot.add_argument("--x", default=None, help="ensemble maps: parameter on the x axis (default the first)")
    plot.add_argument("--y", default=None, help="ensemble maps: parameter on the y axis (default the second)")
    plot.add_argument("--value", default="first_encounter_time",
                      help="ensemble maps: result column drawn (default first_encounter_time)")

    def plot_or_map(args) -> int:
        drawn = plot_cli(args.file, getattr(args, "output", None), args.x, args.y, args.value)
        if drawn is None:
            return original(args)
        print(f"map: {drawn}")
        return 0

    plot.set_defaults(func=plot_or_map)
