/* SPDX-License-Identifier: MIT
 * The wafer map of the chart module: a die grid inside a circular wafer
 * outline, cells coloured by the diverging scale, unusable and flagged dies
 * marked by shape and outline as well as colour (see include/splitlot/chart.h).
 */
#include "splitlot/chart.h"

#include <math.h>
#include <stdio.h>

#include "chart_internal.h"

#define PX(v) (sl__chart_px_text(v).s)

#define WAFER_PAD_PX 12.0
#define WAFER_TITLE_PX 30.0
#define WAFER_DEFAULT_CELL_PX 14.0
#define WAFER_MAX_GRID 4096
#define WAFER_AXIS_LEFT_PX 22.0  /* row labels left of the wafer */
#define WAFER_AXIS_TOP_PX 12.0   /* column labels above it */
#define WAFER_AXIS_LABELS 8      /* about this many labels per side */

/* Where things go, computed once from the grid size. */
typedef struct {
    double cell, grid_x, grid_y;   /* cell edge and top-left of the grid */
    double centre_x, centre_y, radius;
    double width, height;
    sl_chart_rect bar;             /* colour legend bar */
    double legend_y;               /* top of the unusable/flagged legend */
} wafer_layout;

static wafer_layout layout_for(const sl_chart_wafer_map *map)
{
    wafer_layout l;
    l.cell = map->cell_px > 0.0 ? map->cell_px : WAFER_DEFAULT_CELL_PX;
    double gw = map->cols * l.cell, gh = map->rows * l.cell;
    double axis_left = map->die_axes ? WAFER_AXIS_LEFT_PX : 0.0;
    double axis_top = map->die_axes ? WAFER_AXIS_TOP_PX : 0.0;
    l.radius = 0.5 * hypot(gw, gh) + 4.0;
    double content_w = fmax(2.0 * l.radius, map->no_legend ? 0.0 : 200.0);
    l.width = content_w + 2.0 * WAFER_PAD_PX + axis_left;
    l.centre_x = WAFER_PAD_PX + axis_left + content_w / 2.0;
    l.centre_y = WAFER_TITLE_PX + axis_top + l.radius;
    /* Whole-pixel grid origin: crisp cell edges and shorter numbers. */
    l.grid_x = round(l.centre_x - gw / 2.0);
    l.grid_y = round(l.centre_y - gh / 2.0);
    l.bar.x_px = WAFER_PAD_PX;
    l.bar.y_px = WAFER_TITLE_PX + 2.0 * l.radius + 26.0;
    l.bar.width_px = fmin(content_w, 220.0);
    l.bar.height_px = 10.0;
    l.legend_y = l.bar.y_px + l.bar.height_px + 18.0;
    l.height = map->no_legend ? l.centre_y + l.radius + 8.0 : l.legend_y + 2.0 * 16.0 + 8.0;
    return l;
}

/* Every k-th die labelled, k a 1-2-5 step giving about WAFER_AXIS_LABELS
 * labels; the labels are prober coordinates (index + first die). */
static int axis_step(int count)
{
    static const int steps[] = { 1, 2, 5, 10, 20, 50, 100, 200, 500, 1000, 2000, 5000 };
    for (size_t i = 0; i < sizeof steps / sizeof steps[0]; i++)
        if (count <= steps[i] * WAFER_AXIS_LABELS)
            return steps[i];
    return 10000;
}

static void draw_die_axes(sl_chart_buf *buf, const sl_chart_wafer_map *map, const wafer_layout *l)
{
    sl_chart_buf_append(buf, "<g class=\"die-axis\">");
    int step = axis_step(map->cols);
    double top = l->centre_y - l->radius - 3.0;
    for (int x = 0; x < map->cols; x++) {
        if ((x + map->first_die_x) % step != 0)
            continue;
        sl_chart_buf_printf(buf, "<text class=\"die-axis\" x=\"%s\" y=\"%s\" "
                            "text-anchor=\"middle\">%d</text>",
                            PX(l->grid_x + (x + 0.5) * l->cell), PX(top), x + map->first_die_x);
    }
    step = axis_step(map->rows);
    double left = l->centre_x - l->radius - 3.0;
    for (int y = 0; y < map->rows; y++) {
        if ((y + map->first_die_y) % step != 0)
            continue;
        sl_chart_buf_printf(buf, "<text class=\"die-axis\" x=\"%s\" y=\"%s\" "
                            "text-anchor=\"end\" dy=\".32em\">%d</text>",
                            PX(left), PX(l->grid_y + (y + 0.5) * l->cell), y + map->first_die_y);
    }
    sl_chart_buf_append(buf, "</g>");
}

static int map_ok(const sl_chart_wafer_map *map)
{
    return map->rows >= 1 && map->cols >= 1 && map->rows <= WAFER_MAX_GRID
           && map->cols <= WAFER_MAX_GRID && isfinite(map->cell_px) && map->cell_px >= 0.0
           && map->cell_px <= 1000.0;
}

static int dies_ok(const sl_chart_wafer_map *map, const sl_chart_die *dies, size_t count)
{
    for (size_t i = 0; i < count; i++)
        if (dies[i].die_x < 0 || dies[i].die_x >= map->cols || dies[i].die_y < 0
            || dies[i].die_y >= map->rows)
            return 0;
    return 1;
}

/* Half-range of the colours: the caller's, or a round number above the
 * largest |value| so the legend reads well. */
static double colour_half_range(const sl_chart_wafer_map *map, const sl_chart_die *dies,
                                size_t count)
{
    if (isfinite(map->max_abs) && map->max_abs > 0.0)
        return map->max_abs;
    double m = 0.0;
    for (size_t i = 0; i < count; i++)
        if (dies[i].state == SL_CHART_DIE_VALUE && isfinite(dies[i].value))
            m = fmax(m, fabs(dies[i].value));
    if (!(m > 0.0))
        return 1.0;
    double step = sl_chart_nice_step(m, 4);
    return ceil(m / step - 1e-9) * step;
}

static void die_tooltip(sl_chart_buf *buf, const sl_chart_wafer_map *map, const sl_chart_die *die)
{
    sl_chart_buf_append(buf, "<title>");
    if (map->wafer_id) {
        sl_chart_buf_escape(buf, map->wafer_id);
        sl_chart_buf_append(buf, " ");
    }
    sl_chart_buf_printf(buf, "die (%d, %d)", die->die_x, die->die_y);
    if (die->device) {
        sl_chart_buf_append(buf, " ");
        sl_chart_buf_escape(buf, die->device);
    }
    if (die->state == SL_CHART_DIE_UNUSABLE) {
        sl_chart_buf_append(buf, ": no usable device");
    } else {
        sl_chart_buf_printf(buf, ": %s", sl__chart_value_text(die->value).s);
        if (map->value_unit) {
            sl_chart_buf_append(buf, " ");
            sl_chart_buf_escape(buf, map->value_unit);
        }
    }
    if (die->flagged)
        sl_chart_buf_append(buf, " (flagged)");
    sl_chart_buf_append(buf, "</title>");
}

/* Opening attributes shared by both kinds of die element. */
static void die_open(sl_chart_buf *buf, const char *element, const sl_chart_die *die,
                     const char *state)
{
    sl_chart_buf_printf(buf, "<%s class=\"die%s\" data-state=\"%s\" data-x=\"%d\" data-y=\"%d\"",
                        element, die->flagged ? " flagged" : "", state, die->die_x, die->die_y);
}

static void draw_value_die(sl_chart_buf *buf, const sl_chart_wafer_map *map,
                           const sl_chart_die *die, double x, double y, double cell,
                           double max_abs)
{
    char fill[8];
    sl_chart_diverging_hex(fill, die->value, max_abs);
    die_open(buf, "path", die, die->flagged ? "flagged" : "value");
    sl_chart_buf_printf(buf, " d=\"M%s %sh%sv%sh-%sz\" fill=\"%s\">", PX(x), PX(y), PX(cell),
                        PX(cell), PX(cell), fill);
    die_tooltip(buf, map, die);
    sl_chart_buf_append(buf, "</path>");
}

static void draw_unusable_die(sl_chart_buf *buf, const sl_chart_wafer_map *map,
                              const sl_chart_die *die, double x, double y, double cell)
{
    die_open(buf, "g", die, "unusable");
    sl_chart_buf_append(buf, ">");
    die_tooltip(buf, map, die);
    sl__chart_unusable_cell(buf, x, y, cell);
    sl_chart_buf_append(buf, "</g>");
}

/* Draw the dies whose flagged state matches; flagged ones go last so their
 * heavy outline is not covered by a neighbour. */
static void draw_dies(sl_chart_buf *buf, const sl_chart_wafer_map *map, const wafer_layout *l,
                      const sl_chart_die *dies, size_t count, double max_abs, int flagged)
{
    for (size_t i = 0; i < count; i++) {
        const sl_chart_die *die = &dies[i];
        if (die->state == SL_CHART_DIE_EMPTY || (die->flagged != 0) != flagged)
            continue;
        double x = l->grid_x + die->die_x * l->cell, y = l->grid_y + die->die_y * l->cell;
        if (die->state == SL_CHART_DIE_UNUSABLE)
            draw_unusable_die(buf, map, die, x, y, l->cell);
        else
            draw_value_die(buf, map, die, x, y, l->cell, max_abs);
    }
}

static void draw_outline(sl_chart_buf *buf, const wafer_layout *l)
{
    sl_chart_buf_printf(buf, "<circle class=\"wafer\" cx=\"%s\" cy=\"%s\" r=\"%s\"/>",
                        PX(l->centre_x), PX(l->centre_y), PX(l->radius));
    /* A notch at the bottom fixes the orientation the rows are counted in. */
    double bottom = l->centre_y + l->radius;
    sl_chart_buf_printf(buf, "<path class=\"notch\" d=\"M%s %sl5 -7l5 7z\"/>",
                        PX(l->centre_x - 5.0), PX(bottom));
}

static void draw_wafer_legends(sl_chart_buf *buf, const sl_chart_wafer_map *map,
                               const wafer_layout *l, double max_abs)
{
    sl_chart_color_legend(buf, &l->bar, max_abs, 9,
                          map->value_title ? map->value_title : "value");
    const sl_chart_legend_item items[2] = {
        { SL_CHART_SWATCH_UNUSABLE, NULL, NULL, "no usable device" },
        { SL_CHART_SWATCH_BAND, "flag-cell", NULL, "flagged device (heavy outline)" },
    };
    sl_chart_legend(buf, WAFER_PAD_PX, l->legend_y, items, 2);
}

sl_status sl_chart_wafer_legend_svg(sl_chart_buf *buf, double max_abs, const char *value_title)
{
    if (!isfinite(max_abs) || !(max_abs > 0.0))
        return SL_EINPUT;
    sl_chart_frame frame;
    sl_chart_frame_default(&frame, 560.0, 76.0, NULL);
    frame.embed_style = 0;
    sl_status st = sl_chart_frame_open(buf, &frame);
    if (st != SL_OK)
        return st;
    sl_chart_buf_append(buf, "<g class=\"wafer-legend\">");
    sl_chart_rect bar = { WAFER_PAD_PX, 26.0, 240.0, 10.0 };
    sl_chart_color_legend(buf, &bar, max_abs, 9, value_title ? value_title : "value");
    const sl_chart_legend_item cells[3] = {
        { SL_CHART_SWATCH_UNUSABLE, NULL, NULL, "no usable device" },
        { SL_CHART_SWATCH_BAND, "wafer", NULL, "no device at this die" },
        { SL_CHART_SWATCH_BAND, "flag-cell", NULL, "flagged device (heavy outline)" },
    };
    sl_chart_legend(buf, 290.0, 8.0, cells, 3);
    sl_chart_buf_append(buf, "</g>");
    return sl_chart_frame_close(buf);
}

sl_status sl_chart_wafer_map_svg(sl_chart_buf *buf, const sl_chart_wafer_map *map,
                                 const sl_chart_die *dies, size_t count)
{
    if (!map_ok(map) || (count > 0 && !dies) || !dies_ok(map, dies, count))
        return SL_EINPUT;
    wafer_layout l = layout_for(map);
    double max_abs = colour_half_range(map, dies, count);
    char title[160];
    snprintf(title, sizeof title, "wafer %s", map->wafer_id ? map->wafer_id : "");
    sl_chart_frame frame;
    sl_chart_frame_default(&frame, l.width, l.height, title);
    frame.embed_style = map->embed_style;
    sl_status st = sl_chart_frame_open(buf, &frame);
    if (st != SL_OK)
        return st;
    draw_outline(buf, &l);
    if (map->die_axes)
        draw_die_axes(buf, map, &l);
    /* cells too small for an outline of their own: no white seams */
    sl_chart_buf_append(buf, l.cell < 6.0 ? "<g class=\"dies fine\">" : "<g class=\"dies\">");
    draw_dies(buf, map, &l, dies, count, max_abs, 0);
    draw_dies(buf, map, &l, dies, count, max_abs, 1);
    sl_chart_buf_append(buf, "</g>");
    if (!map->no_legend)
        draw_wafer_legends(buf, map, &l, max_abs);
    return sl_chart_frame_close(buf);
}
