-- V3: an audit trail of taxonomy upkeep. `tally taxa rename` and `tally taxa
-- merge` change names and synonymy without rewriting any count; each change is
-- recorded here with its time and the reason given. Never edit this file once
-- released.

CREATE TABLE taxon_change (
    id         INTEGER PRIMARY KEY,
    kind       TEXT NOT NULL CHECK (kind IN ('rename', 'merge')),
    from_name  TEXT NOT NULL,
    to_name    TEXT NOT NULL,
    changed_at TEXT NOT NULL,
    reason     TEXT NOT NULL DEFAULT ''
) STRICT;
