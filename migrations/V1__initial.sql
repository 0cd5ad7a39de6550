-- V1: the survey store. Sites, protocols, taxa, sampling events, counts, import batches,
-- and stored analysis runs. Every table is STRICT; foreign keys are switched on by
-- Store::open on every connection. Never edit this file once released: add V2, V3, ...

CREATE TABLE import_batch (
    id             INTEGER PRIMARY KEY,
    kind           TEXT NOT NULL CHECK (kind IN ('sites','protocols','taxa','events','counts','records')),
    file           TEXT NOT NULL,
    content_sha256 TEXT NOT NULL CHECK (length(content_sha256) = 64),
    imported_at    TEXT NOT NULL,
    rows           INTEGER NOT NULL CHECK (rows >= 0),
    created        TEXT NOT NULL DEFAULT '{}' CHECK (json_valid(created))
) STRICT;

CREATE TABLE site (
    id              INTEGER PRIMARY KEY,
    code            TEXT NOT NULL UNIQUE CHECK (length(code) > 0),
    name            TEXT NOT NULL DEFAULT '',
    latitude        REAL CHECK (latitude IS NULL OR (latitude BETWEEN -90.0 AND 90.0)),
    longitude       REAL CHECK (longitude IS NULL OR (longitude BETWEEN -180.0 AND 180.0)),
    import_batch_id INTEGER REFERENCES import_batch(id)
) STRICT;

CREATE TABLE site_attribute (
    site_id INTEGER NOT NULL REFERENCES site(id) ON DELETE CASCADE,
    key     TEXT NOT NULL CHECK (length(key) > 0),
    value   TEXT NOT NULL,
    PRIMARY KEY (site_id, key)
) STRICT, WITHOUT ROWID;

CREATE INDEX site_attribute_key ON site_attribute(key, value);

CREATE TABLE protocol (
    id              INTEGER PRIMARY KEY,
    code            TEXT NOT NULL UNIQUE CHECK (length(code) > 0),
    description     TEXT NOT NULL DEFAULT '',
    effort_unit     TEXT NOT NULL CHECK (length(effort_unit) > 0),
    import_batch_id INTEGER REFERENCES import_batch(id)
) STRICT;

CREATE TABLE taxon (
    id              INTEGER PRIMARY KEY,
    name            TEXT NOT NULL UNIQUE CHECK (length(name) > 0),
    rank            TEXT NOT NULL DEFAULT '',
    parent_id       INTEGER REFERENCES taxon(id),
    accepted_id     INTEGER REFERENCES taxon(id) CHECK (accepted_id IS NULL OR accepted_id <> id),
    import_batch_id INTEGER REFERENCES import_batch(id)
) STRICT;

CREATE INDEX taxon_parent ON taxon(parent_id);
CREATE INDEX taxon_accepted ON taxon(accepted_id);

CREATE TABLE event (
    id              INTEGER PRIMARY KEY,
    code            TEXT NOT NULL UNIQUE CHECK (length(code) > 0),
    site_id         INTEGER NOT NULL REFERENCES site(id),
    date            TEXT NOT NULL CHECK (date(date, '+0 days') IS date),
    time            TEXT CHECK (time IS NULL OR time(time) IS NOT NULL),
    protocol_id     INTEGER NOT NULL REFERENCES protocol(id),
    effort          REAL NOT NULL CHECK (effort > 0.0 AND effort <= 1.0e300),
    replicate       INTEGER NOT NULL DEFAULT 1 CHECK (replicate >= 1),
    notes           TEXT NOT NULL DEFAULT '',
    import_batch_id INTEGER REFERENCES import_batch(id),
    UNIQUE (site_id, date, protocol_id, replicate)
) STRICT;

CREATE INDEX event_site_date ON event(site_id, date);
CREATE INDEX event_date ON event(date);

CREATE TABLE count (
    event_id        INTEGER NOT NULL REFERENCES event(id),
    taxon_id        INTEGER NOT NULL REFERENCES taxon(id),
    value           REAL NOT NULL CHECK (value >= 0.0 AND value <= 1.0e300),
    import_batch_id INTEGER REFERENCES import_batch(id),
    PRIMARY KEY (event_id, taxon_id)
) STRICT, WITHOUT ROWID;

CREATE INDEX count_taxon ON count(taxon_id, event_id);
CREATE INDEX count_batch ON count(import_batch_id);

CREATE TABLE run (
    id           INTEGER PRIMARY KEY,
    kind         TEXT NOT NULL,
    selection    TEXT NOT NULL CHECK (json_valid(selection)),
    parameters   TEXT NOT NULL CHECK (json_valid(parameters)),
    seed         INTEGER,
    fingerprint  TEXT NOT NULL,
    tool_version TEXT NOT NULL,
    created_at   TEXT NOT NULL,
    period_start TEXT,
    period_end   TEXT,
    result       TEXT NOT NULL CHECK (json_valid(result))
) STRICT;

CREATE INDEX run_kind ON run(kind, created_at);

CREATE TABLE run_value (
    run_id INTEGER NOT NULL REFERENCES run(id) ON DELETE CASCADE,
    name   TEXT NOT NULL,
    value  REAL,
    PRIMARY KEY (run_id, name)
) STRICT, WITHOUT ROWID;
