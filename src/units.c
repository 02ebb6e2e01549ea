/* SPDX-License-Identifier: MIT
 * The one table of units measurement files may use for a quantity, each a
 * power of ten of its SI unit (see include/splitlot/units.h). Not for trade
 * units of the physics (cm^-2, nF/cm^2): those are constants in units.h.
 */
#include "splitlot/units.h"

#include <string.h>

typedef struct {
    const char *name;
    sl_dimension dim;
    int exp10;
} unit_entry;

/* SI prefixes (BIPM, The International System of Units, 9th ed., 2019,
 * table 7); "\u00b5" is the micro sign, "\u03bc" the Greek mu, "\u03a9" the
 * ohm sign written as capital omega. */
static const unit_entry units[] = {
    { "V", SL_DIM_VOLT, 0 },          { "mV", SL_DIM_VOLT, -3 },
    { "uV", SL_DIM_VOLT, -6 },        { "\u00b5V", SL_DIM_VOLT, -6 },
    { "\u03bcV", SL_DIM_VOLT, -6 },   { "kV", SL_DIM_VOLT, 3 },
    { "A", SL_DIM_AMPERE, 0 },        { "mA", SL_DIM_AMPERE, -3 },
    { "uA", SL_DIM_AMPERE, -6 },      { "\u00b5A", SL_DIM_AMPERE, -6 },
    { "\u03bcA", SL_DIM_AMPERE, -6 }, { "nA", SL_DIM_AMPERE, -9 },
    { "pA", SL_DIM_AMPERE, -12 },
    { "ohm", SL_DIM_OHM, 0 },         { "\u03a9", SL_DIM_OHM, 0 },
    { "kohm", SL_DIM_OHM, 3 },        { "k\u03a9", SL_DIM_OHM, 3 },
    { "Mohm", SL_DIM_OHM, 6 },        { "M\u03a9", SL_DIM_OHM, 6 },
    { "Gohm", SL_DIM_OHM, 9 },        { "G\u03a9", SL_DIM_OHM, 9 },
    { "K", SL_DIM_KELVIN, 0 },
};

#define N_UNITS (sizeof units / sizeof units[0])

static int lower(int c) { return c >= 'A' && c <= 'Z' ? c - 'A' + 'a' : c; }

static bool same(const char *a, const char *b, size_t len, bool any_case)
{
    if (strlen(a) != len)
        return false;
    for (size_t i = 0; i < len; i++) {
        int x = (unsigned char)a[i], y = (unsigned char)b[i];
        if (x != y && !(any_case && lower(x) == lower(y)))
            return false;
    }
    return true;
}

bool sl_units_exp10(int *exp10, sl_dimension dim, const char *unit, size_t len)
{
    for (size_t i = 0; i < N_UNITS; i++)
        if (units[i].dim == dim && same(units[i].name, unit, len, false)) {
            *exp10 = units[i].exp10;
            return true;
        }
    const unit_entry *found = NULL;
    for (size_t i = 0; i < N_UNITS; i++) {
        if (units[i].dim != dim || !same(units[i].name, unit, len, true))
            continue;
        if ((unit[0] == 'm' || unit[0] == 'M') && unit[0] != units[i].name[0])
            continue; /* milli and mega are never taken for one another */
        if (found && found->exp10 != units[i].exp10)
            return false; /* two units differ only in case: say nothing */
        found = &units[i];
    }
    if (found)
        *exp10 = found->exp10;
    return found != NULL;
}

const char *sl_units_si_name(sl_dimension dim)
{
    static const char *const names[] = { "V", "A", "ohm", "K" };
    return (unsigned)dim < sizeof names / sizeof names[0] ? names[dim] : "?";
}
