//! Linear model, PERMANOVA, dispersion and p-value adjustments against reference values
//! computed by NumPy/SciPy/statsmodels (`tests/reference/make_model_fixtures.py`, which
//! records the library versions in each JSON file).

use serde_json::Value;
use tally::analysis::DistanceMatrix;
use tally::analysis::dispersion::{DispersionOptions, Permute, dispersion};
use tally::analysis::gower::gower_centre;
use tally::analysis::linear_model::{self, Basis, Design, Grouping, SsType, Term, TermSpec};
use tally::analysis::permanova::{PermanovaOptions, permanova, permanova_oneway};
use tally::analysis::permutation::{Scheme, benjamini_hochberg, holm};
use tally::analysis::size_test::{SizeTestOptions, size_test};

fn fixture(name: &str) -> Value {
    let path = format!("{}/tests/reference/{name}", env!("CARGO_MANIFEST_DIR"));
    let text = std::fs::read_to_string(&path).unwrap_or_else(|e| panic!("{path}: {e}"));
    serde_json::from_str(&text).expect("fixture is JSON")
}

fn floats(v: &Value) -> Vec<f64> {
    v.as_array()
        .expect("array")
        .iter()
        .map(|x| x.as_f64().expect("number"))
        .collect()
}

fn strings(v: &Value) -> Vec<String> {
    v.as_array()
        .expect("array")
        .iter()
        .map(|x| x.as_str().expect("string").to_string())
        .collect()
}

fn rows(v: &Value) -> Vec<Vec<f64>> {
    v.as_array().expect("array").iter().map(floats).collect()
}

fn euclidean(rows: &[Vec<f64>]) -> DistanceMatrix {
    DistanceMatrix::from_fn(rows.len(), |i, k| {
        rows[i]
            .iter()
            .zip(&rows[k])
            .map(|(a, b)| (a - b).powi(2))
            .sum::<f64>()
            .sqrt()
    })
    .expect("finite distances")
}

fn close(a: f64, b: f64) -> bool {
    // 1e-9 relative for closed-form quantities (tests/reference/README.md, "Tolerances").
    (a - b).abs() <= 1e-9 * a.abs().max(b.abs()).max(1.0)
}

fn opts(ss_type: SsType) -> PermanovaOptions {
    PermanovaOptions {
        permutations: 99,
        seed: 7,
        scheme: Scheme::Free,
        ss_type,
    }
}

#[test]
fn permanova_on_one_variable_equals_anova_f() {
    // Anderson (2001) Austral Ecol. 26:32-46: with Euclidean distance on one variable the
    // pseudo-F is the one-way ANOVA F (here scipy.stats.f_oneway).
    for case in fixture("models_oneway.json")["cases"]
        .as_array()
        .expect("cases")
    {
        let groups = rows(&case["groups"]);
        let x: Vec<Vec<f64>> = groups.iter().flatten().map(|&v| vec![v]).collect();
        let codes: Vec<usize> = groups
            .iter()
            .enumerate()
            .flat_map(|(g, v)| vec![g; v.len()])
            .collect();
        let grouping = Grouping::from_codes(&codes);
        let d = euclidean(&x);
        let f = case["f"].as_f64().expect("f");
        let fast =
            permanova_oneway(&d, &grouping, &opts(SsType::Sequential), None).expect("one-way");
        assert!(
            close(fast.terms[0].pseudo_f, f),
            "{} vs {f}",
            fast.terms[0].pseudo_f
        );
        let design =
            Design::new(x.len(), vec![Term::new("g", TermSpec::Factor(grouping))]).expect("design");
        let general = permanova(&d, &design, &opts(SsType::Sequential), None).expect("general");
        assert!(close(general.terms[0].pseudo_f, f));
    }
}

#[test]
fn size_test_f_equals_anova_f_on_log_totals() {
    // The size test is the one-way F on ln(total) (docs/methods.md, "PERMANOVA"): with
    // totals = exp(v) it must equal scipy.stats.f_oneway on v.
    for case in fixture("models_oneway.json")["cases"]
        .as_array()
        .expect("cases")
    {
        let groups = rows(&case["groups"]);
        let totals: Vec<f64> = groups.iter().flatten().map(|v| v.exp()).collect();
        let codes: Vec<usize> = groups
            .iter()
            .enumerate()
            .flat_map(|(g, v)| vec![g; v.len()])
            .collect();
        let o = SizeTestOptions {
            permutations: 99,
            seed: 3,
            scheme: Scheme::Free,
            bootstrap: 99,
            reference: 0,
            confidence: 0.95,
            clusters: None,
        };
        let r = size_test(&totals, &Grouping::from_codes(&codes), &o, None).expect("size test");
        let f = case["f"].as_f64().expect("f");
        assert!((r.f - f).abs() <= 1e-8 * f.max(1.0), "{} vs {f}", r.f);
        // The ratio to the reference is exp(mean_g - mean_0).
        let mean = |v: &[f64]| v.iter().sum::<f64>() / v.len() as f64;
        for (g, row) in r.groups.iter().enumerate() {
            assert!(close(
                row.ratio,
                (mean(&groups[g]) - mean(&groups[0])).exp()
            ));
        }
    }
}

#[test]
fn euclidean_db_rda_r2_equals_pooled_ols_r2() {
    // McArdle & Anderson (2001) Ecology 82:290-297;
    // docs/methods.md, "Distance-based linear models": with Euclidean D, tr(HG)/tr(G)
    // is the pooled OLS R² of Y on the design (statsmodels OLS).
    let fx = fixture("models_ols.json");
    let y = rows(&fx["y"]);
    let n = y.len();
    let design = Design::new(
        n,
        vec![
            Term::new("x", TermSpec::Covariate(floats(&fx["x"]))),
            Term::new(
                "f",
                TermSpec::Factor(Grouping::from_labels(&strings(&fx["factor"]))),
            ),
        ],
    )
    .expect("design");
    let g = gower_centre(&euclidean(&y));
    let table = linear_model::anova_table(&g, &design, SsType::Sequential).expect("table");
    assert!(close(table.r2, fx["r2"].as_f64().expect("r2")));
    assert!(close(table.r2_adj, fx["r2_adj"].as_f64().expect("r2_adj")));
    let full = design.basis(&[0, 1]).expect("basis");
    let fit = linear_model::fit(&g, &Basis::intercept(n), &full).expect("fit");
    assert_eq!(fit.df_term as f64, fx["m"].as_f64().expect("m"));
    // The db-RDA F equals the RDA F (R²/m)/((1-R²)/(n-m-1)).
    assert!(close(fit.pseudo_f, fx["f"].as_f64().expect("f")));
}

#[test]
fn sequential_and_marginal_ss_equal_statsmodels_types_one_and_two() {
    // docs/methods.md, "Distance-based linear models": with Euclidean D on one variable
    // the term SS equal statsmodels anova_lm(typ=1) (sequential) and typ=2 for main
    // effects (marginal).
    let fx = fixture("models_anova.json");
    let y: Vec<Vec<f64>> = floats(&fx["y"]).into_iter().map(|v| vec![v]).collect();
    let n = y.len();
    let a = TermSpec::Factor(Grouping::from_labels(&strings(&fx["A"])));
    let b = TermSpec::Factor(Grouping::from_labels(&strings(&fx["B"])));
    let ab = TermSpec::interaction(&a, &b);
    let g = gower_centre(&euclidean(&y));
    let full = Design::new(
        n,
        vec![
            Term::new("A", a.clone()),
            Term::new("B", b.clone()),
            Term::new("A:B", ab),
        ],
    )
    .expect("design");
    let t1 = linear_model::anova_table(&g, &full, SsType::Sequential).expect("type I");
    let want = &fx["type1"];
    for (row, (ss, f)) in t1
        .terms
        .iter()
        .zip(floats(&want["ss"]).into_iter().zip(floats(&want["f"])))
    {
        assert!(close(row.ss, ss), "{}: {} vs {ss}", row.name, row.ss);
        assert!(close(row.pseudo_f, f));
    }
    assert!(close(
        t1.residual.ss,
        want["resid_ss"].as_f64().expect("resid")
    ));
    assert_eq!(
        t1.residual.df as f64,
        want["resid_df"].as_f64().expect("df")
    );
    let marginal = linear_model::anova_table(&g, &full, SsType::Marginal).expect("marginal");
    assert!(close(
        marginal.terms[2].ss,
        fx["type2_interaction_ss"].as_f64().expect("ss")
    ));
    let main = Design::new(n, vec![Term::new("A", a), Term::new("B", b)]).expect("design");
    let t2 = linear_model::anova_table(&g, &main, SsType::Marginal).expect("type II");
    let want = &fx["type2_main"];
    for (row, (ss, f)) in t2
        .terms
        .iter()
        .zip(floats(&want["ss"]).into_iter().zip(floats(&want["f"])))
    {
        assert!(close(row.ss, ss), "{}: {} vs {ss}", row.name, row.ss);
        assert!(close(row.pseudo_f, f));
    }
    assert!(close(
        t2.residual.ss,
        want["resid_ss"].as_f64().expect("resid")
    ));
    // The multi-term permutation path reports the same table.
    let r = permanova(&euclidean(&y), &main, &opts(SsType::Marginal), None).expect("permanova");
    assert!(close(r.terms[0].ss, t2.terms[0].ss));
    assert!(r.terms.iter().all(|t| t.p_value > 0.0 && t.p_value <= 1.0));
}

#[test]
fn holm_and_bh_equal_statsmodels_multipletests() {
    // statsmodels.stats.multitest.multipletests(method='holm' | 'fdr_bh').
    for case in fixture("models_multitest.json")["cases"]
        .as_array()
        .expect("cases")
    {
        let p = floats(&case["p"]);
        for (x, y) in holm(&p).iter().zip(floats(&case["holm"])) {
            assert!((x - y).abs() < 1e-12, "holm {x} vs {y}");
        }
        for (x, y) in benjamini_hochberg(&p).iter().zip(floats(&case["bh"])) {
            assert!((x - y).abs() < 1e-12, "bh {x} vs {y}");
        }
    }
}

#[test]
fn distances_to_centroids_from_g_equal_coordinate_distances() {
    // Anderson (2006) Biometrics 62:245-253; docs/methods.md, "Dispersion": for
    // Euclidean D the formula on G gives the Euclidean distance to the group centroid
    // (NumPy), and the statistic is f_oneway on those distances.
    let fx = fixture("models_dispersion.json");
    let x = rows(&fx["coordinates"]);
    let codes: Vec<usize> = fx["groups"]
        .as_array()
        .expect("groups")
        .iter()
        .map(|v| v.as_u64().expect("int") as usize)
        .collect();
    let o = DispersionOptions {
        permutations: 99,
        seed: 2,
        scheme: Scheme::Free,
        permute: Permute::Residuals,
    };
    let r =
        dispersion(&euclidean(&x), &Grouping::from_codes(&codes), &o, None).expect("dispersion");
    for (a, b) in r.distances.iter().zip(floats(&fx["z"])) {
        assert!((a - b).abs() < 1e-9, "{a} vs {b}");
    }
    assert!(close(r.f, fx["f"].as_f64().expect("f")));
    assert_eq!(r.clamped, 0);
}
