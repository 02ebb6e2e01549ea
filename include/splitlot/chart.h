/* SPDX-License-Identifier: MIT
 * The drawing layer of the lot report: a growable text buffer with XML
 * escaping, scales with round-number ticks, a colour-blind-safe diverging
 * colour scale, SVG primitives (axes, markers, error bars, bands, legends),
 * the wafer map and the report's charts. It writes SVG text into a buffer the
 * caller owns; it does not read data, compute statistics or write files.
 */
#ifndef SPLITLOT_CHART_H
#define SPLITLOT_CHART_H

#include <stddef.h>

#include "splitlot/error.h"
#include "splitlot/units.h"

/* ------------------------------------------------------------------------ */
/* Text buffer                                                               */
/* ------------------------------------------------------------------------ */

/* A growable NUL-terminated text buffer. Initialise with sl_chart_buf_init
 * (or zero it), release with sl_chart_buf_free. The status is sticky: after
 * the first failed allocation every append is a no-op returning SL_ENOMEM,
 * so a long drawing can be checked once at the end. */
typedef struct {
    char *data;       /* text, NUL-terminated; NULL until the first append */
    size_t len;       /* bytes used, without the NUL */
    size_t cap;       /* bytes allocated */
    sl_status status; /* SL_OK, or SL_ENOMEM after a failed allocation */
} sl_chart_buf;

/* An empty buffer with status SL_OK. */
void sl_chart_buf_init(sl_chart_buf *buf);

/* Release the text; the buffer is empty and usable again afterwards. */
void sl_chart_buf_free(sl_chart_buf *buf);

/* The text so far, "" when nothing was appended; never NULL. */
const char *sl_chart_buf_str(const sl_chart_buf *buf);

/* Hand the text over to the caller (free() it), leaving the buffer empty.
 * Returns NULL when the buffer holds nothing or its status is not SL_OK. */
char *sl_chart_buf_detach(sl_chart_buf *buf);

/* Append text verbatim (NULL appends nothing). SL_OK or SL_ENOMEM. */
sl_status sl_chart_buf_append(sl_chart_buf *buf, const char *text);

/* Append printf-formatted text. SL_OK, SL_ENOMEM, or SL_EINPUT for a
 * format error. */
sl_status sl_chart_buf_printf(sl_chart_buf *buf, const char *fmt, ...)
#if defined(__GNUC__)
    __attribute__((format(printf, 2, 3)))
#endif
    ;

/* Append text escaped for XML/HTML character data and attribute values:
 * & < > " ' become &amp; &lt; &gt; &quot; &#39;. NULL appends nothing.
 * SL_OK or SL_ENOMEM. */
sl_status sl_chart_buf_escape(sl_chart_buf *buf, const char *text);

/* Append a coordinate in px with at most two decimals and no trailing zeros
 * ("12.5", "-3", "0"); a non-finite value is written as 0 so that no "nan" or
 * "inf" ever reaches the SVG. SL_OK or SL_ENOMEM. */
sl_status sl_chart_buf_px(sl_chart_buf *buf, double value_px);

/* ------------------------------------------------------------------------ */
/* Scales and ticks                                                          */
/* ------------------------------------------------------------------------ */

/* Maps a data domain onto a pixel range, linearly or by log10. The range
 * may run backwards (y grows downwards in SVG: range_min_px is the bottom). */
typedef struct {
    double domain_min, domain_max; /* data units; > 0 for a log scale */
    double range_min_px, range_max_px;
    int log10;                     /* 0: linear, 1: log10 */
} sl_chart_scale;

/* A linear scale. A zero-width or non-finite domain is widened (see
 * sl_chart_domain_pad) so the mapping never divides by zero. */
void sl_chart_scale_linear(sl_chart_scale *out, double domain_min, double domain_max,
                           double range_min_px, double range_max_px);

/* A log10 scale. SL_EINPUT unless 0 < domain_min and both bounds are finite;
 * domain_min == domain_max is widened to one decade around the value. */
sl_status sl_chart_scale_log(sl_chart_scale *out, double domain_min, double domain_max,
                             double range_min_px, double range_max_px);

/* Pixel position of a data value. Values outside the domain extrapolate; a
 * non-positive value on a log scale maps to range_min_px. */
double sl_chart_scale_px(const sl_chart_scale *scale, double value);

/* Data value at a pixel position (inverse of sl_chart_scale_px). */
double sl_chart_scale_value(const sl_chart_scale *scale, double position_px);

/* Widen a degenerate domain in place: non-finite bounds become [0, 1]; a
 * zero-width domain [v, v] becomes [v - d, v + d] with d = 10 % of |v|
 * (1 when v = 0); swapped bounds are put in order. */
void sl_chart_domain_pad(double *domain_min, double *domain_max);

/* A round step 1, 2 or 5 x 10^k near span / target_count (target_count 0
 * counts as 1): r = span / target scaled into [1, 10) becomes 1 below 1.5,
 * 2 below 3, 5 below 7, else 10 (the 1-2-5 rule, common practice for axis
 * ticks). Returns 1 for a non-positive or non-finite span. */
double sl_chart_nice_step(double span, size_t target_count);

#define SL_CHART_MAX_TICKS 64

/* Tick positions of an axis, in data units, ascending. */
typedef struct {
    double values[SL_CHART_MAX_TICKS];
    size_t count;
    double step;  /* linear step (for a log axis the decade ratio, 10) */
    int decimals; /* decimals that print every linear tick exactly */
    int log10;    /* 1 when the ticks are decades of a log axis */
} sl_chart_ticks;

/* Round-number ticks inside [domain_min, domain_max] with a step from
 * sl_chart_nice_step (about target_count intervals). The domain is padded
 * first (sl_chart_domain_pad). SL_OK, or SL_EINPUT when more than
 * SL_CHART_MAX_TICKS ticks would be needed (never for target <= 20). */
sl_status sl_chart_ticks_nice(sl_chart_ticks *out, double domain_min, double domain_max,
                              size_t target_count);

/* Extend a linear scale's domain outward to multiples of its nice step and
 * fill the ticks for it, so the first and last ticks sit on the ends. */
sl_status sl_chart_scale_nice(sl_chart_scale *scale, sl_chart_ticks *out_ticks,
                              size_t target_count);

/* Decade ticks 10^k of a log scale that lie inside its domain (none when
 * the domain holds no whole decade: extend it to decades first, as
 * sl_chart_xy does). SL_EINPUT for a non-log scale or more than
 * SL_CHART_MAX_TICKS decades. */
sl_status sl_chart_ticks_log(sl_chart_ticks *out, const sl_chart_scale *scale);

/* Decimals that print every multiple of step exactly: the smallest d
 * (0..15) with step x 10^d a whole number (20 -> 0, 0.2 -> 1, 0.05 -> 2);
 * 0 for a non-positive or non-finite step. */
int sl_chart_step_decimals(double step);

/* Format a tick label into out (size bytes): fixed notation with the tick
 * set's decimals ("0.3", never "0.30000000000000004"; "-0" becomes "0");
 * engineering-style exponent notation ("1.5e12") when the magnitude is
 * >= 1e6 or the step is < 1e-4; "1e-3" style for log decades outside
 * 1e-3..1e5. A non-finite value prints as "n/a". Returns what snprintf
 * returns. */
int sl_chart_tick_label(char *out, size_t size, double value, const sl_chart_ticks *ticks);

/* ------------------------------------------------------------------------ */
/* Colour                                                                    */
/* ------------------------------------------------------------------------ */

typedef struct {
    unsigned char r, g, b;
} sl_chart_rgb;

/* splitlot's diverging scale: negative values blue, zero a light warm
 * neutral, positive values orange to brown. Every channel falls
 * monotonically from the centre outward, so lightness falls on both sides
 * and the ends stay apart for red-green colour-blind readers (blue against
 * orange, no red-green contrast). value is clamped to [-max_abs, +max_abs];
 * a non-finite value or max_abs <= 0 gives the centre colour. */
sl_chart_rgb sl_chart_diverging_rgb(double value, double max_abs);

/* The same colour as "#rrggbb" into out (8 bytes incl. the NUL). */
void sl_chart_diverging_hex(char out[8], double value, double max_abs);

/* Relative luminance 0..1 of an sRGB colour, WCAG 2.x definition:
 * channel c/255 linearised as c/12.92 (c <= 0.04045) or ((c+0.055)/1.055)^2.4,
 * L = 0.2126 R + 0.7152 G + 0.0722 B. */
double sl_chart_relative_luminance(sl_chart_rgb color);

/* ------------------------------------------------------------------------ */
/* Frame and primitives                                                      */
/* ------------------------------------------------------------------------ */

/* An axis-aligned rectangle in px (SVG coordinates, y down). */
typedef struct {
    double x_px, y_px, width_px, height_px;
} sl_chart_rect;

/* Size, margins and title of one chart. */
typedef struct {
    double width_px, height_px;
    double margin_left_px, margin_right_px, margin_top_px, margin_bottom_px;
    const char *title;       /* visible heading and accessible name */
    const char *description; /* optional longer text for <desc>, or NULL */
    int embed_style;         /* 1: put sl_chart_stylesheet() inside the <svg> */
} sl_chart_frame;

/* Defaults: the given size, margins for axis labels and titles, embedded
 * style. title may be NULL (the chart then has no heading). */
void sl_chart_frame_default(sl_chart_frame *out, double width_px, double height_px,
                            const char *title);

/* The plot area inside the margins (never negative in size). */
sl_chart_rect sl_chart_frame_plot_area(const sl_chart_frame *frame);

/* The CSS the charts' classes rely on, every rule scoped under .sl-chart, for
 * a report that includes it once instead of per chart. Never NULL. */
const char *sl_chart_stylesheet(void);

/* Open <svg class="sl-chart" viewBox=... role="img" aria-label=...> with
 * <title>, optional <desc>, optional <style> and the visible title text.
 * SL_EINPUT for a non-positive or non-finite size, else the buffer status. */
sl_status sl_chart_frame_open(sl_chart_buf *buf, const sl_chart_frame *frame);

/* Close the <svg>. Returns the buffer status. */
sl_status sl_chart_frame_close(sl_chart_buf *buf);

typedef enum { SL_CHART_AXIS_BOTTOM = 0, SL_CHART_AXIS_LEFT } sl_chart_axis_side;

/* An axis along one side of plot: line, ticks with labels (ticks outside the
 * scale's domain skipped), light grid lines across the plot, and a title
 * that should carry the unit, e.g. "neutrality voltage (V)". Buffer status. */
sl_status sl_chart_axis(sl_chart_buf *buf, const sl_chart_rect *plot,
                        const sl_chart_scale *scale, const sl_chart_ticks *ticks,
                        sl_chart_axis_side side, const char *title);

/* Centre x of category i of count equal bands across plot, px. */
double sl_chart_band_center_px(const sl_chart_rect *plot, size_t count, size_t i);

/* A bottom axis of count named categories with labels at band centres and
 * a title. When the labels would collide (about 6 px a character) they are
 * slanted and the title is left out to keep them legible. Buffer status. */
sl_status sl_chart_axis_categories(sl_chart_buf *buf, const sl_chart_rect *plot,
                                   const char *const *names, size_t count,
                                   const char *title);

typedef enum {
    SL_CHART_MARKER_CIRCLE = 0, /* ordinary point */
    SL_CHART_MARKER_DIAMOND,    /* flagged point: shape, not only colour */
    SL_CHART_MARKER_CROSS       /* alternative series or excluded point */
} sl_chart_marker_kind;

/* One marker centred at (x, y) of the given radius, with
 * class="point <css_class>" and an optional <title> tooltip. Non-finite
 * positions draw nothing. Buffer status. */
sl_status sl_chart_marker(sl_chart_buf *buf, double x_px, double y_px, double radius_px,
                          sl_chart_marker_kind kind, const char *css_class,
                          const char *tooltip);

/* A polyline through the finite points (x_px[i], y_px[i]); a non-finite point
 * breaks the line into separate pieces. class="line <css_class>". */
sl_status sl_chart_polyline(sl_chart_buf *buf, const double *x_px, const double *y_px,
                            size_t count, const char *css_class);

/* A vertical error bar at x from y_low to y_high with caps of cap_width_px,
 * class="errbar <css_class>". Non-finite input draws nothing. */
sl_status sl_chart_error_bar(sl_chart_buf *buf, double x_px, double y_low_px,
                             double y_high_px, double cap_width_px, const char *css_class);

/* A translucent rectangle between two x and two y positions (any order),
 * class="band <css_class>" (e.g. "sigma1", "sigma3"). Non-finite: nothing. */
sl_status sl_chart_band(sl_chart_buf *buf, double x0_px, double x1_px, double y0_px,
                        double y1_px, const char *css_class);

/* A straight line segment, class="<css_class>". Non-finite: nothing. */
sl_status sl_chart_segment(sl_chart_buf *buf, double x0_px, double y0_px, double x1_px,
                           double y1_px, const char *css_class);

typedef enum { SL_CHART_ANCHOR_START = 0, SL_CHART_ANCHOR_MIDDLE, SL_CHART_ANCHOR_END } sl_chart_anchor;

/* Escaped text at (x, y) (baseline), with anchor and optional class. */
sl_status sl_chart_text(sl_chart_buf *buf, double x_px, double y_px, sl_chart_anchor anchor,
                        const char *css_class, const char *text);

typedef enum {
    SL_CHART_SWATCH_CIRCLE = 0, /* a marker */
    SL_CHART_SWATCH_DIAMOND,
    SL_CHART_SWATCH_CROSS,
    SL_CHART_SWATCH_LINE,       /* a line sample */
    SL_CHART_SWATCH_BAND,       /* a filled box (bands, colour cells) */
    SL_CHART_SWATCH_UNUSABLE    /* the wafer map's "no usable device" cell */
} sl_chart_swatch;

/* One legend entry: a swatch drawn with css_class (and fill, "#rrggbb" or
 * NULL for the class colour) and its label. */
typedef struct {
    sl_chart_swatch swatch;
    const char *css_class;
    const char *fill;
    const char *label;
} sl_chart_legend_item;

/* A vertical legend with its top-left corner at (x, y), 16 px per entry,
 * inside <g class="legend">. Buffer status. */
sl_status sl_chart_legend(sl_chart_buf *buf, double x_px, double y_px,
                          const sl_chart_legend_item *items, size_t count);

/* A labelled bar of the diverging scale: steps (2..256, default 9 when 0)
 * discrete rects from -max_abs to +max_abs, labels at both ends and 0, and
 * a title above that carries the unit, e.g. "deviation (V)". Buffer status,
 * or SL_EINPUT for a non-finite max_abs. */
sl_status sl_chart_color_legend(sl_chart_buf *buf, const sl_chart_rect *bar, double max_abs,
                                size_t steps, const char *title);

/* ------------------------------------------------------------------------ */
/* Wafer map                                                                 */
/* ------------------------------------------------------------------------ */

typedef enum {
    SL_CHART_DIE_EMPTY = 0, /* no device at this position: not drawn */
    SL_CHART_DIE_VALUE,     /* a device with a value, coloured by it */
    SL_CHART_DIE_UNUSABLE   /* a device without a usable value: grey with an x */
} sl_chart_die_state;

/* One die position. die_x is the 0-based column (left to right), die_y the
 * 0-based row (top to bottom, as the wafer is seen with the notch down). */
typedef struct {
    int die_x, die_y;
    sl_chart_die_state state;
    double value;       /* in the map's unit; used when state is VALUE */
    int flagged;        /* nonzero: outlined heavily, data-state="flagged" */
    const char *device; /* optional device name for the tooltip, or NULL */
} sl_chart_die;

typedef struct {
    const char *wafer_id;    /* caption and accessible name */
    int rows, cols;          /* grid size, >= 1 each */
    double cell_px;          /* cell edge, 0 for a default of 14 px */
    double max_abs;          /* colour half-range; <= 0: from the data */
    const char *value_title; /* legend title with unit, e.g. "deviation (V)" */
    const char *value_unit;  /* unit for tooltips, e.g. "V" (may be NULL) */
    int embed_style;         /* as in sl_chart_frame */
    int no_legend;           /* nonzero: no legend below the wafer (one legend
                                for many maps: sl_chart_wafer_legend_svg) */
    int die_axes;            /* nonzero: die coordinates along the top and the
                                left of the grid, counted from first_die */
    int first_die_x, first_die_y; /* prober coordinates of column 0, row 0 */
} sl_chart_wafer_map;

/* The legend of wafer maps drawn with no_legend, as its own small <svg>:
 * the colour bar over +/- max_abs with title (unit inside), and the cells:
 * "no usable device" (grey with an x), "no device at this die" (bare wafer)
 * and "flagged device". SL_EINPUT for a non-finite or non-positive max_abs. */
sl_status sl_chart_wafer_legend_svg(sl_chart_buf *buf, double max_abs, const char *value_title);

/* A complete <svg> wafer map: circular wafer outline with a notch at the
 * bottom, one element per non-empty die (a <path>, or a <g> holding the grey
 * cell and its x for an unusable die) with class="die" or "die flagged",
 * data-state="value", "flagged" (a flagged die with a value) or "unusable"
 * (flagged or not; its outline still shows the flag), data-x and data-y,
 * a fill from the diverging scale over +/- max_abs and a <title> tooltip
 * "W01 die (x, y) [device]: value unit". Flagged dies are drawn last so
 * their heavy outline stays whole. Below the wafer a colour legend bar and
 * a legend for unusable and flagged cells; the wafer id as caption. About
 * 150 bytes per die. SL_EINPUT for a bad grid (rows or cols outside
 * 1..4096, cell_px outside 0..1000) or a die outside it, else buffer status. */
sl_status sl_chart_wafer_map_svg(sl_chart_buf *buf, const sl_chart_wafer_map *map,
                                 const sl_chart_die *dies, size_t count);

/* ------------------------------------------------------------------------ */
/* Charts of the report                                                      */
/* ------------------------------------------------------------------------ */

/* One category (split) of a strip chart. */
typedef struct {
    const char *name;             /* split name on the x axis */
    const double *values;         /* measured values; non-finite ones skipped */
    const unsigned char *flagged; /* per value nonzero = flagged, or NULL */
    const char *const *labels;    /* per value tooltip name (device), or NULL */
    size_t count;
    sl_est predicted;             /* centre and sigma of the predicted band;
                                     a non-finite val draws no band */
    /* The interval the values are flagged against (has_flag_interval
     * nonzero, both ends finite): drawn instead of the +/-3 sigma band, and
     * named in the legend by flag_label (NULL: "flag interval"). */
    int has_flag_interval;
    double flag_low, flag_high;
    const char *flag_label;
    /* A density strip instead of a point per value (bins non-NULL): counts
     * of the values in n_bins equal bins from bins_low to bins_high, drawn
     * as a violin-like column of bars; the values above are then only the
     * ones drawn on top as points (the flagged, say). */
    const size_t *bins;
    size_t n_bins;
    double bins_low, bins_high;
    const char *const *tips;      /* per value whole tooltip (device and value in
                                     its own unit, for a value drawn on another
                                     scale), or NULL: "<label>: <value>" */
} sl_chart_category;

/* Strip chart: per category the predicted value as a line with +/-1 sigma and
 * +/-3 sigma bands (or the flag interval, see sl_chart_category), and the
 * values as points spread sideways by a fixed low-discrepancy offset of their
 * index (no randomness: same input, same picture). Points get class="point"
 * or "point flagged" (diamond, drawn on top). A category with bins draws
 * them first as bars of class "density" (width proportional to the count,
 * a <title> with the count and the bin's range). The y axis covers data,
 * bins and bands with nice bounds; a legend takes a 170 px strip added to
 * the frame's right margin. Buffer status or SL_EINPUT for a bad frame. */
sl_status sl_chart_strip(sl_chart_buf *buf, const sl_chart_frame *frame,
                         const sl_chart_category *categories, size_t count,
                         const char *x_title, const char *y_title);

/* One series of an x-y chart. */
typedef struct {
    const char *name;   /* legend label, or NULL for no entry */
    const double *x, *y;
    size_t count;
    int draw_points;    /* markers with class="point s<index>" */
    int draw_line;      /* polyline with class="line s<index>" */
} sl_chart_series;

/* x-y chart of series (e.g. measured transfer curve as points, the fit as a
 * line), coloured by index (s0..s5, repeating); log_y puts y on a log10 scale
 * with whole decades and skips y <= 0. Non-finite points are skipped. Named
 * series get a legend in a 130 px strip added to the right margin. Buffer
 * status or SL_EINPUT for a bad frame. */
sl_status sl_chart_xy(sl_chart_buf *buf, const sl_chart_frame *frame,
                      const sl_chart_series *series, size_t count,
                      const char *x_title, const char *y_title, int log_y);

/* One effect level: planned value and sigma, estimate and standard error. */
typedef struct {
    const char *level;  /* e.g. "anneal-350" */
    sl_est planned;
    sl_est estimated;
    int off_plan;       /* nonzero: estimate drawn as a flagged diamond */
} sl_chart_effect;

/* Estimate-vs-planned chart: per level the planned value (cross, class
 * "point cross planned s1") and the estimate (circle "point estimate s0", or
 * diamond "point estimate flagged" when off plan), each with an error bar of
 * +/- interval_k sigma (interval_k <= 0 or non-finite: 1). A dashed zero
 * line; a legend in a 130 px strip added to the right margin. Buffer status
 * or SL_EINPUT for a bad frame. */
sl_status sl_chart_effects(sl_chart_buf *buf, const sl_chart_frame *frame,
                           const sl_chart_effect *effects, size_t count,
                           double interval_k, const char *y_title);

/* Individuals control chart: values in time order (labels optional, e.g. lot
 * ids; without them the points are numbered from 1) joined by a thin trace,
 * with the centre line and the lower and upper limits labelled in a 90 px
 * strip added to the right margin; points outside the limits get
 * class="point flagged" and a diamond. Non-finite values are skipped.
 * Buffer status, or SL_EINPUT for non-finite or swapped limits. */
sl_status sl_chart_control(sl_chart_buf *buf, const sl_chart_frame *frame,
                           const double *values, const char *const *labels, size_t count,
                           double center, double lower_limit, double upper_limit,
                           const char *x_title, const char *y_title);

/* The same with the planned value drawn as a solid line labelled "planned"
 * (class "predicted"); planned NaN draws none, as sl_chart_control. */
sl_status sl_chart_control_planned(sl_chart_buf *buf, const sl_chart_frame *frame,
                                   const double *values, const char *const *labels, size_t count,
                                   double center, double lower_limit, double upper_limit,
                                   double planned, const char *x_title, const char *y_title);

#endif
