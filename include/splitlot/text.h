/* SPDX-License-Identifier: MIT
 * Small text helpers shared by the parsers: the one did-you-mean rule of the
 * program (sl_text_suggest, sl_text_did_you_mean) and the edit distance under
 * it. No allocation visible to callers.
 */
#ifndef SPLITLOT_TEXT_H
#define SPLITLOT_TEXT_H

#include <stddef.h>

/* Levenshtein distance between two strings (bytes), saturating at 255 for
 * strings longer than 64 bytes, where a suggestion makes no sense anyway. */
size_t sl_text_edit_distance(const char *a, const char *b);

/* The suggestion for a name that is not known, the same everywhere (plan keys
 * and names, materials, wafers, device types, columns): the candidate nearest
 * to name by edit distance with letter case ignored, if it is within
 * sl_text_suggest_limit(name) edits (ties: the first), else NULL. */
const char *sl_text_suggest(const char *name, const char *const *candidates, size_t count);

/* The most edits a suggestion may be away: a third of the name's length,
 * at least 1 and at most 4. */
size_t sl_text_suggest_limit(const char *name);

/* The message tail every did-you-mean uses: " (did you mean 'NEAR'?)" with
 * NEAR from sl_text_suggest, or "" when there is none; written into buf
 * (truncated to size) and returned. Callers write
 * "unknown <what> '<name>'%s". */
const char *sl_text_did_you_mean(char *buf, size_t size, const char *name,
                                 const char *const *candidates, size_t count);

#endif
