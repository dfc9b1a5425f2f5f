/* One switch for the compiled kernels' hot loops: on x86-64 with GCC or clang
 * (ELF, so the loader can pick an ifunc), a function marked SEQDIST_SIMD is
 * compiled twice, for the baseline and for AVX2, and the faster one is chosen
 * when the module is loaded. The build itself stays portable (no -march). */
#ifndef SEQDIST_SIMD_H
#define SEQDIST_SIMD_H
#if defined(__x86_64__) && defined(__GNUC__) && defined(__ELF__) && !defined(__APPLE__)
#define SEQDIST_SIMD __attribute__((target_clones("avx2", "default")))
#else
#define SEQDIST_SIMD
#endif
#endif
