/* Hot loops of seqdist.kernels._shortest_paths (see shortest_paths.py for the method).
 *
 * d is the (n, n) row-major matrix; P is the (b, n) row panel of the pivot block (row stride n)
 * and PT its transpose, (n, b) (row stride b). Every result is the same sequence of float
 * operations as the textbook update "v = a + p; if (v < r) r = v" in the same order of pivots
 * for each entry, so results do not depend on vector width, tiling or threads. */
#ifndef SEQDIST_SHORTEST_PATHS_H
#define SEQDIST_SHORTEST_PATHS_H
#include <math.h>
#include <stdint.h>
#include <string.h>
#include "simd.h"

/* r[j] = min(r[j], a + p[j]) written as a select, so the compiler emits a vector min
 * (x86 minpd is exactly "v < r ? v : r", NaN and signed zeros included). */
static inline __attribute__((always_inline)) void sd_sp_row1(double *restrict r, const double *restrict p, double a,
                                                             int64_t w) {
    for (int64_t j = 0; j < w; j++) {
        double v = a + p[j];
        r[j] = v < r[j] ? v : r[j];
    }
}

/* The same for four rows at once: each p[j] is loaded once for the four rows. */
static inline __attribute__((always_inline)) void sd_sp_row4(double *restrict r0, double *restrict r1,
                                                             double *restrict r2, double *restrict r3,
                                                             const double *restrict p, double a0, double a1,
                                                             double a2, double a3, int64_t w) {
    for (int64_t j = 0; j < w; j++) {
        double q = p[j], v;
        v = a0 + q;
        r0[j] = v < r0[j] ? v : r0[j];
        v = a1 + q;
        r1[j] = v < r1[j] ? v : r1[j];
        v = a2 + q;
        r2[j] = v < r2[j] ? v : r2[j];
        v = a3 + q;
        r3[j] = v < r3[j] ? v : r3[j];
    }
}

/* Floyd-Warshall on the kb x n row panel P with the pivots k0 .. k0+kb-1 (column k0+kk of the
 * panel is pivot kk's column; row kk is its row). Rows without a path to the pivot are skipped. */
SEQDIST_SIMD static void sd_sp_panel(double *P, int64_t n, int64_t k0, int64_t kb) {
    for (int64_t kk = 0; kk < kb; kk++) {
        double *rowk = P + kk * n;
        for (int64_t r = 0; r < kb; r++) {
            double a = P[r * n + k0 + kk];
            if (a == INFINITY) continue;
            double *rowr = P + r * n;
            if (r == kk) {
                /* the pivot row against itself (no change for a zero diagonal): element-wise,
                 * kept for fidelity to the textbook loop */
                for (int64_t j = 0; j < n; j++) {
                    double v = a + rowr[j];
                    if (v < rowr[j]) rowr[j] = v;
                }
            } else {
                sd_sp_row1(rowr, rowk, a, n);
            }
        }
    }
}

/* Round of pivot block K = [k0, k0+kb): gather its row panel from the upper-triangle storage
 * (columns left of k0 from the column k0+r above the diagonal, by symmetry), close it over the
 * pivots of K, scatter it back, and keep it transposed in PT. */
static void sd_sp_gather(double *d, double *P, double *PT, int64_t n, int64_t b, int64_t k0, int64_t kb) {
    for (int64_t j = 0; j < k0; j++) {
        const double *src = d + j * n + k0;
        for (int64_t r = 0; r < kb; r++) P[r * n + j] = src[r];
    }
    for (int64_t r = 0; r < kb; r++) memcpy(P + r * n + k0, d + (k0 + r) * n + k0, (size_t)(n - k0) * sizeof(double));
    sd_sp_panel(P, n, k0, kb);
    for (int64_t j = 0; j < k0; j++) {
        double *dst = d + j * n + k0;
        for (int64_t r = 0; r < kb; r++) dst[r] = P[r * n + j];
    }
    for (int64_t r = 0; r < kb; r++) memcpy(d + (k0 + r) * n + k0, P + r * n + k0, (size_t)(n - k0) * sizeof(double));
    for (int64_t j = 0; j < n; j++)
        for (int64_t r = 0; r < kb; r++) PT[j * b + r] = P[r * n + j];
}

/* Min-plus update of rows i0 .. i1-1, columns from c0 on (portable form):
 * d[i, j] = min(d[i, j], PT[i, kk] + P[kk, j]) for kk = 0 .. kb-1 in that order. Columns go in
 * tiles of `tile`; rows four at a time share the loads of P. A row (or four rows) with no path to
 * pivot kk is skipped for that pivot (adding inf could not lower an entry). */
SEQDIST_SIMD static void sd_sp_update_rows_simd(double *restrict d, const double *restrict P,
                                                const double *restrict PT, int64_t n, int64_t b, int64_t i0,
                                                int64_t i1, int64_t c0, int64_t kb, int64_t tile) {
    for (int64_t j0 = c0; j0 < n; j0 += tile) {
        int64_t w = n - j0 < tile ? n - j0 : tile;
        int64_t i = i0;
        for (; i + 4 <= i1; i += 4) {
            double *r0 = d + i * n + j0, *r1 = r0 + n, *r2 = r1 + n, *r3 = r2 + n;
            const double *a = PT + i * b;
            for (int64_t kk = 0; kk < kb; kk++) {
                double a0 = a[kk], a1 = a[b + kk], a2 = a[2 * b + kk], a3 = a[3 * b + kk];
                if (a0 == INFINITY && a1 == INFINITY && a2 == INFINITY && a3 == INFINITY) continue;
                sd_sp_row4(r0, r1, r2, r3, P + kk * n + j0, a0, a1, a2, a3, w);
            }
        }
        for (; i < i1; i++) {
            double *r0 = d + i * n + j0;
            const double *a = PT + i * b;
            for (int64_t kk = 0; kk < kb; kk++) {
                if (a[kk] == INFINITY) continue;
                sd_sp_row1(r0, P + kk * n + j0, a[kk], w);
            }
        }
    }
}

#if defined(__x86_64__) && defined(__GNUC__)
#include <immintrin.h>
#define SD_SP_AVX512 1
#define SD_SP_MR 8
/* The same update (columns from i0) on CPUs with AVX-512, chosen at run time: a block of 8 rows
 * by 16 columns of d stays in registers over all kk (AVX-512's 32 registers hold it; the
 * compiler does not block registers like this by itself), with masked loads and stores for the
 * last columns. _mm512_min_pd(v, c) is exactly "v < c ? v : c", and the candidate sums are
 * compared in the order of kk, so the bits equal the portable form's. Measured here (n = 2000):
 * the update 2.8x faster than the portable form's AVX2 build. A group of rows with no path to
 * any pivot of the round is skipped. */
__attribute__((target("avx512f"))) static void sd_sp_update_rows_avx512(double *restrict d, const double *restrict P,
                                                                       const double *restrict PT, int64_t n,
                                                                       int64_t b, int64_t i0, int64_t i1, int64_t kb) {
    int64_t i = i0;
    for (; i + SD_SP_MR <= i1; i += SD_SP_MR) {
        const double *a = PT + i * b;
        int live = 0;
        for (int q = 0; q < SD_SP_MR && !live; q++)
            for (int64_t kk = 0; kk < kb; kk++)
                if (a[q * b + kk] != INFINITY) {
                    live = 1;
                    break;
                }
        if (!live) continue;
        for (int64_t j = i0; j < n; j += 16) {
            int64_t left = n - j;
            __mmask8 m0 = left >= 8 ? 0xFF : (__mmask8)((1u << left) - 1);
            __mmask8 m1 = left >= 16 ? 0xFF : left <= 8 ? 0 : (__mmask8)((1u << (left - 8)) - 1);
            double *r = d + i * n + j;
            const double *p = P + j;
            __m512d c[SD_SP_MR][2];
            for (int q = 0; q < SD_SP_MR; q++) {
                c[q][0] = _mm512_maskz_loadu_pd(m0, r + q * n);
                c[q][1] = _mm512_maskz_loadu_pd(m1, r + q * n + 8);
            }
            for (int64_t kk = 0; kk < kb; kk++, p += n) {
                __m512d p0 = _mm512_maskz_loadu_pd(m0, p), p1 = _mm512_maskz_loadu_pd(m1, p + 8);
                for (int q = 0; q < SD_SP_MR; q++) {
                    __m512d x = _mm512_set1_pd(a[q * b + kk]);
                    c[q][0] = _mm512_min_pd(_mm512_add_pd(x, p0), c[q][0]);
                    c[q][1] = _mm512_min_pd(_mm512_add_pd(x, p1), c[q][1]);
                }
            }
            for (int q = 0; q < SD_SP_MR; q++) {
                _mm512_mask_storeu_pd(r + q * n, m0, c[q][0]);
                _mm512_mask_storeu_pd(r + q * n + 8, m1, c[q][1]);
            }
        }
    }
    if (i < i1) sd_sp_update_rows_simd(d, P, PT, n, b, i, i1, i0, kb, 512); /* the last rows, same columns */
}
#endif

/* 1 when the AVX-512 form can run here. */
static int sd_sp_has_avx512(void) {
#ifdef SD_SP_AVX512
    return __builtin_cpu_supports("avx512f") ? 1 : 0;
#else
    return 0;
#endif
}

/* The update, in the fastest form this CPU runs (wide = 0: the portable form only, for tests);
 * every form gives the same bits. */
static void sd_sp_update_rows(double *restrict d, const double *restrict P, const double *restrict PT, int64_t n,
                              int64_t b, int64_t i0, int64_t i1, int64_t kb, int64_t tile, int wide) {
#ifdef SD_SP_AVX512
    if (wide && sd_sp_has_avx512()) {
        sd_sp_update_rows_avx512(d, P, PT, n, b, i0, i1, kb);
        return;
    }
#endif
    sd_sp_update_rows_simd(d, P, PT, n, b, i0, i1, i0, kb, tile);
}

/* Copy the upper triangle onto the lower one, in square tiles so both sides stay in cache. */
static void sd_sp_mirror(double *d, int64_t n) {
    const int64_t t = 64;
    for (int64_t ib = 0; ib < n; ib += t) {
        int64_t ie = ib + t < n ? ib + t : n;
        for (int64_t jb = ib; jb < n; jb += t) {
            int64_t je = jb + t < n ? jb + t : n;
            for (int64_t i = ib; i < ie; i++)
                for (int64_t j = (jb > i + 1 ? jb : i + 1); j < je; j++) d[j * n + i] = d[i * n + j];
        }
    }
}

#endif
