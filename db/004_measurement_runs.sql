-- SPDX-License-Identifier: MIT
-- splitlot schema, version 4: the lot's measurement record. Each import is
-- one or more measurement runs (a step, a temperature, the plan revision it
-- was measured against, the file and its SHA-256); a device is an identity
-- (lot, wafer name, device name, die) that keeps every measurement it ever
-- had, one per run; the newest run of a step and temperature supersedes the
-- earlier ones for analysis, which stay listed. Existing lots keep every
-- device: their measurements become one run at the plan's first
-- temperature, step 'final', measured against the newest plan revision the
-- devices were stored under. Measurement and sweep rows keep the row ids of
-- the version 3 device rows, so a sweep blob stays with its measurement.

CREATE TABLE measurement_run (
    id            INTEGER PRIMARY KEY,
    lot_id        INTEGER NOT NULL REFERENCES lot(id),
    step          TEXT NOT NULL DEFAULT 'final' CHECK (length(step) > 0),
    temperature_K REAL NOT NULL CHECK (temperature_K > 0),
    revision_id   INTEGER NOT NULL REFERENCES plan_revision(id),
    kind          TEXT NOT NULL CHECK (kind IN ('results', 'sweeps')),
    source_name   TEXT NOT NULL,
    source_sha256 TEXT CHECK (source_sha256 IS NULL OR length(source_sha256) = 64),
                                   -- of the file's bytes; NULL for runs migrated from version 3
    rows          INTEGER NOT NULL,
    devices       INTEGER NOT NULL,
    created_utc   TEXT NOT NULL
);
CREATE INDEX measurement_run_by_view ON measurement_run(lot_id, step, temperature_K);

-- the runs of the version 3 lots (one per lot with devices)
INSERT INTO measurement_run (id, lot_id, step, temperature_K, revision_id, kind, source_name,
                             source_sha256, rows, devices, created_utc)
SELECT l.id, l.id, 'final',
       (SELECT p.temperature_K FROM prediction p JOIN split s ON s.id = p.split_id
        WHERE s.revision_id = (SELECT max(w.revision_id) FROM device d JOIN wafer w ON w.id = d.wafer_id
                               WHERE d.lot_id = l.id)
        ORDER BY p.rowid LIMIT 1),
       (SELECT max(w.revision_id) FROM device d JOIN wafer w ON w.id = d.wafer_id WHERE d.lot_id = l.id),
       CASE WHEN EXISTS (SELECT 1 FROM device d WHERE d.lot_id = l.id AND d.source = 'sweeps')
            THEN 'sweeps' ELSE 'results' END,
       coalesce((SELECT group_concat(i.source_name, '; ') FROM import i WHERE i.lot_id = l.id), ''),
       NULL,
       coalesce((SELECT sum(i.rows) FROM import i WHERE i.lot_id = l.id), 0),
       (SELECT count(*) FROM device d WHERE d.lot_id = l.id),
       coalesce((SELECT max(i.created_utc) FROM import i WHERE i.lot_id = l.id), l.created_utc)
FROM lot l WHERE EXISTS (SELECT 1 FROM device d WHERE d.lot_id = l.id);

ALTER TABLE device RENAME TO device_v3;
ALTER TABLE sweep RENAME TO sweep_v3;
DROP INDEX device_by_wafer;

-- A device of a lot: who it is and where it sits. Die coordinates are the
-- prober's (signed). Geometry is NULL where the plan's default applies.
CREATE TABLE device (
    id                INTEGER PRIMARY KEY,
    lot_id            INTEGER NOT NULL REFERENCES lot(id),
    wafer             TEXT NOT NULL,   -- wafer name, as in every plan revision of the lot
    name              TEXT NOT NULL,
    die_x             INTEGER NOT NULL,
    die_y             INTEGER NOT NULL,
    device_type       TEXT,
    channel_length_um REAL CHECK (channel_length_um IS NULL OR channel_length_um > 0),
    channel_width_um  REAL CHECK (channel_width_um IS NULL OR channel_width_um > 0),
    UNIQUE (lot_id, wafer, name)
);

INSERT INTO device (id, lot_id, wafer, name, die_x, die_y)
SELECT min(d.id), d.lot_id, w.name, d.name, d.die_x, d.die_y
FROM device_v3 d JOIN wafer w ON w.id = d.wafer_id
GROUP BY d.lot_id, w.name, d.name;

-- One measurement of a device in a run: what the file gave or the fit
-- found; numbers NULL where the extraction could not produce them
-- (fit_class says why).
CREATE TABLE measurement (
    id                           INTEGER PRIMARY KEY,
    device_id                    INTEGER NOT NULL REFERENCES device(id),
    run_id                       INTEGER NOT NULL REFERENCES measurement_run(id),
    source                       TEXT NOT NULL CHECK (source IN ('results', 'sweeps')),
    fit_class                    TEXT NOT NULL,
    fit_model                    TEXT,      -- 'symmetric', 'two-mobility'; NULL for results
    cnp_V                        REAL,
    cnp_sigma_V                  REAL,
    mobility_cm2_per_Vs          REAL,
    mobility_sigma_cm2_per_Vs    REAL,
    n0_per_cm2                   REAL,
    n0_sigma_per_cm2             REAL,
    r_contact_ohm                REAL,
    r_contact_sigma_ohm          REAL,
    rel_rms                      REAL,
    r_squared                    REAL,
    n_points                     INTEGER,
    electron_mobility_cm2_per_Vs REAL,
    hole_mobility_cm2_per_Vs     REAL,
    n_spikes                     INTEGER,
    hysteresis_V                 REAL,      -- V_cnp(reverse) - V_cnp(forward) of a double sweep
    points_dropped               INTEGER,   -- overflow and compliance points left out
    source_line                  INTEGER,   -- line of the device's first row in its file
    UNIQUE (run_id, device_id)
);
-- a device's measurements in run order: the newest of a view is found here
CREATE INDEX measurement_by_device ON measurement(device_id, run_id);

INSERT INTO measurement (id, device_id, run_id, source, fit_class, fit_model, cnp_V, cnp_sigma_V,
                         mobility_cm2_per_Vs, mobility_sigma_cm2_per_Vs, n0_per_cm2,
                         n0_sigma_per_cm2, r_contact_ohm, r_contact_sigma_ohm, rel_rms, r_squared,
                         n_points, electron_mobility_cm2_per_Vs, hole_mobility_cm2_per_Vs,
                         n_spikes, source_line)
SELECT d.id, n.id, d.lot_id, d.source, d.fit_class, d.fit_model, d.cnp_V, d.cnp_sigma_V,
       d.mobility_cm2_per_Vs, d.mobility_sigma_cm2_per_Vs, d.n0_per_cm2, d.n0_sigma_per_cm2,
       d.r_contact_ohm, d.r_contact_sigma_ohm, d.rel_rms, d.r_squared, d.n_points,
       d.electron_mobility_cm2_per_Vs, d.hole_mobility_cm2_per_Vs, d.n_spikes, d.source_line
FROM device_v3 d JOIN wafer w ON w.id = d.wafer_id
JOIN device n ON n.lot_id = d.lot_id AND n.wafer = w.name AND n.name = d.name;

-- Raw sweep of a measurement (the packed blob of src/store_sweep.c), so any
-- device can be fitted again later.
CREATE TABLE sweep (
    measurement_id INTEGER PRIMARY KEY REFERENCES measurement(id) ON DELETE CASCADE,
    n_points       INTEGER NOT NULL,
    points         BLOB NOT NULL
);
INSERT INTO sweep (measurement_id, n_points, points)
SELECT device_id, n_points, points FROM sweep_v3;

DROP TABLE sweep_v3;
DROP TABLE device_v3;
DROP TABLE import;  -- its rows live on in the runs above

-- What the analysis reads of a revision besides the predictions: each
-- split's factor levels (';'-joined, in the plan's factor order) and, for
-- steps processed in loads, the load of each wafer.
ALTER TABLE split ADD COLUMN levels TEXT;
CREATE TABLE wafer_load (
    wafer_id INTEGER NOT NULL REFERENCES wafer(id),
    step     TEXT NOT NULL,
    load     INTEGER NOT NULL CHECK (load >= 1),
    PRIMARY KEY (wafer_id, step)
);

-- Every measurement with its run; current = 1 for the newest measurement of
-- its device among the runs of the same step and temperature (a re-probe
-- supersedes the earlier run, which stays listed with current = 0).
CREATE VIEW measurement_view AS
SELECT m.*, r.lot_id, r.step, r.temperature_K, r.revision_id,
       m.run_id = (SELECT max(m2.run_id) FROM measurement m2
                   JOIN measurement_run r2 ON r2.id = m2.run_id
                   WHERE m2.device_id = m.device_id AND r2.step = r.step
                     AND r2.temperature_K = r.temperature_K) AS current
FROM measurement m JOIN measurement_run r ON r.id = m.run_id;
