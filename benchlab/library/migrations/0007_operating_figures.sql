-- Version 7: operating figures stored with each fit (VGS at the 250 uA reference current; gm at an operating
-- current, and that current), each part's own operating current (NULL: the library's default), and the library's
-- settings (the default operating current). NULL where a figure was not computed, never a placeholder 0.
ALTER TABLE parts ADD COLUMN operating_current REAL;
ALTER TABLE fits ADD COLUMN vgs_ref REAL;
ALTER TABLE fits ADD COLUMN gm_op REAL;
ALTER TABLE fits ADD COLUMN gm_current REAL;
CREATE TABLE settings (
    name  TEXT PRIMARY KEY,
    value REAL NOT NULL
);
