/* SPDX-License-Identifier: MIT
 * Private to the report module (src/report*.c): the render context passed to
 * every section, number formatting with units, and the section renderers.
 * Not part of the public API.
 */
#ifndef SL_REPORT_INTERNAL_H
#define SL_REPORT_INTERNAL_H

#include "splitlot/report.h"

typedef struct {
    sl_chart_buf *buf;
    const sl_analysis *a;
    sl_store *store;
    const sl_report_options *opts;
    sl_report_summary *sum;
    sl_diag *diag;
    int has_curves, has_history; /* sections present, for the contents */
} report_ctx;

/* ---- report_format.c: numbers with units, escaped text ---- */

/* A voltage with two decimals and " V"; "n/a" when non-finite. */
void sl_report_volts(sl_chart_buf *buf, double value_V);
/* A density as "1.20&times;10<sup>12</sup>" (HTML), no unit; "n/a" when
 * non-finite. */
void sl_report_density(sl_chart_buf *buf, double value_per_cm2);
/* The HTML text of the unit cm^-2. */
extern const char sl_report_per_cm2_html[];
/* A table cell with a number of the given decimals (class "num"). */
void sl_report_cell_fixed(sl_chart_buf *buf, double value, int decimals);
void sl_report_cell_density(sl_chart_buf *buf, double value_per_cm2);
/* "lo &ndash; hi" with the given decimals and an optional HTML suffix;
 * "n/a" when a bound is non-finite. */
void sl_report_cell_range(sl_chart_buf *buf, double lo, double hi, int decimals,
                          const char *suffix_html);
void sl_report_cell_text(sl_chart_buf *buf, const char *text);
void sl_report_cell_long(sl_chart_buf *buf, long value);
/* Open <section id="id"> with its <h2> heading (escaped). */
void sl_report_section_open(sl_chart_buf *buf, const char *id, const char *heading);
void sl_report_section_close(sl_chart_buf *buf);
/* <p class="note"> with escaped text. */
void sl_report_note(sl_chart_buf *buf, const char *text);

/* ---- report_tables.c ---- */
void sl_report_splits_table(report_ctx *c, size_t dielectric);
void sl_report_effects_table(report_ctx *c);
void sl_report_failure_table(report_ctx *c);

/* ---- report_runs.c: the lot's measurement runs ---- */
sl_status sl_report_section_runs(report_ctx *c);

/* ---- report_sections.c: splits and effects ---- */
sl_status sl_report_section_splits(report_ctx *c);
sl_status sl_report_section_effects(report_ctx *c);

/* ---- report_wafers.c ---- */
sl_status sl_report_section_wafers(report_ctx *c);

/* ---- report_curves.c ---- */
sl_status sl_report_section_curves(report_ctx *c);

/* ---- report_history.c ---- */
sl_status sl_report_section_history(report_ctx *c);

#endif
