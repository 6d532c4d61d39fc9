-- Version 5: measured thermal behaviour of a part, one row per measurement (the newest value of each quantity is
-- the part's; a quantity a measurement does not give is NULL there).
CREATE TABLE part_thermal (
    id                 INTEGER PRIMARY KEY,
    part_id            INTEGER NOT NULL REFERENCES parts(id) ON DELETE CASCADE,
    measurement        TEXT NOT NULL CHECK (measurement IN ('tempco', 'rth')),
    vth_tempco         REAL,
    vth_tempco_stderr  REAL,
    kp_exponent        REAL,
    kp_exponent_stderr REAL,
    ztc_vgs            REAL,
    ztc_vgs_stderr     REAL,
    ztc_id             REAL,
    ztc_id_stderr      REAL,
    rth                REAL,
    rth_stderr         REAL,
    session_path       TEXT,
    details_json       TEXT NOT NULL DEFAULT '{}',
    measured_at        TEXT NOT NULL
);
CREATE INDEX part_thermal_by_part ON part_thermal(part_id);
