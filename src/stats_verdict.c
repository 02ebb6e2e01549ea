/* SPDX-License-Identifier: MIT
 * The verdict of a level against its plan (see include/splitlot/stats.h):
 * the one rule that the analysis of a measured lot and the planner's power
 * both apply. Numbers only; no I/O.
 */
#include "splitlot/stats.h"

#include <math.h>

#include <gsl/gsl_cdf.h>

static const char *const verdict_names[] = { "inconclusive", "as-planned", "off-plan", "differs" };

const char *sl_stats_verdict_name(sl_stats_verdict_kind verdict)
{
    return (unsigned)verdict < 4 ? verdict_names[verdict] : "inconclusive";
}

sl_stats_verdict_kind sl_stats_verdict(double d, double se, double df, double tolerance,
                                       double alpha)
{
    if (!(df >= 1.0) || !isfinite(se) || !isfinite(d) || !(se >= 0.0) || !(alpha > 0.0) ||
        !(alpha < 1.0))
        return SL_VERDICT_INCONCLUSIVE;
    double half = gsl_cdf_tdist_Pinv(1.0 - 0.5 * alpha, df) * se;
    double lo = d - half, hi = d + half;
    if (lo > tolerance || hi < -tolerance)
        return SL_VERDICT_OFF_PLAN;
    if (lo >= -tolerance && hi <= tolerance)
        return SL_VERDICT_AS_PLANNED;
    if (lo > 0.0 || hi < 0.0)
        return SL_VERDICT_DIFFERS;
    return SL_VERDICT_INCONCLUSIVE;
}
