/* Hot loops of seqdist.kernels._convex (see convex.py for the conventions).
 *
 * Each function below does the same float operations, in the same order, as the plain loop it
 * replaces; the vectorised loops only count, which does not depend on the order. */
#ifndef SEQDIST_CONVEX_H
#define SEQDIST_CONVEX_H
#include <stdint.h>
#include "simd.h"

/* Triangles (i, j, k), j < k, of row i of the (n, n) row-major x violated by more than thr: how
 * many (long side, triangle) pairs. With full == 0 only triangles whose three sides are marked in
 * the 0/1 matrix gm count. Branch-free over k so the loop vectorises. */
SEQDIST_SIMD static int64_t sd_cvx_count_row(const double *restrict x, const unsigned char *restrict gm, int64_t n,
                                             int full, double thr, int64_t i) {
    const double *xi = x + i * n;
    const unsigned char *gi = gm + i * n;
    int64_t c = 0;
    for (int64_t j = i + 1; j < n; j++) {
        if (!full && !gi[j]) continue;
        const double xij = xi[j];
        const double *xj = x + j * n;
        if (full) {
            for (int64_t k = j + 1; k < n; k++) {
                double xik = xi[k], xjk = xj[k];
                double e0 = xij - xik - xjk;
                double e1 = xik - xij - xjk;
                double e2 = xjk - xij - xik;
                c += (int64_t)(e0 > thr) + (int64_t)(e1 > thr) + (int64_t)(e2 > thr);
            }
        } else {
            const unsigned char *gj = gm + j * n;
            for (int64_t k = j + 1; k < n; k++) {
                double xik = xi[k], xjk = xj[k];
                double e0 = xij - xik - xjk;
                double e1 = xik - xij - xjk;
                double e2 = xjk - xij - xik;
                int64_t v = (int64_t)(e0 > thr) + (int64_t)(e1 > thr) + (int64_t)(e2 > thr);
                c += v & -(int64_t)(gi[k] & gj[k]); /* masked without a branch, so it vectorises */
            }
        }
    }
    return c;
}

/* The keys counted by sd_cvx_count_row, written in sorted order from out[0]; returns how many. */
static int64_t sd_cvx_fill_row(const double *restrict x, const unsigned char *restrict gm, int64_t n, int full,
                               double thr, int64_t i, int64_t *restrict out) {
    const double *xi = x + i * n;
    const unsigned char *gi = gm + i * n;
    int64_t p = 0;
    for (int64_t j = i + 1; j < n; j++) {
        if (!full && !gi[j]) continue;
        const double xij = xi[j];
        const double *xj = x + j * n;
        const unsigned char *gj = gm + j * n;
        for (int64_t k = j + 1; k < n; k++) {
            if (!full && (!gi[k] || !gj[k])) continue;
            double xik = xi[k], xjk = xj[k];
            double e0 = xij - xik - xjk;
            double e1 = xik - xij - xjk;
            double e2 = xjk - xij - xik;
            if (e0 > thr || e1 > thr || e2 > thr) {
                int64_t base = (i << 42) | (j << 22) | (k << 2);
                if (e0 > thr) out[p++] = base;
                if (e1 > thr) out[p++] = base | 1;
                if (e2 > thr) out[p++] = base | 2;
            }
        }
    }
    return p;
}

/* Largest step t in [0, 1] over the triangles (i, j, k), j < k, of row i at which (1 - t) Y + t Z
 * restores the triangle (Y, Z row-major (n, n); upper triangles read), starting from best. A
 * side with vy > 0 needs t = 1 when vz >= 0, else vy / (vy - vz). Branches, not SIMD: a side
 * with vy > 0 is rare (Y is nearly a metric), so the division is rarely done. */
static double sd_cvx_blend_row(const double *restrict Y, const double *restrict Z, int64_t n, int64_t i,
                               double best) {
    const double *yi = Y + i * n, *zi = Z + i * n;
    for (int64_t j = i + 1; j < n; j++) {
        const double yij = yi[j], zij = zi[j];
        const double *yj = Y + j * n, *zj = Z + j * n;
        for (int64_t k = j + 1; k < n; k++) {
            double yik = yi[k], yjk = yj[k], zik = zi[k], zjk = zj[k];
            double vy, vz, t;
            vy = yij - yik - yjk;
            if (vy > 0.0) {
                vz = zij - zik - zjk;
                t = vz >= 0.0 ? 1.0 : vy / (vy - vz);
                if (t > best) best = t;
            }
            vy = yik - yij - yjk;
            if (vy > 0.0) {
                vz = zik - zij - zjk;
                t = vz >= 0.0 ? 1.0 : vy / (vy - vz);
                if (t > best) best = t;
            }
            vy = yjk - yij - yik;
            if (vy > 0.0) {
                vz = zjk - zij - zik;
                t = vz >= 0.0 ? 1.0 : vy / (vy - vz);
                if (t > best) best = t;
            }
        }
    }
    return best;
}
#endif
