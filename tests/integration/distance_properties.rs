//! Property tests of the dissimilarity and PCoA kernels on random count
//! matrices: structural properties of a dissimilarity matrix, the invariances and
//! identities between coefficients stated in docs/methods.md, "Transformations" and
//! docs/methods.md, "Dissimilarities" (derived from the definitions), and classical
//! scaling reproducing Euclidean distances.

use nalgebra::DMatrix;
use proptest::prelude::*;
use tally::analysis::{Distance, DistanceMatrix, Transform, pcoa};

/// Sparse counts, n × p, every row and every column with at least one organism
/// (so that every coefficient is defined).
fn counts() -> impl Strategy<Value = DMatrix<f64>> {
    (2usize..14, 1usize..12).prop_flat_map(|(n, p)| {
        proptest::collection::vec(prop_oneof![3 => Just(0u32), 2 => 1u32..40], n * p).prop_map(
            move |v| {
                let mut y = DMatrix::from_fn(n, p, |i, j| f64::from(v[i * p + j]));
                for i in 0..n {
                    if y.row(i).sum() == 0.0 {
                        y[(i, i % p)] = 1.0;
                    }
                }
                for j in 0..p {
                    if y.column(j).sum() == 0.0 {
                        y[(j % n, j)] = 1.0;
                    }
                }
                y
            },
        )
    })
}

fn rel_close(a: f64, b: f64, rel: f64) -> bool {
    (a - b).abs() <= rel * a.abs().max(b.abs()) + 1e-14
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(96))]

    #[test]
    fn every_coefficient_gives_a_valid_dissimilarity_matrix(y in counts()) {
        // common practice, no source: a dissimilarity matrix is symmetric with zero
        // diagonal and finite non-negative entries.
        for dist in Distance::ALL {
            let d = dist.compute(&y).unwrap();
            let sq = d.to_square();
            for (i, row) in sq.iter().enumerate() {
                prop_assert_eq!(row[i], 0.0);
                for (k, v) in row.iter().enumerate() {
                    prop_assert_eq!(*v, sq[k][i]);
                    prop_assert!(v.is_finite() && *v >= 0.0, "{} {}", dist.name(), v);
                }
            }
            if matches!(dist, Distance::BrayCurtis | Distance::Jaccard | Distance::Kulczynski) {
                // docs/methods.md, "Dissimilarities": these coefficients lie in [0, 1] for counts.
                prop_assert!(d.condensed().iter().all(|v| *v <= 1.0 + 1e-12));
            }
            if dist == Distance::Hellinger {
                // docs/methods.md, "Dissimilarities": Hellinger range [0, sqrt 2] in the ecological form
                // (Legendre & Gallagher 2001).
                prop_assert!(d.condensed().iter().all(|v| *v <= 2f64.sqrt() + 1e-12));
            }
        }
    }

    #[test]
    fn reordering_samples_reorders_distances(y in counts(), seed in any::<u64>()) {
        // common practice, no source: d(π(i), π(k)) is d(i, k) of the reordered data.
        let n = y.nrows();
        let mut perm: Vec<usize> = (0..n).collect();
        perm.sort_by_key(|&i| (i as u64).wrapping_mul(seed | 1).rotate_left(17) ^ seed);
        let yp = DMatrix::from_fn(n, y.ncols(), |i, j| y[(perm[i], j)]);
        for dist in Distance::ALL {
            let d = dist.compute(&y).unwrap();
            let dp = dist.compute(&yp).unwrap();
            for i in 0..n {
                for k in 0..n {
                    // Bit-identical: on integer counts every total and mass is an exact
                    // sum whatever the row order, and each pair runs the same inner loop.
                    prop_assert_eq!(dp.get(i, k), d.get(perm[i], perm[k]), "{}", dist.name());
                }
            }
        }
    }

    #[test]
    fn bray_curtis_ignores_a_common_scale(y in counts(), c in 0.01f64..100.0) {
        // Bray & Curtis (1957); docs/methods.md, "Dissimilarities": unchanged when both
        // samples are multiplied by the same constant.
        let a = Distance::BrayCurtis.compute(&y).unwrap();
        let b = Distance::BrayCurtis.compute(&(&y * c)).unwrap();
        for (u, v) in a.condensed().iter().zip(b.condensed()) {
            prop_assert!(rel_close(*u, *v, 1e-12), "{u} vs {v}");
        }
    }

    #[test]
    fn profile_and_hellinger_ignore_the_size_of_one_sample(y in counts(), r in 0usize..100, c in 0.01f64..100.0) {
        // docs/methods.md, "Transformations" (derived): profile and Hellinger rows depend
        // only on the shape of each row; multiplying row r by a constant changes nothing.
        let r = r % y.nrows();
        let mut ys = y.clone();
        ys.row_mut(r).scale_mut(c);
        for t in [Transform::Profile, Transform::Hellinger] {
            let a = t.apply(&y).unwrap();
            let b = t.apply(&ys).unwrap();
            for (u, v) in a.iter().zip(b.iter()) {
                prop_assert!(rel_close(*u, *v, 1e-13));
            }
        }
        let a = Distance::Hellinger.compute(&y).unwrap();
        let b = Distance::Hellinger.compute(&ys).unwrap();
        for (u, v) in a.condensed().iter().zip(b.condensed()) {
            prop_assert!(rel_close(*u, *v, 1e-9), "{u} vs {v}");
        }
    }

    #[test]
    fn coefficient_identities(y in counts()) {
        let n = y.nrows();
        let prof = Transform::Profile.apply(&y).unwrap();
        // docs/methods.md, "Dissimilarities" (derived): Bray-Curtis on profiles = half the
        // Manhattan distance on profiles.
        let bc = Distance::BrayCurtis.compute(&prof).unwrap();
        let man = Distance::Manhattan.compute(&prof).unwrap();
        // Hellinger = Euclidean on square-root profiles, by definition (Legendre &
        // Gallagher 2001; docs/methods.md, "Transformations").
        let hel = Distance::Hellinger.compute(&y).unwrap();
        let eu = Distance::Euclidean.compute(&prof.map(f64::sqrt)).unwrap();
        // Jaccard is binary: the same on counts and on presences (docs/methods.md, "Dissimilarities").
        let j1 = Distance::Jaccard.compute(&y).unwrap();
        let j2 = Distance::Jaccard.compute(&Transform::Presence.apply(&y).unwrap()).unwrap();
        for k in 0..n * (n - 1) / 2 {
            prop_assert!(rel_close(bc.condensed()[k], 0.5 * man.condensed()[k], 1e-12));
            prop_assert!(rel_close(hel.condensed()[k], eu.condensed()[k], 1e-9));
            prop_assert_eq!(j1.condensed()[k], j2.condensed()[k]);
        }
    }

    #[test]
    fn pcoa_of_euclidean_distances_reproduces_them(
        pts in (3usize..12, 1usize..5).prop_flat_map(|(n, p)| proptest::collection::vec(-10.0f64..10.0, n * p).prop_map(move |v| DMatrix::from_row_slice(n, p, &v)))
    ) {
        // Gower (1966) Biometrika 53:325-338: for Euclidean distances, the principal
        // coordinates reproduce every inter-point distance, and there are no
        // negative eigenvalues.
        let d = Distance::Euclidean.compute(&pts).unwrap();
        let p = pcoa(&d).unwrap();
        prop_assert_eq!(p.negative_sum, 0.0);
        prop_assert!(p.coordinates.ncols() <= pts.ncols());
        let scale = d.condensed().iter().fold(0.0f64, |m, v| m.max(*v));
        for i in 0..pts.nrows() {
            for k in (i + 1)..pts.nrows() {
                let e = (p.coordinates.row(i) - p.coordinates.row(k)).norm();
                prop_assert!((e - d.get(i, k)).abs() <= 1e-8 * scale, "{e} vs {}", d.get(i, k));
            }
        }
    }
}

#[test]
fn results_do_not_depend_on_the_thread_count() {
    // The kernels promise bit-identical results on any number of threads.
    let n = 300;
    let y = DMatrix::from_fn(n, 37, |i, j| {
        ((i * 7919 + j * 104729) % 13).saturating_sub(6) as f64
    });
    let y = DMatrix::from_fn(n, 38, |i, j| if j == 37 { 1.0 } else { y[(i, j)] });
    let run = |threads: usize| -> Vec<DistanceMatrix> {
        let pool = rayon::ThreadPoolBuilder::new()
            .num_threads(threads)
            .build()
            .unwrap();
        pool.install(|| {
            Distance::ALL
                .iter()
                .map(|d| d.compute(&y).unwrap())
                .collect()
        })
    };
    assert_eq!(run(1), run(3));
}
