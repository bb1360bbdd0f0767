"""Scenario files: a TOML description of a system and of how to run it.

A scenario (schema version 1) has these tables; every key is optional unless marked::

    [scenario]      name, description, units ("au-msun-day"; see libration.units),
                    angle_unit ("degree" or "radian", for orbital elements; default "degree"),
                    format_version (1)
    [[body]]        one table per body, massive bodies and test particles (mass 0) alike:
                    name (required, unique), mass (required, >= 0), radius (>= 0), and EITHER
                    position = [x, y, z] and velocity = [vx, vy, vz] (Cartesian, inertial frame)
                    OR primary = "<name of an earlier body>" and the orbital elements
                    semi_major_axis, eccentricity, inclination, ascending_node,
                    argument_of_periapsis, mean_anomaly (a two-body orbit about the primary,
                    G * (m_primary + m_body); missing angles are 0)
    [[population]]  test particles drawn at random: name (required; particles are named
                    <name>00000, <name>00001, ...), count (required, >= 1), primary (required),
                    seed (required, integer >= 0), radius (>= 0, every particle), and the six
                    elements (semi_major_axis required; the others default to 0), each either a number
                    or a distribution table:
                        { distribution = "uniform",    min = ..., max = ... }
                        { distribution = "loguniform", min = ..., max = ... }   (min > 0)
                        { distribution = "powerlaw",   exponent = ..., min = ..., max = ... }
                                                       (density proportional to x**exponent)
                        { distribution = "normal",     mean = ..., sd = ... }
                        { distribution = "rayleigh",   scale = ... }
                    Draws use numpy's default_rng(seed), element by element in the order above,
                    ``count`` values each, so a population is the same on every machine.
    [integrator]    method (required), step (fixed-step methods), tolerance (adaptive
                    methods), softening, threads; [integrator.options] holds method options
    [run]           start (initial time, default 0), until (required for `libration run`)
    [output]        file (HDF5; relative to the scenario file), every (required with file),
                    elements (true/false), elements_primary (default: the first body)
    [checkpoint]    file, interval (wall-clock seconds, default 60), steps (every N steps)
    [events]        passed to the propagator as ``events=`` (see libration.events)
    [ensemble]      read by ``libration ensemble`` (see libration.ensemble); ignored here

Times are in the time unit of ``units``; lengths, masses and speeds likewise.  Errors raise
:class:`~libration.exceptions.ScenarioError` naming the file, the line, the key and what was
expected.
"""
from __future__ import annotations

import math
import os
import re
import tomllib
from dataclasses import dataclass, field
from importlib import resources
from typing import Any

import numpy as np

from .exceptions import LibrationError, ScenarioError, ValidationError
from .system import System
from .units import UNIT_SYSTEMS, get_units

SCHEMA_VERSION = 1
ELEMENTS = ("semi_major_axis", "eccentricity", "inclination", "ascending_node",
            "argument_of_periapsis", "mean_anomaly")
_ANGLES = ("inclination", "ascending_node", "argument_of_periapsis", "mean_anomaly")
_TABLES = {
    "scenario": {"name", "description", "units", "angle_unit", "format_version"},
    "integrator": {"method", "step", "tolerance", "softening", "threads", "options"},
    "run": {"start", "until"},
    "output": {"file", "every", "elements", "elements_primary"},
    "checkpoint": {"file", "interval", "steps"},
}
_BODY_KEYS = {"name", "mass", "radius", "position", "velocity", "primary", *ELEMENTS}
_POPULATION_KEYS = {"name", "count", "primary", "seed", "radius", *ELEMENTS}
_DISTRIBUTIONS = {
    "uniform": ("min", "max"),
    "loguniform": ("min", "max"),
    "powerlaw": ("exponent", "min", "max"),
    "normal": ("mean", "sd"),
    "rayleigh": ("scale",),
}


# ---------------------------------------------------------------------------------------------
# line numbers: tomllib gives none for keys, so we index the text ourselves
# ---------------------------------------------------------------------------------------------
_HEADER = re.compile(r"^\s*(\[\[?)\s*([^\]]+?)\s*\]\]?\s*(#.*)?$")
_KEY = re.compile(r"^\s*((?:[A-Za-z0-9_\-]+|\"[^\"]*\")(?:\s*\.\s*(?:[A-Za-z0-9_\-]+|\"[^\"]*\"))*)\s*=")


def _split_key(text: str) -> tuple[str, ...]:
    return tuple(part.strip().strip('"') for part in text.split("."))


class _Lines:
    """Map key paths such as ("body", 2, "mass") to 1-based line numbers."""

    def __init__(self, text: str) -> None:
        self.lines: dict[tuple, int] = {}
        counters: dict[tuple, int] = {}
        table: tuple = ()
        in_string = False
        for number, line in enumerate(text.splitlines(), start=1):
            if line.count('"""') % 2 == 1 or line.count("'''") % 2 == 1:
                in_string = not in_string
                if not in_string:
                    continue
            if in_string:
                continue
            header = _HEADER.match(line)
            if header:
                path = _split_key(header.group(2))
                if header.group(1) == "[[":
                    index = counters.get(path, 0)
                    counters[path] = index + 1
                    table = path + (index,)
                else:
                    table = path
                self.lines.setdefault(table, number)
                continue
            key = _KEY.match(line)
            if key:
                self.lines.setdefault(table + _split_key(key.group(1)), number)

    def find(self, path: tuple) -> int | None:
        path = tuple(path)
        while path:
            if path in self.lines:
                return self.lines[path]
            path = path[:-1]
        return None


# ---------------------------------------------------------------------------------------------
# the parsed scenario
# ---------------------------------------------------------------------------------------------
@dataclass
class Population:
    """A test-particle population drawn from distributions (see the module docstring)."""

    name: str
    count: int
    primary: str
    seed: int
    elements: dict[str, Any]
    radius: float = 0.0


@dataclass
class Scenario:
    """A parsed scenario: the bodies, populations and run settings.

    Build the initial state with :meth:`system` and a propagator with :meth:`propagator`;
    :attr:`text` is the original file, stored in output files and checkpoints.
    """

    name: str
    description: str
    units: str
    angle_unit: str
    bodies: list[dict[str, Any]]
    populations: list[Population]
    method: str
    step: float | None
    tolerance: float | None
    softening: float
    threads: int | None
    options: dict[str, Any]
    start: float
    until: float | None
    output: str | None
    every: float | None
    elements: bool
    elements_primary: str | None
    checkpoint: str | None
    checkpoint_interval: float | None
    checkpoint_steps: int | None
    events: dict[str, Any] | None
    text: str = ""
    source: str = "<scenario>"
    directory: str = "."
    _lines: _Lines | None = field(default=None, repr=False)

    def _error(self, path: tuple, message: str) -> ScenarioError:
        line = self._lines.find(path) if self._lines else None
        where = f"{self.source}, line {line}" if line else self.source
        return ScenarioError(f"{where}: {message}")

    def system(self, population_counts: dict[str, int] | None = None) -> System:
        """Build the initial :class:`System` (barycentric frame: massive bodies, then test particles).

        ``population_counts`` overrides the ``count`` of named populations (the seeded draws
        of the first particles stay the same only for distributions drawn element by element;
        a different count gives a different sample).
        """
        scale = 1.0 if self.angle_unit == "radian" else math.pi / 180.0
        G = get_units(self.units).G
        names: list[str] = []
        mass: list[float] = []
        radius: list[float] = []
        position: list[np.ndarray] = []
        velocity: list[np.ndarray] = []
        index: dict[str, int] = {}
        for i, body in enumerate(self.bodies):
            if "primary" in body:
                p = index[body["primary"]]
                mu = G * (mass[p] + body["mass"])
                values = [body.get(name, 0.0) for name in ELEMENTS]
                for j, name in enumerate(ELEMENTS):
                    if name in _ANGLES:
                        values[j] *= scale
                try:
                    r, v = _relative_state(mu, *(np.array([x]) for x in values))
                except ValidationError as exc:
                    raise self._error(("body", i), f"[[body]] #{i + 1} ({body['name']!r}): {exc}") from None
                pos, vel = position[p] + r[0], velocity[p] + v[0]
            else:
                pos, vel = np.array(body["position"], float), np.array(body["velocity"], float)
            index[body["name"]] = i
            names.append(body["name"])
            mass.append(body["mass"])
            radius.append(body.get("radius", 0.0))
            position.append(pos)
            velocity.append(vel)
        for k, pop in enumerate(self.populations):
            count = pop.count if not population_counts or pop.name not in population_counts \
                else int(population_counts[pop.name])
            rng = np.random.default_rng(pop.seed)
            drawn = {}
            for name in ELEMENTS:
                spec = pop.elements.get(name, 0.0)
                values = _draw(rng, spec, count)
                if name in _ANGLES:
                    values = values * scale
                drawn[name] = values
            bad = _element_problem(drawn)
            if bad is not None:
                j, message = bad
                raise self._error(("population", k), f"[[population]] {pop.name!r}: particle {j} drew "
                                  f"{message}; narrow the distribution")
            p = index[pop.primary]
            try:
                r, v = _relative_state(G * mass[p], *(drawn[name] for name in ELEMENTS))
            except ValidationError as exc:
                raise self._error(("population", k), f"[[population]] {pop.name!r}: {exc}") from None
            width = max(5, len(str(count - 1)))
            names.extend(f"{pop.name}{j:0{width}d}" for j in range(count))
            mass.extend([0.0] * count)
            radius.extend([pop.radius] * count)
            position.extend(position[p] + r)
            velocity.extend(velocity[p] + v)
        order = sorted(range(len(names)), key=lambda i: mass[i] == 0.0)  # massive first, stable
        try:
            system = System(np.array([mass[i] for i in order]), np.array([position[i] for i in order]),
                            np.array([velocity[i] for i in order]), self.units, [names[i] for i in order],
                            np.array([radius[i] for i in order]))
            return system.barycentric()
        except ValidationError as exc:
            raise self._error(("body",), f"the bodies do not form a valid system: {exc}") from None

    def propagator(self, system: System | None = None):
        """Create the :class:`~libration.Propagator` this scenario describes."""
        from .propagator import Propagator

        system = self.system() if system is None else system
        try:
            return Propagator(system, self.method, step=self.step, tolerance=self.tolerance,
                              softening=self.softening, threads=self.threads, events=self.events,
                              time=self.start, **self.options)
        except ScenarioError:
            raise
        except (LibrationError, ValueError) as exc:
            table = ("events",) if "event" in str(exc).lower() and self.events else ("integrator",)
            raise self._error(table, f"[{table[0]}]: {exc}") from None

    def path_of(self, filename: str | None) -> str | None:
        """A file named in the scenario, relative to the scenario's directory."""
        if filename is None:
            return None
        return filename if os.path.isabs(filename) else os.path.join(self.directory, filename)


# ---------------------------------------------------------------------------------------------
# parsing
# ---------------------------------------------------------------------------------------------
class _Parser:
    def __init__(self, text: str, source: str) -> None:
        self.text = text
        self.source = source
        self.lines = _Lines(text)

    def error(self, path: tuple, message: str) -> ScenarioError:
        line = self.lines.find(path)
        where = f"{self.source}, line {line}" if line else self.source
        return ScenarioError(f"{where}: {message}")

    @staticmethod
    def label(path: tuple) -> str:
        if len(path) >= 2 and isinstance(path[1], int):
            return f"[[{path[0]}]] #{path[1] + 1} key {'.'.join(map(str, path[2:]))!r}"
        return f"[{path[0]}] key {'.'.join(map(str, path[1:]))!r}" if len(path) > 1 else f"[{path[0]}]"

    def number(self, value: Any, path: tuple, *, low: float | None = None, high: float | None = None,
               strict_low: bool = False, nonzero: bool = False) -> float:
        if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
            raise self.error(path, f"{self.label(path)} must be a finite number, got {value!r}")
        value = float(value)
        if low is not None and (value < low or (strict_low and value == low)):
            op = ">" if strict_low else ">="
            raise self.error(path, f"{self.label(path)} must be a number {op} {low:g}, got {value!r}")
        if high is not None and value > high:
            raise self.error(path, f"{self.label(path)} must be <= {high:g}, got {value!r}")
        if nonzero and value == 0:
            raise self.error(path, f"{self.label(path)} must be nonzero, got 0")
        return value

    def integer(self, value: Any, path: tuple, low: int = 0) -> int:
        if isinstance(value, bool) or not isinstance(value, int) or value < low:
            raise self.error(path, f"{self.label(path)} must be an integer >= {low}, got {value!r}")
        return value

    def string(self, value: Any, path: tuple, choices=None) -> str:
        if not isinstance(value, str) or (not value.strip() and choices is None):
            raise self.error(path, f"{self.label(path)} must be a non-empty string, got {value!r}")
        if choices is not None and value not in choices:
            raise self.error(path, f"{self.label(path)} must be one of {', '.join(map(repr, choices))}, "
                             f"got {value!r}")
        return value

    def table(self, data: dict, name: str) -> dict:
        value = data.get(name, {})
        if not isinstance(value, dict):
            raise self.error((name,), f"{name!r} must be a table [{name}], got {type(value).__name__}")
        allowed = _TABLES[name]
        for key in value:
            if key not in allowed:
                raise self.error((name, key), f"unknown key {key!r} in [{name}]; expected one of "
                                 f"{', '.join(sorted(allowed))}")
        return value

    def check_keys(self, table: dict, path: tuple, allowed: set[str]) -> None:
        for key in table:
            if key not in allowed:
                raise self.error(path + (key,), f"unknown key {key!r} in [[{path[0]}]] #{path[1] + 1}; "
                                 f"expected one of {', '.join(sorted(allowed))}")

    def vector(self, value: Any, path: tuple) -> list[float]:
        if not isinstance(value, list) or len(value) != 3:
            raise self.error(path, f"{self.label(path)} must be an array of 3 numbers, got {value!r}")
        return [self.number(x, path) for x in value]

    def parse(self) -> dict[str, Any]:
        try:
            data = tomllib.loads(self.text)
        except tomllib.TOMLDecodeError as exc:
            raise ScenarioError(f"{self.source}: not valid TOML: {exc}") from None
        allowed = {*_TABLES, "body", "population", "events", "ensemble"}  # [ensemble]: libration.ensemble
        for key in data:
            if key not in allowed:
                raise self.error((key,), f"unknown top-level key or table {key!r}; expected one of "
                                 f"{', '.join(sorted(allowed))}")
        out: dict[str, Any] = {}
        meta = self.table(data, "scenario")
        version = self.integer(meta.get("format_version", SCHEMA_VERSION), ("scenario", "format_version"), 1)
        if version > SCHEMA_VERSION:
            raise self.error(("scenario", "format_version"),
                             f"[scenario] key 'format_version' is {version}, newer than this libration "
                             f"reads ({SCHEMA_VERSION}); upgrade libration")
        out["name"] = self.string(meta.get("name", "unnamed"), ("scenario", "name"))
        description = meta.get("description", "")
        if not isinstance(description, str):
            raise self.error(("scenario", "description"), "[scenario] key 'description' must be a string, "
                             f"got {description!r}")
        out["description"] = description
        out["units"] = self.string(meta.get("units", "nbody"), ("scenario", "units"), tuple(UNIT_SYSTEMS))
        out["angle_unit"] = self.string(meta.get("angle_unit", "degree"), ("scenario", "angle_unit"),
                                        ("degree", "radian"))
        out["bodies"] = self.bodies(data.get("body"), out["angle_unit"])
        names = {b["name"] for b in out["bodies"]}
        out["populations"] = self.populations(data.get("population", []), names, out["bodies"])
        out.update(self.integrator(self.table(data, "integrator")))
        run = self.table(data, "run")
        out["start"] = self.number(run.get("start", 0.0), ("run", "start"))
        out["until"] = None if "until" not in run else self.number(run["until"], ("run", "until"))
        if out["until"] is not None and out["step"] is not None and \
                (out["until"] - out["start"]) * out["step"] < 0:
            raise self.error(("run", "until"), f"[run] key 'until' ({out['until']!r}) lies behind 'start' "
                             f"({out['start']!r}) for step {out['step']!r}; use a negative step to go backward")
        output = self.table(data, "output")
        out["output"] = None if "file" not in output else self.string(output["file"], ("output", "file"))
        out["every"] = None
        if "every" in output:
            out["every"] = self.number(output["every"], ("output", "every"), low=0.0, strict_low=True)
        if out["output"] is not None and out["every"] is None:
            raise self.error(("output",), "[output] has 'file' but no 'every': give the simulated time "
                             "between snapshots (for example every = 365.25)")
        elements = output.get("elements", False)
        if not isinstance(elements, bool):
            raise self.error(("output", "elements"), f"[output] key 'elements' must be true or false, got {elements!r}")
        out["elements"] = elements
        primary = output.get("elements_primary")
        if primary is not None:
            primary = self.string(primary, ("output", "elements_primary"), tuple(sorted(names)))
        out["elements_primary"] = primary
        ckpt = self.table(data, "checkpoint")
        out["checkpoint"] = None if "file" not in ckpt else self.string(ckpt["file"], ("checkpoint", "file"))
        out["checkpoint_interval"] = None
        if "interval" in ckpt:
            out["checkpoint_interval"] = self.number(ckpt["interval"], ("checkpoint", "interval"), low=0.0,
                                                     strict_low=True)
        out["checkpoint_steps"] = None
        if "steps" in ckpt:
            out["checkpoint_steps"] = self.integer(ckpt["steps"], ("checkpoint", "steps"), 1)
        if out["checkpoint"] is None and ("interval" in ckpt or "steps" in ckpt):
            raise self.error(("checkpoint",), "[checkpoint] sets 'interval' or 'steps' but no 'file'")
        events = data.get("events")
        if events is not None and not isinstance(events, dict):
            raise self.error(("events",), f"'events' must be a table [events], got {type(events).__name__}")
        out["events"] = events
        return out

    def bodies(self, value: Any, angle_unit: str) -> list[dict[str, Any]]:
        if value is None:
            raise self.error((), "no bodies: add at least one [[body]] table (name, mass, and a state)")
        if not isinstance(value, list):
            raise self.error(("body",), "'body' must be an array of tables written [[body]]")
        bodies: list[dict[str, Any]] = []
        seen: set[str] = set()
        for i, raw in enumerate(value):
            path = ("body", i)
            if not isinstance(raw, dict):
                raise self.error(path, f"[[body]] #{i + 1} must be a table")
            self.check_keys(raw, path, _BODY_KEYS)
            if "name" not in raw:
                raise self.error(path, f"[[body]] #{i + 1} has no 'name' (a unique string)")
            name = self.string(raw["name"], path + ("name",))
            if name in seen:
                raise self.error(path + ("name",), f"[[body]] #{i + 1} key 'name': {name!r} is already used "
                                 "by an earlier body; names must be unique")
            seen.add(name)
            if "mass" not in raw:
                raise self.error(path, f"[[body]] #{i + 1} ({name!r}) has no 'mass' (a number >= 0)")
            body: dict[str, Any] = {"name": name, "mass": self.number(raw["mass"], path + ("mass",), low=0.0)}
            if "radius" in raw:
                body["radius"] = self.number(raw["radius"], path + ("radius",), low=0.0)
            has_cartesian = "position" in raw or "velocity" in raw
            has_elements = "primary" in raw or any(k in raw for k in ELEMENTS)
            if has_cartesian and has_elements:
                raise self.error(path, f"[[body]] #{i + 1} ({name!r}) mixes a Cartesian state (position, "
                                 "velocity) with orbital elements (primary, ...); give one or the other")
            if has_elements:
                if "primary" not in raw:
                    raise self.error(path, f"[[body]] #{i + 1} ({name!r}) gives orbital elements but no "
                                     "'primary' (the name of an earlier body it orbits)")
                primary = self.string(raw["primary"], path + ("primary",))
                if primary not in seen - {name}:
                    raise self.error(path + ("primary",), f"[[body]] #{i + 1} ({name!r}) key 'primary': "
                                     f"{primary!r} is not a body defined before it")
                body["primary"] = primary
                for key in ELEMENTS:
                    if key == "semi_major_axis" and key not in raw:
                        raise self.error(path, f"[[body]] #{i + 1} ({name!r}) needs 'semi_major_axis'")
                    if key == "inclination" and key in raw:
                        body[key] = self.number(raw[key], path + (key,), low=0.0,
                                                high=180.0 if angle_unit == "degree" else math.pi)
                    elif key in raw:
                        body[key] = self.number(raw[key], path + (key,))
                self.check_orbit(body, path, f"[[body]] #{i + 1} ({name!r})")
            else:
                for key in ("position", "velocity"):
                    if key not in raw:
                        raise self.error(path, f"[[body]] #{i + 1} ({name!r}) has no '{key}': give position "
                                         "and velocity, or a primary and orbital elements")
                    body[key] = self.vector(raw[key], path + (key,))
            bodies.append(body)
        if not any(b["mass"] > 0 for b in bodies):
            raise self.error(("body", 0, "mass"), "every body has mass 0; at least one must be massive")
        return bodies

    def check_orbit(self, body: dict, path: tuple, label: str) -> None:
        a = body["semi_major_axis"]
        e = body.get("eccentricity", 0.0)
        if e < 0:
            raise self.error(path + ("eccentricity",), f"{label} key 'eccentricity' must be >= 0, got {e!r}")
        if e == 1:
            raise self.error(path + ("eccentricity",), f"{label} key 'eccentricity' is 1 (parabolic); "
                             "give e < 1 with a > 0 or e > 1 with a < 0")
        if (e < 1) != (a > 0):
            raise self.error(path + ("semi_major_axis",), f"{label} key 'semi_major_axis' must be > 0 for "
                             f"e < 1 and < 0 for e > 1, got a = {a!r} with e = {e!r}")

    def populations(self, value: Any, names: set[str], bodies: list[dict]) -> list[Population]:
        if not isinstance(value, list):
            raise self.error(("population",), "'population' must be an array of tables written [[population]]")
        out: list[Population] = []
        masses = {b["name"]: b["mass"] for b in bodies}
        for k, raw in enumerate(value):
            path = ("population", k)
            if not isinstance(raw, dict):
                raise self.error(path, f"[[population]] #{k + 1} must be a table")
            self.check_keys(raw, path, _POPULATION_KEYS)
            for key in ("name", "count", "primary", "seed"):
                if key not in raw:
                    raise self.error(path, f"[[population]] #{k + 1} has no {key!r} "
                                     f"({'an integer' if key in ('count', 'seed') else 'a string'})")
            name = self.string(raw["name"], path + ("name",))
            count = self.integer(raw["count"], path + ("count",), 1)
            seed = self.integer(raw["seed"], path + ("seed",), 0)
            primary = self.string(raw["primary"], path + ("primary",))
            if primary not in names:
                raise self.error(path + ("primary",), f"[[population]] #{k + 1} key 'primary': {primary!r} "
                                 f"is not a body; expected one of {', '.join(sorted(names))}")
            if masses[primary] <= 0:
                raise self.error(path + ("primary",), f"[[population]] #{k + 1} key 'primary': {primary!r} "
                                 "has mass 0; particles need a massive primary")
            if "semi_major_axis" not in raw:
                raise self.error(path, f"[[population]] #{k + 1} ({name!r}) needs 'semi_major_axis'")
            elements = {key: self.distribution(raw[key], path + (key,)) for key in ELEMENTS if key in raw}
            radius = self.number(raw.get("radius", 0.0), path + ("radius",), low=0.0)
            out.append(Population(name, count, primary, seed, elements, radius))
        return out

    def distribution(self, value: Any, path: tuple) -> Any:
        if not isinstance(value, dict):
            return self.number(value, path)
        label = self.label(path)
        kind = value.get("distribution")
        if kind not in _DISTRIBUTIONS:
            raise self.error(path, f"{label}: 'distribution' must be one of {', '.join(map(repr, _DISTRIBUTIONS))}, "
                             f"got {kind!r}")
        params = _DISTRIBUTIONS[kind]
        for key in value:
            if key != "distribution" and key not in params:
                raise self.error(path, f"{label}: unknown parameter {key!r} for a {kind} distribution; "
                                 f"expected {', '.join(params)}")
        spec: dict[str, Any] = {"distribution": kind}
        for key in params:
            if key not in value:
                raise self.error(path, f"{label}: a {kind} distribution needs {', '.join(params)}; "
                                 f"{key!r} is missing")
            spec[key] = self.number(value[key], path)
        if "min" in spec and spec["max"] <= spec["min"]:
            raise self.error(path, f"{label}: 'max' must be > 'min', got min = {spec['min']!r}, "
                             f"max = {spec['max']!r}")
        if kind in ("loguniform", "powerlaw") and spec["min"] <= 0:
            raise self.error(path, f"{label}: a {kind} distribution needs min > 0, got {spec['min']!r}")
        if kind == "normal" and spec["sd"] < 0:
            raise self.error(path, f"{label}: 'sd' must be >= 0, got {spec['sd']!r}")
        if kind == "rayleigh" and spec["scale"] <= 0:
            raise self.error(path, f"{label}: 'scale' must be > 0, got {spec['scale']!r}")
        return spec

    def integrator(self, table: dict) -> dict[str, Any]:
        from .methods import METHODS

        if "method" not in table:
            raise self.error(("integrator",), "[integrator] has no 'method'; expected one of "
                             f"{', '.join(sorted(METHODS))}")
        method = self.string(table["method"], ("integrator", "method"), tuple(sorted(METHODS)))
        adaptive = METHODS[method].adaptive
        out: dict[str, Any] = {"method": method, "step": None, "tolerance": None}
        if adaptive:
            if "step" in table:
                raise self.error(("integrator", "step"), f"[integrator] key 'step': method {method!r} "
                                 "chooses its own steps; give 'tolerance' instead")
            if "tolerance" in table:
                out["tolerance"] = self.number(table["tolerance"], ("integrator", "tolerance"), low=0.0,
                                               strict_low=True)
        else:
            if "tolerance" in table:
                raise self.error(("integrator", "tolerance"), f"[integrator] key 'tolerance': method "
                                 f"{method!r} has a fixed step; give 'step' instead")
            if "step" not in table:
                raise self.error(("integrator",), f"[integrator] needs 'step' for method {method!r} "
                                 "(in the time unit; negative integrates backward)")
            out["step"] = self.number(table["step"], ("integrator", "step"), nonzero=True)
        out["softening"] = self.number(table.get("softening", 0.0), ("integrator", "softening"), low=0.0)
        out["threads"] = None if "threads" not in table else self.integer(table["threads"],
                                                                          ("integrator", "threads"), 1)
        options = table.get("options", {})
        if not isinstance(options, dict):
            raise self.error(("integrator", "options"), "[integrator] key 'options' must be a table "
                             "[integrator.options]")
        out["options"] = dict(options)
        return out


def parse(text: str, source: str = "<scenario>", directory: str = ".") -> Scenario:
    """Parse scenario text (TOML); ``source`` names it in error messages.

    Raises
    ------
    ScenarioError
        Naming the source, the line, the key and what was expected.
    """
    parser = _Parser(text, source)
    fields = parser.parse()
    scenario = Scenario(**fields, text=text, source=source, directory=directory)
    scenario._lines = parser.lines
    return scenario


def load(path: str | os.PathLike) -> Scenario:
    """Read and parse a scenario file (paths inside it are relative to its directory)."""
    path = os.fspath(path)
    try:
        with open(path, "rb") as fh:
            raw = fh.read()
    except OSError as exc:
        raise ScenarioError(f"cannot read scenario file {path}: {exc.strerror or exc}") from None
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError as exc:
        raise ScenarioError(f"{path}: not UTF-8 text (byte {exc.start}); a scenario is a TOML text file") from None
    return parse(text, path, os.path.dirname(os.path.abspath(path)))


def demo_text() -> str:
    """The text of the demo scenario shipped with libration (``libration demo --write``)."""
    return resources.files("libration").joinpath("data/demo.toml").read_text(encoding="utf-8")


def demo() -> Scenario:
    """The parsed demo scenario."""
    return parse(demo_text(), "demo.toml")


# ---------------------------------------------------------------------------------------------
# sampling and the two-body orbit
# ---------------------------------------------------------------------------------------------
def _draw(rng: np.random.Generator, spec: Any, count: int) -> np.ndarray:
    if not isinstance(spec, dict):
        return np.full(count, float(spec))
    kind = spec["distribution"]
    if kind == "uniform":
        return rng.uniform(spec["min"], spec["max"], count)
    if kind == "loguniform":
        return np.exp(rng.uniform(math.log(spec["min"]), math.log(spec["max"]), count))
    if kind == "powerlaw":
        k, lo, hi = spec["exponent"] + 1.0, spec["min"], spec["max"]
        u = rng.uniform(0.0, 1.0, count)
        if abs(k) < 1e-12:
            return lo * (hi / lo) ** u
        return (lo**k + u * (hi**k - lo**k)) ** (1.0 / k)
    if kind == "normal":
        return rng.normal(spec["mean"], spec["sd"], count)
    if kind == "rayleigh":
        return rng.rayleigh(spec["scale"], count)
    raise AssertionError(kind)  # pragma: no cover - validated while parsing


def _element_problem(drawn: dict[str, np.ndarray]) -> tuple[int, str] | None:
    a, e, inc = drawn["semi_major_axis"], drawn["eccentricity"], drawn["inclination"]
    checks = [(~((inc >= 0) & (inc <= math.pi)), "an inclination outside [0, 180] degrees",
               lambda j: f"{math.degrees(inc[j])!r} degrees"),
              (e < 0, "eccentricity < 0", None), (e == 1, "eccentricity = 1 (parabolic)", None),
              ((e < 1) != (a > 0), "a semi-major axis whose sign does not match the eccentricity "
                                   "(a > 0 needs e < 1, a < 0 needs e > 1)", None)]
    for mask, text, value in checks:
        if mask.any():
            j = int(np.flatnonzero(mask)[0])
            got = value(j) if value else f"a = {a[j]!r}, e = {e[j]!r}"
            return j, f"{text} ({got})"
    return None


def _relative_state(mu: float, a, e, inc, node, peri, mean) -> tuple[np.ndarray, np.ndarray]:
    """Position and velocity relative to the primary of two-body orbits (angles in radians)."""
    from .elements import elements_to_cartesian

    position, velocity = elements_to_cartesian(mu, a, e, inc, node, peri, mean)
    return np.atleast_2d(position), np.atleast_2d(velocity)
