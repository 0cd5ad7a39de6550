//! Permutation designs for revisited sites and the BACI command, end to end on the
//! demo store (18 sites in three reaches, visited every year): `--permute`, the
//! refusals of untestable term/scheme pairs, `smallest_possible_p`, and
//! `tally impact` stored and replayed by `runs verify`
//! (docs/methods.md, "Permutation designs for revisited sites").
use serde_json::Value;

use crate::util::TestEnv;

const SEL: [&str; 5] = ["--protocol", "kick", "--unit", "site-year", "--per-effort"];

fn json(env: &TestEnv, args: &[&str]) -> Value {
    let mut all: Vec<&str> = args.to_vec();
    all.extend(SEL);
    all.extend(["--format", "json", "--seed", "4", "--permutations", "99"]);
    serde_json::from_str(&env.stdout(&all)).expect("JSON output")
}

#[test]
fn every_untestable_term_and_scheme_pair_is_refused_by_name() {
    let env = TestEnv::with_demo();
    let period = ["--periods", "2008..2015,2016..2025", "--by", "period"];
    let cases: Vec<(Vec<&str>, &str, &str)> = vec![
        // A site-level factor cannot vary within sites or within site strata.
        (
            vec!["compare", "--by", "reach", "--permute", "within-sites"],
            "reach",
            "whole-sites",
        ),
        (
            vec!["permanova", "--by", "reach", "--permute", "within-sites"],
            "reach",
            "whole-sites",
        ),
        (
            vec!["dispersion", "--by", "habitat", "--permute", "within-sites"],
            "habitat",
            "whole-sites",
        ),
        (
            vec!["compare", "--by", "reach", "--strata", "site"],
            "reach",
            "whole-sites",
        ),
        // A factor that varies within sites cannot move with whole sites.
        (
            [
                vec!["compare"],
                period.to_vec(),
                vec!["--permute", "whole-sites"],
            ]
            .concat(),
            "period",
            "within-sites",
        ),
        // The partition's size and shape are row-level: whole sites cannot vary them.
        (
            vec!["partition", "--permute", "whole-sites"],
            "size",
            "within-sites",
        ),
        // So is a trend's year.
        (
            vec!["trend", "--permute", "whole-sites"],
            "year",
            "within-sites",
        ),
        // A covariate that varies within sites cannot move with whole sites.
        (
            vec![
                "permanova",
                "--by",
                "reach",
                "--covariate",
                "year",
                "--permute",
                "whole-sites",
            ],
            "year",
            "within-sites",
        ),
    ];
    for (args, term, fix) in cases {
        let mut all = args.clone();
        all.extend(SEL);
        all.extend(["--no-store", "--seed", "1", "--permutations", "19"]);
        let (code, out, err) = env.run(&all);
        assert_eq!(code, 1, "{args:?}: {err}");
        assert!(out.is_empty(), "{args:?} printed a result: {out}");
        assert!(err.contains(term) && err.contains(fix), "{args:?}: {err}");
    }
}

#[test]
fn auto_moves_whole_sites_for_reach_and_rows_within_sites_for_period() {
    let env = TestEnv::with_demo();
    let v = json(&env, &["compare", "--by", "reach", "--no-store"]);
    assert_eq!(v["design"][0]["permute"], "whole-sites");
    assert_eq!(v["size"]["resampled"], "whole sites within groups");
    let v = json(
        &env,
        &[
            "compare",
            "--by",
            "period",
            "--periods",
            "2008..2015,2016..2025",
            "--no-store",
        ],
    );
    assert_eq!(v["design"][0]["permute"], "within-sites");
    let part = json(&env, &["partition", "--no-store"]);
    assert_eq!(part["design"][0]["permute"], "within-sites");
    let s = part["tests"]["size_only"]["smallest_possible_p"]
        .as_f64()
        .unwrap();
    assert!((s - 0.01).abs() < 1e-12, "{s}");
    // 99 random permutations: the smallest possible p is 1/100 and every p is at
    // least that (Phipson & Smyth 2010).
    for part in ["size", "shape"] {
        let p = v[part]["p_value"].as_f64().unwrap();
        let s = v[part]["smallest_possible_p"].as_f64().unwrap();
        assert!(
            (s - 0.01).abs() < 1e-12 && p >= s,
            "{part}: p {p}, smallest {s}"
        );
    }
    // `--unit site` gives one row per site: rows are the replicates.
    let out = env.stdout([
        "permanova",
        "--by",
        "reach",
        "--protocol",
        "kick",
        "--unit",
        "site",
        "--format",
        "json",
        "--seed",
        "1",
        "--permutations",
        "19",
        "--no-store",
    ]);
    let v: Value = serde_json::from_str(&out).unwrap();
    assert_eq!(v["design"][0]["permute"], "free");
}

#[test]
fn a_design_too_small_for_alpha_says_so() {
    // Two sites per reach, two reaches: 4!/(2!2!) = 6 relabellings, exact, and no
    // p-value below 1/6 (counted by hand).
    let env = TestEnv::with_demo();
    let out = env.stdout([
        "compare",
        "--by",
        "reach",
        "--site",
        "S01",
        "--site",
        "S02",
        "--site",
        "S13",
        "--site",
        "S14",
        "--protocol",
        "kick",
        "--unit",
        "site-year",
        "--per-effort",
        "--seed",
        "1",
        "--permutations",
        "99",
        "--no-store",
    ]);
    assert!(out.contains("exact enumeration of 6 arrangements"), "{out}");
    assert!(out.contains("cannot reach p ≤ 0.05"), "{out}");
}

#[test]
fn impact_finds_the_lower_reach_decline_and_replays() {
    // demo-data/README.md: the invented scenario's lower reach loses animals after
    // 2016 while the other reaches do not.
    let env = TestEnv::with_demo();
    let v = json(
        &env,
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
    );
    for k in [
        "p_value",
        "ratio_of_ratios",
        "ci_low",
        "ci_high",
        "exact",
        "permutations",
        "smallest_possible_p",
    ] {
        assert!(v["size"].get(k).is_some(), "size.{k}");
    }
    for k in [
        "p_value",
        "pseudo_f",
        "exact",
        "permutations",
        "smallest_possible_p",
    ] {
        assert!(v["shape"].get(k).is_some(), "shape.{k}");
    }
    for k in [
        "abundance_differs",
        "composition_differs",
        "verdict",
        "scheme",
    ] {
        assert!(v.get(k).is_some(), "{k}");
    }
    let r = v["size"]["ratio_of_ratios"].as_f64().unwrap();
    assert!(
        r < 1.0 && v["size"]["ci_high"].as_f64().unwrap() < 1.0,
        "{r}"
    );
    assert_eq!(v["abundance_differs"], true);
    assert_eq!(v["sites"]["impact"].as_array().unwrap().len(), 6);
    // The taxa behind the contrast: each taxon's ratio of ratios is its four
    // rates' (IA/IB)/(CA/CB), the splits of both interactions add up to 1, and
    // synonyms are counted under their accepted names.
    let taxa = v["taxa"].as_array().unwrap();
    assert!(taxa.len() > 10);
    let f = |t: &Value, k: &str| t[k].as_f64();
    let (mut shape, mut size) = (0.0, 0.0);
    for t in taxa {
        assert_ne!(t["taxon"], "Hydrobia");
        let rates = [
            "rate_control_before",
            "rate_control_after",
            "rate_impact_before",
            "rate_impact_after",
        ]
        .map(|k| f(t, k).unwrap());
        if let Some(q) = f(t, "ratio_of_ratios") {
            let want = (rates[3] / rates[2]) / (rates[1] / rates[0]);
            assert!(
                (q - want).abs() < 1e-9 * want,
                "{}: {q} vs {want}",
                t["taxon"]
            );
            let p = f(t, "p_value").unwrap();
            assert!(p >= v["size"]["smallest_possible_p"].as_f64().unwrap() - 1e-12);
            assert!(f(t, "p_adjusted").unwrap() >= p);
        }
        shape += f(t, "shape_contribution").unwrap();
        size += f(t, "size_contribution").unwrap();
    }
    assert!(
        (shape - 1.0).abs() < 1e-9 && (size - 1.0).abs() < 1e-9,
        "{shape} {size}"
    );
    let id = v["run_id"].as_i64().unwrap().to_string();
    let out = env.stdout(["runs", "verify", id.as_str()]);
    assert!(
        out.contains("identical") || out.contains("reproduced"),
        "{out}"
    );
    // A role that changes within a site is refused.
    let (code, _, err) = env.run([
        "impact",
        "--by",
        "year",
        "--impact",
        "2016",
        "--before",
        "2008..2015",
        "--after",
        "2016..2025",
        "--protocol",
        "kick",
        "--unit",
        "site-year",
        "--no-store",
    ]);
    assert_eq!(code, 1);
    assert!(err.contains("keep one role"), "{err}");
}
