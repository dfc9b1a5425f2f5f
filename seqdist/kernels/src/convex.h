/* Hot loops of seqdist.kernels._convex (see convex.py for the conventions).
 *
 * Each function below gives bit for bit what the plain loop it replaces gives: the float
 * arithmetic is done in the same order, and the vectorised parts only count, take exact minima,
 * or update entries independently of one another, none of which depends on the order. */
#ifndef SEQDIST_CONVEX_H
#define SEQDIST_CONVEX_H
#include <math.h>
#include <stdint.h>
#include <string.h>
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

/* The keys counted by sd_cvx_count_row, written in sorted order from out[0]; returns how many.
 * Branch-free: for each (i, j) the keys go to buf (room for 3 (n - j) + 3) with a write for every
 * candidate and a cursor that advances only past violated ones (about half of all triangles can be
 * violated, so branches would be mispredicted), then are copied to out. */
SEQDIST_SIMD static int64_t sd_cvx_fill_row(const double *restrict x, const unsigned char *restrict gm, int64_t n,
                                            int full, double thr, int64_t i, int64_t *restrict out,
                                            int64_t *restrict buf) {
    const double *xi = x + i * n;
    const unsigned char *gi = gm + i * n;
    int64_t p = 0;
    for (int64_t j = i + 1; j < n; j++) {
        if (!full && !gi[j]) continue;
        const double xij = xi[j];
        const double *xj = x + j * n;
        const unsigned char *gj = gm + j * n;
        const int64_t base_ij = (i << 42) | (j << 22);
        int64_t q = 0;
        for (int64_t k = j + 1; k < n; k++) {
            double xik = xi[k], xjk = xj[k];
            double e0 = xij - xik - xjk;
            double e1 = xik - xij - xjk;
            double e2 = xjk - xij - xik;
            int64_t g = full ? 1 : (int64_t)(gi[k] & gj[k]);
            int64_t base = base_ij | (k << 2);
            buf[q] = base;
            q += (int64_t)(e0 > thr) & g;
            buf[q] = base | 1;
            q += (int64_t)(e1 > thr) & g;
            buf[q] = base | 2;
            q += (int64_t)(e2 > thr) & g;
        }
        memcpy(out + p, buf, (size_t)q * sizeof(int64_t));
        p += q;
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
#if defined(__GNUC__) /* vector extensions: GCC and clang */
typedef double sd_cvx_v4d __attribute__((vector_size(32)));
typedef int64_t sd_cvx_v4i __attribute__((vector_size(32)));

/* Index of the first smallest of d[0..n) below +inf (-1 if none); NaN entries are never chosen.
 * Eight lanes keep their own first minimum (strict <) and index; the lanes are then combined by
 * value and, on a tie, by the smaller index: the same answer as one pass from the left. */
SEQDIST_SIMD static int64_t sd_cvx_first_min(const double *restrict d, int64_t n, double *best_out) {
    const sd_cvx_v4d inf4 = {INFINITY, INFINITY, INFINITY, INFINITY};
    sd_cvx_v4d b0 = inf4, b1 = inf4;
    sd_cvx_v4i i0 = {-1, -1, -1, -1}, i1 = i0;
    sd_cvx_v4i k0 = {0, 1, 2, 3}, k1 = {4, 5, 6, 7};
    const sd_cvx_v4i step = {8, 8, 8, 8};
    int64_t v = 0;
    for (; v + 8 <= n; v += 8) {
        sd_cvx_v4d x0, x1;
        memcpy(&x0, d + v, sizeof x0);
        memcpy(&x1, d + v + 4, sizeof x1);
        sd_cvx_v4i m0 = x0 < b0, m1 = x1 < b1;
        b0 = (sd_cvx_v4d)(((sd_cvx_v4i)x0 & m0) | ((sd_cvx_v4i)b0 & ~m0));
        b1 = (sd_cvx_v4d)(((sd_cvx_v4i)x1 & m1) | ((sd_cvx_v4i)b1 & ~m1));
        i0 = (k0 & m0) | (i0 & ~m0);
        i1 = (k1 & m1) | (i1 & ~m1);
        k0 += step;
        k1 += step;
    }
    double best = INFINITY;
    int64_t u = -1;
    for (int l = 0; l < 4; l++) {
        if (b0[l] < best || (b0[l] == best && i0[l] >= 0 && i0[l] < u)) { best = b0[l]; u = i0[l]; }
        if (b1[l] < best || (b1[l] == best && i1[l] >= 0 && i1[l] < u)) { best = b1[l]; u = i1[l]; }
    }
    for (; v < n; v++) {
        if (d[v] < best) { best = d[v]; u = v; }
    }
    *best_out = best;
    return u;
}
#else
/* Index of the first smallest of d[0..n) below +inf (-1 if none); NaN entries are never chosen. */
static int64_t sd_cvx_first_min(const double *restrict d, int64_t n, double *best_out) {
    double best = INFINITY;
    int64_t u = -1;
    for (int64_t v = 0; v < n; v++) {
        if (d[v] < best) { best = d[v]; u = v; }
    }
    *best_out = best;
    return u;
}
#endif

/* Dense O(n^2) Dijkstra from s over the (n, n) row-major W (inf: no edge; zeros are edges): the
 * same predecessors as seqdist.kernels.kept_graph's (each round settles the unsettled node of
 * smallest distance, the lowest index among ties; a node's distance drops only when strictly
 * shorter). A settled node's distance is set to NaN, which no comparison selects, so both loops
 * run over whole rows without branches (the relaxation vectorises; the search uses lanes).
 * dist and pred hold n items; only pred is the answer. */
SEQDIST_SIMD static void sd_cvx_dijkstra(const double *restrict W, int64_t n, int64_t s, int64_t *restrict pred,
                                         double *restrict dist) {
    for (int64_t v = 0; v < n; v++) {
        dist[v] = INFINITY;
        pred[v] = -1;
    }
    dist[s] = 0.0;
    for (int64_t it = 0; it < n; it++) {
        double best;
        int64_t u = sd_cvx_first_min(dist, n, &best);
        if (u < 0) break;
        dist[u] = NAN;
        const double *row = W + u * n;
        for (int64_t v = 0; v < n; v++) {
            double nd = best + row[v];
            double dv = dist[v];
            int upd = nd < dv;
            dist[v] = upd ? nd : dv;
            pred[v] = upd ? u : pred[v];
        }
    }
}
/* Running bounds of entry (i, j) of the row-major (n, n) Y over k in [k0, k1): hi = min of
 * Y[i, k] + Y[j, k], lo = max of |Y[i, k] - Y[j, k]|, in increasing k (a NaN never wins). */
static inline void sd_cvx_bounds(const double *restrict yi, const double *restrict yj, int64_t k0, int64_t k1,
                                 double *lo, double *hi) {
    double l = *lo, h = *hi;
    for (int64_t k = k0; k < k1; k++) {
        double a = yi[k], b = yj[k];
        double s = a + b;
        double d = fabs(a - b);
        h = s < h ? s : h;
        l = d > l ? d : l;
    }
    *lo = l;
    *hi = h;
}

/* The same bounds with four independent running minima and maxima (a shorter dependency chain),
 * combined at the end. A minimum or maximum does not depend on the order, bit for bit, except
 * for the sign of a zero minimum (+0 and -0 compare equal): when hi is zero, the plain loop
 * decides it. lo is a maximum of fabs values, never -0. */
static inline void sd_cvx_bounds4(const double *restrict yi, const double *restrict yj, int64_t k0, int64_t k1,
                                  double *lo, double *hi) {
    double l0 = *lo, l1 = *lo, l2 = *lo, l3 = *lo, h0 = *hi, h1 = *hi, h2 = *hi, h3 = *hi;
    int64_t k = k0;
    for (; k + 4 <= k1; k += 4) {
        double s0 = yi[k] + yj[k], s1 = yi[k + 1] + yj[k + 1], s2 = yi[k + 2] + yj[k + 2], s3 = yi[k + 3] + yj[k + 3];
        double d0 = fabs(yi[k] - yj[k]), d1 = fabs(yi[k + 1] - yj[k + 1]);
        double d2 = fabs(yi[k + 2] - yj[k + 2]), d3 = fabs(yi[k + 3] - yj[k + 3]);
        h0 = s0 < h0 ? s0 : h0;
        h1 = s1 < h1 ? s1 : h1;
        h2 = s2 < h2 ? s2 : h2;
        h3 = s3 < h3 ? s3 : h3;
        l0 = d0 > l0 ? d0 : l0;
        l1 = d1 > l1 ? d1 : l1;
        l2 = d2 > l2 ? d2 : l2;
        l3 = d3 > l3 ? d3 : l3;
    }
    double h = h0, l = l0;
    h = h1 < h ? h1 : h;
    h = h2 < h ? h2 : h;
    h = h3 < h ? h3 : h;
    l = l1 > l ? l1 : l;
    l = l2 > l ? l2 : l;
    l = l3 > l ? l3 : l;
    sd_cvx_bounds(yi, yj, k, k1, &l, &h);
    if (h == 0.0) {
        double l_plain = *lo;
        h = *hi;
        sd_cvx_bounds(yi, yj, k0, k1, &l_plain, &h);
    }
    *lo = l;
    *hi = h;
}

/* Move entry (i, j) of the row-major (n, n) metric Y (both halves) to the point of
 * [max_k |Y_ik - Y_jk|, min_k Y_ik + Y_kj] (k other than i and j) nearest target. The loop over k
 * is split around i and j instead of testing k against them. */
static void sd_cvx_clamp_one(double *restrict Y, int64_t n, int64_t i, int64_t j, double target) {
    const double *yi = Y + i * n, *yj = Y + j * n;
    int64_t a = i < j ? i : j, b = i < j ? j : i;
    double lo = 0.0, hi = INFINITY;
    sd_cvx_bounds4(yi, yj, 0, a, &lo, &hi);
    sd_cvx_bounds4(yi, yj, a + 1, b, &lo, &hi);
    sd_cvx_bounds4(yi, yj, b + 1, n, &lo, &hi);
    double v = target;
    if (v < lo) v = lo;
    if (v > hi) v = hi;
    Y[i * n + j] = v;
    Y[j * n + i] = v;
}
/* The primal step of the primal-dual hybrid gradient method (seqdist.kernels.convex.pdhg_tri) over
 * ne entries: x+ = prox(x - tau c), clipped to [0, M]; xbar = 2 x+ - x. With quad the
 * entry's cost is w (x - d)^2 (tw = 2 tau w: x+ = (v + tw d) / (1 + tw)), else w |x - d| (tw = tau w:
 * soft thresholding around d). An entry with tau = 0 (locked) stays where it is. Entries are
 * independent, so the loop vectorises without changing any result. */
SEQDIST_SIMD static void sd_cvx_pdhg_primal(int64_t ne, double *restrict x, double *restrict xbar,
                                            const double *restrict c,
                                            const double *restrict d, const double *restrict tau,
                                            const double *restrict tw, double M, int quad) {
    if (quad) {
        for (int64_t e = 0; e < ne; e++) {
            double xo = x[e];
            double v = xo - tau[e] * c[e];
            double xn = (v + tw[e] * d[e]) / (1.0 + tw[e]);
            xn = xn > 0.0 ? xn : 0.0;
            xn = xn < M ? xn : M;
            xbar[e] = 2.0 * xn - xo;
            x[e] = xn;
        }
    } else {
        for (int64_t e = 0; e < ne; e++) {
            double xo = x[e];
            double z = xo - tau[e] * c[e] - d[e];
            double up = z - tw[e], dn = z + tw[e];
            up = up > 0.0 ? up : 0.0;
            dn = dn < 0.0 ? dn : 0.0;
            double xn = d[e] + up + dn;  /* one of up, dn is 0: d exactly inside the threshold */
            xn = xn > 0.0 ? xn : 0.0;
            xn = xn < M ? xn : M;
            xbar[e] = 2.0 * xn - xo;
            x[e] = xn;
        }
    }
}

/* The dual step of the primal-dual hybrid gradient method over m triangle rows (long side, short,
 * short: entry slots): y+ = max(0, y + sigma (xbar_long - xbar_a - xbar_b)); c = A^T y follows by
 * the change. Without branches (signs change often: a branch would be mispredicted); a
 * row whose dual does not move adds 0 to c, which changes no value. Rows in order: c is exact to
 * the same rounding on every machine. */
static void sd_cvx_pdhg_dual(int64_t m, const int32_t *restrict rows, double *restrict y,
                             const double *restrict xbar, double *restrict c, double sigma) {
    for (int64_t t = 0; t < m; t++) {
        const int32_t e0 = rows[3 * t], e1 = rows[3 * t + 1], e2 = rows[3 * t + 2];
        const double yo = y[t];
        double yn = yo + sigma * (xbar[e0] - xbar[e1] - xbar[e2]);
        yn = yn > 0.0 ? yn : 0.0;
        const double dy = yn - yo;
        y[t] = yn;
        c[e0] += dy;
        c[e1] -= dy;
        c[e2] -= dy;
    }
}

/* Halpern's anchored, reflected form of the two steps above (Lu and Yang 2024): with z_T the plain
 * step from z, z+ = a ((1 + rho) z_T - rho z) + (1 - a) z0, z0 the anchor (the last restart point).
 * xbar is still 2 x_T - x (the plain step's extrapolation); y+ may be negative (only y_T is
 * projected): the solver reads duals through max(y, 0). */
SEQDIST_SIMD static void sd_cvx_pdhg_primal_h(int64_t ne, double *restrict x, double *restrict xbar,
                                              const double *restrict x0, const double *restrict c,
                                              const double *restrict d, const double *restrict tau,
                                              const double *restrict tw, double M, int quad, double a,
                                              double rho) {
    for (int64_t e = 0; e < ne; e++) {
        double xo = x[e], xn;
        double v = xo - tau[e] * c[e];
        if (quad) {
            xn = (v + tw[e] * d[e]) / (1.0 + tw[e]);
        } else {
            double z = v - d[e];
            double up = z - tw[e], dn = z + tw[e];
            up = up > 0.0 ? up : 0.0;
            dn = dn < 0.0 ? dn : 0.0;
            xn = d[e] + up + dn;
        }
        xn = xn > 0.0 ? xn : 0.0;
        xn = xn < M ? xn : M;
        xbar[e] = 2.0 * xn - xo;
        x[e] = a * ((1.0 + rho) * xn - rho * xo) + (1.0 - a) * x0[e];
    }
}

static void sd_cvx_pdhg_dual_h(int64_t m, const int32_t *restrict rows, double *restrict y,
                               const double *restrict y0, const double *restrict xbar, double *restrict c,
                               double sigma, double a, double rho) {
    for (int64_t t = 0; t < m; t++) {
        const int32_t e0 = rows[3 * t], e1 = rows[3 * t + 1], e2 = rows[3 * t + 2];
        const double yo = y[t];
        double yt = yo + sigma * (xbar[e0] - xbar[e1] - xbar[e2]);
        yt = yt > 0.0 ? yt : 0.0;
        const double yn = a * ((1.0 + rho) * yt - rho * yo) + (1.0 - a) * y0[t];
        const double dy = yn - yo;
        y[t] = yn;
        c[e0] += dy;
        c[e1] -= dy;
        c[e2] -= dy;
    }
}

#endif
