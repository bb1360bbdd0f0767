"""Close encounters, collisions and escapes: detection settings and the chosen responses.

Detection runs in the compiled loops after every step (``ext/events_kernel.h``):

* **collision** -- two bodies closer than the sum of their radii;
* **encounter** -- two bodies closer than ``encounter_hill`` mutual Hill radii, taken about
  body 0 as the primary: R_H = ((m_i + m_j) / (3 m_0))^(1/3) (d_i + d_j) / 2 with d the
  distances from body 0 (Hill radius: common practice);
* **escape** -- a body farther than ``escape_distance`` from the barycentre of the massive
  bodies and unbound (positive two-body energy) relative to all the others.

Pairs are checked when at least one member is massive (test particles among themselves
are not).  A condition that keeps holding (a slow encounter, a receding escaper) is
reported once, when it starts, and again only after it has stopped holding.  Several
conditions starting in the same step are all handled (a recorded event is followed by a
check for the next one on the same state).
Bulirsch–Stoer also sweeps each step for contacts that begin and end inside it (its steps
can be long); fixed-step methods see the step ends only, so choose the step small compared
with the duration of the contacts that matter.

Responses (the value of each key in the user dict):

==========  ==================================================================================
``stop``    the propagator returns at the step where the event was detected; the event log
            holds the located time, the bodies and their state
``record``  log it and go on
``merge``   (collisions) perfectly inelastic merger: mass, momentum and centre of mass are
            conserved, the radius comes from the summed volumes; the heavier body's name stays
``remove``  drop the body (collisions: the lighter of the two; escapes: the escaper) and log
            its state
==========  ==================================================================================

The event time is located without touching the trajectory: for Bulirsch–Stoer by root
finding on the dense output inside the accepted step; for fixed-step methods by root
finding over partial steps taken backward from the step end on a copy.
"""
from __future__ import annotations

import math
from dataclasses import asdict, dataclass
from typing import Any, Callable

import numpy as np

from . import _extrapolation
from .exceptions import ValidationError

STATUS_EVENT = 5

_RESPONSES = {
    "collision": ("stop", "record", "merge", "remove"),
    "encounter": ("stop", "record"),
    "escape": ("stop", "record", "remove"),
}
_KEYS = ("collision", "encounter", "encounter_hill", "escape", "escape_distance")


def _positive(value: Any, key: str) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float, np.integer, np.floating)):
        raise ValidationError(f"events[{key!r}] must be a number > 0, got {value!r}")
    number = float(value)
    if not (math.isfinite(number) and number > 0):
        raise ValidationError(f"events[{key!r}] must be finite and > 0, got {value!r}")
    return number


@dataclass(frozen=True)
class EventSettings:
    """Which events are checked and what each one does (``None``: not checked).

    Attributes
    ----------
    collision : str or None
        ``"stop"``, ``"record"``, ``"merge"`` or ``"remove"``.
    encounter : str or None
        ``"stop"`` or ``"record"``.
    encounter_hill : float
        Encounter distance in mutual Hill radii (dimensionless, default 3).
    escape : str or None
        ``"stop"``, ``"record"`` or ``"remove"``.
    escape_distance : float
        Escape distance from the barycentre, in the system's length unit (default 100).
    """

    collision: str | None = None
    encounter: str | None = None
    encounter_hill: float = 3.0
    escape: str | None = None
    escape_distance: float = 100.0

    @classmethod
    def from_user(cls, user: dict[str, Any] | EventSettings) -> EventSettings:
        """Validate a user dict such as ``{"collision": "merge", "escape": "record",
        "escape_distance": 1000.0}`` (unknown keys and responses raise ValidationError)."""
        if isinstance(user, EventSettings):
            return user
        if not isinstance(user, dict):
            raise ValidationError(f"events must be a dict with keys among {', '.join(_KEYS)}, "
                                  f"got {type(user).__name__}")
        unknown = sorted(set(user) - set(_KEYS))
        if unknown:
            raise ValidationError(f"events has no key {unknown[0]!r}; the keys are: {', '.join(_KEYS)}")
        values: dict[str, Any] = {}
        for kind, allowed in _RESPONSES.items():
            response = user.get(kind)
            if response is not None and response not in allowed:
                raise ValidationError(f"events[{kind!r}] must be one of {', '.join(allowed)} (or None), "
                                      f"got {response!r}")
            values[kind] = response
        values["encounter_hill"] = _positive(user.get("encounter_hill", 3.0), "encounter_hill")
        values["escape_distance"] = _positive(user.get("escape_distance", 100.0), "escape_distance")
        return cls(**values)

    def to_user(self) -> dict[str, Any]:
        """The user dict again (JSON-serialisable; ``from_user(to_user())`` is the identity)."""
        return asdict(self)

    @property
    def enabled(self) -> bool:
        """True if any check is on."""
        return any(getattr(self, kind) is not None for kind in _RESPONSES)

    def response(self, kind: str) -> str:
        """The response chosen for an event kind (``"record"`` if it was not asked for)."""
        return getattr(self, kind) or "record"

    def kernel_config(self) -> np.ndarray:
        """A fresh, writable ``lb_event_config`` (uint8 bytes) for the compiled loops."""
        return _extrapolation.make_event_config(
            self.collision is not None, self.encounter_hill if self.encounter is not None else 0.0,
            self.escape_distance if self.escape is not None else 0.0)


# ------------------------------------------------------------------------ location
def event_function(settings: EventSettings, kind: str, bodies: tuple[int, ...], mass: np.ndarray,
                   position: np.ndarray, velocity: np.ndarray, radius: np.ndarray, n_active: int,
                   G: float) -> float:
    """Signed distance to the event surface: negative inside (length unit)."""
    if kind == "collision":
        i, j = bodies
        return float(np.linalg.norm(position[i] - position[j]) - (radius[i] + radius[j]))
    if kind == "encounter":
        i, j = bodies
        d_i = np.linalg.norm(position[i] - position[0])
        d_j = np.linalg.norm(position[j] - position[0])
        hill = np.cbrt((mass[i] + mass[j]) / (3.0 * mass[0])) * 0.5 * (d_i + d_j)
        return float(np.linalg.norm(position[i] - position[j]) - settings.encounter_hill * hill)
    if kind == "escape":
        (i,) = bodies
        m = mass[:n_active]
        centre = (m[:, None] * position[:n_active]).sum(axis=0) / m.sum()
        return float(settings.escape_distance - np.linalg.norm(position[i] - centre))
    raise ValidationError(f"event kind must be collision, encounter or escape, got {kind!r}")


def locate_root(g: Callable[[float], float], start: float, end: float) -> float:
    """Time of the sign change of ``g`` in [start, end] (Illinois false position).

    ``g(end)`` is expected negative (the event holds at the end of the step).  When ``g``
    does not change sign (the condition held at both ends, for instance an escape that
    became unbound inside the step) the end of the step is returned.
    """
    a, b = float(start), float(end)
    if a == b:
        return b
    ga, gb = g(a), g(b)
    if not (ga > 0 and gb <= 0):
        return b
    width = b - a
    tol = 4 * np.finfo(float).eps * max(abs(a), abs(b), abs(width))
    side = 0
    for _ in range(200):
        if abs(b - a) <= tol:
            break
        c = (a * gb - b * ga) / (gb - ga)
        if not (min(a, b) < c < max(a, b)):
            c = 0.5 * (a + b)
        gc = g(c)
        if gc == 0:
            return c
        if gc > 0:
            a, ga = c, gc
            if side == 1:
                gb *= 0.5
            side = 1
        else:
            b, gb = c, gc
            if side == -1:
                ga *= 0.5
            side = -1
    return b


def minimize_scalar(g: Callable[[float], float], start: float, end: float) -> float:
    """Where ``g`` is smallest in [start, end] (golden-section search, to ~1e-12 of the width).

    Used for a contact that begins and ends inside one step: its time of closest approach
    brackets the contact with the step start.
    """
    ratio = (math.sqrt(5.0) - 1.0) / 2.0
    a, b = float(start), float(end)
    c, d = b - ratio * (b - a), a + ratio * (b - a)
    gc, gd = g(c), g(d)
    for _ in range(80):
        if b - a <= 1e-12 * (float(end) - float(start)) or gc < 0 or gd < 0:
            break
        if gc < gd:
            b, d, gd = d, c, gc
            c = b - ratio * (b - a)
            gc = g(c)
        else:
            a, c, gc = c, d, gd
            d = a + ratio * (b - a)
            gd = g(d)
    if gc < 0 or gd < 0:
        return c if gc <= gd else d
    return 0.5 * (a + b)


# ------------------------------------------------------------------------ responses
def _state_at(propagator, t: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    integrator = propagator.integrator
    if integrator.adaptive:
        return integrator.state_at(t)
    end = propagator.time
    if t == end:
        return integrator.state()
    return integrator.finish_on_copy(t - end)


def _fixed_step_time(propagator, kind: str, bodies: tuple[int, ...]) -> float:
    """Event time inside the last fixed step, from partial steps backward on copies."""
    integrator = propagator.integrator
    end = propagator.time
    start = end - propagator.step

    def g(t: float) -> float:
        mass, position, velocity = _state_at(propagator, t)
        return event_function(propagator.event_settings, kind, bodies, mass, position, velocity,
                              integrator.radius, integrator.n_active, integrator.G)

    if start > end:  # backward integration: swap to an increasing bracket with the same signs
        return locate_root(lambda s: g(-s), -start, -end) * -1.0
    return locate_root(g, start, end)


def _describe(report, propagator) -> tuple[str, tuple[int, ...], float]:
    """Kind, bodies and located time of the event in a report."""
    if report.event:
        event = report.event
        return event["kind"], tuple(int(b) for b in event["bodies"]), float(event.get("time", propagator.time))
    info = _extrapolation.read_event_config(propagator.integrator.event_config)
    kind = info["last_kind"]
    if kind is None:
        raise ValidationError("an event was signalled but the kernel recorded none")
    bodies = tuple(int(b) for b in info["last_bodies"] if b >= 0)
    return kind, bodies, _fixed_step_time(propagator, kind, bodies)


def merge_bodies(mass, position, velocity, radius, names, i: int, j: int):
    """Perfectly inelastic merger of bodies i and j into the place of the lower index.

    Mass, momentum and centre of mass are conserved; the radius is that of the summed
    volumes; the heavier body's name is kept.  Returns new arrays (inputs unchanged).
    """
    keep, drop = min(i, j), max(i, j)
    m = mass[i] + mass[j]
    mass = np.array(mass, dtype=np.float64)
    position = np.array(position, dtype=np.float64)
    velocity = np.array(velocity, dtype=np.float64)
    radius = np.array(radius, dtype=np.float64)
    names = list(names)
    if m > 0:
        position[keep] = (mass[i] * position[i] + mass[j] * position[j]) / m
        velocity[keep] = (mass[i] * velocity[i] + mass[j] * velocity[j]) / m
    radius[keep] = np.cbrt(radius[i] ** 3 + radius[j] ** 3)
    names[keep] = names[i] if mass[i] >= mass[j] else names[j]
    mass[keep] = m
    keep_mask = np.arange(mass.shape[0]) != drop
    del names[drop]
    return mass[keep_mask], position[keep_mask], velocity[keep_mask], radius[keep_mask], names


def _drain(propagator) -> bool:
    """Handle further conditions that began in the same step (the kernel reports one)."""
    from .methods import StepReport

    integrator = propagator.integrator
    mass, position, velocity = integrator.state()
    kind, i, j = _extrapolation.check_events(position, velocity, mass, integrator.radius,
                                             integrator.n_active, integrator.G, integrator.event_config)
    if kind is None:
        return True
    bodies = tuple(b for b in (i, j) if b >= 0)
    report = StepReport(0, STATUS_EVENT, bodies=bodies)
    if integrator.adaptive:
        t_event = integrator._locate(kind, bodies)
        report.event = {"kind": kind, "bodies": bodies, "step_end": integrator.time, "time": t_event}
        propagator._time = t_event
    return handle(propagator, report)


def handle(propagator, report) -> bool:
    """Respond to a ``STATUS_EVENT`` report; True to go on, False to stop the propagator.

    Appends ``{time, kind, bodies, names, action, step_end, state}`` to
    ``propagator.event_log``; ``state`` holds the mass, position and velocity of the bodies
    involved at the located time.  Merge and remove rebuild the propagator's bodies through
    ``propagator._rebuild`` at the located time (adaptive methods) or at the step end where
    the event was detected (fixed-step methods, whose grid must not change).
    """
    settings: EventSettings = propagator.event_settings
    integrator = propagator.integrator
    kind, bodies, t_event = _describe(report, propagator)
    action = settings.response(kind)
    step_end = float(report.event.get("step_end", propagator.time)) if report.event else propagator.time
    mass, position, velocity = _state_at(propagator, t_event)
    names = list(propagator.names)
    entry = {
        "time": t_event, "kind": kind, "bodies": list(bodies), "names": [names[b] for b in bodies],
        "action": action, "step_end": step_end,
        "state": {"mass": mass[list(bodies)].tolist(), "position": position[list(bodies)].tolist(),
                  "velocity": velocity[list(bodies)].tolist(),
                  "radius": integrator.radius[list(bodies)].tolist()},
    }
    if len(bodies) == 2:
        entry["distance"] = float(np.linalg.norm(position[bodies[0]] - position[bodies[1]]))
    propagator.event_log.append(entry)
    if action == "record":
        return _drain(propagator)
    if action == "stop":
        who = " and ".join(entry["names"])
        propagator.status = STATUS_EVENT
        propagator.message = f"{kind} of {who} at time {t_event!r}"
        return False
    # merge / remove: rebuild at the located time (adaptive) or at the step end (fixed step)
    if not integrator.adaptive:
        mass, position, velocity = integrator.state()
    radius = integrator.radius
    if action == "merge":
        i, j = bodies
        arrays = merge_bodies(mass, position, velocity, radius, names, i, j)
    else:
        if kind == "collision":
            i, j = bodies
            gone = j if mass[j] <= mass[i] else i
        else:
            gone = bodies[0]
        entry["removed"] = names[gone]
        keep = np.arange(mass.shape[0]) != gone
        arrays = (mass[keep], position[keep], velocity[keep], radius[keep],
                  [name for b, name in enumerate(names) if b != gone])
    propagator._rebuild(*arrays)
    if propagator.integrator.adaptive:
        propagator.integrator.time = propagator.time
    return True
