//! Unit tests of the field parsers and of whole imports on in-memory stores.
use super::*;

#[test]
fn dates_follow_the_gregorian_calendar_strictly() {
    // ISO 8601-1:2019, 5.2.2.1: a complete calendar date is YYYY-MM-DD.
    assert_eq!(
        parse_date("2016-04-21").map(IsoDate::text),
        Ok("2016-04-21".to_string())
    );
    // Gregorian leap rule: divisible by 4, except centuries not divisible by 400.
    assert!(parse_date("2020-02-29").is_ok());
    assert!(parse_date("2000-02-29").is_ok());
    assert!(parse_date("2100-02-29").is_err());
    assert!(parse_date("2021-02-31").is_err());
    assert!(parse_date("2021-04-31").is_err());
    for bad in [
        "2021-2-3",
        "21-02-03",
        "2021/02/03",
        "2021-13-01",
        "2021-00-10",
        "2021-01-00",
        "03.02.2021",
        "",
    ] {
        assert!(parse_date(bad).is_err(), "{bad} accepted");
    }
}

#[test]
fn counts_and_effort_must_be_finite_and_in_range() {
    assert_eq!(parse_count("0"), Ok(0.0));
    assert_eq!(parse_count("2.5"), Ok(2.5));
    assert_eq!(parse_count("1e3"), Ok(1000.0));
    for bad in [
        "-3", "NaN", "nan", "inf", "-inf", "Infinity", "abc", "3,5", "", "1e400", "0x10",
    ] {
        assert!(parse_count(bad).is_err(), "{bad} accepted");
    }
    assert!(parse_count("-3").unwrap_err().contains("negative"));
    assert!(parse_count("3,5").unwrap_err().contains("decimal point"));
    assert!(parse_count("NaN").unwrap_err().contains("finite"));
    assert!(parse_count("many").unwrap_err().contains("not a number"));
    assert_eq!(parse_effort("3"), Ok(3.0));
    for bad in ["0", "-1", "", "NaN"] {
        assert!(parse_effort(bad).is_err(), "{bad} accepted");
    }
    assert_eq!(parse_coordinate("", "latitude", 90.0), Ok(None));
    assert!(parse_coordinate("90.5", "latitude", 90.0).is_err());
    assert!(parse_time("24:00").is_err());
    assert_eq!(parse_time("07:30"), Ok(Some("07:30".to_string())));
}

const SITES: &str =
    "code,name,latitude,longitude,habitat\nA,Alder,51.5,-3.1,riffle\nB,Birch,,,pool\n";
const PROTOCOLS: &str = "code,description,effort_unit\nkick,kick sample,minutes\n";
const TAXA: &str = "name,rank,parent,accepted\nBaetidae,family,,\nBaetis,genus,Baetidae,\nOld,genus,Baetidae,Baetis\n";

fn store() -> Store {
    let mut s = Store::open_in_memory().expect("in-memory store");
    let o = ImportOptions::default();
    import_bytes(&mut s, ImportKind::Sites, "sites.csv", SITES.as_bytes(), &o).expect("sites");
    import_bytes(
        &mut s,
        ImportKind::Protocols,
        "protocols.csv",
        PROTOCOLS.as_bytes(),
        &o,
    )
    .expect("protocols");
    import_bytes(&mut s, ImportKind::Taxa, "taxa.csv", TAXA.as_bytes(), &o).expect("taxa");
    s
}

fn invalid(r: Result<ImportReport>) -> (Vec<RowIssueView>, usize) {
    match r {
        Err(StoreError::Invalid { issues, total, .. }) => (
            issues
                .into_iter()
                .map(|i| (i.line, i.column, i.message))
                .collect(),
            total,
        ),
        other => panic!("expected an invalid-file error, got {other:?}"),
    }
}
type RowIssueView = (u64, String, String);

#[test]
fn records_form_events_with_derived_codes_and_attributes_are_kept() {
    let mut s = store();
    let rec = "site,date,protocol,effort,taxon,count\nA,2016-04-21,kick,3,Baetis,12\n\
               A,2016-04-21,kick,3,Old,1\nB,2016-04-22,kick,2,,\n";
    let r = import_bytes(
        &mut s,
        ImportKind::Records,
        "r.csv",
        rec.as_bytes(),
        &ImportOptions::default(),
    )
    .unwrap();
    assert_eq!((r.rows, r.written, r.counts), (3, 2, 2));
    let codes: Vec<String> = s
        .conn()
        .prepare("SELECT code FROM event ORDER BY code")
        .unwrap()
        .query_map([], |r| r.get(0))
        .unwrap()
        .collect::<rusqlite::Result<_>>()
        .unwrap();
    assert_eq!(codes, ["A-2016-04-21-kick-1", "B-2016-04-22-kick-1"]);
    let habitat: String = s
        .conn()
        .query_row(
            "SELECT value FROM site_attribute WHERE key = 'habitat' AND value = 'pool'",
            [],
            |r| r.get(0),
        )
        .unwrap();
    assert_eq!(habitat, "pool");
}

#[test]
fn a_failed_import_writes_nothing_and_reports_every_row() {
    let mut s = store();
    let before = s.content_dump().unwrap();
    let rec = "site,date,protocol,effort,taxon,count\nA,2016-04-21,kick,3,Baetis,12\n\
               A,2016-02-30,kick,3,Baetis,1\nA,2016-04-22,kick,3,Baetis,-1\nZ,2016-04-21,kick,3,Baetis,2\n";
    let (issues, total) = invalid(import_bytes(
        &mut s,
        ImportKind::Records,
        "r.csv",
        rec.as_bytes(),
        &ImportOptions::default(),
    ));
    assert_eq!(total, 3);
    assert_eq!((issues[0].0, issues[0].1.as_str()), (3, "date"));
    assert!(issues.iter().any(|i| i.0 == 4 && i.1 == "count"));
    assert!(issues.iter().any(|i| i.0 == 5 && i.1 == "site"));
    assert_eq!(s.content_dump().unwrap(), before);
}

#[test]
fn replace_overwrites_and_undo_puts_the_old_value_back() {
    let mut s = store();
    let o = ImportOptions::default();
    let first = "site,date,protocol,effort,taxon,count\nA,2016-04-21,kick,3,Baetis,12\n";
    import_bytes(&mut s, ImportKind::Records, "a.csv", first.as_bytes(), &o).unwrap();
    let after_first = s.content_dump().unwrap();
    let second = "site,date,protocol,effort,taxon,count\nA,2016-04-21,kick,3,Baetis,15\n";
    invalid(import_bytes(
        &mut s,
        ImportKind::Records,
        "b.csv",
        second.as_bytes(),
        &o,
    ));
    let replace = ImportOptions {
        replace: true,
        ..o.clone()
    };
    let r = import_bytes(
        &mut s,
        ImportKind::Records,
        "b.csv",
        second.as_bytes(),
        &replace,
    )
    .unwrap();
    assert_eq!(r.replaced, 1);
    let v: f64 = s
        .conn()
        .query_row("SELECT value FROM count", [], |r| r.get(0))
        .unwrap();
    assert_eq!(v, 15.0);
    // The first batch cannot go while the second overwrote its count.
    assert!(matches!(
        s.undo_batch(r.batch_id - 1),
        Err(StoreError::Refused(_))
    ));
    let u = s.undo_batch(r.batch_id).unwrap();
    assert_eq!(u.restored, 1);
    assert_eq!(s.content_dump().unwrap(), after_first);
}

#[test]
fn taxa_reject_loops_through_synonyms_and_ranks_out_of_order() {
    let mut s = Store::open_in_memory().unwrap();
    let o = ImportOptions::default();
    // Each link alone is allowed; together, roll-up from A never ends.
    let looped = "name,rank,parent,accepted\nA,genus,B,\nB,species,,A\nC,family,,\nD,genus,C,\n\
                  E,family,D,\n";
    let (issues, total) = invalid(import_bytes(
        &mut s,
        ImportKind::Taxa,
        "t.csv",
        looped.as_bytes(),
        &o,
    ));
    assert_eq!(total, 2, "{issues:?}");
    assert_eq!(
        issues[0],
        (
            2,
            "parent".to_string(),
            "parent loop: A → parent B → accepted A".to_string()
        )
    );
    assert_eq!(
        issues[1],
        (
            6,
            "parent".to_string(),
            "ranks out of order: E (family) → parent D (genus)".to_string()
        )
    );
    assert!(s.taxonomy().unwrap().nodes().next().is_none());
}

#[test]
fn taxa_reject_parent_loops_and_synonym_chains() {
    let mut s = Store::open_in_memory().unwrap();
    let o = ImportOptions::default();
    let looped = "name,rank,parent,accepted\nA,genus,C,\nB,genus,A,\nC,genus,B,\nD,genus,,\n";
    let (issues, total) = invalid(import_bytes(
        &mut s,
        ImportKind::Taxa,
        "t.csv",
        looped.as_bytes(),
        &o,
    ));
    assert_eq!(total, 1, "{issues:?}");
    assert_eq!((issues[0].0, issues[0].1.as_str()), (2, "parent"));
    let chain = "name,rank,parent,accepted\nA,genus,,\nB,genus,,A\nC,genus,,B\n";
    let (issues, _) = invalid(import_bytes(
        &mut s,
        ImportKind::Taxa,
        "t.csv",
        chain.as_bytes(),
        &o,
    ));
    assert_eq!((issues[0].0, issues[0].1.as_str()), (4, "accepted"));
    // The taxon table is empty: its header is followed directly by the next one.
    assert!(
        s.content_dump()
            .unwrap()
            .contains("## taxon\n## taxon_change\n")
    );
}

#[test]
fn identical_rows_are_left_alone_and_changed_ones_refused() {
    let mut s = store();
    let o = ImportOptions::default();
    let r = import_bytes(&mut s, ImportKind::Sites, "sites.csv", SITES.as_bytes(), &o).unwrap();
    assert_eq!((r.written, r.unchanged), (0, 2));
    let changed = SITES.replace("Birch", "Beech");
    let (issues, _) = invalid(import_bytes(
        &mut s,
        ImportKind::Sites,
        "sites.csv",
        changed.as_bytes(),
        &o,
    ));
    assert_eq!((issues[0].0, issues[0].1.as_str()), (3, "code"));
}

#[test]
fn large_files_write_every_count_across_insert_chunks() {
    // More rows than one multi-row INSERT holds, so full chunks and the remainder both run.
    let mut s = store();
    let mut text = String::from("site,date,protocol,effort,taxon,count,replicate\n");
    let mut want_sum = 0.0;
    let mut rows = 0;
    for rep in 1..=401 {
        for (k, taxon) in ["Baetidae", "Baetis", "Old"].iter().enumerate() {
            let v = (rep * 7 + k * 3) % 50;
            text.push_str(&format!("A,2016-04-21,kick,3,{taxon},{v},{rep}\n"));
            want_sum += v as f64;
            rows += 1;
        }
    }
    assert!(rows > sampling::COUNT_CHUNK * 2);
    let r = import_bytes(
        &mut s,
        ImportKind::Records,
        "big.csv",
        text.as_bytes(),
        &ImportOptions::default(),
    )
    .unwrap();
    assert_eq!((r.rows, r.written, r.counts), (rows, 401, rows));
    let (n, sum): (i64, f64) = s
        .conn()
        .query_row("SELECT COUNT(*), SUM(value) FROM count", [], |r| {
            Ok((r.get(0)?, r.get(1)?))
        })
        .unwrap();
    assert_eq!(n as usize, rows);
    assert_eq!(sum, want_sum);
}

#[test]
fn quoted_fields_may_hold_the_delimiter() {
    let mut s = store();
    let sites = "code,name,latitude,longitude\nC,\"Bridge, upstream\",,\n";
    let r = import_bytes(
        &mut s,
        ImportKind::Sites,
        "s.csv",
        sites.as_bytes(),
        &ImportOptions::default(),
    )
    .unwrap();
    assert_eq!(r.written, 1);
    let name: String = s
        .conn()
        .query_row("SELECT name FROM site WHERE code = 'C'", [], |r| r.get(0))
        .unwrap();
    assert_eq!(name, "Bridge, upstream");
}
