/* SPDX-License-Identifier: MIT
 * Output of the commands: a document of named scalars and named tables,
 * rendered as an aligned terminal table, CSV or JSON (keys in
 * docs/formats.md, "JSON"). Commands fill a document; this file decides the
 * layout.
 */
#ifndef SL_CLI_OUTPUT_H
#define SL_CLI_OUTPUT_H

#include <stdbool.h>
#include <stdio.h>

typedef enum { CLI_FORMAT_TABLE = 0, CLI_FORMAT_CSV, CLI_FORMAT_JSON } cli_format;

/* Parse "table", "csv" or "json"; returns 0 on success. */
int cli_format_parse(const char *text, cli_format *out);

typedef struct cli_doc cli_doc;
typedef struct cli_table cli_table;

cli_doc *cli_doc_new(void);
void cli_doc_free(cli_doc *doc);

/* Top-level scalars (JSON members; a "key: value" line in table/CSV form).
 * Consecutive keys "group.name" become one JSON object "group": {"name": ..}. */
void cli_doc_str(cli_doc *doc, const char *key, const char *value);
void cli_doc_num(cli_doc *doc, const char *key, double value, int digits);
/* A top-level list of strings: JSON array; "key: a; b" in CSV; in table form
 * the key and one item per line. */
void cli_doc_list(cli_doc *doc, const char *key, const char *const *items, int count);
/* A note printed under the tables in table form only (cautions, verdicts). */
void cli_doc_note(cli_doc *doc, const char *text);

/* A table: key is the JSON array name, title the heading in table form. */
cli_table *cli_doc_table(cli_doc *doc, const char *key, const char *title);

/* A table whose rows are not kept: fill(t, ctx) is called when the document
 * is printed (twice in table form: once to size the columns, once to print)
 * and gives its rows with cli_table_row and cli_cell_* as for any table; each
 * row is written as soon as the next one starts, so a table of any length
 * prints in fixed memory. fill returns 0, or nonzero to stop the printing
 * (cli_doc_print then returns -1). Columns are declared as for any table. */
typedef int (*cli_rows_fn)(cli_table *t, void *ctx);
cli_table *cli_doc_table_streamed(cli_doc *doc, const char *key, const char *title,
                                  cli_rows_fn fill, void *ctx);

/* Columns: key (JSON/CSV name, unit in it), header (table heading) and, for
 * numbers, significant digits in table form ('g' style) or decimals when
 * fixed_decimals >= 0. */
void cli_table_col_str(cli_table *t, const char *key, const char *header);
void cli_table_col_num(cli_table *t, const char *key, const char *header, int digits);
void cli_table_col_fixed(cli_table *t, const char *key, const char *header, int decimals);
void cli_table_col_int(cli_table *t, const char *key, const char *header);
void cli_table_col_bool(cli_table *t, const char *key, const char *header);
/* A list of strings: JSON array, ';'-joined in CSV, ','-joined in a table. */
void cli_table_col_list(cli_table *t, const char *key, const char *header);
/* A pair [lo, hi]: JSON array of two numbers, "lo..hi" in table/CSV form;
 * both NaN (no interval): JSON null, empty in table/CSV form. */
void cli_table_col_range(cli_table *t, const char *key, const char *header, int digits);
/* An object of whole numbers by name: JSON {"k": n, ...}, "k=n" items joined
 * by ',' in a table and ';' in CSV, "-" when empty. */
void cli_table_col_object(cli_table *t, const char *key, const char *header);

/* Start a row, then give one cell per column in order. NaN numbers are
 * written as JSON null and left empty in table and CSV form. */
void cli_table_row(cli_table *t);
void cli_cell_str(cli_table *t, const char *value);
void cli_cell_num(cli_table *t, double value);
void cli_cell_int(cli_table *t, long value);
void cli_cell_bool(cli_table *t, bool value);
void cli_cell_list(cli_table *t, const char *const *items, int count);
void cli_cell_range(cli_table *t, double lo, double hi);
void cli_cell_object(cli_table *t, const char *const *keys, const long *values, int count);

/* Render the whole document; returns 0, or -1 on a write error or when a
 * streamed table's fill stopped. */
int cli_doc_print(cli_doc *doc, cli_format format, FILE *out);

#endif
