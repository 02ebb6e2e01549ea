/* SPDX-License-Identifier: MIT
 * Small HTML pieces of the lot report: numbers with their units, table cells,
 * section frames and notes, all text escaped. No data is read here.
 */
#include <math.h>
#include <stdio.h>
#include <stdlib.h>

#include "report_internal.h"

const char sl__report_per_cm2_html[] = "cm<sup>&minus;2</sup>";

/* Non-finite numbers print as "n/a": a NaN must never reach the page. */
static int put_missing(sl_chart_buf *buf, double value)
{
    if (isfinite(value))
        return 0;
    sl_chart_buf_append(buf, "n/a");
    return 1;
}

/* Minus sign as the typographic &minus; so columns of numbers line up. */
static void put_fixed(sl_chart_buf *buf, double value, int decimals)
{
    if (put_missing(buf, value))
        return;
    char text[64];
    snprintf(text, sizeof text, "%.*f", decimals, fabs(value));
    int negative = value < 0.0 && strtod(text, NULL) != 0.0;
    sl_chart_buf_printf(buf, "%s%s", negative ? "&minus;" : "", text);
}

void sl__report_volts(sl_chart_buf *buf, double value_V)
{
    put_fixed(buf, value_V, 2);
    if (isfinite(value_V))
        sl_chart_buf_append(buf, " V");
}

void sl__report_density(sl_chart_buf *buf, double value_per_cm2)
{
    if (put_missing(buf, value_per_cm2))
        return;
    if (value_per_cm2 == 0.0) {
        sl_chart_buf_append(buf, "0");
        return;
    }
    int exponent = (int)floor(log10(fabs(value_per_cm2)));
    double mantissa = value_per_cm2 / pow(10.0, exponent);
    if (fabs(mantissa) >= 9.995) { /* 9.999e11 prints as 1.00e12, not 10.00e11 */
        mantissa /= 10.0;
        exponent++;
    }
    put_fixed(buf, mantissa, 2);
    sl_chart_buf_printf(buf, "&times;10<sup>%d</sup>", exponent);
}

void sl__report_cell_fixed(sl_chart_buf *buf, double value, int decimals)
{
    sl_chart_buf_append(buf, "<td class=\"num\">");
    put_fixed(buf, value, decimals);
    sl_chart_buf_append(buf, "</td>");
}

void sl__report_cell_range(sl_chart_buf *buf, double lo, double hi, int decimals,
                          const char *suffix_html)
{
    sl_chart_buf_append(buf, "<td class=\"num\">");
    if (isfinite(lo) && isfinite(hi)) {
        put_fixed(buf, lo, decimals);
        sl_chart_buf_append(buf, " &ndash; ");
        put_fixed(buf, hi, decimals);
    } else {
        sl_chart_buf_append(buf, "n/a");
    }
    sl_chart_buf_printf(buf, "%s</td>", suffix_html ? suffix_html : "");
}

void sl__report_cell_density(sl_chart_buf *buf, double value_per_cm2)
{
    sl_chart_buf_append(buf, "<td class=\"num\">");
    sl__report_density(buf, value_per_cm2);
    sl_chart_buf_append(buf, "</td>");
}

void sl__report_cell_text(sl_chart_buf *buf, const char *text)
{
    sl_chart_buf_append(buf, "<td>");
    sl_chart_buf_escape(buf, text);
    sl_chart_buf_append(buf, "</td>");
}

void sl__report_cell_long(sl_chart_buf *buf, long value)
{
    sl_chart_buf_printf(buf, "<td class=\"num\">%ld</td>", value);
}

void sl__report_section_open(sl_chart_buf *buf, const char *id, const char *heading)
{
    sl_chart_buf_printf(buf, "<section id=\"%s\">\n<h2>", id);
    sl_chart_buf_escape(buf, heading);
    sl_chart_buf_append(buf, "</h2>\n");
}

void sl__report_section_close(sl_chart_buf *buf) { sl_chart_buf_append(buf, "</section>\n"); }

void sl__report_note(sl_chart_buf *buf, const char *text)
{
    sl_chart_buf_append(buf, "<p class=\"note\">");
    sl_chart_buf_escape(buf, text);
    sl_chart_buf_append(buf, "</p>\n");
}
