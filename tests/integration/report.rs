//! End to end: `tally ordinate` (plots, JSON, the CCA test), `tally report`,
//! the demo's report and stories, and rendering the report in headless Chromium.

use std::path::{Path, PathBuf};
use std::process::Command;

use serde_json::Value;

use crate::util::TestEnv;

const SEL: [&str; 5] = ["--protocol", "kick", "--per-effort", "--unit", "site-year"];

/// A copy of the store and report of one `tally demo` run per test binary.
fn demo_env() -> TestEnv {
    TestEnv::with_demo()
}

fn args<'a>(command: &'a str, extra: &[&'a str]) -> Vec<&'a str> {
    let mut v: Vec<&str> = vec![command];
    v.extend_from_slice(&SEL);
    v.extend_from_slice(extra);
    v
}

#[test]
fn ordinate_plot_is_xml_with_groups_and_ellipses() {
    let env = demo_env();
    let plot = env.path("ca.svg");
    let plot_s = plot.to_string_lossy().to_string();
    let out = env.stdout(args(
        "ordinate",
        &[
            "--method", "ca", "--by", "reach", "--plot", &plot_s, "--format", "json",
        ],
    ));
    let v: Value = serde_json::from_str(&out).unwrap();
    assert_eq!(v["method"], "ca");
    let svg = std::fs::read_to_string(&plot).unwrap();
    let doc = roxmltree::Document::parse(&svg).expect("plot must be well-formed XML");
    let groups: Vec<_> = doc
        .descendants()
        .filter(|n| n.has_tag_name("g") && n.attribute("class") == Some("group"))
        .collect();
    let labels: Vec<&str> = groups
        .iter()
        .filter_map(|g| g.attribute("data-label"))
        .collect();
    assert_eq!(labels, ["lower", "middle", "upper"]);
    for g in &groups {
        let ellipses: Vec<_> = g
            .descendants()
            .filter(|n| n.has_tag_name("g") && n.attribute("class") == Some("ellipse"))
            .collect();
        assert_eq!(ellipses.len(), 1);
        let lines = ellipses[0]
            .descendants()
            .filter(|n| n.has_tag_name("polyline") || n.has_tag_name("path"))
            .count();
        assert_eq!(lines, 1);
    }
    // Sample counts per group in the JSON add up to the samples, and the
    // point markers of the plot are one per sample (circle, polygon…) per group.
    let n = v["samples_n"].as_u64().unwrap();
    let per_group: u64 = v["groups"]
        .as_array()
        .unwrap()
        .iter()
        .map(|g| g["n"].as_u64().unwrap())
        .sum();
    assert_eq!(per_group, n);
    assert_eq!(v["samples"].as_array().unwrap().len() as u64, n);
    // Shares of the CA axes lie in (0, 1) and decrease.
    let s: Vec<f64> = v["axes"]
        .as_array()
        .unwrap()
        .iter()
        .map(|a| a["share"].as_f64().unwrap())
        .collect();
    assert!(s[0] > s[1] && s[1] > 0.0 && s[0] + s[1] < 1.0);
    // An existing plot is not replaced without --force.
    let o = env
        .cmd(args(
            "ordinate",
            &["--method", "ca", "--by", "reach", "--plot", &plot_s],
        ))
        .output()
        .unwrap();
    assert_eq!(o.status.code(), Some(1));
    assert!(String::from_utf8_lossy(&o.stderr).contains("--force"));
    env.stdout(args(
        "ordinate",
        &[
            "--method", "ca", "--by", "reach", "--plot", &plot_s, "--force",
        ],
    ));
}

#[test]
fn pcoa_states_negative_eigenvalues_and_csv_has_axes() {
    let env = demo_env();
    let out = env.stdout(args(
        "ordinate",
        &[
            "--site-where",
            "reach=upper",
            "--method",
            "pcoa",
            "--by",
            "habitat",
            "--format",
            "json",
        ],
    ));
    let v: Value = serde_json::from_str(&out).unwrap();
    // Bray-Curtis is not Euclidean: some negative eigenvalues
    // (docs/methods.md, "Euclidean and non-Euclidean dissimilarities").
    let share = v["negative_eigenvalue_share"].as_f64().unwrap();
    assert!(share > 0.0 && share < 0.5, "{share}");
    assert!(!v["negative_eigenvalues"].as_array().unwrap().is_empty());
    // Euclidean distance on Hellinger-transformed data is Euclidean: no negative share.
    let out = env.stdout(args(
        "ordinate",
        &[
            "--site-where",
            "reach=upper",
            "--method",
            "pcoa",
            "--distance",
            "euclidean",
            "--transform",
            "hellinger",
            "--format",
            "json",
        ],
    ));
    let v: Value = serde_json::from_str(&out).unwrap();
    assert!(v["negative_eigenvalue_share"].as_f64().unwrap() < 1e-9);
    let csv = env.stdout(args(
        "ordinate",
        &["--method", "pcoa", "--axes", "3", "--format", "csv"],
    ));
    let mut lines = csv.lines();
    assert_eq!(
        lines.next(),
        Some("record,label,site,year,group,axis1,axis2,axis3,contribution")
    );
    assert!(lines.next().unwrap().starts_with("eigenvalue,"));
    assert!(lines.next().unwrap().starts_with("share,"));
    assert!(lines.next().unwrap().starts_with("sample,"));
}

#[test]
fn cca_tests_the_constraints_and_stores_a_run() {
    let env = demo_env();
    let run = |reach: &str| -> Value {
        let w = format!("reach={reach}");
        let out = env.stdout(args(
            "ordinate",
            &[
                "--site-where",
                &w,
                "--method",
                "cca",
                "--constraint",
                "period",
                "--constraint",
                "habitat",
                "--periods",
                "2008..2015,2016..2025",
                "--permutations",
                "199",
                "--seed",
                "5",
                "--format",
                "json",
            ],
        ));
        serde_json::from_str(&out).unwrap()
    };
    let middle = run("middle");
    let t = &middle["test"];
    assert_eq!(t["permutations"], 199);
    assert_eq!(t["seed"], 5);
    assert_eq!(t["df_constraints"], 2);
    // demo-data/README.md: the middle reach changes composition from 2019 (and
    // habitats differ by construction), so 0 of 199 permutations should reach it.
    assert!(t["p_value"].as_f64().unwrap() <= 0.01);
    let share = middle["constrained_share"].as_f64().unwrap();
    let sum = middle["constrained_inertia"].as_f64().unwrap()
        + middle["unconstrained_inertia"].as_f64().unwrap();
    assert!((sum - middle["total"].as_f64().unwrap()).abs() < 1e-9);
    assert!(share > 0.0 && share < 1.0);
    let runs = env.stdout(["runs", "list", "--format", "json"]);
    assert!(runs.contains("\"ordinate\""), "{runs}");
}

#[test]
fn ordinate_runs_with_periods_are_reproduced_by_verify() {
    // The stored fingerprint is that of the matrix before the periods are
    // applied, which is what `runs verify` reassembles; the second set of
    // periods leaves rows out, so a fingerprint taken after the periods would differ.
    let env = TestEnv::with_demo_data();
    for periods in ["2008..2015,2016..2025", "2010..2014,2016..2020"] {
        let out = env.stdout(args(
            "ordinate",
            &[
                "--method",
                "cca",
                "--constraint",
                "period",
                "--periods",
                periods,
                "--by",
                "reach",
                "--permutations",
                "99",
                "--seed",
                "11",
                "--format",
                "json",
            ],
        ));
        let v: Value = serde_json::from_str(&out).unwrap();
        let id = v["run_id"]
            .as_i64()
            .expect("a CCA run is stored")
            .to_string();
        assert_eq!(v["by"], "reach");
        let rep: Value =
            serde_json::from_str(&env.stdout(["runs", "verify", &id, "--format", "json"])).unwrap();
        assert_eq!(rep["fingerprint_matches"], true, "{periods}: {rep}");
        assert_eq!(rep["identical"], true, "{periods}: {rep}");
        assert!(rep["compared"].as_u64().unwrap() > 100, "{rep}");
    }
}

fn sections_present(html: &str) {
    for id in [
        "glance",
        "store",
        "compare",
        "partition",
        "ordination",
        "totals",
        "trends",
        "diversity",
        "provenance",
        "cautions",
    ] {
        assert!(
            html.contains(&format!("<section id=\"{id}\"")),
            "section {id} missing"
        );
    }
    assert!(
        !html.contains("http"),
        "the report must not hold a web address"
    );
    assert!(!html.to_lowercase().contains("<script"));
    assert!(html.contains("<svg class=\"plot\""));
}

#[test]
fn report_is_one_self_contained_file() {
    let env = demo_env();
    let out = env.path("r.html");
    let out_s = out.to_string_lossy().to_string();
    // The p-values of the report are not under test: few permutations.
    env.stdout(args(
        "report",
        &["--by", "reach", "--permutations", "199", "--out", &out_s],
    ));
    let html = std::fs::read_to_string(&out).unwrap();
    sections_present(&html);
    assert!(html.contains("Correspondence analysis by reach"));
    // The trend part was not asked for with --by; the comparison was.
    assert!(html.contains("Not run: a trend analysis was not requested"));
    let o = env
        .cmd(args(
            "report",
            &["--by", "reach", "--permutations", "199", "--out", &out_s],
        ))
        .output()
        .unwrap();
    assert_eq!(o.status.code(), Some(1));
    // Neither --by nor --split-by: a usage error.
    let o = env
        .cmd(args("report", &["--out", "x.html"]))
        .output()
        .unwrap();
    assert_eq!(o.status.code(), Some(2));
}

#[test]
fn demo_recovers_the_stories_and_writes_its_report() {
    let env = TestEnv::with_demo();
    let account = crate::util::demo_account();
    let report = env.dir.path().join("tally-demo-report.html");
    let html = std::fs::read_to_string(&report).unwrap();
    sections_present(&html);
    let mut store = tally::store::Store::open(&env.db).unwrap();
    let ran = tally::demo::scenario::run(&store).unwrap();
    let ids = tally::workflow::runs::save(&mut store, &ran.to_save().unwrap()).unwrap();
    let a = ran.analysis(&ids).unwrap();
    let by: std::collections::HashMap<&str, &tally::demo::scenario::ReachFinding> =
        a.reaches.iter().map(|r| (r.reach.as_str(), r)).collect();
    // demo-data/README.md stories: lower loses ~40 % per minute from 2016 with
    // composition unchanged; middle changes composition at constant totals;
    // upper is stable.
    assert!(
        by["lower"].totals_ratio < 0.75,
        "{}",
        by["lower"].totals_ratio
    );
    assert!(by["lower"].composition_p > 0.05);
    assert!((0.85..1.2).contains(&by["middle"].totals_ratio));
    assert!(by["middle"].composition_p < 0.05);
    assert!((0.85..1.15).contains(&by["upper"].totals_ratio));
    assert!(by["upper"].composition_p > 0.05);
    // The same stories through `tally compare` (size test and shape PERMANOVA,
    // 2008–2015 against 2016–2025) and `tally trend` (year permutations with a
    // breakpoint search): simulation with known truth (demo-data/README.md).
    let v = |r: &str| by[r].verdict.as_str();
    assert!(v("lower").contains("abundance lower"), "{}", v("lower"));
    assert!(
        v("lower").contains("composition not different"),
        "{}",
        v("lower")
    );
    assert!(
        v("middle").contains("abundance not different"),
        "{}",
        v("middle")
    );
    assert!(
        v("middle").contains("composition different"),
        "{}",
        v("middle")
    );
    assert!(
        v("upper").contains("abundance not different"),
        "{}",
        v("upper")
    );
    assert!(
        v("upper").contains("composition not different"),
        "{}",
        v("upper")
    );
    assert_eq!(by["lower"].diagnosis, "abundance");
    assert_eq!(by["middle"].diagnosis, "composition");
    assert_eq!(by["upper"].diagnosis, "none");
    // demo-data/README.md: the lower reach's fall in taxa seen is a fall in
    // numbers (richness at equal coverage holds); the middle reach loses evenness.
    assert!(
        by["lower"].diversity.contains("(size)"),
        "{}",
        by["lower"].diversity
    );
    assert!(
        by["middle"].diversity.contains("evenness changed"),
        "{}",
        by["middle"].diversity
    );
    assert!(
        html.contains("diversity-time"),
        "the diversity plots are in the report"
    );
    assert!(by.values().all(|r| r.compare_run_id.is_some()));
    // The account printed by the demo says the same.
    for line in [
        "lower reach: abundance",
        "middle reach: composition",
        "upper reach: none",
    ] {
        assert!(account.contains(line), "{line} missing from:\n{account}");
    }
}

/// `tally report --by reach --split-by reach` on the demo selection, written to
/// `name` in the test's directory, with its runs stored.
fn full_report(env: &TestEnv, name: &str, permutations: &str, seed: &str) -> PathBuf {
    let out = env.path(name);
    let out_s = out.to_string_lossy().to_string();
    env.stdout(args(
        "report",
        &[
            "--by",
            "reach",
            "--split-by",
            "reach",
            "--out",
            &out_s,
            "--permutations",
            permutations,
            "--seed",
            seed,
        ],
    ));
    out
}

#[test]
fn every_run_the_demo_and_a_report_store_verifies() {
    // `tally demo` stores its composition tests, comparisons, partition,
    // trends and diversities; a report with --by and --split-by stores its
    // comparison, partition and one trend and one diversity per group. `runs verify` replays each from its
    // stored spec and selection and must reproduce every stored number.
    let env = demo_env();
    let out = full_report(&env, "r.html", "99", "7");
    let list: Value =
        serde_json::from_str(&env.stdout(["runs", "list", "--format", "json"])).unwrap();
    let ids: Vec<String> = list
        .as_array()
        .unwrap()
        .iter()
        .map(|r| r["id"].as_i64().unwrap().to_string())
        .collect();
    // Demo: 3 composition tests, 3 comparisons, 1 partition, 3 trends, 3
    // diversities; report: 1 comparison, 1 partition, 3 trends, 3 diversities.
    assert_eq!(ids.len(), 21, "{list}");
    for id in &ids {
        let rep: Value =
            serde_json::from_str(&env.stdout(["runs", "verify", id, "--format", "json"])).unwrap();
        assert_eq!(rep["identical"], true, "run {id}: {rep}");
        // The command `runs show` prints recomputes the same numbers.
        let shown: Value =
            serde_json::from_str(&env.stdout(["runs", "show", id, "--format", "json"])).unwrap();
        let command = shown["command"].as_str().expect("a command line");
        assert!(shown["command_note"].is_null(), "run {id}: {shown}");
        let mut words: Vec<&str> = command.split_whitespace().skip(1).collect();
        words.extend(["--format", "json", "--no-store"]);
        let (code, rerun, err) = env.run(&words);
        assert_eq!(code, 0, "run {id}: {command}: {err}");
        let rerun: Value = serde_json::from_str(&rerun).unwrap();
        same_numbers(&shown["result"], &rerun, &format!("run {id}: {command}"));
    }
    // The report names the seed and permutations of each stored part.
    let html = std::fs::read_to_string(&out).unwrap();
    assert!(html.contains("--permutations 99 --seed 7"));
}

fn chromium() -> Option<PathBuf> {
    let path = std::env::var_os("PATH")?;
    for dir in std::env::split_paths(&path) {
        for name in ["chromium", "chromium-browser"] {
            let p = dir.join(name);
            if p.is_file() {
                return Some(p);
            }
        }
    }
    None
}

/// The browser of a test that needs Chromium. When none is on the PATH the
/// test fails if `TALLY_REQUIRE_CHROMIUM=1` (CI installs it and sets this),
/// and is skipped otherwise, with a notice written past the test harness's
/// output capture so that it shows in a plain `cargo test`.
fn require_chromium(test: &str) -> Option<PathBuf> {
    if let Some(p) = chromium() {
        return Some(p);
    }
    if std::env::var_os("TALLY_REQUIRE_CHROMIUM").is_some_and(|v| v == "1") {
        panic!("{test} needs Chromium: no chromium on the PATH and TALLY_REQUIRE_CHROMIUM=1");
    }
    use std::io::Write;
    let _ = writeln!(
        std::io::stderr(),
        "notice: {test} SKIPPED: it needs Chromium and no chromium is on the PATH \
         (set TALLY_REQUIRE_CHROMIUM=1 to make this a failure)"
    );
    None
}

/// Decode a PNG and return (width, height, grey levels).
fn grey_pixels(png_path: &Path) -> (u32, u32, Vec<f64>) {
    let decoder = png::Decoder::new(std::fs::File::open(png_path).unwrap());
    let mut reader = decoder.read_info().unwrap();
    let mut buf = vec![0; reader.output_buffer_size()];
    let info = reader.next_frame(&mut buf).unwrap();
    let channels = info.color_type.samples();
    assert_eq!(info.bit_depth, png::BitDepth::Eight);
    let px = buf[..info.buffer_size()]
        .chunks(channels)
        .map(|c| {
            c.iter()
                .take(3.min(channels))
                .map(|&v| f64::from(v))
                .sum::<f64>()
                / 3.0_f64.min(channels as f64)
        })
        .collect();
    (info.width, info.height, px)
}

/// Needs Chromium (see [`require_chromium`]).
#[test]
fn report_renders_in_headless_chromium() {
    let Some(browser) = require_chromium("report_renders_in_headless_chromium") else {
        return;
    };
    let env = demo_env();
    let report = env.dir.path().join("tally-demo-report.html");
    let shot = env.path("report.png");
    let profile = tempfile::tempdir().unwrap();
    // coreutils `timeout` keeps a stuck browser from holding the suite.
    let status = Command::new("timeout")
        .arg("180")
        .arg(browser)
        .args([
            "--headless",
            "--no-sandbox",
            "--disable-gpu",
            "--disable-quic",
            "--no-first-run",
            "--disable-background-networking",
            "--disable-component-update",
            "--disable-sync",
        ])
        .arg(format!("--user-data-dir={}", profile.path().display()))
        .arg(format!("--screenshot={}", shot.display()))
        .arg("--window-size=1200,2000")
        .arg(format!("file://{}", report.display()))
        .output()
        .unwrap();
    assert!(
        shot.exists(),
        "no screenshot: {}",
        String::from_utf8_lossy(&status.stderr)
    );
    let (w, h, px) = grey_pixels(&shot);
    assert_eq!((w, h), (1200, 2000));
    let mean = px.iter().sum::<f64>() / px.len() as f64;
    let var = px.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / px.len() as f64;
    // A blank page is one colour: variance 0. A rendered report has text and
    // rules on white: mostly light, with a clear share of dark pixels.
    assert!(var > 100.0, "grey variance {var}");
    let dark = px.iter().filter(|v| **v < 128.0).count() as f64 / px.len() as f64;
    assert!(
        dark > 0.005 && mean > 150.0,
        "dark share {dark}, mean {mean}"
    );
}

#[test]
fn report_design_flags_reach_every_part_and_its_command() {
    let env = demo_env();
    let out = env.path("free.html");
    let out_s = out.to_string_lossy().to_string();
    env.stdout(args(
        "report",
        &[
            "--by",
            "reach",
            "--permute",
            "free",
            "--out",
            &out_s,
            "--permutations",
            "19",
            "--seed",
            "2",
            "--no-store",
        ],
    ));
    let html = std::fs::read_to_string(&out).unwrap();
    // The comparison and the partition say "free" beside their p-values, and
    // their commands carry the flag.
    assert!(html.contains("free, as asked"), "reason of the scheme");
    assert!(html.contains("--compare-distances --permute free --permutations 19"));
    assert!(html.contains("--by reach --permute free --permutations 19"));
    assert!(html.contains("<th>Permutation scheme</th>"));
    // The trends cannot be tested under whole sites: refused, and no file written.
    let bad = env.path("bad.html");
    let bad_s = bad.to_string_lossy().to_string();
    let (code, _, err) = env.run(args(
        "report",
        &[
            "--split-by",
            "reach",
            "--permute",
            "whole-sites",
            "--out",
            &bad_s,
            "--permutations",
            "19",
            "--no-store",
        ],
    ));
    assert_eq!(code, 1, "{err}");
    assert!(
        err.contains("year") && err.contains("within-sites"),
        "{err}"
    );
    assert!(!bad.exists());
}

/// Every number leaf of `v`, by its path.
fn leaves(v: &Value, path: String, out: &mut Vec<(String, f64)>) {
    match v {
        Value::Number(n) => out.push((path, n.as_f64().unwrap())),
        Value::Array(a) => {
            for (i, x) in a.iter().enumerate() {
                leaves(x, format!("{path}[{i}]"), out);
            }
        }
        Value::Object(o) => {
            for (k, x) in o {
                if k != "run_id" {
                    leaves(x, format!("{path}.{k}"), out);
                }
            }
        }
        _ => {}
    }
}

fn same_numbers(stored: &Value, rerun: &Value, what: &str) {
    let (mut a, mut b) = (Vec::new(), Vec::new());
    leaves(stored, String::new(), &mut a);
    leaves(rerun, String::new(), &mut b);
    assert!(a.len() > 5, "{what}: too few numbers");
    let b: std::collections::HashMap<String, f64> = b.into_iter().collect();
    for (path, x) in a {
        let y = b
            .get(&path)
            .unwrap_or_else(|| panic!("{what}: {path} missing from the rerun"));
        assert!(
            x == *y || (x - y).abs() <= 1e-12 * x.abs().max(1.0),
            "{what}: {path} stored {x}, rerun {y}"
        );
    }
}

#[test]
fn the_commands_the_report_prints_reproduce_its_numbers() {
    // The "how each part was obtained" table: each command, run as printed with
    // --format json, gives the numbers of the part's stored run (which the HTML
    // renders), and the ordination's axis shares as the page shows them.
    let env = demo_env();
    let out = full_report(&env, "cmd.html", "49", "5");
    let html = std::fs::read_to_string(&out).unwrap();
    let mut rows = Vec::new();
    for chunk in html.split("<tr><td>").skip(1) {
        let Some(rest) = chunk.split_once("</td><td><code>") else {
            continue;
        };
        let Some((command, tail)) = rest.1.split_once("</code></td><td") else {
            continue;
        };
        let ids = tail
            .split_once('>')
            .and_then(|(_, t)| t.split_once("</td>"))
            .map_or("", |(ids, _)| ids);
        rows.push((rest.0.to_string(), command.to_string(), ids.to_string()));
    }
    let parts: Vec<&str> = rows.iter().map(|r| r.0.as_str()).collect();
    assert!(
        parts.contains(&"comparison by reach") && parts.contains(&"trends"),
        "{parts:?}"
    );
    for (part, command, ids) in &rows {
        assert!(command.starts_with("tally "), "{part}: {command}");
        let mut words: Vec<&str> = command.split_whitespace().skip(1).collect();
        if words == ["summary"] {
            continue;
        }
        words.extend(["--format", "json"]);
        if !ids.is_empty() {
            words.push("--no-store");
        }
        let (code, rerun, err) = env.run(&words);
        assert_eq!(code, 0, "{part}: {command}: {err}");
        let rerun: Value = serde_json::from_str(&rerun).unwrap();
        let ids: Vec<&str> = ids.split(", ").filter(|s| !s.is_empty()).collect();
        if ids.is_empty() {
            // The ordination stores no run: its axis shares are on the page.
            let share = rerun["axes"][0]["share"].as_f64().unwrap();
            let shown = format!("Axis 1 ({:.1}% ", 100.0 * share);
            assert!(html.contains(&shown), "{part}: {shown} not on the page");
            continue;
        }
        let groups = rerun.get("groups").and_then(Value::as_array);
        for (i, id) in ids.iter().enumerate() {
            let stored: Value =
                serde_json::from_str(&env.stdout(["runs", "show", id, "--format", "json"]))
                    .unwrap();
            // A split trend prints one group per stored run, in order.
            let this = match (part.as_str(), groups) {
                ("trends", Some(g)) => &g[i],
                _ => &rerun,
            };
            same_numbers(&stored["result"], this, &format!("{part} (run {id})"));
        }
    }
}

#[test]
fn report_takes_no_format_flag() {
    // The report is one HTML file: a --format flag would do nothing, so it is refused.
    let env = TestEnv::new();
    let (code, _, err) = env.run(["report", "--out", "r.html", "--format", "json"]);
    assert_eq!(code, 2, "{err}");
    assert!(err.contains("--format"), "{err}");
}
