/* SPDX-License-Identifier: MIT
 * A program built against the installed library: the thermal floor of
 * graphene at 300 K, about 8e10 cm^-2 (Fang et al., Appl. Phys. Lett. 91,
 * 092109 (2007)); prints it and fails outside 7e10..9e10. */
#include <stdio.h>
#include <splitlot/physics.h>
int main(void)
{
    sl_physics_init();
    double n_cm2 = sl_physics_thermal_floor_per_m2(300.0, SL_SI_DEFAULT_FERMI_VELOCITY) *
                   SL_PER_CM2_PER_PER_M2;
    printf("thermal floor at 300 K: %.4g cm^-2\n", n_cm2);
    return n_cm2 > 7e10 && n_cm2 < 9e10 ? 0 : 1;
}
