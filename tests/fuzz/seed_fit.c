/* SPDX-License-Identifier: MIT
 * Seed corpus for fuzz_fit: reads a sweeps CSV (as `splitlot simulate`
 * writes) and writes each device's sweep as one fuzz input, a method byte then
 * (vg_V, r_ohm) doubles. Usage: seed_fit SWEEPS.csv OUTDIR [MAX_FILES].
 */
#include <stdbool.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "splitlot/csv.h"

#define MAX_POINTS 512

typedef struct {
    double pairs[2 * MAX_POINTS];
    size_t n;
    char device[160];
    int written;
} sweep;

static int write_sweep(sweep *s, const char *dir)
{
    if (s->n == 0)
        return 0;
    char path[4096];
    snprintf(path, sizeof path, "%s/sweep-%03d", dir, s->written);
    FILE *f = fopen(path, "wb");
    unsigned char method = (unsigned char)(s->written & 1);
    int ok = f && fwrite(&method, 1, 1, f) == 1 &&
             fwrite(s->pairs, sizeof(double), 2 * s->n, f) == 2 * s->n;
    if (f && fclose(f) != 0)
        ok = 0;
    s->written++;
    s->n = 0;
    return ok ? 0 : -1;
}

static int read_point(sweep *s, const sl_csv *csv, long col_vg, long col_r, sl_diag *diag)
{
    if (s->n == MAX_POINTS)
        return 0;
    if (sl_csv_number(&s->pairs[2 * s->n], csv, (size_t)col_vg, diag) != SL_OK ||
        sl_csv_number(&s->pairs[2 * s->n + 1], csv, (size_t)col_r, diag) != SL_OK)
        return -1;
    s->n++;
    return 0;
}

int main(int argc, char **argv)
{
    if (argc < 3) {
        fputs("usage: seed_fit SWEEPS.csv OUTDIR [MAX_FILES]\n", stderr);
        return 2;
    }
    int max_files = argc > 3 ? atoi(argv[3]) : 64;
    sl_diag *diag = sl_diag_new();
    sl_csv *csv = NULL;
    static sweep s;
    int rc = sl_csv_open(&csv, argv[1], diag) == SL_OK ? 0 : 1;
    long col_dev = rc ? -1 : sl_csv_column(csv, "device");
    long col_vg = rc ? -1 : sl_csv_column(csv, "vg_V"), col_r = rc ? -1 : sl_csv_column(csv, "r_ohm");
    bool has = false;
    while (rc == 0 && col_dev >= 0 && s.written < max_files &&
           sl_csv_next(&has, csv, diag) == SL_OK && has) {
        const char *dev = sl_csv_field(csv, (size_t)col_dev, NULL);
        if (strcmp(dev, s.device) != 0) {
            rc = write_sweep(&s, argv[2]);
            snprintf(s.device, sizeof s.device, "%s", dev);
        }
        if (rc == 0)
            rc = read_point(&s, csv, col_vg, col_r, diag);
    }
    if (rc == 0)
        rc = write_sweep(&s, argv[2]);
    if (rc != 0 || col_dev < 0)
        fprintf(stderr, "seed_fit: cannot convert %s: %s\n", argv[1], sl_diag_last(diag));
    sl_csv_free(csv);
    sl_diag_free(diag);
    return rc != 0 || col_dev < 0;
}
