-- V6: sites that change over time.
--
-- A site attribute value now holds from a date (`valid_from`, ISO 8601; the
-- empty text means "since always") until the next value of the same key.
-- Every value stored before V6 becomes a "since always" value. Values carry
-- the import batch that brought them (NULL for values of a sites file, which
-- go with their site, and for values set by `tally sites set`).
--
-- import_batch gains the kind 'attributes' (a file of attribute histories);
-- SQLite cannot widen a CHECK constraint, so it is rebuilt with the same rows
-- and ids, as in V5. Store::open runs migrations with foreign keys off.
--
-- site_change is the audit trail of corrections made with `tally sites set`
-- and `tally sites undo`: every change records what it replaced, so an undo
-- can put it back. Runs record the site attributes in force on their rows
-- (`run.attributes`, a JSON object key -> SHA-256) so that `runs verify`
-- notices a later change of history.
--
-- Never edit this file once released.

CREATE TABLE import_batch_v6 (
    id             INTEGER PRIMARY KEY,
    kind           TEXT NOT NULL CHECK (kind IN ('sites','protocols','taxa','events','counts','records','dwca','attributes')),
    file           TEXT NOT NULL,
    content_sha256 TEXT NOT NULL CHECK (length(content_sha256) = 64),
    imported_at    TEXT NOT NULL,
    rows           INTEGER NOT NULL CHECK (rows >= 0),
    created        TEXT NOT NULL DEFAULT '{}' CHECK (json_valid(created))
) STRICT;

INSERT INTO import_batch_v6 (id, kind, file, content_sha256, imported_at, rows, created)
    SELECT id, kind, file, content_sha256, imported_at, rows, created FROM import_batch;

DROP TABLE import_batch;

ALTER TABLE import_batch_v6 RENAME TO import_batch;

CREATE TABLE site_attribute_v6 (
    site_id         INTEGER NOT NULL REFERENCES site(id) ON DELETE CASCADE,
    key             TEXT NOT NULL CHECK (length(key) > 0),
    valid_from      TEXT NOT NULL DEFAULT '' CHECK (valid_from = '' OR date(valid_from, '+0 days') IS valid_from),
    value           TEXT NOT NULL,
    import_batch_id INTEGER REFERENCES import_batch(id),
    PRIMARY KEY (site_id, key, valid_from)
) STRICT, WITHOUT ROWID;

INSERT INTO site_attribute_v6 (site_id, key, valid_from, value)
    SELECT site_id, key, '', value FROM site_attribute;

DROP TABLE site_attribute;

ALTER TABLE site_attribute_v6 RENAME TO site_attribute;

CREATE INDEX site_attribute_key ON site_attribute(key, value);
CREATE INDEX site_attribute_batch ON site_attribute(import_batch_id);

-- One correction of a site. `field` is 'name', 'coordinates' or 'attribute'
-- (then `key` and `valid_from` name the value). `before` and `after` are JSON:
-- the value replaced and the value set (null when there was none, or when the
-- change removed it). An undo is a change of its own that names the change it
-- reverses (`undoes`).
CREATE TABLE site_change (
    id         INTEGER PRIMARY KEY,
    site_code  TEXT NOT NULL,
    field      TEXT NOT NULL CHECK (field IN ('name', 'coordinates', 'attribute')),
    key        TEXT NOT NULL DEFAULT '',
    valid_from TEXT NOT NULL DEFAULT '',
    before     TEXT NOT NULL CHECK (json_valid(before)),
    after      TEXT NOT NULL CHECK (json_valid(after)),
    changed_at TEXT NOT NULL,
    reason     TEXT NOT NULL CHECK (length(reason) > 0),
    undoes     INTEGER UNIQUE REFERENCES site_change(id)
) STRICT;

ALTER TABLE run ADD COLUMN attributes TEXT CHECK (attributes IS NULL OR json_valid(attributes));
