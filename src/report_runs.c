/* SPDX-License-Identifier: MIT
 * The lot report's record of measurements: every measurement run of the
 * lot (step, temperature, devices, plan revision, source file and its
 * SHA-256, time), the runs of the view the report shows marked.
 */
#include <stdio.h>
#include <string.h>

#include "report_internal.h"

static const char *const run_headings[] = {
    "run", "step", "temperature (K)", "devices", "current", "plan revision", "source", "SHA-256",
    "imported (UTC)", "shown",
};

static void run_row(sl_chart_buf *buf, const sl_analysis *a, const sl_store_run *r)
{
    int shown = strcmp(r->step, a->step) == 0 && r->temperature_K == a->temperature_K &&
                r->current > 0; /* superseded by later runs of the view: not shown */
    char sha[16];
    snprintf(sha, sizeof sha, "%.12s", r->source_sha256); /* enough to tell files apart */
    sl_chart_buf_printf(buf, "<tr%s>", shown ? " class=\"shown\"" : "");
    sl__report_cell_long(buf, r->id);
    sl__report_cell_text(buf, r->step);
    sl__report_cell_fixed(buf, r->temperature_K, 0);
    sl__report_cell_long(buf, r->devices);
    sl__report_cell_long(buf, r->current);
    sl__report_cell_long(buf, r->revision);
    sl__report_cell_text(buf, r->source_name);
    sl__report_cell_text(buf, *sha ? sha : "n/a");
    sl__report_cell_text(buf, r->created_utc);
    sl__report_cell_text(buf, shown ? "yes" : "");
    sl_chart_buf_append(buf, "</tr>\n");
}

sl_status sl__report_section_runs(report_ctx *c)
{
    const sl_analysis *a = c->a;
    sl_chart_buf *buf = c->buf;
    sl__report_section_open(buf, "runs", "Measurement runs");
    sl_chart_buf_append(buf, "<p>Every import of the lot is a run of its own. The report shows "
                             "the measurements at step <strong>");
    sl_chart_buf_escape(buf, a->step);
    sl_chart_buf_printf(buf, "</strong> and %g&nbsp;K, read against plan revision %d; where a "
                        "device was measured again at that step and temperature, its newest "
                        "measurement is shown and the earlier stay on record.</p>\n",
                        a->temperature_K, a->revision);
    if (a->n_runs == 0) {
        sl__report_note(buf, "The lot has no measurements yet.");
    } else {
        size_t n = sizeof run_headings / sizeof *run_headings;
        sl_chart_buf_append(buf, "<table class=\"runs\"><thead><tr>");
        for (size_t i = 0; i < n; i++)
            sl_chart_buf_printf(buf, "<th>%s</th>", run_headings[i]);
        sl_chart_buf_append(buf, "</tr></thead><tbody>\n");
        for (size_t i = 0; i < a->n_runs; i++)
            run_row(buf, a, &a->runs[i]);
        sl_chart_buf_append(buf, "</tbody></table>\n");
    }
    sl__report_section_close(buf);
    return buf->status;
}
