//! The one rule for each piece of a design: groups from a field, strata and the
//! exchangeability scheme, numeric covariates, year ranges and periods. Every
//! analysis takes its design from here, so two commands given the same flags
//! always test on the same samples under the same scheme.

use serde::{Deserialize, Serialize};

use crate::analysis::dissimilarity::{Distance, DistanceMatrix};
use crate::analysis::linear_model::Grouping;
use crate::analysis::permutation::{Permuter, Scheme};
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

/// Row totals as counts and their effort, for the log-linear count model: with
/// `per_effort` the matrix holds totals per unit effort, so the counts are the totals
/// times the rows' effort; otherwise the totals themselves, each with effort 1.
pub fn counts_and_effort(m: &CountMatrix, per_effort: bool) -> (Vec<f64>, Vec<f64>) {
    let totals = m.totals();
    if per_effort {
        totals
            .iter()
            .zip(&m.samples)
            .map(|(t, s)| (t * s.effort, s.effort))
            .unzip()
    } else {
        totals.iter().map(|&t| (t, 1.0)).unzip()
    }
}

/// The counts of every taxon in the rows `rows` of `m`, with their effort, for
/// per-taxon count models: with `per_effort` the matrix holds values per unit
/// effort, so the counts are the values times the row's effort; otherwise the
/// values themselves, each row with effort 1 (as [`counts_and_effort`] for totals).
pub fn taxon_counts(
    m: &CountMatrix,
    per_effort: bool,
    rows: &[usize],
) -> (nalgebra::DMatrix<f64>, Vec<f64>) {
    let effort: Vec<f64> = rows
        .iter()
        .map(|&i| if per_effort { m.samples[i].effort } else { 1.0 })
        .collect();
    let y = nalgebra::DMatrix::from_fn(rows.len(), m.values.ncols(), |k, j| {
        m.values[(rows[k], j)] * effort[k]
    });
    (y, effort)
}

/// The significance level of a verdict's wording (`--alpha`), strictly between 0 and 1.
///
/// # Errors
/// [`WorkflowError::Invalid`] otherwise.
pub fn check_alpha(alpha: f64) -> Result<()> {
    if alpha > 0.0 && alpha < 1.0 {
        Ok(())
    } else {
        Err(WorkflowError::Invalid {
            option: "--alpha",
            reason: format!("must be between 0 and 1, got {alpha}"),
        })
    }
}

/// How the rows of a selection are exchanged in a permutation test (`--permute`;
/// docs/methods.md, "Permutation designs for revisited sites").
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum PermuteDesign {
    /// Choose per term: whole sites for a term constant within sites, within sites for
    /// a term that varies within sites, free when every site gives one row.
    #[default]
    Auto,
    /// Any row may go anywhere (rows are independent replicates).
    Free,
    /// Rows move only among the rows of their own site.
    WithinSites,
    /// Sites exchange their site-level values, each keeping its whole series.
    WholeSites,
}

impl PermuteDesign {
    /// The name used on the command line and in JSON.
    pub fn as_str(self) -> &'static str {
        match self {
            PermuteDesign::Auto => "auto",
            PermuteDesign::Free => "free",
            PermuteDesign::WithinSites => "within-sites",
            PermuteDesign::WholeSites => "whole-sites",
        }
    }

    /// The choice of runs stored before `--permute` existed: their permutations were
    /// free (or within `--strata`), so that is how they are replayed.
    pub fn before_designs() -> PermuteDesign {
        PermuteDesign::Free
    }
}

impl std::str::FromStr for PermuteDesign {
    type Err = String;
    fn from_str(s: &str) -> std::result::Result<Self, String> {
        match s {
            "auto" => Ok(PermuteDesign::Auto),
            "free" => Ok(PermuteDesign::Free),
            "within-sites" => Ok(PermuteDesign::WithinSites),
            "whole-sites" => Ok(PermuteDesign::WholeSites),
            other => Err(format!(
                "unknown permutation design '{other}': use auto, free, within-sites or whole-sites"
            )),
        }
    }
}

/// The scheme one term is tested under, and why it was chosen.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct TermScheme {
    /// The term (a factor or covariate name).
    pub term: String,
    /// `free`, `within-sites`, `whole-sites` or `within-strata`.
    pub permute: &'static str,
    /// Why, in words.
    pub reason: String,
    /// The scheme itself.
    #[serde(skip)]
    pub scheme: Scheme,
}

/// One code per row of `values`: equal values get equal codes.
fn codes_of<T: PartialEq>(values: &[T]) -> Vec<usize> {
    let mut seen: Vec<&T> = Vec::new();
    values
        .iter()
        .map(|v| {
            seen.iter().position(|s| *s == v).unwrap_or_else(|| {
                seen.push(v);
                seen.len() - 1
            })
        })
        .collect()
}

/// The site code of every row of `m` (0, 1, … in order of first appearance) and the
/// number of sites.
pub fn site_codes(m: &CountMatrix) -> (Vec<usize>, usize) {
    let sites: Vec<&str> = m.samples.iter().map(|s| s.site.as_str()).collect();
    let codes = codes_of(&sites);
    let k = codes.iter().max().map_or(0, |c| c + 1);
    (codes, k)
}

/// The scheme under which the term `term` (values `values`, one per row of `m`,
/// compared for equality) is tested: `--strata` when given (with `PermuteDesign::Auto`),
/// otherwise the `permute` choice, resolved for this term under `PermuteDesign::Auto`.
///
/// A term the scheme cannot vary is refused, naming the scheme that would test it:
/// within sites for a term constant within every site, whole sites for a term that
/// varies within a site, any scheme that leaves one arrangement.
///
/// # Errors
/// As [`grouping`] for `strata`; [`WorkflowError::StrataIsFactor`];
/// [`WorkflowError::Invalid`] for `--strata` beside an explicit site design;
/// [`WorkflowError::Refused`] for an untestable term.
pub fn term_scheme<T: PartialEq>(
    m: &CountMatrix,
    permute: PermuteDesign,
    strata: Option<&str>,
    term: &str,
    values: &[T],
) -> Result<TermScheme> {
    let n = m.samples.len();
    let tcodes = codes_of(values);
    let (sites, n_sites) = site_codes(m);
    let chosen = |permute: &'static str, reason: String, scheme: Scheme| TermScheme {
        term: term.to_string(),
        permute,
        reason,
        scheme,
    };
    let out = if let Some(f) = strata {
        if !matches!(permute, PermuteDesign::Auto | PermuteDesign::Free) {
            return Err(WorkflowError::Invalid {
                option: "--strata",
                reason: format!(
                    "choose either --strata {f} or --permute {}: both say how rows move",
                    permute.as_str()
                ),
            });
        }
        if f == term {
            return Err(WorkflowError::StrataIsFactor {
                field: f.to_string(),
            });
        }
        let s = grouping(m, f, "--strata")?;
        if !varies_within(s.codes(), &tcodes) {
            return Err(WorkflowError::Refused(format!(
                "--strata {f}: every stratum holds a single value of {term}, so permutations \
                 within strata cannot change it and its test has one possible arrangement; \
                 drop --strata {f}{}",
                if f == "site" {
                    format!(" and test {term} with --permute whole-sites (or auto)")
                } else {
                    format!(", or test {term} with a scheme that moves whole {f} units")
                }
            )));
        }
        chosen(
            "within-strata",
            format!(
                "--strata {f}: rows move only within the {} levels of {f}",
                s.n_groups()
            ),
            Scheme::WithinStrata(s.codes().to_vec()),
        )
    } else {
        let repeat = n_sites < n;
        let varies = varies_within(&sites, &tcodes);
        match permute {
            PermuteDesign::Free => chosen(
                "free",
                if repeat {
                    format!(
                        "free, as asked: the {n} rows of {n_sites} sites are treated as \
                         independent replicates"
                    )
                } else {
                    "every site gives one row, so rows are the replicates".to_string()
                },
                Scheme::Free,
            ),
            PermuteDesign::WithinSites | PermuteDesign::Auto if repeat && varies => chosen(
                "within-sites",
                format!(
                    "{term} varies within sites: rows move only among the rows of their own \
                     site ({n_sites} sites)"
                ),
                Scheme::WithinStrata(sites.clone()),
            ),
            PermuteDesign::WholeSites | PermuteDesign::Auto if repeat && !varies => chosen(
                "whole-sites",
                format!(
                    "{term} is constant within each site: its values are permuted among the \
                     {n_sites} sites, each site keeping its whole series"
                ),
                Scheme::WholeSites(sites.clone()),
            ),
            PermuteDesign::Auto => chosen(
                "free",
                "every site gives one row, so rows are the replicates".to_string(),
                Scheme::Free,
            ),
            PermuteDesign::WithinSites if !repeat => {
                return Err(WorkflowError::Refused(format!(
                    "--permute within-sites: every site gives one row, so no row can move \
                     within its site and the test of {term} has one possible arrangement; \
                     use --permute free (or auto)"
                )));
            }
            PermuteDesign::WithinSites => {
                return Err(WorkflowError::Refused(format!(
                    "--permute within-sites: {term} is constant within every site, so \
                     permutations within sites cannot change it and its test has one possible \
                     arrangement; test {term} with --permute whole-sites (or auto)"
                )));
            }
            PermuteDesign::WholeSites if !repeat => chosen(
                "whole-sites",
                format!("every site gives one row: its {n_sites} sites are permuted freely"),
                Scheme::WholeSites(sites.clone()),
            ),
            PermuteDesign::WholeSites => {
                let site = (0..n)
                    .find(|&i| (0..n).any(|j| sites[j] == sites[i] && tcodes[j] != tcodes[i]))
                    .map_or_else(String::new, |i| m.samples[i].site.clone());
                return Err(WorkflowError::Refused(format!(
                    "--permute whole-sites: {term} varies within site {site}, and whole-site \
                     permutation moves site-level values only; test {term} with --permute \
                     within-sites (or auto)"
                )));
            }
        }
    };
    let permuter = Permuter::new(n, &out.scheme, Some(&tcodes))
        .map_err(|e| WorkflowError::kernel("the permutation design", e, m))?;
    if permuter.distinct() == Some(1) {
        return Err(WorkflowError::Refused(format!(
            "{term}: under {} permutation only the observed arrangement is possible (every \
             value of {term} sits in one unit that cannot move), so it cannot be tested; \
             add sites or years, or test another term",
            out.permute
        )));
    }
    Ok(out)
}

/// True when some stratum (`strata` codes) holds two different `values` codes.
fn varies_within(strata: &[usize], values: &[usize]) -> bool {
    let mut first: std::collections::HashMap<usize, usize> = std::collections::HashMap::new();
    strata
        .iter()
        .zip(values)
        .any(|(s, v)| *first.entry(*s).or_insert(*v) != *v)
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
                attribute_changes: Default::default(),
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
                unidentified: None,
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
        let tested = |m: &CountMatrix, permute: PermuteDesign, strata: Option<&str>| {
            let values = m.field_values("treatment").unwrap();
            term_scheme(m, permute, strata, "treatment", &values).map(|t| t.scheme)
        };
        let err = tested(&m, PermuteDesign::Auto, Some("site")).unwrap_err();
        assert!(err.to_string().contains("one possible"), "{err}");
        assert!(matches!(
            term_scheme(
                &m,
                PermuteDesign::Auto,
                Some("treatment"),
                "treatment",
                &[0, 0, 1, 1]
            ),
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
            tested(&m, PermuteDesign::Auto, Some("site")),
            Ok(Scheme::WithinStrata(_))
        ));
        assert_eq!(tested(&m, PermuteDesign::Free, None).unwrap(), Scheme::Free);
        assert!(matches!(
            tested(&m, PermuteDesign::Auto, Some("reach")),
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
