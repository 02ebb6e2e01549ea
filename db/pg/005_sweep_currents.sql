-- SPDX-License-Identifier: MIT
-- splitlot schema, version 5, in PostgreSQL's dialect (db/005_sweep_currents.sql):
-- no table changes. A sweep blob may now hold its resistance column as the
-- drain currents of the file it came from, which builds before this version
-- cannot read; the version number makes them refuse the database as newer.
COMMENT ON COLUMN sweep.points IS
    'packed sweep (src/store_sweep.c): raw, decimal or quotient columns; quotient columns from schema version 5';
