# cython: language_level=3
"""Python access to the universal-variable Kepler drift of kepler.pxd (used by tests and tools).

The stepping kernels cimport the inline solver from kepler.pxd directly; this module only wraps it.
"""
import numpy as np

from kepler cimport lb_kepler_drift_many, lb_stumpff


def stumpff(double x):
    """Return the Stumpff functions (c0, c1, c2, c3) of x (dimensionless)."""
    cdef double c0, c1, c2, c3
    lb_stumpff(x, &c0, &c1, &c2, &c3)
    return c0, c1, c2, c3


def _drift(double[::1] gm, Py_ssize_t gm_stride, double[:, ::1] position, double[:, ::1] velocity,
           double dt):
    """In-place drift of C-contiguous float64 arrays; returns -1 or the failing body's index."""
    cdef Py_ssize_t n = position.shape[0]
    cdef Py_ssize_t bad
    if n == 0:
        return -1
    with nogil:
        bad = lb_kepler_drift_many(&gm[0], gm_stride, &position[0, 0], &velocity[0, 0], n, dt)
    return bad


def drift(gm, position, velocity, double dt):
    """Advance bodies on two-body (Kepler) orbits by a time dt.

    Parameters
    ----------
    gm : float or array_like, shape (n,)
        Gravitational parameter G * M of the central mass [length^3 / time^2], one for all bodies
        or one per body.
    position, velocity : array_like, shape (3,) or (n, 3)
        Positions [length] and velocities [length / time] relative to the central mass.
    dt : float
        Time to advance [time]; negative goes backward.

    Returns
    -------
    position, velocity : numpy.ndarray
        New arrays with the shape of the input.

    Raises
    ------
    ConvergenceError
        If the Kepler equation of a body does not converge (names the body and its state).
    """
    from .exceptions import ConvergenceError, ValidationError
    pos = np.array(position, dtype=np.float64, order="C", copy=True)
    vel = np.array(velocity, dtype=np.float64, order="C", copy=True)
    single = pos.ndim == 1
    pos2 = np.ascontiguousarray(pos.reshape(-1, 3))
    vel2 = np.ascontiguousarray(vel.reshape(-1, 3))
    if pos2.shape != vel2.shape:
        raise ValidationError(f"position and velocity must have the same shape (n, 3), got "
                              f"{pos.shape} and {vel.shape}")
    gm_array = np.ascontiguousarray(np.atleast_1d(np.asarray(gm, dtype=np.float64)))
    if gm_array.size not in (1, pos2.shape[0]):
        raise ValidationError(f"gm must be a scalar or have one value per body ({pos2.shape[0]}), "
                              f"got {gm_array.size} values")
    bad_gm = np.flatnonzero(~(np.isfinite(gm_array) & (gm_array > 0)))
    if bad_gm.size:
        raise ValidationError(f"gm[{bad_gm[0]}] must be finite and > 0, got {gm_array[bad_gm[0]]}")
    if not np.isfinite(dt):
        raise ValidationError(f"dt must be finite, got {dt!r}")
    bad_state = np.flatnonzero(~(np.isfinite(pos2).all(axis=1) & np.isfinite(vel2).all(axis=1)))
    if bad_state.size:
        raise ValidationError(f"position[{bad_state[0]}] and velocity[{bad_state[0]}] must be finite, "
                              f"got {pos2[bad_state[0]]} and {vel2[bad_state[0]]}")
    stride = 0 if gm_array.size == 1 else 1
    bad = _drift(gm_array, stride, pos2, vel2, dt)
    if bad >= 0:
        raise ConvergenceError(
            f"Kepler drift did not converge for body {bad}: position {np.asarray(position).reshape(-1, 3)[bad]},"
            f" velocity {np.asarray(velocity).reshape(-1, 3)[bad]}, gm {gm_array[bad * stride]}, dt {dt}")
    if single:
        return pos2.reshape(3), vel2.reshape(3)
    return pos2, vel2
