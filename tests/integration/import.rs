//! Import end to end: every faulty file in tests/bad-input/ is refused precisely
//! and leaves the store unchanged; good files in every accepted dialect import;
//! batches list and undo; the summary agrees with numbers counted here from the
//! CSV text itself.
use std::collections::{BTreeMap, BTreeSet};

use crate::util::{TestEnv, root};

/// A store holding the base fixtures (tests/fixtures/base/), as listed in
/// tests/bad-input/README.md.
fn base_store() -> TestEnv {
    let env = TestEnv::new();
    env.stdout(["init"]);
    let base = root().join("tests/fixtures/base");
    for kind in ["sites", "protocols", "taxa", "events", "counts"] {
        let file = base.join(format!("{kind}.csv"));
        let (code, _, err) = env.run([
            std::ffi::OsStr::new("import"),
            kind.as_ref(),
            file.as_os_str(),
        ]);
        assert_eq!(code, 0, "base import of {kind} failed: {err}");
    }
    env
}

/// (file, line, column) rows of the README table.
fn expectations() -> Vec<(String, String, String)> {
    let readme = std::fs::read_to_string(root().join("tests/bad-input/README.md")).expect("README");
    readme
        .lines()
        .filter(|l| l.starts_with("| ") && l.contains(".csv"))
        .map(|l| {
            let cells: Vec<&str> = l.trim_matches('|').split('|').map(str::trim).collect();
            (
                cells[0].to_string(),
                cells[1].to_string(),
                cells[2].to_string(),
            )
        })
        .collect()
}

#[test]
fn every_bad_file_is_refused_with_line_and_column_and_changes_nothing() {
    let expected = expectations();
    let dir = root().join("tests/bad-input");
    let on_disk: BTreeSet<String> = std::fs::read_dir(&dir)
        .expect("bad-input folder")
        .map(|e| e.expect("entry").file_name().to_string_lossy().into_owned())
        .filter(|n| n.ends_with(".csv"))
        .collect();
    let listed: BTreeSet<String> = expected.iter().map(|e| e.0.clone()).collect();
    assert_eq!(
        on_disk, listed,
        "tests/bad-input/README.md must list every file, and only those"
    );
    assert!(expected.len() >= 25, "at least 25 faulty files");

    let env = base_store();
    let before = env.dump();
    let mut failures = Vec::new();
    for (file, line, column) in &expected {
        let kind = file.split('-').next().expect("kind prefix");
        let path = dir.join(file);
        let (code, _, err) = env.run([
            std::ffi::OsStr::new("import"),
            kind.as_ref(),
            path.as_os_str(),
        ]);
        let want = if column == "-" {
            format!("line {line}: ")
        } else {
            format!("line {line}, column {column}: ")
        };
        if code != 1 {
            failures.push(format!("{file}: exit code {code}, expected 1\n{err}"));
        } else if !err.contains(&want) {
            failures.push(format!("{file}: message lacks '{want}':\n{err}"));
        } else if !err.contains(file.as_str()) {
            failures.push(format!("{file}: message does not name the file:\n{err}"));
        }
        let after = env.dump();
        if after != before {
            failures.push(format!("{file}: the store changed"));
        }
    }
    assert!(failures.is_empty(), "{}", failures.join("\n\n"));
}

const RECORDS: &str = "site,date,protocol,effort,taxon,count\n\
S01,2016-05-02,kick,3,Baetis,4\n\
S01,2016-05-02,kick,3,Heptageniidae,1\n\
S02,2016-05-03,kick,2,,\n\
S02,2017-04-28,kick,3,Baetis,7\n";

#[test]
fn bom_crlf_semicolon_and_tab_files_import_alike() {
    let variants: Vec<(&str, Vec<u8>)> = vec![
        ("plain.csv", RECORDS.as_bytes().to_vec()),
        (
            "bom.csv",
            [b"\xEF\xBB\xBF".as_slice(), RECORDS.as_bytes()].concat(),
        ),
        ("crlf.csv", RECORDS.replace('\n', "\r\n").into_bytes()),
        ("semicolon.csv", RECORDS.replace(',', ";").into_bytes()),
        ("tab.tsv", RECORDS.replace(',', "\t").into_bytes()),
        ("spaces.csv", RECORDS.replace(',', " , ").into_bytes()),
    ];
    let mut summaries = Vec::new();
    for (name, bytes) in &variants {
        let env = base_store();
        let path = env.write_bytes(name, bytes);
        let (code, _, err) = env.run([
            std::ffi::OsStr::new("import"),
            "records".as_ref(),
            path.as_os_str(),
        ]);
        assert_eq!(code, 0, "{name}: {err}");
        assert!(err.contains("imported 4 rows of records"), "{name}: {err}");
        let json: serde_json::Value =
            serde_json::from_str(&env.stdout(["summary", "--format", "json"])).unwrap();
        summaries.push((
            name,
            json["events"].clone(),
            json["counts"].clone(),
            json["coverage"].clone(),
        ));
    }
    for s in &summaries[1..] {
        assert_eq!(
            (&s.1, &s.2, &s.3),
            (&summaries[0].1, &summaries[0].2, &summaries[0].3),
            "{} differs",
            s.0
        );
    }
    // 1 stored event + 3 new; 1 stored count + 3 new (the S02 2016 event found nothing).
    assert_eq!(summaries[0].1, 4);
    assert_eq!(summaries[0].2, 4);
}

#[test]
fn an_explicit_delimiter_overrides_detection() {
    let env = base_store();
    // A comma inside every value would fool detection; the flag decides.
    let text = "site|date|protocol|effort|taxon|count\nS01|2016-05-02|kick|3|Baetis|4\n";
    let path = env.write("pipes.csv", text);
    let (code, _, err) = env.run([
        std::ffi::OsStr::new("import"),
        "records".as_ref(),
        path.as_os_str(),
        "--delimiter".as_ref(),
        "|".as_ref(),
    ]);
    assert_eq!(code, 0, "{err}");
}

#[test]
fn create_missing_reports_each_creation_but_never_invents_protocols() {
    let env = base_store();
    let text = "site,date,protocol,effort,taxon,count\nS03,2018-05-01,kick,3,Caenis,2\nS03,2018-05-01,kick,3,Baetis,1\n";
    let path = env.write("new.csv", text);
    let p = path.to_str().unwrap();
    let (code, _, err) = env.run(["import", "records", p]);
    assert_eq!(code, 1);
    assert!(
        err.contains("line 2, column site") && err.contains("line 2, column taxon"),
        "{err}"
    );
    let (code, _, err) = env.run(["import", "records", p, "--create-missing"]);
    assert_eq!(code, 0, "{err}");
    assert!(err.contains("created site S03"), "{err}");
    assert!(err.contains("created taxon Caenis"), "{err}");
    assert!(!err.contains("created taxon Baetis"), "{err}");
    let batches: serde_json::Value =
        serde_json::from_str(&env.stdout(["batches", "--format", "json"])).unwrap();
    let last = batches.as_array().unwrap().last().unwrap().clone();
    assert_eq!(
        last["created"],
        serde_json::json!(["site S03", "taxon Caenis"])
    );

    let net = env.write(
        "net.csv",
        "site,date,protocol,effort,taxon,count\nS01,2018-05-01,net,3,Baetis,2\n",
    );
    let (code, _, err) = env.run([
        "import",
        "records",
        net.to_str().unwrap(),
        "--create-missing",
    ]);
    assert_eq!(code, 1);
    assert!(
        err.contains("line 2, column protocol") && err.contains("effort unit"),
        "{err}"
    );
}

#[test]
fn replace_overwrites_and_undo_restores() {
    let env = base_store();
    let original = env.dump();
    assert!(original.contains("Real(12.0)"));
    let path = env.write("fix.csv", "event,taxon,count\nE1,Baetis,5\n");
    let p = path.to_str().unwrap();
    assert_eq!(env.run(["import", "counts", p]).0, 1);
    let (code, _, err) = env.run(["import", "counts", p, "--replace"]);
    assert_eq!(code, 0, "{err}");
    assert!(err.contains("1 replaced"), "{err}");
    let replaced = env.dump();
    assert!(replaced.contains("Real(5.0)") && !replaced.contains("Real(12.0)"));
    // The batch of the original count (5: counts.csv) now depends on the replacing one (6).
    let (code, _, err) = env.run(["batches", "undo", "5"]);
    assert_eq!(code, 1);
    assert!(err.contains("batch 6"), "{err}");
    let out = env.stdout(["batches", "undo", "6"]);
    assert!(out.contains("1 overwritten count put back"), "{out}");
    assert_eq!(env.dump(), original);
}

#[test]
fn batches_list_and_undo_with_refusal() {
    let env = base_store();
    let json: serde_json::Value =
        serde_json::from_str(&env.stdout(["batches", "--format", "json"])).unwrap();
    let list = json.as_array().expect("a list");
    assert_eq!(list.len(), 5);
    for (i, b) in list.iter().enumerate() {
        for key in [
            "id",
            "file",
            "imported_at",
            "rows",
            "kind",
            "content_sha256",
        ] {
            assert!(b.get(key).is_some(), "batch {i} lacks {key}");
        }
        assert_eq!(b["id"], i as i64 + 1);
        assert_eq!(b["rows"], [2, 1, 4, 1, 1][i]);
        let t = b["imported_at"].as_str().unwrap();
        assert!(t.ends_with('Z') && t.len() == 20, "RFC 3339 UTC: {t}");
    }
    assert_eq!(list[0]["kind"], "sites");
    let csv = env.stdout(["batches", "--format", "csv"]);
    assert_eq!(csv.lines().count(), 6);
    assert!(csv.starts_with("id,kind,file,imported_at,rows"));

    // Sites carry events of batch 4; refusing names it.
    let before = env.dump();
    let (code, _, err) = env.run(["batches", "undo", "1"]);
    assert_eq!(code, 1);
    assert!(
        err.contains("batch 4") && err.contains("events at sites"),
        "{err}"
    );
    assert_eq!(env.dump(), before);
    let (code, _, err) = env.run(["batches", "undo", "99"]);
    assert_eq!(code, 1);
    assert!(err.contains("batch '99' not found"), "{err}");
    // Undo in reverse order empties the store of data.
    for id in ["5", "4", "3", "2", "1"] {
        env.stdout(["batches", "undo", id]);
    }
    let s: serde_json::Value =
        serde_json::from_str(&env.stdout(["summary", "--format", "json"])).unwrap();
    for key in ["sites", "events", "taxa", "counts", "batches"] {
        assert_eq!(s[key], 0, "{key}");
    }
}

/// A records file made here with plain loops: 4 sites, 3 years, 2 visits, 2 replicates
/// at two sites, 5 taxa with some absent, and one visit where nothing was found.
fn round_trip_records() -> String {
    let mut s = String::from("site,date,protocol,effort,taxon,count,replicate\n");
    let taxa = [
        "Baetis",
        "Heptageniidae",
        "Caenis",
        "Gammarus",
        "Simuliidae",
    ];
    for (si, site) in ["R1", "R2", "R3", "R4"].iter().enumerate() {
        for year in [2019, 2020, 2022] {
            if site == &"R3" && year == 2020 {
                continue; // a gap year
            }
            for date in [format!("{year}-04-1{si}"), format!("{year}-09-2{si}")] {
                for rep in 1..=(if si < 2 { 2 } else { 1 }) {
                    if site == &"R4" && year == 2022 && date.contains("-09-") {
                        s.push_str(&format!("{site},{date},kick,3,,,{rep}\n"));
                        continue;
                    }
                    for (ti, t) in taxa.iter().enumerate() {
                        if (si + ti + rep + year as usize).is_multiple_of(3) {
                            continue; // not found: not listed
                        }
                        s.push_str(&format!(
                            "{site},{date},kick,{},{t},{},{rep}\n",
                            2 + rep,
                            ti * 3 + rep
                        ));
                    }
                }
            }
        }
    }
    s
}

#[test]
fn summary_matches_numbers_counted_from_the_csv() {
    let env = TestEnv::new();
    env.stdout(["init"]);
    let proto = env.write(
        "p.csv",
        "code,description,effort_unit\nkick,kick sample,minutes\n",
    );
    env.stdout(["import", "protocols", proto.to_str().unwrap()]);
    let text = round_trip_records();
    let path = env.write("records.csv", &text);
    env.stdout([
        "import",
        "records",
        path.to_str().unwrap(),
        "--create-missing",
    ]);

    // Count from the text: split on commas, no tally code.
    let mut sites = BTreeSet::new();
    let mut events = BTreeSet::new();
    let mut taxa = BTreeSet::new();
    let mut counts = 0;
    let mut years = BTreeSet::new();
    let mut grid: BTreeMap<(String, i32), BTreeSet<String>> = BTreeMap::new();
    for line in text.lines().skip(1) {
        let f: Vec<&str> = line.split(',').collect();
        sites.insert(f[0].to_string());
        let event = format!("{}|{}|{}|{}", f[0], f[1], f[2], f[6]);
        events.insert(event.clone());
        let year: i32 = f[1][..4].parse().unwrap();
        years.insert(year);
        grid.entry((f[0].to_string(), year))
            .or_default()
            .insert(event);
        if !f[4].is_empty() {
            taxa.insert(f[4].to_string());
            counts += 1;
        }
    }
    let s: serde_json::Value =
        serde_json::from_str(&env.stdout(["summary", "--format", "json"])).unwrap();
    assert_eq!(s["sites"], sites.len());
    assert_eq!(s["events"], events.len());
    assert_eq!(s["taxa"], taxa.len());
    assert_eq!(s["counts"], counts);
    assert_eq!(
        s["years"],
        serde_json::json!(years.iter().collect::<Vec<_>>())
    );
    assert_eq!(s["protocols"][0]["effort_unit"], "minutes");
    assert_eq!(s["protocols"][0]["events"], events.len());
    for row in s["coverage"].as_array().unwrap() {
        let site = row["site"].as_str().unwrap();
        for (i, y) in years.iter().enumerate() {
            let want = grid.get(&(site.to_string(), *y)).map_or(0, BTreeSet::len);
            assert_eq!(row["events"][i], want, "{site} {y}");
        }
    }
    // The CSV form of the grid carries the same numbers.
    let csv = env.stdout(["summary", "--format", "csv"]);
    let r3: Vec<&str> = csv
        .lines()
        .find(|l| l.starts_with("R3,"))
        .unwrap()
        .split(',')
        .collect();
    assert_eq!(r3, ["R3", "2", "0", "2"]);
}

#[test]
fn commands_refuse_a_missing_store_or_a_foreign_file() {
    let env = TestEnv::new();
    for args in [
        vec!["summary"],
        vec!["batches"],
        vec!["check"],
        vec!["backup", "b.db"],
        vec!["import", "sites", "x.csv"],
    ] {
        let (code, _, err) = env.run(&args);
        assert_eq!(code, 1, "{args:?}");
        assert!(
            err.contains("no store at") && err.trim().lines().count() == 1,
            "{args:?}: {err}"
        );
    }
    std::fs::write(&env.db, "site,date\nS01,2016-04-21\n").unwrap();
    let (code, _, err) = env.run(["summary"]);
    assert_eq!(code, 1);
    assert!(
        err.contains("is not a tally store") && err.trim().lines().count() == 1,
        "{err}"
    );
}

#[test]
fn check_passes_and_backup_copies_the_content() {
    let env = base_store();
    let out = env.stdout(["check"]);
    assert!(
        out.contains("integrity ok") && out.contains("foreign keys ok"),
        "{out}"
    );
    let copy = env.path("copy.db");
    env.stdout(["backup", copy.to_str().unwrap()]);
    let copied = tally::store::Store::open(&copy)
        .unwrap()
        .content_dump()
        .unwrap();
    assert_eq!(copied, env.dump());
    let (code, _, err) = env.run(["backup", copy.to_str().unwrap()]);
    assert_eq!(code, 1);
    assert!(err.contains("exists") && err.contains("--force"), "{err}");
}

#[test]
fn the_examples_in_the_data_model_guide_import() {
    let doc =
        std::fs::read_to_string(root().join("docs/data-model.md")).expect("docs/data-model.md");
    let blocks: Vec<&str> = doc
        .split("```csv\n")
        .skip(1)
        .map(|b| b.split("```").next().unwrap())
        .collect();
    let kinds = [
        "sites",
        "attributes",
        "protocols",
        "taxa",
        "events",
        "counts",
        "records",
        // "Unidentified and higher-rank records": partial effort.
        "records",
    ];
    assert_eq!(blocks.len(), kinds.len());
    let env = TestEnv::new();
    env.stdout(["init"]);
    for (kind, block) in kinds.iter().zip(&blocks) {
        let path = env.write(&format!("{kind}.csv"), block);
        let (code, _, err) = env.run(["import", kind, path.to_str().unwrap(), "--create-missing"]);
        assert_eq!(code, 0, "{kind} example: {err}");
    }
    // The records example names three events (codes as the guide says), the
    // partial-effort example two more.
    let s: serde_json::Value =
        serde_json::from_str(&env.stdout(["summary", "--format", "json"])).unwrap();
    assert_eq!(s["events"], 2 + 3 + 2);
    // Its figures per effort: 12 / 4 traps and 9 / 2.5 minutes.
    let per = |protocol: &str| -> serde_json::Value {
        let m: serde_json::Value = serde_json::from_str(&env.stdout([
            "matrix",
            "--protocol",
            protocol,
            "--from",
            "2016-06-02",
            "--per-effort",
            "--format",
            "json",
        ]))
        .unwrap();
        let j = m["taxa"]
            .as_array()
            .unwrap()
            .iter()
            .position(|t| t == "Baetis rhodani")
            .unwrap();
        m["values"][0][j].clone()
    };
    assert_eq!(per("emergence"), 3.0);
    assert_eq!(per("kick"), 3.6);
    let dump = env.dump();
    for code in [
        "S07-2016-04-21-kick-1",
        "S07-2016-04-21-kick-2",
        "S08-2016-04-21-kick-1",
    ] {
        assert!(dump.contains(code), "{code}");
    }
}

#[test]
fn a_cumulative_season_file_imports_its_new_rows_once() {
    let env = base_store();
    let batches = |env: &TestEnv| -> usize {
        let v: serde_json::Value =
            serde_json::from_str(&env.stdout(["batches", "--format", "json"])).unwrap();
        v.as_array().unwrap().len()
    };
    let early = "site,date,protocol,effort,taxon,count\n\
                 S01,2016-05-02,kick,3,Baetis,4\nS02,2016-05-03,kick,3,,\n";
    let p = env.write("season.csv", early);
    let p = p.to_str().unwrap();
    let (code, _, err) = env.run(["import", "records", p, "--skip-existing"]);
    assert_eq!(code, 0, "{err}");
    let first = env.dump();
    let n = batches(&env);
    // Later the same file has grown by one taxon on a stored event and one visit.
    env.write(
        "season.csv",
        &format!("{early}S01,2016-05-02,kick,3,Heptageniidae,1\nS01,2016-06-02,kick,3,Baetis,2\n"),
    );
    let (code, _, err) = env.run(["import", "records", p, "--skip-existing"]);
    assert_eq!(code, 0, "{err}");
    assert!(
        err.contains("2 rows new, 2 identical to the store (skipped)")
            && err.contains("1 new event, 2 counts, 1 count on events already stored"),
        "{err}"
    );
    assert_eq!(batches(&env), n + 1);
    let second = env.dump();
    let (code, _, err) = env.run(["import", "records", p, "--skip-existing"]);
    assert_eq!(code, 0, "{err}");
    assert!(
        err.contains("nothing new in") && err.contains("4 rows already stored"),
        "{err}"
    );
    assert_eq!(
        batches(&env),
        n + 1,
        "a file adding nothing records no batch"
    );
    assert_eq!(env.dump(), second);
    // Without the flag the stored rows are refused, and the message says how.
    let (code, _, err) = env.run(["import", "records", p]);
    assert_eq!(code, 1);
    assert!(
        err.contains("line 2, column taxon") && err.contains("--skip-existing"),
        "{err}"
    );
    assert_eq!(env.dump(), second);
    env.stdout(["batches", "undo", &(n + 1).to_string()]);
    assert_eq!(env.dump(), first);
}
