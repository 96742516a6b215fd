// Hot loops compiled twice, for AVX2 and for the x86-64 baseline (SSE2); the loader picks the one
// the CPU runs (GCC/Clang function multi-versioning through an ifunc), so no build needs a
// particular CPU. AVX2 alone brings no fused multiply-add, and the library is built with
// -ffp-contract=off besides: both versions give bit for bit the same floats (cli.features_golden).
#pragma once

#if defined(__x86_64__) && (defined(__GNUC__) || defined(__clang__)) && !defined(RESIDUE_NO_VECTOR_CLONES)
#define RESIDUE_VECTOR_CLONES __attribute__((target_clones("avx2", "default")))
#else
#define RESIDUE_VECTOR_CLONES
#endif
