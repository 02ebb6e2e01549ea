/* SPDX-License-Identifier: MIT
 * Private to the stats module: the generalised-least-squares Gram matrix
 * shared by the planner's covariance (stats_power.c) and the wafer-level
 * analysis (stats_gls.c). Not a public interface.
 */
#ifndef SL_STATS_INTERNAL_H
#define SL_STATS_INTERNAL_H

#include <stddef.h>

#include <gsl/gsl_matrix.h>

/* The loads of the wafers: load[i * steps + s] the index of wafer i's load in
 * step s (0 .. n - 1), -1 when it skips the step; NULL with n = 0. */
typedef struct {
    const long *load;
    size_t n, steps;
} stats_loads;

/* G = M^T V^-1 M for M (n x q, row-major) with V = diag(d) + s2b Z Z^T, Z
 * the loads, by the Woodbury identity: G = M^T D^-1 M - C^T B^-1 C,
 * B = I / s2b + Z^T D^-1 Z, C = Z^T D^-1 M. logdet (may be NULL) receives
 * log det V = sum log d + L log s2b + log det B. work: a matrix of at least
 * L x (L + q) (may be NULL when there are no loads or s2b = 0).
 * Returns 0, or -1 when B is not positive definite. */
int sl__stats_gls_gram(gsl_matrix *g, double *logdet, const double *m, size_t q, const double *d,
                   size_t n, const stats_loads *loads, double s2b, gsl_matrix *work);

/* The work matrix sl__stats_gls_gram needs for these loads and q columns:
 * L x (1 + q) with one step, L x (L + q) otherwise; NULL without loads, and
 * on allocation failure or with more than SL_STATS_MAX_DENSE_LOADS loads
 * over several steps (check loads->n). */
gsl_matrix *sl__stats_gls_work_alloc(const stats_loads *loads, size_t q);

#endif
