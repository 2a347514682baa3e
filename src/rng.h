/*
 * Counter-based uniform random numbers: the number for (seed, stream, index,
 * dim) is a pure function of those four values, so any process computes any
 * sample without shared state (Philox4x32-10, Salmon et al. 2011).
 *
 * SPDX-License-Identifier: MIT
 */
#ifndef BK_RNG_H
#define BK_RNG_H

#include <stdint.h>

/* One Philox4x32-10 block: out = bijection_key(ctr). */
void bk_philox4x32_10(const uint32_t ctr[4], const uint32_t key[2],
                      uint32_t out[4]);

/* A uniform number in the open interval (0, 1), never 0 or 1, with 53
 * random bits where possible. `stream` separates independent uses (a method
 * phase, a replicate); `index` is the sample number; `dim` the coordinate. */
double bk_rng_u01(uint64_t seed, uint64_t stream, uint64_t index,
                  uint32_t dim);

/* 64 random bits for (seed, stream, index, dim). */
uint64_t bk_rng_bits(uint64_t seed, uint64_t stream, uint64_t index,
                     uint32_t dim);

/* A 64-bit stream identifier from a text label such as "lhs/r3" (FNV-1a
 * followed by a 64-bit finaliser), stable across platforms and versions. */
uint64_t bk_rng_stream(const char *label);

#endif
