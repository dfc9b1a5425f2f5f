/* Hot loops of seqdist.kernels._tree_building (see tree_building.py for the methods).
 *
 * Row minima, written with GCC/clang vector types (four doubles: two SSE2 registers on the
 * baseline build, one AVX2 register on the other): GCC does not turn a running minimum
 * into SIMD code on its own (a loop-carried dependence it will not reorder without
 * -ffast-math). A minimum is exact, so the order of the comparisons cannot change it,
 * apart from the sign of a zero, which no caller can see (they only compare it). Each
 * term is rounded as written (the build does not contract a*b+c), so a value here equals
 * the one a plain loop computes. Sums keep their left-to-right order. Other compilers
 * get the plain loops.
 *
 * Column reads and writes touch one cache line per row, the rows far apart: no hardware
 * prefetcher follows that stride, so the rows a few steps ahead are asked for early. */
#ifndef SEQDIST_TREE_BUILDING_H
#define SEQDIST_TREE_BUILDING_H
#include <math.h>
#include <stdint.h>
#include <string.h>
#include "simd.h"

#if defined(__GNUC__)
#define SD_TB_INLINE static inline __attribute__((always_inline))
#else
#define SD_TB_INLINE static inline
#endif

#if defined(__GNUC__)
typedef double sd_tb_v4d __attribute__((vector_size(32)));
typedef int64_t sd_tb_v4l __attribute__((vector_size(32)));
/* per lane a < b ? a : b (b when either is NaN) */
#define SD_TB_VMIN(a, b) ((sd_tb_v4d)((((sd_tb_v4l)(a)) & ((a) < (b))) | (((sd_tb_v4l)(b)) & ~((a) < (b)))))
#endif

/* a hint that *p will be read soon (nothing where the compiler has no such hint) */
static inline void sd_prefetch(const void *p) {
#if defined(__GNUC__)
    __builtin_prefetch(p, 0, 3);
#else
    (void)p;
#endif
}

/* min over b < a of c * row[b] - (ra + R[b]) (INFINITY when a = 0). */
SEQDIST_SIMD static double sd_nj_row_qmin(const double *restrict row, const double *restrict R, int64_t a,
                                          double c, double ra) {
    double m = INFINITY;
    int64_t b = 0;
#if defined(__GNUC__)
    sd_tb_v4d lo0 = {INFINITY, INFINITY, INFINITY, INFINITY}, lo1 = lo0;
    const sd_tb_v4d cv = {c, c, c, c}, rav = {ra, ra, ra, ra};
    for (; b + 8 <= a; b += 8) {
        sd_tb_v4d x0, x1, r0, r1, q0, q1;
        memcpy(&x0, row + b, sizeof x0);
        memcpy(&x1, row + b + 4, sizeof x1);
        memcpy(&r0, R + b, sizeof r0);
        memcpy(&r1, R + b + 4, sizeof r1);
        q0 = cv * x0 - (rav + r0);
        q1 = cv * x1 - (rav + r1);
        lo0 = SD_TB_VMIN(q0, lo0);
        lo1 = SD_TB_VMIN(q1, lo1);
    }
    for (int l = 0; l < 4; l++) {
        m = lo0[l] < m ? lo0[l] : m;
        m = lo1[l] < m ? lo1[l] : m;
    }
#endif
    for (; b < a; b++) {
        double q = c * row[b] - (ra + R[b]);
        m = q < m ? q : m;
    }
    return m;
}

/* min of x[b] + pen[b] over b in [0, len): pen is 0.0 for a live column, +inf for a dead one
 * (x[b] + 0.0 is x[b], a zero's sign aside), NaN sums ignored (INFINITY when there is none).
 * Inlined into the function below, so it is built for each of its targets. */
SD_TB_INLINE double sd_tb_min_pen(const double *restrict x, const double *restrict pen, int64_t len) {
    double m = INFINITY;
    int64_t b = 0;
#if defined(__GNUC__)
    sd_tb_v4d lo0 = {INFINITY, INFINITY, INFINITY, INFINITY}, lo1 = lo0;
    for (; b + 8 <= len; b += 8) {
        sd_tb_v4d x0, x1, p0, p1;
        memcpy(&x0, x + b, sizeof x0);
        memcpy(&x1, x + b + 4, sizeof x1);
        memcpy(&p0, pen + b, sizeof p0);
        memcpy(&p1, pen + b + 4, sizeof p1);
        x0 = x0 + p0;
        x1 = x1 + p1;
        lo0 = SD_TB_VMIN(x0, lo0);
        lo1 = SD_TB_VMIN(x1, lo1);
    }
    for (int l = 0; l < 4; l++) {
        m = lo0[l] < m ? lo0[l] : m;
        m = lo1[l] < m ? lo1[l] : m;
    }
#endif
    for (; b < len; b++) {
        double v = x[b] + pen[b];
        m = v < m ? v : m;
    }
    return m;
}

/* UPGMA's nearest live neighbour of slot a in its row (slots 0 .. p-1; pen as above): the
 * column b != a with the smallest (row[b], key[b]) in lexicographic order, which is what a
 * scan in any order that keeps the first smallest value and replaces it on an equal value
 * with a smaller key finds. Returns it (-1 when no value is below +inf) and its value in
 * *out. First the minimum (SIMD), then the columns equal to it, eight at a time. */
SEQDIST_SIMD static int64_t sd_upgma_nearest(const double *restrict row, const double *restrict pen, int64_t a,
                                             int64_t p, const int64_t *restrict key, double *out) {
    double v1 = sd_tb_min_pen(row, pen, a);
    double v2 = sd_tb_min_pen(row + a + 1, pen + a + 1, p - a - 1);
    double bv = v2 < v1 ? v2 : v1;
    int64_t bs = -1, b = 0;
    *out = bv;
    if (!(bv < INFINITY)) return -1;
#if defined(__GNUC__)
    const sd_tb_v4d bvv = {bv, bv, bv, bv};
    for (; b + 8 <= p; b += 8) {
        sd_tb_v4d x0, x1, p0, p1;
        memcpy(&x0, row + b, sizeof x0);
        memcpy(&x1, row + b + 4, sizeof x1);
        memcpy(&p0, pen + b, sizeof p0);
        memcpy(&p1, pen + b + 4, sizeof p1);
        sd_tb_v4l e = ((x0 + p0) == bvv) | ((x1 + p1) == bvv);
        if (!(e[0] | e[1] | e[2] | e[3])) continue;
        for (int64_t c = b; c < b + 8; c++) {
            if (row[c] + pen[c] == bv && c != a && (bs < 0 || key[c] < key[bs])) bs = c;
        }
    }
#endif
    for (; b < p; b++) {
        if (row[b] + pen[b] == bv && b != a && (bs < 0 || key[b] < key[bs])) bs = b;
    }
    return bs;
}

/* UPGMA's best pair from the cached nearest neighbours (nbv, nbs) of the live slots among
 * 0 .. p-1: the smallest (distance, min key, max key) in lexicographic order (the two rows
 * of one pair give the same triple, and either names the pair). Returns the row (-1 when no
 * distance is below +inf). The minimum first (SIMD), then the rows equal to it. */
SEQDIST_SIMD static int64_t sd_upgma_best(const double *restrict nbv, const double *restrict pen, int64_t p,
                                          const int64_t *restrict nbs, const int64_t *restrict key) {
    double best = sd_tb_min_pen(nbv, pen, p);
    int64_t bi = -1, k0 = 0, k1 = 0, a = 0;
    if (!(best < INFINITY)) return -1;
#if defined(__GNUC__)
    const sd_tb_v4d bv = {best, best, best, best};
    for (; a + 8 <= p; a += 8) {
        sd_tb_v4d x0, x1, p0, p1;
        memcpy(&x0, nbv + a, sizeof x0);
        memcpy(&x1, nbv + a + 4, sizeof x1);
        memcpy(&p0, pen + a, sizeof p0);
        memcpy(&p1, pen + a + 4, sizeof p1);
        sd_tb_v4l e = ((x0 + p0) == bv) | ((x1 + p1) == bv);
        if (!(e[0] | e[1] | e[2] | e[3])) continue;
        for (int64_t c = a; c < a + 8; c++) {
            if (nbv[c] + pen[c] == best && nbs[c] >= 0) {
                int64_t ka = key[c], kb = key[nbs[c]];
                int64_t lo = ka < kb ? ka : kb, hi = ka < kb ? kb : ka;
                if (bi < 0 || lo < k0 || (lo == k0 && hi < k1)) {
                    bi = c;
                    k0 = lo;
                    k1 = hi;
                }
            }
        }
    }
#endif
    for (; a < p; a++) {
        if (nbv[a] + pen[a] == best && nbs[a] >= 0) {
            int64_t ka = key[a], kb = key[nbs[a]];
            int64_t lo = ka < kb ? ka : kb, hi = ka < kb ? kb : ka;
            if (bi < 0 || lo < k0 || (lo == k0 && hi < k1)) {
                bi = a;
                k0 = lo;
                k1 = hi;
            }
        }
    }
    return bi;
}

/* di[k] = (si * di[k] + sj * dj[k]) / (si + sj) for k in [0, p): UPGMA's merged row, as written
 * (the sizes' sum rounded once, as the plain formula does). */
SEQDIST_SIMD static void sd_upgma_merge_row(double *restrict di, const double *restrict dj, int64_t p, double si,
                                            double sj) {
    const double s = si + sj;
    for (int64_t k = 0; k < p; k++) di[k] = (si * di[k] + sj * dj[k]) / s;
}

/* UPGMA: the merged cluster's row di (slot i) copied into column i of the live rows k other
 * than i and j (d row-major with row stride n; live holds m slots), and stale[k] set when row
 * k's cached neighbour was i or j. Each write lands in a different row, so the rows a few
 * steps ahead are asked for early (the write is the costly part at large n). */
static void sd_upgma_write_column(double *restrict d, int64_t n, const int64_t *restrict live, int64_t m,
                                  int64_t i, int64_t j, const double *restrict di, const int64_t *restrict nbs,
                                  unsigned char *restrict stale) {
    for (int64_t t = 0; t < m; t++) {
        int64_t k = live[t];
#if defined(__GNUC__)
        if (t + 16 < m) __builtin_prefetch(d + live[t + 16] * n + i, 1, 0);
#endif
        stale[k] = nbs[k] == i || nbs[k] == j;
        if (k != i && k != j) d[k * n + i] = di[k];
    }
}

/* ---------------------------------------------------------------- neighbor joining, packed
 * Neighbor joining and BIONJ keep only the strictly lower triangle of their working matrices,
 * row after row: the cell of slots a > b is P[a (a - 1) / 2 + b], so row a's cells left of the
 * diagonal are contiguous and its cells right of the diagonal are column a of the rows below
 * (one cell per row, rows further apart each time). */

/* offset of packed row a */
SD_TB_INLINE int64_t sd_tri(int64_t a) { return a * (a - 1) / 2; }

/* R[a] for a < m: the sum of slot a's distances to slots 0 .. m-1, in the order a plain loop over
 * the full row takes them (left to right from 0.0; the diagonal's 0.0 changes no sum, so it is
 * left out): first row a's own cells, then column a of rows a+1, a+2, ... That order is kept by
 * going down the rows once: row b first completes its own sum, then adds its cells to the sums
 * of the slots left of it (one independent sum per lane: SIMD code, no reordering). Eight rows
 * go side by side, as one running sum waits for each addition to finish. */
SEQDIST_SIMD static void sd_nj_packed_row_sums(const double *restrict P, int64_t m, double *restrict R) {
    int64_t b0 = 0;
    for (; b0 + 8 <= m; b0 += 8) {
        const double *r0 = P + sd_tri(b0), *r1 = P + sd_tri(b0 + 1), *r2 = P + sd_tri(b0 + 2),
                     *r3 = P + sd_tri(b0 + 3), *r4 = P + sd_tri(b0 + 4), *r5 = P + sd_tri(b0 + 5),
                     *r6 = P + sd_tri(b0 + 6), *r7 = P + sd_tri(b0 + 7);
        double s[8] = {0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0};
        double s0 = 0.0, s1 = 0.0, s2 = 0.0, s3 = 0.0, s4 = 0.0, s5 = 0.0, s6 = 0.0, s7 = 0.0;
        for (int64_t a = 0; a < b0; a++) {
            s0 += r0[a];
            s1 += r1[a];
            s2 += r2[a];
            s3 += r3[a];
            s4 += r4[a];
            s5 += r5[a];
            s6 += r6[a];
            s7 += r7[a];
        }
        for (int64_t a = 0; a < b0; a++) {
            double x = R[a];
            x += r0[a];
            x += r1[a];
            x += r2[a];
            x += r3[a];
            x += r4[a];
            x += r5[a];
            x += r6[a];
            x += r7[a];
            R[a] = x;
        }
        const double *rows[8] = {r0, r1, r2, r3, r4, r5, r6, r7};
        s[0] = s0; s[1] = s1; s[2] = s2; s[3] = s3; s[4] = s4; s[5] = s5; s[6] = s6; s[7] = s7;
        for (int q = 1; q < 8; q++)
            for (int p = 0; p < q; p++) s[q] += rows[q][b0 + p];
        for (int p = 0; p < 8; p++) {
            double x = s[p];
            for (int q = p + 1; q < 8; q++) x += rows[q][b0 + p];
            R[b0 + p] = x;
        }
    }
    for (int64_t b = b0; b < m; b++) {
        const double *row = P + sd_tri(b);
        double x = 0.0;
        for (int64_t a = 0; a < b; a++) x += row[a];
        for (int64_t a = 0; a < b; a++) R[a] += row[a];
        R[b] = x;
    }
}

/* The full rows of slots i < j (k < m; 0.0 on the diagonal) from the packed P into di and dj,
 * and from V into vi and vj when V is not NULL (BIONJ's variances): the cells left of the
 * diagonal are copied, the cells below it are read one row at a time, rows ahead asked for early. */
static void sd_nj_gather(const double *restrict P, const double *restrict V, int64_t m, int64_t i, int64_t j,
                         double *restrict di, double *restrict dj, double *restrict vi, double *restrict vj) {
    const int64_t ti = sd_tri(i), tj = sd_tri(j);
    memcpy(di, P + ti, (size_t)i * sizeof(double));
    memcpy(dj, P + tj, (size_t)j * sizeof(double));
    di[i] = 0.0;
    dj[j] = 0.0;
    if (V) {
        memcpy(vi, V + ti, (size_t)i * sizeof(double));
        memcpy(vj, V + tj, (size_t)j * sizeof(double));
        vi[i] = 0.0;
        vj[j] = 0.0;
    }
    int64_t t = sd_tri(i + 1);
    for (int64_t k = i + 1; k < m; t += k, k++) {
#if defined(__GNUC__)
        if (k + 16 < m) {
            const int64_t ta = sd_tri(k + 16);
            __builtin_prefetch(P + ta + i, 0, 0);
            if (k + 16 > j) __builtin_prefetch(P + ta + j, 0, 0);
            if (V) {
                __builtin_prefetch(V + ta + i, 0, 0);
                if (k + 16 > j) __builtin_prefetch(V + ta + j, 0, 0);
            }
        }
#endif
        di[k] = P[t + i];
        if (k > j) dj[k] = P[t + j];
        if (V) {
            vi[k] = V[t + i];
            if (k > j) vj[k] = V[t + j];
        }
    }
}

/* After joining slots i < j of m: the new cluster's distances newd[k] (k != i, j) become slot i's
 * cells; when the last slot moves into the freed slot j (j != m - 1), its cells become slot j's.
 * The same in V with newv when V is not NULL. One pass over the rows below slot i. */
static void sd_nj_scatter(double *restrict P, double *restrict V, int64_t m, int64_t i, int64_t j,
                          const double *restrict newd, const double *restrict newv) {
    const int64_t last = m - 1, ti = sd_tri(i), tj = sd_tri(j), tl = sd_tri(last);
    const int move = j != last;
    memcpy(P + ti, newd, (size_t)i * sizeof(double));
    if (V) memcpy(V + ti, newv, (size_t)i * sizeof(double));
    int64_t t = sd_tri(i + 1);
    for (int64_t k = i + 1; k < m; t += k, k++) {
#if defined(__GNUC__)
        if (k + 16 < m) {
            const int64_t ta = sd_tri(k + 16);
            __builtin_prefetch(P + ta + i, 1, 0);
            if (move && k + 16 > j) __builtin_prefetch(P + ta + j, 1, 0);
            if (V) {
                __builtin_prefetch(V + ta + i, 1, 0);
                if (move && k + 16 > j) __builtin_prefetch(V + ta + j, 1, 0);
            }
        }
#endif
        if (k == j) continue;
        /* at k = last this writes the moved slot's distance to the new cluster, copied below */
        P[t + i] = newd[k];
        if (V) V[t + i] = newv[k];
        if (move && k > j && k < last) {
            P[t + j] = P[tl + k];
            if (V) V[t + j] = V[tl + k];
        }
    }
    if (move) {
        memcpy(P + tj, P + tl, (size_t)j * sizeof(double));
        if (V) memcpy(V + tj, V + tl, (size_t)j * sizeof(double));
    }
}
#endif
