/* Hot loops of seqdist.kernels._triangles (see triangles.py for the method). */
#ifndef SEQDIST_TRIANGLES_H
#define SEQDIST_TRIANGLES_H
#include <stdint.h>
#include <string.h>
#include "simd_wide.h"

/* Violated triangles (a, b, c), a in [a0, a1), a < b < c, of the (n, n) row-major d, and the
 * largest excess among them. The loop over c is branch-free so it vectorises; a NaN side gives
 * a NaN excess, which is never counted. Only rows with a violation are scanned again for the max. */
SEQDIST_SIMD_WIDE static void sd_tri_count_tile(const double *restrict d, int64_t n, double tol, int64_t a0, int64_t a1,
                                           int64_t *count_out, double *worst_out) {
    int64_t tot = 0;
    double worst = 0.0;
    for (int64_t b = a0 + 1; b < n; b++) {
        const double *ys = d + b * n + b + 1;
        int64_t m_ = n - b - 1;
        int64_t hi = a1 < b ? a1 : b;
        for (int64_t a = a0; a < hi; a++) {
            double z = d[a * n + b];
            if (z != z) continue;
            const double *xs = d + a * n + b + 1;
            int64_t k = 0;
            for (int64_t c = 0; c < m_; c++) {
                double x = xs[c], y = ys[c];
                double m = x > y ? x : y;
                m = m > z ? m : z;
                double e = 2.0 * m - (x + y + z);
                k += e > tol;
            }
            if (k > 0) {
                tot += k;
                /* The largest excess as an integer max over the bit patterns of non-negative
                 * doubles (same order as the values): an integer max reduction vectorises, a
                 * float one does not without relaxed floating-point rules. */
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
                worst = w > worst ? w : worst;
            }
        }
    }
    *count_out = tot;
    *worst_out = worst;
}
#endif
