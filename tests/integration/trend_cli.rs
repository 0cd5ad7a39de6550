//! `tally trend` end to end on the demo store: the three reach stories of
//! demo-data/README.md (planted by the generator, so the truth is known).

use serde_json::Value;

use crate::util::TestEnv;

/// The demo data without the demo's own stored runs (the tests count runs).
fn demo() -> TestEnv {
    TestEnv::with_demo_data()
}

fn group<'a>(v: &'a Value, name: &str) -> &'a Value {
    v["groups"]
        .as_array()
        .expect("groups")
        .iter()
        .find(|g| g["group"] == name)
        .unwrap_or_else(|| panic!("no group {name}"))
}

#[test]
fn demo_reaches_tell_their_stories() {
    let env = demo();
    let out = env.stdout([
        "trend",
        "--protocol",
        "kick",
        "--per-effort",
        "--every",
        "year",
        "--split-by",
        "reach",
        "--breakpoint",
        "auto",
        "--permutations",
        "199",
        "--seed",
        "11",
        "--format",
        "json",
    ]);
    let v: Value = serde_json::from_str(&out).expect("json");
    // demo-data/README.md stories 1-3: lower loses 40 % from 2016 with the same
    // composition; middle changes composition from 2019 at constant totals;
    // upper is stable.
    let lower = group(&v, "lower");
    let middle = group(&v, "middle");
    let upper = group(&v, "upper");
    assert_eq!(lower["diagnosis"], "abundance", "{}", lower["decision"]);
    assert_eq!(middle["diagnosis"], "composition", "{}", middle["decision"]);
    assert_eq!(upper["diagnosis"], "none", "{}", upper["decision"]);
    let year = |g: &Value, aspect: &str| g["breakpoints"][aspect]["year"].as_i64().unwrap();
    assert!(
        (year(lower, "size") - 2016).abs() <= 1,
        "lower size break {}",
        year(lower, "size")
    );
    assert!(
        (year(middle, "shape") - 2019).abs() <= 1,
        "middle shape break {}",
        year(middle, "shape")
    );
    // The planted step is ×0.6 (−40 %); the step estimate is near it.
    let step = lower["breakpoints"]["size"]["change_pct"].as_f64().unwrap();
    assert!((-50.0..-30.0).contains(&step), "lower step {step} %");
    // The taxa behind the change since the baseline, tested by whole years
    // (docs/methods.md, "Taxa behind the change"): every taxon listed once,
    // shape contributions adding to 1, p-values in (0, 1].
    for g in [lower, middle, upper] {
        let taxa = g["taxa"].as_array().unwrap();
        assert!(taxa.len() >= 20);
        let sum: f64 = taxa
            .iter()
            .map(|t| t["shape_contribution"].as_f64().unwrap())
            .sum();
        assert!((sum - 1.0).abs() < 1e-9, "{sum}");
        for t in taxa {
            let p = t["p_value"].as_f64().unwrap();
            assert!(p > 0.0 && p <= 1.0);
        }
    }
    // Keys and shapes of the JSON.
    for g in [lower, middle, upper] {
        for k in ["slope_pct_per_year", "p_value", "ci_low", "ci_high"] {
            assert!(g["size_trend"][k].is_number(), "size_trend.{k}");
        }
        for k in ["r2", "p_value"] {
            assert!(g["shape_trend"][k].is_number(), "shape_trend.{k}");
        }
        let periods = g["periods"].as_array().unwrap();
        assert_eq!(periods.len(), 18);
        for k in [
            "period",
            "abundance",
            "change_pct",
            "shape_distance",
            "size_part",
            "shape_part",
            "n",
            "sites",
        ] {
            assert!(!periods[5][k].is_null(), "periods[].{k}");
        }
    }
    // S10 has no events in 2012-2013 (README story 5): 5 sites those years.
    let p2012 = &middle["periods"].as_array().unwrap()[4];
    assert_eq!(
        (p2012["period"].as_str(), p2012["sites"].as_u64()),
        (Some("2012"), Some(5))
    );
    // After 2016 the lower reach's abundance is about 0.6 of the baseline's.
    let late: Vec<f64> = lower["periods"].as_array().unwrap()[10..]
        .iter()
        .map(|p| p["change_pct"].as_f64().unwrap())
        .collect();
    let mean = late.iter().sum::<f64>() / late.len() as f64;
    assert!(
        (-55.0..-25.0).contains(&mean),
        "lower change after 2018: {mean} %"
    );

    // One run per group, its periods among its values: a series of size parts
    // across years, one point per group and year, dated by the year.
    let s = env.stdout([
        "runs",
        "series",
        "--kind",
        "trend",
        "--value",
        "size_part",
        "--format",
        "json",
    ]);
    let s: Value = serde_json::from_str(&s).unwrap();
    let points = s["points"].as_array().unwrap();
    assert_eq!(points.len(), 3 * 18);
    assert!(
        points[0]["period_start"]
            .as_str()
            .unwrap()
            .starts_with("2008")
    );
    assert!(
        points[53]["period_end"]
            .as_str()
            .unwrap()
            .starts_with("2025")
    );
    let t = env.stdout(["runs", "list", "--format", "json"]);
    let t: Value = serde_json::from_str(&t).unwrap();
    let kinds: Vec<&str> = t
        .as_array()
        .unwrap()
        .iter()
        .map(|r| r["kind"].as_str().unwrap())
        .collect();
    assert_eq!(kinds, vec!["trend"; 3]);
    let ids = ["lower", "middle", "upper"].map(|g| group(&v, g)["run_id"].as_i64().unwrap());
    // Each group's run holds its group as a selection filter.
    let lower: Value = serde_json::from_str(&env.stdout([
        "runs",
        "show",
        &ids[0].to_string(),
        "--format",
        "json",
    ]))
    .unwrap();
    assert_eq!(
        lower["selection"]["site_where"],
        serde_json::json!([["reach", "lower"]])
    );
    assert!(lower["parameters"].get("split_by").is_none());
}

#[test]
fn every_split_run_replays() {
    let env = demo();
    let out = env.stdout([
        "trend",
        "--protocol",
        "kick",
        "--per-effort",
        "--split-by",
        "reach",
        "--breakpoint",
        "auto",
        "--permutations",
        "99",
        "--seed",
        "4",
        "--format",
        "json",
    ]);
    let v: Value = serde_json::from_str(&out).unwrap();
    let groups = v["groups"].as_array().unwrap();
    assert_eq!(groups.len(), 3);
    for g in groups {
        let id = g["run_id"].as_i64().expect("run_id").to_string();
        let rep: Value =
            serde_json::from_str(&env.stdout(["runs", "verify", &id, "--format", "json"])).unwrap();
        assert_eq!(rep["identical"], true, "{rep}");
        assert_eq!(rep["numbers_differing"], 0, "{rep}");
        assert!(rep["compared"].as_u64().unwrap() > 18 * 6, "{rep}");
    }
    // A field that no selection can express is refused before anything is stored.
    let (code, _, err) = env.run([
        "trend",
        "--protocol",
        "kick",
        "--per-effort",
        "--split-by",
        "year",
        "--permutations",
        "99",
    ]);
    assert_ne!(code, 0);
    assert!(
        err.contains("--split-by") && err.contains("replayed"),
        "{err}"
    );
}

#[test]
fn single_selection_table_and_seasons() {
    let env = demo();
    let table = env.stdout([
        "trend",
        "--protocol",
        "kick",
        "--per-effort",
        "--site-where",
        "reach=lower",
        "--permutations",
        "99",
        "--seed",
        "3",
        "--no-store",
    ]);
    assert!(table.contains("diagnosis: "), "{table}");
    assert!(table.contains("seed 3"), "{table}");
    assert!(table.contains("whole years"), "{table}");
    let out = env.stdout([
        "trend",
        "--protocol",
        "kick",
        "--per-effort",
        "--site-where",
        "reach=lower",
        "--every",
        "season",
        "--baseline",
        "2008..2010",
        "--permutations",
        "99",
        "--seed",
        "3",
        "--no-store",
        "--format",
        "json",
    ]);
    let v: Value = serde_json::from_str(&out).unwrap();
    let periods = v["periods"].as_array().unwrap();
    assert_eq!(periods.len(), 36);
    assert_eq!(periods[0]["period"], "2008-spring");
    assert_eq!(periods[1]["period"], "2008-autumn");
    assert!(["abundance", "both"].contains(&v["diagnosis"].as_str().unwrap()));
    // A breakpoint year without years on both sides is refused.
    env.cmd([
        "trend",
        "--protocol",
        "kick",
        "--per-effort",
        "--breakpoint",
        "2008",
        "--permutations",
        "99",
        "--no-store",
    ])
    .assert()
    .failure();
}

/// A small invented program: six sites visited once a year for eight years, with
/// unequal effort, a decline of about 10 % a year planted in the counts, one
/// renamed taxon, and one rare site that catches nothing in most years.
fn zero_catch_store() -> TestEnv {
    let env = TestEnv::new();
    env.stdout(["init"]);
    let mut sites = String::from("code,name,latitude,longitude,treatment\n");
    for s in 1..=6 {
        sites.push_str(&format!(
            "P{s},Plot {s},50.{s}0,4.{s}0,{}\n",
            if s <= 3 { "grazed" } else { "open" }
        ));
    }
    let protocols =
        "code,description,effort_unit\npit,Pitfall line (effort is trap nights),nights\n";
    let taxa =
        "name,rank,parent,accepted\nCarabus,genus,,\nPterus,genus,,\nOldpterus,genus,,Pterus\n";
    let mut records = String::from("site,date,protocol,effort,taxon,count,replicate\n");
    for s in 1..=6u32 {
        for (t, year) in (2010..2018).enumerate() {
            let effort = 1 + (s as usize + t) % 3;
            let base = if s == 6 { 0.6 } else { 8.0 + f64::from(s) };
            let mu = base * 0.9f64.powi(t as i32) * effort as f64;
            let carabus = (0.6 * mu).round();
            let pterus = (0.4 * mu).round();
            // The rare site's pterus records are kept under the old name in early years.
            let name = if t < 3 { "Oldpterus" } else { "Pterus" };
            records.push_str(&format!(
                "P{s},{year}-06-1{s},pit,{effort},Carabus,{carabus},1\nP{s},{year}-06-1{s},pit,{effort},{name},{pterus},1\n"
            ));
        }
    }
    env.import_all(&[
        ("sites", sites.as_str()),
        ("protocols", protocols),
        ("taxa", taxa),
        ("records", records.as_str()),
    ]);
    env
}

#[test]
fn rows_that_caught_nothing_count_in_the_size_trend_and_replay() {
    let env = zero_catch_store();
    let (code, out, err) = env.run([
        "trend",
        "--per-effort",
        "--permutations",
        "99",
        "--seed",
        "3",
        "--format",
        "json",
    ]);
    assert_eq!(code, 0, "{err}");
    let v: Value = serde_json::from_str(&out).unwrap();
    // Every site-year is a row, the empty ones included (6 sites x 8 years).
    assert_eq!(v["n"], 48);
    assert_eq!(v["size_trend"]["model"], "rate");
    let notes = v["notes"].to_string();
    assert!(notes.contains("caught nothing"), "{notes}");
    // The planted decline: ln 0.9 = -10.5 % per year, up to rounding of the counts.
    let slope = v["size_trend"]["slope_pct_per_year"].as_f64().unwrap();
    assert!((slope + 10.0).abs() < 1.5, "slope {slope}");
    let p = v["size_trend"]["p_value"].as_f64().unwrap();
    assert!(p >= v["smallest_possible_p"].as_f64().unwrap());
    let id = v["run_id"].to_string();
    let out = env.stdout(["runs", "verify", id.as_str()]);
    assert!(
        out.contains("identical") || out.contains("reproduced"),
        "{out}"
    );
    // The geometric model cannot take a zero; free and whole-site designs cannot test year.
    for (args, want) in [
        (vec!["--size-model", "geometric"], "--size-model rate"),
        (vec!["--permute", "whole-sites"], "within-sites"),
        (vec!["--permute", "free"], "within-sites"),
    ] {
        let mut all = vec![
            "trend",
            "--per-effort",
            "--no-store",
            "--permutations",
            "19",
        ];
        all.extend(args.iter().copied());
        let (code, out, err) = env.run(&all);
        assert_eq!(code, 1, "{args:?}: {err}");
        assert!(out.is_empty() && err.contains(want), "{args:?}: {err}");
    }
}

#[test]
fn each_taxon_has_its_own_trend_that_replays_and_draws() {
    // Both taxa of the invented pitfall program decline by about 10 % a year
    // (0.9 per year, planted above); the renamed taxon is counted under its
    // accepted name; rows that caught nothing count.
    let env = zero_catch_store();
    let svg = env.path("taxa.svg");
    let (code, out, err) = env.run([
        "trend",
        "--per-effort",
        "--by-taxon",
        "--plot-taxa",
        svg.to_str().unwrap(),
        "--permutations",
        "199",
        "--seed",
        "5",
        "--format",
        "json",
    ]);
    assert_eq!(code, 0, "{err}");
    let v: Value = serde_json::from_str(&out).unwrap();
    let taxa = v["by_taxon"]["taxa"].as_array().unwrap();
    let names: Vec<&str> = taxa.iter().map(|t| t["taxon"].as_str().unwrap()).collect();
    assert_eq!(names.len(), 2, "{names:?}");
    assert!(
        names.contains(&"Carabus") && names.contains(&"Pterus"),
        "{names:?}"
    );
    for t in taxa {
        let s = t["pct_per_year"].as_f64().unwrap();
        assert!((s + 10.0).abs() < 2.5, "{}: {s}", t["taxon"]);
        let (lo, hi) = (
            t["ci_low"].as_f64().unwrap(),
            t["ci_high"].as_f64().unwrap(),
        );
        assert!(lo < s && s < hi && hi < 0.0, "{lo} {s} {hi}");
        assert_eq!(t["yearly_rates"].as_array().unwrap().len(), 8);
        assert!(t["p_adjusted"].as_f64().unwrap() <= 0.05);
    }
    // Largest change first.
    let abs = |t: &Value| t["slope_log"].as_f64().unwrap().abs();
    assert!(abs(&taxa[0]) >= abs(&taxa[1]));
    let drawn = std::fs::read_to_string(&svg).unwrap();
    assert_eq!(drawn.matches("class=\"taxon clear\"").count(), 2, "{drawn}");
    let id = v["run_id"].to_string();
    let replay = env.stdout(["runs", "verify", id.as_str()]);
    assert!(
        replay.contains("identical") || replay.contains("reproduced"),
        "{replay}"
    );
    let shown = env.stdout(["runs", "show", id.as_str()]);
    assert!(shown.contains("--by-taxon"), "{shown}");
    // CSV: every period, every taxon of the baseline contrast and every taxon's
    // own trend, one kind per `record`, all lines as wide as the header.
    let csv = env.stdout([
        "trend",
        "--per-effort",
        "--by-taxon",
        "--permutations",
        "19",
        "--no-store",
        "--format",
        "csv",
    ]);
    let lines: Vec<Vec<&str>> = csv.lines().map(|l| l.split(',').collect()).collect();
    assert!(lines.iter().all(|l| l.len() == lines[0].len()), "{csv}");
    let count = |k: &str| lines.iter().filter(|l| l[0] == k).count();
    assert_eq!(
        (count("period"), count("taxon"), count("taxon_trend")),
        (8, 2, 2),
        "{csv}"
    );
    // The table names both; a PNG name and an existing file are refused.
    let table = env.stdout([
        "trend",
        "--per-effort",
        "--by-taxon",
        "--permutations",
        "19",
        "--no-store",
    ]);
    assert!(table.contains("Each taxon's own trend"), "{table}");
    for (name, want) in [("taxa.png", "SVG"), ("taxa.svg", "--force")] {
        let p = env.path(name);
        let (code, _, err) = env.run([
            "trend",
            "--per-effort",
            "--plot-taxa",
            p.to_str().unwrap(),
            "--permutations",
            "19",
            "--no-store",
        ]);
        assert_eq!(code, 1, "{name}: {err}");
        assert!(err.contains(want), "{name}: {err}");
    }
}

#[test]
fn notes_are_printed_once_and_quiet_silences_them() {
    let env = demo();
    let args = [
        "trend",
        "--protocol",
        "kick",
        "--per-effort",
        "--split-by",
        "reach",
        "--permutations",
        "19",
        "--seed",
        "4",
        "--no-store",
    ];
    let (code, out, err) = env.run(args);
    assert_eq!(code, 0, "{err}");
    assert!(!err.is_empty());
    let lines: Vec<&str> = err.lines().collect();
    let mut unique = lines.clone();
    unique.sort_unstable();
    unique.dedup();
    assert_eq!(unique.len(), lines.len(), "{err}");
    let mut quiet = vec!["--quiet"];
    quiet.extend(args);
    let (code, quiet_out, quiet_err) = env.run(&quiet);
    assert_eq!(code, 0, "{quiet_err}");
    assert!(quiet_err.is_empty(), "{quiet_err}");
    assert_eq!(out, quiet_out);
}
