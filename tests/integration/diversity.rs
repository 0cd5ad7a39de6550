//! `tally diversity` end to end: on a small store with the traits of a real
//! program (revisited plots, a plot-level treatment, an event that caught
//! nothing, unequal effort, a renamed taxon), and on the demo store, whose
//! reaches carry the stories of demo-data/README.md.

use serde_json::Value;

use crate::util::TestEnv;

/// Six plots (three grazed, three open) visited every June 2010–2017 with
/// pitfall lines of 1–3 nights; 14 taxa with geometric-series abundances and
/// counts proportional to effort; plot P2's 2013 visit caught nothing; one taxon
/// is recorded under an old name in the first years.
fn design_store() -> TestEnv {
    let env = TestEnv::new();
    env.stdout(["init"]);
    let mut sites = String::from("code,name,latitude,longitude,treatment\n");
    for s in 1..=6 {
        sites.push_str(&format!(
            "P{s},Plot {s},50.{s}0,4.{s}0,{}\n",
            if s <= 3 { "grazed" } else { "open" }
        ));
    }
    let protocols = "code,description,effort_unit\npit,Pitfall line,nights\n";
    let mut taxa = String::from("name,rank,parent,accepted\n");
    for j in 0..14 {
        taxa.push_str(&format!("Genus{j},genus,,\n"));
    }
    taxa.push_str("Oldgenus3,genus,,Genus3\n");
    let mut records = String::from("site,date,protocol,effort,taxon,count,replicate\n");
    let mut state: u64 = 0x2545_f491_4f6c_dd1d;
    let mut next = || {
        state ^= state << 13;
        state ^= state >> 7;
        state ^= state << 17;
        (state % 1000) as f64 / 1000.0
    };
    for s in 1..=6u32 {
        for year in 2010..2018 {
            let effort = 1 + (s as usize + year as usize) % 3;
            if s == 2 && year == 2013 {
                records.push_str(&format!("P{s},{year}-06-1{s},pit,{effort},,,1\n"));
                continue;
            }
            for j in 0..14 {
                let mu = 12.0 * 0.7f64.powi(j) * effort as f64;
                let count = (mu * (0.5 + next())).floor();
                if count == 0.0 {
                    continue;
                }
                let name = if j == 3 && year < 2013 {
                    "Oldgenus3".to_string()
                } else {
                    format!("Genus{j}")
                };
                records.push_str(&format!(
                    "P{s},{year}-06-1{s},pit,{effort},{name},{count},1\n"
                ));
            }
        }
    }
    env.import_all(&[
        ("sites", sites.as_str()),
        ("protocols", protocols),
        ("taxa", taxa.as_str()),
        ("records", records.as_str()),
    ]);
    env
}

#[test]
fn diversity_keeps_every_row_tests_years_and_replays() {
    let env = design_store();
    let (code, out, err) = env.run([
        "diversity",
        "--every",
        "year",
        "--rarefy-to",
        "10",
        "--permutations",
        "99",
        "--seed",
        "5",
        "--format",
        "json",
    ]);
    assert_eq!(code, 0, "{err}");
    let v: Value = serde_json::from_str(&out).unwrap();
    // Every site-year is a row, the empty one included (6 plots x 8 years).
    assert_eq!(v["n"], 48);
    let rows = v["rows"].as_array().unwrap();
    let empty = rows.iter().find(|r| r["label"] == "P2/2013").unwrap();
    assert_eq!(empty["individuals"], 0);
    assert!(empty["hill_q1"].is_null() && empty["coverage_richness"].is_null());
    assert!(err.contains("caught nothing"), "{err}");
    // The synonym is counted under its accepted name: at most 14 taxa per row.
    assert!(rows.iter().all(|r| r["richness"].as_u64().unwrap() <= 14));
    // The automatic level is the lowest row coverage, and every row with
    // individuals reaches it by rarefaction.
    let c = &v["coverage"];
    assert_eq!(c["rule"], "auto");
    let level = c["level"].as_f64().unwrap();
    let lowest = rows
        .iter()
        .filter_map(|r| r["coverage"].as_f64())
        .fold(1.0, f64::min);
    assert_eq!(level, lowest);
    assert_eq!(c["interpolated"], 47);
    // Periods: one per year, 6 rows each; the empty row has no mean value.
    let periods = v["periods"].as_array().unwrap();
    assert_eq!(periods.len(), 8);
    let y2013 = periods.iter().find(|p| p["year"] == 2013).unwrap();
    assert_eq!(y2013["rows"], 6);
    assert_eq!(y2013["richness"]["rows"], 5);
    // Trends of four measures, each leaving the empty row out.
    let trends = v["trends"].as_array().unwrap();
    assert_eq!(trends.len(), 4);
    for t in trends {
        assert_eq!(t["left_out"], 1, "{t}");
        assert_eq!(t["n"], 47);
        let p = t["p_value"].as_f64().unwrap();
        assert!(p >= t["smallest_possible_p"].as_f64().unwrap() && p <= 1.0);
    }
    assert!(v["reading"].is_string());
    // Stored, replayed, and the printed command gives the same numbers.
    let id = v["run_id"].to_string();
    let verified = env.stdout(["runs", "verify", id.as_str()]);
    assert!(
        verified.contains("identical") || verified.contains("reproduced"),
        "{verified}"
    );
    let shown: Value =
        serde_json::from_str(&env.stdout(["runs", "show", id.as_str(), "--format", "json"]))
            .unwrap();
    let command = shown["command"].as_str().unwrap().to_string();
    assert!(command.contains("--every year") && command.contains("--coverage auto"));
    let mut words: Vec<&str> = command.split_whitespace().skip(1).collect();
    words.extend(["--no-store", "--format", "json"]);
    let again: Value = serde_json::from_str(&env.stdout(&words)).unwrap();
    assert_eq!(again["trends"], v["trends"]);
    assert_eq!(again["rows"], v["rows"]);
}

#[test]
fn diversity_refuses_what_it_cannot_compute() {
    let env = design_store();
    for (args, want) in [
        (vec!["--per-effort"], "individuals"),
        (vec!["--every", "year", "--by", "treatment"], "not both"),
        (
            vec!["--every", "year", "--unit", "site"],
            "one period per row",
        ),
        (vec!["--coverage", "1.5"], "at most 1"),
        (vec!["--rarefy-to", "0"], "at least 1"),
        (
            vec!["--every", "year", "--coverage", "none"],
            "--coverage auto",
        ),
        (vec!["--plot", "curves.png"], ".svg"),
    ] {
        let mut all = vec!["diversity", "--permutations", "19"];
        all.extend(args.iter().copied());
        let (code, out, err) = env.run(&all);
        assert!(code != 0, "{args:?} was accepted");
        assert!(out.is_empty() && err.contains(want), "{args:?}: {err}");
    }
    let list = env.stdout(["runs", "list", "--format", "json"]);
    assert_eq!(list.trim(), "[]");
}

#[test]
fn a_group_test_that_cannot_reach_alpha_gives_no_reading() {
    // Six plots, three per treatment, treatment constant within plots: the
    // whole-plot design has C(6,3) = 20 arrangements, so no p below 0.05 is
    // possible and no reading may be given.
    let env = design_store();
    let out = env.stdout([
        "diversity",
        "--by",
        "treatment",
        "--permutations",
        "99",
        "--seed",
        "2",
        "--no-store",
        "--format",
        "json",
    ]);
    let v: Value = serde_json::from_str(&out).unwrap();
    assert_eq!(v["design"][0]["permute"], "whole-sites");
    assert_eq!(v["reading"], "cannot-reach-alpha");
    let tests = v["tests"].as_array().unwrap();
    assert_eq!(tests.len(), 4);
    for t in tests {
        assert!(t["smallest_possible_p"].as_f64().unwrap() > 0.05);
    }
    let text = env.stdout([
        "diversity",
        "--by",
        "treatment",
        "--permutations",
        "99",
        "--seed",
        "2",
        "--no-store",
    ]);
    assert!(text.contains("reading: none"), "{text}");
}

#[test]
fn the_demo_reaches_separate_fewer_animals_from_fewer_taxa() {
    // demo-data/README.md: the lower reach loses animals from 2016 at the same
    // composition (raw richness falls, richness at equal coverage does not); the
    // middle reach changes composition from 2019 (evenness falls: Hill numbers
    // of order 1 and 2 fall); the upper reach is stable.
    let env = TestEnv::with_demo_data();
    let reading = |reach: &str| -> Value {
        let where_ = format!("reach={reach}");
        let out = env.stdout([
            "diversity",
            "--protocol",
            "kick",
            "--site-where",
            where_.as_str(),
            "--every",
            "year",
            "--permutations",
            "199",
            "--seed",
            "8",
            "--no-store",
            "--format",
            "json",
        ]);
        serde_json::from_str(&out).unwrap()
    };
    let lower = reading("lower");
    assert_eq!(lower["reading"], "size-only", "{}", lower["trends"]);
    let middle = reading("middle");
    let trend = |v: &Value, m: &str| -> f64 {
        v["trends"]
            .as_array()
            .unwrap()
            .iter()
            .find(|t| t["measure"] == m)
            .unwrap()["p_value"]
            .as_f64()
            .unwrap()
    };
    assert!(trend(&middle, "hill_q1") <= 0.05 && trend(&middle, "hill_q2") <= 0.05);
    let upper = reading("upper");
    assert_eq!(upper["reading"], "no-change", "{}", upper["trends"]);
}
