//! Darwin Core archives: export, import, round trip, an independent reader,
//! hand-written partner archives and refusals.
//!
//! Sources: the Darwin Core text guide (TDWG, https://dwc.tdwg.org/text/) for
//! how `meta.xml` declares files, delimiters, header lines and defaults; the
//! Darwin Core term list (https://dwc.tdwg.org/terms/) for the terms; the
//! general-purpose reader python-dwca-reader (PyPI) for
//! `tests/reference/dwca_reader.json`, written by
//! `tests/reference/make_dwca_fixtures.py`.

use std::collections::BTreeMap;
use std::io::{Read, Write};

use crate::util::{TestEnv, root};

/// A zip archive of `files` (name, text), built in memory.
fn zip_of(files: &[(&str, &str)]) -> Vec<u8> {
    let mut w = zip::ZipWriter::new(std::io::Cursor::new(Vec::new()));
    for (name, text) in files {
        w.start_file(*name, zip::write::SimpleFileOptions::default())
            .unwrap();
        w.write_all(text.as_bytes()).unwrap();
    }
    w.finish().unwrap().into_inner()
}

/// The text of `name` inside the archive at `path`.
fn part(path: &std::path::Path, name: &str) -> String {
    let mut z = zip::ZipArchive::new(std::fs::File::open(path).unwrap()).unwrap();
    let mut s = String::new();
    z.by_name(name).unwrap().read_to_string(&mut s).unwrap();
    s
}

/// Rows of a tab-delimited file as tally writes it (quotes only around
/// fields holding a tab, quote or line end), header first.
fn tsv(text: &str) -> Vec<Vec<String>> {
    let mut r = csv::ReaderBuilder::new()
        .delimiter(b'\t')
        .has_headers(false)
        .from_reader(text.as_bytes());
    r.records()
        .map(|x| x.unwrap().iter().map(str::to_string).collect())
        .collect()
}

/// `tally import dwca FILE FLAGS…`, which must succeed; its account (stderr).
fn import(env: &TestEnv, file: &std::path::Path, flags: &[&str]) -> String {
    let mut args = vec!["import", "dwca", file.to_str().unwrap()];
    args.extend_from_slice(flags);
    let (code, out, err) = env.run(args);
    assert_eq!(code, 0, "{out}\n{err}");
    err
}

/// `matrix --format csv` of a store, rows and header, with empty rows kept.
fn matrix(env: &TestEnv, flags: &[&str]) -> String {
    let mut args = vec!["matrix", "--format", "csv", "--keep-empty"];
    args.extend_from_slice(flags);
    env.stdout(args)
}

#[test]
fn a_round_trip_keeps_matrices_and_effort() {
    let src = TestEnv::with_demo_data();
    let zip = src.path("all.zip");
    let out = src.stdout(["export", "dwca", zip.to_str().unwrap()]);
    assert!(out.contains("752 events"), "{out}");
    let sel = ["--site", "S01,S07,S12", "--years", "2012..2016"];
    let part_zip = src.path("part.zip");
    src.stdout(
        ["export", "dwca", part_zip.to_str().unwrap(), "--absences"]
            .into_iter()
            .chain(sel),
    );

    let all = TestEnv::new();
    all.stdout(["init"]);
    let out = import(&all, &zip, &["--create-missing"]);
    assert!(out.contains("752 events"), "{out}");
    for flags in [
        &[][..],
        &["--unit", "site-year", "--per-effort", "--protocol", "kick"][..],
        &["--rank", "family"][..],
        &["--site-where", "reach=lower", "--months", "9..10"][..],
    ] {
        assert_eq!(matrix(&src, flags), matrix(&all, flags), "{flags:?}");
    }
    // Effort per protocol, event counts and dates as stored.
    let summary = |e: &TestEnv| {
        let s = e.stdout(["summary"]);
        s.lines().skip(1).collect::<Vec<_>>().join("\n")
    };
    assert_eq!(summary(&src), summary(&all));

    // A selection with absences reads back to the same selection.
    let some = TestEnv::new();
    some.stdout(["init"]);
    let out = import(&some, &part_zip, &["--create-missing"]);
    assert!(out.contains("absent occurrences read as zeros"), "{out}");
    assert_eq!(matrix(&src, &sel), matrix(&some, &[]));

    // The import is one batch; undoing it empties the store again.
    let empty = TestEnv::new();
    empty.stdout(["init"]);
    let before = empty.dump();
    import(&empty, &zip, &["--create-missing"]);
    empty.stdout(["batches", "undo", "1"]);
    assert_eq!(empty.dump(), before);
}

#[test]
fn the_archive_follows_the_text_guide() {
    let env = TestEnv::with_demo_data();
    let zip = env.path("a.zip");
    env.stdout([
        "export",
        "dwca",
        zip.to_str().unwrap(),
        "--site",
        "S01,S07",
        "--years",
        "2014..2016",
    ]);
    // meta.xml read as the text guide specifies: the core's <id> and the
    // extension's <coreid> columns, every <field> by index and term URI.
    let meta = part(&zip, "meta.xml");
    let doc = roxmltree::Document::parse(&meta).unwrap();
    let archive = doc.root_element();
    assert_eq!(
        archive.tag_name().namespace(),
        Some("http://rs.tdwg.org/dwc/text/")
    );
    let core = archive.children().find(|n| n.has_tag_name("core")).unwrap();
    let ext = archive
        .children()
        .find(|n| n.has_tag_name("extension"))
        .unwrap();
    assert_eq!(
        core.attribute("rowType"),
        Some("http://rs.tdwg.org/dwc/terms/Event")
    );
    assert_eq!(
        ext.attribute("rowType"),
        Some("http://rs.tdwg.org/dwc/terms/Occurrence")
    );
    let terms = |n: roxmltree::Node| -> BTreeMap<usize, String> {
        n.children()
            .filter(|c| c.has_tag_name("field"))
            .map(|c| {
                (
                    c.attribute("index").unwrap().parse().unwrap(),
                    c.attribute("term")
                        .unwrap()
                        .strip_prefix("http://rs.tdwg.org/dwc/terms/")
                        .unwrap()
                        .to_string(),
                )
            })
            .collect()
    };
    let (ct, et) = (terms(core), terms(ext));
    let location = |n: roxmltree::Node| {
        n.descendants()
            .find(|c| c.has_tag_name("location"))
            .unwrap()
            .text()
            .unwrap()
            .to_string()
    };
    assert_eq!(core.attribute("fieldsTerminatedBy"), Some("\\t"));
    assert_eq!(core.attribute("ignoreHeaderLines"), Some("1"));
    let events = tsv(&part(&zip, &location(core)));
    let occurrences = tsv(&part(&zip, &location(ext)));
    // The header line names the declared terms in their columns.
    for (i, t) in &ct {
        assert_eq!(&events[0][*i], t);
    }
    for (i, t) in &et {
        assert_eq!(&occurrences[0][*i], t);
    }
    for needed in [
        "eventID",
        "eventDate",
        "locationID",
        "decimalLatitude",
        "decimalLongitude",
        "geodeticDatum",
        "samplingProtocol",
        "sampleSizeValue",
        "sampleSizeUnit",
        "samplingEffort",
        "dynamicProperties",
    ] {
        assert!(ct.values().any(|t| t == needed), "{needed}");
    }
    for needed in [
        "occurrenceID",
        "basisOfRecord",
        "scientificName",
        "taxonRank",
        "family",
        "individualCount",
        "organismQuantity",
        "organismQuantityType",
        "occurrenceStatus",
    ] {
        assert!(et.values().any(|t| t == needed), "{needed}");
    }
    let col = |m: &BTreeMap<usize, String>, t: &str| *m.iter().find(|(_, v)| *v == t).unwrap().0;
    let id: usize = core
        .children()
        .find(|c| c.has_tag_name("id"))
        .unwrap()
        .attribute("index")
        .unwrap()
        .parse()
        .unwrap();
    let coreid: usize = ext
        .children()
        .find(|c| c.has_tag_name("coreid"))
        .unwrap()
        .attribute("index")
        .unwrap()
        .parse()
        .unwrap();
    // Every occurrence names an event of the core; occurrenceIDs are unique;
    // individuals per event are the store's totals (the matrix row sums).
    let mut per_event: BTreeMap<String, f64> =
        events[1..].iter().map(|r| (r[id].clone(), 0.0)).collect();
    let mut ids = std::collections::HashSet::new();
    for r in &occurrences[1..] {
        let total = per_event
            .get_mut(&r[coreid])
            .unwrap_or_else(|| panic!("occurrence of unknown event {}", r[coreid]));
        *total += r[col(&et, "individualCount")].parse::<f64>().unwrap();
        assert!(ids.insert(r[col(&et, "occurrenceID")].clone()));
        assert_eq!(r[col(&et, "organismQuantityType")], "individuals");
    }
    let m = matrix(&env, &["--site", "S01,S07", "--years", "2014..2016"]);
    let mut rows = csv::Reader::from_reader(m.as_bytes());
    let mut n = 0;
    for r in rows.records() {
        let r = r.unwrap();
        let sum: f64 = r.iter().skip(1).map(|v| v.parse::<f64>().unwrap()).sum();
        assert_eq!(per_event[&r[0]], sum, "{}", &r[0]);
        n += 1;
    }
    assert_eq!(n, per_event.len());
    // Effort as stored, with its unit; coordinates with their datum.
    let e = &events[1];
    assert_eq!(
        e[col(&ct, "samplingEffort")],
        format!(
            "{} {}",
            e[col(&ct, "sampleSizeValue")],
            e[col(&ct, "sampleSizeUnit")]
        )
    );
    assert_eq!(e[col(&ct, "geodeticDatum")], "WGS84");
    let eml = part(&zip, "eml.xml");
    roxmltree::Document::parse(&eml).unwrap();
}

#[test]
fn an_independent_reader_agrees_with_the_store() {
    let text = std::fs::read_to_string(root().join("tests/reference/dwca_reader.json"))
        .expect("tests/reference/dwca_reader.json (make_dwca_fixtures.py)");
    let fx: serde_json::Value = serde_json::from_str(&text).unwrap();
    let flags: Vec<String> = fx["flags"]
        .as_array()
        .unwrap()
        .iter()
        .map(|v| v.as_str().unwrap().to_string())
        .collect();
    assert_eq!(fx["unlinked_occurrences"], 0);
    assert_eq!(fx["core_row_type"], "http://rs.tdwg.org/dwc/terms/Event");
    assert_eq!(
        fx["extension_row_type"],
        "http://rs.tdwg.org/dwc/terms/Occurrence"
    );
    // The reader's individuals per event are the store's totals for the same
    // selection (the selection flags of the export, without the archive ones).
    let env = TestEnv::with_demo_data();
    let mut sel: Vec<&str> = Vec::new();
    let mut k = 0;
    while k < flags.len() {
        match flags[k].as_str() {
            "--site" | "--years" => {
                sel.push(&flags[k]);
                sel.push(&flags[k + 1]);
                k += 2;
            }
            "--contact" | "--licence" => k += 2,
            _ => k += 1,
        }
    }
    let m = matrix(&env, &sel);
    let per_event = fx["individuals_per_event"].as_object().unwrap();
    let mut rows = csv::Reader::from_reader(m.as_bytes());
    let header = rows.headers().unwrap().len() - 1;
    let mut n = 0;
    let mut zeros = 0;
    for r in rows.records() {
        let r = r.unwrap();
        let values: Vec<f64> = r.iter().skip(1).map(|v| v.parse().unwrap()).collect();
        let sum: f64 = values.iter().sum();
        assert_eq!(per_event[&r[0]].as_f64().unwrap(), sum, "{}", &r[0]);
        zeros += values.iter().filter(|v| **v == 0.0).count();
        n += 1;
    }
    assert_eq!(fx["core_rows"].as_u64().unwrap() as usize, n);
    assert_eq!(per_event.len(), n);
    // With --absences every taxon of the selection has a row in every event
    // (present or absent), except where a taxon above or below it was found.
    let present = fx["present_rows"].as_u64().unwrap() as usize;
    let absent = fx["absent_rows"].as_u64().unwrap() as usize;
    assert_eq!(present + zeros, n * header);
    assert!(
        absent <= zeros && absent > 0,
        "{absent} absences, {zeros} zeros"
    );
    assert_eq!(
        fx["extension_rows"].as_u64().unwrap() as usize,
        present + absent
    );
}

/// A partner's archive: a tab-delimited core with its fields in another order
/// than tally writes, the protocol and unit given as `default`s in meta.xml, a
/// grouping row (parent of two events, no occurrence), an event that found
/// nothing; a comma-delimited extension with quoted fields holding commas and
/// quotes, a count given as organismQuantity, an absence, two occurrences of
/// one taxon in one event, and a term tally does not store.
const PARTNER_META: &str = r#"<?xml version="1.0" encoding="UTF-8"?>
<archive xmlns="http://rs.tdwg.org/dwc/text/">
  <core encoding="UTF-8" fieldsTerminatedBy="\t" linesTerminatedBy="\n" fieldsEnclosedBy="" ignoreHeaderLines="1" rowType="http://rs.tdwg.org/dwc/terms/Event">
    <files><location>events.tab</location></files>
    <id index="3"/>
    <field index="0" term="http://rs.tdwg.org/dwc/terms/sampleSizeValue"/>
    <field index="1" term="http://rs.tdwg.org/dwc/terms/eventDate"/>
    <field index="2" term="http://rs.tdwg.org/dwc/terms/locationID"/>
    <field index="3" term="http://rs.tdwg.org/dwc/terms/eventID"/>
    <field index="4" term="http://rs.tdwg.org/dwc/terms/parentEventID"/>
    <field index="5" term="http://rs.tdwg.org/dwc/terms/habitat"/>
    <field index="6" term="http://rs.tdwg.org/dwc/terms/locality"/>
    <field term="http://rs.tdwg.org/dwc/terms/samplingProtocol" default="Two-minute kick sample"/>
    <field term="http://rs.tdwg.org/dwc/terms/sampleSizeUnit" default="minutes"/>
  </core>
  <extension fieldsTerminatedBy="," fieldsEnclosedBy="&quot;" ignoreHeaderLines="1" rowType="http://rs.tdwg.org/dwc/terms/Occurrence">
    <files><location>occ.csv</location></files>
    <coreid index="1"/>
    <field index="0" term="http://rs.tdwg.org/dwc/terms/scientificName"/>
    <field index="1" term="http://rs.tdwg.org/dwc/terms/eventID"/>
    <field index="2" term="http://rs.tdwg.org/dwc/terms/individualCount"/>
    <field index="3" term="http://rs.tdwg.org/dwc/terms/organismQuantity"/>
    <field index="4" term="http://rs.tdwg.org/dwc/terms/organismQuantityType"/>
    <field index="5" term="http://rs.tdwg.org/dwc/terms/occurrenceStatus"/>
    <field index="6" term="http://rs.tdwg.org/dwc/terms/taxonRank"/>
    <field index="7" term="http://rs.tdwg.org/dwc/terms/family"/>
    <field index="8" term="http://rs.tdwg.org/dwc/terms/occurrenceRemarks"/>
  </extension>
</archive>
"#;

const PARTNER_EVENTS: &str = "effort\tdate\tplace\tid\tparent\thabitat\tname
\t2019-05-02\tP1\tV1\t\triffle\tUpper ford
2\t2019-05-02\tP1\tE1\tV1\triffle\tUpper ford
3\t2019-05-02T09:30:00Z\tP2\tE2\tV1\tpool\tMill pool, lower end
2.5\t2019-06-10\tP1\tE3\t\triffle\tUpper ford
";

const PARTNER_OCCURRENCES: &str = r#"name,event,count,qty,qtype,status,rank,family,remarks
Baetis,E1,12,,,present,genus,Baetidae,"under stones, mostly"
Baetis,E1,3,,,,genus,Baetidae,"nymphs, late"
Rhithrogena,E1,,4,individuals,present,genus,Heptageniidae,
Baetis,E2,,,,absent,genus,Baetidae,
Rhithrogena,E2,7,7,individuals,present,genus,Heptageniidae,"said ""many"", counted 7"
"#;

fn partner(meta: &str, events: &str, occurrences: &str) -> Vec<u8> {
    zip_of(&[
        ("data/meta.xml", meta),
        ("data/events.tab", events),
        ("data/occ.csv", occurrences),
    ])
}

#[test]
fn a_partner_archive_is_read_as_its_meta_xml_declares() {
    let env = TestEnv::new();
    env.stdout(["init"]);
    let a = env.write_bytes(
        "partner.zip",
        &partner(PARTNER_META, PARTNER_EVENTS, PARTNER_OCCURRENCES),
    );
    let out = import(&env, &a, &["--create-missing"]);
    assert!(out.contains("3 events, 3 counts"), "{out}");
    assert!(out.contains("created 2 sites, 1 protocol, 4 taxa"), "{out}");
    assert!(out.contains("1 absent occurrence read as a zero"), "{out}");
    assert!(out.contains("1 occurrence added to another"), "{out}");
    assert!(out.contains("1 core row only group"), "{out}");
    assert!(out.contains("habitat"), "{out}");
    assert!(out.contains("occurrenceRemarks"), "{out}");
    // Counts written out by hand from the files above (rows in the matrix's
    // order: site, then date): E1 Baetis 12 + 3,
    // Rhithrogena 4 (organismQuantity); E2 Rhithrogena 7 (Baetis absent);
    // E3 nothing found.
    let m = matrix(&env, &[]);
    assert_eq!(m, "sample,Baetis,Rhithrogena\nE1,15,4\nE3,0,0\nE2,0,7\n");
    let per_effort = matrix(&env, &["--per-effort"]);
    assert_eq!(
        per_effort,
        "sample,Baetis,Rhithrogena\nE1,7.5,2\nE3,0,0\nE2,0,2.3333333333333335\n"
    );
    // The default protocol and unit, the site names with their comma, the
    // families as parents.
    let summary = env.stdout(["summary"]);
    assert!(summary.contains("minutes"), "{summary}");
    assert!(summary.contains("7.5"), "{summary}");
    let tree = env.stdout(["taxa", "tree"]);
    assert!(tree.contains("Heptageniidae"), "{tree}");
    let back = env.path("back.zip");
    env.stdout(["export", "dwca", back.to_str().unwrap()]);
    let events = tsv(&part(&back, "event.txt"));
    let row = events.iter().find(|r| r[0] == "E2").unwrap();
    assert_eq!(row[1], "2019-05-02");
    assert_eq!(row[2], "09:30:00");
    assert_eq!(row[4], "Mill pool, lower end");
    assert_eq!(row[8], "Two-minute kick sample");
    let occ = tsv(&part(&back, "occurrence.txt"));
    let baetis = occ
        .iter()
        .find(|r| r[0] == "E1" && r[3] == "Baetis")
        .unwrap();
    assert_eq!(baetis[9], "Baetidae");
    assert_eq!(baetis[11], "15");

    // The same archive again: its events are stored already.
    let before = env.dump();
    let (code, _, err) = env.run(["import", "dwca", a.to_str().unwrap(), "--create-missing"]);
    assert_eq!(code, 1);
    assert!(
        err.contains("event 'E1' is already stored (batch 1)"),
        "{err}"
    );
    assert_eq!(env.dump(), before);
}

#[test]
fn archives_that_cannot_be_mapped_are_refused_whole() {
    let env = TestEnv::new();
    env.stdout(["init"]);
    let before = env.dump();
    let refuse = |name: &str, bytes: &[u8], flags: &[&str]| -> String {
        let p = env.write_bytes(name, bytes);
        let mut args = vec!["import", "dwca", p.to_str().unwrap()];
        args.extend_from_slice(flags);
        let (code, out, err) = env.run(args);
        assert_eq!(code, 1, "{name}: {out}");
        assert_eq!(env.dump(), before, "{name} changed the store");
        err
    };
    let cm = ["--create-missing"];

    // A required term missing from meta.xml.
    let no_effort = PARTNER_META.replace(
        "<field index=\"0\" term=\"http://rs.tdwg.org/dwc/terms/sampleSizeValue\"/>",
        "",
    );
    let err = refuse(
        "no-effort.zip",
        &partner(&no_effort, PARTNER_EVENTS, PARTNER_OCCURRENCES),
        &cm,
    );
    assert!(err.contains("meta.xml, term sampleSizeValue"), "{err}");

    // A broken zip.
    let whole = partner(PARTNER_META, PARTNER_EVENTS, PARTNER_OCCURRENCES);
    let err = refuse("broken.zip", &whole[..whole.len() / 2], &cm);
    assert!(err.contains("not a readable zip archive"), "{err}");

    // An occurrence-only dataset.
    let occurrence_core = PARTNER_META.replacen(
        "rowType=\"http://rs.tdwg.org/dwc/terms/Event\"",
        "rowType=\"http://rs.tdwg.org/dwc/terms/Occurrence\"",
        1,
    );
    let err = refuse(
        "occ.zip",
        &partner(&occurrence_core, PARTNER_EVENTS, PARTNER_OCCURRENCES),
        &cm,
    );
    assert!(err.contains("occurrence-only dataset"), "{err}");

    // Quantities that are not counts of individuals, a present record of 0,
    // an occurrence without count, an event missing from the core, an event
    // without effort: each named by file, line and term.
    let occ = "name,event,count,qty,qtype,status,rank,family,remarks
Baetis,E1,,35,% cover,present,genus,Baetidae,
Baetis,E2,0,,,present,genus,Baetidae,
Rhithrogena,E1,,,,present,genus,Heptageniidae,
Rhithrogena,E9,2,,,present,genus,Heptageniidae,
";
    let events = PARTNER_EVENTS.replace("2.5\t2019-06-10", "\t2019-06-10");
    let err = refuse("bad.zip", &partner(PARTNER_META, &events, occ), &cm);
    assert!(
        err.contains(
            "occ.csv line 2, term organismQuantityType: '% cover' is not a count of individuals"
        ),
        "{err}"
    );
    assert!(
        err.contains("occ.csv line 3, term occurrenceStatus"),
        "{err}"
    );
    assert!(
        err.contains("occ.csv line 4, term individualCount"),
        "{err}"
    );
    assert!(
        err.contains("occ.csv line 5, term eventID: event 'E9'"),
        "{err}"
    );
    assert!(
        err.contains("events.tab line 5, term sampleSizeValue"),
        "{err}"
    );

    // Names are read by the rule of every import: a right-to-left override
    // in a taxon name is refused with its code point.
    let hostile = PARTNER_OCCURRENCES.replace("Rhithrogena,E2", "Rhithro\u{202e}gena,E2");
    let err = refuse(
        "bidi.zip",
        &partner(PARTNER_META, PARTNER_EVENTS, &hostile),
        &cm,
    );
    assert!(
        err.contains("occ.csv line 6, term scientificName: contains U+202E"),
        "{err}"
    );

    // Without --create-missing, names the store lacks are listed.
    let err = refuse(
        "partner.zip",
        &partner(PARTNER_META, PARTNER_EVENTS, PARTNER_OCCURRENCES),
        &[],
    );
    assert!(err.contains("site 'P1' is not in the store"), "{err}");
    assert!(err.contains("taxon 'Baetis' is not in the store"), "{err}");
}

#[test]
fn the_export_refuses_the_store_and_matrix_flags() {
    let env = TestEnv::with_demo_data();
    let before = env.dump();
    let (code, _, err) = env.run(["export", "dwca", env.db.to_str().unwrap()]);
    assert_eq!(code, 1);
    assert!(err.contains("is the store"), "{err}");
    let (code, _, err) = env.run(["export", "dwca", "x.zip", "--unit", "site-year"]);
    assert_eq!(code, 1);
    assert!(err.contains("--unit shapes a matrix"), "{err}");
    assert!(!env.path("x.zip").exists());
    assert_eq!(env.dump(), before);
}
