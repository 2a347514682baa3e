/*
 * Tests of the samplers: Sobol points and direction numbers against scipy,
 * Latin hypercube strata, the keyed permutation, the net properties that
 * Owen scrambling preserves, randomisation across replicates, the open
 * interval and argument checks.
 *
 * SPDX-License-Identifier: MIT
 */
#include <criterion/criterion.h>
#include <inttypes.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>

#include "base/error.h"
#include "numerics/rng.h"
#include "numerics/sampler.h"

static FILE *open_fixture(const char *name) {
  const char *dir = getenv("BRINK_FIXTURES");
  cr_assert(dir, "BRINK_FIXTURES is not set");
  char path[1024];
  snprintf(path, sizeof path, "%s/%s", dir, name);
  FILE *f = fopen(path, "r");
  cr_assert(f, "cannot open %s", path);
  return f;
}

/* ---- Sobol against scipy -------------------------------------------- */

/* tests/fixtures/ref_sobol.txt from tests/ref/gen_sobol.py:
 * scipy.stats.qmc.Sobol(scramble=False, bits=32) of Debian's python3-scipy
 * (Joe & Kuo 2008, new-joe-kuo-6.21201). scipy's position pos is point
 * pos ^ (pos >> 1) (Gray-code order); the first point is the origin. */
Test(sampler, sobol_raw_matches_scipy_bit_for_bit) {
  FILE *f = open_fixture("ref_sobol.txt");
  char line[1024];
  int npoint = 0, ndirection = 0;
  while (fgets(line, sizeof line, f)) {
    char *p = line, *end;
    if (strncmp(p, "point ", 6) == 0) {
      uint64_t pos = strtoull(p + 6, &end, 10);
      uint32_t first = (uint32_t)strtoul(end, &end, 10);
      uint32_t count = (uint32_t)strtoul(end, &end, 10);
      for (uint32_t k = 0; k < count; k++) {
        uint32_t want = (uint32_t)strtoull(end, &end, 10);
        uint32_t got = bk_sampler_sobol_raw(pos ^ (pos >> 1), first + k);
        cr_assert_eq(got, want, "position %" PRIu64 " dim %u: %u, scipy %u",
                     pos, first + k, got, want);
      }
      npoint++;
    } else if (strncmp(p, "direction ", 10) == 0) {
      uint32_t dim = (uint32_t)strtoul(p + 10, &end, 10);
      for (int j = 0; j < 32; j++) {
        uint32_t want = (uint32_t)strtoull(end, &end, 10);
        uint32_t got = bk_sampler_sobol_raw(UINT64_C(1) << j, dim);
        cr_assert_eq(got, want, "dim %u v_%d: %u, scipy %u", dim, j, got, want);
      }
      ndirection++;
    }
  }
  fclose(f);
  cr_expect_eq(npoint, 1024 + 64 + 64);
  cr_expect_eq(ndirection, 57);
}

/* Point i is the xor of the direction numbers of its set bits, so the
 * sequence is linear over GF(2) in the index. */
Test(sampler, sobol_raw_is_linear_in_the_index) {
  const uint32_t dims[] = {0, 1, 2, 17, 999, 21200};
  for (size_t d = 0; d < 6; d++)
    for (uint64_t a = 1; a < 5000000000u; a = a * 7 + 3) {
      uint64_t b = a * 2654435761u & 0xffffffffu;
      cr_assert_eq(bk_sampler_sobol_raw(a ^ b, dims[d]),
                   bk_sampler_sobol_raw(a, dims[d]) ^ bk_sampler_sobol_raw(b, dims[d]));
    }
}

Test(sampler, unscrambled_sobol_points_are_raw_values_off_the_edge) {
  bk_sampler_t s;
  cr_assert_eq(bk_sampler_init(&s, BK_SAMPLER_SOBOL, 1, 2, 5, 64, 0), 0);
  double x[5];
  for (uint64_t i = 0; i < 64; i++) {
    bk_sampler_point(&s, i, x);
    for (uint32_t d = 0; d < 5; d++)
      cr_expect_eq(x[d], bk_sampler_sobol_raw(i, d) * 0x1p-32 + 0x1p-53);
  }
  bk_sampler_point(&s, 0, x);
  cr_expect_eq(x[0], 0x1p-53, "the origin moved just inside");
}

/* Points of a sampler use byte tables for the first 256 dimensions and
 * the bit loop above: both agree with bk_sampler_sobol_raw, including the chunk
 * that straddles dimension 256. */
Test(sampler, sobol_points_agree_with_raw_values_in_every_dimension) {
  enum { ND = 300 };
  bk_sampler_t s;
  cr_assert_eq(bk_sampler_init(&s, BK_SAMPLER_SOBOL, 1, 2, ND, 0, 0), 0);
  double x[ND];
  const uint64_t idx[] = {
      0, 1, 255, 256, 65535, 123456789, UINT32_MAX, (UINT64_C(1) << 32) + 5};
  for (size_t a = 0; a < 8; a++) {
    bk_sampler_point(&s, idx[a], x);
    for (uint32_t d = 0; d < ND; d++)
      cr_assert_eq(x[d], bk_sampler_sobol_raw(idx[a], d) * 0x1p-32 + 0x1p-53,
                   "index %" PRIu64 " dim %u", idx[a], d);
  }
  cr_expect_eq(bk_sampler_sobol_raw((UINT64_C(1) << 32) + 5, 7), bk_sampler_sobol_raw(5, 7),
               "the index is taken modulo 2^32");
}

/* ---- Keyed permutation ---------------------------------------------- */

static void check_bijection(uint64_t n, uint64_t key) {
  static unsigned char seen[200000];
  cr_assert_leq(n, sizeof seen);
  memset(seen, 0, n);
  for (uint64_t i = 0; i < n; i++) {
    uint64_t p = bk_sampler_permute(i, n, key);
    cr_assert_lt(p, n, "n %" PRIu64 " key %" PRIx64 ": %" PRIu64, n, key, p);
    cr_assert_eq(seen[p], 0, "n %" PRIu64 " key %" PRIx64 ": %" PRIu64 " twice",
                 n, key, p);
    seen[p] = 1;
  }
}

Test(sampler, permute_is_a_bijection_for_every_n_and_key) {
  const uint64_t keys[] = {
      0, 1, 2, UINT64_MAX, UINT64_C(0x123456789abcdef0), bk_rng_stream("lhs")};
  for (size_t k = 0; k < 6; k++) {
    for (uint64_t n = 1; n <= 300; n++)
      check_bijection(n, keys[k]);
    const uint64_t big[] = {1000,  1023,  1024,   1025,  65535,
                            65536, 65537, 100003, 131072};
    for (size_t b = 0; b < 9; b++)
      check_bijection(big[b], keys[k]);
  }
  for (uint64_t key = 0; key < 2000; key++)
    check_bijection(37, key);
}

/* Above 2^32 a full check is out of reach: check range and that a sample
 * of indices has distinct images. */
static int cmp_u64(const void *a, const void *b) {
  uint64_t x = *(const uint64_t *)a, y = *(const uint64_t *)b;
  return (x > y) - (x < y);
}

Test(sampler, permute_handles_64_bit_sizes) {
  const uint64_t ns[] = {(UINT64_C(1) << 32) + 1, UINT64_C(1) << 40,
                         (UINT64_C(1) << 63) + 5, UINT64_MAX};
  static uint64_t img[4096];
  for (size_t a = 0; a < 4; a++) {
    for (size_t i = 0; i < 4096; i++) {
      uint64_t idx = i < 2048 ? i : ns[a] - 1 - (i - 2048) * 977;
      img[i] = bk_sampler_permute(idx, ns[a], 99);
      cr_assert_lt(img[i], ns[a]);
    }
    qsort(img, 4096, sizeof img[0], cmp_u64);
    for (size_t i = 1; i < 4096; i++)
      cr_assert_neq(img[i], img[i - 1]);
  }
}

/* Over keys, the strata (perm(i), perm(i + 1), perm(i + 2)) of three
 * consecutive indices are uniform over the n (n - 1) (n - 2) ordered
 * triples: the chi-square statistic over 100 expected counts per triple is
 * within 5 sd of its mean (deterministic: keys 0, 1, 2, ...). */
Test(sampler, permute_gives_uniform_triples_over_keys) {
  const int ns[] = {9, 12, 33};
  for (int a = 0; a < 3; a++) {
    int n = ns[a], t = n * (n - 1) * (n - 2);
    long N = 100L * t;
    long *count = calloc((size_t)n * n * n, sizeof *count);
    cr_assert(count);
    for (long key = 0; key < N; key++) {
      uint64_t i = (uint64_t)key * 2654435761u % (uint64_t)(n - 2);
      uint64_t x = bk_sampler_permute(i, n, (uint64_t)key);
      uint64_t y = bk_sampler_permute(i + 1, n, (uint64_t)key);
      uint64_t z = bk_sampler_permute(i + 2, n, (uint64_t)key);
      count[(x * n + y) * n + z]++;
    }
    double e = (double)N / t, chi2 = 0;
    for (int x = 0; x < n; x++)
      for (int y = 0; y < n; y++)
        for (int z = 0; z < n; z++)
          if (x != y && y != z && x != z) {
            double dev = count[(x * n + y) * n + z] - e;
            chi2 += dev * dev / e;
          }
    double zscore = (chi2 - (t - 1)) / sqrt(2.0 * (t - 1));
    printf("permute n %d: triple chi-square z = %.2f\n", n, zscore);
    cr_expect_lt(fabs(zscore), 5, "n %d: z %.2f", n, zscore);
    free(count);
  }
}

/* ---- Latin hypercube ------------------------------------------------ */

/* The stratum k of x among n, decided exactly: k <= x n < k + 1, with fma
 * rounding x n - k once, so its sign is that of the exact value. */
static uint64_t stratum_of(double x, uint64_t n) {
  double nd = (double)n;
  uint64_t k = (uint64_t)(x * nd);
  if (k >= n)
    k = n - 1;
  if (k > 0 && fma(x, nd, -(double)k) < 0)
    k--;
  cr_assert(fma(x, nd, -(double)k) >= 0 && fma(x, nd, -(double)(k + 1)) < 0,
            "n %" PRIu64 ": %.17g is not in stratum %" PRIu64, n, x, k);
  return k;
}

/* Each stratum [k/n, (k+1)/n) holds exactly one point per dimension. */
static void check_lhs(uint64_t n, uint32_t ndim, uint64_t seed,
                      uint64_t stream) {
  bk_sampler_t s;
  cr_assert_eq(bk_sampler_init(&s, BK_SAMPLER_LHS, seed, stream, ndim, n, 0),
               0);
  unsigned char *seen = calloc(n * ndim, 1);
  double *x = calloc(ndim, sizeof *x);
  cr_assert(seen && x);
  for (uint64_t i = 0; i < n; i++) {
    bk_sampler_point(&s, i, x);
    for (uint32_t d = 0; d < ndim; d++) {
      cr_assert(x[d] > 0 && x[d] < 1);
      uint64_t k = stratum_of(x[d], n);
      cr_assert_eq(seen[k * ndim + d], 0,
                   "n %" PRIu64 " dim %u: stratum %" PRIu64 " twice", n, d, k);
      seen[k * ndim + d] = 1;
    }
  }
  free(seen);
  free(x);
}

Test(sampler, lhs_uses_every_stratum_once_per_dimension) {
  const uint64_t ns[] = {1, 2, 7, 1000, 100003};
  for (size_t a = 0; a < 5; a++) {
    check_lhs(ns[a], 3, 7301, 0);
    check_lhs(ns[a], 1, 1, 5);
  }
  check_lhs(64, 40, 3, 3);
  check_lhs(1024, 2, UINT64_MAX, bk_rng_stream("lhs/r2"));
}

/* With n = 2^40 + 1 the jitter keeps only about 12 bits beside the stratum
 * number and (k + u) / n often rounds onto an edge: each point must still
 * lie strictly inside its own stratum, distinct points in distinct strata
 * (checked for 20000 points at both ends of the design). */
Test(sampler, lhs_points_stay_inside_their_stratum_for_large_n) {
  enum { M = 20000, ND = 3 };
  uint64_t n = (UINT64_C(1) << 40) + 1;
  bk_sampler_t s;
  cr_assert_eq(bk_sampler_init(&s, BK_SAMPLER_LHS, 9, 9, ND, n, 0), 0);
  static uint64_t k[ND][M];
  double x[ND];
  for (uint64_t j = 0; j < M; j++) {
    uint64_t i = j < M / 2 ? j : n - 1 - (j - M / 2);
    bk_sampler_point(&s, i, x);
    for (int d = 0; d < ND; d++) {
      cr_assert(x[d] > 0 && x[d] < 1);
      k[d][j] = stratum_of(x[d], n);
    }
  }
  for (int d = 0; d < ND; d++) {
    qsort(k[d], M, sizeof k[d][0], cmp_u64);
    for (size_t j = 1; j < M; j++)
      cr_assert_neq(k[d][j], k[d][j - 1]);
  }
}

Test(sampler, lhs_replicates_differ_and_points_are_random_access) {
  bk_sampler_t a, b;
  cr_assert_eq(bk_sampler_init(&a, BK_SAMPLER_LHS, 5, 1, 3, 100, 0), 0);
  cr_assert_eq(bk_sampler_init(&b, BK_SAMPLER_LHS, 5, 2, 3, 100, 0), 0);
  double fwd[100][3], x[3], y[3];
  for (uint64_t i = 0; i < 100; i++)
    bk_sampler_point(&a, i, fwd[i]);
  int same = 0;
  for (uint64_t i = 100; i-- > 0;) {
    bk_sampler_point(&a, i, x);
    bk_sampler_point(&b, i, y);
    for (int d = 0; d < 3; d++) {
      cr_assert_eq(x[d], fwd[i][d], "order of evaluation changed a point");
      same += x[d] == y[d];
    }
  }
  cr_expect_eq(same, 0);
}

/* Recorded studies resume bit for bit only if every LHS coordinate stays a
 * pure function of (seed, stream, npoints, index, dim) across versions.
 * The values below were computed by brink's sampler as of commit f746bab
 * and are pinned here: a change of the permutation, the jitter or the
 * placement in the stratum shows up as a mismatch. The cases cover one
 * stratum (the jitter alone), the 8-round permutation of small designs,
 * the 4-round one, cycle walking for n just above a power of two, large n
 * where (k + u) / n keeps few bits of the jitter, a point where it was
 * moved off a stratum edge (n = 2^50 + 3, index 22), and more dimensions
 * than one chunk of the sampler. */
Test(sampler, lhs_values_are_pinned) {
  static const struct {
    uint64_t seed, n, index;
    const char *stream;
    uint32_t ndim;
    double x[11];
  } c[] = {
      {7301,
       1,
       0,
       "lhs/r0",
       3,
       {0x1.d2420ab691f84p-3, 0x1.2a166b826998ep-2, 0x1.26d78f00bf277p-1}},
      {7301,
       7,
       5,
       "lhs/r0",
       3,
       {0x1.48b5a409b8736p-2, 0x1.93479f916ff71p-2, 0x1.ef3f83858563ap-2}},
      {1,
       1000,
       999,
       "lhs/r3",
       3,
       {0x1.bf764430fbf9ep-2, 0x1.29861c9bd05dp-1, 0x1.cd7c0fda161f2p-2}},
      {1,
       125000,
       77777,
       "lhs/r7",
       3,
       {0x1.1e68e437f24dfp-2, 0x1.2133cdd873f92p-3, 0x1.7a2742130b642p-2}},
      {42,
       (UINT64_C(1) << 40) + 1,
       (UINT64_C(1) << 40) - 3,
       "lhs/r1",
       3,
       {0x1.ffcd0e1501a01p-1, 0x1.f1965b15637abp-1, 0x1.eb5b8bbc33ea6p-1}},
      {42,
       (UINT64_C(1) << 50) + 3,
       22,
       "lhs/r4",
       3,
       {0x1.054f7ea843a21p-1, 0x1.d4be4f6d544fcp-3, 0x1.3ed7304425f02p-1}},
      {UINT64_MAX,
       100,
       17,
       "lhs/r2",
       11,
       {0x1.b9ab8c8f193b4p-1, 0x1.7312408e9c4fbp-2, 0x1.36ba0d09ffdd4p-1,
        0x1.f2d7b1792857cp-1, 0x1.e07450843b29dp-2, 0x1.7a1df34286856p-2,
        0x1.e3bf7cfb1b1a3p-1, 0x1.7c9b6df7e02f3p-2, 0x1.a8e6c5aaba74ep-2,
        0x1.f801db367e4e3p-1, 0x1.ef94963ccf2b7p-1}},
  };
  for (size_t a = 0; a < sizeof c / sizeof c[0]; a++) {
    bk_sampler_t s;
    cr_assert_eq(bk_sampler_init(&s, BK_SAMPLER_LHS, c[a].seed,
                                 bk_rng_stream(c[a].stream), c[a].ndim, c[a].n,
                                 0),
                 0);
    double x[11];
    bk_sampler_point(&s, c[a].index, x);
    for (uint32_t d = 0; d < c[a].ndim; d++)
      cr_expect_eq(x[d], c[a].x[d], "case %zu dim %u: %a, pinned %a", a, d,
                   x[d], c[a].x[d]);
  }
  /* Pinned images of the permutation itself (same origin). */
  cr_expect_eq(bk_sampler_permute(1, 37, 12345), 14);
  cr_expect_eq(bk_sampler_permute(36, 37, UINT64_MAX), 24);
  cr_expect_eq(bk_sampler_permute(1, 131073, 12345), 11650);
  cr_expect_eq(bk_sampler_permute(131072, 131073, UINT64_MAX), 51639);
  cr_expect_eq(bk_sampler_permute(1, UINT64_C(1) << 53, 12345),
               UINT64_C(1864413280473036));
}

/* FNV-1a 64 over the bit patterns of doubles. */
static uint64_t digest_doubles(uint64_t h, const double *x, size_t n) {
  for (size_t i = 0; i < n; i++) {
    uint64_t b;
    memcpy(&b, &x[i], sizeof b);
    for (int k = 0; k < 8; k++) {
      h ^= b >> (8 * k) & 255;
      h *= UINT64_C(0x100000001B3);
    }
  }
  return h;
}

/* Whole designs pinned by a digest of all their coordinates (computed as
 * for lhs_values_are_pinned): every n from 1 to 64 in 1 to 13 dimensions,
 * point by point and as one block, and 4000 points from both ends of three
 * larger designs: n = 2^12 + 1, where half the indices need cycle walking,
 * n = 125000 and n = 2^50 + 3, where about one coordinate in 25 is moved
 * off a stratum edge. */
Test(sampler, lhs_designs_are_pinned) {
  const uint64_t fnv = UINT64_C(0xCBF29CE484222325);
  uint64_t h = fnv, hb = fnv;
  static double x[64 * 13];
  for (uint64_t n = 1; n <= 64; n++) {
    bk_sampler_t s;
    uint32_t nd = 1 + (uint32_t)(n % 13);
    cr_assert_eq(bk_sampler_init(&s, BK_SAMPLER_LHS, n * 31, n, nd, n, 0), 0);
    for (uint64_t i = 0; i < n; i++) {
      bk_sampler_point(&s, i, x);
      h = digest_doubles(h, x, nd);
    }
    bk_sampler_points(&s, 0, n, x);
    hb = digest_doubles(hb, x, n * nd);
  }
  cr_expect_eq(h, UINT64_C(0xba973c8926b63e14),
               "small designs: digest %016" PRIx64, h);
  cr_expect_eq(hb, h, "small designs in blocks: digest %016" PRIx64, hb);
  const uint64_t big[] = {4097, 125000, (UINT64_C(1) << 50) + 3};
  const uint64_t want[] = {UINT64_C(0x27711e4d1fb5d091),
                           UINT64_C(0xeb8ad1d48edd1a45),
                           UINT64_C(0xe29dad7a6d649c0a)};
  for (size_t a = 0; a < 3; a++) {
    bk_sampler_t s;
    cr_assert_eq(bk_sampler_init(&s, BK_SAMPLER_LHS, 7301,
                                 bk_rng_stream("lhs/r0") + a, 3, big[a], 0),
                 0);
    h = fnv;
    for (uint64_t j = 0; j < 4000; j++) {
      uint64_t i = j < 2000 ? j : big[a] - 1 - (j - 2000);
      bk_sampler_point(&s, i, x);
      h = digest_doubles(h, x, 3);
    }
    cr_expect_eq(h, want[a], "n %" PRIu64 ": digest %016" PRIx64, big[a], h);
  }
}

/* bk_sampler_points gives the rows bk_sampler_point gives, for every kind,
 * block sizes from 1 to past the sampler's internal block of rows, and
 * blocks that start anywhere (the last one ending at the design's end). */
Test(sampler, points_in_blocks_equal_single_points) {
  enum { ND = 5, MAXB = 700 };
  const bk_sampler_kind_t kinds[] = {BK_SAMPLER_RANDOM, BK_SAMPLER_LHS,
                                     BK_SAMPLER_SOBOL};
  const uint64_t ns[] = {1, 6, 1000, 4097};
  const size_t sizes[] = {1, 2, 3, 255, 256, 257, 511, 700};
  static double rows[MAXB * ND];
  double x[ND];
  for (size_t a = 0; a < 3; a++)
    for (size_t b = 0; b < 4; b++) {
      bk_sampler_t s;
      cr_assert_eq(bk_sampler_init(&s, kinds[a], 17, 3, ND, ns[b], 1), 0);
      for (size_t c = 0; c < 8; c++) {
        size_t m = sizes[c] < ns[b] ? sizes[c] : (size_t)ns[b];
        const uint64_t starts[] = {0, (ns[b] - m) / 2, ns[b] - m};
        for (size_t t = 0; t < 3; t++) {
          bk_sampler_points(&s, starts[t], m, rows);
          for (size_t i = 0; i < m; i++) {
            bk_sampler_point(&s, starts[t] + i, x);
            for (uint32_t d = 0; d < ND; d++)
              cr_assert_eq(rows[i * ND + d], x[d],
                           "kind %zu n %" PRIu64 " block %zu at %" PRIu64
                           ": row %zu dim %u",
                           a, ns[b], m, starts[t], i, d);
          }
        }
      }
    }
}

/* ---- Scrambled Sobol ------------------------------------------------ */

/* For n = 2^m points, each 1-D elementary interval [j 2^-k, (j+1) 2^-k)
 * holds n / 2^k points (a (0, m, 1)-net in every coordinate), and dims 0
 * and 1 form a (0, m, 2)-net: every box 2^-a x 2^-b with a + b = m holds
 * exactly one point (Sobol 1967; Owen 1995 shows scrambling keeps the net
 * property). Counting by floor(x 2^k) is exact in binary floating point. */
static void check_nets(const bk_sampler_t *s, unsigned m) {
  uint64_t n = UINT64_C(1) << m;
  uint32_t nd = s->ndim;
  double *x = calloc(n * nd, sizeof *x);
  unsigned *count = calloc(n, sizeof *count);
  cr_assert(x && count);
  for (uint64_t i = 0; i < n; i++) {
    bk_sampler_point(s, i, &x[i * nd]);
    for (uint32_t d = 0; d < nd; d++)
      cr_assert(x[i * nd + d] > 0 && x[i * nd + d] < 1);
  }
  for (uint32_t d = 0; d < nd; d++)
    for (unsigned k = 0; k <= m; k++) {
      memset(count, 0, n * sizeof *count);
      for (uint64_t i = 0; i < n; i++)
        count[(uint64_t)ldexp(x[i * nd + d], (int)k)]++;
      for (uint64_t j = 0; j < (UINT64_C(1) << k); j++)
        cr_assert_eq(count[j], n >> k, "dim %u interval %" PRIu64 "/2^%u", d, j,
                     k);
    }
  for (unsigned a = 0; a <= m; a++) {
    unsigned b = m - a;
    memset(count, 0, n * sizeof *count);
    for (uint64_t i = 0; i < n; i++) {
      uint64_t p = (uint64_t)ldexp(x[i * nd], (int)a);
      uint64_t q = (uint64_t)ldexp(x[i * nd + 1], (int)b);
      count[p << b | q]++;
    }
    for (uint64_t j = 0; j < n; j++)
      cr_assert_eq(count[j], 1, "box %" PRIu64 " of 2^-%u x 2^-%u", j, a, b);
  }
  free(x);
  free(count);
}

Test(sampler, scrambled_sobol_keeps_the_net_properties) {
  bk_sampler_t s;
  for (uint64_t stream = 0; stream < 4; stream++) {
    cr_assert_eq(
        bk_sampler_init(&s, BK_SAMPLER_SOBOL, 7301, stream, 8, 4096, 1), 0);
    check_nets(&s, 12);
  }
  cr_assert_eq(bk_sampler_init(&s, BK_SAMPLER_SOBOL, 1, 1, 2, 2, 1), 0);
  check_nets(&s, 1);
  cr_assert_eq(bk_sampler_init(&s, BK_SAMPLER_SOBOL, 0, 0, 3, 1024, 0), 0);
  check_nets(&s, 10);
}

/* Owen-scrambled points are uniform on the cube: over 4000 replicates the
 * coordinates of one point have mean 1/2 (sd of the mean 1/sqrt(12 R)) and
 * variance 1/12 (sd of the variance about 1/sqrt(180 R)); bounds 5 sd. */
Test(sampler, scrambled_sobol_coordinates_are_uniform_over_replicates) {
  enum { R = 4000, ND = 6 };
  const uint64_t idx[] = {0, 1, 777};
  for (int a = 0; a < 3; a++) {
    double sum[ND] = {0}, sum2[ND] = {0}, x[ND];
    for (uint64_t r = 0; r < R; r++) {
      bk_sampler_t s;
      cr_assert_eq(bk_sampler_init(&s, BK_SAMPLER_SOBOL, 11, r, ND, 1024, 1),
                   0);
      bk_sampler_point(&s, idx[a], x);
      for (int d = 0; d < ND; d++) {
        sum[d] += x[d];
        sum2[d] += (x[d] - 0.5) * (x[d] - 0.5);
      }
    }
    for (int d = 0; d < ND; d++) {
      double mean = sum[d] / R, var = sum2[d] / R - (mean - 0.5) * (mean - 0.5);
      cr_expect_lt(fabs(mean - 0.5), 5 / sqrt(12.0 * R),
                   "point %" PRIu64 " dim %d: mean %.4f", idx[a], d, mean);
      cr_expect_lt(fabs(var - 1 / 12.0), 5 / sqrt(180.0 * R),
                   "point %" PRIu64 " dim %d: variance %.4f", idx[a], d, var);
    }
  }
}

Test(sampler, scrambled_sobol_replicates_differ) {
  bk_sampler_t a, b;
  cr_assert_eq(bk_sampler_init(&a, BK_SAMPLER_SOBOL, 5, 1, 4, 256, 1), 0);
  cr_assert_eq(bk_sampler_init(&b, BK_SAMPLER_SOBOL, 5, 2, 4, 256, 1), 0);
  int same = 0;
  double x[4], y[4];
  for (uint64_t i = 0; i < 256; i++) {
    bk_sampler_point(&a, i, x);
    bk_sampler_point(&b, i, y);
    for (int d = 0; d < 4; d++)
      same += x[d] == y[d];
  }
  cr_expect_eq(same, 0);
  /* Another seed, same stream: also different. */
  cr_assert_eq(bk_sampler_init(&b, BK_SAMPLER_SOBOL, 6, 1, 4, 256, 1), 0);
  bk_sampler_point(&a, 0, x);
  bk_sampler_point(&b, 0, y);
  cr_expect_neq(x[0], y[0]);
}

/* Randomised QMC integrates a smooth function far better than Monte
 * Carlo: the integral of x0 x1 x2 over the cube is 1/8; with 4096
 * scrambled Sobol points the error is about 1e-5 (Monte Carlo: 1.3e-3). */
Test(sampler, scrambled_sobol_integrates_a_product) {
  bk_sampler_t s;
  double worst = 0;
  for (uint64_t r = 0; r < 8; r++) {
    cr_assert_eq(bk_sampler_init(&s, BK_SAMPLER_SOBOL, 2024, r, 3, 4096, 1), 0);
    double sum = 0, x[3];
    for (uint64_t i = 0; i < 4096; i++) {
      bk_sampler_point(&s, i, x);
      sum += x[0] * x[1] * x[2];
    }
    worst = fmax(worst, fabs(sum / 4096 - 0.125));
  }
  printf("sobol: worst error of 8 replicates %.2e\n", worst);
  cr_expect_lt(worst, 2e-4);
}

Test(sampler, top_sobol_dimension_is_usable) {
  bk_sampler_t s;
  cr_assert_eq(
      bk_sampler_init(&s, BK_SAMPLER_SOBOL, 3, 4, BK_SOBOL_MAXDIM, 16, 1), 0);
  double *x = calloc(BK_SOBOL_MAXDIM, sizeof *x);
  cr_assert(x);
  unsigned count[2] = {0, 0};
  for (uint64_t i = 0; i < 16; i++) {
    bk_sampler_point(&s, i, x);
    for (uint32_t d = 0; d < BK_SOBOL_MAXDIM; d++)
      cr_assert(x[d] > 0 && x[d] < 1, "dim %u: %.17g", d, x[d]);
    count[x[BK_SOBOL_MAXDIM - 1] >= 0.5]++;
  }
  cr_expect_eq(count[0], 8);
  cr_expect_eq(count[1], 8);
  free(x);
}

/* ---- Random and common behaviour ------------------------------------ */

Test(sampler, random_points_are_the_counter_based_uniforms) {
  bk_sampler_t s;
  cr_assert_eq(bk_sampler_init(&s, BK_SAMPLER_RANDOM, 8, 9, 5, 0, 1), 0);
  cr_expect_eq(s.scramble, 0);
  double x[5];
  for (uint64_t i = 0; i < 100; i++) {
    bk_sampler_point(&s, i * 1000003, x);
    for (uint32_t d = 0; d < 5; d++)
      cr_assert_eq(x[d], bk_rng_u01(8, 9, i * 1000003, d));
  }
}

Test(sampler, init_rejects_invalid_arguments) {
  bk_sampler_t s;
  memset(&s, 0xab, sizeof s);
  bk_sampler_t before = s;
  cr_expect_eq(bk_sampler_init(&s, BK_SAMPLER_RANDOM, 1, 1, 0, 10, 0),
               BK_EINVAL);
  cr_expect_eq(bk_sampler_init(&s, BK_SAMPLER_LHS, 1, 1, 2, 0, 0), BK_EINVAL);
  cr_expect_eq(
      bk_sampler_init(&s, BK_SAMPLER_LHS, 1, 1, 2, (UINT64_C(1) << 53) + 1, 0),
      BK_EINVAL);
  cr_expect_eq(
      bk_sampler_init(&s, BK_SAMPLER_SOBOL, 1, 1, BK_SOBOL_MAXDIM + 1, 8, 1),
      BK_EINVAL);
  cr_expect_eq(bk_sampler_init(&s, BK_SAMPLER_SOBOL, 1, 1, 2,
                               (UINT64_C(1) << 32) + 1, 1),
               BK_EINVAL);
  cr_expect_eq(bk_sampler_init(&s, (bk_sampler_kind_t)42, 1, 1, 2, 8, 1),
               BK_EINVAL);
  cr_expect(memcmp(&s, &before, sizeof s) == 0, "failed init changed *s");
  cr_expect_eq(
      bk_sampler_init(&s, BK_SAMPLER_SOBOL, 1, 1, 2, UINT64_C(1) << 32, 1), 0);
  cr_expect_eq(bk_sampler_init(&s, BK_SAMPLER_LHS, 1, 1, 1, 1, 0), 0);
}

/* Throughput of 3-dimensional points, printed only: never asserted. */
Test(sampler, throughput_is_printed) {
  const char *names[] = {"random", "lhs", "sobol (scrambled)"};
  const bk_sampler_kind_t kinds[] = {BK_SAMPLER_RANDOM, BK_SAMPLER_LHS,
                                     BK_SAMPLER_SOBOL};
  enum { N = 1000000 };
  for (int a = 0; a < 3; a++) {
    bk_sampler_t s;
    cr_assert_eq(bk_sampler_init(&s, kinds[a], 1, 2, 3, N, 1), 0);
    double x[3], acc = 0;
    clock_t t0 = clock();
    for (uint64_t i = 0; i < N; i++) {
      bk_sampler_point(&s, i, x);
      acc += x[0] + x[1] + x[2];
    }
    double sec = (double)(clock() - t0) / CLOCKS_PER_SEC;
    printf("sampler %s: %.2f million 3-d points per second (mean %.4f)\n",
           names[a], sec > 0 ? N / sec / 1e6 : 0.0, acc / (3.0 * N));
  }
}
