/* SPDX-License-Identifier: MIT
 * Helpers shared by the chart module's source files (src/chart_*.c) and not
 * part of the public API: compact number text and the series palette.
 */
#ifndef SPLITLOT_CHART_INTERNAL_H
#define SPLITLOT_CHART_INTERNAL_H

#include "splitlot/chart.h"

/* Short text of a number, returned by value so it can be a printf argument:
 * the temporary lives until the end of the full expression (C11 6.2.4). */
typedef struct {
    char s[32];
} sl_chart_num;

/* A px coordinate with at most two decimals, no trailing zeros, "0" for
 * non-finite values. */
sl_chart_num sl__chart_px_text(double value_px);

/* A data value for a tooltip: up to 4 significant digits, "n/a" when
 * non-finite. */
sl_chart_num sl__chart_value_text(double value);

/* The wafer map's "no usable device" cell at (x, y): a grey square of
 * size_px with an x across it (classes nd and ndx). Buffer status. */
sl_status sl__chart_unusable_cell(sl_chart_buf *buf, double x_px, double y_px, double size_px);

/* Number of series colours the stylesheet defines (classes s0..s5). */
#define SL_CHART_SERIES_COLORS 6

#endif
