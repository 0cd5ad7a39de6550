-- V7: field codes for taxa.
--
-- Field sheets often carry short codes (BAERHO for Baetis rhodani) instead of
-- names. A code stands for one taxon; a taxon may have several codes. Codes
-- are stored in upper case and matched regardless of case, so the CHECK
-- admits two to six upper-case ASCII letters or digits only (the importer and
-- `tally taxa code` upper-case what they are given). That a code is not also
-- the name of a taxon (compared regardless of case) cannot be said in a
-- CHECK; the store refuses such a code, and such a name, with a message.
--
-- A code imported with a taxa file belongs to that batch (undoing the batch
-- removes it); a code added with `tally taxa code` has no batch. Deleting a
-- taxon deletes its codes.
--
-- Never edit this file once released.

CREATE TABLE taxon_code (
    code            TEXT PRIMARY KEY
                    CHECK (length(code) BETWEEN 2 AND 6 AND code NOT GLOB '*[^A-Z0-9]*'),
    taxon_id        INTEGER NOT NULL REFERENCES taxon(id) ON DELETE CASCADE,
    import_batch_id INTEGER REFERENCES import_batch(id)
) STRICT;

CREATE INDEX taxon_code_taxon ON taxon_code(taxon_id);
CREATE INDEX taxon_code_batch ON taxon_code(import_batch_id);
