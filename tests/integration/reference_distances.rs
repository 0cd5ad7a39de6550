//! Dissimilarities and PCoA eigenvalues checked against the committed SciPy /
//! NumPy fixtures in `tests/reference/distances.json` (written by
//! `tests/reference/make_fixtures.py`; versions recorded in the file). No
//! Python is needed here.

use nalgebra::DMatrix;
use serde_json::Value;
use tally::analysis::{AnalysisError, Distance, Transform, pcoa};

/// Relative tolerance for closed-form quantities (tests/reference/README.md, "Tolerances"),
/// with an absolute floor for values that are exactly zero in the reference.
const REL: f64 = 1e-9;
const ABS: f64 = 1e-12;

fn fixture() -> Value {
    let path = concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/tests/reference/distances.json"
    );
    let text = std::fs::read_to_string(path).expect("fixture file is committed with the tests");
    serde_json::from_str(&text).expect("fixture is valid JSON written by make_fixtures.py")
}

fn matrix(fx: &Value, name: &str) -> DMatrix<f64> {
    let m = fx["matrices"]
        .as_array()
        .unwrap()
        .iter()
        .find(|m| m["name"] == name)
        .unwrap();
    let rows: Vec<Vec<f64>> = serde_json::from_value(m["values"].clone()).unwrap();
    DMatrix::from_fn(rows.len(), rows[0].len(), |i, j| rows[i][j])
}

fn indices(v: &Value) -> Vec<usize> {
    serde_json::from_value(v.clone()).unwrap()
}

fn close(a: f64, b: f64) -> bool {
    (a - b).abs() <= REL * a.abs().max(b.abs()) + ABS
}

#[test]
fn dissimilarities_match_reference_libraries() {
    let fx = fixture();
    let cases = fx["cases"].as_array().unwrap();
    assert!(
        cases.len() >= 7 * 7 * 3,
        "fixture covers every distance × transform on each matrix"
    );
    let mut compared = 0usize;
    for case in cases {
        let label = format!(
            "{} / {} / {}",
            case["matrix"], case["transform"], case["distance"]
        );
        let y = matrix(&fx, case["matrix"].as_str().unwrap());
        let t = Transform::from_name(case["transform"].as_str().unwrap()).unwrap();
        let d = Distance::from_name(case["distance"].as_str().unwrap()).unwrap();
        let got = d.compute_after(t, &y);
        if let Some(err) = case.get("error") {
            let want = match err["kind"].as_str().unwrap() {
                "EmptySamples" => AnalysisError::EmptySamples {
                    rows: indices(&err["rows"]),
                },
                "EmptyTaxa" => AnalysisError::EmptyTaxa {
                    cols: indices(&err["cols"]),
                },
                other => panic!("unknown error kind {other} in fixture"),
            };
            assert_eq!(got, Err(want), "{label}");
            continue;
        }
        let want: Vec<f64> = serde_json::from_value(case["condensed"].clone()).unwrap();
        let got = got.unwrap_or_else(|e| panic!("{label}: {e}"));
        assert_eq!(got.condensed().len(), want.len(), "{label}");
        for (k, (g, w)) in got.condensed().iter().zip(&want).enumerate() {
            assert!(
                close(*g, *w),
                "{label} entry {k}: tally {g} vs reference {w}"
            );
        }
        compared += 1;
    }
    assert!(compared >= 100, "most cases carry values, found {compared}");
}

#[test]
fn pcoa_eigenvalues_match_numpy_eigh() {
    let fx = fixture();
    for case in fx["pcoa"].as_array().unwrap() {
        let label = format!(
            "{} / {} / {}",
            case["matrix"], case["transform"], case["distance"]
        );
        let y = matrix(&fx, case["matrix"].as_str().unwrap());
        let t = Transform::from_name(case["transform"].as_str().unwrap()).unwrap();
        let d = Distance::from_name(case["distance"].as_str().unwrap()).unwrap();
        let p = pcoa(&d.compute_after(t, &y).unwrap()).unwrap();
        let want: Vec<f64> = serde_json::from_value(case["eigenvalues"].clone()).unwrap();
        let scale = want.iter().fold(0.0f64, |m, v| m.max(v.abs()));
        assert_eq!(p.eigenvalues.len(), want.len(), "{label}");
        for (g, w) in p.eigenvalues.iter().zip(&want) {
            // Eigenvalues are compared on the scale of the largest one: those that
            // are zero in exact arithmetic come out as ±1e-16 · max from any solver.
            assert!(
                (g - w).abs() <= REL * scale,
                "{label}: tally {g} vs numpy {w}"
            );
        }
        let tr = case["trace"].as_f64().unwrap();
        assert!(close(p.trace, tr), "{label}: trace {} vs {tr}", p.trace);
        if d.is_euclidean() {
            // Gower & Legendre (1986), J. Classification 3:5-48;
            // docs/methods.md, "Euclidean and non-Euclidean dissimilarities":
            // Euclidean-type distances have no negative eigenvalues beyond rounding.
            assert_eq!(p.negative_sum, 0.0, "{label}");
        }
    }
}
