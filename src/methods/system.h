/*
 * Systems of several limit states under FORM: a design point per mode
 * (keys "form/<mode>/..."), and first-order bounds on the Pf of a series or
 * parallel system from the modes' reliability indices and the correlations
 * of their linearisations, rho_ij = alpha_i . alpha_j (alpha_i = u*_i /
 * beta_i): the simple (unimodal) bounds and Ditlevsen's (1979) bimodal
 * bounds with the joint probabilities P_ij = Phi2(-beta_i, -beta_j;
 * rho_ij). See docs/methods.md for the formulas and sources.
 *
 * SPDX-License-Identifier: MIT
 */
#ifndef BK_SYSTEM_H
#define BK_SYSTEM_H

#include <stddef.h>

#include "methods/result.h"

/* Bounds on the Pf of a series (parallel = 0) or parallel system of n
 * linearised modes: beta[i] and alpha[i * nu .. i * nu + nu) (unit
 * vectors). */
void bk_system_bounds(const double *beta, const double *alpha, size_t n,
                      size_t nu, int parallel, bk_system_bounds_t *out);

#endif
