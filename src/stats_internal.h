/* SPDX-License-Identifier: MIT
 * Private to the stats module: the generalised-least-squares Gram matrix
 * shared by the planner's covariance (stats_power.c) and the wafer-level
 * analysis (stats_gls.c). Not a public interface.
 */
#ifndef SL_STATS_INTERNAL_H
#define SL_STATS_INTERNAL_H

#include <stddef.h>

#include <gsl/gsl_matrix.h>

/* G = M^T V^-1 M for M (n x q, row-major) with V = diag(d) + s2b Z Z^T,
 * Z n x L (0/1, row-major, may be NULL with L = 0), by the Woodbury identity:
 * G = M^T D^-1 M - C^T B^-1 C, B = I / s2b + Z^T D^-1 Z, C = Z^T D^-1 M.
 * logdet (may be NULL) receives log det V = sum log d + L log s2b + log det B.
 * work: a matrix of at least L x (L + q) (may be NULL when L = 0 or s2b = 0).
 * Returns 0, or -1 when B is not positive definite. */
int stats_gls_gram(gsl_matrix *g, double *logdet, const double *m, size_t q, const double *d,
                   const double *z, size_t n, size_t n_loads, double s2b, gsl_matrix *work);

#endif
