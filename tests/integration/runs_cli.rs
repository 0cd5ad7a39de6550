//! `tally runs list / series / delete / prune` on the demo store, and the
//! README's example session run as written.

use serde_json::Value;

use crate::util::{TestEnv, root};

fn json_of(s: &str) -> Value {
    serde_json::from_str(s).expect("JSON output")
}

#[test]
fn runs_list_says_what_each_run_was() {
    let env = TestEnv::with_demo();
    let list = json_of(&env.stdout(["runs", "list", "--format", "json"]));
    let whats: Vec<&str> = list
        .as_array()
        .unwrap()
        .iter()
        .map(|r| r["what"].as_str().unwrap())
        .collect();
    assert!(
        whats.iter().any(|w| w.starts_with("compare by period")
            && w.contains("reach=lower")
            && w.contains("per site and year")),
        "{whats:?}"
    );
    assert!(
        whats
            .iter()
            .any(|w| w.starts_with("trend every year") && w.contains("reach=middle")),
        "{whats:?}"
    );
    let table = env.stdout(["runs", "list"]);
    assert!(table.contains("what"), "{table}");
}

/// The points of `runs series --kind compare --value VALUE EXTRA… --format json`.
fn compare_points(env: &TestEnv, value: &str, extra: &[&str]) -> usize {
    let mut args = vec!["runs", "series", "--kind", "compare", "--value", value];
    args.extend(extra);
    args.extend(["--format", "json"]);
    let v = json_of(&env.stdout(&args));
    v["points"].as_array().map_or(0, Vec::len)
}

#[test]
fn runs_series_filters_by_condition_and_group_and_names_what_exists() {
    let env = TestEnv::with_demo();
    // The demo stores one compare run per reach.
    assert_eq!(compare_points(&env, "p.size", &[]), 3);
    assert_eq!(
        compare_points(&env, "p.size", &["--where", "reach=lower"]),
        1
    );
    // An unknown number is refused, naming those that exist.
    let (code, _, err) = env.run(["runs", "series", "--kind", "compare", "--value", "p_size"]);
    assert_eq!(code, 1);
    assert!(
        err.contains("p.size") && err.contains("size.ratio"),
        "{err}"
    );
    // A compare of three reaches stores one comparison per non-reference reach.
    env.stdout([
        "compare",
        "--protocol",
        "kick",
        "--per-effort",
        "--unit",
        "site-year",
        "--by",
        "reach",
        "--permutations",
        "19",
    ]);
    assert_eq!(
        compare_points(&env, "size.ratio", &["--group", "middle"]),
        1
    );
    let (code, _, err) = env.run([
        "runs",
        "series",
        "--kind",
        "compare",
        "--value",
        "size.ratio",
        "--group",
        "nowhere",
    ]);
    assert_eq!(code, 1);
    assert!(err.contains("middle") && err.contains("upper"), "{err}");
}

#[test]
fn runs_delete_is_all_or_nothing_and_prune_asks_first() {
    let env = TestEnv::with_demo();
    let before = env.dump();
    let (code, _, err) = env.run(["runs", "delete", "1", "999"]);
    assert_eq!(code, 1);
    assert!(err.contains("999"), "{err}");
    assert_eq!(env.dump(), before, "a refused delete changed the store");
    let out = env.stdout([
        "runs",
        "prune",
        "--kind",
        "ordinate",
        "--before",
        "9999-01-01",
        "--dry-run",
    ]);
    assert!(out.contains("would delete 3 runs"), "{out}");
    assert_eq!(env.dump(), before, "a dry run changed the store");
    let (code, _, err) = env.run(["runs", "prune", "--before", "2024-02-30"]);
    assert_eq!(code, 1);
    assert!(err.contains("2024-02-30"), "{err}");
    let out = env.stdout(["runs", "delete", "1", "2"]);
    assert!(out.contains("deleted 2 runs"), "{out}");
    let list = json_of(&env.stdout(["runs", "list", "--format", "json"]));
    let ids: Vec<i64> = list
        .as_array()
        .unwrap()
        .iter()
        .map(|r| r["id"].as_i64().unwrap())
        .collect();
    assert!(
        !ids.contains(&1) && !ids.contains(&2) && ids.contains(&3),
        "{ids:?}"
    );
    let out = env.stdout([
        "runs",
        "prune",
        "--kind",
        "ordinate",
        "--before",
        "9999-01-01",
    ]);
    assert!(out.contains("deleted 1 run (3)"), "{out}");
}

/// The commands of the README's example session, continuation lines joined and
/// comments dropped, without the leading `tally --db wren.db`.
fn readme_session() -> Vec<Vec<String>> {
    let readme = std::fs::read_to_string(root().join("README.md")).expect("README.md");
    let start = readme
        .find("## What a session with tally looks like")
        .expect("the README's example session");
    let block = &readme[start..];
    let body = block.split("```sh").nth(1).expect("a sh block");
    let body = body.split("```").next().expect("the block's end");
    let joined = body.replace("\\\n", " ");
    joined
        .lines()
        .map(|l| l.split('#').next().unwrap_or("").trim())
        .filter(|l| !l.is_empty())
        .map(|l| {
            let words: Vec<String> = l.split_whitespace().map(str::to_string).collect();
            assert_eq!(
                &words[..3],
                ["tally", "--db", "wren.db"],
                "README example not of the form `tally --db wren.db …`: {l}"
            );
            words[3..].to_vec()
        })
        .collect()
}

#[test]
fn readme_example_session_works_as_written() {
    let env = TestEnv::new();
    for f in ["sites.csv", "protocols.csv", "taxa.csv", "records.csv"] {
        std::fs::copy(root().join("demo-data").join(f), env.path(f)).expect("demo data");
    }
    let session = readme_session();
    assert!(session.len() >= 8, "{session:?}");
    for args in &session {
        env.stdout(args);
        // "then protocols, taxa, records": the comment of the sites import.
        if args.len() >= 2 && args[0] == "import" && args[1] == "sites" {
            for (kind, file) in [
                ("protocols", "protocols.csv"),
                ("taxa", "taxa.csv"),
                ("records", "records.csv"),
            ] {
                env.stdout(["import", kind, file]);
            }
        }
    }
    assert!(env.path("wren.html").exists(), "the report was not written");
}
