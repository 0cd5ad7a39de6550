//! Darwin Core archives of sampling-event data, in and out.
//!
//! A Darwin Core archive is a zip file holding delimited text files and a
//! `meta.xml` that declares each file's delimiters, header lines and columns
//! (each column by the URI of its term), plus a metadata document (`eml.xml`).
//! Sampling-event data has an Event core (one row per sampling event, with its
//! effort) and an Occurrence extension (one row per taxon counted in an event),
//! linked by the core's id, `eventID`. References: the Darwin Core text guide
//! (TDWG, <https://dwc.tdwg.org/text/>) and its schema `tdwg_dwc_text.xsd`
//! (the defaults of `meta.xml` attributes), the Darwin Core term list
//! (<https://dwc.tdwg.org/terms/>).
//!
//! - [`meta`]: `meta.xml` read and written;
//! - [`read`]: an archive read into [`crate::store::exchange::ArchiveData`],
//!   every problem named by file, line and term;
//! - [`write`]: a store selection written as an archive, one event at a time;
//! - [`eml`]: the dataset metadata document.
//!
//! How every term maps to the store, both ways, is in `docs/data-model.md`
//! ("Darwin Core archives").

pub mod eml;
pub mod meta;
pub mod read;
pub mod write;

/// The namespace of Darwin Core terms.
pub const DWC: &str = "http://rs.tdwg.org/dwc/terms/";

/// The row type of an Event core.
pub const EVENT: &str = "http://rs.tdwg.org/dwc/terms/Event";

/// The row type of an Occurrence extension (or core).
pub const OCCURRENCE: &str = "http://rs.tdwg.org/dwc/terms/Occurrence";

/// The Darwin Core term named by `uri` (its local name), when `uri` is in
/// the Darwin Core namespace (`http` or `https`).
pub fn dwc_term(uri: &str) -> Option<&str> {
    let uri = uri.trim();
    uri.strip_prefix(DWC)
        .or_else(|| uri.strip_prefix("https://rs.tdwg.org/dwc/terms/"))
        .filter(|t| !t.is_empty() && !t.contains('/'))
}

/// The Darwin Core ranks of the higher-classification columns, from the top.
pub const HIGHER_RANKS: [&str; 6] = ["kingdom", "phylum", "class", "order", "family", "genus"];

/// The columns of the event file tally writes, in order.
pub const EVENT_TERMS: [&str; 14] = [
    "eventID",
    "eventDate",
    "eventTime",
    "locationID",
    "locality",
    "decimalLatitude",
    "decimalLongitude",
    "geodeticDatum",
    "samplingProtocol",
    "sampleSizeValue",
    "sampleSizeUnit",
    "samplingEffort",
    "eventRemarks",
    "dynamicProperties",
];

/// The columns of the occurrence file tally writes, in order (the first,
/// `eventID`, is the link to the core).
pub const OCCURRENCE_TERMS: [&str; 16] = [
    "eventID",
    "occurrenceID",
    "basisOfRecord",
    "scientificName",
    "taxonRank",
    "kingdom",
    "phylum",
    "class",
    "order",
    "family",
    "genus",
    "individualCount",
    "organismQuantity",
    "organismQuantityType",
    "occurrenceStatus",
    "verbatimIdentification",
];

/// Terms tally writes but does not store on import: an export makes them
/// again from the events, the taxa and its options.
pub const NOT_STORED: [&str; 4] = [
    "samplingEffort",
    "occurrenceID",
    "basisOfRecord",
    "verbatimIdentification",
];

/// The value of `organismQuantityType` for counts of individuals.
pub const INDIVIDUALS: &str = "individuals";
