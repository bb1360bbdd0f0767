"""Keplerian orbital elements <-> Cartesian states, vectorised over bodies.

Conventions
-----------
Units are whatever the caller uses consistently: ``mu`` (or ``G * mass``) in
length^3 / time^2, positions in length, velocities in length / time.  All angles
are in radians.

Orbit types
    * elliptic: ``semi_major_axis > 0`` and ``0 <= eccentricity < 1``; the mean
      anomaly is ``M = E - e sin E`` (``E`` the eccentric anomaly), returned in
      ``[0, 2 pi)``.
    * hyperbolic: ``semi_major_axis < 0`` and ``eccentricity > 1``; the mean
      anomaly is ``M = e sinh H - H`` (``H`` the hyperbolic anomaly).  It is not
      wrapped: negative values mean "before periapsis".
    * parabolic: an eccentricity within ``PARABOLIC_TOLERANCE`` of 1 has no finite
      semi-major axis.  :func:`elements_to_cartesian` refuses it with a
      :class:`~libration.exceptions.ValidationError` (use ``e = 1 - 1e-9`` or
      ``e = 1 + 1e-9`` instead).  :func:`cartesian_to_elements` reports a state
      that is parabolic to within roundoff (``|e - 1| < PARABOLIC_TOLERANCE``, or
      the energy and the eccentricity disagree about the orbit type) as
      ``eccentricity = 1``, ``semi_major_axis = inf`` and the parabolic (Barker)
      mean anomaly ``M = D + D**3 / 3`` with ``D = tan(nu / 2)``, which grows as
      ``sqrt(mu / (2 q**3)) * (t - t_periapsis)``.  The periapsis distance ``q``
      is not representable by these six numbers, so such elements cannot be fed
      back into :func:`elements_to_cartesian`.

Angles
    ``inclination`` in ``[0, pi]`` (``> pi / 2`` is retrograde);
    ``ascending_node``, ``argument_of_periapsis`` and the elliptic
    ``mean_anomaly`` in ``[0, 2 pi)``.  The ascending node is measured from the
    x axis in the x-y reference plane; the node direction is ``z x h`` (``h``
    the specific angular momentum).

Singular cases (the undefined angle is set to 0 and its role taken by another)
    * circular (``eccentricity < CIRCULAR_TOLERANCE``): ``argument_of_periapsis
      = 0`` and the mean anomaly is measured from the ascending node (the
      periapsis is placed at the node).
    * equatorial (``sin(inclination) < EQUATORIAL_TOLERANCE``, i.e. ``i = 0`` or
      ``i = pi``): ``ascending_node = 0`` and the argument of periapsis is
      measured from the x axis (in the direction of motion).
    * both: ``ascending_node = argument_of_periapsis = 0`` and the mean anomaly
      is the true longitude measured from the x axis in the direction of motion
      (for ``e = 0`` the mean, eccentric and true anomalies coincide).
    The values a singular case gives are consistent: feeding them back into
    :func:`elements_to_cartesian` reproduces the state.
    Rectilinear states (position parallel to velocity, zero angular momentum)
    and a zero position vector have no elements and are refused.

Frames for systems (:func:`state_from_elements`, :func:`elements_from_state`)
    * ``"heliocentric"``: each body's elements describe its position and
      velocity relative to the primary, with ``mu = G (M0 + m_k)``.
    * ``"jacobi"``: body ``k`` moves about the centre of mass of the primary and
      the massive bodies listed before it, with ``mu = G (interior mass + m_k)``.
      Test particles (mass 0) move about the centre of mass of all the massive
      bodies.
"""
from __future__ import annotations

from typing import NamedTuple

import numpy as np
from numpy.typing import ArrayLike, NDArray

from .exceptions import ConvergenceError, ValidationError

__all__ = [
    "OrbitalElements",
    "solve_kepler",
    "elements_to_cartesian",
    "cartesian_to_elements",
    "state_from_elements",
    "elements_from_state",
    "PARABOLIC_TOLERANCE",
    "CIRCULAR_TOLERANCE",
    "EQUATORIAL_TOLERANCE",
]

#: |e - 1| below this is treated as exactly parabolic.  A few ulps: the eccentricity of
#: a state at exactly escape speed comes out within ~2e-15 of 1 after roundoff.
PARABOLIC_TOLERANCE = 4e-15
#: eccentricity below this is treated as circular (argument of periapsis set to 0).
CIRCULAR_TOLERANCE = 1e-14
#: sin(inclination) below this is treated as equatorial (ascending node set to 0).
EQUATORIAL_TOLERANCE = 1e-14

_TWO_PI = 2.0 * np.pi
_EPS = np.finfo(np.float64).eps
_MAX_ITERATIONS = 100
FRAMES = ("heliocentric", "jacobi")


class OrbitalElements(NamedTuple):
    """Keplerian elements of k bodies; every field an ndarray of shape (k,).

    Attributes
    ----------
    semi_major_axis : ndarray
        Length; > 0 elliptic, < 0 hyperbolic, inf parabolic (see module notes).
    eccentricity : ndarray
        Dimensionless, >= 0.
    inclination : ndarray
        Radians, in [0, pi].
    ascending_node : ndarray
        Longitude of the ascending node, radians, in [0, 2 pi).
    argument_of_periapsis : ndarray
        Radians, in [0, 2 pi).
    mean_anomaly : ndarray
        Radians; in [0, 2 pi) for elliptic orbits, unwrapped for hyperbolic ones.
    """

    semi_major_axis: NDArray[np.float64]
    eccentricity: NDArray[np.float64]
    inclination: NDArray[np.float64]
    ascending_node: NDArray[np.float64]
    argument_of_periapsis: NDArray[np.float64]
    mean_anomaly: NDArray[np.float64]


# --------------------------------------------------------------------------- validation


def _fail(field: str, index: NDArray[np.bool_], requirement: str, values: NDArray) -> None:
    """Raise a ValidationError naming the first offending body."""
    k = int(np.flatnonzero(index)[0])
    raise ValidationError(f"{field}[{k}] must be {requirement}, got {float(values.ravel()[k])!r}")


def _vector(field: str, value: ArrayLike) -> NDArray[np.float64]:
    """A 1-D float64 array (scalars become length 1)."""
    try:
        arr = np.asarray(value, dtype=np.float64)
    except (TypeError, ValueError) as exc:
        raise ValidationError(f"{field} must be a real number or array of them: {exc}") from None
    if arr.ndim > 1:
        raise ValidationError(f"{field} must be a scalar or a 1-D array, got shape {arr.shape}")
    return np.atleast_1d(arr)


def _broadcast(**fields: ArrayLike) -> tuple[NDArray[np.float64], ...]:
    """Convert to 1-D float64 arrays of one common length (scalars broadcast)."""
    arrays = {name: _vector(name, value) for name, value in fields.items()}
    lengths = [a.size for a in arrays.values() if a.size != 1]
    k = lengths[0] if lengths else 1
    out = []
    for name, arr in arrays.items():
        if arr.size not in (1, k):
            shapes = ", ".join(f"{n}: {a.size}" for n, a in arrays.items())
            raise ValidationError(
                f"{name} has {arr.size} values but other inputs have {k}; "
                f"lengths must match or be 1 ({shapes})"
            )
        out.append(np.ascontiguousarray(np.broadcast_to(arr, (k,)), dtype=np.float64).copy())
    return tuple(out)


def _require_finite(field: str, arr: NDArray) -> None:
    bad = ~np.isfinite(arr)
    if bad.any():
        _fail(field, bad, "finite", arr)


def _check_kepler_inputs(mean_anomaly: NDArray, eccentricity: NDArray) -> None:
    _require_finite("mean_anomaly", mean_anomaly)
    bad = ~(np.isfinite(eccentricity) & (eccentricity >= 0.0))
    if bad.any():
        _fail("eccentricity", bad, "finite and >= 0", eccentricity)
    _refuse_parabolic(eccentricity)


def _refuse_parabolic(eccentricity: NDArray) -> None:
    bad = np.abs(eccentricity - 1.0) < PARABOLIC_TOLERANCE
    if bad.any():
        k = int(np.flatnonzero(bad)[0])
        raise ValidationError(
            f"eccentricity[{k}] must differ from 1 by at least {PARABOLIC_TOLERANCE:g} "
            f"(exactly parabolic orbits have no semi-major axis or mean anomaly), "
            f"got {float(eccentricity[k])!r}; use 1 - 1e-9 (elliptic) or 1 + 1e-9 (hyperbolic)"
        )


def _check_mu(mu: NDArray) -> None:
    bad = ~(np.isfinite(mu) & (mu > 0.0))
    if bad.any():
        _fail("mu", bad, "finite and > 0 (length^3/time^2)", mu)


# --------------------------------------------------------------------------- accurate pieces


def _x_minus_sin(x: NDArray) -> NDArray:
    """x - sin(x) without cancellation for small |x|."""
    out = x - np.sin(x)
    small = np.abs(x) < 1.0
    if small.any():
        xs = x[small]
        x2 = xs * xs
        # Taylor series x^3/3! - x^5/5! + ... ; 10 terms reach 1e-21 relative at |x| = 1.
        term = xs * x2 / 6.0
        total = term.copy()
        for n in range(2, 12):
            term = -term * x2 / ((2 * n) * (2 * n + 1))
            total += term
        out[small] = total
    return out


def _sinh_minus_x(x: NDArray) -> NDArray:
    """sinh(x) - x without cancellation for small |x|."""
    with np.errstate(over="ignore"):
        out = np.sinh(x) - x
    small = np.abs(x) < 1.0
    if small.any():
        xs = x[small]
        x2 = xs * xs
        term = xs * x2 / 6.0
        total = term.copy()
        for n in range(2, 12):
            term = term * x2 / ((2 * n) * (2 * n + 1))
            total += term
        out[small] = total
    return out


def _kepler_elliptic(E: NDArray, e: NDArray) -> NDArray:
    """E - e sin E, written (1 - e) E + e (E - sin E) to stay accurate near e = 1, E = 0."""
    return (1.0 - e) * E + e * _x_minus_sin(E)


def _kepler_hyperbolic(H: NDArray, e: NDArray) -> NDArray:
    """e sinh H - H, written (e - 1) sinh H + (sinh H - H)."""
    with np.errstate(over="ignore"):
        return (e - 1.0) * np.sinh(H) + _sinh_minus_x(H)


def _cubic_root(linear: NDArray, constant: NDArray) -> NDArray:
    """The real root of x^3 + linear x - constant = 0 for linear > 0, constant >= 0.

    Cardano's x = A - B with A^3 = q/2 + s, B = linear / (3 A), rewritten as
    x = q / (A^2 + A B + B^2) so that nothing cancels.
    """
    half = 0.5 * constant
    third = linear / 3.0
    with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
        s = np.sqrt(half * half + third * third * third)
        A = np.cbrt(half + s)
        B = third / A
        root = constant / (A * A + A * B + B * B)
    return np.where(np.isfinite(root) & (constant > 0), root, 0.0)


def _safeguarded_newton(f, fprime, x, lo, hi, what: str) -> NDArray:
    """Newton iteration kept inside a bracket [lo, hi] (f(lo) <= 0 <= f(hi)), bisecting when
    a Newton step would leave it.  Vectorised; raises ConvergenceError, never returns NaN."""
    x = x.copy()
    lo = lo.copy()
    hi = hi.copy()
    active = np.ones(x.shape, dtype=bool)
    for _ in range(_MAX_ITERATIONS):
        idx = np.flatnonzero(active)
        if idx.size == 0:
            return x
        xi, li, hi_i = x[idx], lo[idx], hi[idx]
        fi = f(xi, idx)
        li = np.where(fi < 0.0, xi, li)
        hi_i = np.where(fi > 0.0, xi, hi_i)
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            newton = xi - fi / fprime(xi, idx)
        # A Newton step below the tolerance means x was already converged; judge that
        # before the bracket test (such a step may not move x at all).
        converged = (fi == 0.0) | (np.abs(newton - xi) <= 4.0 * _EPS * np.abs(xi))
        inside = (newton >= li) & (newton <= hi_i)
        new = np.where(inside, newton, 0.5 * (li + hi_i))
        new = np.where(fi == 0.0, xi, new)
        done = converged | (hi_i - li <= 8.0 * _EPS * np.abs(hi_i))
        x[idx], lo[idx], hi[idx] = new, li, hi_i
        active[idx] = ~done
    if active.any():
        k = int(np.flatnonzero(active)[0])
        raise ConvergenceError(
            f"{what} did not converge in {_MAX_ITERATIONS} iterations for element {k} "
            f"(bracket [{float(lo[k])!r}, {float(hi[k])!r}])"
        )
    return x


def _solve_elliptic(M: NDArray, e: NDArray) -> NDArray:
    """Eccentric anomaly for 0 <= e < 1, any real M."""
    sign = np.where(M < 0.0, -1.0, 1.0)  # solve for |M|: E(-M) = -E(M) exactly
    reduced = np.mod(np.abs(M), _TWO_PI)
    reduced = np.where(reduced >= _TWO_PI, 0.0, reduced)
    upper_half = reduced > np.pi
    m = np.where(upper_half, _TWO_PI - reduced, reduced)  # in [0, pi]
    # On [0, pi] the residual f(E) = E - e sin E - m is increasing and convex, and
    # E - m = e sin E lies in [0, e]: so [m, min(m + e, pi)] brackets the root.
    lo = m.copy()
    hi = np.minimum(m + e, np.pi)
    # Near e = 1 and small m that bracket is loose.  For E <= 1, E - sin E >= 0.95 E^3 / 6,
    # so the root of (1 - e) x + 0.95 e x^3 / 6 = m (when <= 1) is a tighter upper bound.
    positive = e > 0.0
    safe_e = np.where(positive, e, 1.0)
    cubic = _cubic_root(6.0 * (1.0 - e) / (0.95 * safe_e), 6.0 * m / (0.95 * safe_e))
    cubic = cubic * (1.0 + 1e-12)  # margin for roundoff in the bound itself
    hi = np.where(positive & (cubic <= 1.0) & (cubic >= m), np.minimum(hi, cubic), hi)

    def f(x, idx):
        return _kepler_elliptic(x, e[idx]) - m[idx]

    def fprime(x, idx):
        s = np.sin(0.5 * x)
        return (1.0 - e[idx]) + 2.0 * e[idx] * s * s

    # Newton from the upper bound descends monotonically for a convex increasing f.
    E = _safeguarded_newton(f, fprime, hi.copy(), lo, hi, "Kepler's equation (elliptic)")
    E = np.where(upper_half, _TWO_PI - E, E)
    # Return E on the same revolution as M: E = M + (E_reduced - M_reduced).
    return M + sign * (E - reduced)


def _solve_hyperbolic(M: NDArray, e: NDArray) -> NDArray:
    """Hyperbolic anomaly for e > 1, any real M."""
    sign = np.where(M < 0.0, -1.0, 1.0)
    m = np.abs(M)
    # (e-1) H + H^3/6 <= e sinh H - H, so the cubic's root bounds H from above; and
    # sinh H = (m + H) / e then bounds it again.
    cubic = _cubic_root(6.0 * (e - 1.0), 6.0 * m) * (1.0 + 1e-12)  # margin for roundoff
    cubic = np.where(cubic > 0.0, cubic, np.cbrt(6.0 * m))  # H^3/6 <= m also bounds H
    hi = np.minimum(cubic, np.arcsinh((m + cubic) / e) * (1.0 + 1e-12))
    lo = np.zeros_like(m)

    def f(x, idx):
        return _kepler_hyperbolic(x, e[idx]) - m[idx]

    def fprime(x, idx):
        s = np.sinh(0.5 * x)
        return (e[idx] - 1.0) + 2.0 * e[idx] * s * s

    # f is convex on H >= 0, so Newton from the upper bound descends monotonically.
    H = _safeguarded_newton(f, fprime, hi.copy(), lo, hi, "Kepler's equation (hyperbolic)")
    return sign * H


def solve_kepler(mean_anomaly: ArrayLike, eccentricity: ArrayLike) -> NDArray[np.float64]:
    """Solve Kepler's equation for the eccentric or hyperbolic anomaly.

    Elliptic (``e < 1``): ``M = E - e sin E``.  Hyperbolic (``e > 1``):
    ``M = e sinh H - H``.  Newton's method inside a guaranteed bracket, with
    bisection whenever a Newton step would leave it; the residual is evaluated in
    a cancellation-free form, so it stays accurate for ``e`` up to ``1 - 1e-12``
    and tiny ``M``.

    Parameters
    ----------
    mean_anomaly : array_like
        Mean anomaly M, radians, any real value (scalar or shape (k,)).
    eccentricity : array_like
        Eccentricity e >= 0, not within ``PARABOLIC_TOLERANCE`` of 1
        (scalar or shape (k,)).

    Returns
    -------
    ndarray, shape (k,)
        E (radians, on the same revolution as M, i.e. ``E - M = e sin E``) for
        elliptic entries, H (dimensionless, same sign as M) for hyperbolic ones.

    Raises
    ------
    ValidationError
        Non-finite M, negative or non-finite e, or e within the parabolic tolerance of 1.
    ConvergenceError
        If the iteration does not converge (not expected for valid inputs).
    """
    M, e = _broadcast(mean_anomaly=mean_anomaly, eccentricity=eccentricity)
    _check_kepler_inputs(M, e)
    out = np.empty_like(M)
    elliptic = e < 1.0
    if elliptic.any():
        out[elliptic] = _solve_elliptic(M[elliptic], e[elliptic])
    if (~elliptic).any():
        out[~elliptic] = _solve_hyperbolic(M[~elliptic], e[~elliptic])
    return out


# --------------------------------------------------------------------------- elements -> state


def _wrap(angle: NDArray) -> NDArray:
    """Angle reduced to [0, 2 pi)."""
    out = np.mod(angle, _TWO_PI)
    return np.where(out >= _TWO_PI, 0.0, out)


def _check_elements(a, e, i, node, peri, M) -> None:
    _require_finite("semi_major_axis", a)
    bad = ~(np.isfinite(e) & (e >= 0.0))
    if bad.any():
        _fail("eccentricity", bad, "finite and >= 0", e)
    _refuse_parabolic(e)
    bad = ~(np.isfinite(i) & (i >= 0.0) & (i <= np.pi))
    if bad.any():
        _fail("inclination", bad, "finite and in [0, pi] radians", i)
    _require_finite("ascending_node", node)
    _require_finite("argument_of_periapsis", peri)
    _require_finite("mean_anomaly", M)
    bad = (e < 1.0) & ~(a > 0.0)
    if bad.any():
        k = int(np.flatnonzero(bad)[0])
        raise ValidationError(
            f"semi_major_axis[{k}] must be > 0 for an elliptic orbit "
            f"(eccentricity[{k}] = {float(e[k])!r} < 1), got {float(a[k])!r}"
        )
    bad = (e > 1.0) & ~(a < 0.0)
    if bad.any():
        k = int(np.flatnonzero(bad)[0])
        raise ValidationError(
            f"semi_major_axis[{k}] must be < 0 for a hyperbolic orbit "
            f"(eccentricity[{k}] = {float(e[k])!r} > 1), got {float(a[k])!r}"
        )


def _orbit_plane_state(mu, a, e, M) -> tuple[NDArray, NDArray, NDArray, NDArray]:
    """Position (x, y) and velocity (vx, vy) in the perifocal frame."""
    x = np.empty_like(a)
    y = np.empty_like(a)
    vx = np.empty_like(a)
    vy = np.empty_like(a)
    anomaly = solve_kepler(M, e)
    ell = e < 1.0
    if ell.any():
        A, ee, E = a[ell], e[ell], anomaly[ell]
        s2 = np.sin(0.5 * E)
        two_s2 = 2.0 * s2 * s2  # 1 - cos E, no cancellation
        sinE, cosE = np.sin(E), np.cos(E)
        b_over_a = np.sqrt((1.0 - ee) * (1.0 + ee))
        r = A * ((1.0 - ee) + ee * two_s2)  # a (1 - e cos E)
        x[ell] = A * ((1.0 - ee) - two_s2)  # a (cos E - e)
        y[ell] = A * b_over_a * sinE
        scale = np.sqrt(mu[ell] * A) / r
        vx[ell] = -scale * sinE
        vy[ell] = scale * b_over_a * cosE
    hyp = ~ell
    if hyp.any():
        A, ee, H = -a[hyp], e[hyp], anomaly[hyp]  # A = |a|
        sh2 = np.sinh(0.5 * H)
        two_sh2 = 2.0 * sh2 * sh2  # cosh H - 1
        sinhH, coshH = np.sinh(H), np.cosh(H)
        b_over_a = np.sqrt((ee - 1.0) * (ee + 1.0))
        r = A * ((ee - 1.0) + ee * two_sh2)  # |a| (e cosh H - 1)
        x[hyp] = A * ((ee - 1.0) - two_sh2)  # |a| (e - cosh H)
        y[hyp] = A * b_over_a * sinhH
        scale = np.sqrt(mu[hyp] * A) / r
        vx[hyp] = -scale * sinhH
        vy[hyp] = scale * b_over_a * coshH
    return x, y, vx, vy


def elements_to_cartesian(
    mu: ArrayLike,
    semi_major_axis: ArrayLike,
    eccentricity: ArrayLike,
    inclination: ArrayLike,
    ascending_node: ArrayLike,
    argument_of_periapsis: ArrayLike,
    mean_anomaly: ArrayLike,
) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """Relative position and velocity from Keplerian elements.

    Parameters
    ----------
    mu : array_like
        Gravitational parameter G (m_central + m_body), length^3/time^2, > 0
        (scalar or shape (k,)).
    semi_major_axis : array_like
        Length; > 0 with e < 1, < 0 with e > 1.
    eccentricity : array_like
        Dimensionless, >= 0, not within ``PARABOLIC_TOLERANCE`` of 1.
    inclination : array_like
        Radians, in [0, pi].
    ascending_node, argument_of_periapsis, mean_anomaly : array_like
        Radians, any real value.

    Returns
    -------
    position : ndarray, shape (k, 3)
        Length, relative to the central body.
    velocity : ndarray, shape (k, 3)
        Length/time, relative to the central body.

    Raises
    ------
    ValidationError
        Any invalid field (the message names field, body index, range and value).
    """
    mu, a, e, inc, node, peri, M = _broadcast(
        mu=mu,
        semi_major_axis=semi_major_axis,
        eccentricity=eccentricity,
        inclination=inclination,
        ascending_node=ascending_node,
        argument_of_periapsis=argument_of_periapsis,
        mean_anomaly=mean_anomaly,
    )
    _check_mu(mu)
    _check_elements(a, e, inc, node, peri, M)
    x, y, vx, vy = _orbit_plane_state(mu, a, e, M)
    cO, sO = np.cos(node), np.sin(node)
    cw, sw = np.cos(peri), np.sin(peri)
    ci, si = np.cos(inc), np.sin(inc)
    P = np.stack([cO * cw - sO * sw * ci, sO * cw + cO * sw * ci, sw * si], axis=1)
    Q = np.stack([-cO * sw - sO * cw * ci, -sO * sw + cO * cw * ci, cw * si], axis=1)
    position = x[:, None] * P + y[:, None] * Q
    velocity = vx[:, None] * P + vy[:, None] * Q
    return position, velocity


# --------------------------------------------------------------------------- state -> elements


def _as_states(position: ArrayLike, velocity: ArrayLike) -> tuple[NDArray, NDArray]:
    r = np.asarray(position, dtype=np.float64)
    v = np.asarray(velocity, dtype=np.float64)
    if r.ndim == 1:
        r = r[None, :]
    if v.ndim == 1:
        v = v[None, :]
    if r.ndim != 2 or r.shape[1] != 3:
        raise ValidationError(f"position must have shape (k, 3) or (3,), got {np.shape(position)}")
    if v.shape != r.shape:
        raise ValidationError(
            f"velocity must have the same shape as position {r.shape}, got {np.shape(velocity)}"
        )
    for name, arr in (("position", r), ("velocity", v)):
        bad = ~np.isfinite(arr).all(axis=1)
        if bad.any():
            k = int(np.flatnonzero(bad)[0])
            raise ValidationError(f"{name}[{k}] must be finite, got {arr[k].tolist()!r}")
    return r, v


def cartesian_to_elements(
    mu: ArrayLike, position: ArrayLike, velocity: ArrayLike
) -> OrbitalElements:
    """Keplerian elements from relative position and velocity.

    Parameters
    ----------
    mu : array_like
        Gravitational parameter G (m_central + m_body), length^3/time^2, > 0
        (scalar or shape (k,)).
    position : array_like, shape (k, 3) or (3,)
        Position relative to the central body, length.
    velocity : array_like, shape (k, 3) or (3,)
        Velocity relative to the central body, length/time.

    Returns
    -------
    OrbitalElements
        Each field shape (k,).  See the module docstring for the parabolic and
        singular (circular, equatorial) conventions.

    Raises
    ------
    ValidationError
        Non-finite input, mu <= 0, a body at the origin, or a rectilinear state
        (zero angular momentum).
    """
    r_vec, v_vec = _as_states(position, velocity)
    k = r_vec.shape[0]
    mu_arr = _vector("mu", mu)
    if mu_arr.size not in (1, k):
        raise ValidationError(f"mu has {mu_arr.size} values but position has {k} rows")
    mu_arr = np.broadcast_to(mu_arr, (k,)).astype(np.float64)
    _check_mu(mu_arr)

    r = np.sqrt(np.einsum("ij,ij->i", r_vec, r_vec))
    bad = ~(r > 0.0)
    if bad.any():
        _fail("position", bad, "non-zero (|position| > 0)", r)
    v2 = np.einsum("ij,ij->i", v_vec, v_vec)
    rdotv = np.einsum("ij,ij->i", r_vec, v_vec)
    h_vec = np.cross(r_vec, v_vec)
    h_xy = np.hypot(h_vec[:, 0], h_vec[:, 1])
    h = np.hypot(h_xy, h_vec[:, 2])
    bad = ~(h > 1e-15 * r * np.sqrt(v2))
    if bad.any():
        k0 = int(np.flatnonzero(bad)[0])
        raise ValidationError(
            f"position[{k0}] and velocity[{k0}] must not be parallel, and velocity[{k0}] must be "
            f"non-zero (a rectilinear orbit has no orbital plane), got specific angular momentum "
            f"{float(h[k0])!r}"
        )

    # Orientation of the orbital plane.
    inclination = np.arctan2(h_xy, h_vec[:, 2])
    cos_i = h_vec[:, 2] / h
    sin_i = h_xy / h
    equatorial = sin_i < EQUATORIAL_TOLERANCE
    node = np.where(equatorial, 0.0, np.arctan2(h_vec[:, 0], -h_vec[:, 1]))
    cO, sO = np.cos(node), np.sin(node)
    # Argument of latitude: angle from the node direction, in the direction of motion.
    along_node = r_vec[:, 0] * cO + r_vec[:, 1] * sO
    across = cos_i * (-r_vec[:, 0] * sO + r_vec[:, 1] * cO) + sin_i * r_vec[:, 2]
    latitude = np.arctan2(across, along_node)

    # Shape: semi-latus rectum, eccentricity from its two components, a from the energy.
    p = h * h / mu_arr
    e_cos = p / r - 1.0
    e_sin = np.sqrt(p / mu_arr) * rdotv / r
    e = np.hypot(e_cos, e_sin)
    inverse_a = 2.0 / r - v2 / mu_arr
    true_anomaly = np.arctan2(e_sin, e_cos)
    circular = e < CIRCULAR_TOLERANCE
    true_anomaly = np.where(circular, latitude, true_anomaly)
    periapsis = np.where(circular, 0.0, latitude - true_anomaly)

    parabolic = (
        (np.abs(e - 1.0) < PARABOLIC_TOLERANCE)
        | ((e < 1.0) & ~(inverse_a > 0.0))
        | ((e > 1.0) & ~(inverse_a < 0.0))
    )
    with np.errstate(divide="ignore"):
        a = np.where(parabolic, np.inf, 1.0 / np.where(inverse_a != 0.0, inverse_a, 1.0))
    e = np.where(parabolic, 1.0, e)

    # Mean anomaly.  From the true anomaly when e is small (then M, nu and omega share
    # their roundoff and stay consistent); from r, r.v and a otherwise, because the
    # true-anomaly route cancels near apoapsis of near-parabolic ellipses and near the
    # asymptotes of hyperbolae, where the state still fixes M well.
    mean = np.empty(k)
    ell = (e < 1.0) & ~parabolic
    low = ell & (e <= 0.5)
    if low.any():
        ee, nu = e[low], true_anomaly[low]
        E = np.arctan2(np.sqrt((1.0 - ee) * (1.0 + ee)) * np.sin(nu), ee + np.cos(nu))
        mean[low] = _wrap(_kepler_elliptic(E, ee))
    high = ell & (e > 0.5)
    if high.any():
        A = a[high]
        # e sin E = r.v / sqrt(mu a), e cos E = 1 - r / a
        E = np.arctan2(rdotv[high] / np.sqrt(mu_arr[high] * A), 1.0 - r[high] / A)
        mean[high] = _wrap(_kepler_elliptic(E, e[high]))
    hyp = (e > 1.0) & ~parabolic
    if hyp.any():
        # e sinh H = r.v / sqrt(mu |a|)
        ee = e[hyp]
        H = np.arcsinh(rdotv[hyp] / (ee * np.sqrt(-mu_arr[hyp] * a[hyp])))
        mean[hyp] = _kepler_hyperbolic(H, ee)
    if parabolic.any():
        D = np.tan(0.5 * true_anomaly[parabolic])
        mean[parabolic] = D + D * D * D / 3.0

    return OrbitalElements(
        semi_major_axis=a,
        eccentricity=e,
        inclination=inclination,
        ascending_node=_wrap(node),
        argument_of_periapsis=_wrap(periapsis),
        mean_anomaly=mean,
    )


# --------------------------------------------------------------------------- systems


def _check_frame(frame: str) -> None:
    if frame not in FRAMES:
        raise ValidationError(f"frame must be one of {', '.join(map(repr, FRAMES))}, got {frame!r}")


def _check_G(G: float) -> float:
    try:
        value = float(G)
    except (TypeError, ValueError):
        raise ValidationError(f"G must be a finite number > 0, got {G!r}") from None
    if not (np.isfinite(value) and value > 0.0):
        raise ValidationError(f"G must be finite and > 0, got {value!r}")
    return value


def state_from_elements(
    primary_mass: float,
    mass: ArrayLike,
    semi_major_axis: ArrayLike,
    eccentricity: ArrayLike,
    inclination: ArrayLike,
    ascending_node: ArrayLike,
    argument_of_periapsis: ArrayLike,
    mean_anomaly: ArrayLike,
    G: float,
    frame: str = "jacobi",
) -> tuple[NDArray[np.float64], NDArray[np.float64], NDArray[np.float64]]:
    """Barycentric masses, positions and velocities of a primary and k bodies given by elements.

    Parameters
    ----------
    primary_mass : float
        Mass of the central body, mass unit, > 0.
    mass : array_like, shape (k,)
        Masses of the orbiting bodies, mass unit, >= 0.  Massive bodies first;
        test particles (mass 0) after all of them.
    semi_major_axis, eccentricity, inclination, ascending_node, argument_of_periapsis, mean_anomaly : array_like
        Elements of each body (length; dimensionless; radians), scalars broadcast.
    G : float
        Gravitational constant in length^3 / (mass time^2), > 0.
    frame : {"jacobi", "heliocentric"}
        What the elements are relative to (see the module docstring).

    Returns
    -------
    mass : ndarray, shape (k+1,)
        Primary first, then the k bodies.
    position : ndarray, shape (k+1, 3)
        Length, barycentric frame of all the bodies (centre of mass at the origin).
    velocity : ndarray, shape (k+1, 3)
        Length/time, barycentric (total momentum zero).

    Raises
    ------
    ValidationError
        Invalid masses, G, frame or elements, or a massive body listed after a test particle.
    """
    _check_frame(frame)
    G = _check_G(G)
    m0 = _vector("primary_mass", primary_mass)
    if m0.size != 1:
        raise ValidationError(f"primary_mass must be a single number, got shape {m0.shape}")
    m0 = float(m0[0])
    if not (np.isfinite(m0) and m0 > 0.0):
        raise ValidationError(f"primary_mass must be finite and > 0, got {m0!r}")
    m, a, e, inc, node, peri, M = _broadcast(
        mass=mass,
        semi_major_axis=semi_major_axis,
        eccentricity=eccentricity,
        inclination=inclination,
        ascending_node=ascending_node,
        argument_of_periapsis=argument_of_periapsis,
        mean_anomaly=mean_anomaly,
    )
    bad = ~(np.isfinite(m) & (m >= 0.0))
    if bad.any():
        _fail("mass", bad, "finite and >= 0", m)
    massive = m > 0.0
    n_massive = int(massive.sum())
    if n_massive and not massive[:n_massive].all():
        first_test = int(np.flatnonzero(~massive)[0])
        k = int(np.flatnonzero(massive[first_test:])[0]) + first_test
        raise ValidationError(
            f"mass[{k}] = {float(m[k])!r} is a massive body listed after the test particle mass[{first_test}] = 0; "
            "massive bodies must come first"
        )

    if frame == "heliocentric":
        mu = G * (m0 + m)
        rel_r, rel_v = elements_to_cartesian(mu, a, e, inc, node, peri, M)
        pos = np.vstack([np.zeros(3), rel_r])
        vel = np.vstack([np.zeros(3), rel_v])
    else:
        interior = m0 + np.concatenate([[0.0], np.cumsum(m[:n_massive])])  # mass inside body j
        mu = np.empty_like(m)
        mu[:n_massive] = G * interior[1:]  # interior mass + m_k
        mu[n_massive:] = G * interior[-1]
        rho, rho_v = elements_to_cartesian(mu, a, e, inc, node, peri, M)
        # Centre of mass of the primary and bodies 0..j: T_j = sum (m_i / M_i) rho_i,
        # with the primary at the origin; body j sits at T_{j-1} + rho_j.
        weight = np.zeros_like(m)
        weight[:n_massive] = m[:n_massive] / interior[1:]
        com_r = np.vstack([np.zeros(3), np.cumsum(weight[:n_massive, None] * rho[:n_massive], axis=0)])
        com_v = np.vstack([np.zeros(3), np.cumsum(weight[:n_massive, None] * rho_v[:n_massive], axis=0)])
        inner_r = np.vstack([com_r[:n_massive], np.repeat(com_r[-1:], m.size - n_massive, axis=0)])
        inner_v = np.vstack([com_v[:n_massive], np.repeat(com_v[-1:], m.size - n_massive, axis=0)])
        pos = np.vstack([np.zeros(3), inner_r + rho])
        vel = np.vstack([np.zeros(3), inner_v + rho_v])

    masses = np.concatenate([[m0], m])
    total = masses.sum()
    pos -= (masses[:, None] * pos).sum(axis=0) / total
    vel -= (masses[:, None] * vel).sum(axis=0) / total
    return masses, np.ascontiguousarray(pos), np.ascontiguousarray(vel)


def elements_from_state(
    mass: ArrayLike,
    position: ArrayLike,
    velocity: ArrayLike,
    n_active: int,
    G: float,
    frame: str = "heliocentric",
    primary: int = 0,
) -> OrbitalElements:
    """Elements of every body except the primary, in the heliocentric or Jacobi frame.

    Parameters
    ----------
    mass : array_like, shape (n,)
        Masses, mass unit; indices ``< n_active`` are massive, the rest test particles.
    position : array_like, shape (n, 3)
        Positions in any inertial frame, length.
    velocity : array_like, shape (n, 3)
        Velocities in the same frame, length/time.
    n_active : int
        Number of massive bodies (they come first), 1 <= n_active <= n.
    G : float
        Gravitational constant, length^3 / (mass time^2), > 0.
    frame : {"heliocentric", "jacobi"}
        Heliocentric: about the primary with mu = G (m_primary + m_j).  Jacobi: the
        bodies in index order (primary first) each about the centre of mass of the
        massive bodies before it, mu = G (interior mass + m_j); test particles
        about the centre of mass of all massive bodies.
    primary : int
        Index of the central body (massive, ``< n_active``).  Default 0.

    Returns
    -------
    OrbitalElements
        Fields of shape (n - 1,), the bodies in index order with the primary left out.

    Raises
    ------
    ValidationError
        Bad shapes, non-finite values, negative masses, bad n_active/primary/frame/G.
    """
    _check_frame(frame)
    G = _check_G(G)
    m = _vector("mass", mass)
    n = m.size
    r = np.asarray(position, dtype=np.float64)
    v = np.asarray(velocity, dtype=np.float64)
    if r.shape != (n, 3):
        raise ValidationError(f"position must have shape ({n}, 3) to match mass, got {r.shape}")
    if v.shape != (n, 3):
        raise ValidationError(f"velocity must have shape ({n}, 3) to match mass, got {v.shape}")
    bad = ~(np.isfinite(m) & (m >= 0.0))
    if bad.any():
        _fail("mass", bad, "finite and >= 0", m)
    if isinstance(n_active, bool) or int(n_active) != n_active or not 1 <= int(n_active) <= n:
        raise ValidationError(f"n_active must be an integer in [1, {n}], got {n_active!r}")
    n_active = int(n_active)
    if isinstance(primary, bool) or int(primary) != primary or not 0 <= int(primary) < n_active:
        raise ValidationError(
            f"primary must be the index of a massive body, an integer in [0, {n_active - 1}], got {primary!r}"
        )
    primary = int(primary)
    if not m[primary] > 0.0:
        raise ValidationError(f"mass[{primary}] (the primary) must be > 0, got {float(m[primary])!r}")
    others = np.array([j for j in range(n) if j != primary], dtype=np.intp)

    if frame == "heliocentric":
        mu = G * (m[primary] + m[others])
        rel_r = r[others] - r[primary]
        rel_v = v[others] - v[primary]
    else:
        order = np.concatenate([[primary], others])
        massive_order = order[order < n_active]
        mm = m[massive_order]
        cum_m = np.cumsum(mm)
        cum_r = np.cumsum(mm[:, None] * r[massive_order], axis=0) / cum_m[:, None]
        cum_v = np.cumsum(mm[:, None] * v[massive_order], axis=0) / cum_m[:, None]
        n_m = massive_order.size
        # Massive body at position j (>= 1) in Jacobi order: interior = first j massive bodies.
        inner_r = np.vstack([cum_r[: n_m - 1], np.repeat(cum_r[-1:], others.size - (n_m - 1), axis=0)])
        inner_v = np.vstack([cum_v[: n_m - 1], np.repeat(cum_v[-1:], others.size - (n_m - 1), axis=0)])
        inner_m = np.concatenate([cum_m[: n_m - 1], np.full(others.size - (n_m - 1), cum_m[-1])])
        mu = G * (inner_m + m[others])
        rel_r = r[others] - inner_r
        rel_v = v[others] - inner_v
    return cartesian_to_elements(mu, rel_r, rel_v)
