/*
 * Samplers of the unit hypercube, all random access: point `index` of a
 * design is a pure function of (kind, seed, stream, npoints, index), and no
 * design matrix is held in memory.
 *
 *  - BK_SAMPLER_RANDOM: independent uniforms from the counter-based stream.
 *  - BK_SAMPLER_LHS: Latin hypercube of `npoints` points; in each dimension
 *    point i falls in stratum perm_d(i), perm_d a keyed bijection of
 *    [0, npoints) evaluated on the fly (cycle walking as in Kensler 2013,
 *    over a keyed Feistel network; see bk_sampler_permute in sampler.c), jittered
 *    uniformly inside the stratum (McKay et al. 1979).
 *  - BK_SAMPLER_SOBOL: Sobol points by index with Joe & Kuo (2008)
 *    direction numbers (new-joe-kuo-6.21201), point i the xor of the
 *    direction numbers of the set bits of i (binary, not Gray-code, order);
 *    the index is taken modulo 2^32. With `scramble` set, hash-based Owen
 *    scrambling (Burley 2020): the index is Owen-scrambled with a key of
 *    (seed, stream), so each replicate's first 2^m points are a shuffled
 *    aligned block of 2^m Sobol points (still a net), and each coordinate
 *    with a key of (seed, stream, dim). Unscrambled point 0 is the origin
 *    (returned as 2^-53), so unscrambled designs are for tests only.
 *
 * Different `stream` values give independent randomisations (replicates).
 * Every coordinate returned lies in the open interval (0, 1).
 *
 * SPDX-License-Identifier: MIT
 */
#ifndef BK_SAMPLER_H
#define BK_SAMPLER_H

#include <stddef.h>
#include <stdint.h>

typedef enum {
  BK_SAMPLER_RANDOM,
  BK_SAMPLER_LHS,
  BK_SAMPLER_SOBOL
} bk_sampler_kind_t;

/* The largest Sobol dimension supported. */
#define BK_SOBOL_MAXDIM 21201
/* Sobol points per design: indices are 32-bit. */
#define BK_SOBOL_MAXPOINTS (UINT64_C(1) << 32)

/* Value type; valid after a successful bk_sampler_init, which sets every
 * field; the private keys are functions of the public fields, so a copy is
 * as good as the original. */
typedef struct {
  /* public, read-only */
  bk_sampler_kind_t kind;
  uint64_t seed;
  uint64_t stream;
  uint32_t ndim;
  uint64_t npoints; /* LHS: design size (required); others: informational */
  int scramble;     /* Sobol only */
  /* private, computed once by bk_sampler_init rather than per point */
  uint64_t key_u; /* Philox key of the uniforms: random points, LHS jitter */
  uint64_t key_p; /* LHS: base key of the permutations; Sobol: scrambles */
} bk_sampler_t;

/* Returns 0, or BK_EINVAL (ndim 0 or above BK_SOBOL_MAXDIM for Sobol,
 * npoints 0 or above 2^53 for LHS, npoints above 2^32 for Sobol, an unknown
 * kind), leaving *s unchanged. For Sobol it computes the direction numbers
 * of the first ndim dimensions into a process-wide table if not done yet;
 * that step is not thread-safe, so call bk_sampler_init (and bk_sampler_sobol_raw)
 * from one thread at a time; bk_sampler_point only reads the table. */
int bk_sampler_init(bk_sampler_t *s, bk_sampler_kind_t kind, uint64_t seed,
                    uint64_t stream, uint32_t ndim, uint64_t npoints,
                    int scramble);

/* Writes point `index` (ndim coordinates in (0, 1)) into `out`. For LHS
 * index < npoints. */
void bk_sampler_point(const bk_sampler_t *s, uint64_t index, double *out);

/* Writes points first, ..., first + count - 1 as rows of ndim coordinates:
 * out[i * ndim + d] is coordinate d of point first + i, the value
 * bk_sampler_point gives. Per-dimension set-up is done once per call, so
 * this is faster than a loop of bk_sampler_point. For LHS first + count <=
 * npoints. */
void bk_sampler_points(const bk_sampler_t *s, uint64_t first, size_t count,
                       double *out);

/* Unscrambled Sobol coordinate as a 32-bit integer (for tests): the xor of
 * the direction numbers of dimension `dim` (< BK_SOBOL_MAXDIM) over the set
 * bits of index mod 2^32. Grows the table like bk_sampler_init. */
uint32_t bk_sampler_sobol_raw(uint64_t index, uint32_t dim);

/* The keyed permutation of [0, n): a bijection for every key and n >= 1;
 * requires i < n. */
uint64_t bk_sampler_permute(uint64_t i, uint64_t n, uint64_t key);

#endif
