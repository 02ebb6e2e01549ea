/* SPDX-License-Identifier: MIT
 * libFuzzer target for the streaming CSV reader: the bytes as a file
 * (fmemopen), every record walked and every field read as a number and as
 * kept text, the way ingest does. Not a test of which inputs are accepted.
 */
#include <stdbool.h>
#include <stddef.h>
#include <stdint.h>
#include <stdio.h>

#include "splitlot/csv.h"

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size);

static void walk_fields(const sl_csv *csv, sl_diag *diag)
{
    size_t n = sl_csv_field_count(csv);
    for (size_t i = 0; i <= n; i++) { /* one past the end on purpose */
        double v;
        const char *text;
        size_t len;
        (void)sl_csv_number(&v, csv, i, diag);
        (void)sl_csv_text(&text, &len, csv, i, 64, diag);
        (void)sl_csv_is_empty(csv, i);
    }
    sl_diag_clear(diag); /* one message per bad field would pile up */
}

static void walk(sl_csv *csv, sl_diag *diag)
{
    for (size_t i = 0; i <= sl_csv_column_count(csv); i++)
        (void)sl_csv_column_name(csv, i);
    (void)sl_csv_column(csv, "vg_V");
    bool has = false;
    while (sl_csv_next(&has, csv, diag) == SL_OK && has)
        walk_fields(csv, diag);
    /* an error is sticky: asking again must not read on */
    (void)sl_csv_next(&has, csv, diag);
}

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
    if (size == 0)
        return 0; /* fmemopen refuses an empty buffer */
    FILE *f = fmemopen((void *)data, size, "rb");
    if (!f)
        return 0;
    sl_diag *diag = sl_diag_new();
    sl_csv *csv = NULL;
    if (sl_csv_open_stream(&csv, f, "fuzz.csv", diag) == SL_OK)
        walk(csv, diag);
    sl_csv_free(csv);
    sl_diag_free(diag);
    fclose(f);
    return 0;
}
