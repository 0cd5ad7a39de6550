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
        s.undo_batch(r.batch() - 1),
        Err(StoreError::Refused(_))
    ));
    let u = s.undo_batch(r.batch()).unwrap();
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

/// Import `text` as a records file with default options.
fn records(s: &mut Store, text: &str) -> Result<ImportReport> {
    import_bytes(
        s,
        ImportKind::Records,
        "r.csv",
        text.as_bytes(),
        &ImportOptions::default(),
    )
}

/// Import `text` as `kind`, expect it refused, check the store is unchanged,
/// and return the problems.
fn refused(s: &mut Store, kind: ImportKind, text: &str) -> Vec<RowIssueView> {
    let before = s.content_dump().unwrap();
    let (issues, _) = invalid(import_bytes(
        s,
        kind,
        "f.csv",
        text.as_bytes(),
        &ImportOptions::default(),
    ));
    assert_eq!(s.content_dump().unwrap(), before, "a refused import wrote");
    issues
}

#[test]
fn effort_below_the_stated_minimum_is_refused() {
    // IEEE 754 binary64: 5e-324 is the smallest subnormal, 2.2250738585072014e-308
    // the smallest normal number; both are far below the minimum of 1e-9.
    assert_eq!(MIN_EFFORT, 1e-9);
    assert_eq!(parse_effort("1e-9"), Ok(1e-9));
    assert_eq!(parse_effort("1e300"), Ok(1e300));
    for bad in ["9.99e-10", "1e-300", "5e-324", "2.2250738585072014e-308"] {
        let m = parse_effort(bad).unwrap_err();
        assert!(m.contains("smallest effort, 1e-9"), "{bad}: {m}");
    }
    assert!(parse_effort("1.1e300").unwrap_err().contains("too large"));
    assert!(parse_effort("0").unwrap_err().contains("not positive"));
    let mut s = store();
    let events =
        "code,site,date,protocol,effort\nE1,A,2016-04-21,kick,3\nE2,A,2016-04-22,kick,1e-12\n";
    let issues = refused(&mut s, ImportKind::Events, events);
    assert_eq!(issues.len(), 1);
    assert_eq!((issues[0].0, issues[0].1.as_str()), (3, "effort"));
    assert_eq!(
        issues[0].2,
        "'1e-12' is below the smallest effort, 1e-9 in the protocol's unit; is it a typing \
         error? (a real effort this small needs a protocol with a smaller unit)"
    );
    let rec = "site,date,protocol,effort,taxon,count\nA,2016-04-21,kick,5e-324,Baetis,1\n";
    let issues = refused(&mut s, ImportKind::Records, rec);
    assert_eq!((issues[0].0, issues[0].1.as_str()), (2, "effort"));
}

#[test]
fn counts_are_whole_up_to_2_pow_53_or_fractions_up_to_1e15() {
    // IEEE 754 binary64 has a 53-bit significand: every integer up to
    // 2^53 = 9007199254740992 is exact, 2^53 + 1 is not (it reads as 2^53).
    assert_eq!(MAX_EXACT_COUNT, 9_007_199_254_740_992);
    assert_eq!("9007199254740993".parse::<f64>(), Ok(9007199254740992.0));
    assert_eq!(parse_count("9007199254740992"), Ok(9007199254740992.0));
    assert_eq!(parse_count("90071992547409920e-1"), Ok(9007199254740992.0));
    assert_eq!(parse_count("9007199254740991.000"), Ok(9007199254740991.0));
    assert_eq!(parse_count("2e15"), Ok(2e15));
    assert_eq!(parse_count("1e15"), Ok(1e15));
    assert_eq!(parse_count("0.25"), Ok(0.25));
    // -0 is stored as 0. IEEE 754: -0 == 0 but its sign bit is set.
    assert!(parse_count("-0").unwrap().is_sign_positive());
    for inexact in [
        "9007199254740993",
        "9.007199254740993e15",
        "9007199254740993.0",
        "12345678901234567890",
    ] {
        assert_eq!(
            parse_count(inexact),
            Err(format!(
                "'{inexact}' cannot be stored exactly (counts above 2^53 lose digits); a count \
                 is a whole number up to 9007199254740992 (2^53) or a number with a fraction up \
                 to 1e15"
            ))
        );
    }
    // 2^54 and 1e16 are binary64 values, but above the stated range.
    for big in ["18014398509481984", "1e16", "1e300", "1e39"] {
        assert!(
            parse_count(big)
                .unwrap_err()
                .starts_with(&format!("'{big}' is too large; ")),
            "{big}"
        );
    }
    assert_eq!(
        parse_count("1e400"),
        Err("'1e400' is too large; expected a count ≥ 0".to_string())
    );
    // A fraction is refused above 1e15, also where it rounds to a whole number.
    for frac in [
        "1000000000000000.5",
        "9007199254740992.4",
        "4503599627370496.5",
    ] {
        assert!(
            parse_count(frac)
                .unwrap_err()
                .contains("too large for a count with a fraction"),
            "{frac}"
        );
    }
    let mut s = store();
    let rec = "site,date,protocol,effort,taxon,count\nA,2016-04-21,kick,3,Baetis,1\n\
               A,2016-04-21,kick,3,Old,9007199254740993\n";
    let issues = refused(&mut s, ImportKind::Records, rec);
    assert_eq!(issues.len(), 1);
    assert_eq!((issues[0].0, issues[0].1.as_str()), (3, "count"));
    assert!(issues[0].2.contains("cannot be stored exactly"));
    // 2^53 itself goes in and comes back exactly.
    let ok = "site,date,protocol,effort,taxon,count\nA,2016-04-21,kick,3,Baetis,9007199254740992\n";
    records(&mut s, ok).unwrap();
    let v: f64 = s
        .conn()
        .query_row("SELECT value FROM count", [], |r| r.get(0))
        .unwrap();
    assert_eq!(v, 9007199254740992.0);
}

#[test]
fn names_are_stored_in_nfc_so_composed_and_decomposed_are_one() {
    // Unicode Standard Annex #15: U+0065 U+0301 (e + combining acute) and U+00E9
    // are canonically equivalent, and U+00E9 is their Normalization Form C.
    let mut s = store();
    let o = ImportOptions::default();
    let sites = "code,name,latitude,longitude,ve\u{301}g\nCafe\u{301},Mill,,,moss\n";
    import_bytes(&mut s, ImportKind::Sites, "s.csv", sites.as_bytes(), &o).unwrap();
    let (code, key): (String, String) = s
        .conn()
        .query_row(
            "SELECT s.code, a.key FROM site s JOIN site_attribute a ON a.site_id = s.id \
             WHERE a.value = 'moss'",
            [],
            |r| Ok((r.get(0)?, r.get(1)?)),
        )
        .unwrap();
    assert_eq!((code.as_str(), key.as_str()), ("Caf\u{e9}", "v\u{e9}g"));
    // The composed spelling finds the site stored from the decomposed one.
    let rec = "site,date,protocol,effort,taxon,count\nCaf\u{e9},2016-04-21,kick,3,Baetis,2\n";
    assert_eq!(records(&mut s, rec).unwrap().written, 1);
    // Both spellings in one file are one code, listed twice.
    let twice = "code,name,latitude,longitude\nX\u{e9},a,,\nXe\u{301},b,,\n";
    let issues = refused(&mut s, ImportKind::Sites, twice);
    assert_eq!(
        issues,
        [(
            3,
            "code".to_string(),
            "site 'X\u{e9}' is listed twice (first on line 2)".to_string()
        )]
    );
}

#[test]
fn control_zero_width_and_bidirectional_characters_are_refused() {
    // The characters are named as in the Unicode Standard (U+202E RIGHT-TO-LEFT
    // OVERRIDE is one of the explicit formatting characters of Unicode Standard
    // Annex #9); refusing them in names: common practice, no source.
    let mut s = store();
    let issues = refused(
        &mut s,
        ImportKind::Sites,
        "code,name,latitude,longitude\nC,Mil\u{202E}l pool,,\n",
    );
    assert_eq!(
        issues,
        [(
            2,
            "name".to_string(),
            "contains U+202E (right-to-left override) at character 4; names may not hold \
             control, zero-width or bidirectional characters"
                .to_string()
        )]
    );
    for (field, code, name, at) in [
        ("Bae\u{200B}tis", "U+200B", "zero width space", 4),
        ("\u{2066}Baetis", "U+2066", "left-to-right isolate", 1),
        ("Baetis\u{061C}", "U+061C", "arabic letter mark", 7),
        ("\"Bae\ttis\"", "U+0009", "tab", 4),
        ("Bae\u{90}tis", "U+0090", "control character", 4),
        ("Ba\u{FEFF}etis", "U+FEFF", "zero width no-break space", 3),
    ] {
        let rec = format!("site,date,protocol,effort,taxon,count\nA,2016-04-21,kick,3,{field},1\n");
        let issues = refused(&mut s, ImportKind::Records, &rec);
        assert_eq!(issues.len(), 1, "{field:?}: {issues:?}");
        assert_eq!((issues[0].0, issues[0].1.as_str()), (2, "taxon"));
        assert!(
            issues[0]
                .2
                .starts_with(&format!("contains {code} ({name}) at character {at}; ")),
            "{field:?}: {}",
            issues[0].2
        );
    }
    // In the header (an attribute key), on line 1 and by position.
    let issues = refused(
        &mut s,
        ImportKind::Sites,
        "code,name,latitude,longitude,hab\u{200D}itat\nC,c,,,x\n",
    );
    assert_eq!((issues[0].0, issues[0].1.as_str()), (1, "#5"));
    assert!(
        issues[0]
            .2
            .starts_with("the column name contains U+200D (zero width joiner)")
    );
    // Notes follow the same rule (a line feed inside quotes too).
    let events = "code,site,date,protocol,effort,notes\nE1,A,2016-04-21,kick,3,\"high\nwater\"\n";
    let issues = refused(&mut s, ImportKind::Events, events);
    assert_eq!((issues[0].0, issues[0].1.as_str()), (2, "notes"));
    assert!(
        issues[0]
            .2
            .starts_with("contains U+000A (line feed) at character 5; notes")
    );
}

#[test]
fn names_and_notes_are_limited_in_length() {
    // The limits are the project's choice (common practice, no source); they are
    // counted in characters of the NFC form that is stored.
    assert_eq!((MAX_NAME_CHARS, MAX_NOTES_CHARS), (200, 2000));
    let mut s = store();
    let sites = |name: &str| format!("code,name,latitude,longitude\nC,{name},,\n");
    // 200 decomposed letters are 400 characters as written and 200 in NFC.
    let ok = "e\u{301}".repeat(200);
    let o = ImportOptions::default();
    import_bytes(
        &mut s,
        ImportKind::Sites,
        "s.csv",
        sites(&ok).as_bytes(),
        &o,
    )
    .unwrap();
    let long = "x".repeat(201);
    let issues = refused(&mut s, ImportKind::Sites, &sites(&long).replace("C,", "D,"));
    assert_eq!(
        issues,
        [(
            2,
            "name".to_string(),
            format!(
                "'{}…' is 201 characters long; names hold at most 200 characters",
                "x".repeat(77)
            )
        )]
    );
    let events = |notes: &str| {
        format!("code,site,date,protocol,effort,notes\nE1,A,2016-04-21,kick,3,{notes}\n")
    };
    let issues = refused(&mut s, ImportKind::Events, &events(&"n".repeat(2001)));
    assert_eq!((issues[0].0, issues[0].1.as_str()), (2, "notes"));
    assert!(
        issues[0]
            .2
            .ends_with("is 2001 characters long; notes hold at most 2000 characters")
    );
    let r = import_bytes(
        &mut s,
        ImportKind::Events,
        "e.csv",
        events(&"n".repeat(2000)).as_bytes(),
        &o,
    )
    .unwrap();
    assert_eq!(r.written, 1);
}

#[test]
fn messages_quote_at_most_80_characters_of_a_value() {
    // The limit of 80 characters: common practice, no source.
    assert_eq!(MAX_QUOTED_CHARS, 80);
    let eighty = "é".repeat(80);
    assert_eq!(crate::store::sheet::shorten(&eighty), eighty.as_str());
    assert_eq!(
        crate::store::sheet::shorten(&"é".repeat(81)),
        format!("{}…", "é".repeat(77))
    );
    let mib = "9".repeat(1 << 20);
    for m in [
        parse_date(&mib).unwrap_err(),
        parse_time(&mib).unwrap_err(),
        parse_replicate(&mib).unwrap_err(),
        parse_count(&format!("{mib}x")).unwrap_err(),
        parse_effort(&format!("1e{mib}")).unwrap_err(),
        parse_coordinate(&mib, "latitude", 90.0).unwrap_err(),
    ] {
        assert!(m.chars().count() < 250, "{} characters", m.len());
        assert!(
            m.contains(&format!("'{}…'", &mib[..77])) || m.contains("'1e"),
            "{m}"
        );
    }
    // A 1 MiB name in a file is refused without being echoed whole.
    let mut s = store();
    let file = format!(
        "code,name,latitude,longitude\nC,{},,\n",
        "n".repeat(1 << 20)
    );
    let issues = refused(&mut s, ImportKind::Sites, &file);
    assert_eq!((issues[0].0, issues[0].1.as_str()), (2, "name"));
    assert!(issues[0].2.len() < 200, "{}", issues[0].2.len());
}

#[test]
fn nothing_found_contradicts_counts_of_the_same_event() {
    // docs/data-model.md, "Tables": an event where nothing was found is one row
    // with empty taxon and count; with counts it is not such an event.
    let mut s = store();
    let rec = "site,date,protocol,effort,taxon,count\nB,2016-04-21,kick,3,,\n\
               A,2016-04-21,kick,3,,\nA,2016-04-21,kick,3,Baetis,2\nA,2016-04-21,kick,3,Old,1\n";
    let issues = refused(&mut s, ImportKind::Records, rec);
    assert_eq!(
        issues,
        [(
            3,
            "taxon".to_string(),
            "event A 2016-04-21 kick 1 has counts on lines 4, 5; a row saying nothing was found \
             contradicts them"
                .to_string()
        )]
    );
    // Counts already stored for the event contradict a later "nothing found".
    let counts = "site,date,protocol,effort,taxon,count\nA,2016-04-21,kick,3,Baetis,2\n";
    let batch = records(&mut s, counts).unwrap().batch();
    let issues = refused(
        &mut s,
        ImportKind::Records,
        "site,date,protocol,effort,taxon,count\nA,2016-04-22,kick,3,,\nA,2016-04-21,kick,3,,\n",
    );
    assert_eq!(
        issues,
        [(
            3,
            "taxon".to_string(),
            format!(
                "event A 2016-04-21 kick 1 (stored as 'A-2016-04-21-kick-1') has 1 count(s) \
                 stored by batch {batch}; a row saying nothing was found contradicts them"
            )
        )]
    );
    // A stored event without counts may be said to have had nothing found.
    let empty = "site,date,protocol,effort,taxon,count\nB,2016-04-22,kick,2,,\n";
    records(&mut s, empty).unwrap();
    assert_eq!(records(&mut s, empty).unwrap().written, 0);
}

#[test]
fn cr_only_line_ends_give_the_right_line_numbers() {
    // Lone CR ends lines in files saved by the classic Mac OS; RFC 4180 asks for
    // CRLF. Reading all three: common practice, no source.
    let mut s = store();
    let rec = "site,date,protocol,effort,taxon,count\rA,2016-04-21,kick,3,Baetis,12\r\
               A,2016-02-30,kick,3,Old,1\r\rA,2016-04-21,kick,3,Baetidae,-1\r";
    let issues = refused(&mut s, ImportKind::Records, rec);
    assert_eq!(
        issues
            .iter()
            .map(|i| (i.0, i.1.as_str()))
            .collect::<Vec<_>>(),
        [(3, "date"), (5, "count")]
    );
    // Mixed line ends count one line each.
    let mixed = "site,date,protocol,effort,taxon,count\r\nA,2016-04-21,kick,3,Baetis,12\r\
                 A,2016-04-21,kick,3,Old,1\nA,2016-04-21,kick,3,Baetis,2\r\n";
    let issues = refused(&mut s, ImportKind::Records, mixed);
    assert_eq!((issues[0].0, issues[0].1.as_str()), (4, "taxon"));
    let ok = "site,date,protocol,effort,taxon,count\rA,2016-04-21,kick,3,Baetis,12\r\
              A,2016-04-21,kick,3,Old,1\r";
    assert_eq!(records(&mut s, ok).unwrap().counts, 2);
}

#[test]
fn files_above_the_size_limit_are_refused_before_reading() {
    // 2 GiB: the project's choice (common practice, no source).
    assert_eq!(MAX_FILE_BYTES, 2_147_483_648);
    let mut s = store();
    let before = s.content_dump().unwrap();
    let file = tempfile::NamedTempFile::new().unwrap();
    // A sparse file: its size is in the metadata, its bytes are never read.
    file.as_file().set_len(MAX_FILE_BYTES + 1).unwrap();
    let r = import_path(
        &mut s,
        ImportKind::Records,
        file.path(),
        &ImportOptions::default(),
    );
    match r {
        Err(StoreError::Refused(m)) => {
            assert!(
                m.contains("is 2147483649 bytes, more than the 2147483648 bytes (2 GiB)"),
                "{m}"
            );
            assert!(m.contains("split it into smaller files"), "{m}");
        }
        other => panic!("expected a refusal, got {other:?}"),
    }
    assert_eq!(s.content_dump().unwrap(), before);
    // At the limit's other side a small file is read as usual.
    file.as_file().set_len(0).unwrap();
    std::fs::write(
        file.path(),
        "site,date,protocol,effort,taxon,count\nA,2016-04-21,kick,3,Baetis,12\n",
    )
    .unwrap();
    let r = import_path(
        &mut s,
        ImportKind::Records,
        file.path(),
        &ImportOptions::default(),
    )
    .unwrap();
    assert_eq!(r.counts, 1);
}

/// A small valid records file for the fuzz test.
const FUZZ_BASE: &str = "site,date,protocol,effort,taxon,count,replicate\n\
                         A,2016-04-21,kick,3,Baetis,12,1\nA,2016-04-21,kick,3,Old,1.5,1\n\
                         B,2016-04-22,kick,2,,,1\n";

proptest::proptest! {
    #![proptest_config(proptest::prelude::ProptestConfig::with_cases(64))]

    /// Mutated bytes of a valid records file: the import succeeds or is refused
    /// as invalid, never panics, and a refusal leaves the store as it was.
    /// Fuzzing with a fixed budget: common practice, no source.
    #[test]
    fn mutated_records_files_import_or_fail_cleanly(
        edits in proptest::collection::vec(
            (
                proptest::prelude::any::<proptest::sample::Index>(),
                proptest::prop_oneof![
                    proptest::prelude::any::<u8>(),
                    proptest::sample::select(b",;\t\r\n\" .-e0123456789\xcc\x81\xe2\x80\xae".to_vec()),
                ],
                0u8..3,
            ),
            1..12,
        ),
        create_missing in proptest::prelude::any::<bool>(),
    ) {
        let mut bytes = FUZZ_BASE.as_bytes().to_vec();
        for (at, byte, op) in edits {
            match op {
                0 if !bytes.is_empty() => {
                    let i = at.index(bytes.len());
                    bytes[i] = byte;
                }
                1 => {
                    let i = at.index(bytes.len() + 1);
                    bytes.insert(i, byte);
                }
                _ if !bytes.is_empty() => {
                    bytes.remove(at.index(bytes.len()));
                }
                _ => {}
            }
        }
        let mut s = store();
        let before = s.content_dump().unwrap();
        let opts = ImportOptions { create_missing, ..ImportOptions::default() };
        match import_bytes(&mut s, ImportKind::Records, "fuzz.csv", &bytes, &opts) {
            Ok(_) => {}
            Err(StoreError::Invalid { issues, total, .. }) => {
                proptest::prop_assert!(total >= issues.len() && !issues.is_empty());
                proptest::prop_assert_eq!(s.content_dump().unwrap(), before);
            }
            Err(other) => proptest::prop_assert!(false, "unexpected error {other:?}"),
        }
    }
}

/// Import `text` as `kind` as a cumulative file (`skip_existing`).
fn cumulative(s: &mut Store, kind: ImportKind, text: &str) -> Result<ImportReport> {
    let o = ImportOptions {
        skip_existing: true,
        ..ImportOptions::default()
    };
    import_bytes(s, kind, "season.csv", text.as_bytes(), &o)
}

/// The stored counts as (event code, taxon name, value), sorted.
fn stored_counts(s: &Store) -> Vec<(String, String, f64)> {
    s.conn()
        .prepare(
            "SELECT e.code, t.name, c.value FROM count c JOIN event e ON e.id = c.event_id \
             JOIN taxon t ON t.id = c.taxon_id ORDER BY 1, 2",
        )
        .unwrap()
        .query_map([], |r| Ok((r.get(0)?, r.get(1)?, r.get(2)?)))
        .unwrap()
        .collect::<rusqlite::Result<_>>()
        .unwrap()
}

const SEASON: &str = "site,date,protocol,effort,taxon,count\n\
                      A,2016-04-21,kick,3,Baetis,12\nA,2016-04-21,kick,3,Old,1\n\
                      B,2016-04-22,kick,2,,\n";

#[test]
fn a_growing_records_file_brings_only_its_new_rows() {
    let mut s = store();
    let first = cumulative(&mut s, ImportKind::Records, SEASON).unwrap();
    assert_eq!((first.written, first.counts, first.unchanged), (2, 2, 0));
    let after_first = s.content_dump().unwrap();
    // The same season later: counts written differently ("12.0", "1e0") are
    // the same values; one taxon added to a stored event, one new event.
    let grown = "site,date,protocol,effort,taxon,count\n\
                 A,2016-04-21,kick,3,Baetis,12.0\nA,2016-04-21,kick,3,Old,1e0\n\
                 B,2016-04-22,kick,2,,\nA,2016-04-21,kick,3,Baetidae,4\n\
                 A,2016-05-19,kick,3,Baetis,7\n";
    let second = cumulative(&mut s, ImportKind::Records, grown).unwrap();
    assert_eq!(
        (
            second.rows,
            second.unchanged,
            second.written,
            second.counts,
            second.counts_on_stored_events
        ),
        (5, 3, 1, 2, 1)
    );
    let mut expected = vec![
        (
            "A-2016-04-21-kick-1".to_string(),
            "Baetidae".to_string(),
            4.0,
        ),
        (
            "A-2016-04-21-kick-1".to_string(),
            "Baetis".to_string(),
            12.0,
        ),
        ("A-2016-04-21-kick-1".to_string(), "Old".to_string(), 1.0),
        ("A-2016-05-19-kick-1".to_string(), "Baetis".to_string(), 7.0),
    ];
    expected.sort_by(|a, b| a.partial_cmp(b).unwrap());
    assert_eq!(stored_counts(&s), expected);
    // Twice is once: the second time nothing is new and no batch is recorded.
    let after_second = s.content_dump().unwrap();
    let again = cumulative(&mut s, ImportKind::Records, grown).unwrap();
    assert_eq!((again.batch_id, again.unchanged), (None, 5));
    assert_eq!(s.content_dump().unwrap(), after_second);
    // Undoing the second batch removes its rows only: the first file's store.
    let u = s.undo_batch(second.batch()).unwrap();
    assert_eq!((u.removed.events, u.removed.counts), (1, 2));
    assert_eq!(s.content_dump().unwrap(), after_first);
}

#[test]
fn a_cumulative_file_contradicting_the_store_is_refused_whole() {
    let mut s = store();
    cumulative(&mut s, ImportKind::Records, SEASON).unwrap();
    let before = s.content_dump().unwrap();
    // Line 2 has another count for a stored taxon, line 3 a new row (which
    // alone would import), line 4 another effort for the stored event B.
    let text = "site,date,protocol,effort,taxon,count\n\
                A,2016-04-21,kick,3,Baetis,13\nA,2016-06-01,kick,3,Baetis,2\n\
                B,2016-04-22,kick,5,Baetis,1\n";
    let (issues, _) = invalid(cumulative(&mut s, ImportKind::Records, text));
    let at: Vec<(u64, &str)> = issues.iter().map(|i| (i.0, i.1.as_str())).collect();
    assert_eq!(at, [(2, "count"), (4, "effort")], "{issues:?}");
    assert!(issues[0].2.contains("with count 12"), "{}", issues[0].2);
    assert_eq!(s.content_dump().unwrap(), before);
    // A time of day the stored event lacks contradicts it too (line 3).
    let text = "site,date,protocol,effort,taxon,count,time\n\
                A,2016-04-21,kick,3,Baetis,12,\nA,2016-04-21,kick,3,Old,1,09:30\n";
    let (issues, _) = invalid(cumulative(&mut s, ImportKind::Records, text));
    assert_eq!(
        (issues[0].0, issues[0].1.as_str()),
        (3, "time"),
        "{issues:?}"
    );
    assert_eq!(s.content_dump().unwrap(), before);
    // The stored event B (nothing found) gains a count: a new row, allowed.
    let text = "site,date,protocol,effort,taxon,count\nB,2016-04-22,kick,2,Baetis,1\n";
    let r = cumulative(&mut s, ImportKind::Records, text).unwrap();
    assert_eq!((r.written, r.counts_on_stored_events), (0, 1));
}

#[test]
fn without_skip_existing_a_stored_count_is_refused_pointing_to_it() {
    let mut s = store();
    records(&mut s, SEASON).unwrap();
    let issues = refused(&mut s, ImportKind::Records, SEASON);
    assert_eq!((issues[0].0, issues[0].1.as_str()), (2, "taxon"));
    assert!(issues[0].2.contains("--skip-existing"), "{}", issues[0].2);
}

#[test]
fn cumulative_events_and_counts_files_skip_identical_rows_and_name_the_contradiction() {
    let mut s = store();
    let events = "code,site,date,protocol,effort\nE1,A,2016-06-21,kick,3\n";
    cumulative(&mut s, ImportKind::Events, events).unwrap();
    let grown =
        "code,site,date,protocol,effort\nE1,A,2016-06-21,kick,3.0\nE2,B,2016-06-22,kick,3\n";
    let r = cumulative(&mut s, ImportKind::Events, grown).unwrap();
    assert_eq!((r.written, r.unchanged), (1, 1));
    let before = s.content_dump().unwrap();
    let changed =
        "code,site,date,protocol,effort\nE1,A,2016-06-21,kick,2\nE2,A,2016-06-22,kick,3\n";
    let (issues, _) = invalid(cumulative(&mut s, ImportKind::Events, changed));
    let at: Vec<(u64, &str)> = issues.iter().map(|i| (i.0, i.1.as_str())).collect();
    assert_eq!(at, [(2, "effort"), (3, "site")]);
    assert_eq!(s.content_dump().unwrap(), before);

    let counts = "event,taxon,count\nE1,Baetis,3\n";
    cumulative(&mut s, ImportKind::Counts, counts).unwrap();
    let grown = "event,taxon,count\nE1,Baetis,3\nE2,Baetis,1\n";
    let r = cumulative(&mut s, ImportKind::Counts, grown).unwrap();
    assert_eq!((r.counts, r.unchanged), (1, 1));
    let before = s.content_dump().unwrap();
    let (issues, _) = invalid(cumulative(
        &mut s,
        ImportKind::Counts,
        "event,taxon,count\nE1,Baetis,3\nE2,Baetis,2\nE2,Old,1\n",
    ));
    assert_eq!(issues.len(), 1);
    assert_eq!((issues[0].0, issues[0].1.as_str()), (3, "count"));
    assert_eq!(s.content_dump().unwrap(), before);
    let r = cumulative(&mut s, ImportKind::Counts, grown).unwrap();
    assert_eq!(r.batch_id, None);
    assert_eq!(s.content_dump().unwrap(), before);
}

/// docs/taxonomy.md, "Field codes": codes in a taxa file, and records using them.
const CODED_TAXA: &str = "name,rank,parent,accepted,code\n\
                          Baetidae,family,,,\nBaetis,genus,Baetidae,,bae\nOld,genus,Baetidae,Baetis,OL\n";

#[test]
fn taxa_files_bring_codes_that_records_and_counts_accept_for_names() {
    let mut s = store();
    let o = ImportOptions::default();
    // The stored taxa again, two of them with codes: only the codes are new.
    let r = import_bytes(
        &mut s,
        ImportKind::Taxa,
        "codes.csv",
        CODED_TAXA.as_bytes(),
        &o,
    )
    .unwrap();
    assert_eq!((r.written, r.codes, r.unchanged), (0, 2, 1));
    let by_name = "site,date,protocol,effort,taxon,count\n\
                   A,2016-04-21,kick,3,Baetis,12\nA,2016-04-21,kick,3,Old,1\n";
    let by_code = "site,date,protocol,effort,taxon,count\n\
                   A,2016-04-21,kick,3,BAE,12\nA,2016-04-21,kick,3,ol,1\n";
    let mut named = s.content_dump().unwrap();
    let b = import_bytes(&mut s, ImportKind::Records, "r.csv", by_name.as_bytes(), &o).unwrap();
    named.push_str(
        &stored_counts(&s)
            .iter()
            .map(|c| format!("{c:?}\n"))
            .collect::<String>(),
    );
    s.undo_batch(b.batch()).unwrap();
    let mut coded = s.content_dump().unwrap();
    import_bytes(&mut s, ImportKind::Records, "r.csv", by_code.as_bytes(), &o).unwrap();
    coded.push_str(
        &stored_counts(&s)
            .iter()
            .map(|c| format!("{c:?}\n"))
            .collect::<String>(),
    );
    assert_eq!(coded, named);
    // A counts file too; a code that matches nothing is an unknown taxon.
    let counts = "event,taxon,count\nA-2016-04-21-kick-1,bae,12\nA-2016-04-21-kick-1,BAEX,1\n";
    let (issues, _) = invalid(import_bytes(
        &mut s,
        ImportKind::Counts,
        "c.csv",
        counts.as_bytes(),
        &o,
    ));
    assert_eq!(issues.len(), 2, "{issues:?}");
    assert!(issues[0].2.contains("already stored"), "{issues:?}");
    assert_eq!((issues[1].0, issues[1].1.as_str()), (3, "taxon"));
    assert!(
        issues[1].2.starts_with("taxon 'BAEX' is not in the store"),
        "{issues:?}"
    );
}

#[test]
fn taxa_files_refuse_bad_duplicate_and_ambiguous_codes_with_line_and_column() {
    let mut s = store();
    let o = ImportOptions::default();
    import_bytes(
        &mut s,
        ImportKind::Taxa,
        "codes.csv",
        CODED_TAXA.as_bytes(),
        &o,
    )
    .unwrap();
    let before = s.content_dump().unwrap();
    let text = "name,rank,parent,accepted,code\n\
                A,,,,TOOLONG\nB,,,,B.R\nC,,,,cc\nD,,,,CC\nE,,,,BAE\nF,,,,BAETIS\nbae,,,,\nG,,OL,,\n";
    let (issues, total) = invalid(import_bytes(
        &mut s,
        ImportKind::Taxa,
        "bad.csv",
        text.as_bytes(),
        &o,
    ));
    let at: Vec<(u64, &str)> = issues.iter().map(|i| (i.0, i.1.as_str())).collect();
    assert_eq!(
        at,
        [
            (2, "code"),
            (3, "code"),
            (5, "code"),
            (6, "code"),
            (7, "code"),
            (8, "name"),
            (9, "parent"),
        ],
        "{issues:?}"
    );
    assert_eq!(total, 7);
    assert!(issues[0].2.contains("7 character(s) long"), "{issues:?}");
    assert!(issues[1].2.contains("holds '.'"), "{issues:?}");
    assert!(
        issues[2]
            .2
            .contains("field code 'CC' is listed twice (first on line 4)"),
        "{issues:?}"
    );
    assert!(
        issues[3]
            .2
            .contains("BAE is the code of 'Baetis' already (batch 4)"),
        "{issues:?}"
    );
    assert!(
        issues[4]
            .2
            .contains("BAETIS reads like the taxon name 'Baetis'"),
        "{issues:?}"
    );
    assert!(
        issues[5]
            .2
            .contains("'bae' is the field code BAE of 'Baetis'"),
        "{issues:?}"
    );
    assert!(
        issues[6]
            .2
            .contains("'OL' is a field code of 'Old'; this column takes names (write 'Old')"),
        "{issues:?}"
    );
    assert_eq!(s.content_dump().unwrap(), before);
}

#[test]
fn undoing_a_taxa_batch_removes_its_codes_and_waits_for_codes_added_later() {
    let mut s = store();
    let o = ImportOptions::default();
    let before = s.content_dump().unwrap();
    let text = "name,rank,parent,accepted,code\nHeptageniidae,family,,,HEP\nEcdyonurus,genus,Heptageniidae,,\n";
    let r = import_bytes(&mut s, ImportKind::Taxa, "h.csv", text.as_bytes(), &o).unwrap();
    assert_eq!((r.written, r.codes), (2, 1));
    s.add_taxon_code("Ecdyonurus", "ECD").unwrap();
    let m = match s.undo_batch(r.batch()) {
        Err(StoreError::Refused(m)) => m,
        other => panic!("expected a refusal, got {other:?}"),
    };
    assert!(
        m.contains("field code(s) ECD (Ecdyonurus) were added with `tally taxa code`"),
        "{m}"
    );
    s.remove_taxon_code("Ecdyonurus", "ecd").unwrap();
    let u = s.undo_batch(r.batch()).unwrap();
    assert_eq!((u.removed.taxa, u.removed.codes), (2, 1));
    assert_eq!(s.content_dump().unwrap(), before);
}
