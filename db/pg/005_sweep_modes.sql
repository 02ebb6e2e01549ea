-- SPDX-License-Identifier: MIT
-- splitlot schema, version 5, in PostgreSQL's dialect (db/005_sweep_modes.sql):
-- no table changes. A sweep blob may now hold its gate voltages by even steps
-- and its resistance column as the drain currents of the file it came from,
-- which builds before this version cannot read; the version number makes
-- them refuse the database as newer.
COMMENT ON COLUMN sweep.points IS
    'packed sweep (src/store_sweep.c): raw, decimal, even-step or quotient columns; the last two from schema version 5';
