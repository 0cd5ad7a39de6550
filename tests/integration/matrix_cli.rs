//! `tally matrix` and `tally selections`, end to end, on a small store written
//! with direct inserts. Expected matrices are worked out by hand from the rows
//! inserted in `fixture`.
use tally::store::Store;
use tally::store::testing::{add_count, add_event, add_protocol, add_site, add_taxon};

use crate::util::TestEnv;

fn fixture() -> TestEnv {
    let env = TestEnv::new();
    let s = Store::create(&env.db).unwrap();
    add_protocol(&s, "kick", "minutes").unwrap();
    add_site(&s, "S1", &[("reach", "lower")]).unwrap();
    add_site(&s, "S2", &[("reach", "upper")]).unwrap();
    add_taxon(&s, "Baetis", "genus", None, None).unwrap();
    add_taxon(&s, "Ecdyonurus", "genus", None, None).unwrap();
    add_taxon(&s, "Oldname", "genus", None, Some("Ecdyonurus")).unwrap();
    add_event(&s, "A1", "S1", "2019-04-02", "kick", 2.0).unwrap();
    add_count(&s, "A1", "Baetis", 3.0).unwrap();
    add_count(&s, "A1", "Oldname", 1.0).unwrap();
    add_event(&s, "A2", "S1", "2019-09-10", "kick", 3.0).unwrap();
    add_count(&s, "A2", "Ecdyonurus", 2.0).unwrap();
    add_event(&s, "A3", "S2", "2019-04-05", "kick", 2.0).unwrap();
    add_count(&s, "A3", "Baetis", 5.0).unwrap();
    add_event(&s, "A4", "S2", "2020-04-06", "kick", 4.0).unwrap();
    add_count(&s, "A4", "Baetis", 4.0).unwrap();
    add_count(&s, "A4", "Ecdyonurus", 4.0).unwrap();
    s.checkpoint().unwrap();
    env
}

fn json(env: &TestEnv, args: &[&str]) -> serde_json::Value {
    serde_json::from_str(&env.stdout(args)).expect("valid JSON")
}

#[test]
fn matrix_json_per_site_year_per_effort() {
    let env = fixture();
    let args = [
        "matrix",
        "--unit",
        "site-year",
        "--per-effort",
        "--format",
        "json",
    ];
    let v = json(&env, &args);
    let labels: Vec<&str> = v["samples"]
        .as_array()
        .unwrap()
        .iter()
        .map(|s| s["label"].as_str().unwrap())
        .collect();
    assert_eq!(labels, ["S1/2019", "S2/2019", "S2/2020"]);
    assert_eq!(v["taxa"], serde_json::json!(["Baetis", "Ecdyonurus"]));
    // S1/2019 = A1 + A2: Baetis 3, Ecdyonurus 1 (as Oldname) + 2, effort 2 + 3 = 5 minutes.
    assert_eq!(
        v["values"],
        serde_json::json!([[0.6, 0.6], [2.5, 0.0], [1.0, 1.0]])
    );
    let s1 = &v["samples"][0];
    assert_eq!(
        (s1["site"].as_str(), s1["year"].as_i64()),
        (Some("S1"), Some(2019))
    );
    assert_eq!(
        (s1["events_pooled"].as_i64(), s1["effort"].as_f64()),
        (Some(2), Some(5.0))
    );
    assert_eq!(s1["attributes"]["reach"], "lower");
    let fp = v["fingerprint"].as_str().unwrap();
    assert_eq!(fp.len(), 64);
    assert!(
        v["notes"]
            .as_array()
            .unwrap()
            .iter()
            .any(|n| n.as_str().unwrap().contains("Oldname -> Ecdyonurus"))
    );
    // The same command on the same store gives the same fingerprint.
    assert_eq!(json(&env, &args)["fingerprint"], fp);
}

#[test]
fn matrix_csv_with_metadata() {
    let env = fixture();
    let out = env.stdout(["matrix", "--site", "S1", "--meta", "--format", "csv"]);
    let lines: Vec<&str> = out.lines().collect();
    assert_eq!(
        lines,
        [
            "sample,site,year,last_year,season,first_date,last_date,events_pooled,effort,effort_unit,protocol,reach,Baetis,Ecdyonurus",
            "A1,S1,2019,2019,spring,2019-04-02,2019-04-02,1,2,minutes,kick,lower,3,1",
            "A2,S1,2019,2019,autumn,2019-09-10,2019-09-10,1,3,minutes,kick,lower,0,2",
        ]
    );
    let plain = env.stdout(["matrix", "--years", "2020", "--format", "csv"]);
    assert_eq!(plain, "sample,Baetis,Ecdyonurus\nA4,4,4\n");
}

#[test]
fn empty_selection_exits_1_naming_the_filter() {
    let env = fixture();
    let o = env
        .cmd(["matrix", "--site", "S2", "--years", "2030..2031"])
        .output()
        .unwrap();
    assert_eq!(o.status.code(), Some(1));
    let err = String::from_utf8_lossy(&o.stderr);
    assert!(err.contains("--years 2030..2031"), "{err}");
    // A malformed range is a usage error.
    env.cmd(["matrix", "--months", "13..2"]).assert().code(2);
}

#[test]
fn saved_selections_with_explicit_overrides() {
    let env = fixture();
    env.stdout([
        "selections",
        "save",
        "lower",
        "--site-where",
        "reach=lower",
        "--unit",
        "site-year",
    ]);
    env.cmd(["selections", "save", "lower", "--site", "S2"])
        .assert()
        .code(1);
    let list = json(&env, &["selections", "list", "--format", "json"]);
    assert_eq!(list["selections"][0]["name"], "lower");
    assert_eq!(
        list["selections"][0]["flags"],
        "--site-where reach=lower --unit site-year"
    );
    let shown = json(&env, &["selections", "show", "lower", "--format", "json"]);
    assert_eq!(
        shown["selection"]["site_where"],
        serde_json::json!([["reach", "lower"]])
    );

    // S1/2019 pools A1 and A2: Baetis 3, Ecdyonurus 1 + 2.
    let saved = env.stdout(["matrix", "--selection", "lower", "--format", "csv"]);
    assert_eq!(saved, "sample,Baetis,Ecdyonurus\nS1/2019,3,3\n");
    // An explicit --unit replaces the saved one; the saved site filter stays.
    let events = env.stdout([
        "matrix",
        "--selection",
        "lower",
        "--unit",
        "event",
        "--format",
        "csv",
    ]);
    assert_eq!(events, "sample,Baetis,Ecdyonurus\nA1,3,1\nA2,0,2\n");

    env.stdout(["selections", "save", "lower", "--site", "S2", "--replace"]);
    // Only the flags given are saved: no unit was given, so none is stored and
    // each command applies its own default (a trend pools site-years).
    let shown = json(&env, &["selections", "show", "lower", "--format", "json"]);
    assert_eq!(shown["selection"]["unit"], serde_json::Value::Null);
    assert!(
        !env.stdout(["selections", "list"]).contains("--unit"),
        "a default unit was saved"
    );
    let replaced = env.stdout(["matrix", "--selection", "lower", "--format", "csv"]);
    assert_eq!(replaced, "sample,Baetis,Ecdyonurus\nA3,5,0\nA4,4,4\n");
    env.stdout(["selections", "delete", "lower"]);
    env.cmd(["selections", "show", "lower"]).assert().code(1);
    env.cmd(["matrix", "--selection", "lower"]).assert().code(1);
}

#[test]
fn unknown_names_in_a_selection_are_named_with_what_exists() {
    let env = TestEnv::with_demo_data();
    let before = env.dump();
    for (args, want) in [
        (
            vec!["--site-where", "reech=lower"],
            "no site has the attribute 'reech'; attributes: habitat, reach, status (closest: 'reach')",
        ),
        (
            vec!["--site-where", "reach=lowr"],
            "values of reach: lower, middle, upper (closest: 'lower')",
        ),
        (
            vec!["--protocol", "kik"],
            "protocols: kick, quadrat (closest: 'kick')",
        ),
        (vec!["--site", "X99"], "no such site"),
        (
            vec!["--from", "2020-02-30"],
            "that day does not exist (2020-02 has 29 days)",
        ),
    ] {
        let mut all = vec!["matrix"];
        all.extend(args.iter().copied());
        let (code, out, err) = env.run(&all);
        assert_eq!(code, 1, "{args:?}: {err}");
        assert!(out.is_empty() && err.contains(want), "{args:?}: {err}");
    }
    assert_eq!(before, env.dump());
}

/// A family > genus > two species, a second family, counts on the species,
/// on the genus ("Baetis sp.") and on the family.
fn unidentified_store() -> TestEnv {
    let env = TestEnv::new();
    let s = Store::create(&env.db).unwrap();
    add_protocol(&s, "kick", "minutes").unwrap();
    add_site(&s, "S1", &[]).unwrap();
    add_taxon(&s, "Baetidae", "family", None, None).unwrap();
    add_taxon(&s, "Baetis", "genus", Some("Baetidae"), None).unwrap();
    add_taxon(&s, "Baetis rhodani", "species", Some("Baetis"), None).unwrap();
    add_taxon(&s, "Baetis vernus", "species", Some("Baetis"), None).unwrap();
    add_taxon(&s, "Chironomidae", "family", None, None).unwrap();
    let event = |code: &str, date: &str, counts: &[(&str, f64)]| {
        add_event(&s, code, "S1", date, "kick", 2.0).unwrap();
        for (taxon, n) in counts {
            add_count(&s, code, taxon, *n).unwrap();
        }
    };
    event(
        "E1",
        "2019-04-02",
        &[("Baetis rhodani", 10.0), ("Baetis", 3.0)],
    );
    event(
        "E2",
        "2019-05-02",
        &[("Baetis vernus", 2.0), ("Chironomidae", 4.0)],
    );
    event(
        "E3",
        "2019-06-02",
        &[("Baetis rhodani", 1.0), ("Baetis vernus", 6.0)],
    );
    event(
        "E4",
        "2019-07-02",
        &[("Baetis rhodani", 5.0), ("Baetis", 7.0)],
    );
    s.checkpoint().unwrap();
    env
}

#[test]
fn records_above_the_rank_are_unidentified_columns_and_identified_only_leaves_them_out() {
    let env = unidentified_store();
    let (code, out, err) = env.run(["matrix", "--rank", "species", "--format", "json"]);
    assert_eq!(code, 0, "{err}");
    let kept: serde_json::Value = serde_json::from_str(&out).unwrap();
    assert_eq!(
        kept["taxa"],
        serde_json::json!([
            "Baetis (unidentified)",
            "Baetis rhodani",
            "Baetis vernus",
            "Chironomidae (unidentified)"
        ])
    );
    assert_eq!(
        kept["unidentified"],
        serde_json::json!({"Baetis (unidentified)": "Baetis", "Chironomidae (unidentified)": "Chironomidae"})
    );
    assert!(
        err.contains("2 taxa recorded above rank species kept as their own columns"),
        "{err}"
    );
    assert!(err.contains("--identified-only leaves them out"), "{err}");
    // CSV and table use the same names.
    let csv = env.stdout(["matrix", "--rank", "species", "--format", "csv"]);
    assert!(
        csv.lines()
            .next()
            .unwrap()
            .contains("Baetis (unidentified)"),
        "{csv}"
    );
    let table = env.stdout(["matrix", "--rank", "species"]);
    assert!(table.contains("Chironomidae (unidentified)"), "{table}");
    // Without --rank nothing is unidentified and the JSON has no such key.
    let plain = json(&env, &["matrix", "--format", "json"]);
    assert!(plain.get("unidentified").is_none());
    assert!(plain["taxa"].as_array().unwrap().contains(&"Baetis".into()));

    // The figures of the note, from the matrix that keeps the columns.
    let values = kept["values"].as_array().unwrap();
    let cols: Vec<usize> = kept["taxa"]
        .as_array()
        .unwrap()
        .iter()
        .enumerate()
        .filter(|(_, t)| t.as_str().unwrap().ends_with(" (unidentified)"))
        .map(|(j, _)| j)
        .collect();
    let cell = |i: usize, j: usize| values[i][j].as_f64().unwrap();
    let individuals: f64 = (0..values.len())
        .flat_map(|i| cols.iter().map(move |&j| (i, j)))
        .map(|(i, j)| cell(i, j))
        .sum();
    let samples = (0..values.len())
        .filter(|&i| cols.iter().any(|&j| cell(i, j) > 0.0))
        .count();
    let (code, out, err) = env.run([
        "matrix",
        "--rank",
        "species",
        "--identified-only",
        "--format",
        "json",
    ]);
    assert_eq!(code, 0, "{err}");
    let only: serde_json::Value = serde_json::from_str(&out).unwrap();
    assert_eq!(
        only["taxa"],
        serde_json::json!(["Baetis rhodani", "Baetis vernus"])
    );
    assert!(only.get("unidentified").is_none());
    let note = format!(
        "--identified-only: left out 2 taxa recorded above species (Baetis (unidentified), \
         Chironomidae (unidentified)): {individuals} individuals in {samples} samples"
    );
    assert!(err.contains(&note), "{note}\n{err}");
    assert_eq!((individuals, samples), (14.0, 3));
    assert_eq!(only["selection"]["identified_only"], true);
    // A selection without the flag does not write it (saved and stored
    // selections from before read the same).
    assert!(kept["selection"].get("identified_only").is_none());

    // A saved selection keeps it.
    env.stdout([
        "selections",
        "save",
        "named",
        "--rank",
        "species",
        "--identified-only",
    ]);
    let saved = json(
        &env,
        &["matrix", "--selection", "named", "--format", "json"],
    );
    assert_eq!(saved["taxa"], only["taxa"]);
    assert_eq!(saved["fingerprint"], only["fingerprint"]);

    // A stored run records it, replays it and prints it back.
    let (code, out, err) = env.run([
        "diversity",
        "--rank",
        "species",
        "--identified-only",
        "--format",
        "json",
    ]);
    assert_eq!(code, 0, "{err}");
    let run: serde_json::Value = serde_json::from_str(&out).unwrap();
    let id = run["run_id"].to_string();
    let verified = env.stdout(["runs", "verify", id.as_str()]);
    assert!(
        verified.contains("identical") || verified.contains("reproduced"),
        "{verified}"
    );
    let shown = json(&env, &["runs", "show", id.as_str(), "--format", "json"]);
    assert!(
        shown["command"]
            .as_str()
            .unwrap()
            .contains("--identified-only"),
        "{shown}"
    );

    // Refusals: without a rank; in an archive export.
    let (code, _, err) = env.run(["matrix", "--identified-only"]);
    assert_eq!(code, 1);
    assert!(err.contains("--identified-only needs --rank"), "{err}");
    let zip = env.path("out.zip");
    let (code, _, err) = env.run(["export", "dwca", zip.to_str().unwrap(), "--identified-only"]);
    assert_eq!(code, 1);
    assert!(err.contains("--identified-only"), "{err}");
}
