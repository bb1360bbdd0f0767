"""The registry of stepping methods and the contract every method meets.

A method is a subclass of :class:`Integrator` registered under the trade's name of the
method.  The base class validates options, owns copies of the state arrays and the scratch
buffers of the compiled kernels (never module globals, so two propagators in two threads
share nothing), and defines the small interface the :class:`~libration.Propagator` uses:

* fixed-step methods implement :meth:`Integrator.take_steps`;
* adaptive methods implement :meth:`Integrator.advance_to` and :meth:`Integrator.state_at`;
* all implement :meth:`Integrator.state`, :meth:`Integrator.memory` and
  :meth:`Integrator.restore` (everything needed to continue bit for bit).

Compositions (leapfrog and Yoshida's) are defined here by their coefficients only; the
loop is the compiled ``libration._symplectic.run_composition``.
"""
from __future__ import annotations

import copy
import math
from dataclasses import dataclass, field
from typing import Any, ClassVar

import numpy as np

from . import _gravity, _symplectic
from .exceptions import MethodError

STATUS_OK = 0
STATUS_SINGULAR = 1
STATUS_NO_CONVERGENCE = 2
STATUS_STEP_UNDERFLOW = 3
STATUS_MAX_STEPS = 4
STATUS_EVENT = 5


@dataclass
class StepReport:
    """What a kernel call did: steps taken, a status code (0 = success) and details."""

    steps_done: int = 0
    status: int = STATUS_OK
    message: str = ""
    event: dict[str, Any] | None = None
    bodies: tuple[int, ...] = field(default_factory=tuple)


METHODS: dict[str, type[Integrator]] = {}


def register(cls: type[Integrator]) -> type[Integrator]:
    """Class decorator: add a method to the registry under ``cls.name``."""
    METHODS[cls.name] = cls
    return cls


def get_method(name: str) -> type[Integrator]:
    """Return the integrator class registered as ``name``; unknown names list the known ones."""
    if not isinstance(name, str) or name not in METHODS:
        raise MethodError(f"method must be one of {', '.join(sorted(METHODS))}, got {name!r}")
    return METHODS[name]


class Integrator:
    """Base class of all stepping methods (see the module docstring for the contract).

    Parameters
    ----------
    mass, position, velocity : ndarray
        State arrays (copied): shapes (n,), (n, 3), (n, 3).
    n_active : int
        Number of massive bodies (indices below it).
    G : float
        Gravitational constant in the system's units.
    step : float, optional
        Fixed step in the time unit (fixed-step methods); negative integrates backward.
    tolerance : float, optional
        Relative error tolerance (adaptive methods).
    softening : float
        Plummer softening length, in the length unit.
    threads : int
        OpenMP threads for the force kernel.
    radius : ndarray, optional
        Body radii (length unit), for collision events.
    events : EventSettings, optional
        Event detection settings (see :mod:`libration.events`).
    **options
        Method options, checked against ``option_defaults``.
    """

    name: ClassVar[str] = ""
    adaptive: ClassVar[bool] = False
    order: ClassVar[int] = 0
    option_defaults: ClassVar[dict[str, Any]] = {}

    def __init__(self, mass, position, velocity, n_active: int, G: float, *, step: float | None = None,
                 tolerance: float | None = None, softening: float = 0.0, threads: int = 1,
                 radius=None, events=None, **options: Any) -> None:
        self.mass = np.array(mass, dtype=np.float64, order="C")
        self.position = np.array(position, dtype=np.float64, order="C")
        self.velocity = np.array(velocity, dtype=np.float64, order="C")
        n = self.mass.shape[0]
        self.radius = np.zeros(n) if radius is None else np.array(radius, dtype=np.float64, order="C")
        self.n_active = int(n_active)
        self.G = float(G)
        self.step = None if step is None else float(step)
        self.tolerance = None if tolerance is None else float(tolerance)
        self.softening = float(softening)
        self.threads = int(threads)
        self.events = events
        self.event_config = (np.zeros(_symplectic.event_config_size(), dtype=np.uint8) if events is None
                             else np.ascontiguousarray(events.kernel_config(), dtype=np.uint8))
        unknown = sorted(set(options) - set(self.option_defaults))
        if unknown:
            known = ", ".join(sorted(self.option_defaults)) or "none"
            raise MethodError(f"method {self.name!r} has no option {unknown[0]!r}; its options are: {known}")
        self.options = {**self.option_defaults, **options}
        self._acc = np.zeros((n, 3))
        self._soa = _gravity.workspace(self.n_active)

    # ------------------------------------------------------------------ stepping
    def take_steps(self, n: int) -> StepReport:
        """Advance by ``n`` fixed steps in one compiled call (fixed-step methods)."""
        raise NotImplementedError(f"{self.name} is adaptive: use advance_to()")

    def advance_to(self, t: float) -> StepReport:
        """Take accepted steps until the internal time reaches ``t`` (adaptive methods)."""
        raise NotImplementedError(f"{self.name} has a fixed step: use take_steps()")

    def state_at(self, t: float):
        """Dense-output state ``(mass, position, velocity)`` at ``t`` (adaptive methods)."""
        raise NotImplementedError(f"{self.name} has a fixed step: use finish_on_copy()")

    # --------------------------------------------------------------------- state
    def state(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Synchronised copies ``(mass, position, velocity)`` in the inertial input frame."""
        return self.mass.copy(), self.position.copy(), self.velocity.copy()

    def clone(self) -> Integrator:
        """An independent deep copy (used to finish off-grid outputs without touching the run)."""
        return copy.deepcopy(self)

    def finish_on_copy(self, dt: float):
        """State after a partial step ``dt`` taken on a clone; the integrator itself is unchanged."""
        other = self.clone()
        other.step = float(dt)
        report = other.take_steps(1)
        if report.status != STATUS_OK and report.status != STATUS_EVENT:
            raise_for_status(report)
        return other.state()

    def memory(self) -> dict[str, Any]:
        """Everything needed to continue bit for bit (flat dict of arrays and scalars)."""
        # The event configuration also carries the detector's memory (which conditions are
        # ongoing), so a restart neither repeats nor misses an event.
        return {"mass": self.mass.copy(), "position": self.position.copy(),
                "velocity": self.velocity.copy(), "radius": self.radius.copy(),
                "event_config": self.event_config.copy()}

    def restore(self, memory: dict[str, Any]) -> None:
        """Inverse of :meth:`memory`."""
        for key in ("mass", "position", "velocity", "radius"):
            setattr(self, key, np.array(memory[key], dtype=np.float64, order="C"))
        config = memory.get("event_config")
        if config is not None and np.asarray(config).size == self.event_config.size:
            self.event_config = np.array(config, dtype=np.uint8, order="C")


def raise_for_status(report: StepReport) -> None:
    """Turn a failing kernel status into the matching exception."""
    from .exceptions import ConvergenceError, SingularityError

    if report.status == STATUS_SINGULAR:
        raise SingularityError(report.message or "a kernel met a zero distance or a non-finite value")
    if report.status == STATUS_NO_CONVERGENCE:
        raise ConvergenceError(report.message or "an iterative solver did not converge")


class Composition(Integrator):
    """Symmetric composition of the kick-drift-kick leapfrog with stage weights ``weights``."""

    weights: ClassVar[tuple[float, ...]] = (1.0,)

    def __init__(self, *args: Any, **kwargs: Any) -> None:
        super().__init__(*args, **kwargs)
        w = np.asarray(self.weights, dtype=np.float64)
        self._drift = np.ascontiguousarray(w)
        kick = np.empty(w.size + 1)
        kick[0] = 0.5 * w[0]
        kick[1:-1] = 0.5 * (w[:-1] + w[1:])
        kick[-1] = 0.5 * w[-1]
        self._kick = kick

    def take_steps(self, n: int) -> StepReport:
        status, done, body_i, body_j = _symplectic.run_composition(
            self.position, self.velocity, self.mass, self.radius, self.n_active, self.G,
            self.softening, self.step, self._kick, self._drift, int(n), self._acc.reshape(-1),
            self._soa, self.threads, self.event_config)
        report = StepReport(done, status, bodies=tuple(b for b in (body_i, body_j) if b >= 0))
        if status == STATUS_SINGULAR:
            report.message = (f"body {body_i} met a zero distance (or a non-finite acceleration) "
                              f"after {done} steps; separate the bodies, use softening, or enable "
                              f"collision events")
        return report


def _triple_jump(order: int) -> tuple[float, float]:
    """Yoshida's (1990) triple-jump weights raising a symmetric order-``order`` method by two."""
    root = 2.0 ** (1.0 / (order + 1))
    w1 = 1.0 / (2.0 - root)
    return w1, -root * w1


def _symmetric(half: tuple[float, ...]) -> tuple[float, ...]:
    """Yoshida's composition w_m ... w_1 w_0 w_1 ... w_m from (w_1..w_m), w_0 = 1 - 2 sum."""
    w0 = 1.0 - 2.0 * math.fsum(half)
    outer = tuple(reversed(half))
    return outer + (w0,) + tuple(half)


@register
class Leapfrog(Composition):
    """Kick-drift-kick leapfrog (Störmer–Verlet), second order, one force evaluation per step."""

    name = "leapfrog"
    order = 2
    weights = (1.0,)


@register
class Yoshida4(Composition):
    """Fourth order: Yoshida (1990, Phys. Lett. A 150, 262) triple jump, Eq. (4.12)-style weights."""

    name = "yoshida4"
    order = 4
    weights = (lambda w1, w0: (w1, w0, w1))(*_triple_jump(2))


@register
class Yoshida6(Composition):
    """Sixth order: Yoshida (1990), Table 1, solution A (7 stages)."""

    name = "yoshida6"
    order = 6
    weights = _symmetric((-0.117767998417887e1, 0.235573213359357e0, 0.784513610477560e0))


@register
class Yoshida8(Composition):
    """Eighth order: Yoshida (1990), Table 2, solution D (15 stages)."""

    name = "yoshida8"
    order = 8
    weights = _symmetric((0.102799849391985e0, -0.196061023297549e1, 0.193813913762276e1,
                          -0.158240635368243e0, -0.144485223686048e1, 0.253693336566229e0,
                          0.914844246229740e0))


# Other method families register themselves on import (kept at the bottom: they subclass Integrator).
from . import bulirsch_stoer  # noqa: E402,F401  (registers bulirsch-stoer)
from . import wisdom_holman  # noqa: E402,F401  (registers wisdom-holman)
