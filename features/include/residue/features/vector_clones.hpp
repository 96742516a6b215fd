// Hot loops compiled twice, for AVX2 and for the x86-64 baseline (SSE2); the loader picks the one
// the CPU runs (GCC/Clang function multi-versioning through an ifunc), so no build needs a
// particular CPU. AVX2 alone brings no fused multiply-add, and every library that uses this is
// built with -ffp-contract=off besides: both versions give bit for bit the same floats
// (cli.features_golden for the features; the linear SVM's solver in training/ likewise).
#pragma once

#if defined(__x86_64__) && (defined(__GNUC__) || defined(__clang__)) && !defined(RESIDUE_NO_VECTOR_CLONES)
#define RESIDUE_VECTOR_CLONES __attribute__((target_clones("avx2", "default")))
// Also AVX-512 (eight doubles a vector): for loops bound by memory traffic over long float rows,
// such as the linear SVM's solver, where it saved a third of a pass on the development VM.
#define RESIDUE_WIDE_VECTOR_CLONES __attribute__((target_clones("avx512f", "avx2", "default")))
#else
#define RESIDUE_VECTOR_CLONES
#define RESIDUE_WIDE_VECTOR_CLONES
#endif
