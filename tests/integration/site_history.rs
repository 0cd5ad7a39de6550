//! Sites that change over time: attribute histories imported, corrected and
//! undone, used by selections and refused for rows pooling a change, carried
//! by Darwin Core archives, and noticed by `runs verify`.
//!
//! The rule under test ("a value holds from its date until the next value of
//! its key; each event takes the value in force on its date") is in
//! docs/data-model.md, "Site attributes that change"; the expected event sets
//! are worked out by hand from the fixture below.

use std::collections::BTreeSet;

use crate::util::TestEnv;

const SITES: &str = "code,name,latitude,longitude,status\n\
                     S01,Upper,52.40,-3.70,control\nS02,Middle,52.41,-3.69,control\n\
                     S03,Lower,52.42,-3.68,degraded\nS04,Sluice,52.43,-3.67,\n";
const PROTOCOLS: &str = "code,description,effort_unit\nkick,three-minute kick sample,minutes\n";
const TAXA: &str = "name,rank,parent,accepted\nBaetis,genus,,\nCaenis,genus,,\nGammarus,genus,,\n";
/// The dates every site is visited on; 2014-06-01 is the day S04's
/// restoration takes effect, 2014-05-31 the day before.
const DATES: [&str; 7] = [
    "2013-05-10",
    "2013-09-10",
    "2014-05-31",
    "2014-06-01",
    "2014-09-10",
    "2015-05-10",
    "2015-09-10",
];
/// S04 degraded since always, restored from 2014-06-01.
const HISTORY: &str = "site,key,value,from\nS04,status,degraded,\nS04,status,restored,2014-06-01\n";

fn records() -> String {
    let mut out = String::from("site,date,protocol,effort,taxon,count\n");
    for (i, site) in ["S01", "S02", "S03", "S04"].iter().enumerate() {
        for (j, date) in DATES.iter().enumerate() {
            let b = 5 + (3 * i + 7 * j) % 11;
            let c = 1 + (5 * i + 2 * j) % 6;
            out.push_str(&format!(
                "{site},{date},kick,3,Baetis,{b}\n{site},{date},kick,3,Caenis,{c}\n"
            ));
            if (i + j) % 3 == 0 {
                out.push_str(&format!("{site},{date},kick,3,Gammarus,{}\n", 1 + j));
            }
        }
    }
    out
}

/// A store with four sites visited on [`DATES`] and S04's history imported.
fn store() -> TestEnv {
    let env = TestEnv::new();
    env.stdout(["init"]);
    env.import_all(&[
        ("sites", SITES),
        ("protocols", PROTOCOLS),
        ("taxa", TAXA),
        ("records", &records()),
        ("attributes", HISTORY),
    ]);
    env
}

/// The sample labels of `matrix --unit event` with `flags`, as a set.
fn event_labels(env: &TestEnv, flags: &[&str]) -> BTreeSet<String> {
    let mut args = vec!["matrix", "--unit", "event", "--format", "csv"];
    args.extend_from_slice(flags);
    env.stdout(args)
        .lines()
        .skip(1)
        .map(|l| l.split(',').next().unwrap().to_string())
        .collect()
}

/// Event labels of `site` on the dates `from..=to` of [`DATES`].
fn labels(site: &str, dates: &[&str]) -> BTreeSet<String> {
    dates.iter().map(|d| format!("{site}-{d}-kick-1")).collect()
}

#[test]
fn each_event_is_selected_by_the_value_in_force_on_its_date() {
    let env = store();
    // Restored: S04 from the change date on, the change date included.
    assert_eq!(
        event_labels(&env, &["--site-where", "status=restored"]),
        labels("S04", &DATES[3..])
    );
    // Degraded: S03 always, S04 up to the day before the change.
    let mut degraded = labels("S03", &DATES);
    degraded.extend(labels("S04", &DATES[..3]));
    assert_eq!(
        event_labels(&env, &["--site-where", "status=degraded"]),
        degraded
    );
    // A window on one side of the change selects nothing, and says so.
    let (code, _, err) = env.run([
        "matrix",
        "--site-where",
        "status=restored",
        "--to",
        "2014-05-31",
    ]);
    assert_eq!(code, 1);
    assert!(err.contains("the selection is empty"), "{err}");
    // The metadata of an event row shows the value in force that day.
    let csv = env.stdout([
        "matrix", "--unit", "event", "--meta", "--format", "csv", "--site", "S04",
    ]);
    let header: Vec<&str> = csv.lines().next().unwrap().split(',').collect();
    let col = header.iter().position(|h| *h == "status").unwrap();
    let status_on = |date: &str| -> String {
        csv.lines()
            .find(|l| l.starts_with(&format!("S04-{date}")))
            .unwrap()
            .split(',')
            .nth(col)
            .unwrap()
            .to_string()
    };
    assert_eq!(status_on("2014-05-31"), "degraded");
    assert_eq!(status_on("2014-06-01"), "restored");
}

#[test]
fn a_row_pooling_both_sides_of_a_change_refuses_the_key() {
    let env = store();
    let (code, _, err) = env.run([
        "permanova",
        "--by",
        "status",
        "--unit",
        "site-year",
        "--permutations",
        "99",
        "--seed",
        "1",
    ]);
    assert_eq!(code, 1);
    assert!(
        err.contains("S04/2014") && err.contains("--unit event") && err.contains("status"),
        "{err}"
    );
    // The matrix is still built and shows the change for that row only.
    let json: serde_json::Value = serde_json::from_str(&env.stdout([
        "matrix",
        "--unit",
        "site-year",
        "--meta",
        "--format",
        "json",
        "--site",
        "S04",
    ]))
    .unwrap();
    let changes: Vec<(String, Option<String>)> = json["samples"]
        .as_array()
        .unwrap()
        .iter()
        .map(|s| {
            (
                s["label"].as_str().unwrap().to_string(),
                s["attribute_changes"]["status"]
                    .as_str()
                    .map(str::to_string),
            )
        })
        .collect();
    assert_eq!(changes.len(), 3);
    for (label, change) in &changes {
        if label == "S04/2014" {
            let c = change.as_deref().unwrap();
            assert!(
                c.contains("degraded") && c.contains("restored from 2014-06-01"),
                "{c}"
            );
        } else {
            assert!(change.is_none(), "{label}: {change:?}");
        }
    }
    // Years on one side of the change are not refused.
    env.stdout([
        "permanova",
        "--by",
        "status",
        "--unit",
        "site-year",
        "--from",
        "2014-06-01",
        "--permutations",
        "99",
        "--seed",
        "1",
    ]);
}

#[test]
fn a_correction_and_its_undo_leave_the_attributes_as_they_were() {
    let env = store();
    let attributes = attribute_rows;
    let sites = |env: &TestEnv| dump_section(env, "site");
    let (attrs0, sites0, events0) = (attributes(&env), sites(&env), event_labels(&env, &[]));
    // The works finished a month early: restored from 2014-05-01.
    let (code, _, err) = env.run([
        "sites",
        "set",
        "S04",
        "status=restored",
        "--from",
        "2014-05-01",
        "--reason",
        "crew log",
    ]);
    assert_eq!(code, 0, "{err}");
    assert!(err.contains("change 1"), "{err}");
    assert_eq!(
        event_labels(&env, &["--site-where", "status=restored"]),
        labels("S04", &DATES[2..])
    );
    env.stdout([
        "sites",
        "set",
        "S03",
        "--name",
        "Lower ford",
        "--reason",
        "renamed on the map",
    ]);
    env.stdout([
        "sites",
        "set",
        "S03",
        "--latitude",
        "52.425",
        "--longitude",
        "-3.681",
        "--reason",
        "GPS",
    ]);
    assert_ne!(attributes(&env), attrs0);
    assert_ne!(sites(&env), sites0);
    let history = env.stdout(["sites", "history", "--format", "json"]);
    let h: serde_json::Value = serde_json::from_str(&history).unwrap();
    assert_eq!(h.as_array().unwrap().len(), 3, "{history}");
    // Undo the first while a later change holds: allowed (another field);
    // undo order does not matter for independent values.
    for id in ["3", "2", "1"] {
        let (code, _, err) = env.run(["sites", "undo", id, "--reason", "test"]);
        assert_eq!(code, 0, "{id}: {err}");
    }
    assert_eq!(attributes(&env), attrs0);
    assert_eq!(sites(&env), sites0);
    // An undo is not undone twice, and events and counts were never touched.
    let (code, _, err) = env.run(["sites", "undo", "1", "--reason", "again"]);
    assert_eq!(code, 1);
    assert!(err.contains("already undone"), "{err}");
    assert_eq!(event_labels(&env, &[]), events0);
    // A correction that changes nothing is refused.
    let (code, _, err) = env.run(["sites", "set", "S01", "status=control", "--reason", "same"]);
    assert_eq!(code, 1, "{err}");
}

#[test]
fn bad_attribute_files_are_refused_with_the_store_unchanged() {
    let env = store();
    let before = env.dump();
    for (name, text, expect) in [
        (
            "unknown site",
            "site,key,value,from\nS99,status,restored,2014-06-01\n",
            "S99",
        ),
        (
            "bad date",
            "site,key,value,from\nS03,status,restored,2014-13-01\n",
            "column from",
        ),
        (
            "the same key and date twice",
            "site,key,value,from\nS03,status,restored,2016-06-01\nS03,status,degraded,2016-06-01\n",
            "line 3",
        ),
        (
            "an empty value",
            "site,key,value,from\nS03,status,,2016-06-01\n",
            "column value",
        ),
        (
            "a stored value contradicted",
            "site,key,value,from\nS04,status,degraded,2014-06-01\n",
            "tally sites set",
        ),
        (
            "a missing column",
            "site,key,value\nS03,status,restored\n",
            "from",
        ),
    ] {
        let p = env.write("bad.csv", text);
        let (code, _, err) = env.run(["import", "attributes", p.to_str().unwrap()]);
        assert_eq!(code, 1, "{name}: {err}");
        assert!(err.contains(expect), "{name}: {err}");
        assert_eq!(env.dump(), before, "{name} changed the store");
    }
    // The history file again: nothing changes but the batch list.
    let p = env.write("again.csv", HISTORY);
    let (code, _, err) = env.run(["import", "attributes", p.to_str().unwrap()]);
    assert_eq!(code, 0, "{err}");
    assert!(err.contains("2 unchanged"), "{err}");
}

/// The `site_attribute` section of a store dump.
fn attribute_rows(env: &TestEnv) -> String {
    dump_section(env, "site_attribute")
}

/// The section of one table in a store dump.
fn dump_section(env: &TestEnv, table: &str) -> String {
    let d = env.dump();
    let head = format!("## {table}\n");
    let start = d.find(&head).unwrap();
    let end = d[start + head.len()..]
        .find("## ")
        .map_or(d.len(), |e| start + head.len() + e);
    d[start..end].to_string()
}

#[test]
fn undoing_the_history_batch_takes_its_values_out() {
    let env = TestEnv::new();
    env.stdout(["init"]);
    env.import_all(&[
        ("sites", SITES),
        ("protocols", PROTOCOLS),
        ("taxa", TAXA),
        ("records", &records()),
    ]);
    let before = attribute_rows(&env);
    let p = env.write("attributes.csv", HISTORY);
    let err = env
        .cmd(["import", "attributes", p.to_str().unwrap()])
        .output()
        .unwrap()
        .stderr;
    let err = String::from_utf8(err).unwrap();
    let batch = err
        .split("as batch ")
        .nth(1)
        .unwrap()
        .split(':')
        .next()
        .unwrap()
        .to_string();
    assert_eq!(
        event_labels(&env, &["--site-where", "status=restored"]),
        labels("S04", &DATES[3..])
    );
    // A later correction of a value of the batch holds the undo back.
    env.stdout([
        "sites",
        "set",
        "S04",
        "status=renewed",
        "--from",
        "2014-06-01",
        "--reason",
        "wording",
    ]);
    let (code, _, err) = env.run(["batches", "undo", &batch]);
    assert_eq!(code, 1, "{err}");
    env.stdout(["sites", "undo", "1", "--reason", "back"]);
    env.stdout(["batches", "undo", &batch]);
    assert_eq!(attribute_rows(&env), before);
    let (code, _, err) = env.run(["matrix", "--site-where", "status=restored"]);
    assert_eq!(code, 1);
    assert!(err.contains("no site has status = 'restored'"), "{err}");
}

/// S02 is re-assigned from control to degraded from 2015-01-01, a date
/// between two visits.
fn reassign_s02(env: &TestEnv) {
    env.stdout([
        "sites",
        "set",
        "S02",
        "status=degraded",
        "--from",
        "2015-01-01",
        "--reason",
        "re-assigned",
    ]);
}

/// The id of the newest stored run.
fn last_run(env: &TestEnv) -> String {
    let v: serde_json::Value =
        serde_json::from_str(&env.stdout(["runs", "list", "--format", "json"])).unwrap();
    v.as_array()
        .unwrap()
        .iter()
        .map(|r| r["id"].as_i64().unwrap())
        .max()
        .unwrap()
        .to_string()
}

#[test]
fn runs_verify_notices_a_changed_history() {
    let env = store();
    env.stdout([
        "permanova",
        "--by",
        "status",
        "--unit",
        "event",
        "--permutations",
        "99",
        "--seed",
        "3",
    ]);
    let id = last_run(&env);
    let (code, out, err) = env.run(["runs", "verify", &id]);
    assert_eq!(code, 0, "{out}\n{err}");
    reassign_s02(&env);
    let (code, out, err) = env.run(["runs", "verify", &id]);
    assert_eq!(code, 1, "{out}\n{err}");
    assert!(
        out.contains("site attributes") && out.contains("status"),
        "{out}\n{err}"
    );
}

#[test]
fn an_archive_keeps_the_history() {
    let env = store();
    reassign_s02(&env);
    let zip = env.path("all.zip");
    env.stdout(["export", "dwca", zip.to_str().unwrap()]);
    let copy = TestEnv::new();
    copy.stdout(["init"]);
    let (code, _, err) = copy.run(["import", "dwca", zip.to_str().unwrap(), "--create-missing"]);
    assert_eq!(code, 0, "{err}");
    let histories = |e: &TestEnv| -> Vec<serde_json::Value> {
        ["S01", "S02", "S03", "S04"]
            .iter()
            .map(|s| {
                let v: serde_json::Value =
                    serde_json::from_str(&e.stdout(["sites", "show", s, "--format", "json"]))
                        .unwrap();
                let h: Vec<serde_json::Value> = v["history"]
                    .as_array()
                    .unwrap()
                    .iter()
                    .map(|x| serde_json::json!([x["key"], x["value"], x["from"]]))
                    .collect();
                serde_json::json!(h)
            })
            .collect()
    };
    assert_eq!(histories(&copy), histories(&env));
    for flags in [
        &["--site-where", "status=degraded"][..],
        &["--site-where", "status=restored"][..],
    ] {
        assert_eq!(
            event_labels(&copy, flags),
            event_labels(&env, flags),
            "{flags:?}"
        );
    }
}
