/* Like SEQDIST_SIMD (simd.h), with an AVX-512 build beside the AVX2 one and the baseline: for
 * the short matrix loops of kept_graph.h and taxa.h, where the wider vectors pay
 * (measured against the numba kernels they replace, which LLVM built for the host's AVX-512). */
#ifndef SEQDIST_SIMD_WIDE_H
#define SEQDIST_SIMD_WIDE_H
#include "simd.h"
#if defined(__x86_64__) && defined(__GNUC__) && defined(__ELF__) && !defined(__APPLE__)
#define SEQDIST_SIMD_WIDE __attribute__((target_clones("avx512f", "avx2", "default")))
#else
#define SEQDIST_SIMD_WIDE SEQDIST_SIMD
#endif
#endif
