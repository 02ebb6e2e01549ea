/* SPDX-License-Identifier: MIT
 * Physical constants (CODATA 2018 exact SI values) and the conversions between
 * SI, used inside the library, and the trade units at its edges (cm^-2, eV,
 * uF/cm^2, nF/cm^2, nm). Also the value-with-uncertainty pair sl_est.
 */
#ifndef SPLITLOT_UNITS_H
#define SPLITLOT_UNITS_H

#include <stdbool.h>
#include <stddef.h>

#define SL_SI_ELEMENTARY_CHARGE 1.602176634e-19  /* C, exact (CODATA 2018) */
#define SL_SI_PLANCK 6.62607015e-34              /* J s, exact (CODATA 2018) */
#define SL_SI_HBAR (SL_SI_PLANCK / (2.0 * 3.14159265358979323846)) /* J s */
#define SL_SI_BOLTZMANN 1.380649e-23             /* J/K, exact (CODATA 2018) */
#define SL_SI_EPS0 8.8541878128e-12              /* F/m (CODATA 2018) */
#define SL_SI_DEFAULT_FERMI_VELOCITY 1.0e6       /* m/s, graphene, common value */

/* Trade-unit conversions: multiply the SI value by the factor. */
#define SL_PER_CM2_PER_PER_M2 1.0e-4  /* density: m^-2 -> cm^-2 */
#define SL_PER_M2_PER_PER_CM2 1.0e4   /* density: cm^-2 -> m^-2 */
#define SL_UF_CM2_PER_F_M2 100.0      /* capacitance: F/m^2 -> uF/cm^2 */
#define SL_NF_CM2_PER_F_M2 1.0e5      /* capacitance: F/m^2 -> nF/cm^2 */
#define SL_M_PER_NM 1.0e-9            /* length: nm -> m */
#define SL_V_PER_M_PER_MV_CM 1.0e8    /* field: MV/cm -> V/m */
#define SL_M2_PER_CM2 1.0e-4          /* area: cm^2 -> m^2 (mobility cm^2/Vs -> m^2/Vs) */

/* Dimensions of the quantities measurement files give with a unit. */
typedef enum { SL_DIM_VOLT = 0, SL_DIM_AMPERE, SL_DIM_OHM, SL_DIM_KELVIN } sl_dimension;

/* The unit a file writes a quantity in, as a power of ten of its SI unit
 * (the one conversion table; src/units.c): V, mV, uV, kV; A, mA, uA, nA, pA;
 * ohm, kohm, Mohm, Gohm (also written with the ohm sign); K. The micro prefix
 * may be 'u' or the micro or mu sign. The spelling is matched exactly first,
 * then without regard to case when that names one unit ("OHM", "MOhm", "mv"),
 * except that an 'm' and an 'M' prefix are never taken for one another
 * ("MV" is refused). Returns true with *exp10 set (the SI
 * value is the written value times 10^exp10), false for a unit not in the
 * table or of another dimension. */
bool sl_units_exp10(int *exp10, sl_dimension dim, const char *unit, size_t len);

/* The SI unit's name of a dimension ("V", "A", "ohm", "K"). */
const char *sl_units_si_name(sl_dimension dim);

/* A value with its one-standard-deviation uncertainty, same unit for both. */
typedef struct {
    double val;
    double sigma;
} sl_est;

#endif
