/* SPDX-License-Identifier: MIT
 * The lot report's page (see include/splitlot/report.h): document skeleton
 * with its screen and print CSS, the header with the lot's verdicts and the
 * caution, the order of the sections, and the analyse-render-write helper.
 */
#include <math.h>
#include <stdio.h>
#include <string.h>
#include <time.h>

#include "report_internal.h"

/* Screen and print rules of the page; the charts' own rules come from
 * sl_chart_stylesheet(). Print: a page per section, no chart split. */
static const char page_css[] =
    "body{font-family:system-ui,-apple-system,'Segoe UI',sans-serif;color:#1d1d1d;"
    "margin:0 auto;max-width:1180px;padding:16px 24px;line-height:1.4;background:#fff}"
    "h1{font-size:24px;margin:0 0 2px}h2{font-size:19px;margin:30px 0 8px;padding-bottom:3px;"
    "border-bottom:2px solid #2c65a3}h3{font-size:15px;margin:18px 0 4px}"
    "p{margin:6px 0;max-width:80em}.lot-title{font-size:16px;color:#333;margin:0 0 8px}"
    ".facts{display:grid;grid-template-columns:max-content auto;gap:2px 14px;margin:8px 0;"
    "font-size:14px}.facts dt{color:#555}.facts dd{margin:0}"
    ".verdicts{display:grid;grid-template-columns:repeat(auto-fit,minmax(15em,1fr));gap:10px;"
    "list-style:none;padding:0;margin:12px 0}"
    ".verdict{border:1px solid #c4c4c4;border-left:6px solid #4f7f52;border-radius:3px;"
    "padding:6px 12px;font-size:14px}"
    ".verdict.bad{border-left-color:#a6431a;background:#fbf0ea}"
    ".verdict .count{display:block;font-size:24px;font-weight:700}"
    ".caution{border:1px solid #c9a227;background:#fdf8e4;padding:6px 10px;font-size:13px}"
    "nav ol{list-style:none;display:flex;flex-wrap:wrap;gap:4px 22px;padding:0;font-size:14px}"
    "table{border-collapse:collapse;font-size:13px;margin:8px 0 14px}"
    "th,td{padding:3px 8px;border-bottom:1px solid #ddd;text-align:left;vertical-align:top}"
    "th{background:#f1f3f6;font-weight:600}td.num{text-align:right;"
    "font-variant-numeric:tabular-nums;white-space:nowrap}tr.bad td{background:#fbf0ea}"
    "figure{margin:6px 0;break-inside:avoid;page-break-inside:avoid}"
    "figcaption{font-size:12px;color:#444;max-width:380px}figure.wafer figcaption{text-align:center}"
    ".maps,.curves,.charts{display:flex;flex-wrap:wrap;gap:8px 10px;align-items:flex-start}"
    "svg.sl-chart{max-width:100%;height:auto}.note,.small{color:#555;font-size:13px}"
    ".note{font-style:italic}footer{margin-top:30px;font-size:12px;color:#666}"
    "@page{margin:12mm}"
    "@media print{body{max-width:none;padding:0;font-size:12px}nav{display:none}"
    "section{break-before:page;page-break-before:always}"
    "figure,svg,tr,.verdict{break-inside:avoid;page-break-inside:avoid}"
    "h2,h3{break-after:avoid;page-break-after:avoid}"
    ".verdict.bad,tr.bad td,th{-webkit-print-color-adjust:exact;print-color-adjust:exact}}";

static const char caution_html[] =
    "<p class=\"caution\"><strong>Caution:</strong> predictions and estimates in this report are "
    "model estimates, not sign-off. Gate bias near breakdown destroys devices and doping "
    "treatments can be hazardous: follow your site's safety rules and licensed practice.</p>\n";

void sl_report_options_default(sl_report_options *out)
{
    out->generated_utc = NULL;
    out->max_curves = SL_REPORT_DEFAULT_MAX_CURVES;
    out->with_history = 1;
    out->view.step = NULL; /* the newest step, the first temperature with data */
    out->view.temperature_K = NAN;
}

void sl_report_time_text(char out[32], time_t t)
{
    struct tm tm;
    if (gmtime_r(&t, &tm) == NULL || strftime(out, 32, "%Y-%m-%d %H:%M UTC", &tm) == 0)
        snprintf(out, 32, "unknown");
}

static void page_open(report_ctx *c)
{
    sl_chart_buf *b = c->buf;
    sl_chart_buf_append(b, "<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n"
                           "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\n"
                           "<title>Lot report ");
    sl_chart_buf_escape(b, c->a->lot.lot);
    if (c->a->plan->title[0]) {
        sl_chart_buf_append(b, ": ");
        sl_chart_buf_escape(b, c->a->plan->title);
    }
    sl_chart_buf_printf(b, "</title>\n<style>%s%s</style>\n</head>\n<body>\n", page_css,
                        sl_chart_stylesheet());
}

static void fact(sl_chart_buf *b, const char *term, const char *value)
{
    sl_chart_buf_printf(b, "<dt>%s</dt><dd>", term);
    sl_chart_buf_escape(b, value);
    sl_chart_buf_append(b, "</dd>");
}

/* The plan's file name without its folders: a report travels, the reader's
 * disk layout is nobody else's business. */
static const char *base_name(const char *path)
{
    if (!path || !*path)
        return "the plan";
    const char *slash = strrchr(path, '/');
    return slash && slash[1] ? slash + 1 : path;
}

static void header_facts(report_ctx *c, const char *generated)
{
    const sl_analysis *a = c->a;
    char text[256];
    sl_chart_buf *b = c->buf;
    sl_chart_buf_append(b, "<dl class=\"facts\">");
    snprintf(text, sizeof text, "revision %d of %s, stored %s", a->lot.revision,
             base_name(a->lot.plan_name), a->lot.created_utc ? a->lot.created_utc : "");
    fact(b, "plan", text);
    snprintf(text, sizeof text, "step %s at %g K, against plan revision %d (%zu run%s in all)",
             a->step, a->temperature_K, a->revision, a->n_runs, a->n_runs == 1 ? "" : "s");
    fact(b, "measurements", text);
    fact(b, "report", generated);
    snprintf(text, sizeof text, "%zu splits on %zu wafers, %zu dielectrics", a->n_splits,
             a->plan->n_wafers, a->plan->n_dielectrics);
    fact(b, "design", text);
    snprintf(text, sizeof text, "%zu measured, %zu usable (neutrality point extracted)",
             a->n_devices, a->n_usable);
    fact(b, "devices", text);
    sl_chart_buf_append(b, "</dl>\n");
}

/* One verdict box; data-verdict and data-count make the page checkable. */
static void verdict_open(sl_chart_buf *b, const char *key, size_t count, const char *what)
{
    sl_chart_buf_printf(b, "<li class=\"verdict%s\" data-verdict=\"%s\" data-count=\"%zu\">"
                        "<span class=\"count\">%zu</span>%s",
                        count ? " bad" : "", key, count, count, what);
}

/* The same for a count that is no finding (levels as planned, or too
 * uncertain to tell): never marked bad. */
static void verdict_open_plain(sl_chart_buf *b, const char *key, size_t count, const char *what)
{
    sl_chart_buf_printf(b, "<li class=\"verdict\" data-verdict=\"%s\" data-count=\"%zu\">"
                        "<span class=\"count\">%zu</span>%s", key, count, count, what);
}

/* The levels of one verdict, named after the count. */
static void verdict_levels(report_ctx *c, sl_stats_verdict_kind verdict, const char *what)
{
    const sl_analysis *a = c->a;
    size_t n = a->n_verdict[verdict];
    if (verdict == SL_VERDICT_AS_PLANNED || verdict == SL_VERDICT_INCONCLUSIVE)
        verdict_open_plain(c->buf, sl_stats_verdict_name(verdict), n, what);
    else
        verdict_open(c->buf, sl_stats_verdict_name(verdict), n, what);
    const char *sep = ": ";
    for (size_t i = 0; i < a->n_effects; i++)
        if (a->effects[i].verdict == verdict && !a->effects[i].is_intercept) {
            sl_chart_buf_append(c->buf, sep);
            sl_chart_buf_escape(c->buf, a->effects[i].level);
            sep = ", ";
        }
    if (a->effects_status != SL_OK)
        sl_chart_buf_append(c->buf, " (effects could not be estimated)");
    sl_chart_buf_append(c->buf, "</li>\n");
}

static void verdict_off_plan(report_ctx *c)
{
    verdict_levels(c, SL_VERDICT_OFF_PLAN,
                   "levels off-plan (95&nbsp;% interval beyond the tolerance)");
    verdict_levels(c, SL_VERDICT_DIFFERS,
                   "levels that differ from plan (interval excludes it, within tolerance in part)");
    verdict_levels(c, SL_VERDICT_AS_PLANNED,
                   "levels as planned (95&nbsp;% interval within the tolerance)");
    verdict_levels(c, SL_VERDICT_INCONCLUSIVE,
                   "levels inconclusive (interval too wide to tell)");
}

static void verdict_flagged(report_ctx *c)
{
    const sl_analysis *a = c->a;
    verdict_open(c->buf, "flagged", a->n_flagged, "devices flagged");
    sl_chart_buf_printf(c->buf, " of %zu measured; see the failure-analysis list</li>\n",
                        a->n_devices);
}

static void verdict_cnp_outside(report_ctx *c)
{
    const sl_analysis *a = c->a;
    verdict_open(c->buf, "cnp-outside", a->n_splits_cnp_outside,
                 "splits whose mean neutrality voltage left the gate range");
    const char *sep = ": ";
    for (size_t s = 0; s < a->n_splits; s++) {
        double mean = a->splits[s].cnp.mean;
        if (isfinite(mean) && (mean < a->split_gate_min_V[s] || mean > a->split_gate_max_V[s])) {
            sl_chart_buf_append(c->buf, sep);
            sl_chart_buf_escape(c->buf, a->plan->splits[s].name);
            sep = ", ";
        }
    }
    sl_chart_buf_append(c->buf, "</li>\n");
}

/* Splits whose predicted neutrality voltage lies outside the 95 % CI of
 * their measured mean (the splits table's "in CI" column), named. */
static void verdict_prediction_outside_ci(report_ctx *c)
{
    const sl_analysis *a = c->a;
    size_t n = 0;
    for (size_t s = 0; s < a->n_splits; s++)
        n += a->splits[s].n_usable >= 2 && !a->splits[s].prediction_in_ci;
    verdict_open(c->buf, "prediction-outside-ci", n,
                 "splits whose prediction lies outside the 95 % CI of their mean");
    const char *sep = ": ";
    for (size_t s = 0; s < a->n_splits; s++)
        if (a->splits[s].n_usable >= 2 && !a->splits[s].prediction_in_ci) {
            sl_chart_buf_append(c->buf, sep);
            sl_chart_buf_escape(c->buf, a->plan->splits[s].name);
            sep = ", ";
        }
    sl_chart_buf_append(c->buf, "</li>\n");
}

/* Splits whose median mobility lies off their dielectric's planned one,
 * named; only when the plan expects a mobility of some dielectric. */
static void verdict_mobility_off_plan(report_ctx *c)
{
    const sl_analysis *a = c->a;
    int expected = 0;
    for (size_t d = 0; d < a->plan->n_dielectrics; d++)
        expected |= a->plan->dielectrics[d].has_mobility;
    if (!expected)
        return;
    verdict_open(c->buf, "mobility-off-plan", a->n_splits_mobility_off,
                 "splits whose median mobility is off the plan's expected mobility "
                 "(beyond &plusmn;3&nbsp;&sigma;)");
    const char *sep = ": ";
    for (size_t s = 0; s < a->n_splits; s++)
        if (a->splits[s].mobility_off_plan > 0) {
            sl_chart_buf_append(c->buf, sep);
            sl_chart_buf_escape(c->buf, a->plan->splits[s].name);
            sep = ", ";
        }
    sl_chart_buf_append(c->buf, "</li>\n");
}

static void contents(report_ctx *c)
{
    sl_chart_buf_append(c->buf, "<nav><ol><li><a href=\"#runs\">Measurement runs</a></li>"
                                "<li><a href=\"#splits\">Splits</a></li>");
    if (c->has_hysteresis)
        sl_chart_buf_append(c->buf, "<li><a href=\"#hysteresis\">Hysteresis</a></li>");
    sl_chart_buf_append(c->buf, "<li><a href=\"#parameters\">Device parameters</a></li>"
                                "<li><a href=\"#wafers\">Wafer maps</a></li>"
                                "<li><a href=\"#effects\">Level effects</a></li>");
    if (c->has_curves)
        sl_chart_buf_append(c->buf, "<li><a href=\"#curves\">Transfer curves</a></li>");
    if (c->has_history)
        sl_chart_buf_append(c->buf, "<li><a href=\"#history\">History</a></li>");
    sl_chart_buf_append(c->buf, "<li><a href=\"#failure-analysis\">Failure analysis</a></li>"
                                "</ol></nav>\n");
}

static void page_header(report_ctx *c)
{
    char generated[32];
    if (!c->opts->generated_utc)
        sl_report_time_text(generated, time(NULL));
    sl_chart_buf *b = c->buf;
    sl_chart_buf_append(b, "<header>\n<h1>Lot report ");
    sl_chart_buf_escape(b, c->a->lot.lot);
    sl_chart_buf_append(b, "</h1>\n<p class=\"lot-title\">");
    sl_chart_buf_escape(b, c->a->plan->title);
    sl_chart_buf_append(b, "</p>\n");
    header_facts(c, c->opts->generated_utc ? c->opts->generated_utc : generated);
    sl_chart_buf_append(b, "<ul class=\"verdicts\">\n");
    verdict_off_plan(c);
    verdict_flagged(c);
    verdict_cnp_outside(c);
    verdict_prediction_outside_ci(c);
    verdict_mobility_off_plan(c);
    sl_chart_buf_append(b, "</ul>\n");
    sl_chart_buf_append(b, caution_html);
    contents(c);
    sl_chart_buf_append(b, "</header>\n");
}

static sl_status failure_section(report_ctx *c)
{
    sl__report_section_open(c->buf, "failure-analysis", "Failure analysis, most severe first");
    sl_status st = sl__report_failure_table(c);
    sl__report_section_close(c->buf);
    return st;
}

static void page_close(report_ctx *c)
{
    sl_chart_buf_printf(c->buf, "<footer>splitlot %s. Deviation = measured &minus; predicted "
                        "neutrality voltage.</footer>\n</body>\n</html>\n", SL_VERSION);
}

/* The sections go to their own buffer first: the header's contents list
 * names only the sections that were drawn. */
static sl_status render_sections(report_ctx *c)
{
    sl_status st = sl__report_collect(c);
    if (st == SL_OK)
        st = sl__report_section_runs(c);
    if (st == SL_OK)
        st = sl__report_section_splits(c);
    if (st == SL_OK)
        st = sl__report_section_hysteresis(c);
    if (st == SL_OK)
        st = sl__report_section_parameters(c);
    if (st == SL_OK)
        st = sl__report_section_wafers(c);
    if (st == SL_OK)
        st = sl__report_section_effects(c);
    if (st == SL_OK)
        st = sl__report_section_curves(c);
    if (st == SL_OK && c->opts->with_history)
        st = sl__report_section_history(c);
    return st;
}

/* The page of an analysis whose devices are in memory (stream NULL) or
 * read from a stream. */
static sl_status render(sl_chart_buf *buf, sl_report_summary *summary, sl_store *store,
                        const sl_analysis *analysis, sl_analysis_stream *stream,
                        const sl_history *history, const sl_report_options *opts, sl_diag *diag)
{
    sl_report_summary local;
    sl_report_options defaults;
    if (!opts) {
        sl_report_options_default(&defaults);
        opts = &defaults;
    }
    sl_chart_buf body;
    sl_chart_buf_init(&body);
    report_ctx c = { .buf = &body, .a = analysis, .stream = stream, .store = store,
                     .opts = opts, .sum = summary ? summary : &local, .diag = diag,
                     .history = history, .history_loaded = stream != NULL };
    memset(c.sum, 0, sizeof *c.sum);
    sl__report_rewind(&c);
    snprintf(c.sum->step, sizeof c.sum->step, "%s", analysis->step);
    c.sum->temperature_K = analysis->temperature_K;
    sl_status st = render_sections(&c);
    if (st == SL_OK)
        st = failure_section(&c);
    size_t start = buf->len;
    c.buf = buf;
    if (st == SL_OK) {
        page_open(&c);
        page_header(&c);
        sl_chart_buf_append(buf, sl_chart_buf_str(&body));
        page_close(&c);
        st = body.status != SL_OK ? body.status : buf->status;
    }
    sl_chart_buf_free(&body);
    sl__report_data_free(&c.data);
    c.sum->bytes = buf->len - start;
    return st;
}

sl_status sl_report_render(sl_chart_buf *buf, sl_report_summary *summary, sl_store *store,
                           const sl_analysis *analysis, const sl_report_options *opts,
                           sl_diag *diag)
{
    return render(buf, summary, store, analysis, NULL, NULL, opts, diag);
}

sl_status sl_report_render_stream(sl_chart_buf *buf, sl_report_summary *summary,
                                  sl_store *store, sl_analysis_stream *stream,
                                  const sl_report_options *opts, sl_diag *diag)
{
    return render(buf, summary, store, sl_analysis_stream_summary(stream), stream, NULL, opts,
                  diag);
}

sl_status sl_report_lot(sl_report_summary *summary, sl_store *store, const char *lot,
                        const char *path, const sl_report_options *opts, sl_diag *diag)
{
    sl_analysis_stream *s = NULL;
    sl_history *h = NULL;
    sl_chart_buf buf;
    sl_chart_buf_init(&buf);
    sl_status st = SL_OK;
    if (!opts || opts->with_history) /* before the stream takes the scratch */
        st = sl__report_load_history(&h, store, diag);
    if (st == SL_OK)
        st = sl_analyze_lot_stream_view(&s, store, lot, opts ? &opts->view : NULL, diag);
    if (st == SL_OK)
        st = render(&buf, summary, store, sl_analysis_stream_summary(s), s, h, opts, diag);
    sl_analysis_stream_free(s);
    sl_history_free(h);
    if (st == SL_OK)
        st = sl_report_write_file(path, sl_chart_buf_str(&buf), buf.len, diag);
    sl_chart_buf_free(&buf);
    return st;
}
