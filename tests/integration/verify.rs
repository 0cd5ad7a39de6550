//! End-to-end tests of `tally runs verify`: every typed run is replayed
//! in-process from its stored spec; runs stored without one are refused by name.

use serde_json::Value;

use crate::util::TestEnv;

fn json_of(s: &str) -> Value {
    serde_json::from_str(s).expect("JSON output")
}

const KICK: [&str; 6] = [
    "--protocol",
    "kick",
    "--per-effort",
    "--unit",
    "site-year",
    "--seed",
];

#[test]
fn permanova_and_dispersion_runs_are_replayed_in_process() {
    let env = TestEnv::with_demo_data();
    for (kind, extra) in [
        ("permanova", &["--pairwise", "--strata", "year"][..]),
        ("dispersion", &[][..]),
    ] {
        let mut args = vec![kind, "--by", "reach", "--permutations", "99"];
        args.extend(KICK);
        args.push("5");
        args.extend(extra);
        env.stdout(&args);
    }
    for id in ["1", "2"] {
        let rep = json_of(&env.stdout(["runs", "verify", id, "--format", "json"]));
        assert_eq!(rep["identical"], true, "run {id}: {rep}");
        assert_eq!(rep["fingerprint_matches"], true);
        assert_eq!(rep["numbers_differing"], 0);
        assert!(rep["compared"].as_u64().unwrap() > 10, "{rep}");
    }
    assert_eq!(rep_kind(&env, "1"), "permanova");
    assert_eq!(rep_kind(&env, "2"), "dispersion");
    let table = env.stdout(["runs", "verify", "1"]);
    assert!(table.starts_with("run 1 (permanova)\n"), "{table}");
    assert!(table.contains("every stored number was reproduced with the stored seed"));
    assert!(table.ends_with("\nidentical\n"), "{table}");
    assert_eq!(
        env.stdout(["runs", "verify", "2", "--format", "csv"]),
        "path,stored,recomputed\n"
    );

    // One more animal in a lower-reach sample: the data changed under both runs.
    let m = json_of(&env.stdout([
        "matrix",
        "--protocol",
        "kick",
        "--site-where",
        "reach=lower",
        "--format",
        "json",
    ]));
    let event = m["samples"][0]["label"].as_str().unwrap();
    let taxon = m["taxa"][0].as_str().unwrap();
    let old = m["values"][0][0].as_f64().unwrap();
    let file = env.write(
        "fix.csv",
        &format!("event,taxon,count\n{event},{taxon},{}\n", old + 5.0),
    );
    env.stdout(["import", "counts", file.to_str().unwrap(), "--replace"]);
    let (code, out, err) = env.run(["runs", "verify", "1"]);
    assert_eq!(code, 1, "{out}{err}");
    assert!(out.contains("data: CHANGED"), "{out}");
    assert!(out.ends_with("\nnot identical\n"), "{out}");
    assert!(
        err.contains("run 1 is not reproduced: the data fingerprint changed"),
        "{err}"
    );
    let (code, out, _) = env.run(["runs", "verify", "2", "--format", "csv"]);
    assert_eq!(code, 1);
    assert!(
        out.starts_with("path,stored,recomputed\nfingerprint,"),
        "{out}"
    );
}

fn rep_kind(env: &TestEnv, id: &str) -> String {
    let rep = json_of(&env.stdout(["runs", "verify", id, "--format", "json"]));
    rep["kind"].as_str().unwrap().to_string()
}

#[test]
fn runs_stored_without_a_typed_spec_are_not_replayable() {
    // Earlier versions stored the command line under `argv` instead of a spec;
    // such a run is named and refused, never rerun as a subprocess.
    use tally::matrix::Unit;
    use tally::store::Store;
    use tally::store::query::Selection;
    use tally::store::runs::NewRun;
    let env = TestEnv::with_demo_data();
    let sel = Selection {
        protocol: Some("kick".into()),
        unit: Some(Unit::SiteYear),
        ..Selection::default()
    };
    let mut store = Store::open(&env.db).unwrap();
    let id = store
        .save_run(&NewRun {
            kind: "permanova".into(),
            selection: serde_json::to_value(&sel).unwrap(),
            parameters: serde_json::json!({
                "argv": ["permanova", "--by", "reach", "--protocol", "kick", "--seed", "3"]
            }),
            seed: Some(3),
            fingerprint: String::new(),
            attributes: Default::default(),
            period_start: None,
            period_end: None,
            result: serde_json::json!({}),
            values: vec![],
        })
        .unwrap();
    drop(store);
    let (code, out, err) = env.run(["runs", "verify", &id.to_string()]);
    assert_eq!(code, 1, "{out}");
    assert!(out.is_empty(), "{out}");
    assert!(
        err.contains(&format!("run {id} cannot be replayed"))
            && err.contains("not a permanova specification")
            && err.contains("earlier version"),
        "{err}"
    );
}

mod replay_property {
    use proptest::prelude::*;
    use serde_json::Value;

    use crate::util::TestEnv;

    /// The commands that store a run, with the flags each needs beyond the selection.
    const COMMANDS: [&[&str]; 9] = [
        &["permanova", "--by", "reach"],
        &["diversity", "--every", "year"],
        &["dispersion", "--by", "habitat"],
        &["compare", "--by", "reach"],
        &["partition"],
        &["trend"],
        &[
            "impact",
            "--by",
            "reach",
            "--impact",
            "lower",
            "--before",
            "2008..2015",
            "--after",
            "2016..2025",
        ],
        &["ordinate", "--method", "cca", "--constraint", "reach"],
        &[
            "compare",
            "--by",
            "period",
            "--periods",
            "2008..2015,2016..2025",
            "--size-model",
            "geometric",
        ],
    ];

    /// Selections: protocol, unit, effort and a site or year filter.
    const SELECTIONS: [&[&str]; 4] = [
        &["--protocol", "kick", "--unit", "site-year", "--per-effort"],
        &[
            "--protocol",
            "kick",
            "--unit",
            "site-year",
            "--years",
            "2010..2022",
        ],
        &["--protocol", "kick", "--unit", "event", "--per-effort"],
        &[
            "--protocol",
            "kick",
            "--unit",
            "site-year",
            "--site-where",
            "habitat=riffle",
        ],
    ];

    proptest! {
        // Each case runs two commands end to end: a handful of cases keeps
        // `cargo test` fast while covering every command and selection over time.
        #![proptest_config(ProptestConfig::with_cases(6))]
        #[test]
        fn a_stored_run_verifies_identical_straight_away(
            c in 0usize..COMMANDS.len(),
            s in 0usize..SELECTIONS.len(),
            seed in 0u64..1_000_000,
        ) {
            let env = TestEnv::with_demo_data();
            let seed = seed.to_string();
            let mut args: Vec<&str> = COMMANDS[c].to_vec();
            args.extend(SELECTIONS[s]);
            args.extend(["--permutations", "19", "--seed", seed.as_str(), "--format", "json"]);
            let (code, out, err) = env.run(&args);
            // A selection a command cannot analyse is refused (exit 1, stored nothing).
            prop_assume!(code == 0 || !err.is_empty());
            if code != 0 {
                let list = env.stdout(["runs", "list", "--format", "json"]);
                prop_assert_eq!(list.trim(), "[]", "{:?}: {}", args, err);
                return Ok(());
            }
            let v: Value = serde_json::from_str(&out).unwrap();
            let ids: Vec<String> = match v.get("groups").and_then(Value::as_array) {
                Some(g) if v.get("split_by").is_some() => {
                    g.iter().map(|x| x["run_id"].to_string()).collect()
                }
                _ => vec![v["run_id"].to_string()],
            };
            for id in ids {
                let rep: Value = serde_json::from_str(
                    &env.stdout(["runs", "verify", id.as_str(), "--format", "json"]),
                )
                .unwrap();
                prop_assert_eq!(&rep["identical"], &Value::Bool(true), "{:?}: {}", args, rep);
            }
        }
    }
}

#[test]
fn a_saved_selection_gives_what_its_flags_give_in_every_analysis() {
    // A selection stores only the flags given; every analysis command applies its
    // own defaults to it, so `--selection NAME` and the flags give one result.
    let env = crate::util::TestEnv::with_demo_data();
    let flags = [
        "--protocol",
        "kick",
        "--per-effort",
        "--years",
        "2009..2024",
        "--site-where",
        "habitat=riffle",
    ];
    let mut save = vec!["selections", "save", "riffles"];
    save.extend(flags);
    env.stdout(&save);
    let commands: [&[&str]; 7] = [
        &["permanova", "--by", "reach"],
        &["dispersion", "--by", "reach"],
        &["compare", "--by", "reach"],
        &["partition"],
        &["trend"],
        &[
            "impact",
            "--by",
            "reach",
            "--impact",
            "lower",
            "--before",
            "2009..2015",
            "--after",
            "2016..2024",
        ],
        &["ordinate", "--method", "cca", "--constraint", "reach"],
    ];
    let tail = [
        "--permutations",
        "19",
        "--seed",
        "3",
        "--format",
        "json",
        "--no-store",
    ];
    for c in commands {
        let mut by_name: Vec<&str> = c.to_vec();
        by_name.extend(["--selection", "riffles"]);
        by_name.extend(tail);
        let mut by_flags: Vec<&str> = c.to_vec();
        by_flags.extend(flags);
        by_flags.extend(tail);
        let a = json_of(&env.stdout(&by_name));
        let b = json_of(&env.stdout(&by_flags));
        assert_eq!(a, b, "{c:?}");
    }
}
