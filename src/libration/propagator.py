"""Propagator: owns the state and the kernel's workspace, and advances it in time."""
from __future__ import annotations

import json
import math
import os
import warnings
from typing import Any

import numpy as np

from ._version import __version__
from .exceptions import MethodError, ValidationError
from .methods import (STATUS_EVENT, STATUS_MAX_STEPS, STATUS_OK, STATUS_STEP_UNDERFLOW, Integrator,
                      StepReport, get_method, raise_for_status)
from .system import System
from .units import get_units

# One compiled call should take roughly this many pair interactions, so that the call
# overhead is negligible while Ctrl-C, progress and checkpoints stay responsive.
_CHUNK_INTERACTIONS = 2.0e8


def _default_threads() -> int:
    value = os.environ.get("OMP_NUM_THREADS", "")
    try:
        threads = int(value.split(",")[0])
    except ValueError:
        return 1
    return max(threads, 1)


def _finite_number(value: Any, name: str, *, positive: bool = False, nonzero: bool = False) -> float:
    try:
        number = float(value)
    except (TypeError, ValueError) as exc:
        raise ValidationError(f"{name} must be a finite number, got {value!r}") from exc
    if not math.isfinite(number):
        raise ValidationError(f"{name} must be finite, got {value!r}")
    if positive and number <= 0:
        raise ValidationError(f"{name} must be > 0, got {value!r}")
    if nonzero and number == 0:
        raise ValidationError(f"{name} must be nonzero (negative integrates backward), got {value!r}")
    return number


class Propagator:
    """Advance a :class:`System` in time with one stepping method.

    Parameters
    ----------
    system : System
        Initial state (copied).
    method : str
        A registered method: ``leapfrog``, ``yoshida4``, ``yoshida6``, ``yoshida8``,
        ``wisdom-holman``, ``bulirsch-stoer``.
    step : float, optional
        Fixed step, in the system's time unit (fixed-step methods; negative integrates
        backward).
    tolerance : float, optional
        Relative tolerance (adaptive methods; default 1e-12).
    softening : float
        Plummer softening length, in the length unit (default 0).
    threads : int, optional
        OpenMP threads for the force kernel (default: OMP_NUM_THREADS, else 1).  Results
        are bitwise the same for any thread count.
    events : dict, optional
        Collision, encounter and escape detection (see :mod:`libration.events`).
    time : float
        The system's initial time, in the time unit (default 0).
    **options
        Method options (for example ``coordinates="jacobi"`` for ``wisdom-holman``).

    Notes
    -----
    Fixed-step time is ``t0 + steps * step`` from an integer step count.  A requested time
    off the step grid is reached by finishing a partial step on a copy, so advancing to T in
    one call or in many calls gives bit-for-bit the same state.
    """

    def __init__(self, system: System, method: str = "leapfrog", *, step: float | None = None,
                 tolerance: float | None = None, softening: float = 0.0, threads: int | None = None,
                 events: dict | None = None, time: float = 0.0, **options: Any) -> None:
        if not isinstance(system, System):
            raise ValidationError(f"system must be a libration.System, got {type(system).__name__}")
        cls = get_method(method)
        if cls.adaptive:
            if step is not None:
                raise MethodError(f"method {method!r} chooses its own steps; pass tolerance=, not step=")
            tolerance = _finite_number(1e-12 if tolerance is None else tolerance, "tolerance", positive=True)
        else:
            if step is None:
                raise MethodError(f"method {method!r} needs a fixed step: pass step= (in the time unit)")
            if tolerance is not None:
                raise MethodError(f"method {method!r} has a fixed step; tolerance= does not apply")
            step = _finite_number(step, "step", nonzero=True)
        softening = _finite_number(softening, "softening")
        if softening < 0:
            raise ValidationError(f"softening must be >= 0, got {softening!r}")
        if threads is None:
            threads = _default_threads()
        if isinstance(threads, bool) or not isinstance(threads, (int, np.integer)) or threads < 1:
            raise ValidationError(f"threads must be an integer >= 1, got {threads!r}")
        self.t0 = _finite_number(time, "time")
        self.method = method
        self.units = system.units
        self.names = list(system.names)
        self.event_settings = None
        if events is not None:
            from .events import EventSettings
            self.event_settings = EventSettings.from_user(events)
        self.event_log: list[dict[str, Any]] = []
        self.status = STATUS_OK
        self.message = ""
        self._settings = {"step": step, "tolerance": tolerance, "softening": softening,
                          "threads": int(threads)}
        self.integrator: Integrator = cls(system.mass, system.position, system.velocity, system.n_active,
                                          system.G, radius=system.radius, events=self.event_settings,
                                          **self._settings, **options)
        self.options = dict(self.integrator.options)
        self._steps = 0
        self._time = self.t0
        self._offgrid: tuple[np.ndarray, np.ndarray, np.ndarray] | None = None
        if cls.adaptive:
            self.integrator.time = self.t0  # adaptive methods keep their own clock

    # ---------------------------------------------------------------- properties
    @property
    def time(self) -> float:
        """Time of :attr:`system`, in the time unit."""
        return self._time

    @property
    def steps(self) -> int:
        """Number of steps taken (fixed step: the grid index; adaptive: accepted steps)."""
        return self._steps

    @property
    def step(self) -> float | None:
        """The fixed step (None for adaptive methods)."""
        return self._settings["step"]

    @property
    def tolerance(self) -> float | None:
        """The relative tolerance (None for fixed-step methods)."""
        return self._settings["tolerance"]

    @property
    def softening(self) -> float:
        """The Plummer softening length, in the length unit."""
        return self._settings["softening"]

    @property
    def system(self) -> System:
        """A copy of the system at :attr:`time` (synchronised; the run is not affected)."""
        mass, position, velocity = self._state()
        return System._trusted(mass, position, velocity, self.units, self.names, self.integrator.radius.copy())

    def _state(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        if self._offgrid is not None:
            return tuple(a.copy() for a in self._offgrid)  # type: ignore[return-value]
        if self.integrator.adaptive:
            return self.integrator.state_at(self._time)
        return self.integrator.state()

    def energy(self) -> float:
        """Total energy of the system at :attr:`time` (mass * length^2 / time^2)."""
        mass, position, velocity = self._state()
        system = System._trusted(mass, position, velocity, self.units, self.names, self.integrator.radius)
        return system.energy(self._settings["softening"])

    # ------------------------------------------------------------------ stepping
    def _grid_time(self, steps: int) -> float:
        return self.t0 + steps * self._settings["step"]

    def _chunk(self) -> int:
        n = self.integrator.mass.shape[0]
        stages = max(len(getattr(self.integrator, "weights", (1,))), 1)
        return max(1, int(_CHUNK_INTERACTIONS / max(1, n * max(self.integrator.n_active, 1) * stages)))

    def advance(self, t: float) -> StepReport:
        """Advance to the absolute time ``t`` (time unit); return the last kernel report.

        The run stops early on a stopping event (see :attr:`event_log`) or, for adaptive
        methods, when the step underflows or the step limit is reached; then
        :attr:`status` and :attr:`message` say why and a warning is issued.
        """
        t = _finite_number(t, "t")
        if self.integrator.adaptive:
            return self._advance_adaptive(t)
        step = self._settings["step"]
        if (t - self._time) * step < 0:
            raise ValidationError(
                f"t = {t!r} lies behind the current time {self._time!r} for step {step!r}; "
                f"to integrate backward, create a Propagator with a negative step")
        # Largest grid index not beyond t (a float exactly on the grid counts as on it).
        target = math.floor((t - self.t0) / step)
        if self._grid_time(target + 1) * math.copysign(1, step) <= t * math.copysign(1, step):
            target += 1
        while target > 0 and self._grid_time(target) * math.copysign(1, step) > t * math.copysign(1, step):
            target -= 1
        report = StepReport()
        while self._steps < target:
            n = min(target - self._steps, self._chunk())
            report = self.integrator.take_steps(n)
            self._steps += report.steps_done
            self._offgrid = None
            self._time = self._grid_time(self._steps)
            if report.status == STATUS_EVENT:
                if not self._handle_event(report):
                    return report
                continue
            if report.status != STATUS_OK:
                self._fail(report)
        grid = self._grid_time(self._steps)
        if t != grid:
            self._offgrid = self.integrator.finish_on_copy(t - grid)
        else:
            self._offgrid = None
        self._time = t
        return report

    def _advance_adaptive(self, t: float) -> StepReport:
        while True:
            report = self.integrator.advance_to(t)
            self._steps += report.steps_done
            if report.status == STATUS_EVENT:
                self._time = float(report.event.get("time", t)) if report.event else t
                if not self._handle_event(report):
                    return report
                continue
            if report.status in (STATUS_STEP_UNDERFLOW, STATUS_MAX_STEPS):
                self.status, self.message = report.status, report.message
                self._time = float(getattr(self.integrator, "time", self._time))
                warnings.warn(report.message, RuntimeWarning, stacklevel=3)
                return report
            if report.status != STATUS_OK:
                self._fail(report)
            self._time = t
            return report

    def _handle_event(self, report: StepReport) -> bool:
        from . import events

        return events.handle(self, report)

    def _fail(self, report: StepReport) -> None:
        self.status, self.message = report.status, report.message
        raise_for_status(report)
        raise RuntimeError(f"kernel returned status {report.status}: {report.message}")

    def _rebuild(self, mass, position, velocity, radius, names) -> None:
        """Replace the bodies (after a merger or removal); the method and settings stay."""
        system = System(mass, position, velocity, self.units, names, radius)
        cls = type(self.integrator)
        self.integrator = cls(system.mass, system.position, system.velocity, system.n_active, system.G,
                              radius=system.radius, events=self.event_settings, **self._settings,
                              **self.options)
        self.names = list(system.names)
        # Restart the fixed-step grid at the current time: t0 + steps * step stays exact.
        self.t0 = self._time - self._steps * self._settings["step"] if not cls.adaptive else self.t0
        self._offgrid = None

    # --------------------------------------------------------------- persistence
    def to_memory(self) -> dict[str, Any]:
        """Everything needed to continue exactly, as a flat dict of arrays, numbers and strings."""
        memory: dict[str, Any] = {
            "library_version": __version__,
            "method": self.method,
            "options_json": json.dumps(self.options, sort_keys=True),
            "settings_json": json.dumps(self._settings, sort_keys=True),
            "events_json": json.dumps(None if self.event_settings is None else self.event_settings.to_user()),
            "units": self.units.name,
            "names_json": json.dumps(self.names),
            "t0": self.t0,
            "time": self._time,
            "steps": self._steps,
            "status": self.status,
            "message": self.message,
            "event_log_json": json.dumps(self.event_log, default=_json_default),
        }
        mass, position, velocity = self.integrator.state()
        memory.update({"system/mass": mass, "system/position": position, "system/velocity": velocity,
                       "system/radius": self.integrator.radius.copy()})
        for key, value in self.integrator.memory().items():
            memory[f"integrator/{key}"] = value
        return memory

    @classmethod
    def from_memory(cls, memory: dict[str, Any]) -> Propagator:
        """Rebuild a propagator from :meth:`to_memory` output (bit-exact continuation)."""
        integrator_memory = {k.split("/", 1)[1]: v for k, v in memory.items() if k.startswith("integrator/")}
        names = json.loads(memory["names_json"])
        system = System(memory["system/mass"], memory["system/position"], memory["system/velocity"],
                        get_units(str(memory["units"])), names, memory["system/radius"])
        settings = json.loads(memory["settings_json"])
        events = json.loads(memory["events_json"])
        self = cls(system, str(memory["method"]), step=settings["step"], tolerance=settings["tolerance"],
                   softening=settings["softening"], threads=settings["threads"], events=events,
                   time=float(memory["t0"]), **json.loads(memory["options_json"]))
        self.integrator.restore(integrator_memory)
        self._steps = int(memory["steps"])
        self.status = int(memory["status"])
        self.message = str(memory["message"])
        self.event_log = json.loads(memory["event_log_json"])
        target = float(memory["time"])
        self._time = target
        if not self.integrator.adaptive:
            grid = self._grid_time(self._steps)
            self._offgrid = None if target == grid else self.integrator.finish_on_copy(target - grid)
        return self

    def run(self, until: float, **kwargs: Any):
        """Advance to ``until`` streaming output and checkpoints; see :func:`libration.io.runner.run`."""
        from .io.runner import run

        return run(self, until, **kwargs)

    def save(self, path) -> None:
        """Write a checkpoint to ``path`` (atomically); see :mod:`libration.io.checkpoint`."""
        from .io.checkpoint import save

        save(self, path)

    @classmethod
    def load(cls, path) -> Propagator:
        """Read a checkpoint written by :meth:`save` and continue from it exactly."""
        from .io.checkpoint import load

        return load(path)

    def __repr__(self) -> str:
        return (f"Propagator(method={self.method!r}, time={self._time!r}, steps={self._steps}, "
                f"n={self.integrator.mass.shape[0]})")


def _json_default(value: Any) -> Any:
    if isinstance(value, np.ndarray):
        return value.tolist()
    if isinstance(value, np.generic):
        return value.item()
    raise TypeError(f"cannot store {type(value).__name__} in the event log")
