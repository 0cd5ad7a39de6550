-- V2: saved selections. A name stands for a JSON selection definition (the
-- serialised store::query::Selection); `--selection NAME` loads it and explicit
-- flags override its fields. Never edit this file once released.

CREATE TABLE saved_selection (
    name       TEXT PRIMARY KEY CHECK (length(name) > 0),
    definition TEXT NOT NULL CHECK (json_valid(definition)),
    created_at TEXT NOT NULL,
    updated_at TEXT NOT NULL
) STRICT;
