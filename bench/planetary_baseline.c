/* Hand-written C baselines of the democratic-heliocentric Wisdom–Holman map, compiled by
 * bench/planetary.py at bench time with the flags of setup.py, so that libration's compiled
 * map is compared with plain C on the same machine in the same run.
 *
 * Both do exactly what libration's map does per step: one kick by the planet-planet
 * accelerations (the closing half-kick merged with the next opening one), a half "jump"
 * Q += (h/2) sum(m V) / m0, the Kepler drift of every planet about G m0, another half jump.
 *
 *   lb_baseline_plain     each body's Kepler equation solved on its own (Newton to
 *                         convergence on the universal anomaly, Stumpff series), body by body;
 *   lb_baseline_lockstep  all bodies' iterations interleaved (a fixed Halley iteration over
 *                         all bodies, repeated), the "tuned" variant of issue 3.
 */
#include <math.h>
#include <stddef.h>

static void stumpff23(double x, double *c2, double *c3)
{
    int n = 0;
    while (fabs(x) > 0.1) { x *= 0.25; n++; }
    double a2 = 1.0/2 - x*(1.0/24 - x*(1.0/720 - x*(1.0/40320 - x*(1.0/3628800 - x*(1.0/479001600)))));
    double a3 = 1.0/6 - x*(1.0/120 - x*(1.0/5040 - x*(1.0/362880 - x*(1.0/39916800 - x*(1.0/6227020800.0)))));
    double a1 = 1.0 - x * a3, a0 = 1.0 - x * a2;
    while (n-- > 0) {
        a3 = 0.25 * (a2 + a0 * a3);
        a2 = 0.5 * a1 * a1;
        a1 = a0 * a1;
        a0 = 2.0 * a0 * a0 - 1.0;
    }
    *c2 = a2;
    *c3 = a3;
}

static void kick(int n, const double *m, double G, const double *Q, double *V, double dt)
{
    double a[3 * 64] = {0};
    for (int i = 1; i < n; i++)
        for (int j = i + 1; j < n; j++) {
            double dx = Q[3*j] - Q[3*i], dy = Q[3*j+1] - Q[3*i+1], dz = Q[3*j+2] - Q[3*i+2];
            double r2 = dx*dx + dy*dy + dz*dz, inv3 = G / (r2 * sqrt(r2));
            a[3*i] += m[j]*inv3*dx; a[3*i+1] += m[j]*inv3*dy; a[3*i+2] += m[j]*inv3*dz;
            a[3*j] -= m[i]*inv3*dx; a[3*j+1] -= m[i]*inv3*dy; a[3*j+2] -= m[i]*inv3*dz;
        }
    for (int k = 3; k < 3 * n; k++) V[k] += dt * a[k];
}

static void jump(int n, const double *m, double *Q, const double *V, double dt)
{
    double px = 0, py = 0, pz = 0;
    for (int i = 1; i < n; i++) { px += m[i]*V[3*i]; py += m[i]*V[3*i+1]; pz += m[i]*V[3*i+2]; }
    double s = dt / m[0];
    for (int i = 1; i < n; i++) { Q[3*i] += s*px; Q[3*i+1] += s*py; Q[3*i+2] += s*pz; }
}

static void fg_update(double gm, double *r, double *v, double r0, double dt, double s, double beta,
                      double eta, double zeta)
{
    double c2, c3;
    stumpff23(beta * s * s, &c2, &c3);
    double g1 = s * (1.0 - beta * s * s * c3), g2 = s * s * c2, g3 = s * s * s * c3;
    double rr = r0 + eta * g1 + zeta * g2;
    double fm1 = -gm * g2 / r0, g = dt - gm * g3, fd = -gm * g1 / (r0 * rr), gdm1 = -gm * g2 / rr;
    for (int k = 0; k < 3; k++) {
        double x = r[k], u = v[k];
        r[k] = x + (fm1 * x + g * u);
        v[k] = u + (fd * x + gdm1 * u);
    }
}

static void kepler_plain(double gm, double *r, double *v, double dt)
{
    double r0 = sqrt(r[0]*r[0] + r[1]*r[1] + r[2]*r[2]);
    double v2 = v[0]*v[0] + v[1]*v[1] + v[2]*v[2];
    double eta = r[0]*v[0] + r[1]*v[1] + r[2]*v[2];
    double beta = 2.0 * gm / r0 - v2, zeta = gm - beta * r0;
    double s = dt / r0;
    for (int it = 0; it < 50; it++) {
        double c2, c3;
        stumpff23(beta * s * s, &c2, &c3);
        double g1 = s * (1.0 - beta * s * s * c3), g2 = s * s * c2, g3 = s * s * s * c3;
        double f = r0 * s + eta * g2 + zeta * g3 - dt, fp = r0 + eta * g1 + zeta * g2;
        double ds = -f / fp;
        s += ds;
        if (fabs(ds) <= 1e-15 * fabs(s)) break;
    }
    fg_update(gm, r, v, r0, dt, s, beta, eta, zeta);
}

void lb_baseline_plain(int n, const double *m, double G, double *Q, double *V, double h, long steps)
{
    double gm = G * m[0];
    for (long k = 0; k < steps; k++) {
        kick(n, m, G, Q, V, k == 0 ? 0.5 * h : h);
        jump(n, m, Q, V, 0.5 * h);
        for (int i = 1; i < n; i++) kepler_plain(gm, Q + 3*i, V + 3*i, h);
        jump(n, m, Q, V, 0.5 * h);
    }
}

void lb_baseline_lockstep(int n, const double *m, double G, double *Q, double *V, double h,
                          long steps)
{
    double gm = G * m[0];
    double r0[64], eta[64], beta[64], zeta[64], s[64];
    for (long k = 0; k < steps; k++) {
        kick(n, m, G, Q, V, k == 0 ? 0.5 * h : h);
        jump(n, m, Q, V, 0.5 * h);
        for (int i = 1; i < n; i++) {
            double *r = Q + 3*i, *v = V + 3*i;
            r0[i] = sqrt(r[0]*r[0] + r[1]*r[1] + r[2]*r[2]);
            eta[i] = r[0]*v[0] + r[1]*v[1] + r[2]*v[2];
            beta[i] = 2.0 * gm / r0[i] - (v[0]*v[0] + v[1]*v[1] + v[2]*v[2]);
            zeta[i] = gm - beta[i] * r0[i];
            double u = h / r0[i];
            s[i] = u * (1.0 - 0.5 * eta[i] * u / r0[i]);
        }
        for (int it = 0; it < 3; it++)          /* Halley, three times, all bodies together */
            for (int i = 1; i < n; i++) {
                double c2, c3, x = s[i];
                stumpff23(beta[i] * x * x, &c2, &c3);
                double g1 = x * (1.0 - beta[i] * x * x * c3), g2 = x * x * c2, g3 = x * x * x * c3;
                double f = r0[i] * x + eta[i] * g2 + zeta[i] * g3 - h;
                double fp = r0[i] + eta[i] * g1 + zeta[i] * g2;
                double fpp = eta[i] * (1.0 - beta[i] * g2) + zeta[i] * g1;
                s[i] = x - 2.0 * f * fp / (2.0 * fp * fp - f * fpp);
            }
        for (int i = 1; i < n; i++)
            fg_update(gm, Q + 3*i, V + 3*i, r0[i], h, s[i], beta[i], eta[i], zeta[i]);
        jump(n, m, Q, V, 0.5 * h);
    }
}
