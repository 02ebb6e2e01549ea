/* SPDX-License-Identifier: MIT
 * Private to the analysis: the main-effects estimate shared by one lot's
 * analysis (analyze_stream.c) and the history across lots
 * (analyze_history.c), and what the in-memory analysis (analyze.c) needs of
 * the stream it is built on.
 */
#ifndef SL_ANALYZE_INTERNAL_H
#define SL_ANALYZE_INTERNAL_H

#include "splitlot/analyze.h"
#include "splitlot/layout.h"

/* An analysis with the device rows its devices point into (NULL when it has
 * no devices): what sl_analysis_free frees. */
typedef struct {
    sl_analysis pub;
    sl_store_device_row *rows;
} sl_analysis_owner;

/* Estimate every level's effect from wafer means of measured doping:
 * wafer_sum_per_cm2[w] and wafer_devices[w] (plan wafer index w) over the
 * usable, non-outlier devices of each wafer; fills a->effects,
 * a->n_off_plan and a->effects_status / effects_note. */
sl_status sl_analyze_effects(sl_analysis *a, const sl_layout *layout,
                             const double *wafer_sum_per_cm2, const double *wafer_devices);

/* Planned doping of a factor's level (cm^-2) and its own sigma. */
sl_est sl_analyze_planned_level(const sl_plan *plan, size_t factor, size_t level);

/* "lot 'X': its devices changed during the analysis" into diag; SL_EINPUT. */
sl_status sl_analyze_lot_changed(const sl_analysis *a, sl_diag *diag);

/* The stored row behind the device last given by the stream. */
const sl_store_device_row *sl_analysis_stream_row(const sl_analysis_stream *stream);

/* The stream's summary, which the caller now owns (free with
 * sl_analysis_free); the stream is freed. */
sl_analysis_owner *sl_analysis_stream_release(sl_analysis_stream *stream);

#endif
