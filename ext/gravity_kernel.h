/* Direct-summation gravity: the hot loop of libration.
 *
 * Layout.  Each call copies the massive bodies (the sources, j < n_active) into a
 * structure of arrays (x, y, z, G*m).  Targets are taken in tiles of one to a few
 * vector registers' width, read straight from the (n, 3) positions and transposed in
 * registers; a tile keeps its accumulators in registers while it walks over all the
 * sources (each broadcast to every lane), then writes its rows of the (n, 3)
 * accelerations.  So a call costs O(n_active) set-up plus the O(n_active * n) sum,
 * and the test-particle case (few sources, very many targets) runs near the
 * per-interaction rate of the full one.
 *
 * Exactness.  Every target's sum runs over the sources in index order
 * j = 0, 1, ..., n_active - 1 (its own index skipped), one correctly rounded IEEE
 * operation after another: sqrt and division are exact roundings, the build uses
 * -fno-math-errno -fno-trapping-math -ffp-contract=off (never -ffast-math), and
 * vector lanes never mix.  So the result is bitwise the same for every vector width
 * (the SSE2, AVX2 and AVX-512 variants below), every tile width and every thread
 * count, and the same as a plain scalar double loop in that order.
 *
 * Speed.  The sum needs one sqrt and one division per interaction; both run on the
 * same divider unit, whose throughput bounds the kernel: on the Xeon this was tuned
 * on, a loop doing nothing but sqrt, multiply and divide on independent AVX2 vectors
 * of ordinary values took 1.25 ns per element (8.0e8/s), which is what the kernel
 * reaches on an idle core.  Everything else (loads, transposes, accumulators) hides
 * behind the divider.  (Faster formulas exist, such as approximate reciprocal square
 * roots refined by Newton steps, but they are not correctly rounded and differ
 * between CPUs, so they are not used.)
 *
 * Dispatch.  On x86-64 with gcc or clang the tile loop is compiled for SSE2 (the
 * x86-64 baseline), AVX2 and AVX-512F with intrinsics, and the variant named by
 * lb_gravity_isa_best() is chosen at run time, so a portable build still uses the wide
 * vector units (also under LIBRATION_NATIVE=1, which only tunes the rest).  Elsewhere
 * (or with -DLIBRATION_NO_CLONES) one plain C variant is built, for the compiler to
 * vectorise as it can.
 */
#ifndef LIBRATION_GRAVITY_KERNEL_H
#define LIBRATION_GRAVITY_KERNEL_H

#include <math.h>
#include <stddef.h>
#ifdef _OPENMP
#  include <omp.h>
#endif

#if (defined(__GNUC__) || defined(__clang__)) && defined(__x86_64__) \
    && !defined(LIBRATION_NO_CLONES)
#  define LB_DISPATCH 1
#else
#  define LB_DISPATCH 0
#endif

/* Target vectors per tile in each variant.  K = 1 to 4 timed within noise of each
 * other on the development machine (a C driver timing each variant). */
#ifndef LB_K_SSE2
#  define LB_K_SSE2 2
#endif
#ifndef LB_K_AVX2
#  define LB_K_AVX2 2
#endif
#ifndef LB_K_AVX512
#  define LB_K_AVX512 1
#endif

/* Below this many interactions (n_active * n) the kernel stays on one thread.  With
 * the worker threads warm (back-to-back calls, as in a stepping loop) two threads
 * broke even at about 2300 interactions (N = 48) on the development machine and gave
 * 1.7x at 16384 (N = 128); on a machine whose cores are busy with other work, extra
 * threads lose at any size (bench/gravity.py measures it; see bench/README.md). */
#ifndef LB_PARALLEL_MIN_INTERACTIONS
#  define LB_PARALLEL_MIN_INTERACTIONS 16384.0
#endif

/* Most targets per chunk of work handed to a thread. */
#define LB_CHUNK_TARGETS 4096

/* Instruction-set variants of the tile loop (lb_gravity_isa_* return these). */
#define LB_ISA_BASELINE 0
#define LB_ISA_AVX2 1
#define LB_ISA_AVX512 2

/* One tile variant.  VT is a vector of LANES doubles and a tile holds K vectors of
 * targets; the operation macros map to intrinsics, or to plain C for VT = double.
 * LOAD3(p, &x, &y, &z) reads LANES rows of an (n, 3) array at p into three vectors
 * and STORE3(p, x, y, z) writes them back (transposing in registers).
 * Every variant performs, lane by lane, exactly the scalar operations
 *   dx = xj - xi; ...; r2 = ((dx*dx + dy*dy) + dz*dz) + eps2;
 *   f = gmj / (r2 * sqrt(r2)); ax += f * dx; ...
 * for j = 0, 1, ..., n_active - 1 in that order, so all of them agree to the bit.
 * The sources that lie inside the tile itself (at most one tile's worth) are added
 * by the same operations in scalar code, skipping each target's own index.
 * Targets [t0, t1) (t0 a multiple of the tile width) are read from position; sources
 * from x, y, z, gm.  Returns the first target whose acceleration is not finite, or -1. */
#define LB_DEFINE_TILES(NAME, ATTRIBUTE, VT, LANES, K, SET1, LOADU, STOREU, LOAD3, STORE3,  \
                        ADD, SUB, MUL, DIV, SQRT)                                         \
ATTRIBUTE static ptrdiff_t NAME(const double *restrict position, const double *restrict x, \
                                const double *restrict y, const double *restrict z,        \
                                const double *restrict gm, ptrdiff_t n_active, ptrdiff_t t0,\
                                ptrdiff_t t1, double eps2, double *restrict acc)           \
{                                                                                         \
    enum { T = (LANES) * (K) };                                                            \
    const VT veps2 = SET1(eps2), zero = SET1(0.0);                                         \
    VT check = zero; /* stays finite while every stored value is finite */                 \
    ptrdiff_t first_bad = -1;                                                              \
    for (ptrdiff_t i0 = t0; i0 < t1; i0 += T) {                                            \
        double bx[T], by[T], bz[T];                                                        \
        VT tx[K], ty[K], tz[K], ax[K], ay[K], az[K];                                       \
        const int width = (int)(t1 - i0 < T ? t1 - i0 : T);                                \
        if (width == T) {                                                                  \
            for (int k = 0; k < (K); k++)                                                  \
                LOAD3(position + 3 * (i0 + k * (LANES)), &tx[k], &ty[k], &tz[k]);          \
        } else { /* the last, partial tile: pad with copies of its first body */           \
            for (int l = 0; l < T; l++) {                                                  \
                const ptrdiff_t i = i0 + (l < width ? l : 0);                              \
                bx[l] = position[3 * i];                                                   \
                by[l] = position[3 * i + 1];                                               \
                bz[l] = position[3 * i + 2];                                               \
            }                                                                              \
            for (int k = 0; k < (K); k++) {                                                \
                tx[k] = LOADU(bx + k * (LANES));                                           \
                ty[k] = LOADU(by + k * (LANES));                                           \
                tz[k] = LOADU(bz + k * (LANES));                                           \
            }                                                                              \
        }                                                                                  \
        for (int k = 0; k < (K); k++) {                                                    \
            ax[k] = zero;                                                                  \
            ay[k] = zero;                                                                  \
            az[k] = zero;                                                                  \
        }                                                                                  \
        const ptrdiff_t own0 = i0 < n_active ? i0 : n_active;                              \
        const ptrdiff_t own1 = i0 + T < n_active ? i0 + T : n_active;                      \
        for (int pass = 0; pass < 2; pass++) {                                             \
            const ptrdiff_t j0 = pass == 0 ? 0 : own1, j1 = pass == 0 ? own0 : n_active;   \
            for (ptrdiff_t j = j0; j < j1; j++) {                                          \
                const VT xj = SET1(x[j]), yj = SET1(y[j]), zj = SET1(z[j]);                \
                const VT gmj = SET1(gm[j]);                                                \
                for (int k = 0; k < (K); k++) {                                            \
                    const VT dx = SUB(xj, tx[k]), dy = SUB(yj, ty[k]), dz = SUB(zj, tz[k]);\
                    const VT r2 = ADD(ADD(ADD(MUL(dx, dx), MUL(dy, dy)), MUL(dz, dz)), veps2);\
                    const VT f = DIV(gmj, MUL(r2, SQRT(r2)));                              \
                    ax[k] = ADD(ax[k], MUL(f, dx));                                        \
                    ay[k] = ADD(ay[k], MUL(f, dy));                                        \
                    az[k] = ADD(az[k], MUL(f, dz));                                        \
                }                                                                          \
            }                                                                              \
            if (pass == 0 && own0 < own1) {                                                \
                /* Sources inside the tile, in index order, scalar, self skipped. */       \
                double cx[T], cy[T], cz[T], ox[T], oy[T], oz[T];                           \
                for (int k = 0; k < (K); k++) {                                            \
                    STOREU(cx + k * (LANES), ax[k]);                                       \
                    STOREU(cy + k * (LANES), ay[k]);                                       \
                    STOREU(cz + k * (LANES), az[k]);                                       \
                    STOREU(ox + k * (LANES), tx[k]);                                       \
                    STOREU(oy + k * (LANES), ty[k]);                                       \
                    STOREU(oz + k * (LANES), tz[k]);                                       \
                }                                                                          \
                for (int l = 0; l < T; l++) {                                              \
                    for (ptrdiff_t j = own0; j < own1; j++) {                              \
                        if (j == i0 + l) continue;                                         \
                        const double dx = x[j] - ox[l], dy = y[j] - oy[l];                 \
                        const double dz = z[j] - oz[l];                                    \
                        const double r2 = dx * dx + dy * dy + dz * dz + eps2;              \
                        const double f = gm[j] / (r2 * sqrt(r2));                          \
                        cx[l] += f * dx;                                                   \
                        cy[l] += f * dy;                                                   \
                        cz[l] += f * dz;                                                   \
                    }                                                                      \
                }                                                                          \
                for (int k = 0; k < (K); k++) {                                            \
                    ax[k] = LOADU(cx + k * (LANES));                                       \
                    ay[k] = LOADU(cy + k * (LANES));                                       \
                    az[k] = LOADU(cz + k * (LANES));                                       \
                }                                                                          \
            }                                                                              \
        }                                                                                  \
        if (width == T) {                                                                  \
            for (int k = 0; k < (K); k++) {                                                \
                STORE3(acc + 3 * (i0 + k * (LANES)), ax[k], ay[k], az[k]);                 \
                /* x * 0 is nan exactly when x is inf or nan */                            \
                check = ADD(check, ADD(ADD(MUL(ax[k], zero), MUL(ay[k], zero)),            \
                                       MUL(az[k], zero)));                                 \
            }                                                                              \
        } else {                                                                           \
            for (int k = 0; k < (K); k++) {                                                \
                STOREU(bx + k * (LANES), ax[k]);                                           \
                STOREU(by + k * (LANES), ay[k]);                                           \
                STOREU(bz + k * (LANES), az[k]);                                           \
            }                                                                              \
            for (int l = 0; l < width; l++) {                                              \
                if (first_bad < 0 && !(isfinite(bx[l]) && isfinite(by[l]) && isfinite(bz[l])))\
                    first_bad = i0 + l;                                                    \
                acc[3 * (i0 + l)] = bx[l];                                                 \
                acc[3 * (i0 + l) + 1] = by[l];                                             \
                acc[3 * (i0 + l) + 2] = bz[l];                                             \
            }                                                                              \
        }                                                                                  \
    }                                                                                      \
    double c[LANES];                                                                       \
    STOREU(c, check);                                                                      \
    int all_finite = 1;                                                                    \
    for (int l = 0; l < (LANES); l++) all_finite &= c[l] == c[l];                          \
    if (!all_finite) /* rare: find the first culprit in what was written */                \
        for (ptrdiff_t i = t0; i < t1; i++)                                                \
            if (!(isfinite(acc[3 * i]) && isfinite(acc[3 * i + 1])                         \
                  && isfinite(acc[3 * i + 2])))                                            \
                return i;                                                                  \
    return first_bad;                                                                      \
}

typedef ptrdiff_t (*lb_gravity_tiles_fn)(const double *, const double *, const double *,
                                         const double *, const double *, ptrdiff_t, ptrdiff_t,
                                         ptrdiff_t, double, double *);

#define LB_S_SET1(a) (a)
#define LB_S_LOADU(p) (*(p))
#define LB_S_STOREU(p, v) (*(p) = (v))
#define LB_S_ADD(a, b) ((a) + (b))
#define LB_S_SUB(a, b) ((a) - (b))
#define LB_S_MUL(a, b) ((a) * (b))
#define LB_S_DIV(a, b) ((a) / (b))
#define LB_S_SQRT(a) sqrt(a)

/* Plain C rows <-> lanes, for the variants without a register transpose. */
#define LB_S_LOAD3(p, px, py, pz) (*(px) = (p)[0], *(py) = (p)[1], *(pz) = (p)[2])
#define LB_S_STORE3(p, vx, vy, vz) ((p)[0] = (vx), (p)[1] = (vy), (p)[2] = (vz))

#if LB_DISPATCH
#include <immintrin.h>
/* SSE2, two rows: (x0 y0) (z0 x1) (y1 z1) <-> (x0 x1) (y0 y1) (z0 z1). */
#define LB_SSE2_LOAD3(p, px, py, pz)                                                      \
    do {                                                                                  \
        const __m128d r0 = _mm_loadu_pd(p), r1 = _mm_loadu_pd((p) + 2);                   \
        const __m128d r2 = _mm_loadu_pd((p) + 4);                                         \
        *(px) = _mm_shuffle_pd(r0, r1, 2);                                                \
        *(py) = _mm_shuffle_pd(r0, r2, 1);                                                \
        *(pz) = _mm_shuffle_pd(r1, r2, 2);                                                \
    } while (0)
#define LB_SSE2_STORE3(p, vx, vy, vz)                                                     \
    do {                                                                                  \
        _mm_storeu_pd(p, _mm_shuffle_pd(vx, vy, 0));                                      \
        _mm_storeu_pd((p) + 2, _mm_shuffle_pd(vz, vx, 2));                                \
        _mm_storeu_pd((p) + 4, _mm_shuffle_pd(vy, vz, 3));                                \
    } while (0)
/* AVX2, four rows: (x0 y0 | z0 x1) (y1 z1 | x2 y2) (z2 x3 | y3 z3) <-> x, y, z. */
#define LB_AVX2_LOAD3(p, px, py, pz)                                                      \
    do {                                                                                  \
        const __m256d r0 = _mm256_loadu_pd(p), r1 = _mm256_loadu_pd((p) + 4);            \
        const __m256d r2 = _mm256_loadu_pd((p) + 8);                                      \
        const __m256d xy = _mm256_permute2f128_pd(r0, r1, 0x30); /* x0 y0 | x2 y2 */      \
        const __m256d zx = _mm256_permute2f128_pd(r0, r2, 0x21); /* z0 x1 | z2 x3 */      \
        const __m256d yz = _mm256_permute2f128_pd(r1, r2, 0x30); /* y1 z1 | y3 z3 */      \
        *(px) = _mm256_shuffle_pd(xy, zx, 0xA);                                           \
        *(py) = _mm256_shuffle_pd(xy, yz, 0x5);                                           \
        *(pz) = _mm256_shuffle_pd(zx, yz, 0xA);                                           \
    } while (0)
#define LB_AVX2_STORE3(p, vx, vy, vz)                                                     \
    do {                                                                                  \
        const __m256d xy = _mm256_shuffle_pd(vx, vy, 0x0); /* x0 y0 | x2 y2 */            \
        const __m256d zx = _mm256_shuffle_pd(vz, vx, 0xA); /* z0 x1 | z2 x3 */            \
        const __m256d yz = _mm256_shuffle_pd(vy, vz, 0xF); /* y1 z1 | y3 z3 */            \
        _mm256_storeu_pd(p, _mm256_permute2f128_pd(xy, zx, 0x20));                        \
        _mm256_storeu_pd((p) + 4, _mm256_permute2f128_pd(yz, xy, 0x30));                  \
        _mm256_storeu_pd((p) + 8, _mm256_permute2f128_pd(zx, yz, 0x31));                  \
    } while (0)
/* AVX-512, eight rows: gathers and scatters with a fixed index vector. */
#define LB_AVX512_ROWS _mm512_set_epi64(21, 18, 15, 12, 9, 6, 3, 0)
#define LB_AVX512_LOAD3(p, px, py, pz)                                                    \
    do {                                                                                  \
        *(px) = _mm512_i64gather_pd(LB_AVX512_ROWS, (p), 8);                              \
        *(py) = _mm512_i64gather_pd(LB_AVX512_ROWS, (p) + 1, 8);                          \
        *(pz) = _mm512_i64gather_pd(LB_AVX512_ROWS, (p) + 2, 8);                          \
    } while (0)
#define LB_AVX512_STORE3(p, vx, vy, vz)                                                   \
    do {                                                                                  \
        _mm512_i64scatter_pd((p), LB_AVX512_ROWS, vx, 8);                                 \
        _mm512_i64scatter_pd((p) + 1, LB_AVX512_ROWS, vy, 8);                             \
        _mm512_i64scatter_pd((p) + 2, LB_AVX512_ROWS, vz, 8);                             \
    } while (0)

/* Baseline x86-64: SSE2, two doubles per register. */
LB_DEFINE_TILES(lb_gravity_tiles_baseline, , __m128d, 2, LB_K_SSE2, _mm_set1_pd, _mm_loadu_pd,
                _mm_storeu_pd, LB_SSE2_LOAD3, LB_SSE2_STORE3, _mm_add_pd, _mm_sub_pd,
                _mm_mul_pd, _mm_div_pd, _mm_sqrt_pd)
#  define LB_TILE_BASELINE (2 * LB_K_SSE2)
LB_DEFINE_TILES(lb_gravity_tiles_avx2, __attribute__((target("avx2"))), __m256d, 4, LB_K_AVX2,
                _mm256_set1_pd, _mm256_loadu_pd, _mm256_storeu_pd, LB_AVX2_LOAD3,
                LB_AVX2_STORE3, _mm256_add_pd, _mm256_sub_pd, _mm256_mul_pd, _mm256_div_pd,
                _mm256_sqrt_pd)
LB_DEFINE_TILES(lb_gravity_tiles_avx512, __attribute__((target("avx512f"))), __m512d, 8,
                LB_K_AVX512, _mm512_set1_pd, _mm512_loadu_pd, _mm512_storeu_pd, LB_AVX512_LOAD3,
                LB_AVX512_STORE3, _mm512_add_pd, _mm512_sub_pd, _mm512_mul_pd, _mm512_div_pd,
                _mm512_sqrt_pd)
#else
/* Portable C (other CPUs, or -march=native where the compiler may vectorise it). */
#  define LB_TILE_BASELINE 8
LB_DEFINE_TILES(lb_gravity_tiles_baseline, , double, 1, 8, LB_S_SET1, LB_S_LOADU, LB_S_STOREU,
                LB_S_LOAD3, LB_S_STORE3, LB_S_ADD, LB_S_SUB, LB_S_MUL, LB_S_DIV, LB_S_SQRT)
#endif

/* Fork safety.  GNU OpenMP's thread pool does not survive fork(): a child process
 * that starts a parallel region after its parent ran one hangs (Python's
 * multiprocessing forks by default on Linux, e.g. process pools for ensembles).  So
 * in a forked child the kernel never enters OpenMP and runs on one thread; children
 * started by spawn or forkserver are fresh processes and keep their threads.  Every
 * compiled module that includes this header registers its own handler when it is
 * loaded, so the rule holds whichever module ran OpenMP in the parent. */
static int lb_gravity_forked = 0;
#if defined(_OPENMP) && (defined(__GNUC__) || defined(__clang__)) \
    && (defined(__unix__) || defined(__APPLE__))
#  include <pthread.h>
static void lb_gravity_mark_forked(void) { lb_gravity_forked = 1; }
__attribute__((constructor)) static void lb_gravity_register_fork_handler(void)
{
    pthread_atfork(NULL, NULL, lb_gravity_mark_forked);
}
#endif

/* A variant: its tile loop and tile width (targets per tile). */
typedef struct {
    lb_gravity_tiles_fn tiles;
    ptrdiff_t tile;
} lb_gravity_variant;

/* The variant to use on this CPU.  AVX2 is preferred to AVX-512 even where both
 * exist: the divider bounds the loop, and 512-bit sqrt/div cost more issue slots per
 * double on the Intel cores measured (bench/gravity.py times every variant). */
static int lb_gravity_isa_best(void)
{
#if LB_DISPATCH
    __builtin_cpu_init();
    if (__builtin_cpu_supports("avx2")) return LB_ISA_AVX2;
    if (__builtin_cpu_supports("avx512f")) return LB_ISA_AVX512;
#endif
    return LB_ISA_BASELINE;
}

/* 1 if the variant for this instruction set is compiled in and the CPU runs it. */
static int lb_gravity_isa_available(int isa)
{
    if (isa == LB_ISA_BASELINE) return 1;
#if LB_DISPATCH
    __builtin_cpu_init();
    if (isa == LB_ISA_AVX2) return __builtin_cpu_supports("avx2") ? 1 : 0;
    if (isa == LB_ISA_AVX512) return __builtin_cpu_supports("avx512f") ? 1 : 0;
#endif
    return 0;
}

static lb_gravity_variant lb_gravity_variant_for(int isa)
{
    lb_gravity_variant v = {lb_gravity_tiles_baseline, LB_TILE_BASELINE};
#if LB_DISPATCH
    if (isa == LB_ISA_AVX2) {
        v.tiles = lb_gravity_tiles_avx2;
        v.tile = 4 * LB_K_AVX2;
    } else if (isa == LB_ISA_AVX512) {
        v.tiles = lb_gravity_tiles_avx512;
        v.tile = 8 * LB_K_AVX512;
    }
#else
    (void)isa;
#endif
    return v;
}

/* Fill acc (n x 3, row-major) with the accelerations of all n bodies from the
 * n_active massive ones, using the tile variant for instruction set isa (which the
 * caller has checked with lb_gravity_isa_available).  soa is scratch of 4 * n_active
 * doubles owned by the caller (the sources in structure-of-arrays form).  Returns 0, or 1 with *bad set to the first
 * body whose acceleration is not finite (it shares its position with a massive body,
 * or the input held a non-finite value). */
static int lb_gravity_accelerations_isa(int isa, const double *position, const double *mass,
                                        ptrdiff_t n, ptrdiff_t n_active, double G, double eps2,
                                        double *acc, double *soa, int threads, ptrdiff_t *bad)
{
    const lb_gravity_variant v = lb_gravity_variant_for(isa);
    double *x = soa, *y = soa + n_active, *z = soa + 2 * n_active, *gm = soa + 3 * n_active;
    for (ptrdiff_t j = 0; j < n_active; j++) {
        x[j] = position[3 * j];
        y[j] = position[3 * j + 1];
        z[j] = position[3 * j + 2];
        gm[j] = G * mass[j];
    }
    const ptrdiff_t ntiles = (n + v.tile - 1) / v.tile;
    /* Targets go in chunks of whole tiles, at most LB_CHUNK_TARGETS bodies each and,
     * with threads, at least 8 chunks per thread, handed out on demand (a thread that
     * starts late on a busy machine just takes fewer).  How the chunks fall never
     * changes a bit of the result. */
    ptrdiff_t per_chunk = LB_CHUNK_TARGETS / v.tile;
    int parallel = 0;
#ifdef _OPENMP
    parallel = threads > 1 && ntiles > 1
               && (double)n * (double)n_active >= LB_PARALLEL_MIN_INTERACTIONS
               && !lb_gravity_forked;
    if (parallel) {
        const ptrdiff_t share = (ntiles + 8 * (ptrdiff_t)threads - 1) / (8 * (ptrdiff_t)threads);
        if (share < per_chunk) per_chunk = share;
    }
#else
    (void)threads;
#endif
    const ptrdiff_t nchunks = (ntiles + per_chunk - 1) / per_chunk;
    ptrdiff_t first_bad = n;
#define LB_GRAVITY_CHUNK(C)                                                               \
    do {                                                                                  \
        const ptrdiff_t lo = (C) * per_chunk * v.tile;                                    \
        const ptrdiff_t hi = lo + per_chunk * v.tile < n ? lo + per_chunk * v.tile : n;   \
        const ptrdiff_t b = v.tiles(position, x, y, z, gm, n_active, lo, hi, eps2, acc);  \
        if (b >= 0 && b < first_bad) first_bad = b;                                       \
    } while (0)
#ifdef _OPENMP
    if (parallel) {
#pragma omp parallel for schedule(dynamic, 1) num_threads(threads) reduction(min : first_bad)
        for (ptrdiff_t c = 0; c < nchunks; c++) LB_GRAVITY_CHUNK(c);
    } else
#endif
    {
        /* No OpenMP construct at all on this path (see lb_gravity_forked). */
        for (ptrdiff_t c = 0; c < nchunks; c++) LB_GRAVITY_CHUNK(c);
    }
#undef LB_GRAVITY_CHUNK
    if (first_bad < n) {
        *bad = first_bad;
        return 1;
    }
    return 0;
}

/* The kernel the stepping loops call: lb_gravity_accelerations_isa with the best
 * variant for this CPU. */
static int lb_gravity_accelerations(const double *position, const double *mass, ptrdiff_t n,
                                    ptrdiff_t n_active, double G, double eps2, double *acc,
                                    double *soa, int threads, ptrdiff_t *bad)
{
    static int best = -1; /* every thread that finds it unset stores the same value */
#if defined(__GNUC__) || defined(__clang__)
    int isa = __atomic_load_n(&best, __ATOMIC_RELAXED);
    if (isa < 0) {
        isa = lb_gravity_isa_best();
        __atomic_store_n(&best, isa, __ATOMIC_RELAXED);
    }
#else
    int isa = best;
    if (isa < 0) {
        isa = lb_gravity_isa_best();
        best = isa;
    }
#endif
    return lb_gravity_accelerations_isa(isa, position, mass, n, n_active, G, eps2, acc, soa,
                                        threads, bad);
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
