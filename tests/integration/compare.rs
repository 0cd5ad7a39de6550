//! End-to-end tests of `tally partition`, `tally compare` and `tally runs verify`,
//! and library-level checks of the partition against ordinary least squares.

use std::collections::BTreeMap;

use nalgebra::DMatrix;
use serde_json::Value;
use tally::analysis::gower::gower_centre;
use tally::analysis::partition::{ShapeAxes, SizeCoding, fit, shape_design, size_design};
use tally::analysis::{Distance, Transform};
use tally::matrix::{CountMatrix, SampleMeta, TaxonMeta};
use tally::workflow::compare::Spec;
use tally::workflow::{Analysis, Prepared, Silent};

use crate::util::{TestEnv, root};

fn fixture() -> Value {
    let text = std::fs::read_to_string(root().join("tests/reference/partition_ols.json"))
        .expect("fixture");
    serde_json::from_str(&text).expect("fixture JSON")
}

fn matrix_of(rows: &[Value]) -> DMatrix<f64> {
    let r: Vec<Vec<f64>> = rows
        .iter()
        .map(|row| {
            row.as_array()
                .unwrap()
                .iter()
                .map(|v| v.as_f64().unwrap())
                .collect()
        })
        .collect();
    DMatrix::from_fn(r.len(), r[0].len(), |i, j| r[i][j])
}

#[test]
fn euclidean_partition_equals_least_squares() {
    // tests/reference/partition_ols.json (make_partition_fixtures.py): pooled statsmodels
    // OLS R² of the column-centred data on size, shape and both, and the Borcard et al.
    // (1992) fractions with statsmodels' adjusted R². With the Euclidean distance,
    // tr(HG)/tr(G) is that R² (Legendre & Anderson 1999; McArdle & Anderson 2001).
    let fx = fixture();
    let cases = fx["cases"].as_array().unwrap();
    assert_eq!(cases.len(), 3);
    for c in cases {
        let y = matrix_of(c["counts"].as_array().unwrap());
        let t = Transform::from_name(c["transform"].as_str().unwrap()).unwrap();
        let coding = if c["size"] == "total" {
            SizeCoding::Total
        } else {
            SizeCoding::LogTotal
        };
        let d = Distance::Euclidean.compute_after(t, &y).unwrap();
        let s = size_design(&y, coding).unwrap();
        let (p, sd) = shape_design(&y, ShapeAxes::Auto { min_resid_df: 10 }).unwrap();
        assert_eq!(sd.kind, "profiles", "{}", c["name"]);
        let f = fit(&gower_centre(&d), &s, &p).unwrap();
        let close = |a: f64, b: &Value| (a - b.as_f64().unwrap()).abs() < 1e-9;
        assert!(close(f.r2_size, &c["r2"]["size"]), "{}", c["name"]);
        assert!(close(f.r2_shape, &c["r2"]["shape"]), "{}", c["name"]);
        assert!(
            close(f.r2_both, &c["r2"]["both"]),
            "{} both: {} vs {}",
            c["name"],
            f.r2_both,
            c["r2"]["both"]
        );
        for (key, got) in [
            (
                "size_only",
                (f.fractions.size_only, f.adjusted_fractions.size_only),
            ),
            ("shared", (f.fractions.shared, f.adjusted_fractions.shared)),
            (
                "shape_only",
                (f.fractions.shape_only, f.adjusted_fractions.shape_only),
            ),
            (
                "unexplained",
                (f.fractions.unexplained, f.adjusted_fractions.unexplained),
            ),
        ] {
            assert!(close(got.0, &c["fractions"][key]), "{} {key}", c["name"]);
            assert!(
                close(got.1, &c["adjusted_fractions"][key]),
                "{} adjusted {key}",
                c["name"]
            );
        }
        let r = f.fractions;
        assert!((r.size_only + r.shared + r.shape_only + r.unexplained - 1.0).abs() < 1e-12);
        assert_eq!(f.shape_df as i64, c["df"]["shape"].as_i64().unwrap());
    }
    // The log1p case has a negative adjusted shared part (suppression), reported as is.
    assert!(cases[1]["adjusted_fractions"]["shared"].as_f64().unwrap() < 0.0);
}

/// A matrix of synthetic samples (one site per sample, year 2000 + i).
fn synthetic(values: DMatrix<f64>, groups: &[&str]) -> CountMatrix {
    let samples = (0..values.nrows())
        .map(|i| SampleMeta {
            label: format!("s{i}"),
            site: format!("s{i}"),
            attributes: BTreeMap::from([("group".to_string(), groups[i].to_string())]),
            attribute_changes: Default::default(),
            year: 2000 + i as i32,
            last_year: 2000 + i as i32,
            season: None,
            first_date: format!("{}-05-01", 2000 + i),
            last_date: format!("{}-05-01", 2000 + i),
            events_pooled: 1,
            effort: 1.0,
            effort_unit: "minutes".into(),
            protocol: "kick".into(),
        })
        .collect();
    let taxa = (0..values.ncols())
        .map(|j| TaxonMeta {
            name: format!("t{j}"),
            rank: "species".into(),
            unidentified: None,
        })
        .collect();
    CountMatrix {
        samples,
        taxa,
        values,
        notes: vec![],
    }
}

/// ChaCha-driven Poisson draw (Knuth's product method; means here are below 60).
fn poisson(rng: &mut impl rand::Rng, lambda: f64) -> f64 {
    use rand::RngExt;
    let l = (-lambda).exp();
    let (mut k, mut p) = (0.0, 1.0);
    loop {
        p *= rng.random::<f64>();
        if p <= l {
            return k;
        }
        k += 1.0;
    }
}

#[test]
fn pure_shape_difference_rejects_size_at_the_nominal_rate_only() {
    // Known truth: two groups of 10 with the same expected total (50) and reversed
    // compositions, each sample scaled by a shared-distribution lognormal factor. The
    // size null holds, so P(p <= 0.05) <= 0.05 for the permutation test with 99
    // permutations (p = (b+1)/100, exact under exchangeability). Over 120 data sets the
    // rejections are at most Binomial(120, 0.05): scipy.stats.binom.sf(15, 120, 0.05) =
    // 3.3e-4, so more than 15 fails by chance with probability < 0.001. The composition
    // difference is large, so composition should be found in (nearly) every data set.
    use rand::RngExt;
    let a = [20.0, 10.0, 8.0, 5.0, 3.0, 2.0, 1.0, 1.0];
    let b = [1.0, 1.0, 2.0, 3.0, 5.0, 8.0, 10.0, 20.0];
    let labels: Vec<&str> = (0..20).map(|i| if i < 10 { "a" } else { "b" }).collect();
    let mut spec = Spec::new("group", 99, 0);
    spec.bootstrap = 0;
    let reps = 120;
    let (mut size_rej, mut shape_rej) = (0, 0);
    for seed in 0..reps {
        let mut rng = tally::analysis::permutation::block_rng(777, seed);
        let y = DMatrix::from_fn(20, 8, |_, _| 0.0);
        let mut y = y;
        for i in 0..20 {
            let z: f64 = (0..12).map(|_| rng.random::<f64>()).sum::<f64>() - 6.0;
            let s = (0.3 * z).exp();
            let mu = if i < 10 { &a } else { &b };
            for j in 0..8 {
                y[(i, j)] = poisson(&mut rng, mu[j] * s);
            }
        }
        spec.seed = seed;
        let prepared = Prepared {
            selection: Default::default(),
            matrix: synthetic(y, &labels),
            notes: vec![],
        };
        let v = serde_json::to_value(spec.run(&prepared, &Silent).unwrap()).unwrap();
        assert!(v["abundance_differs"].is_boolean() && v["size"]["p_value"].is_number());
        if v["abundance_differs"] == true {
            assert!(v["size"]["p_value"].as_f64().unwrap() <= 0.05);
            size_rej += 1;
        }
        if v["composition_differs"] == true {
            shape_rej += 1;
        }
    }
    eprintln!("pure shape: abundance {size_rej}/{reps}, composition {shape_rej}/{reps}");
    assert!(
        size_rej <= 15,
        "pure shape: abundance said to differ in {size_rej}/{reps}"
    );
    // Power: Hellinger distance between the two compositions is ~0.9 against within-group
    // noise of Poisson counts near 50 animals; every data set has p = 0.01 (the minimum),
    // so allowing 5 misses is generous.
    assert!(
        shape_rej >= reps - 5,
        "composition found in only {shape_rej}/{reps}"
    );
}

/// A store holding the demo data and no runs (these tests number their runs from 1).
fn demo_env() -> TestEnv {
    TestEnv::with_demo_data()
}

fn json_of(s: &str) -> Value {
    serde_json::from_str(s).expect("JSON output")
}

fn compare_demo(env: &TestEnv, reach: &str, periods: &str) -> Value {
    let reach = format!("reach={reach}");
    json_of(&env.stdout([
        "compare",
        "--protocol",
        "kick",
        "--per-effort",
        "--unit",
        "site-year",
        "--site-where",
        &reach,
        "--periods",
        periods,
        "--by",
        "period",
        // The verdicts compare p with alpha = 0.05: 199 permutations resolve
        // p down to 0.005, and the planted stories are far from the threshold.
        "--permutations",
        "199",
        "--seed",
        "2026",
        "--format",
        "json",
    ]))
}

#[test]
fn demo_stories_are_recovered_and_verified() {
    // demo-data/README.md, stories 1-3: lower reach ×0.6 from 2016 with composition
    // unchanged; middle reach sensitive taxa ×0.4 from 2019 at constant totals; upper
    // reach stable.
    let env = demo_env();
    let lower = compare_demo(&env, "lower", "2008..2015,2016..2025");
    assert_eq!(lower["abundance_differs"], true, "{}", lower["verdict"]);
    assert_eq!(lower["composition_differs"], false, "{}", lower["verdict"]);
    let ratio = lower["size"]["ratio"].as_f64().unwrap();
    // The README: kick totals per minute from 2016 are 0.59 × those before.
    assert!(
        lower["size"]["ci_low"].as_f64().unwrap() < 0.59
            && lower["size"]["ci_high"].as_f64().unwrap() > 0.59
    );
    assert!((ratio - 0.59).abs() < 0.08, "ratio {ratio}");
    assert!(
        lower["verdict"]
            .as_str()
            .unwrap()
            .contains("abundance lower")
    );
    let middle = compare_demo(&env, "middle", "2008..2018,2019..2025");
    assert_eq!(middle["abundance_differs"], false, "{}", middle["verdict"]);
    assert_eq!(middle["composition_differs"], true, "{}", middle["verdict"]);
    // The taxa behind the middle reach's shift, as in
    // docs/methods.md, "Taxa behind the change": the verdict names drivers whose
    // own change is clear, and the shape contributions add to 1.
    let verdict = middle["verdict"].as_str().unwrap();
    assert!(verdict.contains("mostly through a "), "{verdict}");
    let taxa = middle["comparisons"][0]["taxa"].as_array().unwrap();
    assert!(taxa.len() >= 20);
    let sum: f64 = taxa
        .iter()
        .map(|t| t["shape_contribution"].as_f64().unwrap())
        .sum();
    assert!((sum - 1.0).abs() < 1e-9, "shape contributions add to {sum}");
    let top = taxa
        .iter()
        .max_by(|a, b| {
            a["shape_contribution"]
                .as_f64()
                .unwrap()
                .total_cmp(&b["shape_contribution"].as_f64().unwrap())
        })
        .unwrap();
    assert!(
        verdict.contains(top["taxon"].as_str().unwrap()),
        "{verdict}"
    );
    for t in taxa {
        for k in [
            "taxon",
            "rate_reference",
            "rate_group",
            "share_change_pp",
            "p_value",
            "p_adjusted",
        ] {
            assert!(!t[k].is_null(), "taxa[].{k}");
        }
    }
    // The lower reach lost animals of every kind: nearly every taxon's rate fell.
    let lower_taxa = lower["comparisons"][0]["taxa"].as_array().unwrap();
    let fell = lower_taxa
        .iter()
        .filter(|t| t["ratio"].as_f64().is_some_and(|r| r < 1.0))
        .count();
    assert!(
        fell * 10 >= lower_taxa.len() * 9,
        "{fell} of {} fell",
        lower_taxa.len()
    );
    let upper = compare_demo(&env, "upper", "2008..2015,2016..2025");
    assert_eq!(upper["abundance_differs"], false, "{}", upper["verdict"]);
    assert_eq!(upper["composition_differs"], false, "{}", upper["verdict"]);
    for v in [&lower, &middle, &upper] {
        for key in ["ratio", "ci_low", "ci_high", "p_value"] {
            assert!(v["size"][key].is_number(), "size.{key}");
        }
        for key in ["pseudo_f", "p_value", "dispersion_p_value"] {
            assert!(v["shape"][key].is_number(), "shape.{key}");
        }
        assert_eq!(v["shape"]["distance"], "hellinger");
        assert_eq!(v["combined"]["distance"], "bray-curtis");
        assert_eq!(v["combined"]["transform"], "sqrt");
        let af = &v["combined"]["adjusted_fractions"];
        let sum: f64 = ["size_only", "shared", "shape_only", "unexplained"]
            .iter()
            .map(|k| af[k].as_f64().unwrap())
            .sum();
        assert!((sum - 1.0).abs() < 1e-9);
        assert_eq!(v["comparisons"].as_array().unwrap().len(), 1);
    }
    // Three runs were stored (ids 1-3); each is reproduced exactly.
    for id in ["1", "2", "3"] {
        let rep = json_of(&env.stdout(["runs", "verify", id, "--format", "json"]));
        assert_eq!(rep["identical"], true, "run {id}: {rep}");
        assert_eq!(rep["fingerprint_matches"], true);
        assert!(rep["compared"].as_u64().unwrap() > 50);
    }
    // Edit one count of a lower-reach kick event: the fingerprint of run 1 changes.
    let m = json_of(&env.stdout([
        "matrix",
        "--protocol",
        "kick",
        "--site-where",
        "reach=lower",
        "--unit",
        "event",
        "--format",
        "json",
    ]));
    let event = m["samples"][0]["label"].as_str().unwrap().to_string();
    let taxon = m["taxa"][0].as_str().unwrap().to_string();
    let old = m["values"][0][0].as_f64().unwrap();
    let file = env.write(
        "fix.csv",
        &format!("event,taxon,count\n{event},{taxon},{}\n", old + 5.0),
    );
    env.stdout(["import", "counts", file.to_str().unwrap(), "--replace"]);
    let o = env
        .cmd(["runs", "verify", "1", "--format", "json"])
        .output()
        .unwrap();
    assert_eq!(o.status.code(), Some(1));
    let rep = json_of(&String::from_utf8(o.stdout).unwrap());
    assert_eq!(rep["fingerprint_matches"], false);
    assert_eq!(rep["identical"], false);
    assert!(String::from_utf8_lossy(&o.stderr).contains("fingerprint changed"));
    // Run 2 (middle reach) does not use that event: still identical.
    let rep2 = json_of(&env.stdout(["runs", "verify", "2", "--format", "json"]));
    assert_eq!(rep2["identical"], true);
}

#[test]
fn partition_command_reports_fractions_tests_and_not_applicable_tests() {
    let env = demo_env();
    let base = [
        "partition",
        "--protocol",
        "kick",
        "--per-effort",
        "--unit",
        "site-year",
        "--site-where",
        "reach=lower",
    ];
    let mut args: Vec<&str> = base.to_vec();
    args.extend(["--permutations", "99", "--seed", "5", "--format", "json"]);
    let v = json_of(&env.stdout(&args));
    for k in ["fractions", "adjusted_fractions"] {
        let sum: f64 = ["size_only", "shared", "shape_only", "unexplained"]
            .iter()
            .map(|p| v[k][p].as_f64().unwrap())
            .sum();
        assert!((sum - 1.0).abs() < 1e-9, "{k}");
    }
    assert!(v["tests"]["size_only"]["p_value"].is_number());
    assert!(v["tests"]["shape_only"]["pseudo_f"].is_number());
    assert_eq!(v["distance"], "bray-curtis");
    assert_eq!(v["transform"], "none");
    assert!(v["shape_axes"].as_u64().unwrap() > 0);
    // The stored run has the headline values.
    let run = json_of(&env.stdout(["runs", "show", "1", "--format", "json"]));
    let names: Vec<&str> = run["values"]
        .as_array()
        .unwrap()
        .iter()
        .map(|p| p[0].as_str().unwrap())
        .collect();
    for n in [
        "adj.size_only",
        "adj.shape_only",
        "adj.shared",
        "adj.unexplained",
        "p.size_only",
        "p.shape_only",
    ] {
        assert!(names.contains(&n), "{n} in {names:?}");
    }
    // --compare-distances: one partition per pair; chi-square with the whole profile
    // space explains everything (docs/methods.md, "The shape design"), so its tests are null.
    let mut args: Vec<&str> = base.to_vec();
    args.extend([
        "--compare-distances",
        "--permutations",
        "99",
        "--seed",
        "5",
        "--format",
        "json",
        "--no-store",
    ]);
    let v = json_of(&env.stdout(&args));
    let parts = v["partitions"].as_array().unwrap();
    assert_eq!(parts.len(), 5);
    let chi = parts
        .iter()
        .find(|p| p["distance"] == "chi-square")
        .unwrap();
    assert_eq!(chi["one_block_explains_all"], true);
    assert!(chi["tests"]["size_only"]["p_value"].is_null());
    assert!(chi["tests"]["shape_only"]["pseudo_f"].is_null());
    assert!(
        chi["adjusted_fractions"]["size_only"]
            .as_f64()
            .unwrap()
            .abs()
            < 1e-6
    );
    let bc = &parts[0];
    assert_eq!(
        (bc["distance"].as_str(), bc["transform"].as_str()),
        (Some("bray-curtis"), Some("none"))
    );
    // The lower reach's story is a size change: Bray-Curtis (which carries size) has a
    // larger size-only part than Hellinger (which is blind to totals).
    let hel = parts.iter().find(|p| p["distance"] == "hellinger").unwrap();
    assert!(
        bc["adjusted_fractions"]["size_only"].as_f64().unwrap()
            > hel["adjusted_fractions"]["size_only"].as_f64().unwrap() + 0.02
    );
    // The table output names the caution and what "shared" means.
    let mut args: Vec<&str> = base.to_vec();
    args.extend(["--permutations", "99", "--seed", "5", "--no-store"]);
    let table = env.stdout(&args);
    assert!(table.contains("Warton & Hui 2017"));
    assert!(table.contains("cannot be assigned to either"));
}

#[test]
fn rarefying_refuses_counts_per_effort_and_runs_on_raw_counts() {
    let env = demo_env();
    let o = env
        .cmd([
            "compare",
            "--protocol",
            "kick",
            "--per-effort",
            "--unit",
            "site-year",
            "--by",
            "reach",
            "--rarefy",
            "min",
            "--permutations",
            "99",
            "--seed",
            "1",
            "--no-store",
        ])
        .output()
        .unwrap();
    assert_eq!(o.status.code(), Some(1));
    assert!(String::from_utf8_lossy(&o.stderr).contains("whole counts"));
    let v = json_of(&env.stdout([
        "compare",
        "--protocol",
        "kick",
        "--unit",
        "site-year",
        "--by",
        "reach",
        "--rarefy",
        "min",
        "--rarefy-reps",
        "3",
        "--permutations",
        "99",
        "--seed",
        "1",
        "--format",
        "json",
    ]));
    assert!(v["shape"]["rarefied"]["depth"].as_u64().unwrap() > 0);
    // Three reaches: every pair, Holm-adjusted; no top-level booleans.
    let comps = v["comparisons"].as_array().unwrap();
    assert_eq!(comps.len(), 3);
    assert!(v.get("abundance_differs").is_none());
    for c in comps {
        assert!(
            c["size"]["p_adjusted"].as_f64().unwrap() >= c["size"]["p_value"].as_f64().unwrap()
        );
        assert!(c["abundance_differs"].is_boolean() && c["composition_differs"].is_boolean());
    }
    // Stored as run 1 (the refused command stored nothing) and reproduced.
    let rep = json_of(&env.stdout(["runs", "verify", "1", "--format", "json"]));
    assert_eq!(rep["identical"], true, "{rep}");
}

#[test]
fn strata_equal_to_the_groups_are_refused() {
    // Permuting within the levels of the grouping itself cannot move any sample
    // to another group; this used to overflow an integer in debug builds.
    let env = demo_env();
    for cmd in [
        ["compare", "--by", "reach", "--strata", "reach"],
        // Every site lies in one reach: no stratum leaves the groups room to vary.
        ["compare", "--by", "reach", "--strata", "site"],
    ] {
        let mut args: Vec<&str> = cmd.to_vec();
        args.extend([
            "--protocol",
            "kick",
            "--unit",
            "site-year",
            "--permutations",
            "99",
            "--seed",
            "1",
        ]);
        let o = env.cmd(&args).output().unwrap();
        assert_eq!(o.status.code(), Some(1), "{args:?}");
        let err = String::from_utf8_lossy(&o.stderr);
        assert!(err.contains(&format!("--strata {}", args[4])), "{err}");
    }
    // Nothing was stored.
    let runs = json_of(&env.stdout(["runs", "list", "--format", "json"]));
    assert_eq!(runs.as_array().map(Vec::len), Some(0), "{runs}");
}

#[test]
fn compare_and_partition_runs_are_replayed_in_process() {
    // Runs stored by the commands keep their typed spec (strata, shape axes and
    // periods included); `runs verify` replays it on the stored selection.
    let env = demo_env();
    let sel = ["--protocol", "kick", "--per-effort", "--unit", "site-year"];
    let mut args = vec![
        "partition",
        "--site-where",
        "reach=upper",
        "--shape-axes",
        "5",
    ];
    args.extend(sel);
    args.extend(["--strata", "site", "--permutations", "99", "--seed", "3"]);
    env.stdout(&args);
    let mut args = vec![
        "compare",
        "--by",
        "period",
        "--periods",
        "2008..2013,2014..2025",
    ];
    args.extend(sel);
    args.extend(["--strata", "site", "--permutations", "99", "--seed", "4"]);
    let v = json_of(&env.stdout(args.iter().copied().chain(["--format", "json"])));
    assert_eq!(v["run_id"], 2);
    assert!(
        v["scheme"].as_str().unwrap().contains("within"),
        "{}",
        v["scheme"]
    );
    let shown = json_of(&env.stdout(["runs", "show", "2", "--format", "json"]));
    let params = &shown["parameters"];
    assert_eq!(params["kind"], "compare", "{params}");
    assert_eq!(
        params["periods"],
        serde_json::json!([[2008, 2013], [2014, 2025]])
    );
    for id in ["1", "2"] {
        let rep = json_of(&env.stdout(["runs", "verify", id, "--format", "json"]));
        assert_eq!(rep["identical"], true, "run {id}: {rep}");
        assert!(rep["compared"].as_u64().unwrap() > 20, "run {id}: {rep}");
    }
}
