/*
 * Counter-based uniform random numbers with Philox4x32-10 (Salmon, Moraes,
 * Dror & Shaw 2011, "Parallel random numbers: as easy as 1, 2, 3", SC11).
 * Philox is a keyed bijection of 128-bit counters; with a fixed key it
 * passes TestU01 BigCrush for every counter pattern the paper tried, so a
 * structured counter (sample, dimension) is as good as a random one. The
 * number for (seed, stream, index, dim) is therefore a pure function: resume,
 * shards and ranks agree without shared state.
 *
 * Layout. key = (lo, hi) of mix64(seed ^ mix64(stream ^ golden)), so for a
 * fixed seed distinct streams give distinct keys, and for a fixed stream
 * distinct seeds do (mix64 is a bijection); counter = (index lo, index hi,
 * dim / 2, 0). Distinct (index, dim / 2) give distinct counters, hence
 * distinct blocks under one key; dimension 2k takes block words 0 and 1,
 * dimension 2k + 1 words 2 and 3. The last counter word is 0 for every
 * number made here and is left for other uses.
 *
 * SPDX-License-Identifier: MIT
 */
#include "numerics/rng.h"

#include <stddef.h>

/* Multipliers and Weyl key increments of Philox4x32 (Salmon et al. 2011,
 * section 3.3; the same constants as the Random123 distribution). */
#define PHILOX_M0 UINT32_C(0xD2511F53)
#define PHILOX_M1 UINT32_C(0xCD9E8D57)
#define PHILOX_W0 UINT32_C(0x9E3779B9)
#define PHILOX_W1 UINT32_C(0xBB67AE85)

/* 2^64 / golden ratio, odd: keeps stream 0 away from the fixed point
 * mix64(0) = 0. */
#define GOLDEN UINT64_C(0x9E3779B97F4A7C15)

/* One Philox S-box round: two 32x32->64 products, their halves permuted
 * and mixed with the other words and the round key. */
static inline void philox_round(uint32_t c[4], uint32_t k0, uint32_t k1) {
  uint64_t p0 = (uint64_t)PHILOX_M0 * c[0];
  uint64_t p1 = (uint64_t)PHILOX_M1 * c[2];
  uint32_t n0 = (uint32_t)(p1 >> 32) ^ c[1] ^ k0;
  uint32_t n1 = (uint32_t)p1;
  uint32_t n2 = (uint32_t)(p0 >> 32) ^ c[3] ^ k1;
  uint32_t n3 = (uint32_t)p0;
  c[0] = n0;
  c[1] = n1;
  c[2] = n2;
  c[3] = n3;
}

/* Ten rounds, the key bumped by the Weyl increments between rounds. */
static inline void philox10(uint32_t c[4], uint32_t k0, uint32_t k1) {
  philox_round(c, k0, k1);
  for (int r = 1; r < 10; r++) {
    k0 += PHILOX_W0;
    k1 += PHILOX_W1;
    philox_round(c, k0, k1);
  }
}

void bk_rng_philox4x32_10(const uint32_t ctr[4], const uint32_t key[2],
                      uint32_t out[4]) {
  uint32_t c[4] = {ctr[0], ctr[1], ctr[2], ctr[3]};
  philox10(c, key[0], key[1]);
  for (int i = 0; i < 4; i++)
    out[i] = c[i];
}

uint64_t bk_rng_mix64(uint64_t x) {
  x = (x ^ (x >> 30)) * UINT64_C(0xBF58476D1CE4E5B9);
  x = (x ^ (x >> 27)) * UINT64_C(0x94D049BB133111EB);
  return x ^ (x >> 31);
}

static inline uint64_t stream_key(uint64_t seed, uint64_t stream) {
  return bk_rng_mix64(seed ^ bk_rng_mix64(stream ^ GOLDEN));
}

/* The block for (key, index, pair) as two 64-bit halves: half 0 belongs to
 * dimension 2 * pair, half 1 to 2 * pair + 1. */
static inline void block(uint64_t key, uint64_t index, uint32_t pair,
                         uint64_t half[2]) {
  uint32_t c[4] = {(uint32_t)index, (uint32_t)(index >> 32), pair, 0};
  philox10(c, (uint32_t)key, (uint32_t)(key >> 32));
  half[0] = (uint64_t)c[0] | (uint64_t)c[1] << 32;
  half[1] = (uint64_t)c[2] | (uint64_t)c[3] << 32;
}

/* Midpoint of one of 2^52 cells: exact in double, in [2^-53, 1 - 2^-53]. */
static inline double to_u01(uint64_t bits) {
  return ((double)(bits >> 12) + 0.5) * 0x1p-52;
}

uint64_t bk_rng_bits(uint64_t seed, uint64_t stream, uint64_t index,
                     uint32_t dim) {
  uint64_t half[2];
  block(stream_key(seed, stream), index, dim >> 1, half);
  return half[dim & 1];
}

double bk_rng_u01(uint64_t seed, uint64_t stream, uint64_t index,
                  uint32_t dim) {
  return to_u01(bk_rng_bits(seed, stream, index, dim));
}

/* out[k] = the uniform of (key, index, dim + k) for k < n. */
static inline void fill(uint64_t key, uint64_t index, uint32_t dim, uint32_t n,
                        double *out) {
  uint64_t half[2];
  uint32_t k = 0;
  if (n > 0 && (dim & 1)) {
    block(key, index, dim >> 1, half);
    out[k++] = to_u01(half[1]);
  }
  for (; k + 1 < n; k += 2) {
    block(key, index, (dim + k) >> 1, half);
    out[k] = to_u01(half[0]);
    out[k + 1] = to_u01(half[1]);
  }
  if (k < n) {
    block(key, index, (dim + k) >> 1, half);
    out[k] = to_u01(half[0]);
  }
}

void bk_rng_u01_fill(uint64_t seed, uint64_t stream, uint64_t index,
                     uint32_t dim, uint32_t n, double *out) {
  fill(stream_key(seed, stream), index, dim, n, out);
}

uint64_t bk_rng_key(uint64_t seed, uint64_t stream) {
  return stream_key(seed, stream);
}

void bk_rng_u01_rows(uint64_t key, uint64_t first, size_t count, uint32_t dim,
                     uint32_t n, double *out) {
  for (size_t i = 0; i < count; i++)
    fill(key, first + i, dim, n, out + i * n);
}

/* FNV-1a 64 (Fowler, Noll & Vo; offset basis and prime from the FNV
 * specification) then mix64, whose avalanche FNV lacks in its top bits. */
uint64_t bk_rng_stream(const char *label) {
  uint64_t h = UINT64_C(0xCBF29CE484222325);
  for (const unsigned char *p = (const unsigned char *)label; *p; p++) {
    h ^= *p;
    h *= UINT64_C(0x100000001B3);
  }
  return bk_rng_mix64(h);
}
