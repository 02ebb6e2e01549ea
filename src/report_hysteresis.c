/* SPDX-License-Identifier: MIT
 * Hysteresis section of the lot report, for lots measured with double
 * sweeps: the hysteresis of every device per split as a strip chart (one per
 * dielectric), with the plan's largest acceptable hysteresis in words. Not
 * drawn for a lot without hysteresis.
 */
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "report_internal.h"

#define HYST_LABEL_BYTES 136 /* wafer and device names of at most 64 bytes each */

/* The hysteresis of the devices, per split: at most
 * SL_REPORT_STRIP_POINTS_MAX points a split (the rest counted), so the page
 * grows with splits, not devices. Split s owns first[s] .. first[s] + n[s]. */
typedef struct {
    double *values_V;
    unsigned char *flagged;
    const char **labels;
    char (*text)[HYST_LABEL_BYTES];
    size_t *first, *n, not_drawn;
} hyst_data;

static void hyst_free(hyst_data *d)
{
    free(d->values_V);
    free(d->flagged);
    free(d->labels);
    free(d->text);
    free(d->first);
    free(d->n);
}

static size_t split_cap(const sl_analysis *a, size_t s)
{
    size_t n = a->splits[s].n_devices;
    return n < SL_REPORT_STRIP_POINTS_MAX ? n : SL_REPORT_STRIP_POINTS_MAX;
}

static sl_status hyst_alloc(hyst_data *d, const sl_analysis *a)
{
    memset(d, 0, sizeof *d);
    d->first = calloc(a->n_splits + 1, sizeof *d->first);
    d->n = calloc(a->n_splits + 1, sizeof *d->n);
    if (!d->first || !d->n)
        return SL_ENOMEM;
    for (size_t s = 0; s < a->n_splits; s++)
        d->first[s + 1] = d->first[s] + split_cap(a, s);
    size_t total = d->first[a->n_splits] ? d->first[a->n_splits] : 1;
    d->values_V = malloc(total * sizeof *d->values_V);
    d->flagged = malloc(total);
    d->labels = malloc(total * sizeof *d->labels);
    d->text = malloc(total * sizeof *d->text);
    return d->values_V && d->flagged && d->labels && d->text ? SL_OK : SL_ENOMEM;
}

/* One pass over the devices. */
static sl_status hyst_build(hyst_data *d, report_ctx *c)
{
    const sl_analysis *a = c->a;
    sl_status st = hyst_alloc(d, a);
    const sl_analyze_device *dev;
    while (st == SL_OK && (st = sl__report_next_device(c, &dev)) == SL_OK && dev) {
        if (dev->split < 0 || (size_t)dev->split >= a->n_splits || !isfinite(dev->hysteresis_V))
            continue;
        size_t s = (size_t)dev->split;
        if (d->n[s] >= split_cap(a, s)) {
            d->not_drawn++;
            continue;
        }
        size_t k = d->first[s] + d->n[s]++;
        d->values_V[k] = dev->hysteresis_V;
        d->flagged[k] = (dev->flags & SL_FLAG_HYSTERESIS) != 0;
        snprintf(d->text[k], HYST_LABEL_BYTES, "%s %s", dev->wafer, dev->device);
        d->labels[k] = d->text[k];
    }
    return st;
}

/* Splits of one dielectric with at least one hysteresis value. */
static size_t fill(sl_chart_category *cats, const sl_analysis *a, const hyst_data *d, size_t k)
{
    size_t count = 0;
    for (size_t s = 0; s < a->n_splits; s++) {
        if (a->plan->splits[s].dielectric != k || d->n[s] == 0)
            continue;
        sl_chart_category *cat = &cats[count++];
        memset(cat, 0, sizeof *cat);
        cat->name = a->plan->splits[s].name;
        cat->values = d->values_V + d->first[s];
        cat->flagged = d->flagged + d->first[s];
        cat->labels = d->labels + d->first[s];
        cat->count = d->n[s];
        cat->predicted = (sl_est){ NAN, NAN };
    }
    return count;
}

static void chart(report_ctx *c, const hyst_data *d, sl_chart_category *cats, size_t k)
{
    size_t count = fill(cats, c->a, d, k);
    if (count == 0)
        return;
    const char *name = c->a->plan->dielectrics[k].name;
    char title[160];
    snprintf(title, sizeof title, "Hysteresis by split, dielectric %s", name);
    /* bands wide enough for upright split names (6 px a character) */
    size_t longest = 0;
    for (size_t i = 0; i < count; i++)
        longest = strlen(cats[i].name) > longest ? strlen(cats[i].name) : longest;
    double band = fmax(120.0, 6.0 * (double)longest / 0.9 + 4.0);
    sl_chart_frame frame;
    double width = fmin(fmax(420.0, 260.0 + band * (double)count), 1000.0); /* + legend, axes */
    sl_chart_frame_default(&frame, width, 330.0, title);
    frame.embed_style = 0;
    sl_chart_buf_printf(c->buf, "<div class=\"stack\" data-dielectric=\"%zu\">\n<h3>", k);
    sl_chart_buf_escape(c->buf, name);
    sl_chart_buf_append(c->buf, "</h3>\n<figure class=\"strip hysteresis\">");
    sl_chart_strip(c->buf, &frame, cats, count, "split", "hysteresis (V)");
    sl_chart_buf_append(c->buf, "</figure>\n</div>\n");
    c->sum->n_hysteresis_charts++;
}

sl_status sl__report_section_hysteresis(report_ctx *c)
{
    const sl_analysis *a = c->a;
    if (a->n_with_hysteresis == 0)
        return SL_OK;
    hyst_data d;
    sl_chart_category *cats = malloc((a->n_splits + 1) * sizeof *cats);
    sl_status st = cats ? hyst_build(&d, c) : SL_ENOMEM;
    if (st != SL_OK) {
        if (cats)
            hyst_free(&d);
        free(cats);
        return st;
    }
    c->has_hysteresis = 1;
    sl__report_section_open(c->buf, "hysteresis", "Hysteresis of double sweeps");
    sl_chart_buf_printf(c->buf,
                        "<p>Neutrality voltage of the reverse sweep minus that of the forward "
                        "sweep, per device, for the %zu devices measured with a double sweep "
                        "(each branch fitted on its own; the device's neutrality voltage is "
                        "their mean). ", a->n_with_hysteresis);
    if (isfinite(a->plan->max_hysteresis_V))
        sl_chart_buf_printf(c->buf, "The plan accepts up to %g&nbsp;V "
                            "(<code>device.max_hysteresis_V</code>); devices beyond it are "
                            "diamonds and flagged.</p>\n", a->plan->max_hysteresis_V);
    else
        sl_chart_buf_append(c->buf, "The plan sets no limit "
                            "(<code>device.max_hysteresis_V</code>).</p>\n");
    for (size_t k = 0; k < a->plan->n_dielectrics; k++)
        chart(c, &d, cats, k);
    if (d.not_drawn > 0)
        sl_chart_buf_printf(c->buf, "<p class=\"note\">%zu devices beyond the first %d of "
                            "their split are not drawn.</p>\n", d.not_drawn,
                            SL_REPORT_STRIP_POINTS_MAX);
    sl__report_section_close(c->buf);
    hyst_free(&d);
    free(cats);
    return c->buf->status;
}
