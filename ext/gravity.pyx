# cython: language_level=3
"""Pairwise Newtonian gravity by direct summation: Python entry points.

Massive bodies occupy indices ``< n_active``; the rest are test particles that feel
gravity but source none, so a call costs O(n_active * n).  The loop itself lives in
``gravity_kernel.h`` (shared with the stepping kernels through ``forces.pxd``).
Every body's sum runs over the sources in index order, so results are bitwise the
same for every thread count and every instruction-set variant of the loop.
"""
import numpy as np

from forces cimport lb_gravity_accelerations, lb_gravity_potential, lb_have_openmp

from libration.exceptions import SingularityError, ValidationError


cdef extern from "gravity_kernel.h" nogil:
    int LB_ISA_BASELINE, LB_ISA_AVX2, LB_ISA_AVX512
    double LB_PARALLEL_MIN_INTERACTIONS
    int lb_gravity_isa_best()
    int lb_gravity_isa_available(int isa)
    int lb_gravity_accelerations_isa(int isa, const double* position, const double* mass,
                                     Py_ssize_t n, Py_ssize_t n_active, double G, double eps2,
                                     double* acc, double* soa, int threads, Py_ssize_t* bad)

HAVE_OPENMP = bool(lb_have_openmp())
#: Instruction-set variants of the kernel's loop, by name (all give the same bits).
ISA_CODES = {"baseline": LB_ISA_BASELINE, "avx2": LB_ISA_AVX2, "avx512": LB_ISA_AVX512}
#: Below this many interactions (n_active * n) the kernel stays on one thread.
PARALLEL_MIN_INTERACTIONS = LB_PARALLEL_MIN_INTERACTIONS


def available_isas():
    """Names of the loop variants this CPU can run, narrowest first."""
    return [name for name, code in ISA_CODES.items() if lb_gravity_isa_available(code)]


def best_isa():
    """Name of the loop variant :func:`accelerations` uses on this CPU."""
    code = lb_gravity_isa_best()
    return next(name for name, value in ISA_CODES.items() if value == code)


def workspace(Py_ssize_t n_active):
    """Scratch buffer for the kernel with ``n_active`` massive bodies (one per propagator, never shared).

    The kernel keeps the sources (massive bodies) in structure-of-arrays form there:
    4 * n_active doubles, so test particles cost no scratch memory at all.
    """
    return np.zeros(4 * max(n_active, 1), dtype=np.float64)


def _as_state(position, mass, Py_ssize_t n_active):
    position = np.ascontiguousarray(position, dtype=np.float64)
    mass = np.ascontiguousarray(mass, dtype=np.float64)
    if position.ndim != 2 or position.shape[1] != 3:
        raise ValidationError(f"position must have shape (n, 3), got {position.shape}")
    if mass.shape != (position.shape[0],):
        raise ValidationError(f"mass must have shape ({position.shape[0]},) to match position, "
                              f"got {mass.shape}")
    if not 0 <= n_active <= position.shape[0]:
        raise ValidationError(f"n_active must be in [0, {position.shape[0]}], got {n_active}")
    return position, mass


def _singular(position, mass, Py_ssize_t n_active, Py_ssize_t bad, double softening):
    """The SingularityError for body ``bad``, naming the body it coincides with."""
    for i in [bad] + list(range(n_active)):
        if not np.all(np.isfinite(position[i])):
            return SingularityError(f"position[{i}] must be finite, got {position[i].tolist()}")
        if i < n_active and not np.isfinite(mass[i]):
            return SingularityError(f"mass[{i}] must be finite, got {mass[i]}")
    same = np.flatnonzero(np.all(position[:n_active] == position[bad], axis=1))
    same = same[same != bad]
    if same.size:
        return SingularityError(
            f"body {bad} and massive body {int(same[0])} are at the same position "
            f"{position[bad].tolist()} (distance 0) with softening {softening}: the "
            f"acceleration of body {bad} is infinite; separate them or use softening > 0")
    return SingularityError(
        f"acceleration of body {bad} is not finite (overflow: a distance too small or a "
        f"mass or position too large for float64)")


def _check_threads(int threads):
    if threads < 1:
        raise ValidationError(f"threads must be an integer >= 1, got {threads}")


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
        OpenMP threads, used only above ``PARALLEL_MIN_INTERACTIONS``.  Results are
        bitwise the same for every thread count.
    scratch : ndarray, optional
        Buffer from :func:`workspace` to reuse between calls.
    out : ndarray, optional
        Output array, shape (n, 3), float64, C-contiguous.

    Returns
    -------
    ndarray, shape (n, 3)
        Accelerations, in length unit per time unit squared.

    Raises
    ------
    SingularityError
        A body sits at the position of a massive body with no softening (names both).
    """
    return _accelerations(lb_gravity_isa_best(), position, mass, n_active, G, softening,
                          threads, scratch, out)


def accelerations_with_isa(str isa, position, mass, Py_ssize_t n_active, double G,
                           double softening=0.0, int threads=1):
    """:func:`accelerations` with the loop variant named ``isa`` (for tests and bench/).

    ``isa`` is one of :func:`available_isas`; every variant gives the same bits.
    """
    if isa not in ISA_CODES:
        raise ValidationError(f"isa must be one of {sorted(ISA_CODES)}, got {isa!r}")
    if not lb_gravity_isa_available(ISA_CODES[isa]):
        raise ValidationError(f"isa {isa!r} is not available on this CPU; available: "
                              f"{available_isas()}")
    return _accelerations(ISA_CODES[isa], position, mass, n_active, G, softening, threads,
                          None, None)


def _accelerations(int isa, position, mass, Py_ssize_t n_active, double G, double softening,
                   int threads, scratch, out):
    position, mass = _as_state(position, mass, n_active)
    _check_threads(threads)
    cdef Py_ssize_t n = position.shape[0]
    if scratch is None or scratch.shape[0] < 4 * n_active:
        scratch = workspace(n_active)
    if out is None:
        out = np.empty((n, 3), dtype=np.float64)
    elif (not isinstance(out, np.ndarray) or out.shape != (n, 3) or out.dtype != np.float64
          or not out.flags.c_contiguous or not out.flags.writeable):
        raise ValidationError(
            f"out must be a writeable C-contiguous float64 array of shape ({n}, 3), got "
            f"{type(out).__name__} {getattr(out, 'dtype', '')} {getattr(out, 'shape', '')}")
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
        status = lb_gravity_accelerations_isa(isa, &pos[0, 0], &m[0], n, n_active, G, eps2,
                                              &acc[0, 0], &soa[0], threads, &bad)
    if status != 0:
        raise _singular(position, mass, n_active, bad, softening)
    return out


def potential_energy(position, mass, Py_ssize_t n_active, double G, double softening=0.0):
    """Potential energy of the massive bodies (test particles contribute nothing).

    Parameters
    ----------
    position : array_like, shape (n, 3)
        Positions, in the system's length unit.
    mass : array_like, shape (n,)
        Masses, in the system's mass unit.
    n_active : int
        Number of massive bodies; they come first.
    G : float
        Gravitational constant in the system's units.
    softening : float
        Plummer softening length, in the length unit.

    Returns
    -------
    float
        ``-sum_{i<j} G m_i m_j / sqrt(r_ij^2 + softening^2)``, in the system's energy
        unit, accumulated with compensated (Kahan) sums in a fixed order.
    """
    position, mass = _as_state(position, mass, n_active)
    if n_active < 2:
        return 0.0
    cdef const double[:, ::1] pos = position
    cdef const double[::1] m = mass
    cdef double result
    with nogil:
        result = lb_gravity_potential(&pos[0, 0], &m[0], n_active, G, softening * softening)
    if not np.isfinite(result):
        sub = position[:n_active]
        for i in range(n_active):
            same = np.flatnonzero(np.all(sub == sub[i], axis=1))
            same = same[same != i]
            if same.size:
                raise SingularityError(
                    f"potential energy is infinite: massive bodies {i} and {int(same[0])} "
                    f"are at the same position {sub[i].tolist()} (distance 0)")
        raise SingularityError(f"potential energy is not finite (got {result})")
    return result
