-- Version 3: state changes are kept (who moved a part to which state, when, and why).
CREATE TABLE state_changes (
    id         INTEGER PRIMARY KEY,
    part_id    INTEGER NOT NULL REFERENCES parts(id) ON DELETE CASCADE,
    changed_at TEXT NOT NULL,
    old_state  TEXT,
    new_state  TEXT NOT NULL,
    reason     TEXT
);
CREATE INDEX state_changes_by_part ON state_changes(part_id);
