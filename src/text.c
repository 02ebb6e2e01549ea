/* SPDX-License-Identifier: MIT
 * Edit distance and the program's one did-you-mean rule and message (see
 * include/splitlot/text.h).
 */
#include "splitlot/text.h"

#include <ctype.h>
#include <stdio.h>
#include <string.h>

#define SL_TEXT_MAX_LEN 64

static int same_char(char a, char b, int fold)
{
    return fold ? tolower((unsigned char)a) == tolower((unsigned char)b) : a == b;
}

/* Levenshtein distance, letter case folded or not. */
static size_t text_distance(const char *a, const char *b, int fold)
{
    size_t la = strlen(a), lb = strlen(b);
    if (la > SL_TEXT_MAX_LEN || lb > SL_TEXT_MAX_LEN)
        return 255;
    size_t row[SL_TEXT_MAX_LEN + 1];
    for (size_t j = 0; j <= lb; j++)
        row[j] = j;
    for (size_t i = 1; i <= la; i++) {
        size_t diag = row[0];
        row[0] = i;
        for (size_t j = 1; j <= lb; j++) {
            size_t up = row[j];
            size_t cost = same_char(a[i - 1], b[j - 1], fold) ? 0 : 1;
            size_t best = diag + cost;
            if (up + 1 < best)
                best = up + 1;
            if (row[j - 1] + 1 < best)
                best = row[j - 1] + 1;
            row[j] = best;
            diag = up;
        }
    }
    return row[lb];
}

size_t sl_text_edit_distance(const char *a, const char *b) { return text_distance(a, b, 0); }

size_t sl_text_suggest_limit(const char *name)
{
    size_t d = strlen(name) / 3;
    return d < 1 ? 1 : (d > 4 ? 4 : d);
}

const char *sl_text_suggest(const char *name, const char *const *candidates, size_t count)
{
    const char *best = NULL;
    size_t best_d = sl_text_suggest_limit(name) + 1;
    for (size_t i = 0; i < count; i++) {
        if (!candidates[i])
            continue;
        size_t d = text_distance(name, candidates[i], 1);
        if (d < best_d) {
            best_d = d;
            best = candidates[i];
        }
    }
    return best;
}

const char *sl_text_did_you_mean(char *buf, size_t size, const char *name,
                                 const char *const *candidates, size_t count)
{
    const char *near = sl_text_suggest(name, candidates, count);
    if (size > 0) {
        buf[0] = '\0';
        if (near)
            snprintf(buf, size, " (did you mean '%s'?)", near);
    }
    return buf;
}
