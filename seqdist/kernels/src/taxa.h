/* Triangle loops of seqdist.repair._taxa (see taxa.py for what they count).
 * A triangle is violated when 2 * longest - (x + y + z) > tol, the audit's formula with its
 * order of additions; a NaN side gives NaN, which never compares greater, so a triangle with a
 * missing side is never counted. */
#ifndef SEQDIST_TAXA_H
#define SEQDIST_TAXA_H
#include <stdint.h>
#include "simd_wide.h"

/* Violated triangles through each taxon, for the rows a in [a0, a1) of the row-major (n, n) d:
 * every (a, b, c), a < b < c, all alive, adds 1 to cnt[a], cnt[b] and cnt[c]. The middle index b
 * is the outer loop, so the tail of row b is reused for all rows of the tile (cache blocking). */
SEQDIST_SIMD_WIDE
static void sd_taxa_count_tile(const double *restrict d, const uint8_t *restrict alive, int64_t n, double tol,
                               int64_t a0, int64_t a1, int64_t *restrict cnt) {
    for (int64_t b = a0 + 1; b < n; b++) {
        if (alive[b] == 0) continue;
        const double *ys = d + b * n + b + 1;
        const uint8_t *al = alive + b + 1;
        int64_t *ck = cnt + b + 1;
        int64_t m_ = n - b - 1;
        int64_t hi = a1 < b ? a1 : b;
        int64_t sb = 0;
        for (int64_t a = a0; a < hi; a++) {
            double z = d[a * n + b];
            if (alive[a] == 0 || z != z) continue;
            const double *xs = d + a * n + b + 1;
            int64_t s = 0;
            for (int64_t c = 0; c < m_; c++) {
                double x = xs[c], y = ys[c];
                double m = x > y ? x : y;
                m = m > z ? m : z;
                int64_t f = (2.0 * m - (x + y + z) > tol) & (al[c] != 0);
                ck[c] += f;
                s += f;
            }
            cnt[a] += s;
            sb += s;
        }
        cnt[b] += sb;
    }
}

/* The number of violated (i, j, c) for c in j+1 .. n-1 with c alive, from the row tails
 * xs = d[i, j+1:], ys = d[j, j+1:], al = alive[j+1:] and z = d[i, j]. */
SEQDIST_SIMD_WIDE
static int64_t sd_taxa_row_count(const double *restrict xs, const double *restrict ys, const uint8_t *restrict al,
                                 int64_t m_, double z, double tol) {
    int64_t s = 0;
    for (int64_t c = 0; c < m_; c++) {
        double x = xs[c], y = ys[c];
        double m = x > y ? x : y;
        m = m > z ? m : z;
        s += (2.0 * m - (x + y + z) > tol) & (al[c] != 0);
    }
    return s;
}
/* Row i of the listing of violated triangles among alive taxa (i < j < k, alive[i] assumed):
 * counts them (out NULL) or writes them as (i, j, k) from slot t on, in (j, k) order. Segments
 * (i, j) without one are skipped by the branch-free count; returns the count for the row. */
static int64_t sd_taxa_list_row(const double *restrict d, const uint8_t *restrict alive, int64_t n, int64_t i,
                                double tol, int64_t *restrict out, int64_t t) {
    int64_t r = 0;
    const double *xi = d + i * n;
    for (int64_t j = i + 1; j < n; j++) {
        double z = xi[j];
        if (alive[j] == 0 || z != z) continue;
        const double *yj = d + j * n;
        int64_t c = sd_taxa_row_count(xi + j + 1, yj + j + 1, alive + j + 1, n - j - 1, z, tol);
        r += c;
        if (c == 0 || out == 0) continue;
        for (int64_t k = j + 1; k < n; k++) {
            double x = xi[k], y = yj[k];
            double m = x > y ? x : y;
            m = m > z ? m : z;
            if ((2.0 * m - (x + y + z) > tol) & (alive[k] != 0)) {
                int64_t *o = out + 3 * t;
                o[0] = i;
                o[1] = j;
                o[2] = k;
                t++;
            }
        }
    }
    return r;
}
/* The violated (v, j, k) for k in j+1 .. n-1, k != v, k alive (v != j): the sides are read at sorted
 * indices as the audit's test reads them, x = d[a, c], y = d[b, c], z = d[a, b] for a < b < c, so
 * the k are taken in three runs by where v falls: v < j gives (v, j, k); j < v gives (j, k, v) for
 * k < v, whose side d[k, v] is read from colv (column v of d, copied), and (j, v, k) for k > v.
 * Each run is branch-free. With cnt, adds -1 to cnt[k] for each violated (v, j, k); returns how
 * many there are. */
#define SD_TAXA_RUN(LO, HI, XE, YE, ZE)                                        \
    for (int64_t k = (LO); k < (HI); k++) {                                    \
        double x = (XE), y = (YE), z = (ZE);                                   \
        double m = x > y ? x : y;                                              \
        m = m > z ? m : z;                                                     \
        int64_t f = (2.0 * m - (x + y + z) > tol) & (alive[k] != 0);           \
        if (CNT) cnt[k] -= f;                                                  \
        s += f;                                                                \
    }
#define SD_TAXA_SCAN_BODY                                                      \
    const double *rv = d + v * n, *rj = d + j * n;                             \
    int64_t s = 0;                                                             \
    if (v < j) {                                                               \
        double zc = rv[j];                                                     \
        SD_TAXA_RUN(j + 1, n, rv[k], rj[k], zc)                                \
    } else {                                                                   \
        double xc = rj[v];                                                     \
        SD_TAXA_RUN(j + 1, v, xc, colv[k], rj[k])                              \
        SD_TAXA_RUN(v + 1, n, rj[k], rv[k], xc)                                \
    }                                                                          \
    return s;

SEQDIST_SIMD_WIDE
static int64_t sd_taxa_scan_dec(const double *restrict d, const double *restrict colv, const uint8_t *restrict alive,
                                int64_t n, int64_t v, int64_t j, double tol, int64_t *restrict cnt) {
#define CNT 1
    SD_TAXA_SCAN_BODY
#undef CNT
}

SEQDIST_SIMD_WIDE
static int64_t sd_taxa_scan(const double *restrict d, const double *restrict colv, const uint8_t *restrict alive,
                            int64_t n, int64_t v, int64_t j, double tol) {
#define CNT 0
    int64_t *cnt = 0;
    SD_TAXA_SCAN_BODY
#undef CNT
}
#undef SD_TAXA_SCAN_BODY
#undef SD_TAXA_RUN
#endif
