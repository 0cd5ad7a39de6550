-- V5: a Darwin Core archive is imported as one batch of its own kind ('dwca').
-- SQLite cannot widen a CHECK constraint, so import_batch is rebuilt with the
-- same rows and ids. Store::open runs migrations with foreign keys switched
-- off (the other tables refer to import_batch) and switches them back on
-- after; `tally check` lists any broken reference. Never edit this file once
-- released.

CREATE TABLE import_batch_v5 (
    id             INTEGER PRIMARY KEY,
    kind           TEXT NOT NULL CHECK (kind IN ('sites','protocols','taxa','events','counts','records','dwca')),
    file           TEXT NOT NULL,
    content_sha256 TEXT NOT NULL CHECK (length(content_sha256) = 64),
    imported_at    TEXT NOT NULL,
    rows           INTEGER NOT NULL CHECK (rows >= 0),
    created        TEXT NOT NULL DEFAULT '{}' CHECK (json_valid(created))
) STRICT;

INSERT INTO import_batch_v5 (id, kind, file, content_sha256, imported_at, rows, created)
    SELECT id, kind, file, content_sha256, imported_at, rows, created FROM import_batch;

DROP TABLE import_batch;

ALTER TABLE import_batch_v5 RENAME TO import_batch;
