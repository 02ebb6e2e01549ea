/* SPDX-License-Identifier: MIT
 * The lot report: one self-contained HTML page (inline SVG and CSS, no
 * scripts, no external resources) rendering an analysed lot for screen and
 * print, and its atomic write to a file. Not for: computing statistics
 * (analyze.h) or drawing primitives (chart.h).
 */
#ifndef SPLITLOT_REPORT_H
#define SPLITLOT_REPORT_H

#include <stddef.h>
#include <time.h>

#include "splitlot/analyze.h"
#include "splitlot/chart.h"
#include "splitlot/error.h"
#include "splitlot/store.h"

/* Transfer curves drawn by default: the most severe flagged devices with a
 * stored sweep. */
#define SL_REPORT_DEFAULT_MAX_CURVES 12

typedef struct {
    /* Date of the report as shown in the header, e.g. "2026-12-01 22:53 UTC";
     * NULL: the current time in UTC. Tests pass a fixed text so that two
     * renders of the same lot compare equal byte for byte. */
    const char *generated_utc;
    size_t max_curves;     /* transfer curves of flagged devices; 0: none */
    int with_history;      /* nonzero: the across-lots section when the store
                              holds more than one lot with estimates */
    sl_analyze_view view;  /* the measurements shown (sl_report_lot) */
} sl_report_options;

/* A time as the report's header shows it ("2026-12-01 22:53 UTC"), in a
 * buffer of 32 bytes; "unknown" when it cannot be written. */
void sl_report_time_text(char out[32], time_t t);

/* What a render put on the page, for the command's summary and for tests. */
typedef struct {
    size_t bytes;              /* length of the HTML */
    size_t n_strip_charts;     /* one per dielectric */
    size_t n_hysteresis_charts; /* one per dielectric with double sweeps */
    size_t n_wafer_maps;       /* one per wafer with devices */
    size_t n_dies;             /* die elements over all wafer maps */
    size_t n_dies_off_grid;    /* devices whose die lies outside the plan's grid */
    size_t n_flagged_markers;  /* flagged points in the strip charts */
    size_t n_curves;           /* transfer curves drawn */
    size_t n_history_levels;   /* control charts drawn (0: no history section) */
    char step[65];             /* the measurements shown: step and temperature */
    double temperature_K;
} sl_report_summary;

/* Defaults: current time, SL_REPORT_DEFAULT_MAX_CURVES curves, history on. */
void sl_report_options_default(sl_report_options *out);

/* Render the report of an analysed lot into buf (appended). The store is
 * read for the raw sweeps and stored fit parameters of the flagged devices
 * and, with opts->with_history, for the history across lots. summary may be
 * NULL. Returns SL_OK, SL_EDB (store reads), SL_ENOMEM; messages in diag. */
sl_status sl_report_render(sl_chart_buf *buf, sl_report_summary *summary, sl_store *store,
                           const sl_analysis *analysis, const sl_report_options *opts,
                           sl_diag *diag);

/* The same for an analysis streamed in flat memory (sl_analyze_lot_stream):
 * the devices are read once (splits of more than 3,000 usable devices get
 * density strips) and the flagged ones most severe first; memory grows with splits, wafers and dies, the page
 * with them too (at most 1,000 failure rows, 400 flagged points per density
 * strip). Renders the same page as sl_report_render of sl_analyze_lot but
 * for the history, which needs the store's scratch the stream holds: it is
 * left out here (sl_report_lot reads it before it opens the stream). */
sl_status sl_report_render_stream(sl_chart_buf *buf, sl_report_summary *summary,
                                  sl_store *store, sl_analysis_stream *stream,
                                  const sl_report_options *opts, sl_diag *diag);

/* Write len bytes of text to path atomically: to "path.tmp" first, flushed
 * and fsync'ed, then renamed over path, so a reader sees the old file or the
 * whole new one, never a part. Returns SL_OK, or SL_EIO naming the file (the
 * temporary file is removed on failure). */
sl_status sl_report_write_file(const char *path, const char *text, size_t len, sl_diag *diag);

/* Analyse a lot of an open store in flat memory, render its report and
 * write it to path atomically. summary may be NULL. Returns the statuses of sl_analyze_lot,
 * sl_report_render and sl_report_write_file. */
sl_status sl_report_lot(sl_report_summary *summary, sl_store *store, const char *lot,
                        const char *path, const sl_report_options *opts, sl_diag *diag);

#endif
