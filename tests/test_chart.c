/* SPDX-License-Identifier: MIT
 * Check suite of the chart module: text buffer and escaping, nice ticks and
 * labels, scales, the diverging colour scale, the wafer map and the report's
 * charts (element counts per class, well-formed SVG, no NaN/inf text).
 */
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "splitlot/chart.h"
#include "test_support.h"

/* ---- helpers ---------------------------------------------------------------- */

/* Occurrences of needle in haystack (non-overlapping). */
static size_t count_of(const char *haystack, const char *needle)
{
    size_t n = 0, len = strlen(needle);
    for (const char *p = strstr(haystack, needle); p; p = strstr(p + len, needle))
        n++;
    return n;
}

/* 1 when text contains "nan" or "inf" in any case (printf's spellings). */
static int has_nonfinite_text(const char *text)
{
    for (const char *p = text; *p; p++) {
        char a = (char)(p[0] | 0x20), b = p[1] ? (char)(p[1] | 0x20) : 0,
             c = (p[1] && p[2]) ? (char)(p[2] | 0x20) : 0;
        if ((a == 'n' && b == 'a' && c == 'n') || (a == 'i' && b == 'n' && c == 'f'))
            return 1;
    }
    return 0;
}

/* Minimal XML structure check: every start tag is closed in order, self-
 * closing tags stand alone, no raw '<' or '>' in text or attribute values
 * (attribute values are escaped, so the first '>' ends a tag). */
static int tags_balanced(const char *text)
{
    const char *stack[256];
    size_t stack_len[256];
    size_t depth = 0;
    for (const char *p = strchr(text, '<'); p; p = strchr(p, '<')) {
        const char *end = strchr(p, '>');
        if (!end)
            return 0;
        int closing = p[1] == '/';
        const char *name = p + 1 + closing;
        size_t n = strcspn(name, " />");
        if (closing) {
            if (depth == 0 || stack_len[depth - 1] != n || strncmp(stack[depth - 1], name, n))
                return 0;
            depth--;
        } else if (end[-1] != '/') {
            if (depth == 256)
                return 0;
            stack[depth] = name;
            stack_len[depth++] = n;
        }
        p = end + 1;
    }
    return depth == 0;
}

/* The common checks of any complete chart. */
static void assert_svg_sane(const char *svg)
{
    ck_assert_uint_eq(count_of(svg, "<svg"), 1);
    ck_assert_uint_eq(count_of(svg, "</svg>"), 1);
    ck_assert_ptr_eq(strstr(svg, "<svg"), svg);
    ck_assert_msg(tags_balanced(svg), "unbalanced tags in: %.300s", svg);
    ck_assert_msg(!has_nonfinite_text(svg), "nan/inf text in SVG");
    ck_assert_ptr_nonnull(strstr(svg, "role=\"img\""));
    ck_assert_ptr_nonnull(strstr(svg, "<title>"));
    ck_assert_ptr_nonnull(strstr(svg, "viewBox=\"0 0 "));
}

static void label_of(char *out, size_t size, double v, const sl_chart_ticks *t)
{
    ck_assert_int_gt(sl_chart_tick_label(out, size, v, t), 0);
}

/* ---- text buffer ------------------------------------------------------------ */

START_TEST(test_buf_append_printf)
{
    sl_chart_buf b;
    sl_chart_buf_init(&b);
    ck_assert_str_eq(sl_chart_buf_str(&b), "");
    ck_assert_int_eq(sl_chart_buf_append(&b, "ab"), SL_OK);
    ck_assert_int_eq(sl_chart_buf_printf(&b, "-%d-%s", 42, "x"), SL_OK);
    ck_assert_int_eq(sl_chart_buf_append(&b, NULL), SL_OK);
    ck_assert_str_eq(sl_chart_buf_str(&b), "ab-42-x");
    ck_assert_uint_eq(b.len, 7);
    /* Growth well past the first allocation keeps every byte. */
    for (int i = 0; i < 1000; i++)
        sl_chart_buf_printf(&b, "%03d", i % 1000);
    ck_assert_uint_eq(b.len, 7 + 3000);
    ck_assert_int_eq(strncmp(sl_chart_buf_str(&b) + 7 + 3 * 999, "999", 3), 0);
    char *owned = sl_chart_buf_detach(&b);
    ck_assert_ptr_nonnull(owned);
    ck_assert_uint_eq(strlen(owned), 3007);
    free(owned);
    ck_assert_str_eq(sl_chart_buf_str(&b), "");
    ck_assert_ptr_null(sl_chart_buf_detach(&b));
    sl_chart_buf_free(&b);
}
END_TEST

START_TEST(test_buf_escape)
{
    sl_chart_buf b;
    sl_chart_buf_init(&b);
    ck_assert_int_eq(sl_chart_buf_escape(&b, "<script>alert('x')</script> & \"q\""), SL_OK);
    ck_assert_str_eq(sl_chart_buf_str(&b),
                     "&lt;script&gt;alert(&#39;x&#39;)&lt;/script&gt; &amp; &quot;q&quot;");
    sl_chart_buf_free(&b);
    sl_chart_buf_escape(&b, "plain text, unchanged");
    ck_assert_str_eq(sl_chart_buf_str(&b), "plain text, unchanged");
    sl_chart_buf_free(&b);
}
END_TEST

START_TEST(test_buf_px)
{
    static const struct {
        double v;
        const char *text;
    } table[] = {
        { 12.5, "12.5" }, { 12.0, "12" },     { -3.0, "-3" },  { 0.125, "0.13" },
        { 1.0 / 3.0, "0.33" }, { -0.001, "0" }, { 100.10, "100.1" }, { -7.25, "-7.25" },
    };
    for (size_t i = 0; i < sizeof table / sizeof table[0]; i++) {
        sl_chart_buf b;
        sl_chart_buf_init(&b);
        ck_assert_int_eq(sl_chart_buf_px(&b, table[i].v), SL_OK);
        ck_assert_str_eq(sl_chart_buf_str(&b), table[i].text);
        sl_chart_buf_free(&b);
    }
    sl_chart_buf b;
    sl_chart_buf_init(&b);
    sl_chart_buf_px(&b, NAN);
    sl_chart_buf_px(&b, INFINITY);
    ck_assert_str_eq(sl_chart_buf_str(&b), "00");
    sl_chart_buf_free(&b);
}
END_TEST

/* ---- ticks and scales --------------------------------------------------------- */

START_TEST(test_nice_step_table)
{
    /* Expected steps follow from the 1-2-5 rule on span / target with the
     * switch points 1.5, 3 and 7 (common practice for axis ticks). */
    static const struct {
        double span;
        size_t target;
        double step;
    } table[] = {
        { 1.0, 5, 0.2 }, { 89.0, 5, 20.0 }, { 0.0078, 5, 0.002 }, { 10.0, 10, 1.0 },
        { 6.0, 1, 5.0 }, { 7.0, 1, 10.0 }, { 3.0e12, 5, 5e11 }, { 100.0, 5, 20.0 }, { 1.0, 0, 1.0 },
        { 0.0, 5, 1.0 }, { NAN, 5, 1.0 },
    };
    for (size_t i = 0; i < sizeof table / sizeof table[0]; i++)
        ck_assert_msg(sl_chart_nice_step(table[i].span, table[i].target) == table[i].step,
                      "span %g target %zu: step %.17g, expected %g", table[i].span,
                      table[i].target, sl_chart_nice_step(table[i].span, table[i].target),
                      table[i].step);
}
END_TEST

START_TEST(test_ticks_unit_interval)
{
    sl_chart_ticks t;
    ck_assert_int_eq(sl_chart_ticks_nice(&t, 0.0, 1.0, 5), SL_OK);
    static const double expected[] = { 0.0, 0.2, 0.4, 0.6, 0.8, 1.0 };
    ck_assert_uint_eq(t.count, 6);
    for (size_t i = 0; i < 6; i++)
        ck_assert_msg(t.values[i] == expected[i], "tick %zu is %.17g", i, t.values[i]);
    ck_assert_int_eq(t.decimals, 1);
}
END_TEST

START_TEST(test_ticks_mixed_sign)
{
    sl_chart_ticks t;
    ck_assert_int_eq(sl_chart_ticks_nice(&t, -37.0, 52.0, 5), SL_OK);
    ck_assert(t.step == 20.0);
    ck_assert_uint_eq(t.count, 4);
    ck_assert(t.values[0] == -20.0 && t.values[3] == 40.0);
    sl_chart_scale s;
    sl_chart_scale_linear(&s, -37.0, 52.0, 0.0, 100.0);
    ck_assert_int_eq(sl_chart_scale_nice(&s, &t, 5), SL_OK);
    ck_assert(s.domain_min == -40.0 && s.domain_max == 60.0);
    ck_assert_uint_eq(t.count, 6);
    ck_assert(t.values[0] == -40.0 && t.values[5] == 60.0);
}
END_TEST

START_TEST(test_ticks_small_values)
{
    sl_chart_ticks t;
    ck_assert_int_eq(sl_chart_ticks_nice(&t, 0.0013, 0.0091, 5), SL_OK);
    ck_assert(t.step == 0.002);
    static const double expected[] = { 0.002, 0.004, 0.006, 0.008 };
    ck_assert_uint_eq(t.count, 4);
    for (size_t i = 0; i < 4; i++)
        ck_assert(t.values[i] == expected[i]);
    char label[32];
    label_of(label, sizeof label, t.values[2], &t);
    ck_assert_str_eq(label, "0.006");
    sl_chart_scale s;
    sl_chart_scale_linear(&s, 0.0013, 0.0091, 0.0, 1.0);
    sl_chart_scale_nice(&s, &t, 5);
    ck_assert(s.domain_min == 0.0 && s.domain_max == 0.01);
    ck_assert_uint_eq(t.count, 6);
}
END_TEST

START_TEST(test_ticks_degenerate_domains)
{
    sl_chart_ticks t;
    /* Zero width: widened by 10 % of the value, still at least two ticks. */
    ck_assert_int_eq(sl_chart_ticks_nice(&t, 5.0, 5.0, 5), SL_OK);
    ck_assert_uint_ge(t.count, 2);
    ck_assert(t.values[0] >= 4.5 && t.values[t.count - 1] <= 5.5);
    double lo = 0.0, hi = 0.0;
    sl_chart_domain_pad(&lo, &hi);
    ck_assert(lo == -1.0 && hi == 1.0);
    lo = NAN;
    hi = 3.0;
    sl_chart_domain_pad(&lo, &hi);
    ck_assert(lo == 0.0 && hi == 1.0);
    lo = 4.0;
    hi = -2.0;
    sl_chart_domain_pad(&lo, &hi);
    ck_assert(lo == -2.0 && hi == 4.0);
    ck_assert_int_eq(sl_chart_ticks_nice(&t, -INFINITY, INFINITY, 5), SL_OK);
    ck_assert_uint_ge(t.count, 2);
    sl_chart_scale s;
    sl_chart_scale_linear(&s, 2.0, 2.0, 0.0, 100.0);
    ck_assert(isfinite(sl_chart_scale_px(&s, 2.0)));
    ck_assert_double_eq_tol(sl_chart_scale_px(&s, 2.0), 50.0, 1e-9);
}
END_TEST

START_TEST(test_tick_labels_no_float_noise)
{
    sl_chart_ticks t;
    sl_chart_ticks_nice(&t, 0.0, 1.0, 10);
    ck_assert(t.step == 0.1);
    char label[32];
    /* 0.1 + 0.2 is 0.30000000000000004 in binary floating point. */
    label_of(label, sizeof label, 0.1 + 0.2, &t);
    ck_assert_str_eq(label, "0.3");
    label_of(label, sizeof label, 3 * 0.1, &t);
    ck_assert_str_eq(label, "0.3");
    label_of(label, sizeof label, t.values[7], &t);
    ck_assert_str_eq(label, "0.7");
    label_of(label, sizeof label, -1e-17, &t);
    ck_assert_str_eq(label, "0.0");
    sl_chart_ticks_nice(&t, -37.0, 52.0, 5);
    label_of(label, sizeof label, -20.0, &t);
    ck_assert_str_eq(label, "-20");
    /* Doping in cm^-2 switches to exponent notation for the whole axis. */
    sl_chart_ticks_nice(&t, 0.0, 1.3e12, 6);
    ck_assert(t.step == 2e11);
    label_of(label, sizeof label, t.values[6], &t);
    ck_assert_str_eq(label, "1.2e12");
    label_of(label, sizeof label, t.values[1], &t);
    ck_assert_str_eq(label, "2e11");
    label_of(label, sizeof label, 0.0, &t);
    ck_assert_str_eq(label, "0");
    label_of(label, sizeof label, NAN, &t);
    ck_assert_str_eq(label, "n/a");
    /* A mantissa that rounds up to 10 moves to the next exponent. */
    sl_chart_ticks coarse = { .values = { 1e12 }, .count = 1, .step = 1e10, .decimals = 0 };
    label_of(label, sizeof label, 9.96e11, &coarse);
    ck_assert_str_eq(label, "1.0e12");
    label_of(label, sizeof label, -4.2e11, &coarse);
    ck_assert_str_eq(label, "-4.2e11");
    for (size_t i = 0; i < t.count; i++) {
        label_of(label, sizeof label, t.values[i], &t);
        ck_assert_uint_lt(strlen(label), 8);
    }
}
END_TEST

START_TEST(test_step_decimals)
{
    ck_assert_int_eq(sl_chart_step_decimals(20.0), 0);
    ck_assert_int_eq(sl_chart_step_decimals(1.0), 0);
    ck_assert_int_eq(sl_chart_step_decimals(0.2), 1);
    ck_assert_int_eq(sl_chart_step_decimals(0.05), 2);
    ck_assert_int_eq(sl_chart_step_decimals(0.002), 3);
    ck_assert_int_eq(sl_chart_step_decimals(0.0), 0);
}
END_TEST

START_TEST(test_scale_round_trip)
{
    sl_chart_scale s;
    sl_chart_scale_linear(&s, -40.0, 60.0, 300.0, 20.0); /* y axis, runs upward */
    ck_assert_double_eq_tol(sl_chart_scale_px(&s, -40.0), 300.0, 1e-9);
    ck_assert_double_eq_tol(sl_chart_scale_px(&s, 60.0), 20.0, 1e-9);
    ck_assert_double_eq_tol(sl_chart_scale_px(&s, 10.0), 160.0, 1e-9);
    for (double v = -55.0; v <= 75.0; v += 6.5)
        ck_assert_double_eq_tol(sl_chart_scale_value(&s, sl_chart_scale_px(&s, v)), v, 1e-9);
    ck_assert_int_eq(sl_chart_scale_log(&s, 1e-3, 1e2, 0.0, 500.0), SL_OK);
    ck_assert_double_eq_tol(sl_chart_scale_px(&s, 1.0), 300.0, 1e-9);
    for (double v = 2e-4; v < 1e3; v *= 3.7)
        ck_assert_double_eq_tol(sl_chart_scale_value(&s, sl_chart_scale_px(&s, v)) / v, 1.0,
                                1e-12);
    ck_assert_double_eq(sl_chart_scale_px(&s, -1.0), 0.0);
    ck_assert_int_eq(sl_chart_scale_log(&s, 0.0, 10.0, 0.0, 1.0), SL_EINPUT);
    ck_assert_int_eq(sl_chart_scale_log(&s, -1.0, 10.0, 0.0, 1.0), SL_EINPUT);
    ck_assert_int_eq(sl_chart_scale_log(&s, 1.0, INFINITY, 0.0, 1.0), SL_EINPUT);
}
END_TEST

START_TEST(test_log_ticks)
{
    sl_chart_scale s;
    sl_chart_ticks t;
    ck_assert_int_eq(sl_chart_scale_log(&s, 1e-3, 1e6, 0.0, 1.0), SL_OK);
    ck_assert_int_eq(sl_chart_ticks_log(&t, &s), SL_OK);
    ck_assert_uint_eq(t.count, 10);
    char label[32];
    label_of(label, sizeof label, t.values[0], &t);
    ck_assert_str_eq(label, "0.001");
    label_of(label, sizeof label, t.values[4], &t);
    ck_assert_str_eq(label, "10");
    label_of(label, sizeof label, t.values[9], &t);
    ck_assert_str_eq(label, "1e6");
    sl_chart_scale_linear(&s, 0.0, 1.0, 0.0, 1.0);
    ck_assert_int_eq(sl_chart_ticks_log(&t, &s), SL_EINPUT);
}
END_TEST

/* ---- colour -------------------------------------------------------------------- */

START_TEST(test_luminance_reference_values)
{
    /* WCAG 2.x relative luminance: white 1, black 0, and the primaries give
     * their coefficients 0.2126, 0.7152, 0.0722 (W3C WCAG 2.1, "relative
     * luminance" definition). */
    const sl_chart_rgb white = { 255, 255, 255 }, black = { 0, 0, 0 };
    const sl_chart_rgb red = { 255, 0, 0 }, green = { 0, 255, 0 }, blue = { 0, 0, 255 };
    ck_assert_double_eq_tol(sl_chart_relative_luminance(white), 1.0, 1e-12);
    ck_assert_double_eq_tol(sl_chart_relative_luminance(black), 0.0, 1e-12);
    ck_assert_double_eq_tol(sl_chart_relative_luminance(red), 0.2126, 1e-12);
    ck_assert_double_eq_tol(sl_chart_relative_luminance(green), 0.7152, 1e-12);
    ck_assert_double_eq_tol(sl_chart_relative_luminance(blue), 0.0722, 1e-12);
    /* Mid grey 128: ((128/255 + 0.055)/1.055)^2.4 = 0.2158605 (WCAG formula). */
    const sl_chart_rgb grey = { 128, 128, 128 };
    ck_assert_double_eq_tol(sl_chart_relative_luminance(grey), 0.2158605, 1e-6);
}
END_TEST

START_TEST(test_diverging_endpoints_and_centre)
{
    char hex[8];
    sl_chart_diverging_hex(hex, 0.0, 2.0);
    ck_assert_str_eq(hex, "#f4f1ec");
    sl_chart_diverging_hex(hex, -2.0, 2.0);
    ck_assert_str_eq(hex, "#1e4e8e");
    sl_chart_diverging_hex(hex, 2.0, 2.0);
    ck_assert_str_eq(hex, "#803e0e");
    /* Clamped outside the range; NaN and a bad range give the centre. */
    sl_chart_diverging_hex(hex, -50.0, 2.0);
    ck_assert_str_eq(hex, "#1e4e8e");
    sl_chart_diverging_hex(hex, 50.0, 2.0);
    ck_assert_str_eq(hex, "#803e0e");
    sl_chart_diverging_hex(hex, NAN, 2.0);
    ck_assert_str_eq(hex, "#f4f1ec");
    sl_chart_diverging_hex(hex, 1.0, 0.0);
    ck_assert_str_eq(hex, "#f4f1ec");
    /* The ends lie on opposite sides of the blue-yellow axis that red-green
     * colour-blind readers keep (common practice for diverging scales). */
    sl_chart_rgb neg = sl_chart_diverging_rgb(-1.0, 1.0), pos = sl_chart_diverging_rgb(1.0, 1.0);
    ck_assert_int_gt(neg.b, neg.r);
    ck_assert_int_gt(pos.r, pos.b);
}
END_TEST

START_TEST(test_diverging_lightness_monotone)
{
    /* Relative luminance (WCAG 2.x) must fall strictly from the centre
     * outward on both sides, so magnitude reads without hue. */
    for (int side = -1; side <= 1; side += 2) {
        double previous = sl_chart_relative_luminance(sl_chart_diverging_rgb(0.0, 1.0));
        for (int i = 1; i <= 20; i++) {
            double l = sl_chart_relative_luminance(sl_chart_diverging_rgb(side * i / 20.0, 1.0));
            ck_assert_msg(l < previous, "side %d step %d: %g !< %g", side, i, l, previous);
            previous = l;
        }
    }
    /* Symmetric weight: equal |value| gives similar lightness on both sides. */
    for (int i = 0; i <= 10; i++) {
        double t = i / 10.0;
        double ln = sl_chart_relative_luminance(sl_chart_diverging_rgb(-t, 1.0));
        double lp = sl_chart_relative_luminance(sl_chart_diverging_rgb(t, 1.0));
        ck_assert_double_eq_tol(ln, lp, 0.06);
    }
    /* The ends stand out from the centre: WCAG contrast ratio
     * (L1 + 0.05)/(L2 + 0.05) above 4.5, the WCAG AA text threshold. */
    double lc = sl_chart_relative_luminance(sl_chart_diverging_rgb(0.0, 1.0));
    double le = sl_chart_relative_luminance(sl_chart_diverging_rgb(1.0, 1.0));
    ck_assert_double_gt((lc + 0.05) / (le + 0.05), 4.5);
}
END_TEST

START_TEST(test_color_legend_bar)
{
    sl_chart_buf b;
    sl_chart_buf_init(&b);
    sl_chart_rect bar = { 10.0, 30.0, 180.0, 10.0 };
    ck_assert_int_eq(sl_chart_color_legend(&b, &bar, 0.6, 7, "deviation (V)"), SL_OK);
    const char *s = sl_chart_buf_str(&b);
    ck_assert_uint_eq(count_of(s, "<rect"), 7);
    ck_assert_ptr_nonnull(strstr(s, ">deviation (V)</text>"));
    ck_assert_ptr_nonnull(strstr(s, ">-0.6</text>"));
    ck_assert_ptr_nonnull(strstr(s, ">0.6</text>"));
    ck_assert_ptr_nonnull(strstr(s, ">0.0</text>"));
    ck_assert(tags_balanced(s));
    ck_assert_int_eq(sl_chart_color_legend(&b, &bar, NAN, 7, "x"), SL_EINPUT);
    sl_chart_buf_free(&b);
}
END_TEST

/* ---- primitives ---------------------------------------------------------------- */

START_TEST(test_frame_escapes_title)
{
    sl_chart_buf b;
    sl_chart_buf_init(&b);
    sl_chart_frame f;
    sl_chart_frame_default(&f, 400.0, 300.0, "<script>alert(\"x\")</script>");
    f.description = "split 'A' & 'B'";
    ck_assert_int_eq(sl_chart_frame_open(&b, &f), SL_OK);
    ck_assert_int_eq(sl_chart_frame_close(&b), SL_OK);
    const char *s = sl_chart_buf_str(&b);
    ck_assert_ptr_null(strstr(s, "<script"));
    ck_assert_ptr_nonnull(strstr(s, "aria-label=\"&lt;script&gt;alert(&quot;x&quot;)"));
    ck_assert_ptr_nonnull(strstr(s, "<desc>split &#39;A&#39; &amp; &#39;B&#39;</desc>"));
    ck_assert_ptr_nonnull(strstr(s, "viewBox=\"0 0 400 300\""));
    assert_svg_sane(s);
    sl_chart_buf_free(&b);
    f.width_px = NAN;
    ck_assert_int_eq(sl_chart_frame_open(&b, &f), SL_EINPUT);
    f.width_px = 0.0;
    ck_assert_int_eq(sl_chart_frame_open(&b, &f), SL_EINPUT);
    ck_assert_str_eq(sl_chart_buf_str(&b), "");
}
END_TEST

START_TEST(test_markers_and_shapes)
{
    sl_chart_buf b;
    sl_chart_buf_init(&b);
    sl_chart_marker(&b, 10.0, 20.0, 3.0, SL_CHART_MARKER_CIRCLE, NULL, "W01 <d1>");
    sl_chart_marker(&b, 10.0, 20.0, 3.0, SL_CHART_MARKER_DIAMOND, "flagged", NULL);
    sl_chart_marker(&b, 10.0, 20.0, 3.0, SL_CHART_MARKER_CROSS, "s1", NULL);
    sl_chart_marker(&b, NAN, 20.0, 3.0, SL_CHART_MARKER_CIRCLE, NULL, NULL);
    const char *s = sl_chart_buf_str(&b);
    ck_assert_uint_eq(count_of(s, "class=\"point\""), 1);
    ck_assert_uint_eq(count_of(s, "class=\"point flagged\""), 1);
    ck_assert_uint_eq(count_of(s, "class=\"point cross s1\""), 1);
    ck_assert_ptr_nonnull(strstr(s, "<title>W01 &lt;d1&gt;</title>"));
    ck_assert_ptr_nonnull(strstr(s, "cx=\"10\" cy=\"20\" r=\"3\""));
    sl_chart_buf_free(&b);

    const double x[5] = { 0.0, 1.0, NAN, 3.0, 4.0 }, y[5] = { 5.0, 6.0, 7.0, 8.0, 9.0 };
    sl_chart_polyline(&b, x, y, 5, "fit");
    s = sl_chart_buf_str(&b);
    ck_assert_uint_eq(count_of(s, "<polyline class=\"line fit\""), 2);
    ck_assert_ptr_nonnull(strstr(s, "points=\"0,5 1,6\""));
    ck_assert_ptr_nonnull(strstr(s, "points=\"3,8 4,9\""));
    sl_chart_buf_free(&b);

    sl_chart_error_bar(&b, 50.0, 80.0, 40.0, 8.0, "s0");
    sl_chart_band(&b, 10.0, 30.0, 70.0, 50.0, "sigma1");
    sl_chart_error_bar(&b, 50.0, INFINITY, 40.0, 8.0, NULL);
    s = sl_chart_buf_str(&b);
    ck_assert_ptr_nonnull(strstr(s, "<path class=\"errbar s0\" d=\"M50 80V40M46 80H54M46 40H54\"/>"));
    ck_assert_ptr_nonnull(strstr(s, "<rect class=\"band sigma1\" x=\"10\" y=\"50\" width=\"20\" height=\"20\"/>"));
    ck_assert_uint_eq(count_of(s, "errbar"), 1);
    ck_assert(!has_nonfinite_text(s));
    sl_chart_buf_free(&b);
}
END_TEST

START_TEST(test_legend_swatches_are_not_points)
{
    sl_chart_buf b;
    sl_chart_buf_init(&b);
    const sl_chart_legend_item items[4] = {
        { SL_CHART_SWATCH_CIRCLE, "s0", NULL, "measured" },
        { SL_CHART_SWATCH_DIAMOND, "flagged", NULL, "flagged" },
        { SL_CHART_SWATCH_BAND, NULL, "#abcdef", "a & b" },
        { SL_CHART_SWATCH_UNUSABLE, NULL, NULL, "no usable device" },
    };
    ck_assert_int_eq(sl_chart_legend(&b, 0.0, 0.0, items, 4), SL_OK);
    const char *s = sl_chart_buf_str(&b);
    ck_assert_uint_eq(count_of(s, "class=\"point"), 0);
    ck_assert_uint_eq(count_of(s, "<text"), 4);
    ck_assert_ptr_nonnull(strstr(s, "fill=\"#abcdef\""));
    ck_assert_ptr_nonnull(strstr(s, ">a &amp; b</text>"));
    ck_assert_ptr_nonnull(strstr(s, "class=\"ndx\""));
    ck_assert(tags_balanced(s));
    sl_chart_buf_free(&b);
}
END_TEST

/* ---- wafer map -------------------------------------------------------------- */

/* A 6 x 6 map: corners empty, 4 unusable, 3 flagged, the rest with values. */
static size_t demo_dies(sl_chart_die *dies)
{
    size_t n = 0;
    for (int y = 0; y < 6; y++)
        for (int x = 0; x < 6; x++) {
            int corner = (x == 0 || x == 5) && (y == 0 || y == 5);
            sl_chart_die d = { x, y, corner ? SL_CHART_DIE_EMPTY : SL_CHART_DIE_VALUE,
                               0.1 * (x - y), 0, NULL };
            if (x == 2 && y >= 1 && y <= 4)
                d.state = SL_CHART_DIE_UNUSABLE;
            if (y == 3 && x >= 3)
                d.flagged = 1;
            dies[n++] = d;
        }
    return n;
}

START_TEST(test_wafer_map_counts)
{
    sl_chart_die dies[36];
    size_t n = demo_dies(dies);
    dies[7].device = "D<7>";
    sl_chart_wafer_map map = { "W01", 6, 6, 0.0, 0.0, "deviation (V)", "V", 1, 0, 0, 0, 0 };
    sl_chart_buf b;
    sl_chart_buf_init(&b);
    ck_assert_int_eq(sl_chart_wafer_map_svg(&b, &map, dies, n), SL_OK);
    const char *s = sl_chart_buf_str(&b);
    assert_svg_sane(s);
    /* 36 positions - 4 empty corners = 32 dies: 4 unusable, 3 flagged, 25 values. */
    ck_assert_uint_eq(count_of(s, "class=\"die\"") + count_of(s, "class=\"die flagged\""), 32);
    ck_assert_uint_eq(count_of(s, "data-state=\"unusable\""), 4);
    ck_assert_uint_eq(count_of(s, "data-state=\"flagged\""), 3);
    ck_assert_uint_eq(count_of(s, "data-state=\"value\""), 25);
    ck_assert_uint_eq(count_of(s, "class=\"die flagged\""), 3);
    ck_assert_uint_eq(count_of(s, "<title>W01 die ("), 32);
    ck_assert_ptr_nonnull(strstr(s, "<title>W01 die (4, 2): 0.2 V</title>"));
    ck_assert_ptr_nonnull(strstr(s, "<title>W01 die (2, 1): no usable device</title>"));
    ck_assert_ptr_nonnull(strstr(s, "<title>W01 die (1, 1) D&lt;7&gt;: 0 V</title>"));
    ck_assert_ptr_nonnull(strstr(s, "data-x=\"5\" data-y=\"3\""));
    ck_assert_ptr_nonnull(strstr(s, "class=\"wafer\""));
    ck_assert_ptr_nonnull(strstr(s, ">wafer W01</text>"));
    ck_assert_ptr_nonnull(strstr(s, ">deviation (V)</text>"));
    ck_assert_ptr_nonnull(strstr(s, ">no usable device</text>"));
    /* Flagged dies are drawn last so their outline stays on top. */
    const char *last_plain = NULL;
    for (const char *p = strstr(s, "class=\"die\""); p; p = strstr(p + 1, "class=\"die\""))
        last_plain = p;
    ck_assert(last_plain && last_plain < strstr(s, "class=\"die flagged\""));
    sl_chart_buf_free(&b);
}
END_TEST

START_TEST(test_wafer_map_bytes_per_die)
{
    /* 12,500 devices in a report under 5 MB leaves well under 400 bytes per
     * device for everything; the wafer cell budget is 200 bytes. */
    enum { SIDE = 40 };
    sl_chart_die *dies = calloc(SIDE * SIDE, sizeof *dies);
    ck_assert_ptr_nonnull(dies);
    for (int i = 0; i < SIDE * SIDE; i++) {
        dies[i].die_x = i % SIDE;
        dies[i].die_y = i / SIDE;
        dies[i].state = SL_CHART_DIE_VALUE;
        dies[i].value = -1.234567 + 0.0123 * i;
        dies[i].flagged = i % 17 == 0;
        dies[i].device = "D123";
    }
    sl_chart_wafer_map map = { "W12", SIDE, SIDE, 0.0, 2.0, "deviation (V)", "V", 0, 0, 0, 0, 0 };
    sl_chart_buf empty, full;
    sl_chart_buf_init(&empty);
    sl_chart_buf_init(&full);
    ck_assert_int_eq(sl_chart_wafer_map_svg(&empty, &map, dies, 0), SL_OK);
    ck_assert_int_eq(sl_chart_wafer_map_svg(&full, &map, dies, SIDE * SIDE), SL_OK);
    double per_die = (double)(full.len - empty.len) / (SIDE * SIDE);
    /* Budget from the report's 5 MB limit; about 150 today, so 170 catches
     * any drift before the budget is at risk. */
    ck_assert_msg(per_die < 170.0, "%.1f bytes per die", per_die);
    assert_svg_sane(sl_chart_buf_str(&full));
    assert_svg_sane(sl_chart_buf_str(&empty));
    sl_chart_buf_free(&empty);
    sl_chart_buf_free(&full);
    free(dies);
}
END_TEST

START_TEST(test_wafer_map_bad_input)
{
    sl_chart_die outside = { 6, 0, SL_CHART_DIE_VALUE, 1.0, 0, NULL };
    sl_chart_die negative = { 0, -1, SL_CHART_DIE_VALUE, 1.0, 0, NULL };
    sl_chart_wafer_map map = { "W01", 6, 6, 0.0, 0.0, "deviation (V)", "V", 1, 0, 0, 0, 0 };
    sl_chart_buf b;
    sl_chart_buf_init(&b);
    ck_assert_int_eq(sl_chart_wafer_map_svg(&b, &map, &outside, 1), SL_EINPUT);
    ck_assert_int_eq(sl_chart_wafer_map_svg(&b, &map, &negative, 1), SL_EINPUT);
    map.rows = 0;
    ck_assert_int_eq(sl_chart_wafer_map_svg(&b, &map, NULL, 0), SL_EINPUT);
    map.rows = 6;
    map.cell_px = NAN;
    ck_assert_int_eq(sl_chart_wafer_map_svg(&b, &map, NULL, 0), SL_EINPUT);
    ck_assert_str_eq(sl_chart_buf_str(&b), "");
    /* Non-finite values and a NULL wafer id still give clean output. */
    map.cell_px = 0.0;
    map.wafer_id = NULL;
    map.value_unit = NULL;
    sl_chart_die odd[2] = { { 0, 0, SL_CHART_DIE_VALUE, NAN, 1, NULL },
                            { 1, 1, SL_CHART_DIE_VALUE, INFINITY, 0, NULL } };
    ck_assert_int_eq(sl_chart_wafer_map_svg(&b, &map, odd, 2), SL_OK);
    assert_svg_sane(sl_chart_buf_str(&b));
    ck_assert_ptr_nonnull(strstr(sl_chart_buf_str(&b), "die (0, 0): n/a (flagged)"));
    sl_chart_buf_free(&b);
}
END_TEST

/* ---- charts ------------------------------------------------------------------- */

static sl_chart_frame demo_frame(const char *title)
{
    sl_chart_frame f;
    sl_chart_frame_default(&f, 640.0, 360.0, title);
    return f;
}

START_TEST(test_strip_chart_counts)
{
    const double a[5] = { -1.1, -0.9, -1.4, -1.0, -0.2 };
    const unsigned char fa[5] = { 0, 0, 0, 0, 1 };
    const double b_[4] = { 0.3, 0.5, NAN, 0.4 };
    const double c[3] = { 2.0, 2.2, 5.0 };
    const unsigned char fc[3] = { 0, 0, 1 };
    const char *const names_c[3] = { "W03/D1", "W03/D2", "W04/D9" };
    const sl_chart_category cats[3] = {
        { "ox90 / none", a, fa, NULL, 5, { -1.0, 0.2 }, 0, 0.0, 0.0, NULL, NULL, 0, 0.0, 0.0, NULL },
        { "ox90 / <anneal>", b_, NULL, NULL, 4, { 0.5, 0.3 }, 0, 0.0, 0.0, NULL, NULL, 0, 0.0, 0.0, NULL },
        { "alox20 / anneal", c, fc, names_c, 3, { NAN, 0.0 }, 0, 0.0, 0.0, NULL, NULL, 0, 0.0, 0.0, NULL },
    };
    sl_chart_frame f = demo_frame("neutrality point by split");
    sl_chart_buf b1, b2;
    sl_chart_buf_init(&b1);
    sl_chart_buf_init(&b2);
    ck_assert_int_eq(sl_chart_strip(&b1, &f, cats, 3, "split", "neutrality voltage (V)"), SL_OK);
    ck_assert_int_eq(sl_chart_strip(&b2, &f, cats, 3, "split", "neutrality voltage (V)"), SL_OK);
    const char *s = sl_chart_buf_str(&b1);
    assert_svg_sane(s);
    ck_assert_str_eq(s, sl_chart_buf_str(&b2)); /* deterministic spread */
    ck_assert_uint_eq(count_of(s, "class=\"point\""), 9);
    ck_assert_uint_eq(count_of(s, "class=\"point flagged\""), 2);
    ck_assert_uint_eq(count_of(s, "class=\"band sigma1\""), 2);
    ck_assert_uint_eq(count_of(s, "class=\"band sigma3\""), 2);
    ck_assert_uint_eq(count_of(s, "class=\"predicted\""), 2); /* none without a prediction */
    ck_assert_ptr_nonnull(strstr(s, ">neutrality voltage (V)</text>"));
    ck_assert_ptr_nonnull(strstr(s, "ox90 / &lt;anneal&gt;"));
    ck_assert_ptr_nonnull(strstr(s, "<title>W04/D9: 5 (flagged)</title>"));
    sl_chart_buf_free(&b1);
    sl_chart_buf_free(&b2);
}
END_TEST

/* The width attribute of the last rect opened before position at. */
static double bar_width_before(const char *s, const char *at)
{
    const char *w = NULL;
    for (const char *p = strstr(s, "width=\""); p && p < at; p = strstr(p + 1, "width=\""))
        w = p;
    return w ? strtod(w + 7, NULL) : -1.0;
}

/* A density strip: one bar per non-empty bin with its count in the
 * tooltip, width proportional to the count; the points given drawn on top; the
 * flag interval replaces the 3 sigma band and the legend names it. */
START_TEST(test_strip_density_and_flag_interval)
{
    const size_t bins[4] = { 2, 0, 8, 4 };
    const double out[2] = { 3.5, -2.0 };
    const unsigned char fo[2] = { 1, 1 };
    sl_chart_category cats[2] = {
        { "big", out, fo, NULL, 2, { 0.5, 0.2 }, 1, -0.4, 1.4, "flag interval", bins, 4, 0.0, 1.0, NULL },
        { "small", out, NULL, NULL, 1, { 0.4, 0.1 }, 0, 0.0, 0.0, NULL, NULL, 0, 0.0, 0.0, NULL },
    };
    sl_chart_frame f = demo_frame("density");
    sl_chart_buf b;
    sl_chart_buf_init(&b);
    ck_assert_int_eq(sl_chart_strip(&b, &f, cats, 2, "split", "neutrality voltage (V)"), SL_OK);
    const char *s = sl_chart_buf_str(&b);
    assert_svg_sane(s);
    ck_assert_uint_eq(count_of(s, "<rect class=\"bin\""), 3); /* the empty bin is not drawn */
    ck_assert_ptr_nonnull(strstr(s, "<title>8 devices, 0.5 to 0.75</title>"));
    ck_assert_ptr_nonnull(strstr(s, "<title>2 devices, 0 to 0.25</title>"));
    ck_assert_uint_eq(count_of(s, "class=\"point flagged\""), 2);
    ck_assert_uint_eq(count_of(s, "class=\"point\""), 1);
    ck_assert_uint_eq(count_of(s, "class=\"band sigma3 flag-interval\""), 1);
    ck_assert_uint_eq(count_of(s, "class=\"band sigma3\""), 1); /* the plain split's */
    ck_assert_ptr_nonnull(strstr(s, ">flag interval</text>"));
    ck_assert_ptr_nonnull(strstr(s, ">devices per bin</text>"));
    /* the fullest bin is the widest: 2 x 0.5 x the spread of the band */
    double w_full = bar_width_before(s, strstr(s, "<title>8 devices"));
    double w_half = bar_width_before(s, strstr(s, "<title>4 devices"));
    ck_assert_msg(w_full > 0.0 && fabs(w_full / w_half - 2.0) < 0.02, "widths %g %g", w_full,
                  w_half);
    sl_chart_buf_free(&b);
}
END_TEST

/* Maps for one legend: no legend of their own, die coordinates counted
 * from the first die; the shared legend names every kind of cell. */
START_TEST(test_wafer_map_axes_and_shared_legend)
{
    sl_chart_die dies[36];
    size_t n = demo_dies(dies);
    sl_chart_wafer_map map = { "W02", 6, 6, 0.0, 1.0, "deviation (V)", "V", 0, 1, 1, -3, 1 };
    sl_chart_buf b;
    sl_chart_buf_init(&b);
    ck_assert_int_eq(sl_chart_wafer_map_svg(&b, &map, dies, n), SL_OK);
    const char *s = sl_chart_buf_str(&b);
    assert_svg_sane(s);
    ck_assert_ptr_null(strstr(s, ">no usable device</text>"));
    ck_assert_ptr_null(strstr(s, "class=\"legend\""));
    /* columns -3..2 and rows 1..6, every one labelled on a 6 x 6 grid */
    ck_assert_uint_eq(count_of(s, "<text class=\"die-axis\""), 12);
    ck_assert_ptr_nonnull(strstr(s, "text-anchor=\"middle\">-3</text>"));
    ck_assert_ptr_nonnull(strstr(s, "text-anchor=\"end\" dy=\".32em\">6</text>"));
    sl_chart_buf_free(&b);
    sl_chart_buf_init(&b);
    ck_assert_int_eq(sl_chart_wafer_legend_svg(&b, 0.5, "deviation (V)"), SL_OK);
    s = sl_chart_buf_str(&b);
    assert_svg_sane(s);
    ck_assert_ptr_nonnull(strstr(s, ">no usable device</text>"));
    ck_assert_ptr_nonnull(strstr(s, ">no device at this die</text>"));
    ck_assert_ptr_nonnull(strstr(s, ">flagged device (heavy outline)</text>"));
    ck_assert_ptr_nonnull(strstr(s, ">deviation (V)</text>"));
    ck_assert_int_eq(sl_chart_wafer_legend_svg(&b, 0.0, "x"), SL_EINPUT);
    ck_assert_int_eq(sl_chart_wafer_legend_svg(&b, NAN, "x"), SL_EINPUT);
    sl_chart_buf_free(&b);
}
END_TEST

START_TEST(test_xy_chart)
{
    const double vg[6] = { -20.0, -10.0, 0.0, 10.0, 20.0, 30.0 };
    const double r[6] = { 1200.0, 2500.0, 5200.0, -1.0, 1900.0, NAN };
    const double fit[6] = { 1250.0, 2400.0, 5000.0, 2600.0, 1800.0, 1300.0 };
    const sl_chart_series series[2] = {
        { "measured", vg, r, 6, 1, 0 },
        { "fit", vg, fit, 6, 0, 1 },
    };
    sl_chart_frame f = demo_frame("transfer curve W01/D3");
    sl_chart_buf b;
    sl_chart_buf_init(&b);
    ck_assert_int_eq(sl_chart_xy(&b, &f, series, 2, "gate voltage (V)", "resistance (ohm)", 1),
                     SL_OK);
    const char *s = sl_chart_buf_str(&b);
    assert_svg_sane(s);
    ck_assert_uint_eq(count_of(s, "class=\"point s0\""), 4); /* -1 and NaN skipped on log y */
    ck_assert_uint_eq(count_of(s, "<polyline class=\"line s1\""), 1);
    ck_assert_ptr_nonnull(strstr(s, ">1000</text>"));
    ck_assert_ptr_nonnull(strstr(s, ">10000</text>"));
    sl_chart_buf_free(&b);
    ck_assert_int_eq(sl_chart_xy(&b, &f, series, 2, "gate voltage (V)", "resistance (ohm)", 0),
                     SL_OK);
    s = sl_chart_buf_str(&b);
    assert_svg_sane(s);
    ck_assert_uint_eq(count_of(s, "class=\"point s0\""), 5);
    sl_chart_buf_free(&b);
}
END_TEST

START_TEST(test_effects_chart)
{
    const sl_chart_effect effects[3] = {
        { "alox20", { 0.0, 0.2e12 }, { 0.1e12, 0.1e12 }, 0 },
        { "anneal-350", { 1.2e12, 0.3e12 }, { 2.9e12, 0.2e12 }, 1 },
        { "dope-x", { -0.5e12, 0.2e12 }, { -0.6e12, NAN }, 0 },
    };
    sl_chart_frame f = demo_frame("treatment effects");
    sl_chart_buf b;
    sl_chart_buf_init(&b);
    ck_assert_int_eq(sl_chart_effects(&b, &f, effects, 3, 3.0, "doping (cm^-2)"), SL_OK);
    const char *s = sl_chart_buf_str(&b);
    assert_svg_sane(s);
    ck_assert_uint_eq(count_of(s, "class=\"point cross planned s1\""), 3);
    ck_assert_uint_eq(count_of(s, "class=\"point estimate s0\""), 2);
    ck_assert_uint_eq(count_of(s, "class=\"point estimate flagged\""), 1);
    ck_assert_uint_eq(count_of(s, "class=\"errbar"), 5); /* one estimate has no SE */
    ck_assert_uint_eq(count_of(s, "class=\"zero\""), 1);
    ck_assert_ptr_nonnull(strstr(s, "estimate \xc2\xb1 3 SE"));
    ck_assert_ptr_nonnull(strstr(s, ">3e12</text>"));
    sl_chart_buf_free(&b);
}
END_TEST

START_TEST(test_control_chart)
{
    const double v[8] = { 1.0, 1.2, 0.9, 2.5, 1.1, NAN, -0.8, 1.05 };
    const char *const lots[8] = { "L1", "L2", "L3", "L4", "L5", "L6", "L7", "L8" };
    sl_chart_frame f = demo_frame("anneal-350 across lots");
    sl_chart_buf b;
    sl_chart_buf_init(&b);
    ck_assert_int_eq(sl_chart_control(&b, &f, v, lots, 8, 1.0, 0.0, 2.0, "lot", "effect (V)"),
                     SL_OK);
    const char *s = sl_chart_buf_str(&b);
    assert_svg_sane(s);
    ck_assert_uint_eq(count_of(s, "class=\"point\""), 5);
    ck_assert_uint_eq(count_of(s, "class=\"point flagged\""), 2);
    ck_assert_uint_eq(count_of(s, "class=\"limit\""), 2);
    ck_assert_uint_eq(count_of(s, "class=\"center\""), 1);
    ck_assert_ptr_nonnull(strstr(s, "<title>L4: 2.5 (outside limits)</title>"));
    ck_assert_ptr_nonnull(strstr(s, ">upper 2</text>"));
    sl_chart_buf_free(&b);
    ck_assert_int_eq(sl_chart_control(&b, &f, v, NULL, 3, 1.0, 0.0, 2.0, NULL, "x"), SL_OK);
    assert_svg_sane(sl_chart_buf_str(&b));
    ck_assert_ptr_nonnull(strstr(sl_chart_buf_str(&b), "<title>#2: 1.2</title>"));
    sl_chart_buf_free(&b);
    ck_assert_int_eq(sl_chart_control(&b, &f, v, NULL, 8, 1.0, 2.0, 0.0, NULL, "x"), SL_EINPUT);
    ck_assert_int_eq(sl_chart_control(&b, &f, v, NULL, 8, NAN, 0.0, 2.0, NULL, "x"), SL_EINPUT);
    /* the planned value as its own line, labelled, inside the drawn range */
    ck_assert_int_eq(sl_chart_control_planned(&b, &f, v, lots, 8, 1.0, 0.0, 2.0, 3.5, "lot", "x"),
                     SL_OK);
    assert_svg_sane(sl_chart_buf_str(&b));
    ck_assert_uint_eq(count_of(sl_chart_buf_str(&b), "class=\"predicted\""), 1);
    ck_assert_ptr_nonnull(strstr(sl_chart_buf_str(&b), ">planned 3.5</text>"));
    sl_chart_buf_free(&b);
}
END_TEST

START_TEST(test_degenerate_inputs_stay_clean)
{
    const double nans[3] = { NAN, INFINITY, -INFINITY };
    const double same[3] = { 4.0, 4.0, 4.0 };
    const sl_chart_category cats[2] = {
        { "all missing", nans, NULL, NULL, 3, { NAN, NAN }, 0, 0.0, 0.0, NULL, NULL, 0, 0.0, 0.0, NULL },
        { "constant", same, NULL, NULL, 3, { 4.0, 0.0 }, 0, 0.0, 0.0, NULL, NULL, 0, 0.0, 0.0, NULL },
    };
    const sl_chart_series series[2] = { { "bad", nans, nans, 3, 1, 1 },
                                        { NULL, same, same, 3, 1, 1 } };
    const sl_chart_effect effect = { "x", { NAN, NAN }, { INFINITY, NAN }, 1 };
    sl_chart_frame f = demo_frame(NULL);
    sl_chart_buf b;
    sl_chart_buf_init(&b);

    ck_assert_int_eq(sl_chart_strip(&b, &f, cats, 2, NULL, NULL), SL_OK);
    assert_svg_sane(sl_chart_buf_str(&b));
    sl_chart_buf_free(&b);
    ck_assert_int_eq(sl_chart_strip(&b, &f, NULL, 0, NULL, NULL), SL_OK);
    assert_svg_sane(sl_chart_buf_str(&b));
    ck_assert_ptr_nonnull(strstr(sl_chart_buf_str(&b), ">no data</text>"));
    sl_chart_buf_free(&b);
    for (int log_y = 0; log_y <= 1; log_y++) {
        ck_assert_int_eq(sl_chart_xy(&b, &f, series, 2, "x", "y", log_y), SL_OK);
        assert_svg_sane(sl_chart_buf_str(&b));
        sl_chart_buf_free(&b);
        ck_assert_int_eq(sl_chart_xy(&b, &f, series, 1, "x", "y", log_y), SL_OK);
        assert_svg_sane(sl_chart_buf_str(&b));
        ck_assert_ptr_nonnull(strstr(sl_chart_buf_str(&b), ">no data</text>"));
        sl_chart_buf_free(&b);
    }
    ck_assert_int_eq(sl_chart_effects(&b, &f, &effect, 1, NAN, "d"), SL_OK);
    assert_svg_sane(sl_chart_buf_str(&b));
    sl_chart_buf_free(&b);
    ck_assert_int_eq(sl_chart_control(&b, &f, nans, NULL, 3, 0.0, 0.0, 0.0, NULL, NULL), SL_OK);
    assert_svg_sane(sl_chart_buf_str(&b));
    sl_chart_buf_free(&b);
    ck_assert_int_eq(sl_chart_control(&b, &f, NULL, NULL, 0, 1.0, 0.0, 2.0, NULL, NULL), SL_OK);
    assert_svg_sane(sl_chart_buf_str(&b));
    sl_chart_buf_free(&b);
    /* A frame too small for its margins still yields a valid, empty plot. */
    sl_chart_frame_default(&f, 20.0, 10.0, "tiny");
    ck_assert_int_eq(sl_chart_strip(&b, &f, cats, 2, "s", "v"), SL_OK);
    assert_svg_sane(sl_chart_buf_str(&b));
    sl_chart_buf_free(&b);
}
END_TEST

START_TEST(test_stylesheet_scoped)
{
    const char *css = sl_chart_stylesheet();
    ck_assert_ptr_nonnull(css);
    ck_assert_ptr_null(strchr(css, '<'));
    ck_assert_ptr_null(strchr(css, '>'));
    /* Every rule is scoped so the report's own styles are untouched. */
    size_t rules = count_of(css, "{"), scoped = count_of(css, ".sl-chart");
    ck_assert_uint_ge(scoped, rules);
    sl_chart_frame f = demo_frame("t");
    f.embed_style = 0;
    sl_chart_buf b;
    sl_chart_buf_init(&b);
    sl_chart_frame_open(&b, &f);
    sl_chart_frame_close(&b);
    ck_assert_ptr_null(strstr(sl_chart_buf_str(&b), "<style>"));
    sl_chart_buf_free(&b);
}
END_TEST

static Suite *chart_suite(void)
{
    Suite *s = suite_create("chart");
    TCase *text = tcase_create("text");
    tcase_add_test(text, test_buf_append_printf);
    tcase_add_test(text, test_buf_escape);
    tcase_add_test(text, test_buf_px);
    suite_add_tcase(s, text);
    TCase *scale = tcase_create("scale");
    tcase_add_test(scale, test_nice_step_table);
    tcase_add_test(scale, test_ticks_unit_interval);
    tcase_add_test(scale, test_ticks_mixed_sign);
    tcase_add_test(scale, test_ticks_small_values);
    tcase_add_test(scale, test_ticks_degenerate_domains);
    tcase_add_test(scale, test_tick_labels_no_float_noise);
    tcase_add_test(scale, test_step_decimals);
    tcase_add_test(scale, test_scale_round_trip);
    tcase_add_test(scale, test_log_ticks);
    suite_add_tcase(s, scale);
    TCase *color = tcase_create("color");
    tcase_add_test(color, test_luminance_reference_values);
    tcase_add_test(color, test_diverging_endpoints_and_centre);
    tcase_add_test(color, test_diverging_lightness_monotone);
    tcase_add_test(color, test_color_legend_bar);
    suite_add_tcase(s, color);
    TCase *draw = tcase_create("draw");
    tcase_add_test(draw, test_frame_escapes_title);
    tcase_add_test(draw, test_markers_and_shapes);
    tcase_add_test(draw, test_legend_swatches_are_not_points);
    tcase_add_test(draw, test_stylesheet_scoped);
    suite_add_tcase(s, draw);
    TCase *wafer = tcase_create("wafer");
    tcase_add_test(wafer, test_wafer_map_counts);
    tcase_add_test(wafer, test_wafer_map_bytes_per_die);
    tcase_add_test(wafer, test_wafer_map_bad_input);
    suite_add_tcase(s, wafer);
    TCase *charts = tcase_create("charts");
    tcase_add_test(charts, test_strip_chart_counts);
    tcase_add_test(charts, test_strip_density_and_flag_interval);
    tcase_add_test(charts, test_wafer_map_axes_and_shared_legend);
    tcase_add_test(charts, test_xy_chart);
    tcase_add_test(charts, test_effects_chart);
    tcase_add_test(charts, test_control_chart);
    tcase_add_test(charts, test_degenerate_inputs_stay_clean);
    suite_add_tcase(s, charts);
    return s;
}

int main(void) { return sl_test_main(chart_suite()); }
