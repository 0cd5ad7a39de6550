//! `tally taxa`: listing, renames and merges, checked against matrices the test
//! computes by hand from the records it imports. A merge must pool the merged
//! name's counts under the accepted name without rewriting any count.
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
    env.stdout(["taxa", "rename", "Gerris", "Gerris s.l."]);
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
    assert_eq!(h[0]["reason"], "not told apart by the crew");
}

#[test]
fn refused_changes_leave_the_store_unchanged() {
    let env = store();
    env.stdout(["taxa", "merge", "Aquarius", "Gerris"]);
    let before = env.dump();
    for args in [
        vec!["taxa", "rename", "Gerris", "Notonecta"], // name taken
        vec!["taxa", "rename", "Nepa", "Ranatra"],     // unknown
        vec!["taxa", "merge", "Gerris", "Aquarius"],   // into its own synonym
        vec!["taxa", "merge", "Gerris", "Gerris"],
        vec!["taxa", "rename", "Gerris", " "],
    ] {
        let (code, _, err) = env.run(&args);
        assert_eq!(code, 1, "{args:?}: {err}");
        assert!(
            err.contains("Gerris") || err.contains("Nepa") || err.contains("empty"),
            "{err}"
        );
        assert_eq!(env.dump(), before, "{args:?} changed the store");
    }
}
