# cython: language_level=3
"""Pairwise Newtonian gravity by direct summation: Python entry points.

Massive bodies occupy indices ``< n_active``; the rest are test particles that feel
gravity but source none, so a call costs O(n_active * n).  The loop itself lives in
``gravity_kernel.h`` (shared with the stepping kernels through ``forces.pxd``).
"""
import numpy as np

from forces cimport lb_gravity_accelerations, lb_gravity_potential, lb_have_openmp

HAVE_OPENMP = bool(lb_have_openmp())


def workspace(Py_ssize_t n):
    """Scratch buffer for the kernel with ``n`` bodies (one per propagator, never shared)."""
    return np.zeros(7 * max(n, 1), dtype=np.float64)


def _as_state(position, mass, Py_ssize_t n_active):
    position = np.ascontiguousarray(position, dtype=np.float64)
    mass = np.ascontiguousarray(mass, dtype=np.float64)
    if position.ndim != 2 or position.shape[1] != 3:
        raise ValueError(f"position must have shape (n, 3), got {position.shape}")
    if mass.shape != (position.shape[0],):
        raise ValueError(f"mass must have shape ({position.shape[0]},), got {mass.shape}")
    if not 0 <= n_active <= position.shape[0]:
        raise ValueError(f"n_active must be in [0, {position.shape[0]}], got {n_active}")
    return position, mass


def accelerations(position, mass, Py_ssize_t n_active, double G, double softening=0.0,
                  int threads=1, scratch=None, out=None):
    """Accelerations of all bodies from the ``n_active`` massive ones.

    Parameters
    ----------
    position : array_like, shape (n, 3)
        Positions, in the system's length unit.
    mass : array_like, shape (n,)
        Masses, in the system's mass unit (entries from ``n_active`` on are ignored).
    n_active : int
        Number of massive bodies; they come first.
    G : float
        Gravitational constant in the system's units.
    softening : float
        Plummer softening length, in the length unit.
    threads : int
        OpenMP threads, used only above a size threshold.  Results are bitwise the
        same for every thread count.
    scratch : ndarray, optional
        Buffer from :func:`workspace` to reuse between calls.
    out : ndarray, optional
        Output array, shape (n, 3), float64, C-contiguous.

    Returns
    -------
    ndarray, shape (n, 3)
        Accelerations, in length unit per time unit squared.
    """
    position, mass = _as_state(position, mass, n_active)
    cdef Py_ssize_t n = position.shape[0]
    if scratch is None or scratch.shape[0] < 7 * n:
        scratch = workspace(n)
    if out is None:
        out = np.empty((n, 3), dtype=np.float64)
    if n == 0:
        return out
    cdef const double[:, ::1] pos = position
    cdef const double[::1] m = mass
    cdef double[:, ::1] acc = out
    cdef double[::1] soa = scratch
    cdef Py_ssize_t bad = -1
    cdef int status
    cdef double eps2 = softening * softening
    with nogil:
        status = lb_gravity_accelerations(&pos[0, 0], &m[0], n, n_active, G, eps2,
                                          &acc[0, 0], &soa[0], threads, &bad)
    if status != 0:
        from libration.exceptions import SingularityError
        raise SingularityError(
            f"acceleration of body {bad} is not finite: it sits at the position of a "
            f"massive body (distance 0); separate them or use softening > 0")
    return out


def potential_energy(position, mass, Py_ssize_t n_active, double G, double softening=0.0):
    """Potential energy of the massive bodies (test particles contribute nothing)."""
    position, mass = _as_state(position, mass, n_active)
    if n_active < 2:
        return 0.0
    cdef const double[:, ::1] pos = position
    cdef const double[::1] m = mass
    cdef double result
    with nogil:
        result = lb_gravity_potential(&pos[0, 0], &m[0], n_active, G, softening * softening)
    return result
