/* SPDX-License-Identifier: MIT
 * Private to the analysis: the main-effects estimate shared by one lot's
 * analysis (analyze.c) and the history across lots (analyze_history.c).
 */
#ifndef SL_ANALYZE_INTERNAL_H
#define SL_ANALYZE_INTERNAL_H

#include "splitlot/analyze.h"
#include "splitlot/layout.h"

/* Estimate every level's effect from the usable, non-outlier devices of an
 * analysed lot; fills a->effects and a->effects_status / effects_note. */
sl_status sl_analyze_effects(sl_analysis *a, const sl_layout *layout);

/* Planned doping of a factor's level (cm^-2) and its own sigma. */
sl_est sl_analyze_planned_level(const sl_plan *plan, size_t factor, size_t level);

#endif
