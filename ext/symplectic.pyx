# cython: language_level=3
"""Fixed-step symplectic compositions of the kick-drift-kick leapfrog (compiled layer).

One call runs many steps with the GIL released.  A composition with stage weights
w_1..w_s is applied as the merged sequence K(c_0 h) D(d_1 h) K(c_1 h) ... D(d_s h) K(c_s h),
where the d are the weights and the c merge neighbouring half-kicks inside a step.  The
acceleration at the end of a step is reused as the first kick of the next step, so a step
costs s force evaluations; kicks of consecutive steps are *not* merged, so the state at
every step end is synchronised and splitting a run into calls never changes a bit.
"""
import numpy as np

from common cimport STATUS_OK, STATUS_SINGULAR, STATUS_EVENT
from forces cimport lb_gravity_accelerations

from events cimport lb_event_config, lb_check_events


cdef int composition_loop(double* pos, double* vel, const double* mass, const double* radius,
                          Py_ssize_t n, Py_ssize_t n_active, double G, double eps2,
                          const double* kick, const double* drift, Py_ssize_t stages,
                          Py_ssize_t n_steps, double* acc, double* soa, int threads,
                          const lb_event_config* events, Py_ssize_t* steps_done,
                          Py_ssize_t* body_i, Py_ssize_t* body_j) noexcept nogil:
    cdef Py_ssize_t step, s, k, m = 3 * n
    cdef double c, d
    cdef int status
    steps_done[0] = 0
    if n_steps == 0:
        return STATUS_OK
    status = lb_gravity_accelerations(pos, mass, n, n_active, G, eps2, acc, soa, threads, body_i)
    if status != 0:
        return STATUS_SINGULAR
    for step in range(n_steps):
        for s in range(stages):
            c = kick[s]
            d = drift[s]
            for k in range(m):
                vel[k] += c * acc[k]
            for k in range(m):
                pos[k] += d * vel[k]
            status = lb_gravity_accelerations(pos, mass, n, n_active, G, eps2, acc, soa, threads,
                                              body_i)
            if status != 0:
                return STATUS_SINGULAR
        c = kick[stages]
        for k in range(m):
            vel[k] += c * acc[k]
        steps_done[0] = step + 1
        if events.enabled:
            if lb_check_events(pos, vel, mass, radius, n, n_active, G, events, body_i, body_j):
                return STATUS_EVENT
    return STATUS_OK


def run_composition(double[:, ::1] position, double[:, ::1] velocity, const double[::1] mass,
                    const double[::1] radius, Py_ssize_t n_active, double G, double softening,
                    double step, const double[::1] kick_weights, const double[::1] drift_weights,
                    Py_ssize_t n_steps, double[::1] acc_scratch, double[::1] soa_scratch,
                    int threads, const unsigned char[::1] event_config):
    """Advance ``position``/``velocity`` in place by ``n_steps`` composition steps.

    ``kick_weights`` has one more entry than ``drift_weights``; each is multiplied by
    ``step``.  ``event_config`` holds the bytes of an ``lb_event_config`` (all zero:
    no event checks).  Returns ``(status, steps_done, body_i, body_j)``.
    """
    cdef Py_ssize_t n = position.shape[0]
    cdef Py_ssize_t stages = drift_weights.shape[0]
    if velocity.shape[0] != n or mass.shape[0] != n or radius.shape[0] != n:
        raise ValueError("position, velocity, mass and radius must describe the same bodies")
    if kick_weights.shape[0] != stages + 1:
        raise ValueError("kick_weights must have len(drift_weights) + 1 entries")
    if acc_scratch.shape[0] < 3 * n or soa_scratch.shape[0] < 4 * n_active:
        raise ValueError("scratch buffers too small")
    if <size_t>event_config.shape[0] < sizeof(lb_event_config):
        raise ValueError(f"event_config must hold {sizeof(lb_event_config)} bytes")
    kick = np.ascontiguousarray(np.asarray(kick_weights) * step)
    drift = np.ascontiguousarray(np.asarray(drift_weights) * step)
    cdef const double[::1] kick_h = kick
    cdef const double[::1] drift_h = drift
    cdef Py_ssize_t done = 0, body_i = -1, body_j = -1
    cdef int status = STATUS_OK
    cdef const lb_event_config* events = <const lb_event_config*> &event_config[0]
    if n == 0 or n_steps == 0:
        return STATUS_OK, 0, -1, -1
    with nogil:
        status = composition_loop(&position[0, 0], &velocity[0, 0], &mass[0], &radius[0], n,
                                  n_active, G, softening * softening, &kick_h[0], &drift_h[0],
                                  stages, n_steps, &acc_scratch[0], &soa_scratch[0], threads,
                                  events, &done, &body_i, &body_j)
    return status, done, body_i, body_j


def event_config_size():
    """Size in bytes of the C event configuration struct."""
    return sizeof(lb_event_config)
