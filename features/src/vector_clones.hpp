// Hot loops compiled twice, for AVX2 and for the x86-64 baseline (SSE2); the loader picks the one
// the CPU runs (GCC/Clang function multi-versioning through an ifunc), so no build needs a
// particular CPU. The build is ISO C++ (-std=c++20, not gnu++20), which keeps -ffp-contract=off:
// no multiply-add is fused, and both versions give bit for bit the same floats.
#pragma once

#if defined(__x86_64__) && (defined(__GNUC__) || defined(__clang__)) && !defined(RESIDUE_NO_VECTOR_CLONES)
#define RESIDUE_VECTOR_CLONES __attribute__((target_clones("avx2", "default")))
#else
#define RESIDUE_VECTOR_CLONES
#endif
