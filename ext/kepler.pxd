# cython: language_level=3
# Universal-variable Kepler drift: declarations and inline code only, so that any kernel can
# cimport it (`from kepler cimport lb_kepler_drift_many`) without importing a module at run time.
#
# Formulation (Danby, Fundamentals of Celestial Mechanics, 2nd ed. 1988, ch. 6.7-6.9; Stumpff 1959):
# with beta = 2 gm / r0 - v0^2, eta = r0 . v0 and zeta = gm - beta r0, the universal anomaly s
# solves  t(s) = r0 s + eta G2(s) + zeta G3(s) = dt,  whose derivative t'(s) = r(s) =
# r0 + eta G1 + zeta G2 is positive, so the root is unique.  G_k(s) = s^k c_k(beta s^2) with the
# Stumpff functions c_k.  Then f = 1 - gm G2 / r0, g = dt - gm G3, fdot = -gm G1 / (r0 r),
# gdot = 1 - gm G2 / r.
#
# Speed: the bodies of a block are solved in lockstep (one Halley iteration for every unconverged
# body, then the next iteration), so the long dependency chains of different bodies overlap in the
# CPU.  Accuracy: an unbound arc that falls from far out to close to the centre (where t(s) is a
# small difference of large terms) is done as two half drifts, recursively while needed.
# Robustness: every step is kept inside a bracket of the root (bisection otherwise);
# if a body still fails, its index is reported and its state is left untouched -- never a silent
# NaN.

from libc.math cimport fabs, sqrt, rint, isfinite, sin, cos, sinh, cosh, atan2, asinh, log, M_PI, INFINITY, NAN

cdef enum:
    KEPLER_BLOCK = 8                 # bodies solved together in lockstep
    KEPLER_MAX_ITERATIONS = 200      # bracketed Halley/bisection iterations before giving up
    KEPLER_MAX_SPLITS = 128          # half-drift splits of one ill-conditioned unbound drift



cdef inline void lb_stumpff(double x, double* c0, double* c1, double* c2, double* c3) noexcept nogil:
    """Stumpff functions c0..c3 of x.

    |x| <= 4: series for |x| <= 0.1 after reducing x by factors of 4 (at most three times), then
    the quadrupling formulas c0(4x) = 2 c0^2 - 1, c1(4x) = c0 c1, c2(4x) = c1^2 / 2,
    c3(4x) = (c2 + c0 c3) / 4 (Danby 1988, sec. 6.9).  |x| > 4: the closed forms in cos/sin or
    cosh/sinh of y = sqrt(|x|) >= 2, which have no cancellation there (each quadrupling would
    double the rounding error instead)."""
    cdef int halvings = 0
    cdef double a0, a1, a2, a3, y, sy, half
    if x > 4.0:
        y = sqrt(x)
        sy = sin(y)
        half = sin(0.5 * y)
        c0[0] = cos(y)
        c1[0] = sy / y
        c2[0] = 2.0 * half * half / x
        c3[0] = (y - sy) / (x * y)
        return
    if x < -4.0:
        y = sqrt(-x)
        sy = sinh(y)
        half = sinh(0.5 * y)
        c0[0] = cosh(y)
        c1[0] = sy / y
        c2[0] = -2.0 * half * half / x
        c3[0] = -(sy - y) / (x * y)
        return
    while fabs(x) > 0.1:
        x *= 0.25
        halvings += 1
    # c2 = sum (-x)^k / (2k+2)!, c3 = sum (-x)^k / (2k+3)!; with |x| <= 0.1 the first term left out
    # (k = 7) is below 1e-22 relative.
    a2 = (1.0 / 2.0 - x * (1.0 / 24.0 - x * (1.0 / 720.0 - x * (1.0 / 40320.0 - x * (
        1.0 / 3628800.0 - x * (1.0 / 479001600.0 - x * (1.0 / 87178291200.0)))))))
    a3 = (1.0 / 6.0 - x * (1.0 / 120.0 - x * (1.0 / 5040.0 - x * (1.0 / 362880.0 - x * (
        1.0 / 39916800.0 - x * (1.0 / 6227020800.0 - x * (1.0 / 1307674368000.0)))))))
    a1 = 1.0 - x * a3
    a0 = 1.0 - x * a2
    while halvings > 0:
        a3 = 0.25 * (a2 + a0 * a3)
        a2 = 0.5 * a1 * a1
        a1 = a0 * a1
        a0 = 2.0 * a0 * a0 - 1.0
        halvings -= 1
    c0[0] = a0
    c1[0] = a1
    c2[0] = a2
    c3[0] = a3


cdef inline void lb_kepler_g(double beta, double s, double* g1, double* g2, double* g3) noexcept nogil:
    """G1, G2, G3 of the universal anomaly s for the energy parameter beta."""
    cdef double c0, c1, c2, c3
    lb_stumpff(beta * s * s, &c0, &c1, &c2, &c3)
    g1[0] = s * c1
    g2[0] = s * s * c2
    g3[0] = s * s * s * c3


cdef inline double lb_kepler_reduce(double gm, double beta, double dt) noexcept nogil:
    """Remove whole periods from dt on an elliptic orbit when |dt| > P (then |dt| <= P / 2).
    The test |dt| <= P, i.e. dt^2 beta^3 <= (2 pi gm)^2, needs no root or division."""
    cdef double period, w
    if beta <= 0.0:
        return dt
    w = 2.0 * M_PI * gm
    if dt * dt * (beta * beta * beta) <= w * w:
        return dt
    period = w / (beta * sqrt(beta))
    return dt - period * rint(dt / period)


cdef inline double lb_kepler_guess(double gm, double r0, double inv_r0, double eta, double zeta,
                                   double beta, double dt) noexcept nogil:
    """Initial universal anomaly.  Steps up to about a radian of anomaly (dt^2 |beta| / r0^2 < 1,
    every planetary step; the error is then ~(anomaly)^4 / 24 relative, which one quartic
    iteration brings to rounding level at a tenth of a radian):
    the inverted series s = u - eta u^2 / (2 r0) + (eta^2 / (2 r0^2) - zeta / (6 r0)) u^3 with
    u = dt / r0, from t(s) = r0 s + eta s^2 / 2 + zeta s^3 / 6 + O(s^4).  Longer ones: the anomaly
    difference of Danby's starter E = M + 0.85 e sign(sin M) (Danby 1988, eq. 6.6.5), or, on
    hyperbolic orbits, H = sign(M) ln(2 |M| / e + 1.8) (Danby 1988, sec. 6.9), over sqrt(|beta|)."""
    cdef double u = dt * inv_r0
    cdef double s, root, ecos, esin, ecc, e0, m1, e1, h0, a
    if u * u * fabs(beta) < 1.0:
        a = eta * inv_r0
        s = u * (1.0 + u * (-0.5 * a + u * (0.5 * a * a - zeta * inv_r0 * (1.0 / 6.0))))
        if s * dt <= 0.0 or fabs(s) > 2.0 * fabs(u):
            s = u
        return s
    root = sqrt(fabs(beta))
    if beta > 0.0:
        ecos = 1.0 - r0 * beta / gm
        esin = eta * root / gm
        ecc = sqrt(ecos * ecos + esin * esin)
        e0 = atan2(esin, ecos)
        m1 = e0 - esin + dt * beta * root / gm
        e1 = m1 + (0.85 * ecc if sin(m1) >= 0.0 else -0.85 * ecc)
        return (e1 - e0) / root
    ecos = 1.0 - r0 * beta / gm        # e cosh H0 (beta < 0)
    esin = eta * root / gm             # e sinh H0
    ecc = sqrt(ecos * ecos - esin * esin)
    h0 = asinh(esin / ecc)
    m1 = esin - h0 + dt * (-beta) * root / gm
    e1 = log(2.0 * fabs(m1) / ecc + 1.8)
    if m1 < 0.0:
        e1 = -e1
    return (e1 - h0) / root


cdef inline int lb_kepler_bracket(double r0, double eta, double zeta, double beta, double dt,
                                  double* lo, double* hi) noexcept nogil:
    """A bracket [lo, hi] holding the root of t(s) = dt (t is increasing, t(0) = 0).
    Elliptic (|dt| <= P after reduction): s lies between 0 and +-2 pi / sqrt(beta), where
    t = +-P (a full turn of the eccentric anomaly, E = sqrt(beta) s).  Otherwise the bracket
    doubles until it holds the root.  Returns 1 if no bracket was found."""
    cdef double width, f, g1, g2, g3, side
    cdef int it
    side = 1.0 if dt > 0.0 else -1.0
    cdef double inside = 0.0
    if beta > 0.0:
        width = 2.0 * M_PI / sqrt(beta)
    else:
        # grow from |dt| / r0 until t(s) passes dt; a non-finite t (overflow of the hyperbolic
        # functions) lies beyond the root, so the width is pulled back towards the last finite
        # point inside instead
        width = fabs(dt) / r0
        for it in range(4200):
            lb_kepler_g(beta, side * width, &g1, &g2, &g3)
            f = r0 * side * width + eta * g2 + zeta * g3 - dt
            if not isfinite(f):
                width = 0.5 * (inside + width)
                continue
            if (f >= 0.0) == (dt > 0.0):
                break
            inside = width
            width *= 2.0
        else:
            return 1
    if dt > 0.0:
        lo[0] = 0.0
        hi[0] = width
    else:
        lo[0] = -width
        hi[0] = 0.0
    return 0


cdef inline Py_ssize_t lb_kepler_drift_many(const double* gm, Py_ssize_t gm_stride, double* position,
                                            double* velocity, Py_ssize_t n, double dt) noexcept nogil:
    """Advance n bodies (rows of 3 doubles) on their Kepler orbits about gm[i * gm_stride] by dt;
    -1, or the index of the first body that failed (see lb_kepler_drift_depth)."""
    return lb_kepler_drift_depth(gm, gm_stride, position, velocity, n, dt, NULL)


cdef inline Py_ssize_t lb_kepler_drift_depth(const double* gm, Py_ssize_t gm_stride, double* position,
                                             double* velocity, Py_ssize_t n, double dt,
                                             int* budget) noexcept nogil:
    """Advance n bodies (rows of 3 doubles) on their Kepler orbits about gm[i * gm_stride] by dt.

    gm_stride = 0 uses one gm for all.  Returns -1, or the index of the first body whose Kepler
    equation did not converge (that body's position and velocity are left unchanged, and so are
    the bodies after it).

    Iteration: a quartic step (the reverted third-order Taylor series of t(s), one division;
    equivalent in order to Danby's 1988 eq. 6.6.7) from the series guess; a body is done
    when the residual |t(s) - dt| is below 1e-15 of the size of the terms of t(s) (about four
    rounding units) and the Newton correction |t(s) - dt| / r is below 1e-15 |s| (near pericentre
    r is small and the first test alone would be loose), or when a step changes s by about an
    ulp or less (the rounding of t(s) allows no better); the
    G functions of that last evaluation give f and g.  A planetary step needs two evaluations.  Every step is kept inside
    a bracket of the root (t is increasing, so the sign of the residual moves one end); a step
    that would leave it is replaced by bisection, so the iteration converges from any start.
    The bodies of a block iterate in lockstep."""
    cdef double r0[KEPLER_BLOCK]
    cdef double inv_r0[KEPLER_BLOCK]
    cdef double eta[KEPLER_BLOCK]
    cdef double zeta[KEPLER_BLOCK]
    cdef double beta[KEPLER_BLOCK]
    cdef double tau[KEPLER_BLOCK]
    cdef double s[KEPLER_BLOCK]
    cdef double lo[KEPLER_BLOCK]
    cdef double hi[KEPLER_BLOCK]
    cdef double G1[KEPLER_BLOCK]
    cdef double G2[KEPLER_BLOCK]
    cdef double G3[KEPLER_BLOCK]
    cdef double rr[KEPLER_BLOCK]
    cdef int active[KEPLER_BLOCK]
    cdef int hard[KEPLER_BLOCK]
    cdef Py_ssize_t start, k, nb, i
    cdef int it, remaining
    cdef double x, y, z, vx, vy, vz, v2, mu, g1, g2, g3, f, f1, f2, f3, d1, a2, a3, inv, step, cand
    cdef double scale, inv_r, fm1, gg, fdot, gdotm1, blo, bhi
    cdef int own_budget
    cdef int* split_budget
    start = 0
    while start < n:
        nb = n - start
        if nb > KEPLER_BLOCK:
            nb = KEPLER_BLOCK
        for k in range(nb):
            i = start + k
            x = position[3 * i]
            y = position[3 * i + 1]
            z = position[3 * i + 2]
            vx = velocity[3 * i]
            vy = velocity[3 * i + 1]
            vz = velocity[3 * i + 2]
            mu = gm[i * gm_stride]
            r0[k] = sqrt(x * x + y * y + z * z)
            if not (r0[k] > 0.0 and isfinite(r0[k]) and isfinite(vx + vy + vz) and isfinite(mu)):
                return i
            inv_r0[k] = 1.0 / r0[k]
            v2 = vx * vx + vy * vy + vz * vz
            eta[k] = x * vx + y * vy + z * vz
            beta[k] = 2.0 * mu * inv_r0[k] - v2
            zeta[k] = mu - beta[k] * r0[k]
            tau[k] = lb_kepler_reduce(mu, beta[k], dt)
            hard[k] = 0
            if tau[k] > 0.0:
                lo[k] = 0.0
                hi[k] = INFINITY
            else:
                lo[k] = -INFINITY
                hi[k] = 0.0
            if beta[k] <= 0.0 and tau[k] != 0.0:
                # unbound orbit: t(s) grows exponentially, where an overshooting step recovers
                # only slowly, so the proven bracket is set up front (elliptic orbits get it
                # only if a step leaves the side bounds)
                hard[k] = 1
                if lb_kepler_bracket(r0[k], eta[k], zeta[k], beta[k], tau[k], &lo[k], &hi[k]) != 0:
                    return i
            s[k] = lb_kepler_guess(mu, r0[k], inv_r0[k], eta[k], zeta[k], beta[k], tau[k])
            active[k] = 1
            if tau[k] == 0.0:
                s[k] = 0.0
                G1[k] = 0.0
                G2[k] = 0.0
                G3[k] = 0.0
                rr[k] = r0[k]
                active[k] = 0
        # Lockstep iterations: independent dependency chains that the CPU overlaps.
        for it in range(KEPLER_MAX_ITERATIONS):
            remaining = 0
            for k in range(nb):
                if not active[k]:
                    continue
                lb_kepler_g(beta[k], s[k], &g1, &g2, &g3)
                f = r0[k] * s[k] + eta[k] * g2 + zeta[k] * g3 - tau[k]
                f1 = r0[k] + eta[k] * g1 + zeta[k] * g2
                if not (isfinite(f) and isfinite(f1)):
                    # overflow of the hyperbolic functions: s lies beyond the root
                    if tau[k] > 0.0:
                        hi[k] = s[k]
                    else:
                        lo[k] = s[k]
                    cand = NAN       # forces the bracketed bisection below
                else:
                    scale = (fabs(r0[k] * s[k]) + fabs(eta[k] * g2) + fabs(zeta[k] * g3)
                             + fabs(tau[k]))
                    if fabs(f) <= 1e-15 * scale and fabs(f) <= 1e-15 * fabs(f1 * s[k]):
                        G1[k] = g1
                        G2[k] = g2
                        G3[k] = g3
                        rr[k] = f1
                        active[k] = 0
                        continue
                    if f < 0.0:
                        lo[k] = s[k]
                    else:
                        hi[k] = s[k]
                    f2 = eta[k] * (1.0 - beta[k] * g2) + zeta[k] * g1
                    f3 = zeta[k] * (1.0 - beta[k] * g2) - beta[k] * eta[k] * g1
                    # fourth-order step from the reverted Taylor series of t(s): with the Newton
                    # step e = -f / f1, a2 = f2 / (2 f1), a3 = f3 / (6 f1), the root is at
                    # e - a2 e^2 + (2 a2^2 - a3) e^3 + O(e^4); one division
                    inv = 1.0 / f1
                    d1 = -f * inv
                    a2 = 0.5 * f2 * inv
                    a3 = f3 * inv * (1.0 / 6.0)
                    step = d1 * (1.0 - d1 * (a2 - d1 * (2.0 * a2 * a2 - a3)))
                    cand = s[k] + step
                if not (lo[k] < cand < hi[k]):
                    if not hard[k]:
                        # first escape: add the proven bracket of the root
                        hard[k] = 1
                        if lb_kepler_bracket(r0[k], eta[k], zeta[k], beta[k], tau[k], &blo,
                                             &bhi) != 0:
                            return start + k
                        if blo > lo[k]:
                            lo[k] = blo
                        if bhi < hi[k]:
                            hi[k] = bhi
                    if not (lo[k] < cand < hi[k]):
                        cand = 0.5 * (lo[k] + hi[k])
                if fabs(cand - s[k]) <= 2.5e-16 * fabs(s[k]):
                    if not (isfinite(f) and isfinite(f1)):
                        return start + k
                    # the correction is below what the rounding of t(s) can resolve (near a
                    # close pericentre, where r = t'(s) is small): take the last evaluation, it
                    # is within rounding of the root
                    G1[k] = g1
                    G2[k] = g2
                    G3[k] = g3
                    rr[k] = f1
                    active[k] = 0
                    continue
                s[k] = cand
                remaining += 1
            if remaining == 0:
                break
        for k in range(nb):
            i = start + k
            if active[k]:
                return i
            mu = gm[i * gm_stride]
            if (beta[k] < 0.0 and (budget == NULL or budget[0] > 0) and rr[k] < 0.01 * r0[k]
                    and fabs(r0[k] * s[k]) + fabs(eta[k] * G2[k]) + fabs(zeta[k] * G3[k])
                    > 1e2 * fabs(tau[k])):
                # an unbound arc falling from far out to close to the centre, whose t(s) is a
                # small difference of large terms: f and g would lose the digits t(s) loses.
                # Two half drifts: the first has little cancellation, the second is split again
                # while needed, so the error stays near one rounding of the largest distance.
                # A budget of splits per body bounds the work whatever the orbit.
                if budget == NULL:
                    own_budget = KEPLER_MAX_SPLITS
                    split_budget = &own_budget
                else:
                    split_budget = budget
                split_budget[0] -= 1
                if lb_kepler_drift_depth(&mu, 0, position + 3 * i, velocity + 3 * i, 1,
                                         0.5 * tau[k], split_budget) >= 0:
                    return i
                if lb_kepler_drift_depth(&mu, 0, position + 3 * i, velocity + 3 * i, 1,
                                         0.5 * tau[k], split_budget) >= 0:
                    return i
                continue
            inv_r = 1.0 / rr[k]
            fm1 = -mu * G2[k] * inv_r0[k]
            gg = tau[k] - mu * G3[k]
            fdot = -mu * G1[k] * inv_r0[k] * inv_r
            gdotm1 = -mu * G2[k] * inv_r
            if not (isfinite(inv_r) and isfinite(fm1) and isfinite(gg) and isfinite(fdot)
                    and isfinite(gdotm1) and rr[k] > 0.0):
                return i
            x = position[3 * i]
            y = position[3 * i + 1]
            z = position[3 * i + 2]
            vx = velocity[3 * i]
            vy = velocity[3 * i + 1]
            vz = velocity[3 * i + 2]
            position[3 * i] = x + (fm1 * x + gg * vx)
            position[3 * i + 1] = y + (fm1 * y + gg * vy)
            position[3 * i + 2] = z + (fm1 * z + gg * vz)
            velocity[3 * i] = vx + (fdot * x + gdotm1 * vx)
            velocity[3 * i + 1] = vy + (fdot * y + gdotm1 * vy)
            velocity[3 * i + 2] = vz + (fdot * z + gdotm1 * vz)
        start += KEPLER_BLOCK
    return -1
