-- Version 2: designs (as JSON) with the parts they consumed, and binnings.
CREATE TABLE designs (
    id          INTEGER PRIMARY KEY,
    created     TEXT NOT NULL,
    kind        TEXT NOT NULL DEFAULT '',
    design_json TEXT NOT NULL
);

CREATE TABLE design_parts (
    design_id INTEGER NOT NULL REFERENCES designs(id) ON DELETE CASCADE,
    part_id   INTEGER NOT NULL REFERENCES parts(id) ON DELETE RESTRICT,
    position  INTEGER NOT NULL,
    PRIMARY KEY (design_id, part_id)
);
CREATE INDEX design_parts_by_part ON design_parts(part_id);

CREATE TABLE binnings (
    id          INTEGER PRIMARY KEY,
    created     TEXT NOT NULL,
    scheme_json TEXT NOT NULL
);

CREATE TABLE bin_members (
    binning_id INTEGER NOT NULL REFERENCES binnings(id) ON DELETE CASCADE,
    part_id    INTEGER NOT NULL REFERENCES parts(id) ON DELETE CASCADE,
    bin        TEXT NOT NULL,
    PRIMARY KEY (binning_id, part_id)
);
