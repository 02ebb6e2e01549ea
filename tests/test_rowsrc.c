/* SPDX-License-Identifier: MIT
 * Tests of the row source (include/splitlot/rowsrc.h) and the unit table
 * (include/splitlot/units.h): conversions exact, separators and decimal
 * commas, column names with units, --columns mappings, the messages for
 * missing and ambiguous columns, overflow codes, flags and directions.
 */
#include <check.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include <gsl/gsl_rng.h>

#include "splitlot/rowsrc.h"
#include "splitlot/units.h"
#include "test_support.h"

static char *scratch;

static void make_scratch(void) { scratch = sl_test_tmpdir(); }
static void drop_scratch(void)
{
    sl_test_rmtree(scratch);
    free(scratch);
}

static sl_status open_text(sl_rowsrc **src, const char *text, const char *columns, sl_diag *diag)
{
    char *path = sl_test_path(scratch, "rows.csv");
    ck_assert_int_eq(sl_test_write_file(path, text), 0);
    sl_status st = sl_rowsrc_open(src, path, columns, diag);
    free(path);
    return st;
}

static const char *first_message(const sl_diag *diag)
{
    return sl_diag_size(diag) ? sl_diag_get(diag, 0)->text : "";
}

/* The unit table: each written value times its unit is exactly the double
 * the C compiler makes of the SI literal (C11 6.4.4.2: a decimal floating
 * constant is rounded to a representable value; GCC rounds correctly). */
START_TEST(units_exact)
{
    static const struct {
        sl_dimension dim;
        const char *unit, *text;
        double si;
    } table[] = {
        { SL_DIM_VOLT, "V", "1.25", 1.25 },
        { SL_DIM_VOLT, "mV", "50", 50e-3 },
        { SL_DIM_VOLT, "mV", "-0.1", -0.1e-3 },
        { SL_DIM_VOLT, "mV", "123.456789", 123.456789e-3 },
        { SL_DIM_AMPERE, "A", "3.3e-6", 3.3e-6 },
        { SL_DIM_AMPERE, "mA", "0.7", 0.7e-3 },
        { SL_DIM_AMPERE, "uA", "2.5", 2.5e-6 },
        { SL_DIM_AMPERE, "uA", "78.79404", 78.79404e-6 },
        { SL_DIM_AMPERE, "\u00b5A", "1.1", 1.1e-6 },
        { SL_DIM_AMPERE, "nA", "0.3", 0.3e-9 },
        { SL_DIM_AMPERE, "nA", "123456.789e3", 123456.789e-6 },
        { SL_DIM_AMPERE, "uA", "1.234567e-05", 1.234567e-11 },
        { SL_DIM_AMPERE, "A", "-9.91E+37", -9.91e37 },
        { SL_DIM_AMPERE, "mA", "5e-3", 5e-6 },
        { SL_DIM_AMPERE, "nA", "12.5E2", 1250e-9 },
        { SL_DIM_AMPERE, "A", "7.0e-300", 7.0e-300 },
        { SL_DIM_OHM, "ohm", "1500", 1500.0 },
        { SL_DIM_OHM, "Ohm", "0.1", 0.1 },
        { SL_DIM_OHM, "kohm", "4.7", 4.7e3 },
        { SL_DIM_OHM, "kOhm", "0.7079039", 707.9039 },
        { SL_DIM_OHM, "k\u03a9", "2.2", 2.2e3 },
        { SL_DIM_OHM, "Mohm", "1.2", 1.2e6 },
        { SL_DIM_OHM, "MOhm", "0.000001", 1.0 },
        { SL_DIM_KELVIN, "K", "77.4", 77.4 },
        { SL_DIM_KELVIN, "k", "300", 300.0 },
    };
    for (size_t i = 0; i < sizeof table / sizeof table[0]; i++) {
        int e = 99;
        ck_assert_msg(sl_units_exp10(&e, table[i].dim, table[i].unit, strlen(table[i].unit)),
                      "unit %s", table[i].unit);
        double v = 0.0;
        ck_assert(sl_csv_parse_double_e(&v, table[i].text, strlen(table[i].text), e, false));
        ck_assert_msg(v == table[i].si, "%s %s: %.17g, expected %.17g", table[i].text,
                      table[i].unit, v, table[i].si);
    }
    static const struct {
        sl_dimension dim;
        const char *unit;
    } refused[] = {
        { SL_DIM_VOLT, "A" }, { SL_DIM_AMPERE, "mV" }, { SL_DIM_VOLT, "furlong" },
        { SL_DIM_KELVIN, "C" }, { SL_DIM_VOLT, "" }, { SL_DIM_VOLT, "MV" },
    };
    for (size_t i = 0; i < sizeof refused / sizeof refused[0]; i++) {
        int e = 99;
        ck_assert_msg(!sl_units_exp10(&e, refused[i].dim, refused[i].unit, strlen(refused[i].unit)),
                      "unit '%s' accepted", refused[i].unit);
    }
}
END_TEST

/* Scaled parsing rounds once: a token in a unit 10^k gives bit for bit what
 * strtod gives for the same digits with the exponent moved by k (glibc's
 * strtod rounds correctly, from memory, as tests/test_csv.c relies on). */
START_TEST(scaled_numbers_round_once)
{
    static const int exps[] = { -12, -9, -6, -3, 0, 3, 6, 9 };
    gsl_rng *rng = gsl_rng_alloc(gsl_rng_mt19937);
    gsl_rng_set(rng, 15);
    char token[64], moved[96];
    for (int i = 0; i < 100000; i++) {
        double x = (gsl_rng_uniform(rng) - 0.5) * pow(10.0, (double)gsl_rng_uniform_int(rng, 30) - 15.0);
        unsigned long pick = gsl_rng_uniform_int(rng, 3);
        if (pick == 0)
            snprintf(token, sizeof token, "%.*f", (int)gsl_rng_uniform_int(rng, 7), x);
        else if (pick == 1)
            snprintf(token, sizeof token, "%.*e", (int)gsl_rng_uniform_int(rng, 9), x);
        else
            snprintf(token, sizeof token, "%.17g", x);
        int e = exps[gsl_rng_uniform_int(rng, 8)];
        char *ex = strpbrk(token, "eE");
        long file_exp = ex ? strtol(ex + 1, NULL, 10) : 0;
        snprintf(moved, sizeof moved, "%.*se%ld", (int)(ex ? ex - token : (long)strlen(token)),
                 token, file_exp + e);
        double got = 0.0, want = strtod(moved, NULL);
        ck_assert_msg(sl_csv_parse_double_e(&got, token, strlen(token), e, false), "%s", token);
        ck_assert_msg(memcmp(&got, &want, sizeof got) == 0, "%s at 1e%d: %a vs %a", token, e, got,
                      want);
    }
    gsl_rng_free(rng);
}
END_TEST

/* Separator from the header, decimal commas with ';' and tab only. */
START_TEST(separators_and_decimal_comma)
{
    static const struct {
        const char *text;
        char sep;
        double vg, r;
    } table[] = {
        { "wafer,device,die_x,die_y,vg_V,r_ohm\nW1,D1,0,0,-1.5,1200\n", ',', -1.5, 1200 },
        { "wafer;device;die_x;die_y;vg_V;r_ohm\nW1;D1;0;0;-1,5;1200,25\n", ';', -1.5, 1200.25 },
        { "wafer\tdevice\tdie_x\tdie_y\tvg_V\tr_ohm\nW1\tD1\t0\t0\t-1,5\t1e3\n", '\t', -1.5, 1000 },
        { "# tester notes\n\n#more\nwafer;device;die_x;die_y;vg_V;r_ohm\r\nW1;D1;0;0;2;3\r\n", ';', 2, 3 },
        { "wafer;device;die_x;die_y;vg_V;r_ohm\n\"W;1\";D1;0;0;-0,25;\"1,5e3\"\n", ';', -0.25, 1500 },
    };
    for (size_t i = 0; i < sizeof table / sizeof table[0]; i++) {
        sl_diag *diag = sl_diag_new();
        sl_rowsrc *src = NULL;
        ck_assert_int_eq(open_text(&src, table[i].text, NULL, diag), SL_OK);
        ck_assert_int_eq(sl_rowsrc_separator(src), table[i].sep);
        bool has = false;
        ck_assert_int_eq(sl_rowsrc_next(&has, src, diag), SL_OK);
        ck_assert(has);
        double vg, r;
        ck_assert_int_eq(sl_rowsrc_number(&vg, src, SL_ROW_VG, diag), SL_OK);
        ck_assert_int_eq(sl_rowsrc_number(&r, src, SL_ROW_R, diag), SL_OK);
        ck_assert_msg(vg == table[i].vg && r == table[i].r, "case %zu: %g %g", i, vg, r);
        sl_rowsrc_free(src);
        sl_diag_free(diag);
    }
    /* with a comma separator a decimal comma cannot be: "1,5" is two fields;
     * with ';' a point and a comma together are refused */
    sl_diag *diag = sl_diag_new();
    sl_rowsrc *src = NULL;
    ck_assert_int_eq(open_text(&src, "wafer;vg_V\nW1;1.234,5\n", NULL, diag), SL_OK);
    bool has = false;
    ck_assert_int_eq(sl_rowsrc_next(&has, src, diag), SL_OK);
    double v;
    ck_assert_int_eq(sl_rowsrc_number(&v, src, SL_ROW_VG, diag), SL_EINPUT);
    ck_assert_ptr_nonnull(strstr(first_message(diag), "bad number \"1.234,5\""));
    sl_rowsrc_free(src);
    sl_diag_free(diag);
}
END_TEST

/* Header names to quantities, each value in SI. */
START_TEST(column_names_with_units)
{
    const char *text = "WAFER,Device,Die_X,die_y,Vg [V],Id (uA),Vd [mV],T [K],Timestamp,operator\n"
                       "W1,D1,1,2,-3.5,2.5,50,77,2026-12-03,bob\n";
    sl_diag *diag = sl_diag_new();
    sl_rowsrc *src = NULL;
    ck_assert_int_eq(open_text(&src, text, NULL, diag), SL_OK);
    const sl_row_set need = SL_ROW_BIT(SL_ROW_WAFER) | SL_ROW_BIT(SL_ROW_VG) |
                            SL_ROW_BIT(SL_ROW_ID) | SL_ROW_BIT(SL_ROW_VD);
    ck_assert_int_eq(sl_rowsrc_require(src, need,
                                       need | SL_ROW_BIT(SL_ROW_DEVICE) | SL_ROW_BIT(SL_ROW_DIE_X) |
                                           SL_ROW_BIT(SL_ROW_DIE_Y) |
                                           SL_ROW_BIT(SL_ROW_TEMPERATURE),
                                       "test", diag),
                     SL_OK);
    ck_assert_uint_eq(sl_rowsrc_unused_count(src), 2);
    ck_assert_str_eq(sl_rowsrc_unused(src, 0), "Timestamp");
    ck_assert_str_eq(sl_rowsrc_unused(src, 1), "operator");
    bool has = false;
    ck_assert_int_eq(sl_rowsrc_next(&has, src, diag), SL_OK);
    double vg, id, vd, t;
    ck_assert_int_eq(sl_rowsrc_number(&vg, src, SL_ROW_VG, diag), SL_OK);
    ck_assert_int_eq(sl_rowsrc_number(&id, src, SL_ROW_ID, diag), SL_OK);
    ck_assert_int_eq(sl_rowsrc_number(&vd, src, SL_ROW_VD, diag), SL_OK);
    ck_assert_int_eq(sl_rowsrc_optional(&t, src, SL_ROW_TEMPERATURE, diag), SL_OK);
    ck_assert(vg == -3.5 && id == 2.5e-6 && vd == 50e-3 && t == 77.0);
    const char *w = NULL;
    size_t len = 0;
    ck_assert_int_eq(sl_rowsrc_text(&w, &len, src, SL_ROW_WAFER, 64, diag), SL_OK);
    ck_assert_str_eq(w, "W1");
    sl_rowsrc_free(src);
    /* unit suffixes in the house style, any case */
    ck_assert_int_eq(open_text(&src, "wafer,VG_mV,R_KOHM,ID_NA\nW,100,4.7,3\n", NULL, diag), SL_OK);
    ck_assert_int_eq(sl_rowsrc_next(&has, src, diag), SL_OK);
    double r, i_nA;
    ck_assert_int_eq(sl_rowsrc_number(&vg, src, SL_ROW_VG, diag), SL_OK);
    ck_assert_int_eq(sl_rowsrc_number(&r, src, SL_ROW_R, diag), SL_OK);
    ck_assert_int_eq(sl_rowsrc_number(&i_nA, src, SL_ROW_ID, diag), SL_OK);
    ck_assert(vg == 100e-3 && r == 4.7e3 && i_nA == 3e-9);
    sl_rowsrc_free(src);
    sl_diag_free(diag);
}
END_TEST

/* --columns maps any header name; the quantity may carry a unit. */
START_TEST(column_mappings)
{
    const char *text = "Wafer,Device,X,Y,GateVoltage,Current\nW1,D1,0,0,2,150\n";
    sl_diag *diag = sl_diag_new();
    sl_rowsrc *src = NULL;
    ck_assert_int_eq(open_text(&src, text, "vg_V=GateVoltage,id_nA=current,die_x=X,die_y=Y", diag),
                     SL_OK);
    bool has = false;
    ck_assert_int_eq(sl_rowsrc_next(&has, src, diag), SL_OK);
    double vg, id, x;
    ck_assert_int_eq(sl_rowsrc_number(&vg, src, SL_ROW_VG, diag), SL_OK);
    ck_assert_int_eq(sl_rowsrc_number(&id, src, SL_ROW_ID, diag), SL_OK);
    ck_assert_int_eq(sl_rowsrc_number(&x, src, SL_ROW_DIE_X, diag), SL_OK);
    ck_assert(vg == 2.0 && id == 150e-9 && x == 0.0);
    sl_rowsrc_free(src);
    static const struct {
        const char *columns, *message;
    } bad[] = {
        { "vg_V", "'vg_V' is not QUANTITY=COLUMN" },
        { "vg_Vx=GateVoltage", "names no quantity (did you mean 'vg_V'?)" },
        { "vg_V=Gate", "'Gate' is not a column of the file" },
        { "vg_V=GateVoltage,vg_V=Current", "maps a quantity or a column twice" },
    };
    for (size_t i = 0; i < sizeof bad / sizeof bad[0]; i++) {
        sl_diag_clear(diag);
        ck_assert_int_eq(open_text(&src, text, bad[i].columns, diag), SL_EINPUT);
        ck_assert_ptr_null(src);
        ck_assert_msg(strstr(first_message(diag), bad[i].message), "%s: %s", bad[i].columns,
                      first_message(diag));
    }
    sl_diag_free(diag);
}
END_TEST

/* A missing column: did-you-mean among the file's columns, then a note with
 * the columns found and the separator. Unknown units and two columns for one
 * quantity are errors at the header. */
START_TEST(header_messages)
{
    sl_diag *diag = sl_diag_new();
    sl_rowsrc *src = NULL;
    ck_assert_int_eq(open_text(&src, "wafer;device;die_x;die_y;Vg;Resistanse [Ohm]\n", NULL, diag),
                     SL_OK);
    sl_row_set need = SL_ROW_BIT(SL_ROW_VG) | SL_ROW_BIT(SL_ROW_R) | SL_ROW_BIT(SL_ROW_WAFER);
    ck_assert_int_eq(sl_rowsrc_require(src, need, need, "a sweeps file needs ...", diag), SL_EINPUT);
    ck_assert_uint_eq(sl_diag_count(diag, SL_SEV_ERROR), 2);
    const sl_diag_msg *m = sl_diag_get(diag, 0);
    ck_assert_int_eq(m->line, 1);
    ck_assert_msg(strstr(m->text, "missing column 'vg_V' (a sweeps file needs ...) (did you mean "
                                  "'Vg'?); map it with --columns vg_V=Vg"), "%s", m->text);
    m = sl_diag_get(diag, 2);
    ck_assert_int_eq(m->severity, SL_SEV_NOTE);
    ck_assert_msg(strstr(m->text, "columns found: \"wafer\", \"device\", \"die_x\", \"die_y\", \"Vg\", "
                                  "\"Resistanse [Ohm]\" (separator ';')"), "%s", m->text);
    sl_rowsrc_free(src);
    sl_diag_clear(diag);
    ck_assert_int_eq(open_text(&src, "wafer,Vg [furlong],R [Ohm]\n", NULL, diag), SL_EINPUT);
    m = sl_diag_get(diag, 0);
    ck_assert_int_eq(m->col, 2);
    ck_assert_msg(strstr(m->text, "column \"Vg [furlong]\": unknown unit 'furlong' for vg_V"), "%s",
                  m->text);
    sl_diag_clear(diag);
    ck_assert_int_eq(open_text(&src, "wafer,vg_V,R [Ohm],Vg (mV)\n", NULL, diag), SL_EINPUT);
    m = sl_diag_get(diag, 0);
    ck_assert_int_eq(m->col, 4);
    ck_assert_msg(strstr(m->text, "columns \"vg_V\" (column 2) and \"Vg (mV)\" (column 4) both give vg_V"),
                  "%s", m->text);
    sl_diag_free(diag);
}
END_TEST

/* A repeated value (a drain bias on every row) read once and reused while
 * its text stays the same, short or longer than a word, and read again the
 * moment it changes: always the value sl_rowsrc_number gives. */
START_TEST(repeated_number_follows_the_text)
{
    const char *text = "wafer,Vd (mV)\nW,100\nW,100\nW,100.0\nW,100\nW,0.123456789\nW,0.123456789\n"
                       "W,0.123456788\nW,-0.5\nW,-0.5\n";
    sl_diag *diag = sl_diag_new();
    sl_rowsrc *src = NULL;
    ck_assert_int_eq(open_text(&src, text, NULL, diag), SL_OK);
    bool has = false;
    int rows = 0;
    while (sl_rowsrc_next(&has, src, diag) == SL_OK && has) {
        double again, once;
        ck_assert_int_eq(sl_rowsrc_number_repeated(&again, src, SL_ROW_VD, diag), SL_OK);
        ck_assert_int_eq(sl_rowsrc_number(&once, src, SL_ROW_VD, diag), SL_OK);
        ck_assert_msg(again == once, "row %d: %.17g vs %.17g", rows, again, once);
        rows++;
    }
    ck_assert_int_eq(rows, 9);
    sl_rowsrc_free(src);
    sl_diag_free(diag);
}
END_TEST

/* Overflow codes in the file's unit, compliance flags, directions. */
START_TEST(overflow_flags_directions)
{
    const char *text = "wafer,Id (uA),compliance,direction\n"
                       "W,9.9e37,1,forward\nW,-9.91E+37,true,Reverse\nW,9.89e37,0,back\n";
    sl_diag *diag = sl_diag_new();
    sl_rowsrc *src = NULL;
    ck_assert_int_eq(open_text(&src, text, NULL, diag), SL_OK);
    static const struct {
        int overflow, compliance, direction;
        sl_status dir_status;
    } want[] = { { 1, 1, 1, SL_OK }, { 1, 1, -1, SL_OK }, { 0, 0, 0, SL_EINPUT } };
    for (size_t i = 0; i < 3; i++) {
        bool has = false, flag = false;
        ck_assert_int_eq(sl_rowsrc_next(&has, src, diag), SL_OK);
        double id;
        int dir = 7;
        ck_assert_int_eq(sl_rowsrc_number(&id, src, SL_ROW_ID, diag), SL_OK);
        ck_assert_int_eq(sl_rowsrc_is_overflow(src, SL_ROW_ID, id), want[i].overflow);
        /* the limit a caller checks inline: 9.9e37 in uA, exactly 9.9e31 A */
        ck_assert_int_eq(fabs(id) >= sl_rowsrc_overflow_si(src, SL_ROW_ID), want[i].overflow);
        ck_assert(sl_rowsrc_overflow_si(src, SL_ROW_ID) == 9.9e31);
        ck_assert_int_eq(sl_rowsrc_flag(&flag, src, SL_ROW_COMPLIANCE, diag), SL_OK);
        ck_assert_int_eq(flag, want[i].compliance);
        ck_assert_int_eq(sl_rowsrc_direction(&dir, src, diag), want[i].dir_status);
        ck_assert_int_eq(dir, want[i].direction);
    }
    ck_assert_ptr_nonnull(strstr(first_message(diag), "direction \"back\" is not forward or reverse"));
    sl_rowsrc_free(src);
    sl_diag_free(diag);
}
END_TEST

/* Rows written back as the file wrote them, quoted where they must be. */
START_TEST(rows_written_back)
{
    sl_diag *diag = sl_diag_new();
    sl_rowsrc *src = NULL;
    ck_assert_int_eq(open_text(&src, "a;b;c\n\"x;y\";\"say \"\"hi\"\"\";1,5\n", NULL, diag), SL_OK);
    bool has = false;
    ck_assert_int_eq(sl_rowsrc_next(&has, src, diag), SL_OK);
    char *buf = NULL;
    size_t len = 0, cap = 0;
    ck_assert_int_eq(sl_rowsrc_format(&buf, &len, &cap, src, 0, "reason"), 0);
    ck_assert_int_eq(sl_rowsrc_format(&buf, &len, &cap, src, 1, "bad; very"), 0);
    ck_assert_str_eq(buf, "a;b;c;reason\n\"x;y\";\"say \"\"hi\"\"\";1,5;\"bad; very\"\n");
    free(buf);
    sl_rowsrc_free(src);
    sl_diag_free(diag);
}
END_TEST

static Suite *rowsrc_suite(void)
{
    Suite *s = suite_create("rowsrc");
    TCase *tc = tcase_create("core");
    tcase_add_checked_fixture(tc, make_scratch, drop_scratch);
    tcase_add_test(tc, units_exact);
    tcase_add_test(tc, scaled_numbers_round_once);
    tcase_add_test(tc, separators_and_decimal_comma);
    tcase_add_test(tc, column_names_with_units);
    tcase_add_test(tc, column_mappings);
    tcase_add_test(tc, header_messages);
    tcase_add_test(tc, repeated_number_follows_the_text);
    tcase_add_test(tc, overflow_flags_directions);
    tcase_add_test(tc, rows_written_back);
    suite_add_tcase(s, tc);
    return s;
}

int main(void) { return sl_test_main(rowsrc_suite()); }
