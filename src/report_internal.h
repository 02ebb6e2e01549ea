/* SPDX-License-Identifier: MIT
 * Private to the report module (src/report*.c): the render context passed to
 * every section, number formatting with units, and the section renderers.
 * Not part of the public API.
 */
#ifndef SL_REPORT_INTERNAL_H
#define SL_REPORT_INTERNAL_H

#include "splitlot/report.h"

/* Above this many usable devices a split's strip is a density strip
 * (binned, flagged devices on top as points); the page then grows with the
 * splits, not the devices. */
#define SL_REPORT_STRIP_POINTS_MAX 3000
#define SL_REPORT_STRIP_BINS 60
/* Flagged devices drawn as points over one density strip, at most. */
#define SL_REPORT_STRIP_OUTLIERS_MAX 400
/* Rows of the failure-analysis list on the page (compare lists them all). */
#define SL_REPORT_FAILURE_ROWS_MAX 1000
#define SL_REPORT_LABEL_BYTES 176 /* wafer and device names of at most 64 bytes, a value */

/* What one split's strip shows: every usable device as a point, or bins
 * and the flagged devices as points. */
typedef struct {
    int binned;
    size_t n_points, cap_points;
    double *values_V;
    unsigned char *flagged;
    char (*labels)[SL_REPORT_LABEL_BYTES];
    const char **label_ptrs;
    double min_V, max_V;          /* range of the bins */
    size_t bins[SL_REPORT_STRIP_BINS];
    size_t n_flagged_not_drawn;   /* flagged beyond SL_REPORT_STRIP_OUTLIERS_MAX */
} report_strip;

/* Deviations kept per die for its median; a die with more usable devices
 * shows their mean. */
#define SL_REPORT_DIE_VALUES 16

/* One die position of one wafer: one device, or several (their median). */
typedef struct {
    double sum_V;
    unsigned n_values, n_devices, n_flagged;
    double values_V[SL_REPORT_DIE_VALUES]; /* the first usable deviations */
    char device[65];              /* the first device's name */
} report_die;

/* What the page needs of the devices, gathered in passes over them, in
 * memory that grows with splits, wafers and dies, not devices. */
/* The device parameters charted per split besides V_cnp. */
typedef enum {
    REPORT_MOBILITY = 0,          /* log10 of cm^2/Vs */
    REPORT_N0,                    /* log10 of cm^-2 */
    REPORT_HYSTERESIS,            /* V */
    REPORT_QUANTITIES
} report_quantity;

typedef struct {
    report_strip *strips;         /* per split */
    report_strip *quantity[REPORT_QUANTITIES]; /* per split, no labels */
    size_t n_quantity_values[REPORT_QUANTITIES]; /* over the lot */
    report_die *dies;             /* per plan wafer, rows x cols each */
    long *wafer_split;            /* per plan wafer: split of its devices, or -1 */
    size_t n_slots;               /* rows x cols */
    size_t n_off_grid;            /* devices whose die lies outside the grid */
    double colour_max_abs_V;      /* one colour half-range for every wafer map */
} report_data;

typedef struct {
    sl_chart_buf *buf;
    const sl_analysis *a;         /* the summary; a->devices NULL when streamed */
    sl_analysis_stream *stream;   /* the devices, or NULL: a->devices */
    sl_store *store;
    const sl_report_options *opts;
    sl_report_summary *sum;
    sl_diag *diag;
    int has_curves, has_history; /* sections present, for the contents */
    int has_hysteresis;
    size_t next_device, next_flagged; /* cursors over a->devices */
    report_data data;
    /* The history when it was read before a stream took the store's
     * scratch (one per connection), else read by its section. */
    const sl_history *history;
    int history_loaded;
} report_ctx;

/* ---- report_collect.c: the devices, one at a time ---- */

/* The next device in the analysis' order, NULL after the last (the next
 * call starts over); the next flagged one, most severe first. */
sl_status sl__report_next_device(report_ctx *c, const sl_analyze_device **device);
sl_status sl__report_next_flagged(report_ctx *c, const sl_analyze_device **device);
/* Both readings start over. */
void sl__report_rewind(report_ctx *c);
/* What a die shows: its device's deviation; for several devices their
 * median (the mean beyond SL_REPORT_DIE_VALUES usable ones); NaN without
 * a usable device. */
double sl__report_die_value(const report_die *die);
/* Gather c->data in one pass over the devices. */
sl_status sl__report_collect(report_ctx *c);
void sl__report_data_free(report_data *data);
/* The value a parameter's chart shows of a device (log10 for mobility and
 * n0), NaN when it has none. */
double sl__report_quantity_value(const sl_analyze_device *d, report_quantity q);

/* ---- report_format.c: numbers with units, escaped text ---- */

/* A voltage with two decimals and " V"; "n/a" when non-finite. */
void sl__report_volts(sl_chart_buf *buf, double value_V);
/* A density as "1.20&times;10<sup>12</sup>" (HTML), no unit; "n/a" when
 * non-finite. */
void sl__report_density(sl_chart_buf *buf, double value_per_cm2);
/* The HTML text of the unit cm^-2. */
extern const char sl__report_per_cm2_html[];
/* A table cell with a number of the given decimals (class "num"). */
void sl__report_cell_fixed(sl_chart_buf *buf, double value, int decimals);
void sl__report_cell_density(sl_chart_buf *buf, double value_per_cm2);
/* "lo &ndash; hi" with the given decimals and an optional HTML suffix;
 * "n/a" when a bound is non-finite. */
void sl__report_cell_range(sl_chart_buf *buf, double lo, double hi, int decimals,
                          const char *suffix_html);
void sl__report_cell_text(sl_chart_buf *buf, const char *text);
void sl__report_cell_long(sl_chart_buf *buf, long value);
/* Open <section id="id"> with its <h2> heading (escaped). */
void sl__report_section_open(sl_chart_buf *buf, const char *id, const char *heading);
void sl__report_section_close(sl_chart_buf *buf);
/* <p class="note"> with escaped text. */
void sl__report_note(sl_chart_buf *buf, const char *text);

/* ---- report_tables.c ---- */
void sl__report_splits_table(report_ctx *c, size_t dielectric);
void sl__report_window_table(report_ctx *c, size_t dielectric);
void sl__report_parameters_table(report_ctx *c);
void sl__report_effects_table(report_ctx *c);
sl_status sl__report_failure_table(report_ctx *c);

/* ---- report_runs.c: the lot's measurement runs ---- */
sl_status sl__report_section_runs(report_ctx *c);

/* ---- report_sections.c: splits and effects ---- */
sl_status sl__report_section_splits(report_ctx *c);
sl_status sl__report_section_effects(report_ctx *c);

/* ---- report_hysteresis.c: per split, for lots with double sweeps ---- */
sl_status sl__report_section_hysteresis(report_ctx *c);

/* ---- report_sections.c: device parameters ---- */
sl_status sl__report_section_parameters(report_ctx *c);

/* ---- report_wafers.c ---- */
sl_status sl__report_section_wafers(report_ctx *c);

/* ---- report_curves.c ---- */
sl_status sl__report_section_curves(report_ctx *c);

/* ---- report_history.c ---- */
sl_status sl__report_section_history(report_ctx *c);
/* Every lot's estimates across lots, or NULL for a store of one lot. */
sl_status sl__report_load_history(sl_history **out, sl_store *store, sl_diag *diag);

#endif
