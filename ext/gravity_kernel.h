/* Direct-summation gravity: the hot loop of libration.
 *
 * Layout: structure of arrays (x, y, z, gm) for speed; targets are processed in
 * blocks, and inside a block the loop over targets is the innermost one, so the
 * compiler vectorises across *targets*.  Every target's sum over sources still runs
 * in the fixed order j = 0, 1, ..., n_active - 1, so the result is bitwise the same
 * whatever the vector width, block size or thread count.
 *
 * IEEE safety: the build uses -fno-math-errno -fno-trapping-math -ffp-contract=off
 * (never -ffast-math), so sqrt and division are correctly rounded and identical on
 * every code path.  On x86-64 with gcc, the block function is compiled for AVX-512,
 * AVX2 and baseline x86-64 and the best clone is chosen at load time (target_clones),
 * so a portable build still uses the wide vector units where present.
 */
#ifndef LIBRATION_GRAVITY_KERNEL_H
#define LIBRATION_GRAVITY_KERNEL_H

#include <math.h>
#include <stddef.h>

#if defined(__GNUC__) && !defined(__clang__) && defined(__x86_64__) && defined(__linux__) \
    && !defined(LIBRATION_NATIVE) && !defined(LIBRATION_NO_CLONES)
#  define LB_CLONES __attribute__((target_clones("avx512f", "avx2", "default")))
#else
#  define LB_CLONES
#endif

/* Targets per block: 6 arrays of this many doubles stay in the L1/L2 cache. */
#define LB_GRAVITY_BLOCK 256
/* Below this many interactions a second thread costs more than it saves
 * (OpenMP start-up is a few microseconds; see bench/gravity.py). */
#define LB_PARALLEL_MIN_INTERACTIONS 250000.0

#define LB_GRAVITY_SEGMENT(LO, HI)                                   \
    for (ptrdiff_t i = (LO); i < (HI); i++) {                        \
        double dx = xj - x[i];                                       \
        double dy = yj - y[i];                                       \
        double dz = zj - z[i];                                       \
        double r2 = dx * dx + dy * dy + dz * dz + eps2;              \
        double f = gmj / (r2 * sqrt(r2));                            \
        ax[i] += f * dx;                                             \
        ay[i] += f * dy;                                             \
        az[i] += f * dz;                                             \
    }

/* Accelerations of targets [i0, i1) from sources [0, n_active).  A target never
 * acts on itself (the source loop is split around it).  ax, ay, az are overwritten. */
LB_CLONES
static void lb_gravity_block(const double *restrict x, const double *restrict y,
                             const double *restrict z, const double *restrict gm,
                             ptrdiff_t n_active, ptrdiff_t i0, ptrdiff_t i1, double eps2,
                             double *restrict ax, double *restrict ay, double *restrict az)
{
    for (ptrdiff_t i = i0; i < i1; i++) {
        ax[i] = 0.0;
        ay[i] = 0.0;
        az[i] = 0.0;
    }
    for (ptrdiff_t j = 0; j < n_active; j++) {
        const double xj = x[j], yj = y[j], zj = z[j], gmj = gm[j];
        ptrdiff_t mid = j < i0 ? i0 : (j > i1 ? i1 : j);
        ptrdiff_t after = j + 1 < i0 ? i0 : (j + 1 > i1 ? i1 : j + 1);
        LB_GRAVITY_SEGMENT(i0, mid)
        LB_GRAVITY_SEGMENT(after, i1)
    }
}

#undef LB_GRAVITY_SEGMENT

/* Fill acc (n x 3, row-major) with the accelerations of all n bodies from the
 * n_active massive ones.  soa is scratch of 7 * n doubles owned by the caller.
 * Returns 0, or 1 with *bad set to the first body whose acceleration is not finite
 * (it shares its position with a massive body). */
static int lb_gravity_accelerations(const double *position, const double *mass, ptrdiff_t n,
                                    ptrdiff_t n_active, double G, double eps2, double *acc,
                                    double *soa, int threads, ptrdiff_t *bad)
{
    double *x = soa, *y = soa + n, *z = soa + 2 * n, *gm = soa + 3 * n;
    double *ax = soa + 4 * n, *ay = soa + 5 * n, *az = soa + 6 * n;
    for (ptrdiff_t i = 0; i < n; i++) {
        x[i] = position[3 * i];
        y[i] = position[3 * i + 1];
        z[i] = position[3 * i + 2];
    }
    for (ptrdiff_t i = 0; i < n_active; i++) gm[i] = G * mass[i];
    const ptrdiff_t nblocks = (n + LB_GRAVITY_BLOCK - 1) / LB_GRAVITY_BLOCK;
#ifdef _OPENMP
    const int parallel = threads > 1 && nblocks > 1
                         && (double)n * (double)n_active >= LB_PARALLEL_MIN_INTERACTIONS;
#pragma omp parallel for schedule(static) num_threads(threads) if (parallel)
#else
    (void)threads;
#endif
    for (ptrdiff_t b = 0; b < nblocks; b++) {
        ptrdiff_t i1 = (b + 1) * LB_GRAVITY_BLOCK;
        lb_gravity_block(x, y, z, gm, n_active, b * LB_GRAVITY_BLOCK, i1 < n ? i1 : n, eps2,
                         ax, ay, az);
    }
    for (ptrdiff_t i = 0; i < n; i++) {
        if (!(isfinite(ax[i]) && isfinite(ay[i]) && isfinite(az[i]))) {
            *bad = i;
            return 1;
        }
        acc[3 * i] = ax[i];
        acc[3 * i + 1] = ay[i];
        acc[3 * i + 2] = az[i];
    }
    return 0;
}

/* Potential energy of the massive bodies: compensated sums in a fixed order. */
static double lb_gravity_potential(const double *position, const double *mass,
                                   ptrdiff_t n_active, double G, double eps2)
{
    double total = 0.0, carry = 0.0;
    for (ptrdiff_t i = 0; i < n_active; i++) {
        double row = 0.0, row_carry = 0.0;
        for (ptrdiff_t j = i + 1; j < n_active; j++) {
            double dx = position[3 * j] - position[3 * i];
            double dy = position[3 * j + 1] - position[3 * i + 1];
            double dz = position[3 * j + 2] - position[3 * i + 2];
            double term = mass[j] / sqrt(dx * dx + dy * dy + dz * dz + eps2) - row_carry;
            double t = row + term;
            row_carry = (t - row) - term;
            row = t;
        }
        double term = -G * mass[i] * row - carry;
        double t = total + term;
        carry = (t - total) - term;
        total = t;
    }
    return total;
}

static int lb_have_openmp(void)
{
#ifdef _OPENMP
    return 1;
#else
    return 0;
#endif
}

#endif /* LIBRATION_GRAVITY_KERNEL_H */
