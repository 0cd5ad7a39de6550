//! `tally distances`, `tally permanova` and `tally dispersion`, end to end: on the
//! demo store and on small one-taxon stores built through `tally import`, whose
//! expected statistics are computed here by hand (ANOVA F, exact enumeration).
use serde_json::Value;

use crate::util::TestEnv;

/// A demo store (`tally demo`): a copy of one demo run per test binary.
fn demo() -> TestEnv {
    TestEnv::with_demo()
}

/// Site attribute `depth` of sample i (a numeric covariate).
fn depth(i: usize) -> f64 {
    0.2 + 0.1 * ((i * 7) % 5) as f64 + 0.01 * i as f64
}

/// A store with one taxon, one site per sample (site attributes `grp`, `block`
/// and `depth`) and one event per site; `samples` = (group, block, count).
fn one_taxon_store(samples: &[(&str, &str, f64)]) -> TestEnv {
    let env = TestEnv::new();
    env.cmd(["init"]).assert().success();
    let mut sites = String::from("code,name,latitude,longitude,grp,block,depth\n");
    let mut records = String::from("site,date,protocol,effort,taxon,count\n");
    for (i, (g, b, c)) in samples.iter().enumerate() {
        sites.push_str(&format!(
            "T{i:02},Test site {i},52.0,-3.0,{g},{b},{}\n",
            depth(i)
        ));
        records.push_str(&format!("T{i:02},2020-05-01,net,2,Baetis,{c}\n"));
    }
    let files = [
        ("sites", "sites.csv", sites),
        (
            "protocols",
            "protocols.csv",
            "code,description,effort_unit\nnet,Hand net,minutes\n".to_string(),
        ),
        (
            "taxa",
            "taxa.csv",
            "name,rank,parent,accepted\nBaetis,genus,,\n".to_string(),
        ),
        ("records", "records.csv", records),
    ];
    for (kind, name, text) in files {
        let p = env.write(name, &text);
        env.cmd(["import", kind, p.to_str().unwrap()])
            .assert()
            .success();
    }
    env
}

fn json(env: &TestEnv, args: &[&str]) -> Value {
    serde_json::from_str(&env.stdout(args)).expect("valid JSON")
}

/// Classical one-way ANOVA F: (SS_between/(a-1)) / (SS_within/(n-a)).
fn anova_f(groups: &[Vec<f64>]) -> f64 {
    let all: Vec<f64> = groups.iter().flatten().copied().collect();
    let n = all.len() as f64;
    let a = groups.len() as f64;
    let grand = all.iter().sum::<f64>() / n;
    let mut ssb = 0.0;
    let mut ssw = 0.0;
    for g in groups {
        let m = g.iter().sum::<f64>() / g.len() as f64;
        ssb += g.len() as f64 * (m - grand).powi(2);
        ssw += g.iter().map(|x| (x - m).powi(2)).sum::<f64>();
    }
    (ssb / (a - 1.0)) / (ssw / (n - a))
}

fn close(a: f64, b: f64, tol: f64) -> bool {
    (a - b).abs() <= tol * b.abs().max(1.0)
}

fn f64_of(v: &Value) -> f64 {
    v.as_f64().unwrap_or_else(|| panic!("not a number: {v}"))
}

/// Three groups of unequal size, one taxon.
const THREE_GROUPS: [(&str, &str, f64); 12] = [
    ("a", "x", 12.0),
    ("a", "y", 15.0),
    ("a", "x", 9.0),
    ("b", "y", 20.0),
    ("b", "x", 26.0),
    ("b", "y", 17.0),
    ("b", "x", 23.0),
    ("c", "y", 14.0),
    ("c", "x", 31.0),
    ("c", "y", 8.0),
    ("c", "x", 19.0),
    ("c", "y", 27.0),
];

fn three_group_values() -> Vec<Vec<f64>> {
    ["a", "b", "c"]
        .iter()
        .map(|g| {
            THREE_GROUPS
                .iter()
                .filter(|s| s.0 == *g)
                .map(|s| s.2)
                .collect()
        })
        .collect()
}

#[test]
fn permanova_euclidean_on_one_taxon_equals_anova_f() {
    let env = one_taxon_store(&THREE_GROUPS);
    let v = json(
        &env,
        &[
            "permanova",
            "--by",
            "grp",
            "--distance",
            "euclidean",
            "--permutations",
            "199",
            "--seed",
            "11",
            "--no-store",
            "--format",
            "json",
        ],
    );
    let expect = anova_f(&three_group_values());
    // Anderson (2001) Austral Ecol. 26:32-46: with Euclidean distance on one
    // variable, the PERMANOVA pseudo-F is Fisher's ANOVA F.
    let f = f64_of(&v["terms"][0]["pseudo_f"]);
    assert!(close(f, expect, 1e-10), "pseudo-F {f} vs ANOVA F {expect}");
    assert_eq!(v["terms"][0]["name"], "grp");
    assert_eq!(v["terms"][0]["df"], 2);
    assert_eq!(v["residual"]["df"], 9);
    assert_eq!(v["total"]["df"], 11);
    // SS_total of Euclidean distances = Σ (x - x̄)², checked from the raw values.
    let all: Vec<f64> = THREE_GROUPS.iter().map(|s| s.2).collect();
    let mean = all.iter().sum::<f64>() / 12.0;
    let sst: f64 = all.iter().map(|x| (x - mean).powi(2)).sum();
    assert!(close(f64_of(&v["total"]["ss"]), sst, 1e-10));
    assert_eq!(v["n"], 12);
    assert_eq!(
        v["groups"],
        serde_json::json!([{"name": "a", "n": 3}, {"name": "b", "n": 4}, {"name": "c", "n": 5}])
    );
    assert_eq!(v["run_id"], Value::Null);
}

#[test]
fn exact_p_value_for_three_plus_three() {
    let values = [3.0, 5.0, 9.0, 8.0, 12.0, 14.0];
    let samples: Vec<(&str, &str, f64)> = values
        .iter()
        .enumerate()
        .map(|(i, &c)| (if i < 3 { "a" } else { "b" }, "x", c))
        .collect();
    let env = one_taxon_store(&samples);
    let v = json(
        &env,
        &[
            "permanova",
            "--by",
            "grp",
            "--distance",
            "euclidean",
            // Any count at least the number of distinct relabellings
            // selects full enumeration (the p-value under test).
            "--permutations",
            "199",
            "--seed",
            "5",
            "--no-store",
            "--format",
            "json",
        ],
    );
    // Full enumeration of the C(6,3) = 20 ways to choose group a, F by hand.
    let split = |mask: u32| {
        let (mut a, mut b) = (Vec::new(), Vec::new());
        for (i, &x) in values.iter().enumerate() {
            if mask & (1 << i) != 0 {
                a.push(x)
            } else {
                b.push(x)
            }
        }
        anova_f(&[a, b])
    };
    let observed = split(0b000111);
    let (mut total, mut extreme) = (0, 0);
    for mask in 0u32..64 {
        if mask.count_ones() == 3 {
            total += 1;
            if split(mask) >= observed * (1.0 - 1e-9) {
                extreme += 1;
            }
        }
    }
    assert_eq!(total, 20);
    assert_eq!(v["exact"], true);
    assert_eq!(v["permutations"], 20);
    let p = f64_of(&v["terms"][0]["p_value"]);
    assert!(
        close(p, extreme as f64 / 20.0, 1e-12),
        "p {p} vs enumeration {extreme}/20"
    );
}

#[test]
fn covariate_after_the_factor_matches_the_ancova_sums_of_squares() {
    let env = one_taxon_store(&THREE_GROUPS);
    let v = json(
        &env,
        &[
            "permanova",
            "--by",
            "grp",
            "--covariate",
            "depth",
            "--strata",
            "block",
            "--distance",
            "euclidean",
            "--permutations",
            "99",
            "--seed",
            "3",
            "--no-store",
            "--format",
            "json",
        ],
    );
    // Sequential sums of squares of y ~ group + covariate (classical ANCOVA, e.g.
    // Snedecor & Cochran, Statistical Methods, ch. on covariance): the group SS is
    // the one-way SS_between; the covariate then explains
    // SP_w² / SS_w(d), with SP_w and SS_w(d) pooled within groups.
    let y: Vec<f64> = THREE_GROUPS.iter().map(|s| s.2).collect();
    let d: Vec<f64> = (0..12).map(depth).collect();
    let g: Vec<&str> = THREE_GROUPS.iter().map(|s| s.0).collect();
    let mean_in = |v: &[f64], grp: &str| {
        let m: Vec<f64> = (0..12).filter(|&i| g[i] == grp).map(|i| v[i]).collect();
        m.iter().sum::<f64>() / m.len() as f64
    };
    let (mut sp, mut ssd, mut ssw) = (0.0, 0.0, 0.0);
    for i in 0..12 {
        let (ey, ed) = (y[i] - mean_in(&y, g[i]), d[i] - mean_in(&d, g[i]));
        sp += ey * ed;
        ssd += ed * ed;
        ssw += ey * ey;
    }
    let grand = y.iter().sum::<f64>() / 12.0;
    let ssb: f64 = (0..12).map(|i| (mean_in(&y, g[i]) - grand).powi(2)).sum();
    let ss_cov = sp * sp / ssd;
    let terms = v["terms"].as_array().unwrap();
    assert_eq!(terms.len(), 2);
    assert_eq!(
        (terms[0]["name"].as_str(), terms[1]["name"].as_str()),
        (Some("grp"), Some("depth"))
    );
    assert!(close(f64_of(&terms[0]["ss"]), ssb, 1e-9));
    assert!(close(f64_of(&terms[1]["ss"]), ss_cov, 1e-9));
    assert!(close(f64_of(&v["residual"]["ss"]), ssw - ss_cov, 1e-9));
    assert_eq!(v["residual"]["df"], 8);
    // pseudo-F of the covariate: (SS/1) / (SS_res/8).
    let f = ss_cov / ((ssw - ss_cov) / 8.0);
    assert!(close(f64_of(&terms[1]["pseudo_f"]), f, 1e-9));
    assert_eq!(v["method"], "freedman-lane");
    assert_eq!(v["scheme"], "within 2 strata");
}

#[test]
fn same_seed_same_json_and_no_store_stores_nothing() {
    let env = demo();
    let args = [
        "permanova",
        "--by",
        "habitat",
        "--protocol",
        "kick",
        "--per-effort",
        "--permutations",
        "199",
        "--seed",
        "42",
        "--pairwise",
        "--no-store",
        "--format",
        "json",
    ];
    let a = env.stdout(args);
    let b = env.stdout(args);
    assert_eq!(a, b);
    let v: Value = serde_json::from_str(&a).unwrap();
    assert_eq!(v["seed"], 42);
    let d = [
        "dispersion",
        "--by",
        "habitat",
        "--permutations",
        "199",
        "--seed",
        "42",
        "--no-store",
        "--format",
        "json",
    ];
    assert_eq!(env.stdout(d), env.stdout(d));
    let runs = json(&env, &["runs", "list", "--format", "json"]);
    assert_eq!(engine_runs(&runs), 0, "--no-store stored a run: {runs}");
}

#[test]
fn permanova_on_demo_reports_every_key_and_stores_a_run() {
    let env = demo();
    let v = json(
        &env,
        &[
            "permanova",
            "--by",
            "reach",
            "--permutations",
            "199",
            "--seed",
            "8",
            "--pairwise",
            "--format",
            "json",
        ],
    );
    for k in [
        "terms",
        "residual",
        "total",
        "permutations",
        "exact",
        "seed",
        "scheme",
        "distance",
        "transform",
        "n",
        "groups",
        "run_id",
        "pairs",
        "notes",
    ] {
        assert!(v.get(k).is_some(), "missing key {k}");
    }
    let t = &v["terms"][0];
    for k in ["name", "df", "ss", "r2", "pseudo_f", "p_value"] {
        assert!(t.get(k).is_some(), "missing term key {k}");
    }
    for k in ["df", "ss"] {
        assert!(v["residual"].get(k).is_some() && v["total"].get(k).is_some());
    }
    assert_eq!(v["distance"], "bray-curtis");
    assert_eq!(v["transform"], "none");
    assert_eq!(v["pairs"].as_array().unwrap().len(), 3);
    for p in v["pairs"].as_array().unwrap() {
        for k in ["a", "b", "pseudo_f", "p_value", "p_holm", "p_bh"] {
            assert!(p.get(k).is_some(), "missing pair key {k}");
        }
        // Holm never lowers a p-value; BH never exceeds Holm (Holm 1979; BH 1995).
        assert!(f64_of(&p["p_holm"]) >= f64_of(&p["p_value"]));
        assert!(f64_of(&p["p_bh"]) <= f64_of(&p["p_holm"]) + 1e-15);
    }
    assert!(
        v["notes"]
            .as_array()
            .unwrap()
            .iter()
            .any(|n| n.as_str().unwrap().contains("tally dispersion"))
    );
    // Reach is assigned to whole sites and sites are revisited, so `--permute auto`
    // tests it by moving whole sites: 18 sites, 6 per reach, far more relabellings
    // than 199 (docs/methods.md, "Permutation designs for revisited sites").
    assert_eq!(v["design"][0]["term"], "reach");
    assert_eq!(v["design"][0]["permute"], "whole-sites");
    assert_eq!(t["scheme"], "whole sites (18 sites)");
    let p = f64_of(&t["p_value"]);
    assert!(close(f64_of(&t["smallest_possible_p"]), 1.0 / 200.0, 1e-12));
    assert!((1.0 / 200.0..=1.0).contains(&p), "reach p = {p}");
    // SS partition: term + residual = total (one term).
    let ss = f64_of(&t["ss"]) + f64_of(&v["residual"]["ss"]);
    assert!(close(ss, f64_of(&v["total"]["ss"]), 1e-10));

    let id = v["run_id"].as_i64().expect("run id");
    let r = json(&env, &["runs", "show", &id.to_string(), "--format", "json"]);
    assert_eq!(r["kind"], "permanova");
    assert_eq!(r["seed"], 8);
    assert_eq!(r["result"]["terms"], v["terms"]);
    let values = r["values"].as_array().unwrap();
    let stored = values
        .iter()
        .find(|pair| pair[0] == "reach.p_value")
        .expect("reach.p_value stored");
    assert_eq!(f64_of(&stored[1]), p);
}

#[test]
fn unknown_by_field_lists_the_fields() {
    let env = demo();
    let out = env
        .cmd(["permanova", "--by", "colour", "--permutations", "99"])
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(1));
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(err.contains("colour"), "{err}");
    for f in ["site", "year", "reach", "habitat"] {
        assert!(err.contains(f), "field {f} not listed: {err}");
    }
    let out = env
        .cmd(["dispersion", "--by", "colour", "--permutations", "99"])
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(1));
    assert!(String::from_utf8_lossy(&out.stderr).contains("reach"));
    let runs = json(&env, &["runs", "list", "--format", "json"]);
    assert_eq!(engine_runs(&runs), 0, "{runs}");
}

/// Stored runs of the kinds these commands write (the demo itself stores others).
fn engine_runs(runs: &Value) -> usize {
    runs.as_array()
        .expect("runs list is an array")
        .iter()
        .filter(|r| r["kind"] == "permanova" || r["kind"] == "dispersion")
        .count()
}

#[test]
fn dispersion_euclidean_on_one_taxon_is_anova_on_absolute_deviations() {
    let env = one_taxon_store(&THREE_GROUPS);
    let v = json(
        &env,
        &[
            "dispersion",
            "--by",
            "grp",
            "--distance",
            "euclidean",
            "--permutations",
            "199",
            "--seed",
            "2",
            "--pairwise",
            "--format",
            "json",
        ],
    );
    // Anderson (2006) Biometrics 62:245-253: with one variable and Euclidean
    // distance the distance to the centroid is |x - group mean|, and the test is
    // the ANOVA F on those absolute deviations (Levene's test about means).
    let groups = three_group_values();
    let dev: Vec<Vec<f64>> = groups
        .iter()
        .map(|g| {
            let m = g.iter().sum::<f64>() / g.len() as f64;
            g.iter().map(|x| (x - m).abs()).collect()
        })
        .collect();
    let f = f64_of(&v["f"]);
    let expect = anova_f(&dev);
    assert!(close(f, expect, 1e-9), "F {f} vs {expect}");
    for (g, d) in v["groups"].as_array().unwrap().iter().zip(&dev) {
        let mean = d.iter().sum::<f64>() / d.len() as f64;
        assert!(close(f64_of(&g["mean_distance"]), mean, 1e-9));
        assert_eq!(g["n"], d.len());
    }
    assert_eq!(v["groups"][0]["name"], "a");
    for k in [
        "p_value",
        "clamped",
        "permutations",
        "seed",
        "pairs",
        "run_id",
    ] {
        assert!(v.get(k).is_some(), "missing key {k}");
    }
    assert_eq!(v["clamped"], 0);
    assert_eq!(v["pairs"].as_array().unwrap().len(), 3);
    let id = v["run_id"].as_i64().expect("stored");
    let r = json(&env, &["runs", "show", &id.to_string(), "--format", "json"]);
    assert_eq!(r["kind"], "dispersion");
    assert_eq!(r["result"]["f"], v["f"]);
}

#[test]
fn dispersion_on_demo_has_every_key() {
    let env = demo();
    let v = json(
        &env,
        &[
            "dispersion",
            "--by",
            "reach",
            "--protocol",
            "kick",
            "--per-effort",
            "--permutations",
            "99",
            "--seed",
            "1",
            "--no-store",
            "--format",
            "json",
        ],
    );
    for k in ["groups", "f", "p_value", "clamped", "permutations", "seed"] {
        assert!(v.get(k).is_some(), "missing key {k}");
    }
    for g in v["groups"].as_array().unwrap() {
        for k in ["name", "n", "mean_distance"] {
            assert!(g.get(k).is_some(), "missing group key {k}");
        }
    }
    assert_eq!(v["seed"], 1);
    assert_eq!(v["permutations"], 99);
}

#[test]
fn distances_json_and_csv_are_the_absolute_differences_for_one_taxon() {
    let samples = [("a", "x", 4.0), ("a", "x", 10.0), ("b", "x", 7.0)];
    let env = one_taxon_store(&samples);
    let v = json(
        &env,
        &["distances", "--distance", "euclidean", "--format", "json"],
    );
    assert_eq!(v["distance"], "euclidean");
    assert_eq!(v["transform"], "none");
    let labels: Vec<&str> = v["samples"]
        .as_array()
        .unwrap()
        .iter()
        .map(|s| s.as_str().unwrap())
        .collect();
    assert_eq!(labels.len(), 3);
    // Euclidean distance on one variable is |x_i - x_k|.
    let x = [4.0f64, 10.0, 7.0];
    let m = v["matrix"].as_array().unwrap();
    for i in 0..3 {
        for k in 0..3 {
            assert!(close(f64_of(&m[i][k]), (x[i] - x[k]).abs(), 1e-12));
        }
    }
    let csv = env.stdout(["distances", "--distance", "euclidean", "--format", "csv"]);
    let mut lines = csv.lines();
    let header: Vec<&str> = lines.next().unwrap().split(',').collect();
    assert_eq!(header[0], "sample");
    assert_eq!(&header[1..], labels.as_slice());
    let row0: Vec<&str> = lines.next().unwrap().split(',').collect();
    assert_eq!(row0, [labels[0], "0", "6", "3"]);
    // Bray-Curtis on one taxon: |a - b| / (a + b) (Bray & Curtis 1957).
    let v = json(&env, &["distances", "--format", "json"]);
    assert_eq!(v["distance"], "bray-curtis");
    assert!(close(f64_of(&v["matrix"][0][1]), 6.0 / 14.0, 1e-12));
    let runs = json(&env, &["runs", "list", "--format", "json"]);
    assert_eq!(runs, serde_json::json!([]), "distances stores no run");
}

#[test]
fn exact_p_value_within_strata() {
    // Two strata of 2 + 2 samples: 6 × 6 = 36 relabellings keep each stratum's
    // group sizes, so the one-way route enumerates them all.
    let samples = [
        ("a", "x", 3.0),
        ("a", "x", 6.0),
        ("b", "x", 10.0),
        ("b", "x", 12.0),
        ("a", "y", 5.0),
        ("a", "y", 9.0),
        ("b", "y", 8.0),
        ("b", "y", 15.0),
    ];
    let env = one_taxon_store(&samples);
    let v = json(
        &env,
        &[
            "permanova",
            "--by",
            "grp",
            "--strata",
            "block",
            "--distance",
            "euclidean",
            // Any count at least the number of distinct relabellings
            // selects full enumeration (the p-value under test).
            "--permutations",
            "199",
            "--seed",
            "4",
            "--no-store",
            "--format",
            "json",
        ],
    );
    let x: Vec<f64> = samples.iter().map(|s| s.2).collect();
    let f_of = |ina: &[bool]| {
        let a: Vec<f64> = (0..8).filter(|&i| ina[i]).map(|i| x[i]).collect();
        let b: Vec<f64> = (0..8).filter(|&i| !ina[i]).map(|i| x[i]).collect();
        anova_f(&[a, b])
    };
    let observed = f_of(&[true, true, false, false, true, true, false, false]);
    let (mut total, mut extreme) = (0, 0);
    for m1 in 0u32..16 {
        for m2 in 0u32..16 {
            if m1.count_ones() != 2 || m2.count_ones() != 2 {
                continue;
            }
            let ina: Vec<bool> = (0..8)
                .map(|i| {
                    if i < 4 {
                        m1 & (1 << i) != 0
                    } else {
                        m2 & (1 << (i - 4)) != 0
                    }
                })
                .collect();
            total += 1;
            if f_of(&ina) >= observed * (1.0 - 1e-9) {
                extreme += 1;
            }
        }
    }
    assert_eq!(total, 36);
    assert_eq!(v["exact"], true);
    assert_eq!(v["permutations"], 36);
    assert_eq!(v["scheme"], "within 2 strata");
    assert!(close(f64_of(&v["terms"][0]["pseudo_f"]), observed, 1e-10));
    let p = f64_of(&v["terms"][0]["p_value"]);
    assert!(
        close(p, extreme as f64 / 36.0, 1e-12),
        "p {p} vs enumeration {extreme}/36"
    );
    // Strata equal to the factor would leave nothing to permute: refused.
    env.cmd(["permanova", "--by", "grp", "--strata", "grp", "--no-store"])
        .assert()
        .code(1);
}

#[test]
fn ordinations_place_the_taxa_and_name_the_top_ones() {
    let env = demo();
    let base = [
        "ordinate",
        "--protocol",
        "kick",
        "--per-effort",
        "--unit",
        "site-year",
        "--site-where",
        "reach=middle",
        "--periods",
        "2008..2015,2016..2025",
    ];
    for method in ["ca", "pcoa"] {
        let mut args: Vec<&str> = base.to_vec();
        args.extend(["--method", method, "--axes", "3", "--format", "json"]);
        let v = json(&env, &args);
        let taxa = v["taxa"].as_array().unwrap();
        assert!(taxa.len() > 10, "{method}: {}", taxa.len());
        // Contributions add up to 1, largest first; three coordinates each.
        let c: Vec<f64> = taxa.iter().map(|t| f64_of(&t["contribution"])).collect();
        assert!((c.iter().sum::<f64>() - 1.0).abs() < 1e-9, "{method}");
        assert!(c.windows(2).all(|w| w[0] >= w[1]), "{method}");
        assert!(
            taxa.iter()
                .all(|t| t["coordinates"].as_array().unwrap().len() == 3)
        );
        // Synonyms are counted under their accepted names (demo-data/README.md).
        assert!(taxa.iter().all(|t| t["taxon"] != "Hydrobia"), "{method}");
        let scores = v["taxa_scores"].as_str().unwrap();
        let want = if method == "ca" {
            "standard coordinates"
        } else {
            "projected"
        };
        assert!(scores.contains(want), "{method}: {scores}");
        // CSV has every taxon as a record of its own.
        let mut args: Vec<&str> = base.to_vec();
        args.extend(["--method", method, "--axes", "3", "--format", "csv"]);
        let csv = env.stdout(&args);
        assert_eq!(
            csv.lines().filter(|l| l.starts_with("taxon,")).count(),
            taxa.len()
        );
        assert!(csv.lines().next().unwrap().ends_with(",contribution"));
    }
    // The table lists --taxa N of them and the plot names the same N.
    let svg = env.path("ca.svg");
    let mut args: Vec<&str> = base.to_vec();
    args.extend([
        "--method",
        "ca",
        "--taxa",
        "4",
        "--plot",
        svg.to_str().unwrap(),
    ]);
    let table = env.stdout(&args);
    assert!(
        table.contains("Taxa with the largest contributions"),
        "{table}"
    );
    assert!(table.contains("more taxa: --taxa N shows more"), "{table}");
    let drawn = std::fs::read_to_string(&svg).unwrap();
    assert_eq!(drawn.matches("class=\"taxon named\"").count(), 4);
}
