//! The Wren Valley demo data: reproducibility of the committed files, and the
//! six built-in stories checked directly on the CSV text.
//!
//! The demo data is a simulation with known truth (the generator's parameters,
//! documented in `demo-data/README.md`). The checks below parse the CSV files
//! with the csv crate — not with tally's importer — and compute simple summaries
//! by hand. Each tolerance leaves room for the simulated noise (site, year,
//! sample and gamma–Poisson count variation) around the planted effect.
use std::collections::{BTreeMap, BTreeSet, HashMap};

use tally::demo;

fn rows(text: &str) -> Vec<HashMap<String, String>> {
    let mut reader = csv::Reader::from_reader(text.as_bytes());
    let headers = reader.headers().expect("header row").clone();
    reader
        .records()
        .map(|r| {
            let r = r.expect("well-formed CSV row");
            headers
                .iter()
                .zip(r.iter())
                .map(|(h, v)| (h.to_string(), v.to_string()))
                .collect()
        })
        .collect()
}

/// One sampling event of records.csv.
#[derive(Default)]
struct Event {
    effort: f64,
    reach: String,
    year: i32,
    month: u32,
    empty_rows: usize,
    /// Counts by accepted taxon name.
    counts: BTreeMap<String, f64>,
}

struct Demo {
    /// (site, date, protocol, replicate) → event.
    events: BTreeMap<(String, String, String, String), Event>,
    /// Accepted names of mayflies, stoneflies and caddis (from taxa.csv's hierarchy).
    sensitive: BTreeSet<String>,
    records: Vec<HashMap<String, String>>,
}

fn load() -> Demo {
    let sites = rows(demo::SITES_CSV);
    let reach: HashMap<String, String> = sites
        .iter()
        .map(|s| (s["code"].clone(), s["reach"].clone()))
        .collect();
    let taxa = rows(demo::TAXA_CSV);
    let parent: HashMap<&str, &str> = taxa
        .iter()
        .map(|t| (t["name"].as_str(), t["parent"].as_str()))
        .collect();
    let accepted: HashMap<&str, &str> = taxa
        .iter()
        .map(|t| {
            let a = t["accepted"].as_str();
            (
                t["name"].as_str(),
                if a.is_empty() { t["name"].as_str() } else { a },
            )
        })
        .collect();
    let is_sensitive = |name: &str| {
        let mut n = name;
        while !n.is_empty() {
            if ["Ephemeroptera", "Plecoptera", "Trichoptera"].contains(&n) {
                return true;
            }
            n = parent[n];
        }
        false
    };
    let sensitive = taxa
        .iter()
        .map(|t| t["name"].as_str())
        .filter(|n| accepted[n] == *n && is_sensitive(n))
        .map(str::to_string)
        .collect();
    let records = rows(demo::RECORDS_CSV);
    let mut events: BTreeMap<_, Event> = BTreeMap::new();
    for r in &records {
        let key = (
            r["site"].clone(),
            r["date"].clone(),
            r["protocol"].clone(),
            r["replicate"].clone(),
        );
        let e = events.entry(key).or_default();
        e.effort = r["effort"].parse().expect("numeric effort");
        e.reach = reach[&r["site"]].clone();
        e.year = r["date"][..4].parse().expect("year");
        e.month = r["date"][5..7].parse().expect("month");
        if r["taxon"].is_empty() {
            assert!(r["count"].is_empty(), "an empty event has no count");
            e.empty_rows += 1;
        } else {
            let c: f64 = r["count"].parse().expect("numeric count");
            *e.counts
                .entry(accepted[r["taxon"].as_str()].to_string())
                .or_default() += c;
        }
    }
    Demo {
        events,
        sensitive,
        records,
    }
}

impl Demo {
    fn kick<'a>(&'a self, reach: &'a str) -> impl Iterator<Item = &'a Event> + 'a {
        self.events
            .iter()
            .filter(move |(k, e)| k.2 == "kick" && e.reach == reach)
            .map(|(_, e)| e)
    }

    /// Mean over kick events of (total count / minutes), before and from `year`.
    fn per_minute_ratio(&self, reach: &str, year: i32) -> f64 {
        let mean = |after: bool| {
            let v: Vec<f64> = self
                .kick(reach)
                .filter(|e| (e.year >= year) == after)
                .map(|e| e.counts.values().sum::<f64>() / e.effort)
                .collect();
            v.iter().sum::<f64>() / v.len() as f64
        };
        mean(true) / mean(false)
    }

    /// Share of sensitive taxa in all individuals counted by kick sampling,
    /// from `year` on minus before.
    fn sensitive_share_change(&self, reach: &str, year: i32) -> f64 {
        let share = |after: bool| {
            let (mut s, mut all) = (0.0, 0.0);
            for e in self.kick(reach).filter(|e| (e.year >= year) == after) {
                for (t, c) in &e.counts {
                    all += c;
                    if self.sensitive.contains(t) {
                        s += c;
                    }
                }
            }
            s / all
        };
        share(true) - share(false)
    }
}

#[test]
fn generator_reproduces_the_committed_files_byte_for_byte() {
    let g = demo::generate();
    assert_eq!(g, demo::DemoFiles::embedded());
    // The embedded copies are compiled in; compare with the files on disk too.
    let dir = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("demo-data");
    for (name, content) in g.files() {
        let disk = std::fs::read_to_string(dir.join(name)).expect("committed demo file");
        assert!(disk == content, "demo-data/{name} differs from generate()");
    }
    assert!(
        g.records.len() < 2_000_000,
        "records.csv is {} bytes",
        g.records.len()
    );
    // Another seed gives another realisation of the same design.
    let other = demo::generate_with_seed(demo::SEED + 1);
    assert_ne!(other.records, g.records);
    assert_eq!(other.taxa, g.taxa);
    assert_eq!(other.protocols, g.protocols);
}

#[test]
fn sites_protocols_and_taxa_follow_the_design() {
    let sites = rows(demo::SITES_CSV);
    assert_eq!(sites.len(), 18);
    for reach in ["upper", "middle", "lower"] {
        for habitat in ["riffle", "pool"] {
            let n = sites
                .iter()
                .filter(|s| s["reach"] == reach && s["habitat"] == habitat)
                .count();
            assert_eq!(n, 3, "{reach} {habitat}");
        }
    }
    let codes: Vec<&str> = sites.iter().map(|s| s["code"].as_str()).collect();
    let expected: Vec<String> = (1..=18).map(|i| format!("S{i:02}")).collect();
    assert_eq!(codes, expected);
    for s in &sites {
        let lat: f64 = s["latitude"].parse().expect("latitude");
        let lon: f64 = s["longitude"].parse().expect("longitude");
        assert!((-90.0..=90.0).contains(&lat) && (-180.0..=180.0).contains(&lon));
    }

    let protocols = rows(demo::PROTOCOLS_CSV);
    let units: BTreeMap<&str, &str> = protocols
        .iter()
        .map(|p| (p["code"].as_str(), p["effort_unit"].as_str()))
        .collect();
    assert_eq!(
        units,
        BTreeMap::from([("kick", "minutes"), ("quadrat", "m2")])
    );

    let taxa = rows(demo::TAXA_CSV);
    let names: BTreeSet<&str> = taxa.iter().map(|t| t["name"].as_str()).collect();
    assert_eq!(names.len(), taxa.len(), "taxon names are unique");
    for t in &taxa {
        for field in ["parent", "accepted"] {
            let v = t[field].as_str();
            assert!(v.is_empty() || names.contains(v), "{field} {v} is listed");
        }
    }
    let synonyms: Vec<(&str, &str)> = taxa
        .iter()
        .filter(|t| !t["accepted"].is_empty())
        .map(|t| (t["name"].as_str(), t["accepted"].as_str()))
        .collect();
    assert_eq!(synonyms, vec![(demo::OLD_NAME, demo::NEW_NAME)]);

    let d = load();
    let recorded: BTreeSet<&str> = d.records.iter().map(|r| r["taxon"].as_str()).collect();
    for t in &recorded {
        assert!(
            t.is_empty() || names.contains(t),
            "recorded taxon {t} is listed"
        );
    }
    // About 40 taxa are recorded (41 names, one of them the old synonym).
    assert_eq!(recorded.iter().filter(|t| !t.is_empty()).count(), 41);
}

#[test]
fn sampling_calendar_and_effort() {
    let d = load();
    // Every site is kick-sampled in spring (April–May) and autumn
    // (September–October) of every year, apart from the gap (story 5).
    let mut per_site_year: BTreeMap<(String, i32), Vec<u32>> = BTreeMap::new();
    for (k, e) in d.events.iter().filter(|(k, _)| k.2 == "kick") {
        per_site_year
            .entry((k.0.clone(), e.year))
            .or_default()
            .push(e.month);
    }
    for i in 1..=18 {
        let site = format!("S{i:02}");
        for year in demo::FIRST_YEAR..=demo::LAST_YEAR {
            let months = per_site_year.get(&(site.clone(), year));
            if site == demo::GAP_SITE && (2012..=2013).contains(&year) {
                assert!(months.is_none(), "{site} {year} is in the gap");
                continue;
            }
            let months = months.unwrap_or_else(|| panic!("{site} {year} sampled"));
            assert_eq!(months.len(), 2, "{site} {year}");
            assert!(
                months.iter().any(|m| (4..=5).contains(m)),
                "{site} {year} spring"
            );
            assert!(
                months.iter().any(|m| (9..=10).contains(m)),
                "{site} {year} autumn"
            );
        }
    }
    // Story 5: no rows at all for the gap site in 2012–2013.
    assert_eq!(demo::GAP_SITE, "S10");
    assert!(
        d.records.iter().all(|r| r["site"] != "S10"
            || !(r["date"].starts_with("2012") || r["date"].starts_with("2013")))
    );
    // Story 6: kick efforts of 2, 3 and 4 minutes; quadrats of 0.5 and 1 m².
    let efforts = |p: &str| -> BTreeSet<String> {
        d.records
            .iter()
            .filter(|r| r["protocol"] == p)
            .map(|r| r["effort"].clone())
            .collect()
    };
    assert_eq!(
        efforts("kick"),
        BTreeSet::from(["2", "3", "4"].map(String::from))
    );
    assert_eq!(
        efforts("quadrat"),
        BTreeSet::from(["0.5", "1"].map(String::from))
    );
    // Samples hold a few hundred individuals (the design aims at roughly
    // 300 per three-minute kick).
    let mut totals: Vec<f64> = d
        .events
        .iter()
        .filter(|(k, _)| k.2 == "kick")
        .map(|(_, e)| e.counts.values().sum())
        .collect();
    totals.sort_by(f64::total_cmp);
    let median = totals[totals.len() / 2];
    assert!(
        (200.0..=500.0).contains(&median),
        "median kick total {median}"
    );
}

#[test]
fn story_5_exactly_one_event_found_nothing() {
    let d = load();
    let empty: Vec<_> = d
        .events
        .iter()
        .filter(|(_, e)| e.empty_rows > 0)
        .map(|(k, e)| (k.clone(), e.empty_rows, e.counts.len()))
        .collect();
    assert_eq!(empty.len(), 1, "{empty:?}");
    let ((site, date, protocol, _), rows, counted) = &empty[0];
    assert_eq!((site.as_str(), protocol.as_str()), ("S03", "kick"));
    assert!(
        date.starts_with("2017-09") || date.starts_with("2017-10"),
        "{date}"
    );
    // One row, and no counted taxon beside it.
    assert_eq!((*rows, *counted), (1, 0));
    // Every other row holds a positive whole count.
    for r in d.records.iter().filter(|r| !r["taxon"].is_empty()) {
        let c: u64 = r["count"].parse().expect("whole count");
        assert!(c > 0, "only non-zero counts are listed");
    }
}

#[test]
fn story_1_lower_reach_fewer_animals_same_composition() {
    let d = load();
    // Planted: every taxon's expected density × 0.6 from 2016.
    let ratio = d.per_minute_ratio("lower", 2016);
    assert!(
        (0.5..=0.7).contains(&ratio),
        "lower per-minute ratio {ratio}"
    );
    // Planted: relative composition unchanged, so the sensitive share stays.
    let change = d.sensitive_share_change("lower", 2016);
    assert!(change.abs() < 0.05, "lower sensitive share change {change}");
}

#[test]
fn story_2_middle_reach_different_animals_same_total() {
    let d = load();
    // Planted: sensitive taxa × 0.4 from 2019, tolerant taxa raised to keep
    // each site's expected total.
    let ratio = d.per_minute_ratio("middle", 2019);
    assert!(
        (0.85..=1.15).contains(&ratio),
        "middle per-minute ratio {ratio}"
    );
    let change = d.sensitive_share_change("middle", 2019);
    // With sensitive taxa near 40 % of the middle reach's individuals, × 0.4
    // at a constant total takes about 24 points off their share.
    assert!(change < -0.15, "middle sensitive share change {change}");
}

#[test]
fn story_3_upper_reach_stable() {
    let d = load();
    for year in [2016, 2019] {
        let ratio = d.per_minute_ratio("upper", year);
        assert!(
            (0.85..=1.15).contains(&ratio),
            "upper ratio at {year}: {ratio}"
        );
        let change = d.sensitive_share_change("upper", year);
        assert!(
            change.abs() < 0.05,
            "upper share change at {year}: {change}"
        );
    }
}

#[test]
fn story_4_rename_is_only_a_new_label() {
    let d = load();
    let years = |name: &str| -> BTreeSet<i32> {
        d.records
            .iter()
            .filter(|r| r["taxon"] == name)
            .map(|r| r["date"][..4].parse().expect("year"))
            .collect()
    };
    let old = years(demo::OLD_NAME);
    let new = years(demo::NEW_NAME);
    assert_eq!(old, (2008..=2013).collect::<BTreeSet<_>>());
    assert_eq!(new, (2014..=2025).collect::<BTreeSet<_>>());
    // Once the synonym is resolved the snail's share in the stable upper reach
    // is about the same before and after the rename (planted: identical).
    let share = |after: bool| {
        let (mut s, mut all) = (0.0, 0.0);
        for e in d.kick("upper").filter(|e| (e.year >= 2014) == after) {
            all += e.counts.values().sum::<f64>();
            s += e.counts.get(demo::NEW_NAME).copied().unwrap_or(0.0);
        }
        s / all
    };
    let ratio = share(true) / share(false);
    assert!((0.7..=1.4).contains(&ratio), "snail share ratio {ratio}");
}

#[test]
fn story_6_raw_totals_mislead_without_effort() {
    let d = load();
    // Planted: from 2020 the upper reach is mostly kicked for 4 minutes
    // (probability 0.7, else 3), against 3.0 minutes on average before, while
    // the density per minute is unchanged.
    let mean = |f: &dyn Fn(&Event) -> f64, after: bool| {
        let v: Vec<f64> = d
            .kick("upper")
            .filter(|e| (e.year >= 2020) == after)
            .map(f)
            .collect();
        v.iter().sum::<f64>() / v.len() as f64
    };
    let raw = |e: &Event| e.counts.values().sum::<f64>();
    let per_minute = |e: &Event| e.counts.values().sum::<f64>() / e.effort;
    let effort = |e: &Event| e.effort;
    let raw_ratio = mean(&raw, true) / mean(&raw, false);
    let pm_ratio = mean(&per_minute, true) / mean(&per_minute, false);
    let effort_ratio = mean(&effort, true) / mean(&effort, false);
    assert!(effort_ratio > 1.15, "effort ratio {effort_ratio}");
    assert!(raw_ratio > 1.1, "raw totals ratio {raw_ratio}");
    assert!(
        (0.85..=1.15).contains(&pm_ratio),
        "per-minute ratio {pm_ratio}"
    );
}
