-- SPDX-License-Identifier: MIT
-- splitlot schema, version 2: what the sweep fit adds to a device, the model
-- it used and, for the two-mobility model, each carrier's own mobility;
-- the instrument spikes left out of the fit.
ALTER TABLE device ADD COLUMN fit_model TEXT;              -- 'symmetric', 'two-mobility'; NULL for results
ALTER TABLE device ADD COLUMN electron_mobility_cm2_per_Vs REAL;
ALTER TABLE device ADD COLUMN hole_mobility_cm2_per_Vs REAL;
ALTER TABLE device ADD COLUMN n_spikes INTEGER;
