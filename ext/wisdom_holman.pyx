# cython: language_level=3
"""Wisdom–Holman maps (compiled layer): whole step loops with the GIL released.

Two splittings of the planetary Hamiltonian H = H_Kepler + H_interaction:

* democratic heliocentric (Duncan, Levison & Lee 1998, AJ 116, 2067): heliocentric positions Q,
  barycentric velocities V.  One step is  K(h/2) J(h/2) D(h) J(h/2) K(h/2)  with K the kick by the
  planet-planet accelerations, J the linear drift Q += t * sum(m V) / m0 ("jump", the Sun's
  kinetic term) and D the Kepler drift of every body about G m0.
* Jacobi (Wisdom & Holman 1991, AJ 102, 1528): Jacobi positions and velocities.  One step is
  K(h/2) D(h) K(h/2), the Kepler drift of body i about G m0 eta_i / eta_(i-1) (eta_i the mass of
  bodies 0..i) and the kick by the Jacobi-coordinate interaction accelerations.

The internal state is *lazy*: the closing half-kick of a step is merged with the opening
half-kick of the next, so the arrays hold the state before that pending kick.  The caller
passes the first kick (pending + h/2) and the result is again pending h/2.  Test particles
(indices >= n_active) ride along: the kick costs O(n_active) per particle, the jump and the
Kepler drift O(1).  Row 0 (the central body) is not stepped; the Python layer reconstructs it.
"""
import numpy as np

from libc.math cimport sqrt, isfinite, INFINITY

from common cimport STATUS_OK, STATUS_SINGULAR, STATUS_NO_CONVERGENCE, STATUS_EVENT
from forces cimport lb_gravity_accelerations
from kepler cimport lb_kepler_drift_many

from events cimport lb_event_config, lb_check_events


# Below this many bodies (and with no test particles) the kick uses the symmetric pair loop
# below: n (n - 1) / 2 square roots instead of the kernel's n (n - 1), and no set-up.  The pair
# order is fixed, so results are the same on every run and thread count.
cdef enum:
    PAIR_LOOP_MAX = 24


cdef int pair_accelerations(const double* pos, const double* mass, Py_ssize_t n, double G,
                            double eps2, double* acc, Py_ssize_t* bad) noexcept nogil:
    """Accelerations of n massive bodies on each other, each pair once (Newton's third law)."""
    cdef Py_ssize_t i, j
    cdef double xi, yi, zi, ax, ay, az, dx, dy, dz, r2, inv3, fi, fj
    for i in range(3 * n):
        acc[i] = 0.0
    for i in range(n):
        xi = pos[3 * i]
        yi = pos[3 * i + 1]
        zi = pos[3 * i + 2]
        ax = 0.0
        ay = 0.0
        az = 0.0
        for j in range(i + 1, n):
            dx = pos[3 * j] - xi
            dy = pos[3 * j + 1] - yi
            dz = pos[3 * j + 2] - zi
            r2 = dx * dx + dy * dy + dz * dz + eps2
            if not (r2 > 0.0 and r2 < INFINITY):
                bad[0] = j
                return 1
            inv3 = G / (r2 * sqrt(r2))
            fi = mass[j] * inv3
            fj = mass[i] * inv3
            ax += fi * dx
            ay += fi * dy
            az += fi * dz
            acc[3 * j] -= fj * dx
            acc[3 * j + 1] -= fj * dy
            acc[3 * j + 2] -= fj * dz
        acc[3 * i] += ax
        acc[3 * i + 1] += ay
        acc[3 * i + 2] += az
    return 0


cdef inline int accelerations(const double* pos, const double* mass, Py_ssize_t n,
                              Py_ssize_t n_active, double G, double eps2, double* acc, double* soa,
                              int threads, Py_ssize_t* bad) noexcept nogil:
    """Small systems: the massive bodies by the pair loop (test particles, if any, by the gravity
    kernel, whose massive rows are then overwritten), so the massive bodies' motion is bitwise
    the same with or without test particles.  Larger systems: the gravity kernel."""
    if n_active <= PAIR_LOOP_MAX:
        if n > n_active:
            if lb_gravity_accelerations(pos, mass, n, n_active, G, eps2, acc, soa, threads, bad) != 0:
                return 1
        return pair_accelerations(pos, mass, n_active, G, eps2, acc, bad)
    return lb_gravity_accelerations(pos, mass, n, n_active, G, eps2, acc, soa, threads, bad)


# ----------------------------------------------------------------------------- democratic
cdef int dh_accelerations(const double* pos, const double* mass, Py_ssize_t n,
                          Py_ssize_t n_active, double G, double eps2, double* acc, double* soa,
                          int threads, Py_ssize_t* bad) noexcept nogil:
    """Planet-planet accelerations of bodies 1..n-1 (row 0 untouched) into acc."""
    cdef Py_ssize_t k
    if n_active <= 1:
        for k in range(3, 3 * n):
            acc[k] = 0.0
        return 0
    if accelerations(pos + 3, mass + 1, n - 1, n_active - 1, G, eps2, acc + 3, soa, threads,
                     bad) != 0:
        bad[0] += 1
        return 1
    return 0


cdef inline void dh_jump(double* pos, const double* vel, const double* mass, Py_ssize_t n,
                         Py_ssize_t n_active, double t) noexcept nogil:
    """Q_i += t * sum_(massive j >= 1) m_j V_j / m_0 for every body i >= 1."""
    cdef double px = 0.0, py = 0.0, pz = 0.0, scale
    cdef Py_ssize_t i
    for i in range(1, n_active):
        px += mass[i] * vel[3 * i]
        py += mass[i] * vel[3 * i + 1]
        pz += mass[i] * vel[3 * i + 2]
    scale = t / mass[0]
    px *= scale
    py *= scale
    pz *= scale
    for i in range(1, n):
        pos[3 * i] += px
        pos[3 * i + 1] += py
        pos[3 * i + 2] += pz


cdef void dh_barycentric(const double* pos, const double* vel, const double* mass, Py_ssize_t n,
                         Py_ssize_t n_active, double* out_pos, double* out_vel) noexcept nogil:
    """Barycentric positions and velocities of all bodies from (Q, V) (the central body's from
    sum(m r) = 0 and sum(m v) = 0 over the massive bodies)."""
    cdef double total = mass[0], sx = 0.0, sy = 0.0, sz = 0.0, ux = 0.0, uy = 0.0, uz = 0.0
    cdef Py_ssize_t i
    for i in range(1, n_active):
        total += mass[i]
        sx += mass[i] * pos[3 * i]
        sy += mass[i] * pos[3 * i + 1]
        sz += mass[i] * pos[3 * i + 2]
        ux += mass[i] * vel[3 * i]
        uy += mass[i] * vel[3 * i + 1]
        uz += mass[i] * vel[3 * i + 2]
    out_pos[0] = -sx / total
    out_pos[1] = -sy / total
    out_pos[2] = -sz / total
    out_vel[0] = -ux / mass[0]
    out_vel[1] = -uy / mass[0]
    out_vel[2] = -uz / mass[0]
    for i in range(1, n):
        out_pos[3 * i] = pos[3 * i] + out_pos[0]
        out_pos[3 * i + 1] = pos[3 * i + 1] + out_pos[1]
        out_pos[3 * i + 2] = pos[3 * i + 2] + out_pos[2]
        out_vel[3 * i] = vel[3 * i]
        out_vel[3 * i + 1] = vel[3 * i + 1]
        out_vel[3 * i + 2] = vel[3 * i + 2]


cdef int dh_loop(double* pos, double* vel, const double* mass, const double* radius, Py_ssize_t n,
                 Py_ssize_t n_active, double G, double eps2, double h, double first_kick,
                 Py_ssize_t n_steps, double* acc, double* soa, int threads,
                 const lb_event_config* events, double* sync_pos, double* sync_vel,
                 Py_ssize_t* steps_done, Py_ssize_t* body_i, Py_ssize_t* body_j) noexcept nogil:
    cdef Py_ssize_t step, k, m = 3 * n, bad = -1
    cdef double gm = G * mass[0], kick = first_kick, half = 0.5 * h
    cdef int fresh = 0
    steps_done[0] = 0
    for step in range(n_steps):
        if not fresh:
            if dh_accelerations(pos, mass, n, n_active, G, eps2, acc, soa, threads, &bad) != 0:
                body_i[0] = bad
                return STATUS_SINGULAR
        fresh = 0
        for k in range(3, m):
            vel[k] += kick * acc[k]
        kick = h
        dh_jump(pos, vel, mass, n, n_active, half)
        bad = lb_kepler_drift_many(&gm, 0, pos + 3, vel + 3, n - 1, h)
        if bad >= 0:
            body_i[0] = bad + 1
            return STATUS_NO_CONVERGENCE
        dh_jump(pos, vel, mass, n, n_active, half)
        steps_done[0] = step + 1
        if events.enabled:
            # The accelerations here are those of the next step's opening kick: compute them
            # once, synchronise a copy with half of it and check it in the barycentric frame.
            if dh_accelerations(pos, mass, n, n_active, G, eps2, acc, soa, threads, &bad) != 0:
                body_i[0] = bad
                return STATUS_SINGULAR
            fresh = 1
            for k in range(m):
                sync_vel[k] = vel[k] + half * acc[k]
            dh_barycentric(pos, sync_vel, mass, n, n_active, sync_pos, sync_vel)
            if lb_check_events(sync_pos, sync_vel, mass, radius, n, n_active, G, events, body_i,
                               body_j):
                return STATUS_EVENT
    return STATUS_OK


# -------------------------------------------------------------------------------- Jacobi
cdef void jacobi_to_barycentric(const double* jpos, const double* mass, const double* eta,
                                Py_ssize_t n, Py_ssize_t n_active, double* out) noexcept nogil:
    """Barycentric vectors from Jacobi ones (positions or velocities; total barycentre at 0).
    Test particles' Jacobi vectors are already barycentric."""
    cdef double cx = 0.0, cy = 0.0, cz = 0.0, w
    cdef Py_ssize_t i
    for i in range(n_active - 1, 0, -1):
        # R_(i-1) = R_i - (m_i / eta_i) r'_i and r_i = r'_i + R_(i-1)
        w = mass[i] / eta[i]
        cx -= w * jpos[3 * i]
        cy -= w * jpos[3 * i + 1]
        cz -= w * jpos[3 * i + 2]
        out[3 * i] = jpos[3 * i] + cx
        out[3 * i + 1] = jpos[3 * i + 1] + cy
        out[3 * i + 2] = jpos[3 * i + 2] + cz
    out[0] = cx
    out[1] = cy
    out[2] = cz
    for i in range(n_active, n):
        out[3 * i] = jpos[3 * i]
        out[3 * i + 1] = jpos[3 * i + 1]
        out[3 * i + 2] = jpos[3 * i + 2]


cdef int jacobi_accelerations(const double* jpos, const double* mass, const double* eta,
                              const double* gm, Py_ssize_t n, Py_ssize_t n_active, double G,
                              double eps2, double* bary, double* acc, double* soa, int threads,
                              Py_ssize_t* bad) noexcept nogil:
    """Interaction accelerations in Jacobi coordinates into acc (rows 1..n-1): the Jacobi
    transform of the full Newtonian accelerations plus gm_i r'_i / |r'_i|^3, which removes the
    Kepler term that the drift already carries (Wisdom & Holman 1991, eqs. 5-12)."""
    cdef double sx = 0.0, sy = 0.0, sz = 0.0, ax, ay, az, x, y, z, r2, f, inv
    cdef Py_ssize_t i
    jacobi_to_barycentric(jpos, mass, eta, n, n_active, bary)
    if accelerations(bary, mass, n, n_active, G, eps2, acc, soa, threads, bad) != 0:
        return 1
    for i in range(n):
        ax = acc[3 * i]
        ay = acc[3 * i + 1]
        az = acc[3 * i + 2]
        if i > 0:
            inv = 1.0 / eta[i - 1] if i < n_active else 1.0 / eta[n_active - 1]
            x = jpos[3 * i]
            y = jpos[3 * i + 1]
            z = jpos[3 * i + 2]
            r2 = x * x + y * y + z * z
            f = gm[i] / (r2 * sqrt(r2))
            acc[3 * i] = ax - sx * inv + f * x
            acc[3 * i + 1] = ay - sy * inv + f * y
            acc[3 * i + 2] = az - sz * inv + f * z
        if i < n_active:
            sx += mass[i] * ax
            sy += mass[i] * ay
            sz += mass[i] * az
    return 0


cdef int jacobi_loop(double* pos, double* vel, const double* mass, const double* eta,
                     const double* gm, const double* radius, Py_ssize_t n, Py_ssize_t n_active,
                     double G, double eps2, double h, double first_kick, Py_ssize_t n_steps,
                     double* bary, double* acc, double* soa, int threads,
                     const lb_event_config* events, double* sync_pos, double* sync_vel,
                     Py_ssize_t* steps_done, Py_ssize_t* body_i, Py_ssize_t* body_j) noexcept nogil:
    cdef Py_ssize_t step, k, m = 3 * n, bad = -1
    cdef double kick = first_kick, half = 0.5 * h
    cdef int fresh = 0
    steps_done[0] = 0
    for step in range(n_steps):
        if not fresh:
            if jacobi_accelerations(pos, mass, eta, gm, n, n_active, G, eps2, bary, acc, soa,
                                    threads, &bad) != 0:
                body_i[0] = bad
                return STATUS_SINGULAR
        fresh = 0
        for k in range(3, m):
            vel[k] += kick * acc[k]
        kick = h
        bad = lb_kepler_drift_many(gm + 1, 1, pos + 3, vel + 3, n - 1, h)
        if bad >= 0:
            body_i[0] = bad + 1
            return STATUS_NO_CONVERGENCE
        steps_done[0] = step + 1
        if events.enabled:
            if jacobi_accelerations(pos, mass, eta, gm, n, n_active, G, eps2, bary, acc, soa,
                                    threads, &bad) != 0:
                body_i[0] = bad
                return STATUS_SINGULAR
            fresh = 1
            for k in range(m):
                sync_pos[k] = vel[k] + half * acc[k]
            jacobi_to_barycentric(sync_pos, mass, eta, n, n_active, sync_vel)
            for k in range(m):
                sync_pos[k] = bary[k]
            if lb_check_events(sync_pos, sync_vel, mass, radius, n, n_active, G, events, body_i,
                               body_j):
                return STATUS_EVENT
    return STATUS_OK


# --------------------------------------------------------------------------- Python entry
def _event_pointer_ok(const unsigned char[::1] event_config):
    if <size_t>event_config.shape[0] < sizeof(lb_event_config):
        raise ValueError(f"event_config must hold {sizeof(lb_event_config)} bytes")


def run_democratic(double[:, ::1] position, double[:, ::1] velocity, const double[::1] mass,
                   const double[::1] radius, Py_ssize_t n_active, double G, double softening,
                   double step, double first_kick, Py_ssize_t n_steps, double[:, ::1] acc,
                   double[::1] soa, int threads, const unsigned char[::1] event_config,
                   double[:, ::1] sync_position, double[:, ::1] sync_velocity):
    """Advance the democratic-heliocentric state (Q, V) in place by ``n_steps`` steps.

    ``first_kick`` is the opening kick time (pending + step / 2); afterwards step / 2 is
    pending.  Returns ``(status, steps_done, body_i, body_j)``.
    """
    cdef Py_ssize_t n = position.shape[0]
    cdef Py_ssize_t done = 0, body_i = -1, body_j = -1
    cdef int status = STATUS_OK
    if (velocity.shape[0] != n or mass.shape[0] != n or radius.shape[0] != n
            or acc.shape[0] != n or soa.shape[0] < 4 * n_active or sync_position.shape[0] not in (0, n)
            or sync_velocity.shape[0] != sync_position.shape[0]):
        raise ValueError("arrays must describe the same bodies")
    _event_pointer_ok(event_config)
    cdef const lb_event_config* events = <const lb_event_config*> &event_config[0]
    if events.enabled and sync_position.shape[0] != n:
        raise ValueError("event checks need sync_position and sync_velocity with one row per body")
    if n <= 1 or n_steps <= 0:
        return STATUS_OK, max(n_steps, 0), -1, -1
    with nogil:
        status = dh_loop(&position[0, 0], &velocity[0, 0], &mass[0], &radius[0], n, n_active, G,
                         softening * softening, step, first_kick, n_steps, &acc[0, 0], &soa[0],
                         threads, events, &sync_position[0, 0], &sync_velocity[0, 0], &done,
                         &body_i, &body_j)
    return status, done, body_i, body_j


def democratic_kick(double[:, ::1] position, double[:, ::1] velocity, const double[::1] mass,
                    Py_ssize_t n_active, double G, double softening, double dt,
                    double[:, ::1] acc, double[::1] soa, int threads):
    """V += dt * (planet-planet accelerations); returns -1 or the body at a zero distance."""
    cdef Py_ssize_t n = position.shape[0], k, bad = -1
    if n <= 1:
        return -1
    with nogil:
        if dh_accelerations(&position[0, 0], &mass[0], n, n_active, G, softening * softening,
                            &acc[0, 0], &soa[0], threads, &bad) == 0:
            for k in range(3, 3 * n):
                velocity[k // 3, k % 3] += dt * acc[k // 3, k % 3]
    return bad


def democratic_to_barycentric(const double[:, ::1] position, const double[:, ::1] velocity,
                              const double[::1] mass, Py_ssize_t n_active):
    """Barycentric (position, velocity) arrays from democratic-heliocentric (Q, V)."""
    cdef Py_ssize_t n = position.shape[0]
    out_pos = np.zeros((n, 3))
    out_vel = np.zeros((n, 3))
    cdef double[:, ::1] op = out_pos
    cdef double[:, ::1] ov = out_vel
    if n > 0:
        dh_barycentric(&position[0, 0], &velocity[0, 0], &mass[0], n, n_active, &op[0, 0],
                       &ov[0, 0])
    return out_pos, out_vel


def run_jacobi(double[:, ::1] position, double[:, ::1] velocity, const double[::1] mass,
               const double[::1] eta, const double[::1] gm, const double[::1] radius,
               Py_ssize_t n_active, double G, double softening, double step, double first_kick,
               Py_ssize_t n_steps, double[:, ::1] bary, double[:, ::1] acc, double[::1] soa,
               int threads, const unsigned char[::1] event_config, double[:, ::1] sync_position,
               double[:, ::1] sync_velocity):
    """Advance the Jacobi state in place by ``n_steps`` steps (see :func:`run_democratic`)."""
    cdef Py_ssize_t n = position.shape[0]
    cdef Py_ssize_t done = 0, body_i = -1, body_j = -1
    cdef int status = STATUS_OK
    if (velocity.shape[0] != n or mass.shape[0] != n or radius.shape[0] != n
            or eta.shape[0] != n or gm.shape[0] != n or bary.shape[0] != n
            or acc.shape[0] != n or soa.shape[0] < 4 * n_active or sync_position.shape[0] not in (0, n)
            or sync_velocity.shape[0] != sync_position.shape[0]):
        raise ValueError("arrays must describe the same bodies")
    _event_pointer_ok(event_config)
    cdef const lb_event_config* events = <const lb_event_config*> &event_config[0]
    if events.enabled and sync_position.shape[0] != n:
        raise ValueError("event checks need sync_position and sync_velocity with one row per body")
    if n <= 1 or n_steps <= 0:
        return STATUS_OK, max(n_steps, 0), -1, -1
    with nogil:
        status = jacobi_loop(&position[0, 0], &velocity[0, 0], &mass[0], &eta[0], &gm[0],
                             &radius[0], n, n_active, G, softening * softening, step, first_kick,
                             n_steps, &bary[0, 0], &acc[0, 0], &soa[0], threads, events,
                             &sync_position[0, 0], &sync_velocity[0, 0], &done, &body_i, &body_j)
    return status, done, body_i, body_j


def jacobi_kick(double[:, ::1] position, double[:, ::1] velocity, const double[::1] mass,
                const double[::1] eta, const double[::1] gm, Py_ssize_t n_active, double G,
                double softening, double dt, double[:, ::1] bary, double[:, ::1] acc,
                double[::1] soa, int threads):
    """Jacobi velocities += dt * interaction accelerations; returns -1 or a singular body."""
    cdef Py_ssize_t n = position.shape[0], k, bad = -1
    if n <= 1:
        return -1
    with nogil:
        if jacobi_accelerations(&position[0, 0], &mass[0], &eta[0], &gm[0], n, n_active, G,
                                softening * softening, &bary[0, 0], &acc[0, 0], &soa[0], threads,
                                &bad) == 0:
            for k in range(3, 3 * n):
                velocity[k // 3, k % 3] += dt * acc[k // 3, k % 3]
    return bad


def jacobi_drift(double[:, ::1] position, double[:, ::1] velocity, const double[::1] gm,
                 double dt):
    """Kepler drift of Jacobi bodies 1..n-1 about gm[i]; returns -1 or the failing body."""
    cdef Py_ssize_t n = position.shape[0], bad = -1
    if n <= 1:
        return -1
    with nogil:
        bad = lb_kepler_drift_many(&gm[1], 1, &position[1, 0], &velocity[1, 0], n - 1, dt)
    return bad + 1 if bad >= 0 else -1


def jacobi_from_barycentric(const double[:, ::1] vectors, const double[::1] mass,
                            const double[::1] eta, Py_ssize_t n_active):
    """Jacobi vectors (row 0: the massive barycentre) from barycentric ones."""
    cdef Py_ssize_t n = vectors.shape[0], i, k
    out = np.zeros((n, 3))
    cdef double[:, ::1] o = out
    cdef double c[3]
    if n == 0:
        return out
    for k in range(3):
        c[k] = vectors[0, k]
    for i in range(1, n_active):
        for k in range(3):
            o[i, k] = vectors[i, k] - c[k]
            c[k] = c[k] + (mass[i] / eta[i]) * o[i, k]
    for k in range(3):
        o[0, k] = c[k]
    for i in range(n_active, n):
        for k in range(3):
            o[i, k] = vectors[i, k] - c[k]
    return out


def jacobi_to_barycentric_array(const double[:, ::1] vectors, const double[::1] mass,
                                const double[::1] eta, Py_ssize_t n_active):
    """Barycentric vectors from Jacobi ones (the massive barycentre at the origin)."""
    cdef Py_ssize_t n = vectors.shape[0]
    out = np.zeros((n, 3))
    cdef double[:, ::1] o = out
    if n > 0:
        jacobi_to_barycentric(&vectors[0, 0], &mass[0], &eta[0], n, n_active, &o[0, 0])
    return out
