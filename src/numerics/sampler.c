/*
 * Samplers of the unit hypercube by random access: point `index` of a
 * design is computed from (kind, seed, stream, npoints, index) alone, so
 * any process computes any point and no design matrix exists (sampler.h).
 *
 *  - Random: the counter-based uniforms of rng.c, one Philox block per pair
 *    of coordinates.
 *  - Latin hypercube (McKay, Beckman & Conover 1979): coordinate d of point
 *    i lies in stratum bk_sampler_permute(i, n, key_d) of n equal strata, jittered
 *    uniformly inside it.
 *  - Sobol by index with Joe & Kuo (2008) direction numbers, optionally with
 *    hash-based Owen scrambling (Burley 2020).
 *
 * Every coordinate lies in the open interval (0, 1).
 *
 * SPDX-License-Identifier: MIT
 */
#include "numerics/sampler.h"

#include <assert.h>
#include <math.h>

#include "base/error.h"
#include "numerics/rng.h"
#include "numerics/sobol_table.h"

/* 2^64 / golden ratio: distinct multiples give distinct per-dimension keys
 * before mixing. */
#define GOLDEN UINT64_C(0x9E3779B97F4A7C15)

/* Domain tags (ASCII "bk.lhs.p", "bk.lhs.j", "bk.sobol") so that the
 * permutations, the jitter and the scrambles of one (seed, stream) are
 * unrelated to each other and to the random sampler of the same stream. */
#define TAG_LHS_PERM   UINT64_C(0x626B2E6C68732E70)
#define TAG_LHS_JITTER UINT64_C(0x626B2E6C68732E6A)
#define TAG_SOBOL      UINT64_C(0x626B2E736F626F6C)

/* LHS strata must stay distinct in double precision. */
#define LHS_MAXPOINTS (UINT64_C(1) << 53)

#define SOBOL_BITS      32
#define SOBOL_MAXPOINTS BK_SOBOL_MAXPOINTS /* 1 << SOBOL_BITS */

static uint64_t seed_stream_key(uint64_t seed, uint64_t stream, uint64_t tag) {
  return bk_rng_mix64(seed ^ bk_rng_mix64(stream ^ tag));
}

/* ---- Keyed permutation ---------------------------------------------- */

static inline uint64_t rotl64(uint64_t x, unsigned r) {
  return r ? (x << r) | (x >> (64 - r)) : x;
}

/* The bijection of [0, n) used for Latin hypercube strata: cycle walking
 * (Black & Rogaway 2002, as in Kensler 2013, Pixar Technical Memo 13-01,
 * "Correlated Multi-Jittered Sampling", function permute) over a keyed
 * bijection of b-bit integers, b the bit length of n - 1, so the walk takes
 * fewer than two steps on average; then a keyed rotation, (x + offset) mod
 * n, which makes every stratum nearly equally likely for each i over keys.
 *
 * Kensler's bijection is a fixed 32-bit hash; a straight generalisation of
 * it to 64 bits (masked xor-shifts and odd multipliers) gave strongly
 * dependent strata to consecutive indices: the chi-square statistic of the
 * triples (perm(i), perm(i + 1), perm(i + 2)) over keys had z-scores of
 * hundreds to thousands for n from 24 to 100. The bijection here is instead
 * a Feistel network on the split of the b bits into a low part of b / 2
 * bits and a high part of the rest, each half-round xoring a multiply-fold
 * hash of one part, keyed by rotations of two mixed key words, into the
 * other: each half-round is invertible, hence so is the network. With 4
 * rounds, or 8 for b <= 5 where the parts are tiny, the same triple test
 * gives |z| < 3 for every n from 3 to 64 (and the test suite checks a few).
 * Full uniformity over all n! permutations is not claimed. */
typedef struct {
  uint64_t n;  /* domain size, at least 2 */
  uint64_t w;  /* b low bits set, b the bit length of n - 1 */
  uint64_t lo; /* the l = b / 2 low bits set */
  unsigned l;
  unsigned rounds; /* 4, or 8 for b <= 5 */
} perm_domain_t;

static inline perm_domain_t perm_domain(uint64_t n) {
  perm_domain_t p;
  unsigned b = 64 - (unsigned)__builtin_clzll(n - 1);
  p.n = n;
  p.w = UINT64_MAX >> (64 - b);
  p.l = b / 2;
  p.lo = p.w >> (b - p.l);
  p.rounds = b <= 5 ? 8 : 4;
  return p;
}

/* The high 64 bits of a * b: ka mapped onto [0, n) as mulhi64(ka, n),
 * nearly uniform and without a division. The portable branch gives the
 * same value, so designs agree across platforms. */
static inline uint64_t mulhi64(uint64_t a, uint64_t b) {
#ifdef __SIZEOF_INT128__
  return (uint64_t)((unsigned __int128)a * b >> 64);
#else
  uint64_t a0 = (uint32_t)a, a1 = a >> 32, b0 = (uint32_t)b, b1 = b >> 32;
  uint64_t p0 = a0 * b0, p1 = a0 * b1, p2 = a1 * b0, p3 = a1 * b1;
  uint64_t mid = (p0 >> 32) + (uint32_t)p1 + (uint32_t)p2;
  return p3 + (p1 >> 32) + (p2 >> 32) + (mid >> 32);
#endif
}

/* One permutation ready to apply: the domain, the round keys and the
 * offset of the final rotation, all functions of (n, key) alone, computed
 * once per dimension instead of once per point. From the two key words ka
 * and kb (mixes of the key, see perm_init), round r takes, with rotations
 * s = (16 r + 5 (r / 4)) mod 64 and t = s + 8 (mod 64):
 *   rk[r][0] = rotl(ka, s), rk[r][1] = rotl(kb, s) | 1,
 *   rk[r][2] = rotl(kb, t), rk[r][3] = rotl(ka, t) | 1;
 * the offset is mulhi64(ka, n). Valid for n >= 2; rk[r] for r < rounds. */
typedef struct {
  perm_domain_t p;
  uint64_t off;
  uint64_t rk[8][4];
} perm_t;

static void perm_init(perm_t *q, uint64_t n, uint64_t key) {
  q->p = perm_domain(n);
  uint64_t ka = bk_rng_mix64(key ^ UINT64_C(0x5851F42D4C957F2D));
  uint64_t kb = bk_rng_mix64(ka ^ UINT64_C(0x14057B7EF767814F));
  for (unsigned r = 0; r < q->p.rounds; r++) {
    unsigned s = (16 * r + 5 * (r >> 2)) & 63, t = (s + 8) & 63;
    q->rk[r][0] = rotl64(ka, s);
    q->rk[r][1] = rotl64(kb, s) | 1;
    q->rk[r][2] = rotl64(kb, t);
    q->rk[r][3] = rotl64(ka, t) | 1;
  }
  q->off = mulhi64(ka, n);
}

/* Round r of the Feistel network: the high part takes a hash of the low
 * part, then the low part one of the high part. */
static inline uint64_t feistel_round(const perm_t *q, uint64_t x, unsigned r) {
  const uint64_t *k = q->rk[r];
  unsigned l = q->p.l;
  uint64_t h = ((x & q->p.lo) ^ k[0]) * k[1];
  x ^= ((h ^ h >> 32) << l) & q->p.w;
  h = ((x >> l) ^ k[2]) * k[3];
  return x ^ ((h ^ h >> 32) & q->p.lo);
}

/* The Feistel bijection of [0, 2^b) with `rounds` rounds, a constant at
 * each call site so that the loop unrolls. */
static inline uint64_t feistel(const perm_t *q, uint64_t x, unsigned rounds) {
  for (unsigned r = 0; r < rounds; r++)
    x = feistel_round(q, x, r);
  return x;
}

/* Cycle walking from i, then the keyed rotation. */
static inline uint64_t perm_apply(const perm_t *q, uint64_t i,
                                  unsigned rounds) {
  uint64_t n = q->p.n, x = feistel(q, i, rounds);
  while (x >= n)
    x = feistel(q, x, rounds);
  return x < n - q->off ? x + q->off : x - (n - q->off);
}

uint64_t bk_sampler_permute(uint64_t i, uint64_t n, uint64_t key) {
  if (n <= 1)
    return 0;
  assert(i < n);
  perm_t q;
  perm_init(&q, n, key);
  return q.p.rounds == 4 ? perm_apply(&q, i, 4) : perm_apply(&q, i, 8);
}

/* ---- Latin hypercube ------------------------------------------------ */

/* (k + u) / n, moved inward by whole doubles when rounding put it on or
 * past an edge of stratum k, so that k <= v * n < k + 1 holds exactly:
 * fma rounds v * n - k once, so its sign is that of the exact value.
 *
 * The fast path decides the same without fma: rounding is monotonic and k
 * and k + 1 are doubles (k < n <= 2^53), so v * n < k exactly implies
 * round(v * n) <= k, and v * n >= k + 1 implies round(v * n) >= k + 1;
 * when the rounded product lies strictly between k and k + 1, neither
 * loop below would move v. */
static inline double lhs_coord(uint64_t k, double nd, double u) {
  double kd = (double)k;
  double v = (kd + u) / nd;
  double p = v * nd;
  if (p > kd && p < kd + 1)
    return v;
  while (fma(v, nd, -kd) < 0)
    v = nextafter(v, 1.0);
  while (fma(v, nd, -(kd + 1)) >= 0)
    v = nextafter(v, 0.0);
  return v;
}

/* Dimension d of rows [0, count) of `out` (stride ndim): the jitter there
 * replaced by the coordinate in stratum perm(first + i). The network runs
 * over all rows without a branch, so the dependency chains of many rows
 * overlap; then the rows whose image lies outside [0, n) are listed in
 * `walk` and walked on (cycle walking as in perm_apply), the list
 * compacted without a branch after each step until it is empty. When n is
 * just above a power of two nearly half the rows walk, at random: a loop
 * per row would mispredict its exit about as often. `x` and `walk` hold
 * count words. */
static inline void lhs_column(const perm_t *q, unsigned rounds, uint64_t first,
                              size_t count, uint32_t ndim, double *out,
                              uint64_t *x, uint32_t *walk) {
  uint64_t n = q->p.n;
  for (size_t i = 0; i < count; i++)
    x[i] = feistel(q, first + i, rounds);
  size_t m = 0;
  for (size_t i = 0; i < count; i++) {
    walk[m] = (uint32_t)i;
    m += x[i] >= n;
  }
  while (m > 0) {
    size_t left = 0;
    for (size_t j = 0; j < m; j++) {
      uint32_t i = walk[j];
      uint64_t y = feistel(q, x[i], rounds);
      x[i] = y;
      walk[left] = i; /* left <= j: walk[j] is read already */
      left += y >= n;
    }
    m = left;
  }
  double nd = (double)n;
  for (size_t i = 0; i < count; i++) {
    uint64_t k = x[i] < n - q->off ? x[i] + q->off : x[i] - (n - q->off);
    out[i * ndim] = lhs_coord(k, nd, out[i * ndim]);
  }
}

/* Coordinate d is in stratum bk_sampler_permute(index, n, key_p + d * golden),
 * jittered by the uniform of (seed, jitter stream, index, d). In blocks of
 * ROWS rows (which stay in cache), each dimension's permutation is set up
 * once and applied down the column. */
static void lhs_points(const bk_sampler_t *s, uint64_t first, size_t count,
                       double *out) {
  enum { ROWS = 256 };
  uint64_t n = s->npoints;
  uint32_t ndim = s->ndim;
  bk_rng_u01_rows(s->key_u, first, count, 0, ndim, out);
  if (n == 1)
    return; /* one stratum: the jitter is the point */
  perm_t q;
  uint64_t x[ROWS];
  uint32_t walk[ROWS];
  for (size_t i0 = 0; i0 < count; i0 += ROWS) {
    size_t m = count - i0 < ROWS ? count - i0 : ROWS;
    for (uint32_t d = 0; d < ndim; d++) {
      perm_init(&q, n, s->key_p + (uint64_t)d * GOLDEN);
      double *col = out + i0 * ndim + d;
      if (q.p.rounds == 4)
        lhs_column(&q, 4, first + i0, m, ndim, col, x, walk);
      else
        lhs_column(&q, 8, first + i0, m, ndim, col, x, walk);
    }
  }
}

/* ---- Sobol ---------------------------------------------------------- */

/* Direction numbers v[j][d] = m_{j+1} << (31 - j) of dimensions d below
 * sobol_nready, filled in dimension order on demand; sobol_bitpos is where
 * the next dimension's numbers start in bk__sobol_mbits. For the first
 * SOBOL_FASTDIM dimensions sobol_bytes[d][q][b] also holds the xor of the
 * direction numbers 8q..8q+7 selected by the bits of b, so a coordinate
 * costs four lookups instead of a loop over the index bits.
 *
 * Process-wide and not thread-safe while growing: bk_sampler_init grows it
 * to the sampler's ndim, after which bk_sampler_point only reads it and may
 * run in many threads, as long as no other thread calls bk_sampler_init or
 * bk_sampler_sobol_raw with more dimensions at the same time. The layout puts one
 * bit's numbers of all dimensions side by side, so a point xors contiguous
 * rows. Pages of the arrays are touched only as dimensions are used. */
#define SOBOL_FASTDIM 256
static uint32_t sobol_v[SOBOL_BITS][BK__SOBOL_NDIM];
static uint32_t sobol_bytes[SOBOL_FASTDIM][4][256];
static uint32_t sobol_nready;
static uint64_t sobol_bitpos;

static uint64_t read_mbits(unsigned width) {
  uint64_t word = sobol_bitpos >> 6;
  unsigned off = (unsigned)(sobol_bitpos & 63);
  uint64_t v = bk__sobol_mbits[word] >> off;
  if (off + width > 64)
    v |= bk__sobol_mbits[word + 1] << (64 - off);
  sobol_bitpos += width;
  return v & ((UINT64_C(1) << width) - 1);
}

/* m_1..m_s from the table, then the recurrence of Bratley & Fox (1988)
 * for the primitive polynomial x^s + a_1 x^(s-1) + ... + a_(s-1) x + 1:
 * m_k = 2 a_1 m_(k-1) ^ 4 a_2 m_(k-2) ^ ... ^ 2^s m_(k-s) ^ m_(k-s). */
static void sobol_fill(uint32_t d) {
  uint64_t m[SOBOL_BITS + 1];
  uint32_t poly = bk__sobol_poly[d];
  unsigned s = 31 - (unsigned)__builtin_clz(poly);
  if (s == 0) {
    for (unsigned k = 1; k <= SOBOL_BITS; k++)
      m[k] = 1;
  } else {
    m[1] = 1;
    for (unsigned k = 2; k <= s && k <= SOBOL_BITS; k++)
      m[k] = read_mbits(k - 1) << 1 | 1;
    for (unsigned k = s + 1; k <= SOBOL_BITS; k++) {
      uint64_t x = m[k - s] ^ m[k - s] << s;
      for (unsigned t = 1; t < s; t++)
        if (poly >> (s - t) & 1)
          x ^= m[k - t] << t;
      m[k] = x;
    }
  }
  for (unsigned j = 0; j < SOBOL_BITS; j++)
    sobol_v[j][d] = (uint32_t)(m[j + 1] << (SOBOL_BITS - 1 - j));
  if (d < SOBOL_FASTDIM)
    for (unsigned q = 0; q < 4; q++) {
      uint32_t *t = sobol_bytes[d][q];
      t[0] = 0;
      for (unsigned b = 1; b < 256; b++)
        t[b] = t[b & (b - 1)] ^ sobol_v[8 * q + __builtin_ctz(b)][d];
    }
}

static void sobol_grow(uint32_t ndim) {
  assert(ndim <= BK__SOBOL_NDIM);
  while (sobol_nready < ndim)
    sobol_fill(sobol_nready++);
}

uint32_t bk_sampler_sobol_raw(uint64_t index, uint32_t dim) {
  assert(dim < BK_SOBOL_MAXDIM);
  sobol_grow(dim + 1);
  uint32_t x = 0;
  for (uint32_t i = (uint32_t)index; i; i &= i - 1)
    x ^= sobol_v[__builtin_ctz(i)][dim];
  return x;
}

static inline uint32_t reverse_bits(uint32_t x) {
  x = __builtin_bswap32(x);
  x = (x & 0x0F0F0F0Fu) << 4 | (x >> 4 & 0x0F0F0F0Fu);
  x = (x & 0x33333333u) << 2 | (x >> 2 & 0x33333333u);
  return (x & 0x55555555u) << 1 | (x >> 1 & 0x55555555u);
}

/* Burley (2020), JCGT 9(4), "Practical Hash-based Owen Scrambling",
 * laine_karras_permutation: each output bit depends only on the same and
 * lower input bits (x * even constant never carries downwards), so on
 * bit-reversed values it is a nested, Owen-style scramble. */
static inline uint32_t laine_karras(uint32_t x, uint32_t seed) {
  x += seed;
  x ^= x * 0x6c50b47cu;
  x ^= x * 0xb82f1e52u;
  x ^= x * 0xc7afe638u;
  x ^= x * 0x8d22f6e6u;
  return x;
}

/* Burley's nested_uniform_scramble: an Owen scramble of the 32 binary
 * digits of x / 2^32, digit k flipped by a function of the digits above it
 * and the seed. A bijection of 32-bit integers. */
static inline uint32_t owen_scramble(uint32_t x, uint32_t seed) {
  return reverse_bits(laine_karras(reverse_bits(x), seed));
}

/* 52 bits as the midpoint of one of 2^52 cells: exact, in (0, 1). */
static inline double u52(uint64_t y) {
  return ((double)y + 0.5) * 0x1p-52;
}

/* Scrambled points follow Burley's shuffled_scrambled_sobol: the index is
 * first Owen-scrambled with a per-(seed, stream) seed, which maps the first
 * 2^m indices onto an aligned block of 2^m Sobol points in shuffled order
 * (still a (t, m, s)-net), so prefixes of different replicates are not the
 * same points; then each coordinate is Owen-scrambled with a per-(seed,
 * stream, dim) seed. The 20 bits below the 32 are a multiplicative hash
 * of the scrambled coordinate and the dimension key, that is, further Owen
 * digits that depend on all digits above them. Unscrambled coordinates are x /
 * 2^32 + 2^-53, so the origin stays off the boundary. */
static inline uint32_t sobol_fast(uint32_t i, uint32_t d) {
  return sobol_bytes[d][0][i & 255] ^ sobol_bytes[d][1][i >> 8 & 255] ^
         sobol_bytes[d][2][i >> 16 & 255] ^ sobol_bytes[d][3][i >> 24];
}

static void sobol_point(const bk_sampler_t *s, uint64_t index, double *out) {
  enum { CHUNK = 64 };
  uint32_t x[CHUNK];
  uint64_t key = s->key_p;
  uint32_t i = (uint32_t)index;
  if (s->scramble)
    i = owen_scramble(i, (uint32_t)(key >> 32));
  if (s->ndim > sobol_nready)
    sobol_grow(s->ndim);
  for (uint32_t d0 = 0; d0 < s->ndim; d0 += CHUNK) {
    uint32_t nd = s->ndim - d0 < CHUNK ? s->ndim - d0 : CHUNK;
    if (d0 + nd <= SOBOL_FASTDIM) {
      for (uint32_t k = 0; k < nd; k++)
        x[k] = sobol_fast(i, d0 + k);
    } else {
      for (uint32_t k = 0; k < nd; k++)
        x[k] = 0;
      for (uint32_t bits = i; bits; bits &= bits - 1) {
        const uint32_t *row = &sobol_v[__builtin_ctz(bits)][d0];
        for (uint32_t k = 0; k < nd; k++)
          x[k] ^= row[k];
      }
    }
    for (uint32_t k = 0; k < nd; k++) {
      if (s->scramble) {
        uint64_t kd = bk_rng_mix64(key + (uint64_t)(d0 + k + 1) * GOLDEN);
        uint32_t y = owen_scramble(x[k], (uint32_t)kd);
        uint64_t low = (kd ^ y) * GOLDEN >> 44;
        out[d0 + k] = u52((uint64_t)y << 20 | low);
      } else {
        out[d0 + k] = u52((uint64_t)x[k] << 20);
      }
    }
  }
}

/* ---- Interface ------------------------------------------------------ */

int bk_sampler_init(bk_sampler_t *s, bk_sampler_kind_t kind, uint64_t seed,
                    uint64_t stream, uint32_t ndim, uint64_t npoints,
                    int scramble) {
  if (ndim == 0)
    return BK_EINVAL;
  switch (kind) {
  case BK_SAMPLER_RANDOM:
    break;
  case BK_SAMPLER_LHS:
    if (npoints == 0 || npoints > LHS_MAXPOINTS)
      return BK_EINVAL;
    break;
  case BK_SAMPLER_SOBOL:
    if (ndim > BK_SOBOL_MAXDIM || npoints > SOBOL_MAXPOINTS)
      return BK_EINVAL;
    sobol_grow(ndim);
    break;
  default:
    return BK_EINVAL;
  }
  s->kind = kind;
  s->seed = seed;
  s->stream = stream;
  s->ndim = ndim;
  s->npoints = npoints;
  s->scramble = kind == BK_SAMPLER_SOBOL ? scramble != 0 : 0;
  s->key_u = 0;
  s->key_p = 0;
  switch (kind) {
  case BK_SAMPLER_RANDOM:
    s->key_u = bk_rng_key(seed, stream);
    break;
  case BK_SAMPLER_LHS:
    s->key_u = bk_rng_key(seed, bk_rng_mix64(stream ^ TAG_LHS_JITTER));
    s->key_p = seed_stream_key(seed, stream, TAG_LHS_PERM);
    break;
  case BK_SAMPLER_SOBOL:
    if (s->scramble)
      s->key_p = seed_stream_key(seed, stream, TAG_SOBOL);
    break;
  }
  return 0;
}

void bk_sampler_points(const bk_sampler_t *s, uint64_t first, size_t count,
                       double *out) {
  switch (s->kind) {
  case BK_SAMPLER_RANDOM:
    bk_rng_u01_rows(s->key_u, first, count, 0, s->ndim, out);
    break;
  case BK_SAMPLER_LHS:
    assert(count <= s->npoints && first <= s->npoints - count);
    lhs_points(s, first, count, out);
    break;
  case BK_SAMPLER_SOBOL:
    for (size_t i = 0; i < count; i++)
      sobol_point(s, first + i, out + i * s->ndim);
    break;
  }
}

void bk_sampler_point(const bk_sampler_t *s, uint64_t index, double *out) {
  assert(s->kind != BK_SAMPLER_LHS || index < s->npoints);
  bk_sampler_points(s, index, 1, out);
}
