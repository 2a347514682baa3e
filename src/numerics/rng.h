/*
 * Counter-based uniform random numbers: the number for (seed, stream, index,
 * dim) is a pure function of those four values, so any process computes any
 * sample without shared state (Philox4x32-10, Salmon et al. 2011).
 *
 * Layout (see rng.c): the Philox key is a hash of (seed, stream), injective
 * in each argument when the other is fixed; the counter is (index low 32
 * bits, index high 32 bits, dim / 2, 0), and one block gives the 64 bits of
 * the even dimension (words 0, 1) and of the odd one (words 2, 3).
 *
 * SPDX-License-Identifier: MIT
 */
#ifndef BK_RNG_H
#define BK_RNG_H

#include <stddef.h>
#include <stdint.h>

/* One Philox4x32-10 block: out = bijection_key(ctr). */
void bk_rng_philox4x32_10(const uint32_t ctr[4], const uint32_t key[2],
                      uint32_t out[4]);

/* A uniform number in the open interval (0, 1), never 0 or 1: the top 52 of
 * the 64 bits of bk_rng_bits, taken as the midpoint of one of 2^52 equal
 * cells, ((bits >> 12) + 0.5) * 2^-52, so u and 1 - u are equally likely and
 * the extremes are 2^-53 and 1 - 2^-53. (53 bits cannot be had this way:
 * below 1 the doubles are 2^-53 apart and hold no midpoints.) `stream`
 * separates independent uses (a method phase, a replicate); `index` is the
 * sample number; `dim` the coordinate. */
double bk_rng_u01(uint64_t seed, uint64_t stream, uint64_t index, uint32_t dim);

/* out[k] = bk_rng_u01(seed, stream, index, dim + k) for k < n, computing
 * one Philox block per pair of dimensions. */
void bk_rng_u01_fill(uint64_t seed, uint64_t stream, uint64_t index,
                     uint32_t dim, uint32_t n, double *out);

/* The Philox key of (seed, stream), for bk_rng_u01_rows: a stream's key
 * computed once instead of per call. */
uint64_t bk_rng_key(uint64_t seed, uint64_t stream);

/* Rows of uniforms for consecutive indices: out[i * n + k] =
 * bk_rng_u01(seed, stream, first + i, dim + k) for i < count and k < n,
 * where key = bk_rng_key(seed, stream). */
void bk_rng_u01_rows(uint64_t key, uint64_t first, size_t count, uint32_t dim,
                     uint32_t n, double *out);

/* 64 random bits for (seed, stream, index, dim). */
uint64_t bk_rng_bits(uint64_t seed, uint64_t stream, uint64_t index,
                     uint32_t dim);

/* A 64-bit stream identifier from a text label such as "lhs/r3" (FNV-1a
 * followed by a 64-bit finaliser), stable across platforms and versions. */
uint64_t bk_rng_stream(const char *label);

/* The splitmix64 finaliser (Steele, Lea & Flood 2014; Vigna's splitmix64.c):
 * a bijection of 64-bit integers with good avalanche, for deriving keys. */
uint64_t bk_rng_mix64(uint64_t x);

#endif
