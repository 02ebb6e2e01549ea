/* SPDX-License-Identifier: MIT
 * Tests of the text module: the edit distance, and the one did-you-mean rule
 * and message every unknown name in the program goes through.
 */
#include <string.h>

#include "splitlot/text.h"
#include "test_support.h"

START_TEST(edit_distance_by_hand)
{
    /* kitten -> sitting: 3 edits (the textbook Levenshtein example) */
    ck_assert_uint_eq(sl_text_edit_distance("kitten", "sitting"), 3);
    ck_assert_uint_eq(sl_text_edit_distance("", "abc"), 3);
    ck_assert_uint_eq(sl_text_edit_distance("SiO2", "SiO2"), 0);
    ck_assert_uint_eq(sl_text_edit_distance("hbn", "hBN"), 2); /* case counts here */
}
END_TEST

START_TEST(limit_is_a_third_of_the_name)
{
    ck_assert_uint_eq(sl_text_suggest_limit(""), 1);
    ck_assert_uint_eq(sl_text_suggest_limit("ox9"), 1);
    ck_assert_uint_eq(sl_text_suggest_limit("anneal"), 2);
    ck_assert_uint_eq(sl_text_suggest_limit("temperature_K"), 4);
    ck_assert_uint_eq(sl_text_suggest_limit("a_very_long_key_name_indeed"), 4);
}
END_TEST

START_TEST(suggest_ignores_case_and_keeps_the_limit)
{
    const char *const materials[] = { "SiO2", "Al2O3", "HfO2", "hBN" };
    ck_assert_str_eq(sl_text_suggest("Si02", materials, 4), "SiO2");
    ck_assert_str_eq(sl_text_suggest("hbn", materials, 4), "hBN");
    ck_assert_str_eq(sl_text_suggest("ALO3", materials, 4), "Al2O3"); /* 1 edit, case folded */
    ck_assert_ptr_null(sl_text_suggest("Si3N4", materials, 4));      /* 2 edits > limit 1 */
    ck_assert_ptr_null(sl_text_suggest("x", materials, 0));
    const char *const ties[] = { "W01", "W02" };
    ck_assert_str_eq(sl_text_suggest("W00", ties, 2), "W01"); /* a tie goes to the first */
    const char *const with_null[] = { NULL, "ox90" };
    ck_assert_str_eq(sl_text_suggest("ox9", with_null, 2), "ox90");
}
END_TEST

START_TEST(one_message_format)
{
    const char *const keys[] = { "temperatures_K", "title" };
    char buf[64];
    ck_assert_str_eq(sl_text_did_you_mean(buf, sizeof buf, "temperature_K", keys, 2),
                     " (did you mean 'temperatures_K'?)");
    ck_assert_str_eq(sl_text_did_you_mean(buf, sizeof buf, "wafers", keys, 2), "");
    char small[8];
    ck_assert_uint_eq(strlen(sl_text_did_you_mean(small, sizeof small, "titl", keys, 2)), 7); /* truncated */
}
END_TEST

static Suite *text_suite(void)
{
    Suite *s = suite_create("text");
    TCase *tc = tcase_create("did-you-mean");
    tcase_add_test(tc, edit_distance_by_hand);
    tcase_add_test(tc, limit_is_a_third_of_the_name);
    tcase_add_test(tc, suggest_ignores_case_and_keeps_the_limit);
    tcase_add_test(tc, one_message_format);
    suite_add_tcase(s, tc);
    return s;
}

int main(void) { return sl_test_main(text_suite()); }
