#!/usr/bin/env python3
# SPDX-License-Identifier: MIT
# The script a fab engineer would write instead of splitlot, for the benchmark:
# read a sweeps CSV with pandas, fit every device's transfer curve with
# scipy.optimize.curve_fit to the same model, write the results to SQLite.
# Usage: fit_reference.py SWEEPS.csv OUT.db GATE_CAPACITANCE_F_PER_M2 L_OVER_W
import sqlite3
import sys

import numpy as np
import pandas as pd
from scipy.optimize import curve_fit

E = 1.602176634e-19  # C, CODATA 2018


def main():
    sweeps, out_db, cg, lw = sys.argv[1], sys.argv[2], float(sys.argv[3]), float(sys.argv[4])
    df = pd.read_csv(sweeps, dtype={"wafer": str, "device": str})

    def model(vg, vcnp, mu_cm2, n0_cm2, rc):
        # R = Rc + (L/W) / (e mu sqrt(n0^2 + n^2)), n = Cg (Vg - Vcnp) / e, in SI
        n = cg * (vg - vcnp) / E
        n0 = abs(n0_cm2) * 1e4
        mu = abs(mu_cm2) * 1e-4
        return abs(rc) + lw / (E * mu * np.sqrt(n0 * n0 + n * n))

    rows = []
    for (wafer, device), g in df.groupby(["wafer", "device"], sort=False):
        vg = g["vg_V"].to_numpy()
        r = g["r_ohm"].to_numpy()
        rows.append(fit_device(model, wafer, device, g, vg, r, cg, lw))
    out = pd.DataFrame(rows)
    with sqlite3.connect(out_db) as con:
        out.to_sql("device", con, if_exists="replace", index=False)


def fit_device(model, wafer, device, g, vg, r, cg, lw):
    row = {"wafer": wafer, "device": device, "die_x": int(g["die_x"].iloc[0]),
           "die_y": int(g["die_y"].iloc[0]), "fit_class": "ok", "cnp_V": np.nan,
           "mobility_cm2_per_Vs": np.nan, "n0_per_cm2": np.nan, "r_contact_ohm": np.nan}
    if r.max() < 50:
        row["fit_class"] = "short"
        return row
    if r.max() >= 1e9:
        row["fit_class"] = "open"
        return row
    # start values: peak of a 5-point moving average, contact from the tails
    smooth = np.convolve(r, np.ones(5) / 5, mode="same")
    k = int(np.argmax(smooth[2:-2])) + 2
    vcnp0 = vg[k]
    rc0 = max(min(r[0], r[-1]) * 0.3, 1.0)
    mu0 = 2000.0
    n00 = lw / (E * mu0 * 1e-4 * max(smooth[k] - rc0, 1.0)) * 1e-4
    try:
        p, _ = curve_fit(model, vg, r, p0=[vcnp0, mu0, n00, rc0], sigma=r, maxfev=2000)
    except (RuntimeError, ValueError):
        row["fit_class"] = "no-convergence"
        return row
    if not (vg.min() <= p[0] <= vg.max()):
        row["fit_class"] = "cnp-outside-sweep"
        return row
    resid = (r - model(vg, *p)) / r
    if np.sqrt(np.mean(resid ** 2)) > 0.05:
        row["fit_class"] = "poor-fit"
        return row
    row.update(cnp_V=p[0], mobility_cm2_per_Vs=abs(p[1]), n0_per_cm2=abs(p[2]),
               r_contact_ohm=abs(p[3]))
    return row


if __name__ == "__main__":
    main()
