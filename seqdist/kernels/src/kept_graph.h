/* Loops of seqdist.kernels._kept_graph (see kept_graph.py for what they compute).
 * Each keeps the float operations, and their order, of the plain loops it replaces. */
#ifndef SEQDIST_KEPT_GRAPH_H
#define SEQDIST_KEPT_GRAPH_H
#include <stdint.h>
#include "simd_wide.h"

/* Dense O(n^2) Dijkstra from s over the row-major (n, n) W (inf = no edge; zeros allowed; no
 * -inf). dist/pred are filled for every node (inf / -1 when unreachable). As the plain loop: the
 * next node u is the first not done of least distance (strict <, from +inf, so NaN and inf are
 * never chosen), and each node v not done takes best + W[u, v] when that is less than its
 * distance. done (n bytes) is scratch. This is the portable build; the relaxation is branch-free
 * (it stores the old value where nothing improves) so it vectorises. */
static void sd_dijkstra_plain(const double *restrict W, int64_t n, int64_t s, double *restrict dist,
                              int64_t *restrict pred, uint8_t *restrict done) {
    for (int64_t v = 0; v < n; v++) {
        dist[v] = 1.0 / 0.0;
        pred[v] = -1;
        done[v] = 0;
    }
    dist[s] = 0.0;
    for (int64_t it = 0; it < n; it++) {
        int64_t u = -1;
        double best = 1.0 / 0.0;
        for (int64_t v = 0; v < n; v++) {
            if (!done[v] && dist[v] < best) {
                best = dist[v];
                u = v;
            }
        }
        if (u < 0) break;
        done[u] = 1;
        const double *row = W + u * n;
        for (int64_t v = 0; v < n; v++) {
            double dv = dist[v];
            double nd = best + row[v];
            int64_t upd = (done[v] == 0) & (nd < dv);
            dist[v] = upd ? nd : dv;
            pred[v] = upd ? u : pred[v];
        }
    }
}

#if defined(__x86_64__) && defined(__GNUC__)
/* The same in one pass per node, with vectors (kept_graph_dijkstra.h), built for AVX-512 and for
 * AVX2 and chosen at run time (the baseline lowers such vectors badly, so it has the loop above). */
#define SD_DIJKSTRA_VECTORS 1
#define SD_DJ_NAME sd_dijkstra_avx512
#define SD_DJ_LANES 8
#define SD_DJ_TARGET "avx512f"
#include "kept_graph_dijkstra.h"
#define SD_DJ_NAME sd_dijkstra_avx2
#define SD_DJ_LANES 4
#define SD_DJ_TARGET "avx2"
#include "kept_graph_dijkstra.h"
#endif

/* Dijkstra from s (see above); scratch holds 9 n bytes. */
static void sd_dijkstra(const double *restrict W, int64_t n, int64_t s, double *restrict dist,
                        int64_t *restrict pred, void *scratch) {
#ifdef SD_DIJKSTRA_VECTORS
    if (__builtin_cpu_supports("avx512f")) {
        sd_dijkstra_avx512(W, n, s, dist, pred, (double *)scratch);
        return;
    }
    if (__builtin_cpu_supports("avx2")) {
        sd_dijkstra_avx2(W, n, s, dist, pred, (double *)scratch);
        return;
    }
#endif
    sd_dijkstra_plain(W, n, s, dist, pred, (uint8_t *)scratch);
}

/* With edge (i, j) of length w added to the graph whose shortest paths are A, does every
 * entry marked in check still satisfy D <= path + tol? The loop over b is branch-free (a flag
 * per row, so it vectorises); the answer is the same as stopping at the first failure. */
SEQDIST_SIMD_WIDE
static int sd_insert_ok(const double *restrict A, const double *restrict D, const uint8_t *restrict check, int64_t n,
                        int64_t i, int64_t j, double w, double tol) {
    const double *Ai = A + i * n;
    const double *Aj = A + j * n;
    for (int64_t a = 0; a < n; a++) {
        const double *ra = A + a * n;
        const double *Da = D + a * n;
        const uint8_t *ca = check + a * n;
        double x = ra[i] + w;
        double y = ra[j] + w;
        int bad = 0;
        for (int64_t b = 0; b < n; b++) {
            double p1 = x + Aj[b];
            double p2 = y + Ai[b];
            double p = p2 < p1 ? p2 : p1;
            bad |= (ca[b] != 0) & (Da[b] > p + tol);
        }
        if (bad) return 0;
    }
    return 1;
}

/* Shortest paths A (in place) after a new edge (i, j) of length w; ci/cj hold copies of
 * columns i and j of A taken before the update. */
SEQDIST_SIMD_WIDE
static void sd_insert_edge(double *restrict A, const double *restrict ci, const double *restrict cj, int64_t n,
                           double w) {
    for (int64_t a = 0; a < n; a++) {
        double x = ci[a] + w;
        double y = cj[a] + w;
        double *ra = A + a * n;
        for (int64_t b = 0; b < n; b++) {
            double p1 = x + cj[b];
            double p2 = y + ci[b];
            double p = p2 < p1 ? p2 : p1;
            ra[b] = p < ra[b] ? p : ra[b];
        }
    }
}

/* The interval [lo, hi] the other entries allow entry (i, j): hi = min_k X_ik + X_jk and
 * lo = max(lo, max_k |X_ik - X_jk|) over k != i, j, from the rows ri = X[i], rj = X[j], in the
 * order k = 0 .. n-1 (each step a compare and select, as the plain loop's branches: minsd, maxsd). */
static inline void sd_sweep_bounds(const double *restrict ri, const double *restrict rj, int64_t n, int64_t i,
                                   int64_t j, double *lo_io, double *hi_io) {
    double lo = *lo_io, hi = *hi_io;
    int64_t p = i < j ? i : j, q = i < j ? j : i;
    int64_t seg[3][2] = {{0, p}, {p + 1, q}, {q + 1, n}};
    for (int g = 0; g < 3; g++) {
        for (int64_t k = seg[g][0]; k < seg[g][1]; k++) {
            double a = ri[k], b = rj[k];
            double s = a + b;
            hi = s < hi ? s : hi;
            /* = (a > b ? a - b : b - a): b - a is -(a - b) exactly (a NaN stays a NaN, which
             * never wins), and fabs needs no branch */
            double d = __builtin_fabs(a - b);
            lo = d > lo ? d : lo;
        }
    }
    *lo_io = lo;
    *hi_io = hi;
}

/* Violated triangles (i, j, k) for k in j+1 .. n-1, given the row tails xi = D[i, j+1:],
 * yj = D[j, j+1:] and z = D[i, j]: some side longer than the sum of the other two plus tol.
 * Branch-free count (a NaN side makes every test false, as in the listing loop). */
SEQDIST_SIMD_WIDE
static int64_t sd_vt_count(const double *restrict xi, const double *restrict yj, int64_t m, double z, double tol) {
    int64_t c = 0;
    for (int64_t q = 0; q < m; q++) {
        double dik = xi[q], djk = yj[q];
        int f = (z > dik + djk + tol) | (dik > z + djk + tol) | (djk > z + dik + tol);
        c += f;
    }
    return c;
}
/* Row i of the listing: every violated (i, j, k), j < k, written as (i, j, k, heavy) from slot t
 * on, in (j, k) order; returns the next slot. heavy names the longest side as the plain loop's
 * chain of tests does: 0 = (i, j), 1 = (i, k), 2 = (j, k). Segments (i, j) without a violation
 * are skipped by the branch-free count; a NaN side fails every test, as the plain loop's skip. */
static int64_t sd_vt_fill_row(const double *restrict d, int64_t n, int64_t i, double tol, int64_t *restrict out,
                              int64_t t) {
    for (int64_t j = i + 1; j < n; j++) {
        double dij = d[i * n + j];
        if (dij != dij) continue;
        const double *xi = d + i * n, *yj = d + j * n;
        if (sd_vt_count(xi + j + 1, yj + j + 1, n - j - 1, dij, tol) == 0) continue;
        for (int64_t k = j + 1; k < n; k++) {
            double dik = xi[k], djk = yj[k];
            int c0 = dij > dik + djk + tol;
            int c1 = dik > dij + djk + tol;
            int c2 = djk > dij + dik + tol;
            if (c0 | c1 | c2) {
                int64_t *o = out + 4 * t;
                o[0] = i;
                o[1] = j;
                o[2] = k;
                o[3] = c0 ? 0 : (c1 ? 1 : 2);
                t++;
            }
        }
    }
    return t;
}
#endif
