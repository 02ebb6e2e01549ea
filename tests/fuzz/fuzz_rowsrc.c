/* SPDX-License-Identifier: MIT
 * libFuzzer target for the row source: the bytes up to the first newline
 * are a --columns mapping, the rest a measurement file (fmemopen); the
 * header is mapped, a required set picked by the first byte, and every row
 * read as every quantity (number, optional number, overflow, flag,
 * direction, text) and written back as the rejects file would. Not a test of
 * which inputs are accepted.
 */
#include <stdbool.h>
#include <stddef.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "splitlot/rowsrc.h"

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size);

static void walk_row(sl_rowsrc *src, sl_diag *diag, char **buf, size_t *len, size_t *cap)
{
    for (int q = 0; q < SL_ROW_COUNT; q++) {
        double v;
        bool flag;
        const char *text;
        size_t n;
        if (sl_rowsrc_has(src, (sl_row_quantity)q)) {
            if (sl_rowsrc_number(&v, src, (sl_row_quantity)q, diag) == SL_OK)
                (void)sl_rowsrc_is_overflow(src, (sl_row_quantity)q, v);
            (void)sl_rowsrc_number_repeated(&v, src, (sl_row_quantity)q, diag);
            (void)sl_rowsrc_text(&text, &n, src, (sl_row_quantity)q, 64, diag);
        }
        (void)sl_rowsrc_optional(&v, src, (sl_row_quantity)q, diag);
        (void)sl_rowsrc_field(src, (sl_row_quantity)q, &n);
        (void)sl_rowsrc_field_word(src, (sl_row_quantity)q, &n);
        (void)sl_rowsrc_flag(&flag, src, (sl_row_quantity)q, diag);
    }
    int dir = 0;
    (void)sl_rowsrc_direction(&dir, src, diag);
    *len = 0;
    (void)sl_rowsrc_format(buf, len, cap, src, 1, "reason \"quoted\"; x");
    sl_diag_clear(diag);
}

static void walk(sl_rowsrc *src, sl_diag *diag, unsigned pick)
{
    sl_row_set need = (sl_row_set)pick * 0x1234567ul & ((1ul << SL_ROW_COUNT) - 1);
    (void)sl_rowsrc_require(src, need, need | SL_ROW_BIT(SL_ROW_VG), "fuzz", diag);
    for (size_t i = 0; i <= sl_rowsrc_unused_count(src); i++)
        (void)sl_rowsrc_unused(src, i);
    char *buf = NULL;
    size_t len = 0, cap = 0;
    (void)sl_rowsrc_format(&buf, &len, &cap, src, 0, "reason");
    bool has = false;
    while (sl_rowsrc_next(&has, src, diag) == SL_OK && has)
        walk_row(src, diag, &buf, &len, &cap);
    free(buf);
    sl_diag_clear(diag);
}

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
    const uint8_t *nl = memchr(data, '\n', size);
    if (!nl || nl + 1 == data + size)
        return 0; /* fmemopen refuses an empty buffer */
    size_t map_len = (size_t)(nl - data);
    char *columns = malloc(map_len + 1);
    if (!columns)
        return 0;
    memcpy(columns, data, map_len);
    columns[map_len] = '\0';
    FILE *f = fmemopen((void *)(nl + 1), size - map_len - 1, "rb");
    if (f) {
        sl_diag *diag = sl_diag_new();
        sl_rowsrc *src = NULL;
        if (sl_rowsrc_open_stream(&src, f, "fuzz.csv", map_len ? columns : NULL, diag) == SL_OK)
            walk(src, diag, map_len ? (unsigned)data[0] : 0u);
        sl_rowsrc_free(src);
        sl_diag_free(diag);
        fclose(f);
    }
    free(columns);
    return 0;
}
