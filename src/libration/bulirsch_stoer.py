"""Bulirsch–Stoer: adaptive extrapolation of the Störmer midpoint rule, with dense output.

The whole accepted-step loop runs in the compiled :func:`libration._extrapolation.advance`
with the GIL released; this module validates options, owns the arrays (state, the state
at the start of the last accepted step, the step/order controller, scratch) and turns
kernel statuses into :class:`~libration.methods.StepReport`.

Dense output.  ``state_at(t)`` for t inside the last accepted step [t_prev, t_cur] is
computed on a copy: the same extrapolation scheme, with the same tolerance, integrates from
the stored start of that step (state, compensation terms, order) to exactly t.  It is
accurate to the tolerance by construction, at the price of about one step's force
evaluations per output.  (A Hermite interpolant from the end values and accelerations is
not: extrapolation steps are long, a quarter of an orbit at tolerance 1e-12 on the outer
solar system, where a quintic Hermite is off by ~6e-4 of the distance at mid-step,
measured.)  The run's own steps
are never shortened or changed, so advancing to T in one call or through many output
times gives the same bits at T.

Forward in time only; the start time is the propagator's (``time`` setter before the
first step).
"""
from __future__ import annotations

import math
from typing import Any, ClassVar

import numpy as np

from . import _extrapolation
from .exceptions import ConvergenceError, MethodError, ValidationError
from .methods import (STATUS_EVENT, STATUS_MAX_STEPS, STATUS_OK, STATUS_SINGULAR,
                      STATUS_STEP_UNDERFLOW, Integrator, StepReport, register)

# Indices into the control array (see ext/extrapolation.pyx).
_TIME, _STEP, _ORDER, _FIRST, _PREV_TIME, _PREV_ORDER, _EVALUATIONS, _ACCEPTED, _REJECTED, _PREV_STEP = range(10)


def _initial_step(mass: np.ndarray, position: np.ndarray, velocity: np.ndarray, n_active: int,
                  G: float) -> float:
    """A first step: 1/50 of the shortest time scale over pairs with a massive member,
    min(sqrt(r^3 / G (m_i + m_j)), r / |v_i - v_j|)."""
    n = mass.shape[0]
    best = math.inf
    block = max(1, 4096 // max(n, 1))  # sources per numpy block (memory ~ block * n)
    for lo in range(0, min(n_active, n), block):
        hi = min(lo + block, n_active, n)
        d = position[None, :, :] - position[lo:hi, None, :]
        r = np.sqrt(np.einsum("ijk,ijk->ij", d, d))
        dv = velocity[None, :, :] - velocity[lo:hi, None, :]
        v = np.sqrt(np.einsum("ijk,ijk->ij", dv, dv))
        gm = G * (mass[lo:hi, None] + mass[None, :])
        # each pair once: partners after the source (the source itself excluded)
        later = np.arange(n)[None, :] > np.arange(lo, hi)[:, None]
        ok = later & (r > 0) & (gm > 0)
        if ok.any():
            best = min(best, float(np.min(np.sqrt(r[ok] ** 3 / gm[ok]))))
        ok = later & (r > 0) & (v > 0)
        if ok.any():
            best = min(best, float(np.min(r[ok] / v[ok])))
    return 1.0 if not math.isfinite(best) else 0.02 * best


@register
class BulirschStoer(Integrator):
    """Bulirsch–Stoer extrapolation (Gragg–Störmer midpoint, Aitken–Neville, HNW order control).

    Options
    -------
    absolute_tolerance : float
        Absolute floor added to every scale (length and length/time units; default 0).
        ``tolerance`` is relative: each body's position error is scaled by its distance
        from the origin and its velocity error by its speed.
    max_steps : int
        Accepted steps per :meth:`advance_to` call before it returns with status
        ``STATUS_MAX_STEPS`` (default 10**7).
    min_step : float
        Smallest step (time unit) before the run ends with ``STATUS_STEP_UNDERFLOW``
        (default 0: a few units of roundoff of the current time).
    initial_step : float
        First step (time unit; default 0: 1/50 of the shortest two-body time scale).
    """

    name = "bulirsch-stoer"
    adaptive = True
    order = 0  # variable: 2k for target line k
    option_defaults: ClassVar[dict[str, Any]] = {
        "absolute_tolerance": 0.0, "max_steps": 10_000_000, "min_step": 0.0, "initial_step": 0.0}

    def __init__(self, *args: Any, **kwargs: Any) -> None:
        super().__init__(*args, **kwargs)
        if self.tolerance is None:
            self.tolerance = 1e-12
        if not (math.isfinite(self.tolerance) and self.tolerance > 0):
            raise ValidationError(f"tolerance must be finite and > 0, got {self.tolerance!r}")
        opts = self.options
        for key in ("absolute_tolerance", "min_step", "initial_step"):
            value = opts[key]
            if isinstance(value, bool) or not isinstance(value, (int, float, np.floating, np.integer)) \
                    or not math.isfinite(float(value)) or float(value) < 0:
                raise MethodError(f"option {key} must be a finite number >= 0, got {value!r}")
            opts[key] = float(value)
        steps = opts["max_steps"]
        if isinstance(steps, bool) or not isinstance(steps, (int, np.integer)) or steps < 1:
            raise MethodError(f"option max_steps must be an integer >= 1, got {steps!r}")
        opts["max_steps"] = int(steps)
        if self.tolerance < 1e-15 and opts["absolute_tolerance"] == 0:
            raise ValidationError(f"tolerance must be >= 1e-15 (double precision), got {self.tolerance!r}")
        n = self.mass.shape[0]
        self.control = np.zeros(_extrapolation.control_size())
        first = opts["initial_step"] or _initial_step(self.mass, self.position, self.velocity,
                                                      self.n_active, self.G)
        self.control[_STEP] = first
        self.control[_ORDER] = _extrapolation.initial_order(self.tolerance)
        self.control[_FIRST] = 1
        self._scratch = np.zeros(_extrapolation.scratch_size(n))
        # the state at the start of the last accepted step (dense output); the check of the
        # accelerations also refuses coincident bodies before the first step
        self.prev_position = self.position.copy()
        self.prev_velocity = self.velocity.copy()
        self.prev_acceleration = np.zeros((n, 3))
        self._accelerate(self.position, self.prev_acceleration)
        # compensation terms of the positions and velocities (compensated summation)
        self.carry = np.zeros((n, 6))
        self.prev_carry = np.zeros((n, 6))

    # ----------------------------------------------------------------- helpers
    def _accelerate(self, position: np.ndarray, out: np.ndarray) -> None:
        bad = _extrapolation.accelerations(self.mass, position, out, self._scratch[-7 * self.mass.shape[0]:]
                                           if self.mass.shape[0] else self._scratch,
                                           self.n_active, self.G, self.softening, self.threads)
        if bad >= 0:
            from .exceptions import SingularityError
            raise SingularityError(f"body {bad} shares its position with a massive body "
                                   f"(zero distance); separate the bodies or use softening")

    @property
    def time(self) -> float:
        """Internal time: the end of the last accepted step (time unit)."""
        return float(self.control[_TIME])

    @time.setter
    def time(self, value: float) -> None:
        if self.control[_ACCEPTED] != 0:
            raise ValidationError("the time of a Bulirsch-Stoer integrator can only be set before its first step")
        self.control[_TIME] = float(value)
        self.control[_PREV_TIME] = float(value)

    @property
    def evaluations(self) -> int:
        """Force evaluations so far."""
        return int(self.control[_EVALUATIONS])

    @property
    def accepted_steps(self) -> int:
        """Accepted steps so far."""
        return int(self.control[_ACCEPTED])

    @property
    def rejected_steps(self) -> int:
        """Rejected step attempts so far."""
        return int(self.control[_REJECTED])

    @property
    def last_step(self) -> tuple[float, float]:
        """``(start, end)`` times of the last accepted step (equal before the first step)."""
        return float(self.control[_PREV_TIME]), float(self.control[_TIME])

    def _run(self, t: float, control, position, velocity, carry, *, exact: bool,
             keep: bool, max_steps: int, events) -> tuple[int, int, int, int, int]:
        return _extrapolation.advance(
            control, self.mass, self.radius, position, velocity, carry,
            self.prev_position, self.prev_velocity, self.prev_acceleration, self.prev_carry,
            self._scratch, self.n_active, self.G,
            self.softening, self.tolerance, self.options["absolute_tolerance"], self.options["min_step"],
            self.threads, float(t), exact, keep, int(max_steps), events)

    # ----------------------------------------------------------------- stepping
    def advance_to(self, t: float) -> StepReport:
        """Accepted steps until the internal time is >= ``t`` (steps are never shortened).

        Returns a report with ``STATUS_EVENT`` (and ``event`` = kind, bodies, located
        time) when an event check fires after a step, ``STATUS_STEP_UNDERFLOW`` or
        ``STATUS_MAX_STEPS`` (with a message) when the run cannot go on.
        """
        t = float(t)
        if not math.isfinite(t):
            raise ValidationError(f"t must be finite, got {t!r}")
        start = float(self.control[_PREV_TIME])
        if t < start:
            raise ValidationError(f"t = {t!r} lies before {start!r} (the start of the last accepted "
                                  f"step); bulirsch-stoer integrates forward only")
        events = self.event_config if self.events is not None else None
        status, done, kind, body_i, body_j = self._run(
            t, self.control, self.position, self.velocity, self.carry, exact=False,
            keep=True,
            max_steps=self.options["max_steps"], events=events)
        report = StepReport(int(done), int(status))
        if status == STATUS_EVENT:
            name = {1: "collision", 2: "encounter", 3: "escape"}[kind]
            report.bodies = tuple(int(b) for b in (body_i, body_j) if b >= 0)
            report.event = {"kind": name, "bodies": report.bodies, "step_end": self.time,
                            "time": self._locate(name, report.bodies)}
        elif status == STATUS_STEP_UNDERFLOW:
            report.message = (f"bulirsch-stoer: the step fell below the minimum "
                              f"{max(self.options['min_step'], 16 * np.finfo(float).eps * abs(self.time)):.3g} "
                              f"at time {self.time!r} (a near-collision or a singular configuration); "
                              f"use collision events, softening or a looser tolerance")
        elif status == STATUS_MAX_STEPS:
            report.message = (f"bulirsch-stoer: reached max_steps = {self.options['max_steps']} "
                              f"at time {self.time!r} before t = {t!r}; raise max_steps or loosen tolerance")
        elif status == STATUS_SINGULAR:
            report.bodies = (int(body_i),)
            report.message = (f"body {body_i} met a zero distance (or a non-finite acceleration) "
                              f"at time {self.time!r}; use softening or collision events")
        return report

    def _locate(self, kind: str, bodies: tuple[int, ...]) -> float:
        """Event time inside the last step, by root finding on the dense output."""
        from .events import event_function, locate_root, minimize_scalar

        start, end = self.last_step

        def g(t: float) -> float:
            mass, position, velocity = self.state_at(t)
            return event_function(self.events, kind, bodies, mass, position, velocity, self.radius,
                                  self.n_active, self.G)

        if kind == "collision" and g(end) > 0:
            # a contact inside the step that is over by its end (found by the kernel's sweep):
            # the time of closest approach first, then the contact before it
            end = minimize_scalar(g, start, end)
        return locate_root(g, start, end)

    def state_at(self, t: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Dense-output copies ``(mass, position, velocity)`` at ``t`` in the last accepted step."""
        t = float(t)
        start, end = self.last_step
        if t == end:
            return self.state()
        if t == start:
            return self.mass.copy(), self.prev_position.copy(), self.prev_velocity.copy()
        if not start < t < end:
            raise ValidationError(f"t must lie in the last accepted step [{start!r}, {end!r}], got {t!r}")
        control = self.control.copy()
        control[_TIME] = start
        control[_STEP] = t - start
        control[_ORDER] = self.control[_PREV_ORDER]
        control[_FIRST] = 0
        position = self.prev_position.copy()
        velocity = self.prev_velocity.copy()
        if t - start <= 64 * np.finfo(float).eps * max(abs(start), abs(t)):
            # below roundoff of the time itself: a Taylor step is exact to double precision
            dt = t - start
            return (self.mass.copy(), self.prev_position + dt * (self.prev_velocity + 0.5 * dt * self.prev_acceleration),
                    self.prev_velocity + dt * self.prev_acceleration)
        carry = self.prev_carry.copy()
        status, _, _, body_i, _ = self._run(t, control, position, velocity, carry, exact=True,
                                            keep=False, max_steps=100_000, events=None)
        if status != STATUS_OK:
            raise ConvergenceError(f"bulirsch-stoer dense output at t = {t!r} failed with status {status}"
                                   f" (body {body_i})")
        return self.mass.copy(), position, velocity

    # ------------------------------------------------------------------- memory
    def memory(self) -> dict[str, Any]:
        memory = super().memory()
        memory.update({"control": self.control.copy(),
                       "prev_position": self.prev_position.copy(),
                       "prev_velocity": self.prev_velocity.copy(),
                       "prev_acceleration": self.prev_acceleration.copy(),
                       "carry": self.carry.copy(), "prev_carry": self.prev_carry.copy(),
                       "event_config": np.array(self.event_config, dtype=np.uint8)})
        return memory

    def restore(self, memory: dict[str, Any]) -> None:
        super().restore(memory)
        for key in ("control", "prev_position", "prev_velocity", "prev_acceleration",
                    "carry", "prev_carry"):
            setattr(self, key, np.array(memory[key], dtype=np.float64, order="C"))
        if "event_config" in memory and np.asarray(memory["event_config"]).size == self.event_config.size:
            self.event_config = np.array(memory["event_config"], dtype=np.uint8, order="C")
        n = self.mass.shape[0]
        if self._scratch.shape[0] != _extrapolation.scratch_size(n):
            self._scratch = np.zeros(_extrapolation.scratch_size(n))
