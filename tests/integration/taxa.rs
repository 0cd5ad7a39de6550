//! `tally taxa`: listing, renames, merges, moves and undo, checked against
//! matrices the test computes by hand from the records it imports. A merge must
//! pool the merged name's counts under the accepted name without rewriting any
//! count; a change that would corrupt the taxonomy is refused with the store
//! unchanged; an undo gives back the original taxonomy and matrices.
use serde_json::Value;

use crate::util::TestEnv;

fn store() -> TestEnv {
    let env = TestEnv::new();
    env.stdout(["init"]);
    let files = [
        (
            "sites",
            "code,name,latitude,longitude\nA1,Upper pool,,\nA2,Lower pool,,\n",
        ),
        (
            "protocols",
            "code,description,effort_unit\nnet,dip net,minutes\n",
        ),
        (
            "taxa",
            "name,rank,parent,accepted\nGerridae,family,,\nGerris,genus,Gerridae,\n\
             Aquarius,genus,Gerridae,\nNotonecta,genus,,\n",
        ),
        (
            "records",
            "site,date,protocol,effort,taxon,count\n\
             A1,2019-05-01,net,2,Gerris,4\nA1,2019-05-01,net,2,Aquarius,3\n\
             A1,2019-05-01,net,2,Notonecta,1\nA2,2020-05-02,net,2,Gerris,6\n\
             A2,2020-05-02,net,2,Notonecta,5\n",
        ),
    ];
    for (kind, text) in files {
        let p = env.write(&format!("{kind}.csv"), text);
        env.stdout(["import", kind, p.to_str().unwrap()]);
    }
    env
}

fn matrix(env: &TestEnv) -> (Vec<String>, Vec<Vec<f64>>) {
    let v: Value = serde_json::from_str(&env.stdout(["matrix", "--format", "json"])).expect("JSON");
    let taxa = v["taxa"]
        .as_array()
        .unwrap()
        .iter()
        .map(|t| t.as_str().unwrap().to_string())
        .collect();
    let values = v["values"]
        .as_array()
        .unwrap()
        .iter()
        .map(|r| {
            r.as_array()
                .unwrap()
                .iter()
                .map(|x| x.as_f64().unwrap())
                .collect()
        })
        .collect();
    (taxa, values)
}

#[test]
fn list_reports_use_and_years() {
    let env = store();
    let v: Value = serde_json::from_str(&env.stdout(["taxa", "list", "--format", "json"])).unwrap();
    let gerris = v
        .as_array()
        .unwrap()
        .iter()
        .find(|t| t["name"] == "Gerris")
        .unwrap();
    // Two records of Gerris, in 2019 and 2020 (the file above).
    assert_eq!(gerris["count_rows"], 2);
    assert_eq!(
        (gerris["first_year"].as_i64(), gerris["last_year"].as_i64()),
        (Some(2019), Some(2020))
    );
    assert_eq!(gerris["parent"], "Gerridae");
    let tree = env.stdout(["taxa", "tree"]);
    assert!(
        tree.contains("Gerridae (family)\n  Aquarius (genus)\n  Gerris (genus)"),
        "{tree}"
    );
}

#[test]
fn merge_pools_counts_under_the_accepted_name_and_rename_follows() {
    let env = store();
    let (taxa, values) = matrix(&env);
    assert_eq!(taxa, ["Aquarius", "Gerris", "Notonecta"]);
    assert_eq!(values, vec![vec![3.0, 4.0, 1.0], vec![0.0, 6.0, 5.0]]);
    env.stdout([
        "taxa",
        "merge",
        "Aquarius",
        "Gerris",
        "--reason",
        "not told apart by the crew",
    ]);
    // By hand: Gerris + Aquarius per event = 4 + 3 and 6 + 0.
    let (taxa, values) = matrix(&env);
    assert_eq!(taxa, ["Gerris", "Notonecta"]);
    assert_eq!(values, vec![vec![7.0, 1.0], vec![6.0, 5.0]]);
    // The recorded name stays visible; no count row was rewritten.
    let list: Value =
        serde_json::from_str(&env.stdout(["taxa", "list", "--format", "json"])).unwrap();
    let aq = list
        .as_array()
        .unwrap()
        .iter()
        .find(|t| t["name"] == "Aquarius")
        .unwrap();
    assert_eq!(
        (aq["accepted"].as_str(), aq["count_rows"].as_i64()),
        (Some("Gerris"), Some(1))
    );
    env.stdout([
        "taxa",
        "rename",
        "Gerris",
        "Gerris s.l.",
        "--reason",
        "wider concept",
    ]);
    let (taxa, values) = matrix(&env);
    assert_eq!(taxa, ["Gerris s.l.", "Notonecta"]);
    assert_eq!(values, vec![vec![7.0, 1.0], vec![6.0, 5.0]]);
    let h: Value =
        serde_json::from_str(&env.stdout(["taxa", "history", "--format", "json"])).unwrap();
    let kinds: Vec<&str> = h
        .as_array()
        .unwrap()
        .iter()
        .map(|c| c["kind"].as_str().unwrap())
        .collect();
    assert_eq!(kinds, ["merge", "rename"]);
    assert_eq!(
        (h[0]["id"].as_i64(), h[1]["id"].as_i64()),
        (Some(1), Some(2))
    );
    assert_eq!(h[0]["reason"], "not told apart by the crew");
}

#[test]
fn refused_changes_leave_the_store_unchanged() {
    let env = store();
    env.stdout(["taxa", "merge", "Aquarius", "Gerris", "--reason", "lumped"]);
    let before = env.dump();
    for args in [
        vec!["taxa", "rename", "Gerris", "Notonecta"], // name taken
        vec!["taxa", "rename", "Nepa", "Ranatra"],     // unknown
        vec!["taxa", "merge", "Gerris", "Aquarius"],   // into its own synonym
        vec!["taxa", "merge", "Gerris", "Gerris"],
        vec!["taxa", "rename", "Gerris", " "],
        vec!["taxa", "move", "Aquarius", "--parent", "Gerris"], // a synonym
        vec!["taxa", "move", "Gerris", "--parent", "Gerris"],   // its own parent
    ] {
        let args: Vec<&str> = args.into_iter().chain(["--reason", "test"]).collect();
        let (code, _, err) = env.run(&args);
        assert_eq!(code, 1, "{args:?}: {err}");
        assert!(
            err.contains("Gerris") || err.contains("Nepa") || err.contains("empty"),
            "{err}"
        );
        assert_eq!(env.dump(), before, "{args:?} changed the store");
    }
}

#[test]
fn every_change_needs_a_reason() {
    let env = store();
    let before = env.dump();
    for args in [
        vec!["taxa", "rename", "Gerris", "Gerris s.l."],
        vec!["taxa", "merge", "Aquarius", "Gerris"],
        vec!["taxa", "move", "Gerris", "--no-parent"],
        vec!["taxa", "undo", "1"],
    ] {
        let (code, _, err) = env.run(&args);
        assert_eq!(code, 2, "{args:?}: {err}");
        assert!(err.contains("--reason"), "{err}");
    }
    let (code, _, err) = env.run(["taxa", "merge", "Aquarius", "Gerris", "--reason", " "]);
    assert_eq!(code, 1);
    assert!(err.contains("a reason is required"), "{err}");
    assert_eq!(env.dump(), before);
}

/// An order with two families; Baetis has three species (the shape of the
/// defect report: a genus merged into its own species).
fn mayflies() -> TestEnv {
    let env = TestEnv::new();
    env.stdout(["init"]);
    let files = [
        (
            "sites",
            "code,name,latitude,longitude\nR1,Riffle,,\nR2,Run,,\n",
        ),
        (
            "protocols",
            "code,description,effort_unit\nkick,kick sample,minutes\n",
        ),
        (
            "taxa",
            "name,rank,parent,accepted\nEphemeroptera,order,,\n\
             Baetidae,family,Ephemeroptera,\nBaetis,genus,Baetidae,\n\
             Baetis rhodani,species,Baetis,\nBaetis muticus,species,Baetis,\n\
             Baetis vernus,species,Baetis,\nHeptageniidae,family,Ephemeroptera,\n\
             Ecdyonurus,genus,Heptageniidae,\nEcdyonurus venosus,species,Ecdyonurus,\n",
        ),
        (
            "records",
            "site,date,protocol,effort,taxon,count\n\
             R1,2019-05-01,kick,3,Baetis rhodani,10\nR1,2019-05-01,kick,3,Baetis muticus,2\n\
             R1,2019-05-01,kick,3,Ecdyonurus venosus,4\nR2,2019-05-02,kick,3,Baetis vernus,7\n\
             R2,2019-05-02,kick,3,Ecdyonurus venosus,1\nR2,2019-05-02,kick,3,Baetis,3\n",
        ),
    ];
    for (kind, text) in files {
        let p = env.write(&format!("{kind}.csv"), text);
        env.stdout(["import", kind, p.to_str().unwrap()]);
    }
    env
}

fn families(env: &TestEnv) -> String {
    env.stdout(["matrix", "--rank", "family", "--format", "csv"])
}

/// The content dump without the audit trail (`taxon_change*`), which records
/// the change and its undo.
fn dump_without_audit(env: &TestEnv) -> String {
    let mut keep = true;
    let mut out = String::new();
    for line in env.dump().lines() {
        if let Some(table) = line.strip_prefix("## ") {
            keep = !table.starts_with("taxon_change");
        }
        if keep {
            out.push_str(line);
            out.push('\n');
        }
    }
    out
}

#[test]
fn merging_a_genus_into_its_own_species_is_refused_and_the_store_stays_sound() {
    let env = mayflies();
    let before = env.dump();
    let matrix = families(&env);
    let (code, _, err) = env.run([
        "taxa",
        "merge",
        "Baetis",
        "Baetis rhodani",
        "--reason",
        "lumped",
    ]);
    assert_eq!(code, 1, "{err}");
    assert!(
        err.contains(
            "merging Baetis into Baetis rhodani would make a loop: \
             Baetis rhodani → parent Baetis → accepted Baetis rhodani"
        ),
        "{err}"
    );
    assert_eq!(env.dump(), before);
    // Everything the defect broke still works.
    assert_eq!(families(&env), matrix);
    let tree = env.stdout(["taxa", "tree"]);
    for sp in ["Baetis rhodani", "Baetis muticus", "Baetis vernus"] {
        assert!(tree.contains(&format!("      {sp} (species)")), "{tree}");
    }
    assert!(env.stdout(["check"]).contains("taxonomy ok"));
}

#[test]
fn a_parent_loop_through_move_is_refused_with_the_store_unchanged() {
    let env = mayflies();
    let before = env.dump();
    let (code, _, err) = env.run([
        "taxa",
        "move",
        "Baetidae",
        "--parent",
        "Baetis vernus",
        "--reason",
        "test",
    ]);
    assert_eq!(code, 1, "{err}");
    assert!(
        err.contains(
            "moving Baetidae under Baetis vernus would make a loop: \
             Baetidae → parent Baetis vernus → parent Baetis → parent Baetidae"
        ),
        "{err}"
    );
    assert_eq!(env.dump(), before);
}

#[test]
fn check_names_a_loop_planted_through_sql() {
    let env = mayflies();
    assert!(env.stdout(["check"]).contains("taxonomy ok"));
    {
        // Straight through SQLite, as a careless script would: Baetis becomes a
        // synonym of its own species, and Ecdyonurus a synonym of a synonym.
        let c = rusqlite::Connection::open(&env.db).unwrap();
        c.execute(
            "UPDATE taxon SET accepted_id = (SELECT id FROM taxon WHERE name = 'Baetis rhodani') \
             WHERE name = 'Baetis'",
            [],
        )
        .unwrap();
        c.execute(
            "UPDATE taxon SET accepted_id = (SELECT id FROM taxon WHERE name = 'Baetis') \
             WHERE name = 'Ecdyonurus'",
            [],
        )
        .unwrap();
    }
    let (code, out, err) = env.run(["check"]);
    assert_eq!(code, 1, "{out}{err}");
    assert!(
        out.contains(
            "taxonomy: parent loop: Baetis rhodani → parent Baetis → accepted Baetis rhodani"
        ),
        "{out}"
    );
    assert!(
        out.contains(
            "taxonomy: synonym of a synonym: Ecdyonurus → accepted Baetis → accepted Baetis rhodani"
        ),
        "{out}"
    );
    assert!(err.contains("the store has 2 problems"), "{err}");
    // The tree says what it cannot show.
    let o = env.cmd(["taxa", "tree"]).output().unwrap();
    assert!(
        String::from_utf8_lossy(&o.stderr).contains("are not shown: their parent chain loops"),
        "{o:?}"
    );
}

#[test]
fn rename_merge_and_move_each_undo_to_the_original_store_and_matrices() {
    let env = mayflies();
    let original = dump_without_audit(&env);
    let matrix = families(&env);
    let cases: [&[&str]; 3] = [
        &["rename", "Baetidae", "Baetidae s.l."],
        &["merge", "Ecdyonurus venosus", "Baetis rhodani"],
        &["move", "Ecdyonurus", "--parent", "Baetidae"],
    ];
    for (i, case) in cases.iter().enumerate() {
        let args: Vec<&str> = ["taxa"]
            .iter()
            .chain(case.iter())
            .chain(&["--reason", "test"])
            .copied()
            .collect();
        env.stdout(&args);
        assert_ne!(families(&env), matrix, "{case:?} changed nothing");
        let h: Value =
            serde_json::from_str(&env.stdout(["taxa", "history", "--format", "json"])).unwrap();
        let id = h.as_array().unwrap().last().unwrap()["id"]
            .as_i64()
            .unwrap();
        assert_eq!(id, 2 * i as i64 + 1);
        env.stdout(["taxa", "undo", &id.to_string(), "--reason", "back"]);
        assert_eq!(dump_without_audit(&env), original, "{case:?}");
        assert_eq!(families(&env), matrix, "{case:?}");
    }
    // The audit trail keeps every change and its undo.
    let h: Value =
        serde_json::from_str(&env.stdout(["taxa", "history", "--format", "json"])).unwrap();
    let rows: Vec<(String, Option<i64>, Option<i64>)> = h
        .as_array()
        .unwrap()
        .iter()
        .map(|c| {
            (
                c["kind"].as_str().unwrap().to_string(),
                c["undoes"].as_i64(),
                c["undone_by"].as_i64(),
            )
        })
        .collect();
    assert_eq!(
        rows,
        [
            ("rename".into(), None, Some(2)),
            ("undo".into(), Some(1), None),
            ("merge".into(), None, Some(4)),
            ("undo".into(), Some(3), None),
            ("move".into(), None, Some(6)),
            ("undo".into(), Some(5), None),
        ]
    );
    assert!(env.stdout(["check"]).contains("taxonomy ok"));
}

#[test]
fn undo_is_refused_while_a_later_change_depends_on_it() {
    let env = mayflies();
    for args in [
        ["taxa", "rename", "Baetis", "Baetis s.l.", "--reason", "one"],
        [
            "taxa",
            "rename",
            "Baetis s.l.",
            "Baetis s.str.",
            "--reason",
            "two",
        ],
    ] {
        env.stdout(args);
    }
    let before = env.dump();
    let (code, _, err) = env.run(["taxa", "undo", "1", "--reason", "back"]);
    assert_eq!(code, 1, "{err}");
    assert!(
        err.contains("change 1 (rename Baetis to Baetis s.l.) cannot be undone: later change(s) 2"),
        "{err}"
    );
    assert_eq!(env.dump(), before);
    let history = env.stdout(["taxa", "history"]);
    assert!(
        history.contains("rename Baetis s.l. to Baetis s.str."),
        "{history}"
    );
    env.stdout(["taxa", "undo", "2", "--reason", "back"]);
    env.stdout(["taxa", "undo", "1", "--reason", "back"]);
    let (code, _, err) = env.run(["taxa", "undo", "4", "--reason", "again"]);
    assert_eq!(code, 1);
    assert!(err.contains("an undo is not undone"), "{err}");
}
