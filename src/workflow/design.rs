//! The one rule for each piece of a design: groups from a field, strata and the
//! exchangeability scheme, numeric covariates, year ranges and periods. Every
//! analysis takes its design from here, so two commands given the same flags
//! always test on the same samples under the same scheme.

use serde::{Deserialize, Serialize};

use crate::analysis::dissimilarity::{Distance, DistanceMatrix};
use crate::analysis::linear_model::Grouping;
use crate::analysis::permutation::Scheme;
use crate::analysis::transform::Transform;
use crate::matrix::CountMatrix;

use super::{Result, WorkflowError};

/// The grouping of the rows of `m` by `field`; `option` names the flag in errors.
///
/// # Errors
/// An unknown field (the message lists the available ones) or a field not
/// defined for some row.
pub fn grouping(m: &CountMatrix, field: &str, option: &'static str) -> Result<Grouping> {
    let labels = m
        .field_values(field)
        .map_err(|cause| WorkflowError::Field {
            option,
            field: field.to_string(),
            cause,
        })?;
    Ok(Grouping::from_labels(&labels))
}

/// The values of a numeric field, one per row of `m`.
///
/// # Errors
/// An unknown field, or a value that is not a number.
pub fn numeric(m: &CountMatrix, field: &str, option: &'static str) -> Result<Vec<f64>> {
    m.field_numeric(field)
        .map_err(|cause| WorkflowError::Field {
            option,
            field: field.to_string(),
            cause,
        })
}

/// Numeric covariates by name, refusing a name given twice or equal to `factor`.
///
/// # Errors
/// As [`numeric`]; [`WorkflowError::AlreadyInModel`].
pub fn covariates(
    m: &CountMatrix,
    names: &[String],
    factor: Option<&str>,
) -> Result<Vec<(String, Vec<f64>)>> {
    let mut out: Vec<(String, Vec<f64>)> = Vec::with_capacity(names.len());
    for c in names {
        if Some(c.as_str()) == factor || out.iter().any(|(n, _)| n == c) {
            return Err(WorkflowError::AlreadyInModel {
                option: "--covariate",
                field: c.clone(),
            });
        }
        out.push((c.clone(), numeric(m, c, "--covariate")?));
    }
    Ok(out)
}

/// The exchangeability scheme: free without `strata`, otherwise samples move
/// only within the levels of the `strata` field.
///
/// When a factor is under test (`factor`), the strata must leave it room to
/// vary: a stratum field equal to the factor, or one in which every stratum
/// holds a single level of the factor, admits only the observed arrangement,
/// so its p-value would be 1 whatever the data. Both are refused.
///
/// # Errors
/// As [`grouping`]; [`WorkflowError::StrataIsFactor`]; [`WorkflowError::Refused`]
/// when the factor cannot vary within any stratum.
pub fn scheme(m: &CountMatrix, strata: Option<&str>, factor: Option<&str>) -> Result<Scheme> {
    let Some(f) = strata else {
        return Ok(Scheme::Free);
    };
    if Some(f) == factor {
        return Err(WorkflowError::StrataIsFactor {
            field: f.to_string(),
        });
    }
    let s = grouping(m, f, "--strata")?;
    if let Some(by) = factor {
        let g = grouping(m, by, "--by")?;
        let varies = (0..s.n_groups()).any(|k| {
            let mut levels = s
                .codes()
                .iter()
                .zip(g.codes())
                .filter(|(sc, _)| **sc == k)
                .map(|(_, gc)| *gc);
            let first = levels.next();
            levels.any(|l| Some(l) != first)
        });
        if !varies {
            return Err(WorkflowError::Refused(format!(
                "--strata {f}: every stratum holds a single level of {by}, so permutations \
                 within strata cannot change any sample's group and the test has one possible \
                 arrangement; drop --strata {f}, or test {by} with a scheme that moves whole {f} units"
            )));
        }
    }
    Ok(Scheme::WithinStrata(s.codes().to_vec()))
}

/// A dissimilarity and the transform applied before it.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
pub struct DistanceSpec {
    /// The dissimilarity.
    pub distance: Distance,
    /// The transform applied to the counts first.
    pub transform: Transform,
}

impl Default for DistanceSpec {
    fn default() -> Self {
        DistanceSpec {
            distance: Distance::BrayCurtis,
            transform: Transform::None,
        }
    }
}

impl DistanceSpec {
    /// The dissimilarities between the rows of `m` (transform first).
    ///
    /// # Errors
    /// The kernel's refusals (negative values, empty samples where the
    /// coefficient needs a total…), with the distance and transform named and
    /// rows given by their labels.
    pub fn compute(&self, m: &CountMatrix) -> Result<DistanceMatrix> {
        self.distance
            .compute_after(self.transform, &m.values)
            .map_err(|e| {
                WorkflowError::kernel(
                    format!(
                        "computing {} dissimilarities after transform '{}'",
                        self.distance.name(),
                        self.transform.name()
                    ),
                    e,
                    m,
                )
            })
    }
}

/// A shape-only dissimilarity: the one choice of `compare`, `trend` and the report.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, Default)]
#[serde(rename_all = "kebab-case")]
pub enum ShapeDistance {
    /// Hellinger: exactly blind to sample totals (Legendre & Gallagher 2001,
    /// Oecologia 129:271–280).
    #[default]
    Hellinger,
    /// Chi-square: blind to totals up to the column masses of the data set.
    ChiSquare,
}

impl ShapeDistance {
    /// Both choices, in documentation order.
    pub const ALL: [ShapeDistance; 2] = [ShapeDistance::Hellinger, ShapeDistance::ChiSquare];

    /// The dissimilarity.
    pub fn distance(self) -> Distance {
        match self {
            ShapeDistance::Hellinger => Distance::Hellinger,
            ShapeDistance::ChiSquare => Distance::ChiSquare,
        }
    }

    /// Stable name (`hellinger`, `chi-square`).
    pub fn name(self) -> &'static str {
        self.distance().name()
    }
}

impl From<ShapeDistance> for Distance {
    fn from(s: ShapeDistance) -> Self {
        s.distance()
    }
}

/// Parse `A..B` (or a single `A`, meaning `A..A`) of whole numbers: the one
/// range syntax of years, months and periods.
///
/// # Errors
/// Text that is not whole numbers.
pub fn parse_span<T: std::str::FromStr + Copy>(s: &str) -> std::result::Result<(T, T), String> {
    let num = |t: &str| {
        t.trim()
            .parse::<T>()
            .map_err(|_| format!("expected A..B with whole numbers, got '{s}'"))
    };
    match s.split_once("..") {
        Some((a, b)) => Ok((num(a)?, num(b)?)),
        None => {
            let a = num(s)?;
            Ok((a, a))
        }
    }
}

/// Parse a year range `A..B` (or a single year `A`), inclusive.
///
/// # Errors
/// Text that is not whole years; a first year after the last.
pub fn parse_years(s: &str) -> std::result::Result<(i32, i32), String> {
    let (a, b) = parse_span::<i32>(s)?;
    if a > b {
        return Err(format!("the first year is after the last in '{s}'"));
    }
    Ok((a, b))
}

/// Parse a season window of months `A..B` (1 to 12; `A > B` wraps the year end).
///
/// # Errors
/// Text that is not whole numbers; a month outside 1 to 12.
pub fn parse_months(s: &str) -> std::result::Result<(u32, u32), String> {
    let (a, b) = parse_span::<u32>(s)?;
    if !(1..=12).contains(&a) || !(1..=12).contains(&b) {
        return Err(format!("months are 1 to 12, got '{s}'"));
    }
    Ok((a, b))
}

/// Year ranges that define the field `period` (`2008..2015,2016..2025`): the one
/// periods rule of every command that takes `--periods`. Rows outside every
/// range are left out by [`CountMatrix::with_periods`], with a note.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct Periods(pub Vec<(i32, i32)>);

impl Periods {
    /// Label of the range holding `year`, e.g. `2008-2015`.
    pub fn label_of(&self, year: i32) -> Option<String> {
        self.0
            .iter()
            .find(|(a, b)| (*a..=*b).contains(&year))
            .map(|(a, b)| CountMatrix::period_label((*a, *b)))
    }

    /// The matrix with the field `period` defined and rows outside every range removed.
    ///
    /// # Errors
    /// Overlapping or reversed ranges; no row inside any range.
    pub fn apply(&self, m: &CountMatrix) -> Result<CountMatrix> {
        Ok(m.with_periods(&self.0)?)
    }
}

impl std::str::FromStr for Periods {
    type Err = String;

    /// Parse `A..B,C..D` into non-overlapping ranges.
    fn from_str(s: &str) -> std::result::Result<Self, String> {
        let mut out: Vec<(i32, i32)> = Vec::new();
        for part in s.split(',').map(str::trim).filter(|p| !p.is_empty()) {
            let (a, b) = parse_years(part)?;
            if out.iter().any(|(c, d)| a <= *d && *c <= b) {
                return Err(format!("period '{part}' overlaps another"));
            }
            out.push((a, b));
        }
        if out.is_empty() {
            return Err("no period given".into());
        }
        Ok(Periods(out))
    }
}

/// Parse `--periods` text (for clap's `value_parser`).
///
/// # Errors
/// As [`Periods::from_str`](std::str::FromStr).
pub fn parse_periods(s: &str) -> std::result::Result<Periods, String> {
    s.parse()
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::matrix::{SampleMeta, TaxonMeta};
    use nalgebra::DMatrix;

    /// Rows at `sites` (site code, treatment), one taxon.
    fn plots(rows: &[(&str, &str)]) -> CountMatrix {
        let samples = rows
            .iter()
            .enumerate()
            .map(|(i, (site, treatment))| SampleMeta {
                label: format!("{site}/{i}"),
                site: site.to_string(),
                attributes: [("treatment".to_string(), treatment.to_string())].into(),
                year: 2000 + i as i32,
                last_year: 2000 + i as i32,
                season: None,
                first_date: String::new(),
                last_date: String::new(),
                events_pooled: 1,
                effort: 1.0,
                effort_unit: "minutes".into(),
                protocol: "kick".into(),
            })
            .collect();
        CountMatrix {
            samples,
            taxa: vec![TaxonMeta {
                name: "Baetis".into(),
                rank: "genus".into(),
            }],
            values: DMatrix::from_element(rows.len(), 1, 1.0),
            notes: vec![],
        }
    }

    #[test]
    fn strata_that_leave_the_factor_no_room_are_refused() {
        // A site-level treatment is constant within each site: permuting within
        // sites can only give back the observed labelling (one arrangement).
        let m = plots(&[
            ("A", "control"),
            ("A", "control"),
            ("B", "fenced"),
            ("B", "fenced"),
        ]);
        let err = scheme(&m, Some("site"), Some("treatment")).unwrap_err();
        assert!(err.to_string().contains("one possible"), "{err}");
        assert!(matches!(
            scheme(&m, Some("treatment"), Some("treatment")),
            Err(WorkflowError::StrataIsFactor { .. })
        ));
        // A factor that varies within at least one stratum can be tested.
        let m = plots(&[
            ("A", "control"),
            ("A", "fenced"),
            ("B", "fenced"),
            ("B", "fenced"),
        ]);
        assert!(matches!(
            scheme(&m, Some("site"), Some("treatment")),
            Ok(Scheme::WithinStrata(_))
        ));
        assert_eq!(scheme(&m, None, Some("treatment")).unwrap(), Scheme::Free);
        assert!(matches!(
            scheme(&m, Some("reach"), None),
            Err(WorkflowError::Field {
                option: "--strata",
                ..
            })
        ));
    }

    #[test]
    fn periods_and_year_ranges_parse_by_one_rule() {
        assert_eq!(
            parse_periods("2008..2015,2016..2025").unwrap(),
            Periods(vec![(2008, 2015), (2016, 2025)])
        );
        assert_eq!(parse_periods("2010").unwrap(), Periods(vec![(2010, 2010)]));
        assert!(parse_periods("2015..2008").is_err());
        assert!(parse_periods("early,late").is_err());
        assert!(parse_periods("2008..2012,2010..2014").is_err());
        assert_eq!(parse_years(" 2016 .. 2025 ").unwrap(), (2016, 2025));
        assert!(parse_years("2016..").is_err());
    }
}
