/* Hot loop of seqdist.kernels._pair_bytes: equal bytes between rows of two (n, L) uint8 arrays.
 *
 * A byte compare gives 0xFF (-1) where equal; subtracting it from a byte counter adds one, so
 * 32 columns are counted per vector operation in byte lanes, which are summed into the integer
 * count before they can overflow (at most 255 additions per lane). Rows are taken four at a
 * time so each row of b is loaded once for four rows of a. Counts are exact integers, so the
 * order of the additions does not matter. */
#ifndef SEQDIST_PAIR_BYTES_H
#define SEQDIST_PAIR_BYTES_H
#include <stdint.h>
#include <string.h>
#include "simd.h"

typedef uint8_t sd_pb_u8 __attribute__((vector_size(32)));
typedef uint16_t sd_pb_u16 __attribute__((vector_size(32)));
typedef uint32_t sd_pb_u32 __attribute__((vector_size(32)));
typedef uint64_t sd_pb_u64 __attribute__((vector_size(32)));

/* Sum of the 32 byte lanes (each at most 255). */
static inline __attribute__((always_inline)) int64_t sd_pb_hsum(const sd_pb_u8 *acc) {
    sd_pb_u16 s = ((sd_pb_u16)*acc & 0xFF) + ((sd_pb_u16)*acc >> 8);
    sd_pb_u32 t = ((sd_pb_u32)s & 0xFFFF) + ((sd_pb_u32)s >> 16);
    sd_pb_u64 u = ((sd_pb_u64)t & 0xFFFFFFFFu) + ((sd_pb_u64)t >> 32);
    return (int64_t)(u[0] + u[1] + u[2] + u[3]);
}

/* For rows i in [g0, g1) (g1 - g0 <= 4) of a and every row j >= g0 of b: out[(i - i0) * ldo + j - i0]
 * = sum_k [a[i, k] == b[j, k]], stored for j >= i only. */
SEQDIST_SIMD static void sd_pb_rows(const uint8_t *a, const uint8_t *b, int64_t n, int64_t L, int64_t i0,
                                    int64_t g0, int64_t g1, int32_t *out, int64_t ldo) {
    const uint8_t *x0 = a + g0 * L;
    const uint8_t *x1 = g0 + 1 < g1 ? x0 + L : x0; /* missing rows repeat the first; not stored */
    const uint8_t *x2 = g0 + 2 < g1 ? x0 + 2 * L : x0;
    const uint8_t *x3 = g0 + 3 < g1 ? x0 + 3 * L : x0;
    for (int64_t j = g0; j < n; j++) {
        const uint8_t *y = b + j * L;
        int64_t m0 = 0, m1 = 0, m2 = 0, m3 = 0, k = 0;
        while (L - k >= 32) {
            int64_t nv = (L - k) / 32;
            if (nv > 255) nv = 255;
            sd_pb_u8 c0 = {0}, c1 = {0}, c2 = {0}, c3 = {0};
            for (int64_t v = 0; v < nv; v++, k += 32) {
                sd_pb_u8 yv, xv;
                memcpy(&yv, y + k, 32);
                memcpy(&xv, x0 + k, 32);
                c0 -= (sd_pb_u8)(xv == yv);
                memcpy(&xv, x1 + k, 32);
                c1 -= (sd_pb_u8)(xv == yv);
                memcpy(&xv, x2 + k, 32);
                c2 -= (sd_pb_u8)(xv == yv);
                memcpy(&xv, x3 + k, 32);
                c3 -= (sd_pb_u8)(xv == yv);
            }
            m0 += sd_pb_hsum(&c0);
            m1 += sd_pb_hsum(&c1);
            m2 += sd_pb_hsum(&c2);
            m3 += sd_pb_hsum(&c3);
        }
        for (; k < L; k++) {
            uint8_t yk = y[k];
            m0 += x0[k] == yk;
            m1 += x1[k] == yk;
            m2 += x2[k] == yk;
            m3 += x3[k] == yk;
        }
        int64_t m[4] = {m0, m1, m2, m3};
        for (int64_t r = 0; r < g1 - g0; r++)
            if (j >= g0 + r) out[(g0 + r - i0) * ldo + (j - i0)] = (int32_t)m[r];
    }
}
#endif
