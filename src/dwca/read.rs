//! A Darwin Core archive of sampling events read into
//! [`ArchiveData`](crate::store::exchange::ArchiveData), checked for its own
//! form before the store is touched.
//!
//! The files are read as `meta.xml` declares them (Darwin Core text guide):
//! the fields' order and delimiters, `ignoreHeaderLines`, enclosing quotes,
//! `default` values (for a field without a column, or an empty cell), UTF-8.
//! The core must be an Event core and one extension an Occurrence extension;
//! other extensions are not read (the import says so). Every problem is named
//! by file, line and term, and all are collected before refusing.
//!
//! Rules that are choices of tally (documented in `docs/data-model.md`):
//! - an event is one day: `eventDate` is a date, a date and time, or a range
//!   within one day; a time zone is not stored;
//! - a core row that is the parent (`parentEventID`) of other rows and has no
//!   occurrence of its own is a grouping row, not a sampling event: it is not
//!   stored (and the import says how many);
//! - a count is `individualCount`, or `organismQuantity` when
//!   `organismQuantityType` is individuals; both given must agree; an absent
//!   occurrence is a zero of a complete census and stores nothing;
//! - occurrences of one taxon in one event (life stages or sexes apart) are
//!   added up into one count (the import says how many were);
//! - the place is `locationID`, or else the locality and coordinates.

use std::collections::{BTreeMap, BTreeSet, HashMap, HashSet};
use std::io::{Cursor, Read};
use std::path::Path;

use sha2::{Digest, Sha256};

use super::meta::{self, FileSpec, Meta};
use super::{EVENT_TERMS, HIGHER_RANKS, NOT_STORED, OCCURRENCE_TERMS, dwc_term};
use crate::matrix::assemble::AttributeValue;
use crate::store::exchange::{
    ArchiveCount, ArchiveData, ArchiveEvent, ArchiveProtocol, ArchiveSite, ArchiveTaxon, History,
};
use crate::store::import::{
    MAX_REPORTED_ISSUES, parse_coordinate, parse_count, parse_date, parse_effort, parse_time,
};
use crate::store::sheet::{FieldKind, Issues, clean_field};
use crate::store::taxa::integrity::rank_level;
use crate::store::{Result, StoreError};

/// The largest file inside an archive that is read (decompressed).
pub const MAX_PART_BYTES: u64 = 2 << 30;

/// What reading found besides the data: what was not read, and choices made.
#[derive(Debug, Clone, Default, PartialEq, serde::Serialize)]
pub struct ReadNotes {
    /// Terms of the files that tally does not store, as `file: term` (each once).
    pub terms_not_stored: Vec<String>,
    /// Row types of extensions that were not read.
    pub extensions_not_read: Vec<String>,
    /// Absent occurrences (zeros of a complete census; nothing stored).
    pub absences: usize,
    /// Occurrences added to an earlier one of the same event and taxon.
    pub merged: usize,
    /// Core rows that only group other events (no occurrence of their own).
    pub grouping_rows: usize,
}

/// True when the import stores the Darwin Core term `term` of a core
/// (`event`) or an occurrence file: the terms tally writes
/// ([`EVENT_TERMS`], [`OCCURRENCE_TERMS`]) except those an export makes again
/// from what is stored ([`NOT_STORED`]), and `parentEventID`, which marks
/// grouping rows.
fn is_read(term: &str, event: bool) -> bool {
    let written = if event {
        &EVENT_TERMS[..]
    } else {
        &OCCURRENCE_TERMS[..]
    };
    (written.contains(&term) && !NOT_STORED.contains(&term)) || (event && term == "parentEventID")
}

/// Read the archive at `path`.
///
/// # Errors
/// [`StoreError::Io`] when the file cannot be read; as [`read_bytes`].
pub fn read_path(path: &Path) -> Result<(ArchiveData, ReadNotes)> {
    let file = path.display().to_string();
    let bytes = std::fs::read(path).map_err(|source| StoreError::Io {
        file: file.clone(),
        source,
    })?;
    read_bytes(&file, &bytes)
}

/// One table's rows: line and fields.
struct Table {
    part: String,
    spec: FileSpec,
    rows: Vec<(u64, csv::StringRecord)>,
}

impl Table {
    /// The value of term `name` in `rec`: its cell (trimmed), or the field's
    /// default when the cell is empty or the field has no column.
    fn get<'a>(&'a self, rec: &'a csv::StringRecord, name: &str) -> &'a str {
        let Some(f) = self.spec.field(name) else {
            return "";
        };
        let cell = f.index.and_then(|i| rec.get(i)).map_or("", str::trim);
        if cell.is_empty() {
            f.default.as_deref().map_or("", str::trim)
        } else {
            cell
        }
    }

    /// The row's id (`<id>` or `<coreid>` column), or its `eventID`.
    fn id<'a>(&'a self, rec: &'a csv::StringRecord) -> &'a str {
        match self.spec.id_index {
            Some(i) => rec.get(i).map_or("", str::trim),
            None => self.get(rec, "eventID"),
        }
    }
}

fn invalid(file: &str, issues: Issues) -> StoreError {
    let (issues, total) = issues.first(MAX_REPORTED_ISSUES);
    StoreError::Invalid {
        file: file.to_string(),
        issues,
        total,
    }
}

/// Read the archive `bytes`, the content of a file called `file`.
///
/// # Errors
/// [`StoreError::Invalid`] with every problem found (by file, line and term):
/// not a zip archive, no or a broken `meta.xml`, not an Event core with an
/// Occurrence extension, unreadable text, values that cannot be mapped.
pub fn read_bytes(file: &str, bytes: &[u8]) -> Result<(ArchiveData, ReadNotes)> {
    let mut issues = Issues::default();
    let mut zip = match zip::ZipArchive::new(Cursor::new(bytes)) {
        Ok(z) => z,
        Err(e) => {
            issues.push(
                0,
                "",
                format!("not a readable zip archive ({e}); a Darwin Core archive is a zip file holding meta.xml and the data files"),
            );
            return Err(invalid(file, issues));
        }
    };
    // meta.xml at the top, or in the one folder everything is in.
    let meta_name = zip
        .file_names()
        .filter_map(std::result::Result::ok)
        .map(|n| n.to_string())
        .filter(|n| n == "meta.xml" || n.ends_with("/meta.xml"))
        .min_by_key(|n| n.matches('/').count());
    let Some(meta_name) = meta_name else {
        issues.push(
            0,
            "",
            "the archive holds no meta.xml; tally reads archives whose meta.xml declares an Event core and an Occurrence extension",
        );
        return Err(invalid(file, issues));
    };
    let base = meta_name.strip_suffix("meta.xml").unwrap_or("").to_string();
    let meta_text = match read_part(&mut zip, &meta_name) {
        Ok(b) => match String::from_utf8(b) {
            Ok(t) => t,
            Err(_) => {
                issues.push_in("meta.xml", 0, "", "not UTF-8 text");
                return Err(invalid(file, issues));
            }
        },
        Err(m) => {
            issues.push_in("meta.xml", 0, "", m);
            return Err(invalid(file, issues));
        }
    };
    let meta: Meta = match meta::parse(&meta_text) {
        Ok(m) => m,
        Err(m) => {
            issues.push_in("meta.xml", 0, "", m);
            return Err(invalid(file, issues));
        }
    };
    let core_type = dwc_term(&meta.core.row_type);
    if core_type != Some("Event") {
        let what = if core_type == Some("Occurrence") {
            "an occurrence-only dataset (Occurrence core): it says where taxa were seen, \
             not the sampling events and their effort that tally compares; ask for the \
             sampling-event archive (Event core with an Occurrence extension)"
                .to_string()
        } else {
            format!(
                "the core's rowType is {}; tally reads sampling-event archives (core rowType http://rs.tdwg.org/dwc/terms/Event)",
                meta.core.row_type
            )
        };
        issues.push_in("meta.xml", 0, "rowType", what);
        return Err(invalid(file, issues));
    }
    let mut notes = ReadNotes::default();
    let mut occurrence_spec = None;
    for x in &meta.extensions {
        if dwc_term(&x.row_type) == Some("Occurrence") && occurrence_spec.is_none() {
            occurrence_spec = Some(x.clone());
        } else {
            notes.extensions_not_read.push(x.row_type.clone());
        }
    }
    let Some(occurrence_spec) = occurrence_spec else {
        issues.push_in(
            "meta.xml",
            0,
            "rowType",
            "the archive has no Occurrence extension: its events carry no counts",
        );
        return Err(invalid(file, issues));
    };
    let mut core = Table {
        part: meta.core.locations.join(", "),
        spec: meta.core.clone(),
        rows: Vec::new(),
    };
    let mut occ = Table {
        part: occurrence_spec.locations.join(", "),
        spec: occurrence_spec,
        rows: Vec::new(),
    };
    // Defaults declared in meta.xml are read by the same rule as cells.
    for spec in [&mut core.spec, &mut occ.spec] {
        for f in &mut spec.fields {
            if let Some(d) = &f.default {
                match clean_field(d, FieldKind::Notes) {
                    Ok(v) => f.default = Some(v.into_owned()),
                    Err(m) => issues.push_in(
                        "meta.xml",
                        0,
                        dwc_term(&f.term).unwrap_or(&f.term),
                        format!("default {m}"),
                    ),
                }
            }
        }
    }
    let core_format = format_of(&core.spec, &mut issues);
    let occ_format = format_of(&occ.spec, &mut issues);
    let (Some(core_format), Some(occ_format)) = (core_format, occ_format) else {
        return Err(invalid(file, issues));
    };
    for (table, event) in [(&core, true), (&occ, false)] {
        for f in &table.spec.fields {
            let term = dwc_term(&f.term).unwrap_or(&f.term);
            let label = format!("{}: {term}", table.part);
            if !is_read(term, event) && !notes.terms_not_stored.contains(&label) {
                notes.terms_not_stored.push(label);
            }
        }
    }
    for (table, needed) in [
        (
            &core,
            &[
                "eventDate",
                "samplingProtocol",
                "sampleSizeValue",
                "sampleSizeUnit",
            ][..],
        ),
        (&occ, &["scientificName"][..]),
    ] {
        for term in needed {
            if table.spec.field(term).is_none() {
                issues.push_in(
                    "meta.xml",
                    0,
                    term,
                    format!(
                        "{} declares no field for {term}; tally needs it for every {}",
                        table.part,
                        if table.part == core.part {
                            "event"
                        } else {
                            "occurrence"
                        }
                    ),
                );
            }
        }
    }
    if core.spec.id_index.is_none() && core.spec.field("eventID").is_none() {
        issues.push_in(
            "meta.xml",
            0,
            "eventID",
            "the core declares neither <id> nor eventID",
        );
    }
    if occ.spec.id_index.is_none() {
        issues.push_in(
            "meta.xml",
            0,
            "coreid",
            "the Occurrence extension declares no <coreid> linking it to the events",
        );
    }
    if !issues.is_empty() {
        return Err(invalid(file, issues));
    }
    // The core whole (its rows are few); the occurrences one at a time.
    let mut rows = Vec::new();
    if !read_rows(
        &mut zip,
        &base,
        &core.spec,
        core_format,
        &mut issues,
        |line, rec, _| rows.push((line, rec.clone())),
    ) {
        return Err(invalid(file, issues));
    }
    core.rows = rows;
    let mut data = ArchiveData {
        file: file.to_string(),
        sha256: crate::store::import::hex(&Sha256::digest(bytes)),
        event_part: core.part.clone(),
        occurrence_part: occ.part.clone(),
        ..ArchiveData::default()
    };
    let (core_row, parents) = core_ids(&core, &mut issues);
    let mut counting = Occurrences::new(core.rows.len());
    let mut occurrence_rows = 0;
    let read = read_rows(
        &mut zip,
        &base,
        &occ.spec,
        occ_format,
        &mut issues,
        |line, rec, issues| {
            occurrence_rows += 1;
            counting.row(
                &core, &occ, &core_row, line, rec, &mut data, &mut notes, issues,
            );
        },
    );
    data.rows = core.rows.len() + occurrence_rows;
    if read {
        let event_of = events(
            &core,
            &core_row,
            &parents,
            &counting.has_occurrence,
            &mut data,
            &mut notes,
            &mut issues,
        );
        data.counts = counting
            .counts
            .into_iter()
            .filter_map(|mut c| {
                c.event = event_of[c.event]?;
                Some(c)
            })
            .collect();
    }
    if issues.is_empty() {
        Ok((data, notes))
    } else {
        Err(invalid(file, issues))
    }
}

/// The text of `name` inside the archive as a stream, without a leading
/// byte-order mark, at most [`MAX_PART_BYTES`] long.
fn open_part<'z>(
    zip: &'z mut zip::ZipArchive<Cursor<&[u8]>>,
    name: &str,
) -> std::result::Result<impl Read + 'z, String> {
    let mut f = zip.by_name(name).map_err(|e| match e {
        zip::result::ZipError::FileNotFound => {
            format!("{name} is declared in meta.xml but is not in the archive")
        }
        e => format!("{name} cannot be read from the archive ({e})"),
    })?;
    if f.size() > MAX_PART_BYTES {
        return Err(format!(
            "{name} holds {} bytes, more than tally reads from one file ({MAX_PART_BYTES}); split the archive",
            f.size()
        ));
    }
    let mut head = Vec::with_capacity(3);
    (&mut f)
        .take(3)
        .read_to_end(&mut head)
        .map_err(|e| format!("{name} cannot be read from the archive ({e})"))?;
    if head == [0xEF, 0xBB, 0xBF] {
        head.clear();
    }
    Ok(Cursor::new(head).chain(f.take(MAX_PART_BYTES)))
}

/// The whole text of `name` inside the archive (meta.xml).
fn read_part(
    zip: &mut zip::ZipArchive<Cursor<&[u8]>>,
    name: &str,
) -> std::result::Result<Vec<u8>, String> {
    let mut out = Vec::new();
    open_part(zip, name)?
        .read_to_end(&mut out)
        .map_err(|e| format!("{name} cannot be read from the archive ({e})"))?;
    Ok(out)
}

/// One byte of a delimiter attribute, or a problem.
fn one_byte(value: &str, attr: &str) -> std::result::Result<u8, String> {
    match value.as_bytes() {
        [b] if b.is_ascii() => Ok(*b),
        _ => Err(format!(
            "{attr}=\"{}\": tally reads delimiters of one ASCII character",
            value.escape_default()
        )),
    }
}

/// How a file's text is delimited, from its `meta.xml` attributes.
#[derive(Clone, Copy)]
struct Format {
    delimiter: u8,
    quote: Option<u8>,
    terminator: csv::Terminator,
}

/// The [`Format`] `spec` declares, or `None` with its problems recorded.
fn format_of(spec: &FileSpec, issues: &mut Issues) -> Option<Format> {
    let part = spec.locations.join(", ");
    let mut ok = true;
    let enc = spec.encoding.to_ascii_lowercase().replace(['-', '_'], "");
    if enc != "utf8" {
        issues.push_in(
            "meta.xml",
            0,
            "encoding",
            format!(
                "{part} is declared as {}; tally reads UTF-8 (save the files as UTF-8 and declare encoding=\"UTF-8\")",
                spec.encoding
            ),
        );
        ok = false;
    }
    let delimiter = match one_byte(&spec.fields_terminated_by, "fieldsTerminatedBy") {
        Ok(b) => b,
        Err(m) => {
            issues.push_in("meta.xml", 0, "fieldsTerminatedBy", m);
            ok = false;
            b','
        }
    };
    let quote = match spec.fields_enclosed_by.as_str() {
        "" => None,
        q => match one_byte(q, "fieldsEnclosedBy") {
            Ok(b) => Some(b),
            Err(m) => {
                issues.push_in("meta.xml", 0, "fieldsEnclosedBy", m);
                ok = false;
                None
            }
        },
    };
    let terminator = match spec.lines_terminated_by.as_str() {
        "\n" | "\r\n" => csv::Terminator::CRLF,
        t => match one_byte(t, "linesTerminatedBy") {
            Ok(b) => csv::Terminator::Any(b),
            Err(m) => {
                issues.push_in("meta.xml", 0, "linesTerminatedBy", m);
                ok = false;
                csv::Terminator::CRLF
            }
        },
    };
    ok.then_some(Format {
        delimiter,
        quote,
        terminator,
    })
}

/// Feed every data row of the files of `spec` to `each` (line, fields,
/// problems), one row in memory at a time: header lines skipped, blank rows
/// skipped. False when a file could not be read to its end.
fn read_rows(
    zip: &mut zip::ZipArchive<Cursor<&[u8]>>,
    base: &str,
    spec: &FileSpec,
    fmt: Format,
    issues: &mut Issues,
    mut each: impl FnMut(u64, &csv::StringRecord, &mut Issues),
) -> bool {
    // The columns of the terms tally stores are read by the rule of every
    // import (trimmed, NFC, no control, zero-width or bidirectional
    // characters, limited length: `store::sheet::clean_field`).
    let event = dwc_term(&spec.row_type) == Some("Event");
    let mut kinds: Vec<Option<(FieldKind, String)>> = Vec::new();
    for f in &spec.fields {
        let (Some(i), Some(term)) = (f.index, dwc_term(&f.term)) else {
            continue;
        };
        if !is_read(term, event) {
            continue;
        }
        if kinds.len() <= i {
            kinds.resize(i + 1, None);
        }
        let kind = if matches!(term, "eventRemarks" | "dynamicProperties") {
            FieldKind::Notes
        } else {
            FieldKind::Name
        };
        kinds[i] = Some((kind, term.to_string()));
    }
    let mut clean = csv::StringRecord::new();
    let mut ok = true;
    for loc in &spec.locations {
        // Locations are relative to meta.xml's folder; a path from the top
        // of the archive is accepted too.
        let inside = format!("{base}{loc}");
        let name = if base.is_empty() || zip.index_for_name(&inside).is_some() {
            inside
        } else {
            loc.clone()
        };
        let text = match open_part(zip, &name) {
            Ok(t) => t,
            Err(m) => {
                issues.push_in(loc, 0, "", m);
                ok = false;
                continue;
            }
        };
        let mut reader = csv::ReaderBuilder::new()
            .has_headers(false)
            .flexible(true)
            .delimiter(fmt.delimiter)
            .quoting(fmt.quote.is_some())
            .quote(fmt.quote.unwrap_or(b'"'))
            .terminator(fmt.terminator)
            .from_reader(text);
        let mut seen = 0;
        let mut rec = csv::StringRecord::new();
        loop {
            match reader.read_record(&mut rec) {
                Ok(false) => break,
                Ok(true) => {
                    let line = rec.position().map_or(0, csv::Position::line);
                    seen += 1;
                    if seen <= spec.ignore_header_lines {
                        continue;
                    }
                    if rec.iter().all(|f| f.trim().is_empty()) {
                        continue;
                    }
                    clean.clear();
                    let mut fine = true;
                    for (i, field) in rec.iter().enumerate() {
                        match kinds.get(i).and_then(Option::as_ref) {
                            Some((kind, term)) => match clean_field(field, *kind) {
                                Ok(v) => clean.push_field(&v),
                                Err(m) => {
                                    issues.push_in(loc, line, term, m);
                                    fine = false;
                                    clean.push_field("");
                                }
                            },
                            None => clean.push_field(field),
                        }
                    }
                    if fine {
                        each(line, &clean, issues);
                    }
                }
                Err(e) => {
                    let line = e.position().map_or(0, csv::Position::line);
                    let message = match e.kind() {
                        csv::ErrorKind::Utf8 { .. } => {
                            "not UTF-8 text; save the file as UTF-8".to_string()
                        }
                        csv::ErrorKind::Io(io) => {
                            format!("cannot be read from the archive ({io})")
                        }
                        _ => format!("unreadable row ({e})"),
                    };
                    issues.push_in(loc, line, "", message);
                    ok = false;
                    break;
                }
            }
        }
    }
    ok
}

/// The date (and time, when given) of an `eventDate`: a date, a date and
/// time (`T`), or a range `A/B` within one day.
fn event_date(s: &str) -> std::result::Result<(String, Option<String>), String> {
    let one = |p: &str| -> std::result::Result<(String, Option<String>), String> {
        let p = p.trim();
        let (d, t) = match p.split_once('T') {
            Some((d, t)) => (d, Some(t)),
            None => (p, None),
        };
        if d.len() != 10 {
            return Err(format!(
                "'{s}' is not one day; a sampling event in tally has one date (YYYY-MM-DD, ISO 8601)"
            ));
        }
        let date = parse_date(d)?.text();
        let time = match t {
            Some(t) => time_of_day(t)?,
            None => None,
        };
        Ok((date, time))
    };
    match s.split_once('/') {
        None => one(s),
        Some((a, b)) => {
            let (da, ta) = one(a)?;
            // ISO 8601 lets the end leave out what it shares with the start:
            // a time alone (`10:40/11:10`), or the end of the date (`/03`,
            // `/06-10`), which takes the start's year and month.
            let b = b.trim();
            let end_date = b.split('T').next().unwrap_or(b);
            let db = if end_date.contains(':') || end_date.is_empty() {
                da.clone()
            } else if end_date.len() < 10 && da.len() >= end_date.len() {
                let full = format!("{}{end_date}", &da[..da.len() - end_date.len()]);
                parse_date(&full)
                    .map_err(|_| format!("'{s}' does not end on a date"))?
                    .text()
            } else {
                one(b)?.0
            };
            if db != da {
                return Err(format!(
                    "'{s}' spans more than one day; a sampling event in tally has one date"
                ));
            }
            Ok((da, ta))
        }
    }
}

/// A time of day with any fraction of seconds and time zone left off.
fn time_of_day(t: &str) -> std::result::Result<Option<String>, String> {
    let t = t.trim();
    let t = t.strip_suffix('Z').unwrap_or(t);
    let t = match t
        .char_indices()
        .skip(5)
        .find(|(_, c)| *c == '+' || *c == '-')
    {
        Some((i, _)) => &t[..i],
        None => t,
    };
    let t = t.split('.').next().unwrap_or(t);
    parse_time(t)
}

/// What tally reads from `dynamicProperties` (JSON): site attributes, the
/// protocol code and the replicate number; `true` when other content was there.
struct Dynamic {
    site: BTreeMap<String, String>,
    /// `siteFrom`: for dated attribute values, the date they hold from.
    site_from: BTreeMap<String, String>,
    protocol: Option<String>,
    replicate: Option<i64>,
    other: bool,
}

fn dynamic(text: &str) -> std::result::Result<Dynamic, String> {
    let mut d = Dynamic {
        site: BTreeMap::new(),
        site_from: BTreeMap::new(),
        protocol: None,
        replicate: None,
        other: false,
    };
    if text.is_empty() {
        return Ok(d);
    }
    let Ok(serde_json::Value::Object(m)) = serde_json::from_str::<serde_json::Value>(text) else {
        d.other = true;
        return Ok(d);
    };
    for (k, v) in m {
        match (k.as_str(), v) {
            ("site", serde_json::Value::Object(a)) => {
                for (key, value) in a {
                    let value = match value {
                        serde_json::Value::String(s) => s,
                        serde_json::Value::Null => continue,
                        other => other.to_string(),
                    };
                    if !key.trim().is_empty() && !value.trim().is_empty() {
                        d.site
                            .insert(key.trim().to_string(), value.trim().to_string());
                    }
                }
            }
            ("siteFrom", serde_json::Value::Object(a)) => {
                for (key, value) in a {
                    let date = value
                        .as_str()
                        .and_then(|t| parse_date(t.trim()).ok())
                        .ok_or_else(|| {
                            format!(
                                "siteFrom of '{}' is {value}, not a date (YYYY-MM-DD)",
                                key.trim()
                            )
                        })?;
                    d.site_from.insert(key.trim().to_string(), date.text());
                }
            }
            ("protocolCode", serde_json::Value::String(s)) if !s.trim().is_empty() => {
                d.protocol = Some(s.trim().to_string());
            }
            ("replicate", v) => match v.as_i64() {
                Some(r) if r >= 1 => d.replicate = Some(r),
                _ => return Err(format!("replicate {v} is not a whole number ≥ 1")),
            },
            _ => d.other = true,
        }
    }
    Ok(d)
}

/// The count of one occurrence row, `None` for an absence.
fn occurrence_count(
    occ: &Table,
    rec: &csv::StringRecord,
) -> std::result::Result<Option<f64>, (&'static str, String)> {
    let status = occ.get(rec, "occurrenceStatus").to_ascii_lowercase();
    let ic = occ.get(rec, "individualCount");
    let oq = occ.get(rec, "organismQuantity");
    let oqt = occ.get(rec, "organismQuantityType");
    let individual_count = if ic.is_empty() {
        None
    } else {
        let v = parse_count(ic).map_err(|m| ("individualCount", m))?;
        if v.fract() != 0.0 {
            return Err((
                "individualCount",
                format!("'{ic}' is not a whole number of individuals"),
            ));
        }
        Some(v)
    };
    let quantity = if oq.is_empty() {
        None
    } else {
        let ty = oqt.to_ascii_lowercase();
        if ty != "individuals" && ty != "individual" {
            return Err((
                "organismQuantityType",
                if oqt.is_empty() {
                    format!(
                        "organismQuantity '{oq}' has no organismQuantityType; tally stores counts of individuals (type individuals)"
                    )
                } else {
                    format!(
                        "'{oqt}' is not a count of individuals; tally stores counts of individuals only, so this occurrence cannot be imported"
                    )
                },
            ));
        }
        Some(parse_count(oq).map_err(|m| ("organismQuantity", m))?)
    };
    let value = match (individual_count, quantity) {
        (Some(a), Some(b)) if a != b => {
            return Err((
                "organismQuantity",
                format!("individualCount {ic} and organismQuantity {oq} (individuals) disagree"),
            ));
        }
        (Some(a), _) | (None, Some(a)) => Some(a),
        (None, None) => None,
    };
    match status.as_str() {
        "absent" => match value {
            None => Ok(None),
            Some(0.0) => Ok(None),
            Some(v) => Err((
                "occurrenceStatus",
                format!("the occurrence is absent but counts {v} individuals"),
            )),
        },
        "present" | "" => match value {
            None => Err((
                "individualCount",
                "the occurrence has no count (individualCount, or organismQuantity of type individuals); tally stores counts".into(),
            )),
            Some(v) if v == 0.0 && status == "present" => Err((
                "occurrenceStatus",
                "the occurrence is present but counts 0 individuals".into(),
            )),
            Some(0.0) => Ok(None),
            Some(v) => Ok(Some(v)),
        },
        other => Err((
            "occurrenceStatus",
            format!("'{other}' is not an occurrence status; expected present or absent"),
        )),
    }
}

/// The core's ids (each to its first row) and the ids named as parents;
/// empty and repeated ids are problems.
fn core_ids<'t>(
    core: &'t Table,
    issues: &mut Issues,
) -> (HashMap<&'t str, usize>, HashSet<&'t str>) {
    let mut core_row: HashMap<&str, usize> = HashMap::new();
    let mut parents: HashSet<&str> = HashSet::new();
    for (k, (line, rec)) in core.rows.iter().enumerate() {
        let id = core.id(rec);
        if id.is_empty() {
            issues.push_in(
                &core.part,
                *line,
                "eventID",
                "empty; every event needs its eventID",
            );
            continue;
        }
        if let Some(first) = core_row.get(id) {
            issues.push_in(
                &core.part,
                *line,
                "eventID",
                format!(
                    "event '{id}' is listed twice (first on line {})",
                    core.rows[*first].0
                ),
            );
            continue;
        }
        core_row.insert(id, k);
        let parent = core.get(rec, "parentEventID");
        if !parent.is_empty() {
            parents.insert(parent);
        }
    }
    (core_row, parents)
}

/// What the occurrences give, read one row at a time.
struct Occurrences {
    /// Per core row: whether any occurrence names it.
    has_occurrence: Vec<bool>,
    /// Taxon name → index into `ArchiveData::taxa`.
    taxa: HashMap<String, usize>,
    /// (core row, taxon) → index into `counts`.
    index: HashMap<(usize, usize), usize>,
    /// Counts, their `event` still the core row.
    counts: Vec<ArchiveCount>,
}

impl Occurrences {
    fn new(core_rows: usize) -> Occurrences {
        Occurrences {
            has_occurrence: vec![false; core_rows],
            taxa: HashMap::new(),
            index: HashMap::new(),
            counts: Vec::new(),
        }
    }

    /// Read one occurrence row: its event, count, taxon and classification.
    #[allow(clippy::too_many_arguments)]
    fn row(
        &mut self,
        core: &Table,
        occ: &Table,
        core_row: &HashMap<&str, usize>,
        line: u64,
        rec: &csv::StringRecord,
        data: &mut ArchiveData,
        notes: &mut ReadNotes,
        issues: &mut Issues,
    ) {
        let id = occ.id(rec);
        let Some(&event) = core_row.get(id) else {
            issues.push_in(
                &occ.part,
                line,
                "eventID",
                if id.is_empty() {
                    "empty; every occurrence must name its event".to_string()
                } else {
                    format!("event '{id}' is not in {}", core.part)
                },
            );
            return;
        };
        self.has_occurrence[event] = true;
        let name = occ.get(rec, "scientificName");
        if name.is_empty() {
            issues.push_in(
                &occ.part,
                line,
                "scientificName",
                "empty; every occurrence needs the name of its taxon",
            );
            return;
        }
        let value = match occurrence_count(occ, rec) {
            Ok(v) => v,
            Err((term, m)) => {
                issues.push_in(&occ.part, line, term, m);
                return;
            }
        };
        // The chain: the taxon, then the classification columns above it.
        let rank = occ.get(rec, "taxonRank").to_ascii_lowercase();
        let level = rank_level(&rank);
        let mut chain: Vec<(String, String)> = vec![(name.to_string(), rank.clone())];
        for r in HIGHER_RANKS.iter().rev() {
            let v = occ.get(rec, r);
            if v.is_empty() || v == name {
                continue;
            }
            if let (Some(l), Some(lr)) = (level, rank_level(r))
                && lr >= l
            {
                continue;
            }
            chain.push((v.to_string(), (*r).to_string()));
        }
        for k in 0..chain.len() {
            let (n, r) = &chain[k];
            let parent = chain.get(k + 1).map(|(p, _)| p.clone());
            match self.taxa.get(n) {
                None => {
                    self.taxa.insert(n.clone(), data.taxa.len());
                    data.taxa.push(ArchiveTaxon {
                        at: (occ.part.clone(), line),
                        name: n.clone(),
                        rank: r.clone(),
                        parent,
                    });
                }
                Some(&i) => {
                    let t = &mut data.taxa[i];
                    if t.rank.is_empty() {
                        t.rank = r.clone();
                    } else if !r.is_empty() && &t.rank != r {
                        issues.push_in(
                            &occ.part,
                            line,
                            if k == 0 {
                                "taxonRank"
                            } else {
                                HIGHER_RANKS
                                    .iter()
                                    .find(|x| *x == r)
                                    .copied()
                                    .unwrap_or("taxonRank")
                            },
                            format!("'{n}' has rank {} on line {} and {r} here", t.rank, t.at.1),
                        );
                    }
                    match (&t.parent, &parent) {
                        (None, Some(_)) => t.parent = parent,
                        (Some(a), Some(b)) if a != b => issues.push_in(
                            &occ.part,
                            line,
                            "scientificName",
                            format!(
                                "'{n}' is placed under '{a}' on line {} and under '{b}' here",
                                t.at.1
                            ),
                        ),
                        _ => {}
                    }
                }
            }
        }
        let Some(value) = value else {
            notes.absences += 1;
            return;
        };
        let taxon = self.taxa[name];
        match self.index.get(&(event, taxon)) {
            Some(&c) => {
                self.counts[c].value += value;
                notes.merged += 1;
            }
            None => {
                self.index.insert((event, taxon), self.counts.len());
                self.counts.push(ArchiveCount {
                    line,
                    event,
                    taxon,
                    value,
                });
            }
        }
    }
}

/// Build the events from the core rows (grouping rows left out): for every
/// core row, the index of its event in `data.events`, if it became one.
fn events(
    core: &Table,
    core_row: &HashMap<&str, usize>,
    parents: &HashSet<&str>,
    has_occurrence: &[bool],
    data: &mut ArchiveData,
    notes: &mut ReadNotes,
    issues: &mut Issues,
) -> Vec<Option<usize>> {
    let mut event_of: Vec<Option<usize>> = vec![None; core.rows.len()];
    // Places: the locationID, or the locality and coordinates.
    let mut sites: HashMap<String, usize> = HashMap::new();
    let mut protocols: HashMap<ArchiveProtocol, usize> = HashMap::new();
    let mut localities: HashMap<&str, HashSet<(String, String)>> = HashMap::new();
    // The attribute values each site's events carry, for its history.
    let mut seen_values: HashMap<String, Vec<SeenValues>> = HashMap::new();
    for (_, rec) in &core.rows {
        if core.get(rec, "locationID").is_empty() {
            localities
                .entry(core.get(rec, "locality"))
                .or_default()
                .insert((
                    core.get(rec, "decimalLatitude").to_string(),
                    core.get(rec, "decimalLongitude").to_string(),
                ));
        }
    }
    for (line, rec) in &core.rows {
        let line = *line;
        let id = core.id(rec);
        if id.is_empty() || core_row.get(id).is_none_or(|k| core.rows[*k].0 != line) {
            continue;
        }
        let k = core_row[id];
        if parents.contains(id) && !has_occurrence[k] {
            notes.grouping_rows += 1;
            continue;
        }
        let mut push = |term: &str, m: String| issues.push_in(&core.part, line, term, m);
        let date = match event_date(core.get(rec, "eventDate")) {
            Ok(d) => Some(d),
            Err(m) => {
                push("eventDate", m);
                None
            }
        };
        let time = match time_of_day(core.get(rec, "eventTime")) {
            Ok(t) => t,
            Err(m) => {
                push("eventTime", m);
                None
            }
        };
        let lat = parse_coordinate(core.get(rec, "decimalLatitude"), "latitude", 90.0)
            .map_err(|m| push("decimalLatitude", m))
            .ok()
            .flatten();
        let lon = parse_coordinate(core.get(rec, "decimalLongitude"), "longitude", 180.0)
            .map_err(|m| push("decimalLongitude", m))
            .ok()
            .flatten();
        let datum = core.get(rec, "geodeticDatum");
        if !datum.is_empty()
            && !["wgs84", "wgs 84", "epsg:4326"].contains(&datum.to_ascii_lowercase().as_str())
        {
            push(
                "geodeticDatum",
                format!(
                    "'{datum}': tally stores WGS84 coordinates (EPSG:4326); convert them before importing"
                ),
            );
        }
        let locality = core.get(rec, "locality");
        let code = match core.get(rec, "locationID") {
            "" if locality.is_empty() && (lat.is_none() || lon.is_none()) => {
                push(
                    "locationID",
                    "empty; the event names no place (give locationID, or locality and coordinates)".into(),
                );
                None
            }
            "" => {
                let (la, lo) = (
                    core.get(rec, "decimalLatitude"),
                    core.get(rec, "decimalLongitude"),
                );
                Some(if locality.is_empty() {
                    format!("{la}, {lo}")
                } else if localities.get(locality).is_some_and(|s| s.len() > 1) {
                    format!("{locality} ({la}, {lo})")
                } else {
                    locality.to_string()
                })
            }
            code => Some(code.to_string()),
        };
        let dynamic = match dynamic(core.get(rec, "dynamicProperties")) {
            Ok(d) => Some(d),
            Err(m) => {
                push("dynamicProperties", m);
                None
            }
        };
        if dynamic.as_ref().is_some_and(|d| d.other) {
            let label = format!(
                "{}: dynamicProperties (other than site, siteFrom, protocolCode, replicate)",
                core.part
            );
            if !notes.terms_not_stored.contains(&label) {
                notes.terms_not_stored.push(label);
            }
        }
        let description = core.get(rec, "samplingProtocol");
        if description.is_empty() {
            push(
                "samplingProtocol",
                "empty; tally compares effort within one protocol, so every event needs its samplingProtocol".into(),
            );
        }
        let unit = core.get(rec, "sampleSizeUnit");
        if unit.is_empty() {
            push(
                "sampleSizeUnit",
                "empty; the event's effort needs its unit (minutes, m2, traps…)".into(),
            );
        }
        let effort = match parse_effort(core.get(rec, "sampleSizeValue")) {
            Ok(v) => Some(v),
            Err(m) => {
                push(
                    "sampleSizeValue",
                    format!("{m}; every sampling event needs its effort"),
                );
                None
            }
        };
        let (Some((date, date_time)), Some(code), Some(effort), Some(dynamic)) =
            (date, code, effort, dynamic)
        else {
            continue;
        };
        if description.is_empty() || unit.is_empty() {
            continue;
        }
        // The site, consistent across its events.
        let site = ArchiveSite {
            at: (core.part.clone(), line),
            code: code.clone(),
            name: locality.to_string(),
            latitude: lat,
            longitude: lon,
            attributes: BTreeMap::new(),
        };
        seen_values
            .entry(code.clone())
            .or_default()
            .push(SeenValues {
                date: date.clone(),
                line,
                values: dynamic.site.clone(),
                from: dynamic.site_from.clone(),
            });
        match sites.get(&code) {
            None => {
                sites.insert(code.clone(), data.sites.len());
                data.sites.push(site);
            }
            Some(&k) => {
                let first = &data.sites[k];
                let differs = [
                    (first.name != site.name, "locality"),
                    (first.latitude != site.latitude, "decimalLatitude"),
                    (first.longitude != site.longitude, "decimalLongitude"),
                ];
                for (d, term) in differs {
                    if d {
                        issues.push_in(
                            &core.part,
                            line,
                            term,
                            format!(
                                "site '{code}' is described otherwise on line {}; one site has one value here",
                                first.at.1,
                            ),
                        );
                    }
                }
            }
        }
        let protocol = ArchiveProtocol {
            code: dynamic.protocol.clone(),
            description: description.to_string(),
            unit: unit.to_string(),
        };
        let next = protocols.len();
        let p = *protocols.entry(protocol.clone()).or_insert(next);
        if p == data.protocols.len() {
            data.protocols.push(protocol);
        }
        event_of[k] = Some(data.events.len());
        data.events.push(ArchiveEvent {
            line,
            code: id.to_string(),
            site: code,
            date,
            time: time.or(date_time),
            protocol: p,
            effort,
            replicate: dynamic.replicate,
            notes: core.get(rec, "eventRemarks").to_string(),
        });
    }

    for site in &mut data.sites {
        if let Some(seen) = seen_values.get_mut(&site.code) {
            match site_history(seen) {
                Ok(h) => site.attributes = h,
                Err((line, m)) => issues.push_in(
                    &core.part,
                    line,
                    "dynamicProperties",
                    format!("site '{}': {m}", site.code),
                ),
            }
        }
    }
    event_of
}

/// The site attribute values one event carries in `dynamicProperties`.
struct SeenValues {
    date: String,
    line: u64,
    values: BTreeMap<String, String>,
    from: BTreeMap<String, String>,
}

/// A site's attribute history from the values its events carry
/// (docs/data-model.md, "Events"): in date order, a key's first value holds
/// since always when the site's earliest event carries it, and each new value
/// holds from its `siteFrom` date or else from the date of the first event
/// carrying it. A key that stops being given, a `siteFrom` after the event or
/// not after the previous value's, or two dates for one value are refused:
/// (line, message).
fn site_history(seen: &mut [SeenValues]) -> std::result::Result<History, (u64, String)> {
    seen.sort_by(|a, b| (&a.date, a.line).cmp(&(&b.date, b.line)));
    let mut history: History = BTreeMap::new();
    let keys: BTreeSet<&String> = seen.iter().flat_map(|s| s.values.keys()).collect();
    for key in keys {
        let mut values: Vec<AttributeValue> = Vec::new();
        // The line that gave the value in force, for messages.
        let mut given_on: Option<u64> = None;
        for (i, s) in seen.iter().enumerate() {
            let Some(value) = s.values.get(key) else {
                if let Some(l) = given_on {
                    return Err((
                        s.line,
                        format!(
                            "attribute '{key}' is given on line {l} and not on this later event; \
                             a value holds until the next value of its key, so every later event \
                             carries one"
                        ),
                    ));
                }
                continue;
            };
            let from = s.from.get(key).cloned();
            if from.as_deref().is_some_and(|f| f > s.date.as_str()) {
                return Err((
                    s.line,
                    format!(
                        "siteFrom of '{key}' is {} but the event is on {}; a value holds from \
                         a date on or before the events that carry it",
                        from.as_deref().unwrap_or_default(),
                        s.date
                    ),
                ));
            }
            match values.last() {
                Some(last) if &last.value == value => {
                    if from.is_some() && from != last.from {
                        return Err((
                            s.line,
                            format!(
                                "'{key}' = '{value}' is given from {} here and from {} on line {}; \
                                 one value has one date",
                                from.as_deref().unwrap_or_default(),
                                last.from.as_deref().unwrap_or("since always"),
                                given_on.unwrap_or_default()
                            ),
                        ));
                    }
                }
                last => {
                    let from = match (from, last, i) {
                        (Some(f), _, _) => Some(f),
                        (None, None, 0) => None,
                        (None, _, _) => Some(s.date.clone()),
                    };
                    if let (Some(last), Some(f)) = (last, &from)
                        && last.from.as_deref().is_some_and(|l| l >= f.as_str())
                    {
                        return Err((
                            s.line,
                            format!(
                                "'{key}' = '{value}' holds from {f}, not after the value before \
                                 it (from {}); dates of one key follow each other",
                                last.from.as_deref().unwrap_or_default()
                            ),
                        ));
                    }
                    values.push(AttributeValue {
                        from,
                        value: value.clone(),
                    });
                    given_on = Some(s.line);
                }
            }
        }
        history.insert(key.clone(), values);
    }
    Ok(history)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn event_dates_are_one_day() {
        assert_eq!(
            event_date("2016-04-21").unwrap(),
            ("2016-04-21".into(), None)
        );
        assert_eq!(
            event_date("2016-04-21T10:40:00+02:00").unwrap(),
            ("2016-04-21".into(), Some("10:40:00".into()))
        );
        assert_eq!(
            event_date("2016-04-21T10:40Z/2016-04-21T11:10Z").unwrap(),
            ("2016-04-21".into(), Some("10:40".into()))
        );
        assert!(event_date("2016-04").unwrap_err().contains("one day"));
        assert!(
            event_date("2016-04-21/23")
                .unwrap_err()
                .contains("more than one day")
        );
        assert!(
            event_date("2016-04-21/05-02")
                .unwrap_err()
                .contains("more than one day")
        );
        assert_eq!(event_date("2016-04-21/21").unwrap().0, "2016-04-21");
        assert_eq!(
            event_date("2016-04-21T10:40/11:10").unwrap(),
            ("2016-04-21".into(), Some("10:40".into()))
        );
        assert!(
            event_date("2016-04-21/2016-04-23")
                .unwrap_err()
                .contains("more than one day")
        );
        assert!(event_date("2016-02-30").is_err());
    }

    /// Histories read from the values events carry, worked out by hand from
    /// the rule in docs/data-model.md, "Events".
    #[test]
    fn a_site_history_is_read_from_its_events_values() {
        let seen = |date: &str, line, value: Option<&str>, from: Option<&str>| SeenValues {
            date: date.into(),
            line,
            values: value
                .map(|v| [("status".to_string(), v.to_string())].into())
                .unwrap_or_default(),
            from: from
                .map(|f| [("status".to_string(), f.to_string())].into())
                .unwrap_or_default(),
        };
        let v = |from: Option<&str>, value: &str| AttributeValue {
            from: from.map(str::to_string),
            value: value.into(),
        };
        // Out of file order; no siteFrom: since always, then from the first
        // event with the new value.
        let mut s = vec![
            seen("2015-05-10", 4, Some("restored"), None),
            seen("2013-05-10", 2, Some("degraded"), None),
            seen("2014-09-10", 3, Some("restored"), None),
        ];
        assert_eq!(
            site_history(&mut s).unwrap()["status"],
            [v(None, "degraded"), v(Some("2014-09-10"), "restored")]
        );
        // siteFrom gives the exact date, also for the first value.
        let mut s = vec![
            seen("2013-05-10", 2, Some("degraded"), Some("2010-01-01")),
            seen("2014-09-10", 3, Some("restored"), Some("2014-06-01")),
        ];
        assert_eq!(
            site_history(&mut s).unwrap()["status"],
            [
                v(Some("2010-01-01"), "degraded"),
                v(Some("2014-06-01"), "restored")
            ]
        );
        // A key first given on a later event holds from that event.
        let mut s = vec![
            seen("2013-05-10", 2, None, None),
            seen("2014-09-10", 3, Some("restored"), None),
        ];
        assert_eq!(
            site_history(&mut s).unwrap()["status"],
            [v(Some("2014-09-10"), "restored")]
        );
        // Refused: a key that stops, a siteFrom after its event, two dates for one value.
        let mut s = vec![
            seen("2013-05-10", 2, Some("degraded"), None),
            seen("2014-09-10", 3, None, None),
        ];
        assert_eq!(site_history(&mut s).unwrap_err().0, 3);
        let mut s = vec![seen("2013-05-10", 2, Some("degraded"), Some("2013-06-01"))];
        assert!(site_history(&mut s).unwrap_err().1.contains("on or before"));
        let mut s = vec![
            seen("2013-05-10", 2, Some("degraded"), Some("2012-01-01")),
            seen("2014-05-10", 3, Some("degraded"), Some("2013-01-01")),
        ];
        assert!(
            site_history(&mut s)
                .unwrap_err()
                .1
                .contains("one value has one date")
        );
    }

    #[test]
    fn dynamic_properties_keep_tallys_keys_and_flag_the_rest() {
        let d = dynamic(
            r#"{"site":{"reach":"upper","n":3},"protocolCode":"kick","replicate":2,"x":1}"#,
        )
        .unwrap();
        assert_eq!(d.site["reach"], "upper");
        assert_eq!(d.site["n"], "3");
        assert_eq!(
            (d.protocol.as_deref(), d.replicate, d.other),
            (Some("kick"), Some(2), true)
        );
        assert!(dynamic("free text").unwrap().other);
        assert!(dynamic(r#"{"replicate":0}"#).is_err());
    }
}
