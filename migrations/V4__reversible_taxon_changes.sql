-- V4: taxonomy changes that can be reversed. `tally taxa move` (a new parent)
-- and `tally taxa undo` (the reversal of an earlier change) are new kinds of
-- change; SQLite cannot widen a CHECK constraint, so taxon_change is rebuilt
-- with the same rows and ids, plus `undoes` (the change an undo reverses).
-- taxon_change_effect records, for every taxon a change touched, its name,
-- parent and accepted name before and after, which is what `taxa undo` puts
-- back. Changes recorded before V4 have no effects and cannot be undone.
-- Never edit this file once released.

CREATE TABLE taxon_change_v4 (
    id         INTEGER PRIMARY KEY,
    kind       TEXT NOT NULL CHECK (kind IN ('rename', 'merge', 'move', 'undo')),
    from_name  TEXT NOT NULL,
    to_name    TEXT NOT NULL,
    changed_at TEXT NOT NULL,
    reason     TEXT NOT NULL DEFAULT '',
    undoes     INTEGER UNIQUE REFERENCES taxon_change_v4(id),
    CHECK ((kind = 'undo') = (undoes IS NOT NULL))
) STRICT;

INSERT INTO taxon_change_v4 (id, kind, from_name, to_name, changed_at, reason)
    SELECT id, kind, from_name, to_name, changed_at, reason FROM taxon_change;

DROP TABLE taxon_change;

ALTER TABLE taxon_change_v4 RENAME TO taxon_change;

-- Taxon ids carry no foreign key: the history of a taxon outlives the import
-- batch that created it (`batches undo`); `taxa undo` checks that every taxon
-- it would touch still holds the values the change left.
CREATE TABLE taxon_change_effect (
    change_id       INTEGER NOT NULL REFERENCES taxon_change(id),
    taxon_id        INTEGER NOT NULL,
    name_before     TEXT NOT NULL,
    name_after      TEXT NOT NULL,
    parent_before   INTEGER,
    parent_after    INTEGER,
    accepted_before INTEGER,
    accepted_after  INTEGER,
    PRIMARY KEY (change_id, taxon_id)
) STRICT, WITHOUT ROWID;
