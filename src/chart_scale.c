/* SPDX-License-Identifier: MIT
 * Scales from data to px, round-number ticks and their labels for the chart
 * module (see include/splitlot/chart.h). Pure arithmetic, no allocation.
 */
#include "splitlot/chart.h"

#include <math.h>
#include <stdio.h>

#include "chart_internal.h"

/* Ticks this close to the domain ends (as a fraction of the step) still count
 * as inside, so that 0.6 / 0.2 landing a hair off 3 does not drop a tick. */
#define SL_CHART_TICK_SLACK 1e-9

void sl_chart_domain_pad(double *domain_min, double *domain_max)
{
    if (!isfinite(*domain_min) || !isfinite(*domain_max)) {
        *domain_min = 0.0;
        *domain_max = 1.0;
        return;
    }
    if (*domain_min > *domain_max) {
        double t = *domain_min;
        *domain_min = *domain_max;
        *domain_max = t;
    }
    if (*domain_min == *domain_max) {
        double v = *domain_min;
        double d = v == 0.0 ? 1.0 : 0.1 * fabs(v);
        *domain_min = v - d;
        *domain_max = v + d;
    }
}

void sl_chart_scale_linear(sl_chart_scale *out, double domain_min, double domain_max,
                           double range_min_px, double range_max_px)
{
    sl_chart_domain_pad(&domain_min, &domain_max);
    out->domain_min = domain_min;
    out->domain_max = domain_max;
    out->range_min_px = range_min_px;
    out->range_max_px = range_max_px;
    out->log10 = 0;
}

sl_status sl_chart_scale_log(sl_chart_scale *out, double domain_min, double domain_max,
                             double range_min_px, double range_max_px)
{
    if (!isfinite(domain_min) || !isfinite(domain_max) || !(domain_min > 0.0)
        || !(domain_max > 0.0))
        return SL_EINPUT;
    if (domain_min > domain_max) {
        double t = domain_min;
        domain_min = domain_max;
        domain_max = t;
    }
    if (domain_min == domain_max) {
        domain_min /= sqrt(10.0);
        domain_max *= sqrt(10.0);
    }
    out->domain_min = domain_min;
    out->domain_max = domain_max;
    out->range_min_px = range_min_px;
    out->range_max_px = range_max_px;
    out->log10 = 1;
    return SL_OK;
}

/* Position of value in the domain as a fraction, 0 at domain_min. */
static double domain_fraction(const sl_chart_scale *scale, double value)
{
    if (scale->log10) {
        if (!(value > 0.0))
            return 0.0;
        double lo = log10(scale->domain_min), hi = log10(scale->domain_max);
        return (log10(value) - lo) / (hi - lo);
    }
    return (value - scale->domain_min) / (scale->domain_max - scale->domain_min);
}

double sl_chart_scale_px(const sl_chart_scale *scale, double value)
{
    double f = domain_fraction(scale, value);
    return scale->range_min_px + f * (scale->range_max_px - scale->range_min_px);
}

double sl_chart_scale_value(const sl_chart_scale *scale, double position_px)
{
    double span_px = scale->range_max_px - scale->range_min_px;
    double f = span_px == 0.0 ? 0.0 : (position_px - scale->range_min_px) / span_px;
    if (scale->log10) {
        double lo = log10(scale->domain_min), hi = log10(scale->domain_max);
        return pow(10.0, lo + f * (hi - lo));
    }
    return scale->domain_min + f * (scale->domain_max - scale->domain_min);
}

double sl_chart_nice_step(double span, size_t target_count)
{
    if (!isfinite(span) || !(span > 0.0))
        return 1.0;
    if (target_count == 0)
        target_count = 1;
    double raw = span / (double)target_count;
    int exponent = (int)floor(log10(raw));
    double norm = raw / pow(10.0, exponent);
    double nice = norm < 1.5 ? 1.0 : norm < 3.0 ? 2.0 : norm < 7.0 ? 5.0 : 10.0;
    /* Dividing by an exact power of ten rounds once: 2 / 10 is the double
     * nearest 0.2, where 2 * 0.1 may not be. */
    return exponent < 0 ? nice / pow(10.0, -exponent) : nice * pow(10.0, exponent);
}

int sl_chart_step_decimals(double step)
{
    if (!isfinite(step) || !(step > 0.0))
        return 0;
    int d = 0;
    double scaled = step;
    while (d < 15 && fabs(scaled - round(scaled)) > 1e-9 * scaled) {
        scaled *= 10.0;
        d++;
    }
    return d;
}

/* The k-th multiple of step, computed as k / (1/step) for fractional steps so
 * that 3 x 0.1 comes out as the double nearest 0.3. */
static double step_multiple(double k, double step)
{
    if (step < 1.0) {
        double inverse = round(1.0 / step);
        if (fabs(inverse * step - 1.0) < 1e-9)
            return k / inverse + 0.0;
    }
    return k * step + 0.0;
}

/* Fill out with the multiples of step inside [lo, hi]. */
static sl_status ticks_with_step(sl_chart_ticks *out, double lo, double hi, double step)
{
    double first = ceil(lo / step - SL_CHART_TICK_SLACK);
    double last = floor(hi / step + SL_CHART_TICK_SLACK);
    out->count = 0;
    out->step = step;
    out->decimals = sl_chart_step_decimals(step);
    out->log10 = 0;
    if (!isfinite(first) || !isfinite(last) || last - first + 1.0 > SL_CHART_MAX_TICKS)
        return SL_EINPUT;
    for (double k = first; k <= last; k += 1.0)
        out->values[out->count++] = step_multiple(k, step);
    return SL_OK;
}

sl_status sl_chart_ticks_nice(sl_chart_ticks *out, double domain_min, double domain_max,
                              size_t target_count)
{
    sl_chart_domain_pad(&domain_min, &domain_max);
    double step = sl_chart_nice_step(domain_max - domain_min, target_count);
    return ticks_with_step(out, domain_min, domain_max, step);
}

sl_status sl_chart_scale_nice(sl_chart_scale *scale, sl_chart_ticks *out_ticks,
                              size_t target_count)
{
    if (scale->log10)
        return SL_EINPUT;
    double lo = scale->domain_min, hi = scale->domain_max;
    sl_chart_domain_pad(&lo, &hi);
    double step = sl_chart_nice_step(hi - lo, target_count);
    lo = step_multiple(floor(lo / step + SL_CHART_TICK_SLACK), step);
    hi = step_multiple(ceil(hi / step - SL_CHART_TICK_SLACK), step);
    scale->domain_min = lo;
    scale->domain_max = hi;
    return ticks_with_step(out_ticks, lo, hi, step);
}

sl_status sl_chart_ticks_log(sl_chart_ticks *out, const sl_chart_scale *scale)
{
    out->count = 0;
    out->step = 10.0;
    out->decimals = 0;
    out->log10 = 1;
    if (!scale->log10)
        return SL_EINPUT;
    double first = ceil(log10(scale->domain_min) - SL_CHART_TICK_SLACK);
    double last = floor(log10(scale->domain_max) + SL_CHART_TICK_SLACK);
    if (last - first + 1.0 > SL_CHART_MAX_TICKS)
        return SL_EINPUT;
    for (double k = first; k <= last; k += 1.0)
        out->values[out->count++] = pow(10.0, k);
    return SL_OK;
}

static int log_tick_label(char *out, size_t size, double value)
{
    int k = (int)lround(log10(value));
    if (k >= -3 && k <= 5)
        return snprintf(out, size, "%.*f", k < 0 ? -k : 0, value);
    return snprintf(out, size, "1e%d", k);
}

/* Largest |tick| of the set, to choose one notation for the whole axis. */
static double ticks_max_abs(const sl_chart_ticks *ticks, double value)
{
    double m = fabs(value);
    for (size_t i = 0; i < ticks->count; i++)
        m = fmax(m, fabs(ticks->values[i]));
    return m;
}

/* "1.5e12": mantissa decimals chosen from the step at the value's exponent. */
static int exponent_label(char *out, size_t size, double value, double step)
{
    if (value == 0.0)
        return snprintf(out, size, "0");
    int e = (int)floor(log10(fabs(value)));
    double scale = pow(10.0, e);
    int decimals = step > 0.0 ? sl_chart_step_decimals(step / scale) : 3;
    if (decimals > 6)
        decimals = 6;
    double p = pow(10.0, decimals);
    double mantissa = round(value / scale * p) / p;
    if (fabs(mantissa) >= 10.0) { /* 9.96 shown with one decimal is 1.0e(k+1) */
        mantissa /= 10.0;
        e++;
    }
    return snprintf(out, size, "%.*fe%d", decimals, mantissa, e);
}

int sl_chart_tick_label(char *out, size_t size, double value, const sl_chart_ticks *ticks)
{
    if (!isfinite(value))
        return snprintf(out, size, "n/a");
    if (!ticks)
        return snprintf(out, size, "%s", sl__chart_value_text(value).s);
    if (ticks->log10 && value > 0.0)
        return log_tick_label(out, size, value);
    double step = ticks->step;
    if (ticks_max_abs(ticks, value) >= 1e6 || (step > 0.0 && step < 1e-4))
        return exponent_label(out, size, value, step);
    int decimals = ticks->decimals;
    /* Round first so that a tiny negative residue never prints as "-0". */
    double p = pow(10.0, decimals);
    double rounded = round(value * p) / p + 0.0;
    if (rounded == 0.0)
        rounded = 0.0;
    return snprintf(out, size, "%.*f", decimals, rounded);
}

sl_chart_num sl__chart_value_text(double value)
{
    sl_chart_num out;
    if (!isfinite(value))
        snprintf(out.s, sizeof out.s, "n/a");
    else
        snprintf(out.s, sizeof out.s, "%.4g", value == 0.0 ? 0.0 : value);
    return out;
}
