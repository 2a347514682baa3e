/*
 * Tests of the counter-based generator: Philox4x32-10 known answers, the
 * documented counter and key layout, the open interval, purity and the
 * separation of seeds, streams, indices and dimensions.
 *
 * SPDX-License-Identifier: MIT
 */
#include <criterion/criterion.h>
#include <inttypes.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <time.h>

#include "numerics/rng.h"

/* Known-answer vectors of the Random123 distribution (kat_vectors,
 * philox4x32 R=10) accompanying Salmon et al. (2011), SC11; from memory,
 * and reproduced exactly by this implementation, which was written from the
 * paper's description of the round function. numpy.random.Philox is the
 * 4x64 variant and cannot serve as a reference here. */
Test(rng, philox4x32_10_matches_known_answers) {
  static const struct {
    uint32_t ctr[4], key[2], out[4];
  } kat[] = {
      {{0, 0, 0, 0}, {0, 0}, {0x6627e8d5, 0xe169c58d, 0xbc57ac4c, 0x9b00dbd8}},
      {{0xffffffff, 0xffffffff, 0xffffffff, 0xffffffff},
       {0xffffffff, 0xffffffff},
       {0x408f276d, 0x41c83b0e, 0xa20bc7c6, 0x6d5451fd}},
      {{0x243f6a88, 0x85a308d3, 0x13198a2e, 0x03707344},
       {0xa4093822, 0x299f31d0},
       {0xd16cfe09, 0x94fdcceb, 0x5001e420, 0x24126ea1}},
  };
  for (size_t i = 0; i < sizeof kat / sizeof kat[0]; i++) {
    uint32_t out[4];
    bk_rng_philox4x32_10(kat[i].ctr, kat[i].key, out);
    for (int j = 0; j < 4; j++)
      cr_expect_eq(out[j], kat[i].out[j], "vector %zu word %d: %08x", i, j,
                   out[j]);
  }
}

/* splitmix64 from seed 1234567 (Vigna, splitmix64.c: state += golden, then
 * the finaliser); the first five outputs, from memory. */
Test(rng, mix64_is_the_splitmix64_finaliser) {
  static const uint64_t want[5] = {
      UINT64_C(6457827717110365317), UINT64_C(3203168211198807973),
      UINT64_C(9817491932198370423), UINT64_C(4593380528125082431),
      UINT64_C(16408922859458223821)};
  uint64_t x = 1234567;
  for (int i = 0; i < 5; i++) {
    x += UINT64_C(0x9E3779B97F4A7C15);
    cr_expect_eq(bk_rng_mix64(x), want[i], "output %d", i);
  }
}

/* FNV-1a 64 test values from the FNV specification (Fowler, Noll & Vo,
 * draft-eastlake-fnv): "" -> cbf29ce484222325, "a" -> af63dc4c8601ec8c,
 * "foobar" -> 85944171f73967e8; from memory. */
Test(rng, stream_is_fnv1a_then_mix64) {
  cr_expect_eq(bk_rng_stream(""), bk_rng_mix64(UINT64_C(0xcbf29ce484222325)));
  cr_expect_eq(bk_rng_stream("a"), bk_rng_mix64(UINT64_C(0xaf63dc4c8601ec8c)));
  cr_expect_eq(bk_rng_stream("foobar"),
               bk_rng_mix64(UINT64_C(0x85944171f73967e8)));
  cr_expect_neq(bk_rng_stream("lhs/r1"), bk_rng_stream("lhs/r2"));
  cr_expect_neq(bk_rng_stream("ab"), bk_rng_stream("ba"));
}

/* The layout documented in rng.h and rng.c, checked against the block
 * function itself. */
Test(rng, bits_follow_the_documented_layout) {
  const uint64_t seeds[] = {0, 1, 7301, UINT64_MAX};
  const uint64_t streams[] = {0, 3, UINT64_C(0x123456789abcdef)};
  const uint64_t indices[] = {0, 1, UINT64_C(0xfffffffff), UINT64_MAX};
  const uint32_t dims[] = {0, 1, 2, 5, UINT32_MAX};
  for (size_t a = 0; a < 4; a++)
    for (size_t b = 0; b < 3; b++)
      for (size_t c = 0; c < 4; c++)
        for (size_t d = 0; d < 5; d++) {
          uint64_t k = bk_rng_mix64(
              seeds[a] ^ bk_rng_mix64(streams[b] ^ 0x9E3779B97F4A7C15u));
          uint32_t key[2] = {(uint32_t)k, (uint32_t)(k >> 32)};
          uint32_t ctr[4] = {(uint32_t)indices[c], (uint32_t)(indices[c] >> 32),
                             dims[d] >> 1, 0};
          uint32_t out[4];
          bk_rng_philox4x32_10(ctr, key, out);
          int h = dims[d] & 1;
          uint64_t want = (uint64_t)out[2 * h] | (uint64_t)out[2 * h + 1] << 32;
          cr_expect_eq(bk_rng_bits(seeds[a], streams[b], indices[c], dims[d]),
                       want);
          double u = bk_rng_u01(seeds[a], streams[b], indices[c], dims[d]);
          cr_expect_eq(u, ((double)(want >> 12) + 0.5) * 0x1p-52);
        }
}

Test(rng, u01_lies_in_the_open_unit_interval) {
  double lo = 1, hi = 0;
  for (uint64_t i = 0; i < 200000; i++) {
    double u = bk_rng_u01(42, 9, i, (uint32_t)(i % 7));
    cr_assert(u > 0 && u < 1, "index %" PRIu64 ": %.17g", i, u);
    lo = fmin(lo, u);
    hi = fmax(hi, u);
  }
  cr_expect_lt(lo, 1e-4);
  cr_expect_gt(hi, 1 - 1e-4);
  /* The extremes of the mapping, reached by all-zero and all-one bits. */
  cr_expect_eq(((double)(UINT64_C(0) >> 12) + 0.5) * 0x1p-52, 0x1p-53);
  cr_expect_eq(((double)(UINT64_MAX >> 12) + 0.5) * 0x1p-52, 1 - 0x1p-53);
}

Test(rng, u01_is_a_pure_function_of_its_arguments) {
  for (uint64_t i = 0; i < 1000; i++) {
    uint32_t d = (uint32_t)(i * 7919 % 23);
    cr_assert_eq(bk_rng_u01(5, 6, i, d), bk_rng_u01(5, 6, i, d));
    cr_assert_eq(bk_rng_bits(5, 6, i, d), bk_rng_bits(5, 6, i, d));
  }
}

Test(rng, fill_matches_single_numbers) {
  double out[9];
  for (uint32_t start = 0; start < 4; start++)
    for (uint32_t n = 0; n <= 9; n++) {
      for (uint32_t k = 0; k < 9; k++)
        out[k] = -1;
      bk_rng_u01_fill(11, 12, 13, start, n, out);
      for (uint32_t k = 0; k < n; k++)
        cr_expect_eq(out[k], bk_rng_u01(11, 12, 13, start + k),
                     "start %u n %u k %u", start, n, k);
      for (uint32_t k = n; k < 9; k++)
        cr_expect_eq(out[k], -1, "wrote past n");
    }
}

/* Rows for consecutive indices under a precomputed key are the single
 * numbers, for every start dimension and row length, and nothing past the
 * last row is written. */
Test(rng, rows_match_single_numbers) {
  double out[5 * 9 + 1];
  uint64_t key = bk_rng_key(11, 12);
  for (uint32_t dim = 0; dim < 3; dim++)
    for (uint32_t n = 1; n <= 9; n++) {
      for (size_t k = 0; k < 5 * 9 + 1; k++)
        out[k] = -1;
      bk_rng_u01_rows(key, UINT64_C(0xfffffffe), 5, dim, n, out);
      for (uint64_t i = 0; i < 5; i++)
        for (uint32_t k = 0; k < n; k++)
          cr_expect_eq(out[i * n + k],
                       bk_rng_u01(11, 12, UINT64_C(0xfffffffe) + i, dim + k),
                       "dim %u n %u row %" PRIu64 " k %u", dim, n, i, k);
      cr_expect_eq(out[5 * n], -1, "wrote past the last row");
    }
}

/* Changing any one argument changes the bits: no two of 4 x 4 x 64 x 8
 * neighbouring addresses share a value (a collision of 64-bit values among
 * 8192 would have probability about 2e-12). */
static int cmp_u64(const void *a, const void *b) {
  uint64_t x = *(const uint64_t *)a, y = *(const uint64_t *)b;
  return (x > y) - (x < y);
}

Test(rng, seeds_streams_indices_and_dims_give_distinct_bits) {
  static uint64_t v[4 * 4 * 64 * 8];
  size_t n = 0;
  for (uint64_t seed = 0; seed < 4; seed++)
    for (uint64_t stream = 0; stream < 4; stream++)
      for (uint64_t i = 0; i < 64; i++)
        for (uint32_t d = 0; d < 8; d++)
          v[n++] = bk_rng_bits(seed, stream, i, d);
  qsort(v, n, sizeof v[0], cmp_u64);
  for (size_t i = 1; i < n; i++)
    cr_assert_neq(v[i], v[i - 1]);
}

/* Moments and a chi-square test of 100 equal cells for 10^5 numbers of one
 * stream: mean 1/2 with sd 1/sqrt(12 n); the chi-square statistic has 99
 * degrees of freedom, mean 99 and sd 14, and the bound 170 is 5 sd out
 * (fixed seed, so the test is deterministic). */
Test(rng, u01_is_uniform) {
  enum { N = 100000, CELLS = 100 };
  static unsigned count[CELLS];
  double sum = 0;
  for (uint64_t i = 0; i < N; i++) {
    double u = bk_rng_u01(7301, 1, i, 3);
    sum += u;
    count[(int)(u * CELLS)]++;
  }
  double chi2 = 0, e = (double)N / CELLS;
  for (int c = 0; c < CELLS; c++)
    chi2 += (count[c] - e) * (count[c] - e) / e;
  double mean = sum / N;
  printf("u01: mean %.6f chi2(99) %.2f\n", mean, chi2);
  cr_expect_lt(fabs(mean - 0.5), 5 / sqrt(12.0 * N));
  cr_expect_lt(chi2, 170);
}

/* Sample correlations between two streams, two seeds and two dimensions of
 * the same index: each is about N(0, 1/n) for independent numbers. */
static double correlation(uint64_t sa, uint64_t ta, uint32_t da, uint64_t sb,
                          uint64_t tb, uint32_t db, int n) {
  double mx = 0, my = 0, sxy = 0, sxx = 0, syy = 0;
  for (int i = 0; i < n; i++) {
    mx += bk_rng_u01(sa, ta, (uint64_t)i, da);
    my += bk_rng_u01(sb, tb, (uint64_t)i, db);
  }
  mx /= n;
  my /= n;
  for (int i = 0; i < n; i++) {
    double x = bk_rng_u01(sa, ta, (uint64_t)i, da) - mx;
    double y = bk_rng_u01(sb, tb, (uint64_t)i, db) - my;
    sxy += x * y;
    sxx += x * x;
    syy += y * y;
  }
  return sxy / sqrt(sxx * syy);
}

Test(rng, streams_seeds_and_dims_are_uncorrelated) {
  const int n = 20000;
  double bound = 5 / sqrt((double)n);
  double r1 = correlation(1, 0, 0, 1, 1, 0, n);
  double r2 = correlation(1, 0, 0, 2, 0, 0, n);
  double r3 = correlation(1, 0, 0, 1, 0, 1, n);
  double r4 = correlation(1, 0, 0, 1, 0, 2, n);
  printf("correlations: stream %.4f seed %.4f dim+1 %.4f dim+2 %.4f\n", r1, r2,
         r3, r4);
  cr_expect_lt(fabs(r1), bound);
  cr_expect_lt(fabs(r2), bound);
  cr_expect_lt(fabs(r3), bound);
  cr_expect_lt(fabs(r4), bound);
}

/* Throughput, printed only: never asserted (the machine is shared). */
Test(rng, throughput_is_printed) {
  enum { N = 2000000 };
  double out[4], acc = 0;
  clock_t t0 = clock();
  for (uint64_t i = 0; i < N; i++) {
    bk_rng_u01_fill(1, 2, i, 0, 4, out);
    acc += out[0] + out[3];
  }
  double s = (double)(clock() - t0) / CLOCKS_PER_SEC;
  printf("rng: %.1f million blocks (2 numbers each) per second (%g)\n",
         s > 0 ? 2.0 * N / s / 1e6 : 0.0, acc);
}
