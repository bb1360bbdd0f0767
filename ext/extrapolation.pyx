# cython: language_level=3
"""Bulirsch–Stoer extrapolation for x'' = f(x) (compiled layer).

One call of :func:`advance` takes accepted steps until the internal time reaches the
requested one, with the GIL released.  Each step of size H evaluates Gragg's modified
midpoint rule in Störmer's form for second-order equations (Hairer, Nørsett & Wanner,
*Solving ODEs I*, 2nd ed. 1993, Sect. II.14, Eq. (14.32)) with n_j = 2j substeps, and
extrapolates the positions and velocities to H -> 0 with the Aitken–Neville tableau in
h^2 (both have an even-power error expansion for even n).  Step size and order follow
the work-per-unit-step strategy of Deuflhard (1983, SIAM Rev. 25, 1) as arranged in
Hairer, Nørsett & Wanner's extrapolation code (Sect. II.9: convergence monitor in lines
k-1, k, k+1; order k chosen to minimise A_k / H_k; no order or step increase right after
a rejection; step halving when the tableau diverges).

Error norm: the largest over bodies of the root mean square over the body's six
components of the difference of the last two diagonal entries.  Per-body scales, fixed at
the start of each step: positions  absolute + relative * d_i  with d_i the distance to
the body's nearest neighbour (the length on which its orbit is decided, so a close pair
is resolved relative to its separation, not to its distance from the origin), velocities
absolute + max(relative, 16 eps) * max(|v_i|, sqrt(G (m_i + m_nearest) / d_i))  (its
speed, or the orbital speed about that neighbour when it is slower).  A step is accepted
when the norm is <= 1.

Roundoff.  The tableau holds the increments of position and velocity over the step (full
relative precision), added to the state with compensated (Kahan) summation; and each
step evaluates its forces in a frame centred on the closest pair, so that pair's
separation is not rounded to the size of its distance from the origin.  Both matter in
close encounters: in the Pythagorean problem they take the energy error from ~1e-8 to
~1e-11 (measured, tolerance 1e-14).

All mutable integrator state lives in arrays the caller owns (``control`` holds the
scalars), so the Python object can be copied, saved and restored bit for bit, and two
integrators in two threads share nothing.
"""
import numpy as np

from libc.math cimport fabs, pow, sqrt
from libc.float cimport DBL_EPSILON
from libc.string cimport memcpy

from common cimport (kahan_add, STATUS_OK, STATUS_SINGULAR, STATUS_STEP_UNDERFLOW, STATUS_MAX_STEPS,
                     STATUS_EVENT)
from forces cimport lb_gravity_accelerations
from events cimport (lb_event_config, lb_check_events, lb_event_is_tracked, lb_event_report,
                    LB_EVENT_COLLISION)

# Lines of the extrapolation tableau (substep counts 2, 4, ..., 2 * KMAX).
cdef enum:
    KMAX = 10

# Indices into the ``control`` array.
cdef enum:
    C_TIME = 0          # internal time (end of the last accepted step)
    C_STEP = 1          # proposed size of the next step
    C_ORDER = 2         # target line k of the next step
    C_FIRST = 3         # 1 before the first step (different convergence monitor)
    C_PREV_TIME = 4     # start of the last accepted step
    C_PREV_ORDER = 5    # target line used for the last accepted step
    C_EVALUATIONS = 6   # force evaluations so far
    C_ACCEPTED = 7      # accepted steps so far
    C_REJECTED = 8      # rejected attempts so far
    C_PREV_STEP = 9     # size of the last accepted step
    C_SIZE = 10

# Controller constants of Hairer, Nørsett & Wanner's extrapolation code (Sect. II.9).
cdef double SAFE1 = 0.65
cdef double SAFE2 = 0.94
cdef double FAC1 = 0.02
cdef double FAC2 = 4.0
cdef double FAC3 = 0.9
cdef double FAC4 = 0.9
# Error floor relative to a coordinate's own size: a few units of roundoff.
cdef double ROUNDOFF = 16.0 * DBL_EPSILON


ctypedef struct bs_problem:
    Py_ssize_t n
    Py_ssize_t n_active
    double G
    double eps2
    double rtol
    double atol
    double hmin
    int threads
    const double* mass
    double* table       # KMAX rows of 6n: positions then velocities
    double* y           # 3n substep positions
    double* delta       # 3n Störmer differences
    double* f           # 3n accelerations
    double* soa         # 7n gravity scratch
    double* sx          # n position error scales
    double* sv          # n velocity error scales
    double* xs          # 3n start positions in the frame of the closest pair
    double* a0          # 3n accelerations at the start, evaluated in that frame
    Py_ssize_t close_i  # the closest pair at the start of the step
    Py_ssize_t close_j
    double close_d2
    double hh[KMAX + 2]     # optimal step per line (1-based)
    double work[KMAX + 2]   # work per unit step per line (1-based)
    double cost[KMAX + 2]   # force evaluations up to line j (1-based)
    double evaluations
    double rejected
    Py_ssize_t bad


cdef int bs_line(bs_problem* p, const double* x0, const double* v0, const double* a0, int j,
                 double H) noexcept nogil:
    """Störmer midpoint with n = 2j substeps into tableau row j, then extrapolate.

    The row holds the *increments* of position and velocity over the step (not the end
    values), so that they keep full relative precision and the caller can add them to the
    state with compensated summation.
    """
    cdef Py_ssize_t m3 = 3 * p.n, m6 = 6 * p.n, c
    cdef int nsub = 2 * j, i, l
    cdef double h = H / nsub
    cdef double h2 = h * h, ratio, fac
    cdef double* row = p.table + (j - 1) * m6
    cdef double* hi
    cdef double* lo
    cdef double* y = p.y
    cdef double* delta = p.delta
    cdef double* f = p.f
    # row[:m3] accumulates the position increment, row[m3:] the sum of the accelerations
    for c in range(m3):
        delta[c] = h * (v0[c] + 0.5 * h * a0[c])
        row[c] = delta[c]
        row[m3 + c] = 0.0
        y[c] = x0[c] + row[c]
    for i in range(1, nsub):
        if lb_gravity_accelerations(y, p.mass, p.n, p.n_active, p.G, p.eps2, f, p.soa, p.threads,
                                    &p.bad):
            return STATUS_SINGULAR
        for c in range(m3):
            delta[c] += h2 * f[c]
            row[m3 + c] += f[c]
            row[c] += delta[c]
            y[c] = x0[c] + row[c]
    if lb_gravity_accelerations(y, p.mass, p.n, p.n_active, p.G, p.eps2, f, p.soa, p.threads,
                                &p.bad):
        return STATUS_SINGULAR
    p.evaluations += nsub
    for c in range(m3):
        # v_n - v_0 = h (a_0 / 2 + f_1 + ... + f_{n-1} + f_n / 2)
        row[m3 + c] = h * (0.5 * a0[c] + row[m3 + c] + 0.5 * f[c])
    # Aitken–Neville in place: afterwards row 1 holds T_jj and row 2 holds T_j,j-1.
    l = j
    while l >= 2:
        ratio = <double>j / <double>(l - 1)
        fac = ratio * ratio - 1.0
        hi = p.table + (l - 1) * m6
        lo = p.table + (l - 2) * m6
        for c in range(m6):
            lo[c] = hi[c] + (hi[c] - lo[c]) / fac
        l -= 1
    return STATUS_OK


cdef inline double norm3(const double* r) noexcept nogil:
    return sqrt(r[0] * r[0] + r[1] * r[1] + r[2] * r[2])


cdef void bs_scales(bs_problem* p, const double* x0, const double* v0) noexcept nogil:
    """Per-body error scales at the start of a step (see the module docstring)."""
    cdef Py_ssize_t i, j, nearest
    cdef double d2, best, dx, dy, dz, speed, orbital, reach, noise
    p.close_i = -1
    p.close_j = -1
    p.close_d2 = 0.0
    for i in range(p.n):
        best = -1.0
        nearest = -1
        for j in range(p.n):
            if j == i or (i >= p.n_active and j >= p.n_active):
                continue
            dx = x0[3 * j] - x0[3 * i]
            dy = x0[3 * j + 1] - x0[3 * i + 1]
            dz = x0[3 * j + 2] - x0[3 * i + 2]
            d2 = dx * dx + dy * dy + dz * dz
            if best < 0.0 or d2 < best:
                best = d2
                nearest = j
            if d2 < p.close_d2 or p.close_i < 0:
                p.close_d2 = d2
                p.close_i = i
                p.close_j = j
        if nearest < 0:
            best = norm3(x0 + 3 * i)
            orbital = 0.0
        else:
            best = sqrt(best)
            orbital = 0.0
            if best > 0.0:
                orbital = sqrt(p.G * ((p.mass[i] if i < p.n_active else 0.0)
                                      + (p.mass[nearest] if nearest < p.n_active else 0.0)) / best)
        speed = max(norm3(v0 + 3 * i), orbital)
        # Never below roundoff: a pair at distance d, a distance |x| from the origin, has
        # its separation (so its forces) known only to ~ eps |x| / d relative, and asking
        # for more makes the controller chase noise with ever smaller steps.
        reach = norm3(x0 + 3 * i)
        noise = ROUNDOFF
        p.sx[i] = p.atol + p.rtol * best
        p.sv[i] = p.atol + max(p.rtol, noise) * speed
        if not p.sx[i] > 0.0:
            p.sx[i] = 1e-300
        if not p.sv[i] > 0.0:
            p.sv[i] = 1e-300


cdef double bs_error(bs_problem* p) noexcept nogil:
    """Largest per-body RMS scaled difference of the two most extrapolated entries.

    The maximum over bodies (not an RMS over all of them) keeps a close pair from being
    diluted by many quiet bodies.
    """
    cdef Py_ssize_t i, c, m3 = 3 * p.n
    cdef const double* t1 = p.table
    cdef const double* t2 = p.table + 6 * p.n
    cdef double worst = 0.0, body, d
    for i in range(p.n):
        body = 0.0
        for c in range(3):
            d = (t1[3 * i + c] - t2[3 * i + c]) / p.sx[i]
            body += d * d
            d = (t1[m3 + 3 * i + c] - t2[m3 + 3 * i + c]) / p.sv[i]
            body += d * d
        if not body <= worst:   # also propagates nan
            worst = body
    return sqrt(worst / 6.0)


cdef int bs_try_line(bs_problem* p, const double* x0, const double* v0, const double* a0, int j,
                     double H, double* err, double* errold) noexcept nogil:
    """Line j with its error and step proposal: 0 fine, 1 the tableau diverges, 2 singular."""
    cdef double e, expo, facmin, fac
    if bs_line(p, x0, v0, a0, j, H) != STATUS_OK:
        return 2
    if j == 1:
        return 0
    e = bs_error(p)
    err[0] = e
    if not e < 1e20:
        return 1
    if j > 2 and e >= errold[0]:
        return 1
    errold[0] = max(4.0 * e, 1.0)
    expo = 1.0 / (2 * j - 1)
    facmin = pow(FAC1, expo)
    fac = min(FAC2 / facmin, max(facmin, pow(e / SAFE1, expo) / SAFE2))
    p.hh[j] = H / fac
    p.work[j] = p.cost[j] / p.hh[j]
    return 0


cdef int bs_frame(bs_problem* p, const double* x0, const double* cx) noexcept nogil:
    """Start positions relative to the closest pair, and the accelerations there.

    Forces do not change under a shift of the origin, but roundoff does: a pair at
    distance d a distance |x| from the origin has its separation (so its force) known only
    to ~ eps |x| / d relative.  Centring the frame on the closest pair for the step
    keeps its separation (and the compensation terms of the state) at full relative
    precision through the whole step, which is what limits the energy error in close
    encounters.
    """
    cdef Py_ssize_t c, i
    cdef double origin[3]
    origin[0] = origin[1] = origin[2] = 0.0
    if p.close_i >= 0:
        for c in range(3):
            origin[c] = x0[3 * p.close_i + c]
    for i in range(p.n):
        for c in range(3):
            p.xs[3 * i + c] = (x0[3 * i + c] - origin[c]) - cx[3 * i + c]
    if lb_gravity_accelerations(p.xs, p.mass, p.n, p.n_active, p.G, p.eps2, p.a0, p.soa,
                                p.threads, &p.bad):
        return STATUS_SINGULAR
    p.evaluations += 1
    return STATUS_OK


cdef int bs_step(bs_problem* p, const double* x_start, const double* cx, const double* v0,
                 double t, double* H_io, int* k_io, int first, double* H_used) noexcept nogil:
    """One accepted step (after any rejections): result in tableau row 1.

    On entry H_io, k_io hold the proposed step and target line; on exit the proposal for
    the next step, and H_used the size of the accepted step.
    """
    cdef double H = H_io[0], err = 0.0, errold = 1e300, limit
    # the smallest step: the option, or a few units of roundoff of the time itself
    cdef double hmin = max(max(p.hmin, 16.0 * DBL_EPSILON * fabs(t)), 1e-300)
    cdef int k = k_io[0], kc = 0, j, r, kopt
    cdef int reject = 0, outcome, diverged
    cdef const double* x0 = p.xs
    cdef const double* a0 = p.a0
    bs_scales(p, x_start, v0)
    if bs_frame(p, x_start, cx) != STATUS_OK:
        return STATUS_SINGULAR
    while True:
        if not fabs(H) >= hmin:
            H_io[0] = H
            return STATUS_STEP_UNDERFLOW
        errold = 1e300
        outcome = 0     # 1 accept, -1 reject
        diverged = 0
        if first:
            for j in range(1, k + 2):
                r = bs_try_line(p, x0, v0, a0, j, H, &err, &errold)
                if r == 2:
                    return STATUS_SINGULAR
                if r == 1:
                    diverged = 1
                    break
                kc = j
                if j > 1 and err <= 1.0:
                    outcome = 1
                    break
            if outcome == 0:
                outcome = -1
        else:
            for j in range(1, k):
                r = bs_try_line(p, x0, v0, a0, j, H, &err, &errold)
                if r == 2:
                    return STATUS_SINGULAR
                if r == 1:
                    diverged = 1
                    break
            kc = k - 1
            if not diverged and not (k == 2 or reject):
                # convergence monitor in line k - 1
                if err <= 1.0:
                    outcome = 1
                else:
                    limit = (2.0 * (k + 1) * 2.0 * k) / 4.0
                    if err > limit * limit:
                        outcome = -1
            if not diverged and outcome == 0:
                r = bs_try_line(p, x0, v0, a0, k, H, &err, &errold)
                if r == 2:
                    return STATUS_SINGULAR
                if r == 1:
                    diverged = 1
                else:
                    kc = k
                    if err <= 1.0:
                        outcome = 1
                    else:
                        # hope for convergence in line k + 1
                        limit = (2.0 * (k + 1)) / 2.0
                        if err > limit * limit:
                            outcome = -1
                        else:
                            r = bs_try_line(p, x0, v0, a0, k + 1, H, &err, &errold)
                            if r == 2:
                                return STATUS_SINGULAR
                            if r == 1:
                                diverged = 1
                            else:
                                kc = k + 1
                                outcome = 1 if err <= 1.0 else -1
        if diverged:
            p.rejected += 1
            H *= 0.5
            reject = 1
            continue
        if outcome < 0:
            p.rejected += 1
            k = min(k, min(kc, <int>KMAX - 1))
            if k > 2 and p.work[k - 1] < p.work[k] * FAC3:
                k -= 1
            H = p.hh[k]
            reject = 1
            continue
        break
    # accepted in line kc: choose the next order (work per unit step) and step
    H_used[0] = H
    if kc == 2:
        kopt = min(3, <int>KMAX - 1)
        if reject:
            kopt = 2
    elif kc <= k:
        kopt = kc
        if p.work[kc - 1] < p.work[kc] * FAC3:
            kopt = kc - 1
        if p.work[kc] < p.work[kc - 1] * FAC4:
            kopt = min(kc + 1, <int>KMAX - 1)
    else:
        kopt = kc - 1
        if kc > 3 and p.work[kc - 2] < p.work[kc - 1] * FAC3:
            kopt = kc - 2
        if p.work[kc] < p.work[kopt] * FAC4:
            kopt = min(kc, <int>KMAX - 1)
    if reject:
        k = min(kopt, kc)
        H_io[0] = min(H, p.hh[k])
    else:
        if kopt <= kc:
            H_io[0] = p.hh[kopt]
        elif kc < k and p.work[kc] < p.work[kc - 1] * FAC4:
            H_io[0] = p.hh[kc] * p.cost[kopt + 1] / p.cost[kc]
        else:
            H_io[0] = p.hh[kc] * p.cost[kopt] / p.cost[kc]
        k = kopt
    k_io[0] = k
    return STATUS_OK


cdef double hermite_distance2(const double* a0, const double* b0, const double* a1,
                              const double* b1, double* s_io) noexcept nogil:
    """Squared length of the cubic Hermite r(s) (ends a0, a1; scaled slopes b0, b1) at a
    local minimum near s_io (a few Newton steps on r . r' = 0, kept inside [0, 1])."""
    cdef double s = s_io[0], r2 = 0.0, phi, dphi, q, dq, ddq
    cdef int it, c
    for it in range(6):
        phi = 0.0
        dphi = 0.0
        for c in range(3):
            q = (((2.0 * s - 3.0) * s * s + 1.0) * a0[c] + (((s - 2.0) * s + 1.0) * s) * b0[c]
                 + ((3.0 - 2.0 * s) * s * s) * a1[c] + ((s - 1.0) * s * s) * b1[c])
            dq = ((6.0 * s - 6.0) * s * a0[c] + ((3.0 * s - 4.0) * s + 1.0) * b0[c]
                  + (6.0 - 6.0 * s) * s * a1[c] + (3.0 * s - 2.0) * s * b1[c])
            ddq = ((12.0 * s - 6.0) * a0[c] + (6.0 * s - 4.0) * b0[c] + (6.0 - 12.0 * s) * a1[c]
                   + (6.0 * s - 2.0) * b1[c])
            phi += q * dq
            dphi += dq * dq + q * ddq
        if not dphi > 0.0:
            break
        s = min(1.0, max(0.0, s - phi / dphi))
    for c in range(3):
        q = (((2.0 * s - 3.0) * s * s + 1.0) * a0[c] + (((s - 2.0) * s + 1.0) * s) * b0[c]
             + ((3.0 - 2.0 * s) * s * s) * a1[c] + ((s - 1.0) * s * s) * b1[c])
        r2 += q * q
    s_io[0] = s
    return r2


cdef int bs_sweep_collisions(bs_problem* p, const double* px, const double* pv, const double* x,
                             const double* v, double H, const double* radius,
                             const lb_event_config* events, Py_ssize_t* body_i,
                             Py_ssize_t* body_j) noexcept nogil:
    """Contacts that begin and end inside one step (a fast flyby).

    The per-step check sees only the step ends.  For each pair apart at both ends but able
    to come within the sum of radii in between (judged from the relative speeds), the
    relative position is followed on the cubic Hermite interpolant of the two ends and its
    closest approach found (Newton from several starting points); a dip below the sum of
    radii is reported as a collision (its time is then located on the dense output).
    """
    cdef Py_ssize_t i, j, c
    cdef int k
    cdef double reach, d0, d1, w0, w1, r2, s, q
    cdef double a0[3]
    cdef double a1[3]
    cdef double b0[3]
    cdef double b1[3]
    for i in range(p.n_active):
        for j in range(i + 1, p.n):
            reach = radius[i] + radius[j]
            if not reach > 0.0:
                continue
            d0 = 0.0
            d1 = 0.0
            w0 = 0.0
            w1 = 0.0
            for c in range(3):
                a0[c] = px[3 * j + c] - px[3 * i + c]
                a1[c] = x[3 * j + c] - x[3 * i + c]
                b0[c] = (pv[3 * j + c] - pv[3 * i + c]) * H
                b1[c] = (v[3 * j + c] - v[3 * i + c]) * H
                d0 += a0[c] * a0[c]
                d1 += a1[c] * a1[c]
                w0 += b0[c] * b0[c]
                w1 += b1[c] * b1[c]
            d0 = sqrt(d0)
            d1 = sqrt(d1)
            # in contact at an end: the step-end check has it (or it is already tracked)
            if d0 < reach or d1 < reach:
                continue
            if min(d0, d1) - (sqrt(w0) + sqrt(w1)) > reach:
                continue
            # closest approach on the interpolant: Newton on r(s) . r'(s) = 0 from the
            # chord's closest point and from seven inner points (paths may curve)
            for k in range(8):
                if k == 0:
                    q = 0.0
                    r2 = 0.0
                    for c in range(3):
                        q += a0[c] * (a1[c] - a0[c])
                        r2 += (a1[c] - a0[c]) * (a1[c] - a0[c])
                    s = min(1.0, max(0.0, -q / r2)) if r2 > 0.0 else 0.5
                else:
                    s = k / 8.0
                if hermite_distance2(a0, b0, a1, b1, &s) < reach * reach:
                    if lb_event_is_tracked(events, LB_EVENT_COLLISION, i, j):
                        break
                    return lb_event_report(<lb_event_config*> events, LB_EVENT_COLLISION, i, j,
                                           body_i, body_j)
    return 0


cdef int bs_loop(bs_problem* p, double* control, double* x, double* v,
                 double* cx, double* cv, double* px, double* pv, double* pa, double* pcx,
                 double* pcv, int keep_prev, double t_end, int exact_end,
                 Py_ssize_t max_steps, const double* radius, const lb_event_config* events,
                 Py_ssize_t* done, int* kind, Py_ssize_t* body_i, Py_ssize_t* body_j) noexcept nogil:
    """Accepted steps until control[C_TIME] >= t_end (exactly t_end if exact_end)."""
    cdef Py_ssize_t m3 = 3 * p.n, c
    cdef double H, H_used, t
    cdef int k, k_before, status, last
    done[0] = 0
    kind[0] = 0
    while control[C_TIME] < t_end:
        if done[0] >= max_steps:
            return STATUS_MAX_STEPS
        t = control[C_TIME]
        H = control[C_STEP]
        k = <int>control[C_ORDER]
        k_before = k
        last = 0
        if exact_end and t + H >= t_end:
            H = t_end - t
            last = 1
        status = bs_step(p, x, cx, v, t, &H, &k, <int>control[C_FIRST] or last, &H_used)
        control[C_EVALUATIONS] = p.evaluations
        control[C_REJECTED] = p.rejected
        if status != STATUS_OK:
            control[C_STEP] = H
            return status
        if keep_prev:
            memcpy(px, x, m3 * sizeof(double))
            memcpy(pv, v, m3 * sizeof(double))
            memcpy(pa, p.a0, m3 * sizeof(double))
            memcpy(pcx, cx, m3 * sizeof(double))
            memcpy(pcv, cv, m3 * sizeof(double))
            control[C_PREV_TIME] = t
            control[C_PREV_ORDER] = k_before
            control[C_PREV_STEP] = H_used
        for c in range(m3):
            kahan_add(&x[c], &cx[c], p.table[c])
            kahan_add(&v[c], &cv[c], p.table[m3 + c])
        if last and H_used == t_end - t:
            control[C_TIME] = t_end
        else:
            control[C_TIME] = t + H_used
        control[C_STEP] = H
        control[C_ORDER] = k
        control[C_FIRST] = 0
        control[C_ACCEPTED] += 1
        control[C_EVALUATIONS] = p.evaluations
        done[0] += 1
        if events != NULL and events.enabled:
            kind[0] = lb_check_events(x, v, p.mass, radius, p.n, p.n_active, p.G, events, body_i,
                                      body_j)
            if not kind[0] and keep_prev and events.collisions and radius != NULL:
                kind[0] = bs_sweep_collisions(p, px, pv, x, v, H_used, radius, events, body_i,
                                              body_j)
            if kind[0]:
                return STATUS_EVENT
    return STATUS_OK


def scratch_size(Py_ssize_t n):
    """Doubles of scratch an integrator of ``n`` bodies must own."""
    return KMAX * 6 * n + 3 * 3 * n + 7 * n + 2 * n + 6 * n


def control_size():
    """Length of the ``control`` array (the integrator's scalar state)."""
    return C_SIZE


def initial_order(double rtol):
    """Starting target line for a relative tolerance (as in Hairer, Nørsett & Wanner)."""
    cdef double digits = -np.log10(rtol + 1e-40)
    return int(max(2, min(KMAX - 1, int(digits * 0.6 + 1.5))))


def advance(double[::1] control, const double[::1] mass, const double[::1] radius,
            double[:, ::1] position, double[:, ::1] velocity,
            double[:, ::1] carry, double[:, ::1] prev_position, double[:, ::1] prev_velocity,
            double[:, ::1] prev_acceleration, double[:, ::1] prev_carry, double[::1] scratch, Py_ssize_t n_active, double G,
            double softening, double rtol, double atol, double min_step, int threads,
            double t_end, bint exact_end, bint keep_prev, Py_ssize_t max_steps,
            unsigned char[::1] event_config):
    """Take accepted steps until ``control[0]`` (the time) reaches ``t_end``.

    Everything is updated in place.  ``carry`` (n, 6) holds the compensation terms of the
    positions (first 3n numbers) and velocities (last 3n) for compensated summation.  With
    ``exact_end`` the last step is shortened to land on ``t_end`` (used only on copies, for
    dense output); without it no step is ever shortened.  With ``keep_prev`` the state at
    the start of the last accepted step (and the accelerations there) is kept in the
    ``prev_*`` arrays.  ``event_config`` holds an ``lb_event_config`` (None or empty: no
    checks).  Returns ``(status, steps_done, event_kind, body_i, body_j)``.
    """
    cdef Py_ssize_t n = position.shape[0]
    cdef bs_problem p
    cdef int status = STATUS_OK, kind = 0, j
    cdef Py_ssize_t done = 0, body_i = -1, body_j = -1
    cdef const lb_event_config* events = NULL
    cdef const double* radius_ptr = NULL
    if (velocity.shape[0] != n or mass.shape[0] != n
            or prev_position.shape[0] != n or prev_velocity.shape[0] != n
            or prev_acceleration.shape[0] != n or carry.shape[0] != n or prev_carry.shape[0] != n
            or carry.shape[1] != 6 or prev_carry.shape[1] != 6):
        raise ValueError("position, velocity, carry, prev_* and mass must describe the same bodies")
    if control.shape[0] < C_SIZE:
        raise ValueError(f"control must hold {C_SIZE} numbers")
    if scratch.shape[0] < scratch_size(n):
        raise ValueError("scratch too small")
    if event_config is not None and event_config.shape[0] > 0:
        if <size_t>event_config.shape[0] < sizeof(lb_event_config):
            raise ValueError(f"event_config must hold {sizeof(lb_event_config)} bytes")
        events = <const lb_event_config*> &event_config[0]
    if radius is not None and radius.shape[0] == n and n > 0:
        radius_ptr = &radius[0]
    if n == 0:
        return STATUS_OK, 0, 0, -1, -1
    p.n = n
    p.n_active = n_active
    p.G = G
    p.eps2 = softening * softening
    p.rtol = rtol
    p.atol = atol
    p.hmin = min_step
    p.threads = threads
    p.mass = &mass[0]
    p.table = &scratch[0]
    p.y = p.table + KMAX * 6 * n
    p.delta = p.y + 3 * n
    p.f = p.delta + 3 * n
    p.soa = p.f + 3 * n
    p.sx = p.soa + 7 * n
    p.sv = p.sx + n
    p.xs = p.sv + n
    p.a0 = p.xs + 3 * n
    p.cost[1] = 3.0
    for j in range(2, KMAX + 1):
        p.cost[j] = p.cost[j - 1] + 2 * j
    p.evaluations = control[C_EVALUATIONS]
    p.rejected = control[C_REJECTED]
    p.bad = -1
    with nogil:
        status = bs_loop(&p, &control[0], &position[0, 0], &velocity[0, 0],
                         &carry[0, 0], &carry[0, 0] + 3 * n, &prev_position[0, 0],
                         &prev_velocity[0, 0], &prev_acceleration[0, 0], &prev_carry[0, 0],
                         &prev_carry[0, 0] + 3 * n, keep_prev, t_end, exact_end, max_steps, radius_ptr, events, &done, &kind,
                         &body_i, &body_j)
    if status == STATUS_SINGULAR:
        body_i = p.bad
    return status, done, kind, body_i, body_j


def accelerations(const double[::1] mass, double[:, ::1] position, double[:, ::1] out,
                  double[::1] scratch, Py_ssize_t n_active, double G, double softening, int threads):
    """Fill ``out`` with the accelerations at ``position``; returns the bad body or -1."""
    cdef Py_ssize_t n = position.shape[0], bad = -1
    cdef int status
    if n == 0:
        return -1
    with nogil:
        status = lb_gravity_accelerations(&position[0, 0], &mass[0], n, n_active, G,
                                          softening * softening, &out[0, 0], &scratch[0], threads, &bad)
    return bad if status else -1


# ----------------------------------------------------------------------------- events
_KIND_NAMES = {1: "collision", 2: "encounter", 3: "escape"}


def make_event_config(bint collisions, double encounter_hill, double escape_distance):
    """A fresh, writable ``lb_event_config`` as a uint8 array (enabled if any check is on)."""
    buffer = np.zeros(sizeof(lb_event_config), dtype=np.uint8)
    cdef unsigned char[::1] raw = buffer
    cdef lb_event_config* config = <lb_event_config*> &raw[0]
    config.collisions = 1 if collisions else 0
    config.encounter_hill = encounter_hill if encounter_hill > 0 else 0.0
    config.escape_distance = escape_distance if escape_distance > 0 else 0.0
    config.enabled = 1 if (config.collisions or config.encounter_hill > 0
                           or config.escape_distance > 0) else 0
    return buffer


def read_event_config(const unsigned char[::1] event_config):
    """The settings, the last report and the suppression count held in a config buffer."""
    if <size_t>event_config.shape[0] < sizeof(lb_event_config):
        raise ValueError(f"event_config must hold {sizeof(lb_event_config)} bytes")
    cdef const lb_event_config* config = <const lb_event_config*> &event_config[0]
    return {"enabled": config.enabled, "collisions": config.collisions,
            "encounter_hill": config.encounter_hill, "escape_distance": config.escape_distance,
            "last_kind": _KIND_NAMES.get(config.last_kind), "last_bodies": (config.last_i, config.last_j),
            "tracked": config.tracked}


def check_events(double[:, ::1] position, double[:, ::1] velocity, const double[::1] mass,
                 const double[::1] radius, Py_ssize_t n_active, double G,
                 unsigned char[::1] event_config):
    """Run the per-step check once on a state; returns ``(kind name or None, i, j)``."""
    cdef Py_ssize_t n = position.shape[0], body_i = -1, body_j = -1
    cdef int kind
    if <size_t>event_config.shape[0] < sizeof(lb_event_config):
        raise ValueError(f"event_config must hold {sizeof(lb_event_config)} bytes")
    if velocity.shape[0] != n or mass.shape[0] != n or radius.shape[0] != n:
        raise ValueError("position, velocity, mass and radius must describe the same bodies")
    if n == 0:
        return None, -1, -1
    kind = lb_check_events(&position[0, 0], &velocity[0, 0], &mass[0], &radius[0], n, n_active, G,
                           <const lb_event_config*> &event_config[0], &body_i, &body_j)
    return _KIND_NAMES.get(kind), body_i, body_j


def event_config_size():
    """Size in bytes of the C event configuration struct."""
    return sizeof(lb_event_config)
