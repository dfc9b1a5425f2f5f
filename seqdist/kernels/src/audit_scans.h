/* Hot loops of seqdist.kernels._audit_scans: the fused triangle scan and the quartet statistics
 * (see audit_scans.py for the method). */
#ifndef SEQDIST_AUDIT_SCANS_H
#define SEQDIST_AUDIT_SCANS_H
#include <stdint.h>
#include <string.h>
#include "simd.h"

/* Width of the blocks of the compaction loop (four AVX2 vectors of doubles). */
#define SD_LANES 16

/* Is any of the SD_LANES doubles at p above t?  Four compares OR-ed in vector registers (GCC
 * and clang vector types: AVX2 or two SSE2 halves), else a plain loop. NaN is never above. */
#if defined(__GNUC__)
typedef double sd_v4d __attribute__((vector_size(32)));
typedef int64_t sd_v4l __attribute__((vector_size(32)));
static inline int sd_any_above(const double *p, double t) {
    sd_v4d a, b, c, d, tt = {t, t, t, t};
    memcpy(&a, p, sizeof a);
    memcpy(&b, p + 4, sizeof b);
    memcpy(&c, p + 8, sizeof c);
    memcpy(&d, p + 12, sizeof d);
    sd_v4l m = (a > tt) | (b > tt) | (c > tt) | (d > tt);
    return (m[0] | m[1] | m[2] | m[3]) != 0;
}
#else
static inline int sd_any_above(const double *p, double t) {
    int any = 0;
    for (int j = 0; j < SD_LANES; j++) any |= p[j] > t;
    return any;
}
#endif

/* Index of the pair i < j in the packed upper triangle, row by row. */
static inline int64_t sd_pidx(int64_t i, int64_t j, int64_t n) {
    return i * (2 * n - i - 1) / 2 + (j - i - 1);
}

/* One tile of rows a in [a0, a1) of the (n, n) row-major d: every triangle a < b < c once.
 * Outputs indexed by a row of the tile (row_*, top*, pair_hard of pairs (a, .)) are written by
 * this tile only; cnt, qex, lng (packed pairs) and hist are this thread's rows. Every value that
 * is counted or kept comes from the float operations of the former numba kernel in the same
 * order, so the results are the same bits.
 * Scratch of the calling thread, zero on entry and left zero: Ac/Aq/Al hold the entries (a, .) of
 * the tile's rows (rows x n; tile-local, so the scattered updates stay in cache), Bc/Bq/Bl the
 * entries (b, .) of the current middle row b (n), H the histogram (nb); ebuf (n) and hit (n + 1)
 * need no clearing. */
SEQDIST_SIMD static void sd_audit_scan_tile(
        const double *restrict d, int64_t n, double tol, double hard, double utol, double qscale,
        double inv_top, const double *restrict edges, int64_t nb, int64_t a0, int64_t a1, int64_t K,
        int64_t *restrict row_viol, int64_t *restrict row_hard, double *restrict row_max,
        int32_t *restrict pair_hard, double *restrict topv, int32_t *restrict topb, int32_t *restrict topc,
        double *restrict topmin, int64_t *restrict hist, int32_t *restrict cnt, int64_t *restrict qex,
        int32_t *restrict lng, int64_t *restrict row_ub, int64_t *restrict row_uc,
        int32_t *restrict Ac, int64_t *restrict Aq, int32_t *restrict Al, int32_t *restrict Bc,
        int64_t *restrict Bq, int32_t *restrict Bl, double *restrict ebuf, int64_t *restrict hit,
        int64_t *restrict H) {
    int tile_hit = 0;
    for (int64_t b = a0 + 1; b < n; b++) {
        const double *restrict ys = d + b * n + b + 1;
        int64_t m_ = n - b - 1;
        int64_t kmin = n, kmax = -1;
        int64_t ahi = a1 < b ? a1 : b;
        for (int64_t a = a0; a < ahi; a++) {
            double z = d[a * n + b];
            if (z != z) continue;
            const double *restrict xs = d + a * n + b + 1;
            int64_t c_ = 0, uc_ = 0, w = 0;
            for (int64_t c = 0; c < m_; c++) { /* branch-free: vectorised */
                double x = xs[c], y = ys[c];
                /* written as two selects (not one compare and two blends) so that each is one
                 * max or min instruction; they differ from the numba code only for NaN sides,
                 * which make e and u NaN anyway, and in the sign of a zero, which no count or
                 * kept value can see */
                double hi = x > y ? x : y;
                double lo = x < y ? x : y;
                double m = hi > z ? hi : z;
                double e = 2.0 * m - (x + y + z);
                c_ += e > tol;
                ebuf[c] = e;
                /* three-point deviation longest - middle; 0 * (x + y) makes it NaN when a side
                 * is missing, and NaN fails every comparison */
                double t_ = hi < z ? hi : z;
                double med = lo > t_ ? lo : t_;
                double u = (m - med) + 0.0 * (x + y);
                uc_ += u > utol;
                /* largest deviation of the pair: an integer max over the bit patterns of
                 * non-negative floats (same order as the values; a float max reduction would
                 * not vectorise); a NaN deviation counts as 0 */
                double uu = u > 0.0 ? u : 0.0;
                int64_t q;
                memcpy(&q, &uu, sizeof q);
                w = q > w ? q : w;
            }
            row_uc[a] += uc_;
            if (w > row_ub[2 * a + 1]) {
                row_ub[2 * a + 1] = w;
                row_ub[2 * a] = b;
            }
            if (c_ == 0) continue;
            tile_hit = 1;
            int64_t ra = a - a0;
            int32_t *restrict Acr = Ac + ra * n, *restrict Alr = Al + ra * n;
            int64_t *restrict Aqr = Aq + ra * n;
            row_viol[a] += c_;
            int64_t h_ = 0, pc = 0, pq = 0, pl = 0;
            /* positions of the violated c, in order: blocks of SD_LANES with none (most of
             * them) are passed over after one vector test; the others are compacted branch-free */
            int64_t nh = 0, c0 = 0;
            for (; c0 + SD_LANES <= m_; c0 += SD_LANES) {
                if (!sd_any_above(ebuf + c0, tol)) continue;
                for (int j = 0; j < SD_LANES; j++) {
                    hit[nh] = c0 + j;
                    nh += ebuf[c0 + j] > tol;
                }
            }
            for (; c0 < m_; c0++) {
                hit[nh] = c0;
                nh += ebuf[c0] > tol;
            }
            for (int64_t h = 0; h < nh; h++) {
                int64_t c = hit[h];
                double e = ebuf[c];
                double x = xs[c], y = ys[c];
                int64_t k = b + 1 + c;
                if (k < kmin) kmin = k;
                if (k > kmax) kmax = k;
                int64_t q = (int64_t)(e * qscale + 0.5);
                pc += 1;
                pq += q;
                Acr[k] += 1;
                Aqr[k] += q;
                Bc[k] += 1;
                Bq[k] += q;
                /* the longest side (ties: first of (a,b), (a,k), (b,k)) */
                if (z >= x && z >= y)
                    pl += 1;
                else if (x >= y)
                    Alr[k] += 1;
                else
                    Bl[k] += 1;
                if (e > hard) h_ += 1;
                if (e > row_max[a]) row_max[a] = e;
                double r = e * inv_top;
                int64_t bi = nb - 1;
                while (bi > 0 && r < edges[bi]) bi--;
                H[bi] += 1;
                /* top-K of row a: keep the K smallest keys (-e, b, k). Scan order makes a later
                 * triangle's key larger among equal e, so only a strictly larger e than the
                 * smallest kept enters; it evicts the smallest e (among ties the latest). */
                if (K > 0 && e > topmin[a]) {
                    double *tv = topv + a * K;
                    int32_t *tb = topb + a * K, *tc = topc + a * K;
                    int64_t wi = 0;
                    for (int64_t t = 1; t < K; t++) {
                        if (tv[t] < tv[wi] || (tv[t] == tv[wi] && (tb[t] > tb[wi] || (tb[t] == tb[wi] && tc[t] > tc[wi]))))
                            wi = t;
                    }
                    tv[wi] = e;
                    tb[wi] = (int32_t)b;
                    tc[wi] = (int32_t)k;
                    double lo = tv[0];
                    for (int64_t t = 1; t < K; t++)
                        if (tv[t] < lo) lo = tv[t];
                    topmin[a] = lo;
                }
            }
            Acr[b] += (int32_t)pc;
            Aqr[b] += pq;
            Alr[b] += (int32_t)pl;
            pair_hard[sd_pidx(a, b, n)] = (int32_t)h_;
            row_hard[a] += h_;
        }
        if (kmax >= 0) {
            int64_t base = sd_pidx(b, kmin, n);
            int32_t *restrict w_c = cnt + base, *restrict w_l = lng + base;
            int64_t *restrict w_q = qex + base;
            for (int64_t t = 0; t <= kmax - kmin; t++) {
                w_c[t] += Bc[kmin + t];
                w_q[t] += Bq[kmin + t];
                w_l[t] += Bl[kmin + t];
                Bc[kmin + t] = 0;
                Bq[kmin + t] = 0;
                Bl[kmin + t] = 0;
            }
        }
    }
    if (tile_hit) {
        for (int64_t t = 0; t < nb; t++) {
            hist[t] += H[t];
            H[t] = 0;
        }
        for (int64_t ra = 0; ra < a1 - a0; ra++) {
            int64_t a = a0 + ra;
            if (a + 1 >= n) continue;
            int64_t base = sd_pidx(a, a + 1, n);
            int64_t L = n - a - 1;
            int32_t *restrict w_c = cnt + base, *restrict w_l = lng + base;
            int64_t *restrict w_q = qex + base;
            /* every entry (a, k) written has k > a: clearing from a + 1 leaves the scratch zero */
            int32_t *restrict s_c = Ac + ra * n + a + 1, *restrict s_l = Al + ra * n + a + 1;
            int64_t *restrict s_q = Aq + ra * n + a + 1;
            for (int64_t t = 0; t < L; t++) {
                w_c[t] += s_c[t];
                w_q[t] += s_q[t];
                w_l[t] += s_l[t];
                s_c[t] = 0;
                s_q[t] = 0;
                s_l[t] = 0;
            }
        }
    }
}

/* ------------------------------------------------------------------ quartets */

/* Tallies of the four-point and delta statistics (counts as integers: the former numba counters
 * were float64, exact below 2**53, so the values are the same). */
typedef struct {
    int64_t examined, missing, violated, delta_n, star;
    double rel_sum, rel_max, delta_sum;
} sd_quartet_acc;

/* One quartet (see quartet_stats in audit_scans.py): the float operations of the former numba
 * kernel in the same order. The three sums are sorted with min and max selects, which give the
 * same values as the numba code's exchanges (no NaN gets that far; equal sums are equal). */
static inline __attribute__((always_inline)) void sd_quartet(
        const double *restrict d, int64_t n, int64_t i, int64_t j, int64_t k, int64_t l, double tol,
        sd_quartet_acc *restrict acc, double *restrict dsum, int64_t *restrict dcnt, int64_t *restrict dhist,
        int64_t nb, int64_t *restrict qworst) {
    double s1 = d[i * n + j] + d[k * n + l];
    double s2 = d[i * n + k] + d[j * n + l];
    double s3 = d[i * n + l] + d[j * n + k];
    if ((s1 != s1) | (s2 != s2) | (s3 != s3)) {
        acc->missing += 1; /* a missing entry */
        return;
    }
    /* S <= M <= L */
    double lo = s1 < s2 ? s1 : s2, hi = s1 > s2 ? s1 : s2;
    double S = lo < s3 ? lo : s3, t = lo > s3 ? lo : s3;
    double M = hi < t ? hi : t, L = hi > t ? hi : t;
    double gap = L - M;
    acc->examined += 1;
    acc->violated += gap > tol;
    double rel = L > 0 ? gap / L : 0.0;
    acc->rel_sum += rel;
    if (rel > acc->rel_max) {
        acc->rel_max = rel;
        qworst[0] = i;
        qworst[1] = j;
        qworst[2] = k;
        qworst[3] = l;
    }
    double spread = L - S;
    if (spread > tol) {
        double delta = gap / spread;
        acc->delta_sum += delta;
        acc->delta_n += 1;
        dsum[i] += delta;
        dsum[j] += delta;
        dsum[k] += delta;
        dsum[l] += delta;
        dcnt[i] += 1;
        dcnt[j] += 1;
        dcnt[k] += 1;
        dcnt[l] += 1;
        int64_t bi = (int64_t)(delta * nb);
        if (bi >= nb) bi = nb - 1;
        dhist[bi] += 1;
    } else {
        acc->star += 1; /* all three sums equal within tol: delta undefined */
    }
}

/* How many quartets ahead the list loop prefetches; a hint only (no effect on results). */
#define SD_QAHEAD 8
#if defined(__GNUC__)
#define SD_PREFETCH(p) __builtin_prefetch((p), 0, 1)
#else
#define SD_PREFETCH(p) ((void)0)
#endif

/* Every quartet i < j < k < l of the (n, n) row-major d, in that order (Q == NULL), or the nq
 * rows of Q (nq x 4), in order. */
static void sd_quartets(const double *restrict d, int64_t n, const int64_t *restrict Q, int64_t nq, double tol,
                        sd_quartet_acc *out, double *restrict dsum, int64_t *restrict dcnt,
                        int64_t *restrict dhist, int64_t nb, int64_t *restrict qworst) {
    sd_quartet_acc acc = *out; /* a local copy stays in registers */
    if (Q == NULL) {
        for (int64_t i = 0; i < n; i++)
            for (int64_t j = i + 1; j < n; j++)
                for (int64_t k = j + 1; k < n; k++)
                    for (int64_t l = k + 1; l < n; l++)
                        sd_quartet(d, n, i, j, k, l, tol, &acc, dsum, dcnt, dhist, nb, qworst);
    } else {
        for (int64_t r = 0; r < nq; r++) {
            if (r + SD_QAHEAD < nq) {
                /* sampled quartets hit the matrix at random: ask for the six entries of a later
                 * quartet now, so that several cache misses are in flight at once */
                const int64_t *p = Q + 4 * (r + SD_QAHEAD);
                SD_PREFETCH(d + p[0] * n + p[1]);
                SD_PREFETCH(d + p[2] * n + p[3]);
                SD_PREFETCH(d + p[0] * n + p[2]);
                SD_PREFETCH(d + p[1] * n + p[3]);
                SD_PREFETCH(d + p[0] * n + p[3]);
                SD_PREFETCH(d + p[1] * n + p[2]);
            }
            sd_quartet(d, n, Q[4 * r], Q[4 * r + 1], Q[4 * r + 2], Q[4 * r + 3], tol, &acc, dsum, dcnt, dhist, nb,
                       qworst);
        }
    }
    *out = acc;
}
#endif
