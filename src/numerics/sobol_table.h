/*
 * The generated Sobol direction-number table (sobol_table.c, written by
 * tools/gen_sobol_table.py from Joe & Kuo's new-joe-kuo-6.21201 numbers).
 * Private to the sampler.
 *
 * SPDX-License-Identifier: MIT
 */
#ifndef BK_SOBOL_TABLE_H
#define BK_SOBOL_TABLE_H

#include <stdint.h>

#define BK__SOBOL_NDIM 21201

/* Primitive polynomial of dimension d with its leading term (bit s, s the
 * degree) and constant term (bit 0); dimension 0 has 1, degree 0. */
extern const uint32_t bk__sobol_poly[BK__SOBOL_NDIM];

/* For d = 1, 2, ... in turn: m_2..m_s of dimension d, each m_k without its
 * low bit in k - 1 bits, least significant bit of word 0 first. */
extern const uint64_t bk__sobol_mbits[];

#endif
