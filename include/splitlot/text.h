/* SPDX-License-Identifier: MIT
 * Small text helpers shared by the parsers: edit distance for did-you-mean
 * suggestions and a nearest-name lookup. No allocation visible to callers.
 */
#ifndef SPLITLOT_TEXT_H
#define SPLITLOT_TEXT_H

#include <stddef.h>

/* Levenshtein distance between two strings (bytes), saturating at 255 for
 * strings longer than 64 bytes, where a suggestion makes no sense anyway. */
size_t sl_text_edit_distance(const char *a, const char *b);

/* The candidate closest to name within max_distance edits (ties: first), or
 * NULL. Exact matches are returned too. */
const char *sl_text_nearest(const char *name, const char *const *candidates,
                            size_t count, size_t max_distance);

#endif
