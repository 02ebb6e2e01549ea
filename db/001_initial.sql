-- SPDX-License-Identifier: MIT
-- splitlot schema, version 1. Compiled into the binary; applied in one
-- transaction by the store when PRAGMA user_version is below 1.
-- Units are in the column names, as everywhere in splitlot.

CREATE TABLE lot (
    id          INTEGER PRIMARY KEY,
    name        TEXT NOT NULL UNIQUE,
    created_utc TEXT NOT NULL
);

-- Every distinct plan text of a lot is a revision; the newest one is used.
CREATE TABLE plan_revision (
    id          INTEGER PRIMARY KEY,
    lot_id      INTEGER NOT NULL REFERENCES lot(id),
    revision    INTEGER NOT NULL,
    plan_hash   TEXT NOT NULL,
    plan_text   TEXT NOT NULL,
    plan_name   TEXT NOT NULL,
    created_utc TEXT NOT NULL,
    UNIQUE (lot_id, revision),
    UNIQUE (lot_id, plan_hash)
);

CREATE TABLE split (
    id                           INTEGER PRIMARY KEY,
    revision_id                  INTEGER NOT NULL REFERENCES plan_revision(id),
    split_index                  INTEGER NOT NULL,
    name                         TEXT NOT NULL,
    dielectric                   TEXT NOT NULL,
    treatments                   TEXT NOT NULL,  -- ';'-joined treatment names
    planned_doping_per_cm2       REAL NOT NULL,
    planned_doping_sigma_per_cm2 REAL NOT NULL,
    devices_needed               INTEGER NOT NULL,
    devices_available            REAL NOT NULL,
    UNIQUE (revision_id, name),
    UNIQUE (revision_id, split_index)
);

CREATE TABLE wafer (
    id            INTEGER PRIMARY KEY,
    revision_id   INTEGER NOT NULL REFERENCES plan_revision(id),
    name          TEXT NOT NULL,
    split_id      INTEGER REFERENCES split(id),  -- NULL: spare wafer
    process_order INTEGER,
    UNIQUE (revision_id, name)
);

CREATE TABLE prediction (
    split_id                      INTEGER NOT NULL REFERENCES split(id),
    temperature_K                 REAL NOT NULL,
    gate_capacitance_nF_per_cm2   REAL NOT NULL,
    eot_nm                        REAL NOT NULL,
    doping_per_cm2                REAL NOT NULL,
    doping_sigma_per_cm2          REAL NOT NULL,
    cnp_V                         REAL NOT NULL,
    cnp_sigma_V                   REAL NOT NULL,
    gate_min_V                    REAL NOT NULL,
    gate_max_V                    REAL NOT NULL,
    max_electron_density_per_cm2  REAL NOT NULL,
    max_hole_density_per_cm2      REAL NOT NULL,
    fermi_at_gate_min_eV          REAL NOT NULL,
    fermi_at_gate_max_eV          REAL NOT NULL,
    gate_efficiency_per_cm2_V     REAL NOT NULL,
    thermal_floor_per_cm2         REAL NOT NULL,
    thermal_floor_V               REAL NOT NULL,
    disorder_crossover_K          REAL NOT NULL,
    cnp_in_range                  INTEGER NOT NULL,
    PRIMARY KEY (split_id, temperature_K)
);

-- One row per measured device of a lot; numbers are NULL where the
-- extraction could not produce them (fit_class says why).
CREATE TABLE device (
    id                         INTEGER PRIMARY KEY,
    lot_id                     INTEGER NOT NULL REFERENCES lot(id),
    wafer_id                   INTEGER NOT NULL REFERENCES wafer(id),
    name                       TEXT NOT NULL,
    die_x                      INTEGER NOT NULL,
    die_y                      INTEGER NOT NULL,
    source                     TEXT NOT NULL CHECK (source IN ('results', 'sweeps')),
    fit_class                  TEXT NOT NULL,
    temperature_K              REAL,
    cnp_V                      REAL,
    cnp_sigma_V                REAL,
    mobility_cm2_per_Vs        REAL,
    mobility_sigma_cm2_per_Vs  REAL,
    n0_per_cm2                 REAL,
    n0_sigma_per_cm2           REAL,
    r_contact_ohm              REAL,
    r_contact_sigma_ohm        REAL,
    rel_rms                    REAL,
    r_squared                  REAL,
    n_points                   INTEGER,
    UNIQUE (lot_id, wafer_id, name)
);
CREATE INDEX device_by_wafer ON device(wafer_id);

-- Raw sweep of a device: n_points pairs (vg_V, r_ohm) as little-endian IEEE
-- 754 doubles, so any device can be fitted again later.
CREATE TABLE sweep (
    device_id INTEGER PRIMARY KEY REFERENCES device(id) ON DELETE CASCADE,
    n_points  INTEGER NOT NULL,
    points    BLOB NOT NULL
);

-- One row per successful import, for the record.
CREATE TABLE import (
    id          INTEGER PRIMARY KEY,
    lot_id      INTEGER NOT NULL REFERENCES lot(id),
    kind        TEXT NOT NULL CHECK (kind IN ('results', 'sweeps')),
    source_name TEXT NOT NULL,
    rows        INTEGER NOT NULL,
    devices     INTEGER NOT NULL,
    created_utc TEXT NOT NULL
);
