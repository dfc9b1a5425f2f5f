/* Hot loops of seqdist.kernels._triangles (see triangles.py for the method): the tile of the
 * violated-triangle count, for float64 and float32 matrices. */
#ifndef SEQDIST_TRIANGLES_H
#define SEQDIST_TRIANGLES_H
#include <stdint.h>
#include <string.h>
#include "simd_wide.h"

/* Triangles (a, b, c) of one pair (a, b) over m_ values c: xs = d(a, c), ys = d(b, c), z = d(a, b).
 * The count loop is branch-free so it vectorises; a NaN side gives a NaN excess, which is never
 * counted. Only a pair with a violation is scanned again, for the largest excess: an integer max
 * over the bit patterns of non-negative doubles (same order as the values), because an integer
 * max reduction vectorises and a float one does not without relaxed floating-point rules. */
static inline __attribute__((always_inline)) void sd_tri_pair(const double *restrict xs, const double *restrict ys,
                                                              int64_t m_, double z, double tol, int64_t *tot,
                                                              double *worst) {
    int64_t k = 0;
    for (int64_t c = 0; c < m_; c++) {
        double x = xs[c], y = ys[c];
        double m = x > y ? x : y;
        m = m > z ? m : z;
        double e = 2.0 * m - (x + y + z);
        k += e > tol;
    }
    if (k > 0) {
        *tot += k;
        int64_t wb = 0;
        for (int64_t c = 0; c < m_; c++) {
            double x = xs[c], y = ys[c];
            double m = x > y ? x : y;
            m = m > z ? m : z;
            double e = 2.0 * m - (x + y + z);
            e = e > tol ? e : 0.0;
            int64_t q;
            memcpy(&q, &e, sizeof q);
            wb = q > wb ? q : wb;
        }
        double w;
        memcpy(&w, &wb, sizeof w);
        *worst = w > *worst ? w : *worst;
    }
}

/* Violated triangles (a, b, c), a in [a0, a1), a < b < c, of the (n, n) row-major float64 d, and
 * the largest excess among them. The columns c go in chunks of cw: within a chunk the tile's rows
 * (a1 - a0 by cw values) stay in the level-2 cache and the chunk of row b in level 1 while every
 * row a of the tile meets it; without the chunks, rows of tens of thousands of values leave the
 * cache between two uses. Counts are integers and the max is order-free, so the chunking never
 * changes the result. */
SEQDIST_SIMD_WIDE static void sd_tri_count_tile(const double *restrict d, int64_t n, double tol, int64_t a0,
                                                int64_t a1, int64_t cw, int64_t *count_out, double *worst_out) {
    int64_t tot = 0;
    double worst = 0.0;
    if (cw < 1) cw = n;
    for (int64_t c0 = a0 + 2; c0 < n; c0 += cw) {
        int64_t c1 = c0 + cw < n ? c0 + cw : n;
        for (int64_t b = a0 + 1; b < c1 - 1; b++) {
            int64_t cs = b + 1 > c0 ? b + 1 : c0;
            int64_t hi = a1 < b ? a1 : b;
            for (int64_t a = a0; a < hi; a++) {
                double z = d[a * n + b];
                if (z != z) continue;
                sd_tri_pair(d + a * n + cs, d + b * n + cs, c1 - cs, z, tol, &tot, &worst);
            }
        }
    }
    *count_out = tot;
    *worst_out = worst;
}

/* The same for a float32 d. Every excess is computed in double from the stored values, so the
 * count is exact for them (three float32 values sum without rounding in double unless their
 * exponents differ by more than 29). The chunk of the tile's rows is widened to double once per
 * chunk, and the chunk of row b once per b: the inner loop is then the float64 one, on half the
 * memory traffic. X is the calling thread's scratch of (a1 - a0 + 1) * cw doubles (cw >= 1; one
 * buffer per thread, made once: allocating it per tile made the threads queue on page faults). */
SEQDIST_SIMD_WIDE static void sd_tri_count_tile_f32(const float *restrict d, int64_t n, double tol, int64_t a0,
                                                    int64_t a1, int64_t cw, double *restrict X, int64_t *count_out,
                                                    double *worst_out) {
    int64_t tot = 0;
    double worst = 0.0;
    int64_t rows = a1 - a0;
    double *Y = X + rows * cw;
    for (int64_t c0 = a0 + 2; c0 < n; c0 += cw) {
        int64_t c1 = c0 + cw < n ? c0 + cw : n;
        for (int64_t a = a0; a < a1; a++)
            for (int64_t c = c0; c < c1; c++) X[(a - a0) * cw + (c - c0)] = (double)d[a * n + c];
        for (int64_t b = a0 + 1; b < c1 - 1; b++) {
            int64_t cs = b + 1 > c0 ? b + 1 : c0;
            int64_t hi = a1 < b ? a1 : b;
            for (int64_t c = cs; c < c1; c++) Y[c - cs] = (double)d[b * n + c];
            for (int64_t a = a0; a < hi; a++) {
                double z = (double)d[a * n + b];
                if (z != z) continue;
                sd_tri_pair(X + (a - a0) * cw + (cs - c0), Y, c1 - cs, z, tol, &tot, &worst);
            }
        }
    }
    *count_out = tot;
    *worst_out = worst;
}

#endif
