/* SPDX-License-Identifier: MIT
 * Edit distance and nearest-name lookup for did-you-mean suggestions
 * (see include/splitlot/text.h).
 */
#include "splitlot/text.h"

#include <string.h>

#define SL_TEXT_MAX_LEN 64

size_t sl_text_edit_distance(const char *a, const char *b)
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
            size_t cost = a[i - 1] == b[j - 1] ? 0 : 1;
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

const char *sl_text_nearest(const char *name, const char *const *candidates,
                            size_t count, size_t max_distance)
{
    const char *best = NULL;
    size_t best_d = max_distance + 1;
    for (size_t i = 0; i < count; i++) {
        size_t d = sl_text_edit_distance(name, candidates[i]);
        if (d < best_d) {
            best_d = d;
            best = candidates[i];
        }
    }
    return best;
}
