/* SPDX-License-Identifier: MIT
 * Check suite of the streaming CSV reader: RFC 4180 quoting, line endings,
 * byte-order mark, column mapping, strict numbers and text, hostile input,
 * and records that straddle the reader's buffer refills.
 */
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include <gsl/gsl_rng.h>

#include "splitlot/csv.h"
#include "test_support.h"

static const char *const sweep_columns[] = { "wafer", "device", "die_x", "die_y", "vg_V",
                                             "r_ohm" };
#define N_COLS 6

/* The records every variant of the sweep fixture must yield (hand-written
 * from tests/data/csv/basic.csv, RFC 4180 section 2 rules). */
typedef struct {
    const char *wafer, *device;
    double die_x, die_y, vg_V, r_ohm;
} sweep_row;

static const sweep_row expected_rows[] = {
    { "W01", "D001", 0, 0, -40, 1200.5 },
    { "W01", "D001", 0, 0, 0, 5234.25 },
    { "W01", "D 002, left", 1, 0, -40, 1301 },
    { "W02", "say \"hi\"", 2, -1, 40, -0.0 },
    { "W02", "two\nlines", 3, 1, 1e-3, 2.5e4 },
};
#define N_EXPECTED (sizeof expected_rows / sizeof expected_rows[0])

static char *scratch;

static void make_scratch(void) { scratch = sl_test_tmpdir(); }
static void drop_scratch(void)
{
    sl_test_rmtree(scratch);
    free(scratch);
}

/* Write len bytes (NUL allowed) to a fresh scratch file; caller frees path. */
static char *write_bytes(const char *name, const char *bytes, size_t len)
{
    char *path = sl_test_path(scratch, name);
    FILE *f = fopen(path, "wb");
    ck_assert_ptr_nonnull(f);
    ck_assert_uint_eq(fwrite(bytes, 1, len, f), len);
    ck_assert_int_eq(fclose(f), 0);
    return path;
}

/* Read every record of a sweep file by column name into rows; returns count. */
static size_t read_sweeps(sweep_row *rows, size_t max, char **text_store, const char *path)
{
    sl_diag *diag = sl_diag_new();
    sl_csv *csv;
    ck_assert_int_eq(sl_csv_open(&csv, path, diag), SL_OK);
    long col[N_COLS];
    for (size_t j = 0; j < N_COLS; j++) {
        col[j] = sl_csv_column(csv, sweep_columns[j]);
        ck_assert_int_ge(col[j], 0);
    }
    size_t n = 0;
    bool has;
    while (sl_csv_next(&has, csv, diag) == SL_OK && has) {
        ck_assert_uint_lt(n, max);
        const char *s;
        size_t len;
        ck_assert_int_eq(sl_csv_text(&s, &len, csv, (size_t)col[0], 64, diag), SL_OK);
        text_store[2 * n] = strdup(s);
        s = sl_csv_field(csv, (size_t)col[1], &len);
        ck_assert_uint_eq(strlen(s), len);
        text_store[2 * n + 1] = strdup(s);
        rows[n].wafer = text_store[2 * n];
        rows[n].device = text_store[2 * n + 1];
        double *num[] = { &rows[n].die_x, &rows[n].die_y, &rows[n].vg_V, &rows[n].r_ohm };
        for (size_t j = 0; j < 4; j++)
            ck_assert_int_eq(sl_csv_number(num[j], csv, (size_t)col[j + 2], diag), SL_OK);
        n++;
    }
    ck_assert_uint_eq(sl_diag_size(diag), 0);
    sl_csv_free(csv);
    sl_diag_free(diag);
    return n;
}

static void assert_expected_rows(const char *path)
{
    sweep_row rows[16];
    char *texts[32] = { 0 };
    size_t n = read_sweeps(rows, 16, texts, path);
    ck_assert_uint_eq(n, N_EXPECTED);
    for (size_t i = 0; i < n; i++) {
        const sweep_row *e = &expected_rows[i];
        ck_assert_str_eq(rows[i].wafer, e->wafer);
        ck_assert_str_eq(rows[i].device, e->device);
        ck_assert(rows[i].die_x == e->die_x && rows[i].die_y == e->die_y);
        ck_assert(rows[i].vg_V == e->vg_V && rows[i].r_ohm == e->r_ohm);
        ck_assert_int_eq(signbit(rows[i].r_ohm) != 0, signbit(e->r_ohm) != 0);
    }
    for (size_t i = 0; i < 32; i++)
        free(texts[i]);
}

START_TEST(fixture_lf)
{
    char *path = sl_test_data("csv/basic.csv");
    assert_expected_rows(path);
    free(path);
}
END_TEST

START_TEST(fixture_shuffled_extra_columns_blank_tail)
{
    char *path = sl_test_data("csv/shuffled.csv");
    assert_expected_rows(path);
    free(path);
}
END_TEST

/* The same records with CRLF record ends (LF kept inside the quoted field,
 * as spreadsheets write it), a UTF-8 byte-order mark, no final line end. */
START_TEST(crlf_bom_no_final_newline)
{
    static const char text[] =
        "\xEF\xBB\xBFwafer,device,die_x,die_y,vg_V,r_ohm\r\n"
        "W01,D001,0,0,-40,1200.5\r\n"
        "\r\n"
        "W01,D001,0,0,0,5234.25\r\n"
        "W01,\"D 002, left\",1,0,-40,1301\r\n"
        "W02,\"say \"\"hi\"\"\",2,-1,40,-0\r\n"
        "W02,\"two\nlines\",3,1,1e-3,2.5e4";
    char *path = write_bytes("crlf.csv", text, sizeof text - 1);
    assert_expected_rows(path);
    free(path);
}
END_TEST

START_TEST(line_numbers_are_physical)
{
    static const char text[] = "a,b\n\n1,\"x\ny\nz\"\n2,w\n\n3,v\n";
    char *path = write_bytes("lines.csv", text, sizeof text - 1);
    sl_csv *csv;
    ck_assert_int_eq(sl_csv_open(&csv, path, NULL), SL_OK);
    ck_assert_int_eq(sl_csv_line(csv), 1);
    const long expect_line[] = { 3, 6, 8 };
    bool has;
    for (size_t i = 0; i < 3; i++) {
        ck_assert_int_eq(sl_csv_next(&has, csv, NULL), SL_OK);
        ck_assert(has);
        ck_assert_int_eq(sl_csv_line(csv), expect_line[i]);
    }
    ck_assert_int_eq(sl_csv_next(&has, csv, NULL), SL_OK);
    ck_assert(!has);
    ck_assert_uint_eq(sl_csv_column_count(csv), 2);
    ck_assert_str_eq(sl_csv_column_name(csv, 1), "b");
    ck_assert_ptr_null(sl_csv_column_name(csv, 2));
    ck_assert_int_eq(sl_csv_column(csv, "c"), -1);
    sl_csv_free(csv);
    free(path);
}
END_TEST

/* Numbers accepted and the doubles they must give (C literals, which the
 * compiler rounds correctly: ISO C 6.4.4.2 recommends it; that GCC does
 * it is from memory). */
START_TEST(numbers_accepted)
{
    static const struct {
        const char *token;
        double value;
    } table[] = {
        { "0", 0.0 },          { "-0", -0.0 },        { "+3", 3.0 },
        { ".5", 0.5 },         { "5.", 5.0 },         { "  2.5\t", 2.5 },
        { "1E3", 1e3 },        { "1e-320", 1e-320 },  { "4.9e-324", 4.9e-324 },
        { "1.7976931348623157e308", 1.7976931348623157e308 },
        { "0.1", 0.1 },        { "123456789012345678901234567890", 123456789012345678901234567890.0 },
        { "0.000000000000000000000000000001", 1e-30 },
        { "9007199254740993", 9007199254740993.0 },
        { "-12.345e-2", -12.345e-2 },
    };
    for (size_t i = 0; i < sizeof table / sizeof table[0]; i++) {
        double v = 42.0;
        ck_assert_msg(sl_csv_parse_double(&v, table[i].token, strlen(table[i].token)),
                      "rejected %s", table[i].token);
        ck_assert_msg(memcmp(&v, &table[i].value, sizeof v) == 0, "%s gave %a", table[i].token, v);
    }
}
END_TEST

START_TEST(numbers_rejected)
{
    static const char *const bad[] = {
        "", "  ", "nan", "NaN", "inf", "-Infinity", "1e999", "-1e999", "1e-999",
        "0x10", "1.2.3", "1e", "e5", "--1", "+", ".", "1,5", "12abc", "1 2", "\xC3\xA9",
    };
    for (size_t i = 0; i < sizeof bad / sizeof bad[0]; i++) {
        double v = 42.0;
        ck_assert_msg(!sl_csv_parse_double(&v, bad[i], strlen(bad[i])), "accepted %s", bad[i]);
        ck_assert(v == 42.0);
    }
}
END_TEST

/* The fast path and strtod must agree bit for bit (glibc strtod rounds
 * correctly: from memory, it uses exact multi-precision arithmetic). */
/* Meter-style tokens with a short mantissa and an exponent ("1.234567e-05",
 * "9.9E+37"), read by the scaled path as strtod reads them, bit for bit. */
START_TEST(exponent_tokens_like_strtod)
{
    gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
    gsl_rng_set(rng, 4181);
    char token[64];
    for (int i = 0; i < 100000; i++) {
        double x = (gsl_rng_uniform(rng) - 0.5) * pow(10.0, (double)gsl_rng_uniform_int(rng, 60) - 30.0);
        snprintf(token, sizeof token, "%.*e", (int)gsl_rng_uniform_int(rng, 9), x);
        if (gsl_rng_uniform_int(rng, 2))
            *strchr(token, 'e') = 'E';
        double got, want = strtod(token, NULL);
        ck_assert_msg(sl_csv_parse_double_e(&got, token, strlen(token), 0, false), "rejected %s",
                      token);
        ck_assert_msg(memcmp(&got, &want, sizeof got) == 0, "%s: %a vs %a", token, got, want);
    }
    gsl_rng_free(rng);
}
END_TEST

START_TEST(numbers_round_trip_like_strtod)
{
    gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
    gsl_rng_set(rng, 4180);
    char token[64];
    for (int i = 0; i < 200000; i++) {
        unsigned long pick = gsl_rng_uniform_int(rng, 3);
        double x = (gsl_rng_uniform(rng) - 0.5) * pow(10.0, (double)gsl_rng_uniform_int(rng, 40) - 20.0);
        if (pick == 0)
            snprintf(token, sizeof token, "%.17g", x);
        else if (pick == 1)
            snprintf(token, sizeof token, "%.*f", (int)gsl_rng_uniform_int(rng, 8), x);
        else
            snprintf(token, sizeof token, "%.*e", (int)gsl_rng_uniform_int(rng, 18), x);
        double got, want = strtod(token, NULL);
        ck_assert_msg(sl_csv_parse_double(&got, token, strlen(token)), "rejected %s", token);
        ck_assert_msg(memcmp(&got, &want, sizeof got) == 0, "%s: %a vs %a", token, got, want);
        if (pick == 0)
            ck_assert(got == x);   /* 17 significant digits identify a double */
    }
    gsl_rng_free(rng);
}
END_TEST

/* Open text as a file; returns the status and leaves the reader in *csv. */
static sl_status open_text(sl_csv **csv, const char *text, size_t len, sl_diag *diag)
{
    char *path = write_bytes("case.csv", text, len);
    sl_status st = sl_csv_open(csv, path, diag);
    free(path);
    return st;
}

/* Read records until the end or an error; returns the final status. */
static sl_status drain(sl_csv *csv, sl_diag *diag)
{
    bool has = true;
    sl_status st = SL_OK;
    while (st == SL_OK && has)
        st = sl_csv_next(&has, csv, diag);
    return st;
}

/* The single message of diag must be an error at line, with text inside. */
static void assert_one_error(sl_diag *diag, long line, const char *text)
{
    ck_assert_uint_eq(sl_diag_count(diag, SL_SEV_ERROR), 1);
    const sl_diag_msg *m = sl_diag_get(diag, 0);
    ck_assert_int_eq(m->line, line);
    ck_assert_msg(strstr(m->text, text) != NULL, "message \"%s\" lacks \"%s\"", m->text, text);
    ck_assert_ptr_nonnull(m->file);
}

/* A field's first bytes as a little-endian word, zero past its end: equal
 * words and lengths for equal short fields, a quoted field unescaped first,
 * the bytes after a field (separator, next field) never in its word. */
START_TEST(field_words)
{
    const char *text = "a,b,c,d,e\nW01,D001,,\"x\"\"y\",123456789\nW01,D0010,0,12345678,1\n";
    sl_csv *csv = NULL;
    ck_assert_int_eq(open_text(&csv, text, strlen(text), NULL), SL_OK);
    bool has = false;
    ck_assert_int_eq(sl_csv_next(&has, csv, NULL), SL_OK);
    size_t len = 99;
    ck_assert(sl_csv_field_word(csv, 0, &len) == 0x313057u && len == 3);        /* "W01" */
    ck_assert(sl_csv_field_word(csv, 1, &len) == 0x31303044u && len == 4);      /* "D001" */
    ck_assert(sl_csv_field_word(csv, 2, &len) == 0 && len == 0);                /* "" */
    ck_assert(sl_csv_field_word(csv, 3, &len) == 0x792278u && len == 3);        /* x"y */
    ck_assert(sl_csv_field_word(csv, 4, &len) == 0x3837363534333231u && len == 9);
    ck_assert(sl_csv_field_word(csv, 9, &len) == 0 && len == 0);                /* no field */
    uint64_t d001 = sl_csv_field_word(csv, 1, &len);
    ck_assert_int_eq(sl_csv_next(&has, csv, NULL), SL_OK);
    ck_assert(sl_csv_field_word(csv, 1, &len) == 0x3031303044u && len == 5);    /* "D0010" */
    ck_assert(sl_csv_field_word(csv, 1, &len) != d001);
    ck_assert(sl_csv_field_word(csv, 3, &len) == 0x3837363534333231u && len == 8);
    sl_csv_free(csv);
}
END_TEST

/* Bad numbers name the file, line, field and the token. */
START_TEST(number_errors_located)
{
    static const struct {
        const char *token, *message;
    } table[] = {
        { "nan", "bad number \"nan\" in column vg_V" },
        { "Inf", "bad number \"Inf\"" },
        { "1e999", "number \"1e999\" in column vg_V is out of range" },
        { "abc", "bad number \"abc\"" },
        { "", "empty value in column vg_V" },
        { "1234567890123456789012345678901234567890123456789x",
          "\"1234567890123456789012345678901234567890...\"" },
    };
    for (size_t i = 0; i < sizeof table / sizeof table[0]; i++) {
        char text[256];
        int len = snprintf(text, sizeof text, "r_ohm,vg_V\n1,2\n\n3,%s\n", table[i].token);
        sl_diag *diag = sl_diag_new();
        sl_csv *csv;
        ck_assert_int_eq(open_text(&csv, text, (size_t)len, diag), SL_OK);
        bool has;
        double v;
        ck_assert_int_eq(sl_csv_next(&has, csv, diag), SL_OK);
        ck_assert_int_eq(sl_csv_number(&v, csv, 1, diag), SL_OK);
        ck_assert_int_eq(sl_csv_next(&has, csv, diag), SL_OK);
        ck_assert_int_eq(sl_csv_is_empty(csv, 1), table[i].token[0] == '\0');
        ck_assert_int_eq(sl_csv_number(&v, csv, 1, diag), SL_EINPUT);
        assert_one_error(diag, 4, table[i].message);
        ck_assert_int_eq(sl_diag_get(diag, 0)->col, 2);
        sl_csv_free(csv);
        sl_diag_free(diag);
    }
}
END_TEST

/* Malformed files: the error and the line it names. */
START_TEST(structural_errors)
{
    static const struct {
        const char *text;
        size_t len;   /* 0: strlen */
        long line;
        const char *message;
    } table[] = {
        { "a,b\n1,2\n3\n", 0, 3, "expected 2 fields as in the header, found 1" },
        { "a,b\n1,2\n3,4,5\n", 0, 3, "expected 2 fields" },
        { "a,b\n1,\"open\n2,3\n", 0, 2, "not closed before the end of the file" },
        { "a,b\n1,x\"y\n", 0, 2, "quote inside an unquoted field" },
        { "a,b\n1,\"x\"y\n", 0, 2, "unexpected text after a closing quote" },
        { "a,b\n1,2\r3,4\n", 0, 2, "carriage return not followed by a line feed" },
        { "a,b\n1,2\n5,6\0\n", 13, 3, "NUL byte" },
        { "a,b\n\"1\n\0\",2\n", 11, 3, "NUL byte in a quoted field" },
    };
    for (size_t i = 0; i < sizeof table / sizeof table[0]; i++) {
        size_t len = table[i].len ? table[i].len : strlen(table[i].text);
        sl_diag *diag = sl_diag_new();
        sl_csv *csv;
        ck_assert_int_eq(open_text(&csv, table[i].text, len, diag), SL_OK);
        ck_assert_int_eq(drain(csv, diag), SL_EINPUT);
        assert_one_error(diag, table[i].line, table[i].message);
        bool has = true;
        ck_assert_int_eq(sl_csv_next(&has, csv, diag), SL_EINPUT);   /* sticky */
        ck_assert(!has);
        ck_assert_uint_eq(sl_diag_size(diag), 1);
        sl_csv_free(csv);
        sl_diag_free(diag);
    }
}
END_TEST

START_TEST(header_errors)
{
    static const struct {
        const char *text;
        long line;
        const char *message;
    } table[] = {
        { "", 0, "no header row" },
        { "\n\r\n\n", 0, "no header row" },
        { "\xEF\xBB\xBF", 0, "no header row" },
        { "\nwafer,vg_V,wafer\n1,2,3\n", 2, "duplicate column \"wafer\" (also column 1)" },
        { "ok,\xC3\x28\n", 1, "header name is not valid UTF-8" },
    };
    for (size_t i = 0; i < sizeof table / sizeof table[0]; i++) {
        sl_diag *diag = sl_diag_new();
        sl_csv *csv = (sl_csv *)&csv;
        ck_assert_int_eq(open_text(&csv, table[i].text, strlen(table[i].text), diag), SL_EINPUT);
        ck_assert_ptr_null(csv);
        assert_one_error(diag, table[i].line, table[i].message);
        sl_diag_free(diag);
    }
}
END_TEST

START_TEST(header_only_is_not_an_error)
{
    sl_csv *csv;
    ck_assert_int_eq(open_text(&csv, "wafer,vg_V\n\n", 12, NULL), SL_OK);
    bool has = true;
    ck_assert_int_eq(sl_csv_next(&has, csv, NULL), SL_OK);
    ck_assert(!has);
    sl_csv_free(csv);
}
END_TEST

START_TEST(unnamed_columns_allowed)
{
    sl_csv *csv;
    ck_assert_int_eq(open_text(&csv, "a,,b,\n1,2,3,4\n", 14, NULL), SL_OK);
    ck_assert_uint_eq(sl_csv_column_count(csv), 4);
    ck_assert_int_eq(sl_csv_column(csv, "b"), 2);
    ck_assert_int_eq(drain(csv, NULL), SL_OK);
    sl_csv_free(csv);
}
END_TEST

START_TEST(too_many_fields_refused)
{
    size_t n_fields = SL_CSV_MAX_FIELDS + 1;
    char *text = malloc(2 * n_fields + 1);
    for (size_t i = 0; i < n_fields; i++) {
        text[2 * i] = 'c';
        text[2 * i + 1] = i + 1 < n_fields ? ',' : '\n';
    }
    sl_diag *diag = sl_diag_new();
    sl_csv *csv;
    ck_assert_int_eq(open_text(&csv, text, 2 * n_fields, diag), SL_EINPUT);
    assert_one_error(diag, 1, "too many fields in the record");
    sl_diag_free(diag);
    free(text);
}
END_TEST

START_TEST(missing_file_is_io_error)
{
    sl_diag *diag = sl_diag_new();
    sl_csv *csv;
    char *path = sl_test_path(scratch, "does-not-exist.csv");
    ck_assert_int_eq(sl_csv_open(&csv, path, diag), SL_EIO);
    ck_assert_ptr_null(csv);
    ck_assert_str_eq(sl_diag_get(diag, 0)->file, path);
    free(path);
    sl_diag_free(diag);
}
END_TEST

/* A record over the 1 MiB cap is refused with its line; memory stays flat. */
START_TEST(long_record_refused)
{
    size_t big = SL_CSV_MAX_RECORD_BYTES + 10, huge = 3 * SL_CSV_MAX_RECORD_BYTES;
    char *text = malloc(huge + 64);
    size_t n = (size_t)sprintf(text, "a,b\n1,2\n3,");
    memset(text + n, '7', big);
    n += big;
    text[n++] = '\n';
    sl_diag *diag = sl_diag_new();
    sl_csv *csv;
    ck_assert_int_eq(open_text(&csv, text, n, diag), SL_OK);
    ck_assert_int_eq(drain(csv, diag), SL_EINPUT);
    assert_one_error(diag, 3, "record longer than 1048576 bytes");
    sl_csv_free(csv);
    sl_diag_free(diag);
    /* A quoted field that never closes, longer than the reader's buffer:
     * refused at the cap, before the end of the file is seen. */
    n = (size_t)sprintf(text, "a,b\n1,\"");
    memset(text + n, 'x', huge);
    n += huge;
    diag = sl_diag_new();
    ck_assert_int_eq(open_text(&csv, text, n, diag), SL_OK);
    ck_assert_int_eq(drain(csv, diag), SL_EINPUT);
    assert_one_error(diag, 2, "record longer than");
    sl_csv_free(csv);
    sl_diag_free(diag);
    free(text);
}
END_TEST

START_TEST(text_fields_validated)
{
    static const char text[] = "id,v\nW\xC3\xA9,1\nW\xC3\x28,2\nW\xED\xA0\x80,3\nW\xC0\xAF,4\n"
                               "abcdefghijk,5\n\"a\x01\",6\n";
    static const char *const expect_error[] = { NULL, "not valid UTF-8", "not valid UTF-8",
                                                "not valid UTF-8", "is too long",
                                                "holds a control character" };
    sl_csv *csv;
    ck_assert_int_eq(open_text(&csv, text, sizeof text - 1, NULL), SL_OK);
    for (size_t i = 0; i < 6; i++) {
        bool has;
        ck_assert_int_eq(sl_csv_next(&has, csv, NULL), SL_OK);
        sl_diag *diag = sl_diag_new();
        const char *s = NULL;
        size_t len;
        sl_status st = sl_csv_text(&s, &len, csv, 0, 10, diag);
        if (!expect_error[i]) {
            ck_assert_int_eq(st, SL_OK);
            ck_assert_str_eq(s, "W\xC3\xA9");
            ck_assert_uint_eq(len, 3);
        } else {
            ck_assert_int_eq(st, SL_EINPUT);
            assert_one_error(diag, (long)i + 2, expect_error[i]);
        }
        sl_diag_free(diag);
    }
    sl_csv_free(csv);
}
END_TEST

START_TEST(utf8_rules)
{
    /* Unicode 15, table 3-7 (well-formed byte sequences). */
    ck_assert(sl_csv_utf8_valid("\xF4\x8F\xBF\xBF", 4));   /* U+10FFFF */
    ck_assert(!sl_csv_utf8_valid("\xF4\x90\x80\x80", 4));  /* past U+10FFFF */
    ck_assert(!sl_csv_utf8_valid("\xE0\x80\xAF", 3));      /* overlong */
    ck_assert(!sl_csv_utf8_valid("\xC1\xBF", 2));          /* overlong */
    ck_assert(!sl_csv_utf8_valid("\xE2\x82", 2));          /* truncated */
    ck_assert(sl_csv_utf8_valid("\xE2\x82\xAC", 3));       /* U+20AC */
}
END_TEST

/* Many records with quoted multi-line fields, written so records straddle
 * every refill of the reader's buffer: all must come back intact. */
START_TEST(records_across_buffer_refills)
{
    enum { N_ROWS = 120000 };
    char *path = sl_test_path(scratch, "big.csv");
    FILE *f = fopen(path, "wb");
    fputs("n,label,value\r\n", f);
    for (int i = 0; i < N_ROWS; i++)
        fprintf(f, "%d,\"row %d, \"\"q\"\"\n%s\",%d.25\r\n", i, i,
                i % 7 ? "x" : "longer text to shift the boundaries", i);
    fclose(f);
    sl_diag *diag = sl_diag_new();
    sl_csv *csv;
    ck_assert_int_eq(sl_csv_open(&csv, path, diag), SL_OK);
    bool has;
    int count = 0;
    char want[96];
    while (sl_csv_next(&has, csv, diag) == SL_OK && has) {
        double n, v;
        ck_assert_int_eq(sl_csv_number(&n, csv, 0, diag), SL_OK);
        ck_assert_int_eq(sl_csv_number(&v, csv, 2, diag), SL_OK);
        ck_assert(n == count && v == count + 0.25);
        snprintf(want, sizeof want, "row %d, \"q\"\n%s", count,
                 count % 7 ? "x" : "longer text to shift the boundaries");
        ck_assert_str_eq(sl_csv_field(csv, 1, NULL), want);
        ck_assert_int_eq(sl_csv_line(csv), 2 + 2L * count);
        count++;
    }
    ck_assert_int_eq(count, N_ROWS);
    ck_assert_uint_eq(sl_diag_size(diag), 0);
    sl_csv_free(csv);
    sl_diag_free(diag);
    free(path);
}
END_TEST

START_TEST(open_stream_keeps_stream_open)
{
    char *path = sl_test_data("csv/basic.csv");
    FILE *f = fopen(path, "rb");
    sl_csv *csv;
    ck_assert_int_eq(sl_csv_open_stream(&csv, f, "sweeps", NULL), SL_OK);
    ck_assert_str_eq(sl_csv_name(csv), "sweeps");
    ck_assert_int_eq(drain(csv, NULL), SL_OK);
    sl_csv_free(csv);
    ck_assert_int_eq(fclose(f), 0);   /* still ours to close */
    free(path);
}
END_TEST

START_TEST(dash_reads_standard_input)
{
    char *path = sl_test_data("csv/basic.csv");
    ck_assert_ptr_nonnull(freopen(path, "rb", stdin));
    sl_csv *csv;
    ck_assert_int_eq(sl_csv_open(&csv, "-", NULL), SL_OK);
    ck_assert_str_eq(sl_csv_name(csv), "<stdin>");
    bool has;
    int rows = 0;
    while (sl_csv_next(&has, csv, NULL) == SL_OK && has)
        rows++;
    ck_assert_int_eq(rows, (int)N_EXPECTED);
    sl_csv_free(csv);
    free(path);
}
END_TEST

/* ---- the fast paths against the general ones ---- */

enum { MIX_RECORDS = 30000, MIX_FIELDS = 5, MIX_FIELD_MAX = 12 };

typedef struct {
    char field[MIX_FIELDS][MIX_FIELD_MAX + 1];
    long line;
} mix_record;

/* A field of plain bytes: letters, digits, bytes the fast scan looks at
 * twice (space, tab, '#', '!', '+', '&') and UTF-8 bytes, never a quote,
 * comma or line end. */
static void random_field(char *out, gsl_rng *rng)
{
    static const char plain[] = "aZ09 \t#!+&.-\xC3\xA9";
    size_t len = gsl_rng_uniform_int(rng, MIX_FIELD_MAX + 1);
    for (size_t i = 0; i < len; i++)
        out[i] = plain[gsl_rng_uniform_int(rng, sizeof plain - 1)];
    out[len] = '\0';
}

/* Write the records; quote_percent of the fields are quoted (so a record
 * may switch from the fast scan to the general one midway). LF or CRLF
 * ends, a blank line now and then, no line end after the last record.
 * Fills in each record's physical line. */
static char *write_mix(const char *name, mix_record *recs, int quote_percent, gsl_rng *rng)
{
    char *path = sl_test_path(scratch, name);
    FILE *f = fopen(path, "wb");
    ck_assert_ptr_nonnull(f);
    fputs("c0,c1,c2,c3,c4\n", f);
    long line = 2;
    for (size_t r = 0; r < MIX_RECORDS; r++) {
        if (gsl_rng_uniform_int(rng, 50) == 0) {
            fputs("\n", f);
            line++;
        }
        recs[r].line = line++;
        for (size_t i = 0; i < MIX_FIELDS; i++) {
            const char *quote = (int)gsl_rng_uniform_int(rng, 100) < quote_percent ? "\"" : "";
            fprintf(f, "%s%s%s%s", i ? "," : "", quote, recs[r].field[i], quote);
        }
        if (r + 1 < MIX_RECORDS)
            fputs(gsl_rng_uniform_int(rng, 2) ? "\r\n" : "\n", f);
    }
    ck_assert_int_eq(fclose(f), 0);
    return path;
}

static void assert_mix_read_back(const char *path, const mix_record *recs)
{
    sl_diag *diag = sl_diag_new();
    sl_csv *csv;
    ck_assert_int_eq(sl_csv_open(&csv, path, diag), SL_OK);
    bool has;
    size_t r = 0;
    while (sl_csv_next(&has, csv, diag) == SL_OK && has) {
        ck_assert_uint_lt(r, MIX_RECORDS);
        ck_assert_int_eq(sl_csv_line(csv), recs[r].line);
        for (size_t i = 0; i < MIX_FIELDS; i++) {
            size_t len;
            const char *s = sl_csv_field(csv, i, &len);
            ck_assert_str_eq(s, recs[r].field[i]);
            ck_assert_uint_eq(len, strlen(recs[r].field[i]));
        }
        r++;
    }
    ck_assert_uint_eq(r, MIX_RECORDS);
    ck_assert_uint_eq(sl_diag_size(diag), 0);
    sl_csv_free(csv);
    sl_diag_free(diag);
}

/* The same records plain (the fast scan), all quoted (the general scan)
 * and partly quoted (the fast scan giving up midway and putting its NULs
 * back): each must come back as written, over many buffer refills. */
START_TEST(plain_and_quoted_records_agree)
{
    gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
    gsl_rng_set(rng, 1180);
    mix_record *recs = malloc(MIX_RECORDS * sizeof *recs);
    ck_assert_ptr_nonnull(recs);
    for (size_t r = 0; r < MIX_RECORDS; r++)
        for (size_t i = 0; i < MIX_FIELDS; i++)
            random_field(recs[r].field[i], rng);
    static const int quote_percent[] = { 0, 100, 10 };
    for (size_t k = 0; k < 3; k++) {
        char name[32];
        snprintf(name, sizeof name, "mix%zu.csv", k);
        char *path = write_mix(name, recs, quote_percent[k], rng);
        assert_mix_read_back(path, recs);
        free(path);
    }
    free(recs);
    gsl_rng_free(rng);
}
END_TEST

/* A header of SL_CSV_MAX_FIELDS columns and a record as wide are read; one
 * field more is refused on its line. */
START_TEST(widest_record_accepted)
{
    size_t n = SL_CSV_MAX_FIELDS;
    char *text = malloc(12 * n + 16);
    size_t len = 0;
    for (size_t i = 0; i < n; i++)
        len += (size_t)sprintf(text + len, "c%zu%c", i, i + 1 < n ? ',' : '\n');
    for (size_t width = n; width <= n + 1; width++)
        for (size_t i = 0; i < width; i++)
            len += (size_t)sprintf(text + len, "7%c", i + 1 < width ? ',' : '\n');
    sl_diag *diag = sl_diag_new();
    sl_csv *csv;
    ck_assert_int_eq(open_text(&csv, text, len, diag), SL_OK);
    bool has;
    ck_assert_int_eq(sl_csv_next(&has, csv, diag), SL_OK);
    ck_assert(has);
    ck_assert_uint_eq(sl_csv_field_count(csv), n);
    ck_assert_str_eq(sl_csv_field(csv, n - 1, NULL), "7");
    ck_assert_int_eq(sl_csv_next(&has, csv, diag), SL_EINPUT);
    assert_one_error(diag, 3, "too many fields in the record");
    sl_csv_free(csv);
    sl_diag_free(diag);
    free(text);
}
END_TEST

/* Tokens over an alphabet of digits, signs and points, every shape up to
 * six bytes: the short-token path (a bare token) and the general path (the
 * same token with blanks around, which the short path never takes) must
 * accept the same tokens with the same doubles. */
START_TEST(short_number_shapes_agree_with_general_path)
{
    static const char alphabet[] = "059+-.";
    enum { ALPHABET = sizeof alphabet - 1 };
    char token[8], padded[12];
    for (size_t len = 1; len <= 6; len++) {
        size_t count = 1;
        for (size_t i = 0; i < len; i++)
            count *= ALPHABET;
        for (size_t code = 0; code < count; code++) {
            for (size_t i = 0, c = code; i < len; i++, c /= ALPHABET)
                token[i] = alphabet[c % ALPHABET];
            token[len] = '\0';
            snprintf(padded, sizeof padded, " %s\t", token);
            double a = 42.0, b = 42.0;
            bool short_ok = sl_csv_parse_double(&a, token, len);
            bool general_ok = sl_csv_parse_double(&b, padded, len + 2);
            ck_assert_msg(short_ok == general_ok, "\"%s\": %d vs %d", token, short_ok, general_ok);
            ck_assert_msg(memcmp(&a, &b, sizeof a) == 0, "\"%s\": %a vs %a", token, a, b);
        }
    }
}
END_TEST

/* A random token of up to max_digits digits, a sign now and then and a
 * point anywhere or nowhere. */
static size_t random_decimal(char *out, size_t max_digits, gsl_rng *rng)
{
    size_t n = 0, digits = 1 + gsl_rng_uniform_int(rng, max_digits);
    unsigned long sign = gsl_rng_uniform_int(rng, 4);
    if (sign < 2)
        out[n++] = sign ? '-' : '+';
    size_t point = gsl_rng_uniform_int(rng, digits + 2);   /* past the end: none */
    for (size_t i = 0; i < digits; i++) {
        if (i == point)
            out[n++] = '.';
        out[n++] = (char)('0' + gsl_rng_uniform_int(rng, 10));
    }
    if (point == digits)
        out[n++] = '.';
    out[n] = '\0';
    return n;
}

/* strtod is the reference: ISO C 7.22.1.3 recommends correct rounding and
 * glibc's strtod does round correctly (from memory). Short tokens, with
 * every digit count, sign and point position, bit for bit. */
START_TEST(short_numbers_round_like_strtod)
{
    gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
    gsl_rng_set(rng, 2053);
    char token[16];
    for (int i = 0; i < 300000; i++) {
        size_t len = random_decimal(token, 8, rng);
        double got = 42.0, want = strtod(token, NULL);
        ck_assert_msg(sl_csv_parse_double(&got, token, len), "rejected %s", token);
        ck_assert_msg(memcmp(&got, &want, sizeof got) == 0, "%s: %a vs %a", token, got, want);
    }
    gsl_rng_free(rng);
}
END_TEST

enum { VALUE_TOKEN_MAX = 24 };

/* A file "n,v" of the tokens, one a row, the last without a line end (its
 * word reaches past the data), opened; the caller frees it. */
static sl_csv *open_values(const char *name, char (*tokens)[VALUE_TOKEN_MAX], int n,
                           sl_diag *diag)
{
    char *path = sl_test_path(scratch, name);
    FILE *f = fopen(path, "wb");
    ck_assert_ptr_nonnull(f);
    fputs("n,v\n", f);
    for (int i = 0; i < n; i++)
        fprintf(f, "%d,%s%s", i, tokens[i], i + 1 < n ? "\n" : "");
    ck_assert_int_eq(fclose(f), 0);
    sl_csv *csv;
    ck_assert_int_eq(sl_csv_open(&csv, path, diag), SL_OK);
    free(path);
    return csv;
}

/* Numbers read from a file with sl_csv_number: short tokens (the fast path
 * reads a word from the reader's buffer), longer ones and exponents, the
 * last without a line end, so its word reaches past the data. strtod is
 * the reference, as above. */
START_TEST(numbers_from_file_round_like_strtod)
{
    enum { N_VALUES = 50000, TOKEN_MAX = VALUE_TOKEN_MAX };
    gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
    gsl_rng_set(rng, 7);
    char (*tokens)[TOKEN_MAX] = malloc(N_VALUES * sizeof *tokens);
    ck_assert_ptr_nonnull(tokens);
    for (int i = 0; i < N_VALUES; i++) {
        unsigned long pick = gsl_rng_uniform_int(rng, 4);
        double scale = pow(10.0, (double)gsl_rng_uniform_int(rng, 12) - 4.0);
        double x = (gsl_rng_uniform(rng) - 0.5) * scale;
        if (pick < 2)
            random_decimal(tokens[i], pick ? 8 : 12, rng);
        else
            snprintf(tokens[i], TOKEN_MAX, pick == 2 ? "%.6g" : "%.3e", x);
    }
    sl_diag *diag = sl_diag_new();
    sl_csv *csv = open_values("values.csv", tokens, N_VALUES, diag);
    bool has;
    int i = 0;
    while (sl_csv_next(&has, csv, diag) == SL_OK && has) {
        double got, want = strtod(tokens[i], NULL);
        ck_assert_int_eq(sl_csv_number(&got, csv, 1, diag), SL_OK);
        ck_assert_msg(memcmp(&got, &want, sizeof got) == 0, "%s: %a vs %a", tokens[i], got, want);
        i++;
    }
    ck_assert_int_eq(i, N_VALUES);
    ck_assert_uint_eq(sl_diag_size(diag), 0);
    sl_csv_free(csv);
    sl_diag_free(diag);
    free(tokens);
    gsl_rng_free(rng);
}
END_TEST

/* Tokens of 9 to 18 bytes (7 to 16 digits, a sign now and then, a point
 * anywhere or nowhere: "0.0001044817", the way meters write currents in
 * fixed notation) read from a file with sl_csv_number, and with
 * sl_csv_number_e in milli- and kilo-units, bit for bit as strtod reads the
 * token (with "e-3" or "e3" appended for the units); strtod is the
 * reference, as above. Tokens of 16 digits reach past 2^53 and take the
 * general path; the rest the exact path of at most 15 significant digits. */
START_TEST(medium_numbers_from_file_round_like_strtod)
{
    enum { N_VALUES = 60000, TOKEN_MAX = VALUE_TOKEN_MAX };
    gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
    gsl_rng_set(rng, 1044817);
    char (*tokens)[TOKEN_MAX] = malloc(N_VALUES * sizeof *tokens);
    ck_assert_ptr_nonnull(tokens);
    for (int i = 0; i < N_VALUES; i++)
        while (random_decimal(tokens[i], 16, rng) < 9)
            ;
    sl_diag *diag = sl_diag_new();
    sl_csv *csv = open_values("medium.csv", tokens, N_VALUES, diag);
    bool has;
    int i = 0;
    while (sl_csv_next(&has, csv, diag) == SL_OK && has) {
        char scaled[TOKEN_MAX + 4];
        double got, want = strtod(tokens[i], NULL);
        ck_assert_int_eq(sl_csv_number(&got, csv, 1, diag), SL_OK);
        ck_assert_msg(memcmp(&got, &want, sizeof got) == 0, "%s: %a vs %a", tokens[i], got, want);
        int exp10 = i % 2 ? -3 : 3;
        snprintf(scaled, sizeof scaled, "%se%d", tokens[i], exp10);
        want = strtod(scaled, NULL);
        ck_assert_int_eq(sl_csv_number_e(&got, csv, 1, exp10, diag), SL_OK);
        ck_assert_msg(memcmp(&got, &want, sizeof got) == 0, "%s: %a vs %a", scaled, got, want);
        i++;
    }
    ck_assert_int_eq(i, N_VALUES);
    ck_assert_uint_eq(sl_diag_size(diag), 0);
    sl_csv_free(csv);
    sl_diag_free(diag);
    free(tokens);
    gsl_rng_free(rng);
}
END_TEST

static Suite *csv_suite(void)
{
    Suite *s = suite_create("csv");
    TCase *tc = tcase_create("csv");
    tcase_add_checked_fixture(tc, make_scratch, drop_scratch);
    tcase_add_test(tc, fixture_lf);
    tcase_add_test(tc, field_words);
    tcase_add_test(tc, exponent_tokens_like_strtod);
    tcase_add_test(tc, fixture_shuffled_extra_columns_blank_tail);
    tcase_add_test(tc, crlf_bom_no_final_newline);
    tcase_add_test(tc, line_numbers_are_physical);
    tcase_add_test(tc, numbers_accepted);
    tcase_add_test(tc, numbers_rejected);
    tcase_add_test(tc, numbers_round_trip_like_strtod);
    tcase_add_test(tc, medium_numbers_from_file_round_like_strtod);
    tcase_add_test(tc, number_errors_located);
    tcase_add_test(tc, structural_errors);
    tcase_add_test(tc, header_errors);
    tcase_add_test(tc, header_only_is_not_an_error);
    tcase_add_test(tc, unnamed_columns_allowed);
    tcase_add_test(tc, too_many_fields_refused);
    tcase_add_test(tc, missing_file_is_io_error);
    tcase_add_test(tc, long_record_refused);
    tcase_add_test(tc, text_fields_validated);
    tcase_add_test(tc, utf8_rules);
    tcase_add_test(tc, records_across_buffer_refills);
    tcase_add_test(tc, open_stream_keeps_stream_open);
    tcase_add_test(tc, dash_reads_standard_input);
    tcase_add_test(tc, plain_and_quoted_records_agree);
    tcase_add_test(tc, widest_record_accepted);
    tcase_add_test(tc, short_number_shapes_agree_with_general_path);
    tcase_add_test(tc, short_numbers_round_like_strtod);
    tcase_add_test(tc, numbers_from_file_round_like_strtod);
    suite_add_tcase(s, tc);
    return s;
}

int main(void) { return sl_test_main(csv_suite()); }
