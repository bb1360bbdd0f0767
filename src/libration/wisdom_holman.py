"""The Wisdom–Holman map for planetary systems: method ``"wisdom-holman"``.

Options
-------
coordinates : ``"democratic-heliocentric"`` (default) or ``"jacobi"``
    The splitting.  Democratic heliocentric (Duncan, Levison & Lee 1998): heliocentric
    positions and barycentric velocities, kick / linear "jump" drift / Kepler drift about the
    central mass.  Jacobi (Wisdom & Holman 1991): Jacobi coordinates, Kepler drift about
    G m0 eta_i / eta_(i-1), kick by the Jacobi interaction terms.  Body 0 is the central mass.
corrector : int, 0 (default), 3, 5, 7, 9 or 11
    Symplectic corrector (Wisdom, Holman & Touma 1996) for the Jacobi map: the kernel runs on
    C^-1(x) and outputs are C(y), which removes the error terms of first order in the planetary
    masses through order step^(corrector - 1); the error left is O(eps step^(corrector + 1)) +
    O(eps^2 step^2).  The corrector is built as a product of Z(a_i, b_i) = X(a_i, b_i) X(-a_i, -b_i),
    X(a, b) = drift(a h) kick(b h) drift(-a h), with a_i = i / sqrt(10) and b_i solving
    sum_i 2 b_i a_i^(2k+1) / (2k+1)! = B_(2k+2) / (2k+2)!  (k < K = (corrector - 1) / 2), the
    Bernoulli-number coefficients of (z/2) coth(z/2) in the map's first-order error (derived
    here from the Baker-Campbell-Hausdorff series; WHT96 sec. 3 give the construction).  Each
    order is verified by the fall of the energy error with the step (tests/test_wisdom_holman.py:
    factors 22, 102, 412, 1482, 3380 per halving for orders 3..11 where the eps^2 floor is
    low).  The
    democratic-heliocentric map has three non-commuting parts (kick, jump, Kepler), for which
    these two-part correctors do not apply: it offers corrector = 0 only.

Lazy synchronisation: the closing half-kick of each step is merged with the next opening one,
so a step costs one force evaluation.  :meth:`WisdomHolman.state` synchronises (and corrects)
a copy, so outputs never change the trajectory; :meth:`WisdomHolman.memory` holds the
unsynchronised state, so a checkpoint continues bit for bit.  The uniform motion of the
barycentre is kept apart (its position is cm0 + v_cm * elapsed time), so :meth:`state`
returns the inertial frame of the input.
"""
from __future__ import annotations

import math
from fractions import Fraction
from typing import Any, ClassVar

import numpy as np

from . import _wisdom_holman
from .exceptions import ConvergenceError, MethodError, SingularityError
from .methods import (STATUS_NO_CONVERGENCE, STATUS_OK, STATUS_SINGULAR, Integrator, StepReport,
                      register)

COORDINATES = ("democratic-heliocentric", "jacobi")
CORRECTOR_ORDERS = (0, 3, 5, 7, 9, 11)
# a_i = i * sqrt(CORRECTOR_ALPHA_SQUARED): small enough that the first uncancelled term stays
# within a factor ~2-8 of the uncorrected one, large enough that the b_i stay below 0.5.
CORRECTOR_ALPHA_SQUARED = Fraction(1, 10)


def _bernoulli(n: int) -> Fraction:
    """Bernoulli number B_n (B_1 = -1/2 convention) from the standard recurrence."""
    b = [Fraction(1)]
    for m in range(1, n + 1):
        b.append(-sum(math.comb(m + 1, k) * b[k] for k in range(m)) / (m + 1))
    return b[n]


def corrector_coefficients(order: int) -> tuple[tuple[float, float], ...]:
    """The (a_i, b_i) pairs of the symplectic corrector of the given odd order (see module doc).

    Solved exactly in rational arithmetic (with a_i = i alpha, alpha^2 rational), then rounded.
    """
    if order == 0:
        return ()
    count = (order - 1) // 2
    r = CORRECTOR_ALPHA_SQUARED
    gamma = [_bernoulli(2 * k + 2) / math.factorial(2 * k + 2) for k in range(count)]
    # unknowns beta_i = 2 b_i a_i: sum_i beta_i i^(2k) r^k / (2k+1)! = gamma_k
    rows = [[Fraction(i ** (2 * k)) * r ** k / math.factorial(2 * k + 1) for i in range(1, count + 1)]
            + [gamma[k]] for k in range(count)]
    for c in range(count):
        pivot = next(j for j in range(c, count) if rows[j][c] != 0)
        rows[c], rows[pivot] = rows[pivot], rows[c]
        for j in range(count):
            if j != c and rows[j][c] != 0:
                factor = rows[j][c] / rows[c][c]
                rows[j] = [x - factor * y for x, y in zip(rows[j], rows[c])]
    alpha = math.sqrt(r)
    pairs = []
    for i in range(count):
        beta = rows[i][count] / rows[i][i]
        a = (i + 1) * alpha
        pairs.append((a, float(beta) / (2.0 * a)))
    return tuple(pairs)


def _corrector_sequence(order: int) -> list[tuple[str, float]]:
    """Operations ("drift"/"kick", multiple of the step) applying the corrector C, in order."""
    ops: list[tuple[str, float]] = []
    for a, b in corrector_coefficients(order):
        # X(a, b) X(-a, -b), adjacent drifts merged
        ops += [("drift", a), ("kick", -b), ("drift", -2.0 * a), ("kick", b), ("drift", a)]
    return ops


@register
class WisdomHolman(Integrator):
    """Wisdom–Holman map (second order), democratic heliocentric or Jacobi; see module doc.

    Parameters
    ----------
    mass, position, velocity, n_active, G, step, threads, radius, events
        As for :class:`~libration.methods.Integrator`; ``step`` in the time unit (negative
        integrates backward).  Body 0 is the central mass (> 0); test particles (indices
        >= n_active) ride along.
    coordinates : {"democratic-heliocentric", "jacobi"}
        The splitting (default democratic heliocentric).
    corrector : {0, 3, 5, 7, 9, 11}
        Symplectic corrector order for ``coordinates="jacobi"`` (0 = off, the default).

    Notes
    -----
    ``softening`` must be 0 (the Kepler part is exact point-mass motion).  The base class's
    ``position`` and ``velocity`` attributes keep the input state; the evolving state lives in
    the kernel arrays and is read with :meth:`state`.  A Kepler drift that cannot be solved
    (a non-finite state, or an orbit through the central body) ends the call with status
    ``STATUS_NO_CONVERGENCE`` naming the body and its state; a zero distance between massive
    bodies ends it with ``STATUS_SINGULAR``.
    """

    name = "wisdom-holman"
    order = 2
    option_defaults: ClassVar[dict[str, Any]] = {"coordinates": "democratic-heliocentric",
                                                 "corrector": 0}

    def __init__(self, *args: Any, **kwargs: Any) -> None:
        super().__init__(*args, **kwargs)
        coordinates = self.options["coordinates"]
        if coordinates not in COORDINATES:
            raise MethodError(f"option coordinates must be one of {', '.join(COORDINATES)}, "
                              f"got {coordinates!r}")
        corrector = self.options["corrector"]
        if isinstance(corrector, bool) or not isinstance(corrector, (int, np.integer)) \
                or int(corrector) not in CORRECTOR_ORDERS:
            raise MethodError(f"option corrector must be one of {CORRECTOR_ORDERS} (0 = off), "
                              f"got {corrector!r}")
        corrector = int(corrector)
        self.options["corrector"] = corrector
        if corrector and coordinates != "jacobi":
            raise MethodError(f"option corrector={corrector} needs coordinates='jacobi'; the "
                              f"democratic-heliocentric map offers corrector=0 only")
        if self.softening != 0.0:
            raise MethodError("method 'wisdom-holman' does not support softening (its Kepler part "
                              f"is exact point-mass motion), got softening={self.softening!r}")
        n = self.mass.shape[0]
        if n < 1 or self.n_active < 1 or not self.mass[0] > 0:
            raise MethodError("method 'wisdom-holman' needs a central body with mass > 0 at index "
                              f"0 (got {n} bodies, n_active={self.n_active})")
        self._jacobi = coordinates == "jacobi"
        self._bary = np.zeros((n, 3))
        # synchronised barycentric copies for the per-step event checks (only when asked for)
        rows = n if self.events is not None else 0
        self._sync_position = np.zeros((rows, 3))
        self._sync_velocity = np.zeros((rows, 3))
        massive = self.mass[: self.n_active]
        total = math.fsum(massive)
        self._eta = np.ascontiguousarray(np.concatenate(
            [np.cumsum(massive), np.full(n - self.n_active, np.sum(massive))]))
        gm = np.full(n, self.G * self.mass[0])
        if self._jacobi and self.n_active > 1:
            gm[1:self.n_active] = self.G * self.mass[0] * self._eta[1:self.n_active] / self._eta[:self.n_active - 1]
        self._gm = np.ascontiguousarray(gm)
        # barycentre of the massive bodies and its uniform motion
        self._cm_position = (massive @ self.position[: self.n_active]) / total
        self._cm_velocity = (massive @ self.velocity[: self.n_active]) / total
        self._cm_offset = 0.0        # elapsed time folded in when the step changed
        self._cm_steps = 0           # steps of size _cm_step since then
        self._cm_step = float(self.step) if self.step is not None else 0.0
        self._pending = 0.0          # kick time not yet applied to the velocities
        self._corrector_step = float(self.step) if self.step is not None else 0.0
        # internal coordinates
        if self._jacobi:
            bary_pos = self.position - self._cm_position
            self._q = _wisdom_holman.jacobi_from_barycentric(np.ascontiguousarray(bary_pos), self.mass,
                                                             self._eta, self.n_active)
            del bary_pos
            bary_vel = self.velocity - self._cm_velocity
            self._p = _wisdom_holman.jacobi_from_barycentric(np.ascontiguousarray(bary_vel), self.mass,
                                                             self._eta, self.n_active)
            del bary_vel
            self._q[0] = 0.0
            self._p[0] = 0.0
            if corrector:
                self._apply_corrector(self._q, self._p, inverse=True)
        else:
            q = self.position - self.position[0]
            q[0] = 0.0
            p = self.velocity - self._cm_velocity
            p[0] = 0.0
            self._q = np.ascontiguousarray(q)
            self._p = np.ascontiguousarray(p)
        # The evolving state lives in _q and _p from here on: drop the base class's input copies
        # (and the Jacobi-only scratch for the other map) so the run holds one copy of the state.
        self.position = np.empty((0, 3))
        self.velocity = np.empty((0, 3))
        if not self._jacobi:
            self._bary = np.empty((0, 3))

    # ------------------------------------------------------------------ pieces
    def _kick(self, q: np.ndarray, p: np.ndarray, dt: float) -> None:
        if self._jacobi:
            bad = _wisdom_holman.jacobi_kick(q, p, self.mass, self._eta, self._gm, self.n_active, self.G,
                                             0.0, dt, self._bary, self._acc, self._soa, self.threads)
        else:
            bad = _wisdom_holman.democratic_kick(q, p, self.mass, self.n_active, self.G, 0.0, dt,
                                                 self._acc, self._soa, self.threads)
        if bad >= 0:
            raise SingularityError(f"body {bad} met a zero distance (or a non-finite acceleration) "
                                   f"while synchronising the wisdom-holman state")

    def _drift(self, q: np.ndarray, p: np.ndarray, dt: float) -> None:
        bad = _wisdom_holman.jacobi_drift(q, p, self._gm, dt)
        if bad >= 0:   # the failing body's state is left as it was before the drift
            raise ConvergenceError(self._kepler_message(bad, q[bad], p[bad], dt))

    def _kepler_message(self, body: int, position, velocity, dt: float) -> str:
        frame = "Jacobi" if self._jacobi else "heliocentric position, barycentric velocity"
        return (f"Kepler drift did not converge for body {body} ({frame}: position "
                f"{np.array2string(np.asarray(position), precision=17)}, velocity "
                f"{np.array2string(np.asarray(velocity), precision=17)}, gm {self._gm[body]!r}, "
                f"dt {dt!r})")

    def _apply_corrector(self, q: np.ndarray, p: np.ndarray, *, inverse: bool) -> None:
        ops = _corrector_sequence(self.options["corrector"])
        if inverse:
            ops = [(kind, -c) for kind, c in reversed(ops)]
        h = self._corrector_step
        for kind, c in ops:
            if kind == "drift":
                self._drift(q, p, c * h)
            else:
                self._kick(q, p, c * h)

    # ---------------------------------------------------------------- stepping
    def take_steps(self, n: int) -> StepReport:
        n = int(n)
        if n <= 0:
            return StepReport(0, STATUS_OK)
        h = float(self.step)
        if h != self._cm_step:
            self._cm_offset += self._cm_steps * self._cm_step
            self._cm_steps = 0
            self._cm_step = h
        first = self._pending + 0.5 * h
        if self._jacobi:
            status, done, body_i, body_j = _wisdom_holman.run_jacobi(
                self._q, self._p, self.mass, self._eta, self._gm, self.radius, self.n_active, self.G,
                0.0, h, first, n, self._bary, self._acc, self._soa, self.threads, self.event_config,
                self._sync_position, self._sync_velocity)
        else:
            status, done, body_i, body_j = _wisdom_holman.run_democratic(
                self._q, self._p, self.mass, self.radius, self.n_active, self.G, 0.0, h, first, n,
                self._acc, self._soa, self.threads, self.event_config, self._sync_position,
                self._sync_velocity)
        if done > 0:
            self._pending = 0.5 * h
        self._cm_steps += done
        report = StepReport(done, status, bodies=tuple(b for b in (body_i, body_j) if b >= 0))
        if status == STATUS_SINGULAR:
            report.message = (f"body {body_i} met a zero distance (or a non-finite acceleration) "
                              f"after {done} steps; separate the bodies or enable collision events")
        elif status == STATUS_NO_CONVERGENCE:
            # the failing body's state before the drift is still in the arrays (the drift leaves
            # it untouched); the step it failed in is not completed
            report.message = self._kepler_message(body_i, self._q[body_i], self._p[body_i], h) + (
                f" in step {done + 1} of this call")
        return report

    # ------------------------------------------------------------------- state
    def _elapsed(self) -> float:
        return self._cm_offset + self._cm_steps * self._cm_step

    def state(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        q = self._q.copy()
        p = self._p.copy()
        if self._pending != 0.0:
            self._kick(q, p, self._pending)
        if self._jacobi:
            if self.options["corrector"]:
                self._apply_corrector(q, p, inverse=False)
            position = _wisdom_holman.jacobi_to_barycentric_array(q, self.mass, self._eta, self.n_active)
            velocity = _wisdom_holman.jacobi_to_barycentric_array(p, self.mass, self._eta, self.n_active)
        else:
            position, velocity = _wisdom_holman.democratic_to_barycentric(q, p, self.mass, self.n_active)
        position += self._cm_position + self._cm_velocity * self._elapsed()
        velocity += self._cm_velocity
        return self.mass.copy(), position, velocity

    def finish_on_copy(self, dt: float):
        """State after a partial step ``dt``; the integrator itself is unchanged.

        Without a corrector: the base behaviour (a clone takes one step of ``dt``).  With one,
        the kernel state is C_h^-1 of the true state for the run's step h, and a step of another
        size would leave that frame (measured: off-grid energy errors ~1000x the on-grid ones
        with corrector=5); instead the corrected state x is advanced by the corrected map of
        step ``dt`` itself, C_dt Phi_dt C_dt^-1 (x), which keeps the corrector's accuracy."""
        if not self.options["corrector"]:
            return super().finish_on_copy(dt)
        mass, position, velocity = self.state()
        other = WisdomHolman(mass, position, velocity, self.n_active, self.G, step=float(dt),
                             threads=self.threads, radius=self.radius,
                             coordinates=self.options["coordinates"],
                             corrector=self.options["corrector"])
        report = other.take_steps(1)
        if report.status != STATUS_OK:
            from .methods import raise_for_status
            raise_for_status(report)
        return other.state()

    def memory(self) -> dict[str, Any]:
        memory = super().memory()
        memory.update({"wh_q": self._q.copy(), "wh_p": self._p.copy(), "wh_pending": self._pending,
                       "wh_cm_position": self._cm_position.copy(),
                       "wh_cm_velocity": self._cm_velocity.copy(), "wh_cm_offset": self._cm_offset,
                       "wh_cm_steps": int(self._cm_steps), "wh_cm_step": self._cm_step,
                       "wh_corrector_step": self._corrector_step})
        return memory

    def restore(self, memory: dict[str, Any]) -> None:
        super().restore(memory)
        self._q = np.array(memory["wh_q"], dtype=np.float64, order="C")
        self._p = np.array(memory["wh_p"], dtype=np.float64, order="C")
        self._pending = float(memory["wh_pending"])
        self._cm_position = np.array(memory["wh_cm_position"], dtype=np.float64)
        self._cm_velocity = np.array(memory["wh_cm_velocity"], dtype=np.float64)
        self._cm_offset = float(memory["wh_cm_offset"])
        self._cm_steps = int(memory["wh_cm_steps"])
        self._cm_step = float(memory["wh_cm_step"])
        self._corrector_step = float(memory["wh_corrector_step"])
