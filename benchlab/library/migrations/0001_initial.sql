-- Version 1: lots, parts, sweeps (with their raw points) and fits.
CREATE TABLE lots (
    id          INTEGER PRIMARY KEY,
    name        TEXT NOT NULL UNIQUE,
    description TEXT NOT NULL DEFAULT '',
    created     TEXT NOT NULL
);

CREATE TABLE parts (
    id             INTEGER PRIMARY KEY,
    lot_id         INTEGER NOT NULL REFERENCES lots(id) ON DELETE RESTRICT,
    label          TEXT NOT NULL,
    polarity       TEXT NOT NULL DEFAULT 'N' CHECK (polarity IN ('N', 'P')),
    package        TEXT NOT NULL DEFAULT '',
    notes          TEXT NOT NULL DEFAULT '',
    state          TEXT NOT NULL DEFAULT 'in_stock'
                   CHECK (state IN ('in_stock', 'reserved', 'used', 'rejected')),
    reason         TEXT,
    classification TEXT,
    created        TEXT NOT NULL,
    UNIQUE (lot_id, label)
);
CREATE INDEX parts_by_label ON parts(label);

CREATE TABLE sweeps (
    id             INTEGER PRIMARY KEY,
    part_id        INTEGER NOT NULL REFERENCES parts(id) ON DELETE CASCADE,
    session_path   TEXT,
    csv_path       TEXT,
    session_id     TEXT,
    started        TEXT,
    complete       INTEGER NOT NULL DEFAULT 1,
    classification TEXT,
    reason         TEXT,
    sidecar_json   TEXT NOT NULL DEFAULT '{}',
    imported       TEXT NOT NULL
);
CREATE INDEX sweeps_by_part ON sweeps(part_id);

CREATE TABLE sweep_points (
    sweep_id INTEGER NOT NULL REFERENCES sweeps(id) ON DELETE CASCADE,
    point    INTEGER NOT NULL,
    vgs      REAL,
    id       REAL,
    status   TEXT NOT NULL DEFAULT 'ok',
    PRIMARY KEY (sweep_id, point)
) WITHOUT ROWID;

CREATE TABLE fits (
    id             INTEGER PRIMARY KEY,
    part_id        INTEGER NOT NULL REFERENCES parts(id) ON DELETE CASCADE,
    sweep_id       INTEGER REFERENCES sweeps(id) ON DELETE SET NULL,
    source         TEXT NOT NULL CHECK (source IN ('fit', 'hand', 'imported')),
    model          TEXT NOT NULL,
    params_json    TEXT NOT NULL,
    stderr_json    TEXT NOT NULL DEFAULT '{}',
    flags_json     TEXT NOT NULL DEFAULT '[]',
    result_json    TEXT NOT NULL DEFAULT '{}',
    fitted_at      TEXT NOT NULL,
    fitter_version TEXT
);
CREATE INDEX fits_by_part ON fits(part_id);
