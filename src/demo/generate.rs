//! The invented Wren Valley demo scenario: its generator and its embedded CSV files.
//!
//! [`generate`] is a pure, deterministic simulation (fixed seed, no file I/O)
//! that writes the four demo CSV files — sites, protocols, taxa and long-format
//! field records — as strings. The committed copies under `demo-data/` are
//! embedded in the binary ([`SITES_CSV`], [`PROTOCOLS_CSV`], [`TAXA_CSV`],
//! [`RECORDS_CSV`]) so that `tally demo` works from any folder; the example
//! program `make_demo_data` rewrites them, and a test checks that [`generate`]
//! reproduces them byte for byte.
//!
//! Everything here is invented: a fictional catchment, invented coordinates and
//! invented counts, built so that known stories (documented in
//! `demo-data/README.md` and in the constants below) can be recovered by the
//! analyses.
//!
//! # Determinism
//!
//! The only source of randomness is [`ChaCha8Rng`] seeded with [`SEED`], read
//! through `next_u64`. The samplers (uniform, normal, gamma, Poisson) are
//! written here rather than taken from a distributions crate, and they use our
//! own `exp`/`ln` built from IEEE-754 basic operations (+, −, ×, ÷, √ are
//! correctly rounded everywhere), so the output depends neither on another
//! crate's sampling internals nor on the platform's maths library.
use chrono::{Datelike, Days, NaiveDate};
use rand::rngs::ChaCha8Rng;
use rand::{Rng, SeedableRng};

/// Seed of the demo generator.
pub const SEED: u64 = 2008_0415;

/// First sampling year of the scenario.
pub const FIRST_YEAR: i32 = 2008;
/// Last sampling year of the scenario.
pub const LAST_YEAR: i32 = 2025;

/// Story 1: from this year on the lower reach holds fewer animals.
pub const LOWER_DECLINE_FROM: i32 = 2016;
/// Story 1: factor applied to every taxon's expected density in the lower reach.
pub const LOWER_DECLINE_FACTOR: f64 = 0.6;
/// Story 2: from this year on the middle reach's sensitive taxa give way to tolerant ones.
pub const MIDDLE_SHIFT_FROM: i32 = 2019;
/// Story 2: factor applied to every sensitive taxon's expected density in the
/// middle reach; tolerant taxa are raised so that each site's expected total
/// stays the same.
pub const MIDDLE_SENSITIVE_FACTOR: f64 = 0.4;
/// Story 4: from this year on the snail genus is recorded under its new name.
pub const RENAME_FROM: i32 = 2014;
/// Story 4: the old name, a synonym in `taxa.csv`.
pub const OLD_NAME: &str = "Hydrobia";
/// Story 4: the accepted (new) name.
pub const NEW_NAME: &str = "Potamopyrgus";
/// Story 5: the middle-reach site with no events in [`GAP_YEARS`].
pub const GAP_SITE: &str = "S10";
/// Story 5: the years without events at [`GAP_SITE`] (inclusive).
pub const GAP_YEARS: (i32, i32) = (2012, 2013);
/// Story 5: the site whose autumn kick sample of [`EMPTY_EVENT_YEAR`] found nothing (after a flood).
pub const EMPTY_EVENT_SITE: &str = "S03";
/// Story 5: the year of the empty autumn sample.
pub const EMPTY_EVENT_YEAR: i32 = 2017;
/// Story 6: from this year on the upper reach is mostly kick-sampled for 4 minutes.
pub const UPPER_LONGER_KICKS_FROM: i32 = 2020;

/// The committed `demo-data/sites.csv`.
pub const SITES_CSV: &str = include_str!("../../demo-data/sites.csv");
/// The committed `demo-data/protocols.csv`.
pub const PROTOCOLS_CSV: &str = include_str!("../../demo-data/protocols.csv");
/// The committed `demo-data/taxa.csv`.
pub const TAXA_CSV: &str = include_str!("../../demo-data/taxa.csv");
/// The committed `demo-data/records.csv`.
pub const RECORDS_CSV: &str = include_str!("../../demo-data/records.csv");
/// The committed `demo-data/attributes.csv`.
pub const ATTRIBUTES_CSV: &str = include_str!("../../demo-data/attributes.csv");

/// Story 7: the lower-reach pool S14 (Pennick Sluice) is restored in 2014
/// (attribute `status` from `degraded` to `restored`, from this date); the two
/// other lower-reach pools stay `degraded`. The counts do not respond to it:
/// the demo shows how an analysis by `status` reads the reach's 2016 decline.
pub const RESTORED_FROM: &str = "2014-06-01";

/// The five demo CSV files as text.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct DemoFiles {
    /// `sites.csv`: `code,name,latitude,longitude,reach,habitat`.
    pub sites: String,
    /// `protocols.csv`: `code,description,effort_unit`.
    pub protocols: String,
    /// `taxa.csv`: `name,rank,parent,accepted`.
    pub taxa: String,
    /// `records.csv`: `site,date,protocol,effort,taxon,count,replicate`.
    pub records: String,
    /// `attributes.csv`: `site,key,value,from` (story 7).
    pub attributes: String,
}

impl DemoFiles {
    /// The committed files embedded in the binary.
    pub fn embedded() -> DemoFiles {
        DemoFiles {
            sites: SITES_CSV.to_string(),
            protocols: PROTOCOLS_CSV.to_string(),
            taxa: TAXA_CSV.to_string(),
            records: RECORDS_CSV.to_string(),
            attributes: ATTRIBUTES_CSV.to_string(),
        }
    }

    /// `(file name, content)` pairs, in the order they should be imported.
    pub fn files(&self) -> [(&'static str, &str); 5] {
        [
            ("sites.csv", &self.sites),
            ("protocols.csv", &self.protocols),
            ("taxa.csv", &self.taxa),
            ("records.csv", &self.records),
            ("attributes.csv", &self.attributes),
        ]
    }
}

// ---------------------------------------------------------------------------
// Deterministic arithmetic and samplers
// ---------------------------------------------------------------------------

/// ln 2 split into a high part with 32 trailing zero bits (so k·LN2_HI is
/// exact for |k| < 2^20) and the remainder (the fdlibm constants).
const LN2_HI: f64 = f64::from_bits(0x3fe6_2e42_fee0_0000);
const LN2_LO: f64 = f64::from_bits(0x3dea_39ef_3579_3c76);

/// exp(x) from basic IEEE operations: x = k·ln 2 + r, |r| ≤ ln 2 / 2, Taylor
/// series of degree 14 for exp(r) (truncation error below 1e-17), then 2^k.
fn exp_det(x: f64) -> f64 {
    if x < -700.0 {
        return 0.0;
    }
    assert!(x < 700.0, "invariant: exp argument {x} stays below 700");
    let k = (x * std::f64::consts::LOG2_E).round();
    let r = (x - k * LN2_HI) - k * LN2_LO;
    let mut p = 1.0;
    for i in (1..=14).rev() {
        p = 1.0 + p * r / f64::from(i);
    }
    let k = k as i64;
    let scale = f64::from_bits(((k + 1023) as u64) << 52);
    p * scale
}

/// ln(x) for finite x > 0 (normal numbers) from basic IEEE operations:
/// x = m·2^e with m in [√½, √2), ln m = 2·atanh((m − 1)/(m + 1)) by its series.
fn ln_det(x: f64) -> f64 {
    assert!(
        x > f64::MIN_POSITIVE && x.is_finite(),
        "invariant: ln argument {x} is a positive normal number"
    );
    let bits = x.to_bits();
    let mut e = ((bits >> 52) & 0x7ff) as i64 - 1023;
    let mut m = f64::from_bits((bits & 0x000f_ffff_ffff_ffff) | (1023_u64 << 52));
    if m > std::f64::consts::SQRT_2 {
        m /= 2.0;
        e += 1;
    }
    let s = (m - 1.0) / (m + 1.0);
    let s2 = s * s;
    let mut series = 0.0;
    for i in (0..=12).rev() {
        series = 1.0 / f64::from(2 * i + 1) + s2 * series;
    }
    let e = e as f64;
    e * LN2_HI + (e * LN2_LO + 2.0 * s * series)
}

/// The generator's random stream: uniforms from `next_u64`, and samplers on top.
struct Stream {
    rng: ChaCha8Rng,
}

impl Stream {
    fn new(seed: u64) -> Stream {
        Stream {
            rng: ChaCha8Rng::seed_from_u64(seed),
        }
    }

    /// Uniform on the open interval (0, 1): the top 53 bits plus one half ulp.
    fn uniform(&mut self) -> f64 {
        ((self.rng.next_u64() >> 11) as f64 + 0.5) * (1.0 / 9_007_199_254_740_992.0)
    }

    /// Uniform integer in `0..n`.
    fn below(&mut self, n: u64) -> u64 {
        ((self.uniform() * n as f64) as u64).min(n - 1)
    }

    /// Standard normal by the polar form of the Box–Muller transform
    /// (Marsaglia & Bray 1964), which needs no trigonometric functions.
    fn normal(&mut self) -> f64 {
        loop {
            let u = 2.0 * self.uniform() - 1.0;
            let v = 2.0 * self.uniform() - 1.0;
            let s = u * u + v * v;
            if s > 0.0 && s < 1.0 {
                return u * (-2.0 * ln_det(s) / s).sqrt();
            }
        }
    }

    /// exp(sd · Z): a log-normal multiplier with median 1.
    fn lognormal(&mut self, sd: f64) -> f64 {
        exp_det(sd * self.normal())
    }

    /// Gamma(shape, scale 1) for shape ≥ 1 (Marsaglia & Tsang 2000).
    fn gamma(&mut self, shape: f64) -> f64 {
        assert!(shape >= 1.0, "invariant: gamma shape {shape} is at least 1");
        let d = shape - 1.0 / 3.0;
        let c = 1.0 / (9.0 * d).sqrt();
        loop {
            let x = self.normal();
            let t = 1.0 + c * x;
            if t <= 0.0 {
                continue;
            }
            let v = t * t * t;
            let u = self.uniform();
            let x2 = x * x;
            if u < 1.0 - 0.0331 * x2 * x2 || ln_det(u) < 0.5 * x2 + d * (1.0 - v + ln_det(v)) {
                return d * v;
            }
        }
    }

    /// Poisson(mean) as a sum of Poisson pieces of mean ≤ 16, each drawn by
    /// multiplying uniforms (Knuth); exact, and cheap at the means used here.
    fn poisson(&mut self, mean: f64) -> u64 {
        let mut left = mean;
        let mut n = 0;
        while left > 0.0 {
            let piece = left.min(16.0);
            left -= piece;
            let limit = exp_det(-piece);
            let mut p = self.uniform();
            while p > limit {
                n += 1;
                p *= self.uniform();
            }
        }
        n
    }

    /// Gamma–Poisson (negative binomial) count with the given mean and shape k
    /// (variance mean + mean²/k).
    fn overdispersed(&mut self, mean: f64, k: f64) -> u64 {
        let g = self.gamma(k) / k;
        self.poisson(mean * g)
    }
}

// ---------------------------------------------------------------------------
// The scenario
// ---------------------------------------------------------------------------

#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Reach {
    Upper,
    Middle,
    Lower,
}

impl Reach {
    fn label(self) -> &'static str {
        match self {
            Reach::Upper => "upper",
            Reach::Middle => "middle",
            Reach::Lower => "lower",
        }
    }
}

#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Habitat {
    Riffle,
    Pool,
}

#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Season {
    Spring,
    Autumn,
}

/// Pollution tolerance class of a recorded taxon.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Tolerance {
    /// Mayflies, stoneflies, caddis.
    Sensitive,
    Neutral,
    /// Midges, worms, leeches, hoglouse, snails.
    Tolerant,
}

/// Higher taxa and family-level records: (name, rank, parent).
const HIERARCHY: &[(&str, &str, &str)] = &[
    ("Arthropoda", "phylum", ""),
    ("Annelida", "phylum", ""),
    ("Mollusca", "phylum", ""),
    ("Insecta", "class", "Arthropoda"),
    ("Malacostraca", "class", "Arthropoda"),
    ("Clitellata", "class", "Annelida"),
    ("Gastropoda", "class", "Mollusca"),
    ("Bivalvia", "class", "Mollusca"),
    ("Ephemeroptera", "order", "Insecta"),
    ("Plecoptera", "order", "Insecta"),
    ("Trichoptera", "order", "Insecta"),
    ("Coleoptera", "order", "Insecta"),
    ("Diptera", "order", "Insecta"),
    ("Odonata", "order", "Insecta"),
    ("Megaloptera", "order", "Insecta"),
    ("Hemiptera", "order", "Insecta"),
    ("Amphipoda", "order", "Malacostraca"),
    ("Isopoda", "order", "Malacostraca"),
    ("Haplotaxida", "order", "Clitellata"),
    ("Lumbriculida", "order", "Clitellata"),
    ("Arhynchobdellida", "order", "Clitellata"),
    ("Rhynchobdellida", "order", "Clitellata"),
    ("Littorinimorpha", "order", "Gastropoda"),
    ("Hygrophila", "order", "Gastropoda"),
    ("Sphaeriida", "order", "Bivalvia"),
    ("Baetidae", "family", "Ephemeroptera"),
    ("Heptageniidae", "family", "Ephemeroptera"),
    ("Ephemerellidae", "family", "Ephemeroptera"),
    ("Ephemeridae", "family", "Ephemeroptera"),
    ("Leptophlebiidae", "family", "Ephemeroptera"),
    ("Leuctridae", "family", "Plecoptera"),
    ("Nemouridae", "family", "Plecoptera"),
    ("Perlodidae", "family", "Plecoptera"),
    ("Perlidae", "family", "Plecoptera"),
    ("Hydropsychidae", "family", "Trichoptera"),
    ("Rhyacophilidae", "family", "Trichoptera"),
    ("Polycentropodidae", "family", "Trichoptera"),
    ("Sericostomatidae", "family", "Trichoptera"),
    ("Limnephilidae", "family", "Trichoptera"),
    ("Glossosomatidae", "family", "Trichoptera"),
    ("Elmidae", "family", "Coleoptera"),
    ("Hydraenidae", "family", "Coleoptera"),
    ("Simuliidae", "family", "Diptera"),
    ("Chironomidae", "family", "Diptera"),
    ("Limoniidae", "family", "Diptera"),
    ("Ceratopogonidae", "family", "Diptera"),
    ("Calopterygidae", "family", "Odonata"),
    ("Sialidae", "family", "Megaloptera"),
    ("Corixidae", "family", "Hemiptera"),
    ("Gammaridae", "family", "Amphipoda"),
    ("Asellidae", "family", "Isopoda"),
    ("Naididae", "family", "Haplotaxida"),
    ("Lumbriculidae", "family", "Lumbriculida"),
    ("Erpobdellidae", "family", "Arhynchobdellida"),
    ("Glossiphoniidae", "family", "Rhynchobdellida"),
    ("Tateidae", "family", "Littorinimorpha"),
    ("Lymnaeidae", "family", "Hygrophila"),
    ("Physidae", "family", "Hygrophila"),
    ("Planorbidae", "family", "Hygrophila"),
    ("Sphaeriidae", "family", "Sphaeriida"),
];

/// A taxon counted in the field.
struct Recorded {
    name: &'static str,
    /// Family of a genus; empty for a family-level record (listed in [`HIERARCHY`]).
    family: &'static str,
    tolerance: Tolerance,
    /// Relative weight in riffles.
    riffle: f64,
    /// Relative weight in pools.
    pool: f64,
    /// Natural log of the spring : autumn density ratio.
    spring: f64,
}

const fn rec(
    name: &'static str,
    family: &'static str,
    tolerance: Tolerance,
    riffle: f64,
    pool: f64,
    spring: f64,
) -> Recorded {
    Recorded {
        name,
        family,
        tolerance,
        riffle,
        pool,
        spring,
    }
}

use Tolerance::{Neutral as N, Sensitive as S, Tolerant as T};

/// The 40 recorded taxa with their invented habitat weights and seasonality.
const RECORDED: &[Recorded] = &[
    rec("Baetis", "Baetidae", S, 14.0, 4.0, 0.2),
    rec("Ecdyonurus", "Heptageniidae", S, 5.0, 1.5, 0.0),
    rec("Rhithrogena", "Heptageniidae", S, 4.0, 0.5, 0.3),
    rec("Serratella", "Ephemerellidae", S, 4.0, 1.5, -0.3),
    rec("Ephemera", "Ephemeridae", S, 0.8, 3.0, 0.0),
    rec("Habrophlebia", "Leptophlebiidae", S, 1.0, 3.0, 0.2),
    rec("Leuctra", "Leuctridae", S, 6.0, 2.0, -0.2),
    rec("Nemoura", "Nemouridae", S, 2.0, 2.5, 0.5),
    rec("Amphinemura", "Nemouridae", S, 3.0, 1.0, 0.5),
    rec("Isoperla", "Perlodidae", S, 2.0, 0.5, 0.4),
    rec("Perla", "Perlidae", S, 1.0, 0.2, 0.0),
    rec("Hydropsyche", "Hydropsychidae", S, 8.0, 1.0, -0.2),
    rec("Rhyacophila", "Rhyacophilidae", S, 3.0, 0.4, 0.0),
    rec("Polycentropus", "Polycentropodidae", S, 1.0, 2.0, 0.0),
    rec("Sericostoma", "Sericostomatidae", S, 1.5, 1.5, 0.0),
    rec("Limnephilidae", "", S, 1.0, 3.0, 0.2),
    rec("Glossosoma", "Glossosomatidae", S, 2.5, 0.3, 0.2),
    rec("Elmis", "Elmidae", N, 8.0, 2.0, 0.0),
    rec("Limnius", "Elmidae", N, 4.0, 1.0, 0.0),
    rec("Hydraena", "Hydraenidae", N, 1.5, 0.5, 0.0),
    rec("Simuliidae", "", N, 7.0, 0.5, 0.4),
    rec("Limoniidae", "", N, 1.5, 1.5, 0.0),
    rec("Ceratopogonidae", "", N, 0.5, 2.0, -0.2),
    rec("Calopteryx", "Calopterygidae", N, 0.3, 1.2, -0.3),
    rec("Sialis", "Sialidae", N, 0.2, 1.5, 0.0),
    rec("Corixidae", "", N, 0.1, 2.5, -0.4),
    rec("Gammarus", "Gammaridae", N, 10.0, 8.0, 0.0),
    rec("Pisidium", "Sphaeriidae", N, 1.0, 4.0, 0.0),
    rec("Ancylus", "Planorbidae", N, 2.0, 0.5, 0.0),
    rec("Chironomidae", "", T, 12.0, 20.0, -0.2),
    rec("Naididae", "", T, 3.0, 8.0, 0.0),
    rec("Lumbriculidae", "", T, 1.0, 3.0, 0.0),
    rec("Erpobdella", "Erpobdellidae", T, 0.8, 2.0, 0.0),
    rec("Glossiphonia", "Glossiphoniidae", T, 0.5, 1.5, 0.0),
    rec("Helobdella", "Glossiphoniidae", T, 0.3, 1.2, 0.0),
    rec("Asellus", "Asellidae", T, 1.0, 6.0, 0.0),
    rec("Potamopyrgus", "Tateidae", T, 2.0, 4.0, 0.0),
    rec("Radix", "Lymnaeidae", T, 0.5, 2.0, -0.2),
    rec("Physa", "Physidae", T, 0.2, 1.5, -0.2),
    rec("Planorbis", "Planorbidae", T, 0.1, 1.5, -0.2),
];

struct SiteDef {
    name: &'static str,
    reach: Reach,
    habitat: Habitat,
}

const SITE_DEFS: [SiteDef; 18] = {
    use Habitat::{Pool as P, Riffle as R};
    use Reach::{Lower as L, Middle as M, Upper as U};
    const fn s(name: &'static str, reach: Reach, habitat: Habitat) -> SiteDef {
        SiteDef {
            name,
            reach,
            habitat,
        }
    }
    [
        s("Wren Head", U, R),
        s("Hollin Gill", U, P),
        s("Cragfoot Ford", U, R),
        s("Ravens Ghyll", U, P),
        s("Mossy Force", U, R),
        s("Blackmere Bridge", U, P),
        s("Hartley Mill", M, R),
        s("Kettle Pool", M, P),
        s("Ashby Weir", M, R),
        s("Fernside Meadow", M, P),
        s("Orchard Bend", M, R),
        s("Wrenford Bridge", M, P),
        s("Low Marsh", L, R),
        s("Pennick Sluice", L, P),
        s("Eelstock Reach", L, R),
        s("Saltings Farm", L, P),
        s("Heron Carr", L, R),
        s("Wrenmouth Quay", L, P),
    ]
};

/// Sites also sampled by quadrat (one riffle per reach), spring only, two replicates.
const QUADRAT_SITES: [usize; 3] = [0, 6, 12];

/// Kick-sample density (individuals per minute) at an average site.
fn kick_density(habitat: Habitat, reach: Reach) -> f64 {
    let base = match habitat {
        Habitat::Riffle => 130.0,
        Habitat::Pool => 90.0,
    };
    base * reach_density(reach)
}

/// Quadrat density (individuals per m²) at an average riffle.
const QUADRAT_DENSITY: f64 = 700.0;

fn reach_density(reach: Reach) -> f64 {
    match reach {
        Reach::Upper => 0.9,
        Reach::Middle => 1.0,
        Reach::Lower => 1.15,
    }
}

/// Longitudinal preference of each tolerance class (upper, middle, lower).
fn reach_preference(tolerance: Tolerance, reach: Reach) -> f64 {
    match (tolerance, reach) {
        (Tolerance::Sensitive, Reach::Upper) => 1.4,
        (Tolerance::Sensitive, Reach::Lower) => 0.75,
        (Tolerance::Tolerant, Reach::Upper) => 0.6,
        (Tolerance::Tolerant, Reach::Lower) => 1.4,
        _ => 1.0,
    }
}

/// Standard deviations (natural-log scale) of the random effects.
const SD_SITE_TOTAL: f64 = 0.2;
const SD_SITE_TAXON: f64 = 0.35;
const SD_YEAR: f64 = 0.06;
const SD_YEAR_TAXON: f64 = 0.06;
const SD_EVENT: f64 = 0.15;
/// Shape k of the gamma–Poisson counts (variance = mean + mean²/k).
const NB_SHAPE: f64 = 2.5;

struct Site {
    code: String,
    def: &'static SiteDef,
    latitude: f64,
    longitude: f64,
    /// Expected individuals per unit effort (minute of kick sampling) of each
    /// recorded taxon at this site, before season, year and story effects.
    density: Vec<f64>,
}

/// Generate the demo files with the fixed [`SEED`]: the committed files.
/// Deterministic: every call returns the same text.
pub fn generate() -> DemoFiles {
    generate_with_seed(SEED)
}

/// Generate the scenario with another seed: the same stories and parameters,
/// another realisation of the noise (for simulation tests with known truth).
pub fn generate_with_seed(seed: u64) -> DemoFiles {
    let mut rng = Stream::new(seed);

    // Static effects, drawn in a fixed order.
    let sites: Vec<Site> = SITE_DEFS
        .iter()
        .enumerate()
        .map(|(i, def)| {
            let t = i as f64 / 17.0;
            let latitude = 52.418 + 0.24 * t * (1.0 - t) + 0.008 * (rng.uniform() - 0.5);
            let longitude = -3.712 + 0.43 * t + 0.008 * (rng.uniform() - 0.5);
            let mut density: Vec<f64> = RECORDED
                .iter()
                .map(|r| {
                    let w = match def.habitat {
                        Habitat::Riffle => r.riffle,
                        Habitat::Pool => r.pool,
                    };
                    w * reach_preference(r.tolerance, def.reach) * rng.lognormal(SD_SITE_TAXON)
                })
                .collect();
            let sum: f64 = density.iter().sum();
            let total = kick_density(def.habitat, def.reach) * rng.lognormal(SD_SITE_TOTAL);
            for d in &mut density {
                *d *= total / sum;
            }
            Site {
                code: format!("S{:02}", i + 1),
                def,
                latitude,
                longitude,
                density,
            }
        })
        .collect();
    let years: Vec<i32> = (FIRST_YEAR..=LAST_YEAR).collect();
    let year_effect: Vec<f64> = years.iter().map(|_| rng.lognormal(SD_YEAR)).collect();
    let year_taxon_effect: Vec<Vec<f64>> = years
        .iter()
        .map(|_| {
            RECORDED
                .iter()
                .map(|_| rng.lognormal(SD_YEAR_TAXON))
                .collect()
        })
        .collect();

    let mut records = String::from("site,date,protocol,effort,taxon,count,replicate\n");
    for (yi, &year) in years.iter().enumerate() {
        for season in [Season::Spring, Season::Autumn] {
            let (month, first_day) = match season {
                Season::Spring => (4, 8),
                Season::Autumn => (9, 10),
            };
            let start = NaiveDate::from_ymd_opt(year, month, first_day)
                .expect("invariant: campaign start is a valid date")
                + Days::new(rng.below(21));
            for (si, site) in sites.iter().enumerate() {
                let reach_index = si / 6;
                let offset = 7 * reach_index as u64 + (si % 6) as u64 / 2 + rng.below(2);
                let date = start + Days::new(offset);
                let in_gap = site.code == GAP_SITE && (GAP_YEARS.0..=GAP_YEARS.1).contains(&year);
                if in_gap {
                    continue;
                }
                let expected = expected_density(site, season, year);
                let expected: Vec<f64> = expected
                    .iter()
                    .zip(&year_taxon_effect[yi])
                    .map(|(d, e)| d * e * year_effect[yi])
                    .collect();

                // Kick sample.
                let effort = kick_effort(&mut rng, site.def.reach, year);
                let empty = site.code == EMPTY_EVENT_SITE
                    && year == EMPTY_EVENT_YEAR
                    && season == Season::Autumn;
                let event_effect = rng.lognormal(SD_EVENT);
                let counts: Vec<u64> = expected
                    .iter()
                    .map(|d| {
                        let c = rng.overdispersed(d * f64::from(effort) * event_effect, NB_SHAPE);
                        if empty { 0 } else { c }
                    })
                    .collect();
                write_event(
                    &mut records,
                    &site.code,
                    date,
                    "kick",
                    &effort.to_string(),
                    &counts,
                    1,
                );

                // Quadrat samples: spring, two replicates.
                if season == Season::Spring && QUADRAT_SITES.contains(&si) {
                    for replicate in 1..=2 {
                        let area = if rng.uniform() < 0.75 { 0.5 } else { 1.0 };
                        let event_effect = rng.lognormal(SD_EVENT);
                        let per_m2 = QUADRAT_DENSITY / kick_density(Habitat::Riffle, Reach::Middle);
                        let counts: Vec<u64> = expected
                            .iter()
                            .map(|d| rng.overdispersed(d * per_m2 * area * event_effect, NB_SHAPE))
                            .collect();
                        let area_text = if area == 0.5 { "0.5" } else { "1" };
                        write_event(
                            &mut records,
                            &site.code,
                            date,
                            "quadrat",
                            area_text,
                            &counts,
                            replicate,
                        );
                    }
                }
            }
        }
    }

    DemoFiles {
        sites: sites_csv(&sites),
        protocols: PROTOCOLS.to_string(),
        taxa: taxa_csv(),
        records,
        attributes: attributes_csv(),
    }
}

/// `attributes.csv` (story 7): the lower-reach pools' `status` history.
fn attributes_csv() -> String {
    format!(
        "site,key,value,from\nS14,status,degraded,\nS14,status,restored,{RESTORED_FROM}\n\
         S16,status,degraded,\nS18,status,degraded,\n"
    )
}

/// Expected individuals per unit effort of each taxon at `site` in one season
/// and year, with the reach stories applied (before the shared year effects).
fn expected_density(site: &Site, season: Season, year: i32) -> Vec<f64> {
    let half = match season {
        Season::Spring => 0.5,
        Season::Autumn => -0.5,
    };
    let mut d: Vec<f64> = site
        .density
        .iter()
        .zip(RECORDED)
        .map(|(d, r)| d * exp_det(half * r.spring))
        .collect();
    match site.def.reach {
        // Story 1: every taxon scaled by the same factor (pure size change).
        Reach::Lower if year >= LOWER_DECLINE_FROM => {
            for x in &mut d {
                *x *= LOWER_DECLINE_FACTOR;
            }
        }
        // Story 2: sensitive taxa down, tolerant taxa up by the factor that
        // keeps this site's expected total for the season unchanged.
        Reach::Middle if year >= MIDDLE_SHIFT_FROM => {
            let class_sum = |t: Tolerance, d: &[f64]| -> f64 {
                d.iter()
                    .zip(RECORDED)
                    .filter(|(_, r)| r.tolerance == t)
                    .map(|(x, _)| x)
                    .sum()
            };
            let sensitive = class_sum(Tolerance::Sensitive, &d);
            let tolerant = class_sum(Tolerance::Tolerant, &d);
            let raise = 1.0 + (1.0 - MIDDLE_SENSITIVE_FACTOR) * sensitive / tolerant;
            for (x, r) in d.iter_mut().zip(RECORDED) {
                match r.tolerance {
                    Tolerance::Sensitive => *x *= MIDDLE_SENSITIVE_FACTOR,
                    Tolerance::Tolerant => *x *= raise,
                    Tolerance::Neutral => {}
                }
            }
        }
        _ => {}
    }
    d
}

/// Kick effort in minutes: usually 3, sometimes 2 or 4; the upper reach mostly
/// 4 from [`UPPER_LONGER_KICKS_FROM`] (story 6).
fn kick_effort(rng: &mut Stream, reach: Reach, year: i32) -> u32 {
    let u = rng.uniform();
    if reach == Reach::Upper && year >= UPPER_LONGER_KICKS_FROM {
        if u < 0.7 { 4 } else { 3 }
    } else if u < 0.15 {
        2
    } else if u < 0.85 {
        3
    } else {
        4
    }
}

fn write_event(
    out: &mut String,
    site: &str,
    date: NaiveDate,
    protocol: &str,
    effort: &str,
    counts: &[u64],
    replicate: u32,
) {
    let year = date.year();
    let date = format!("{:04}-{:02}-{:02}", date.year(), date.month(), date.day());
    let mut any = false;
    for (c, r) in counts.iter().zip(RECORDED) {
        if *c == 0 {
            continue;
        }
        any = true;
        let name = if r.name == NEW_NAME && year < RENAME_FROM {
            OLD_NAME
        } else {
            r.name
        };
        out.push_str(&format!(
            "{site},{date},{protocol},{effort},{name},{c},{replicate}\n"
        ));
    }
    if !any {
        out.push_str(&format!(
            "{site},{date},{protocol},{effort},,,{replicate}\n"
        ));
    }
}

const PROTOCOLS: &str = "code,description,effort_unit\n\
kick,Kick sample with a 1 mm mesh hand net (effort is the time spent kicking),minutes\n\
quadrat,Cylinder sampler over a measured area of riffle bed,m2\n";

fn sites_csv(sites: &[Site]) -> String {
    let mut out = String::from("code,name,latitude,longitude,reach,habitat\n");
    for s in sites {
        let habitat = match s.def.habitat {
            Habitat::Riffle => "riffle",
            Habitat::Pool => "pool",
        };
        out.push_str(&format!(
            "{},{},{:.5},{:.5},{},{}\n",
            s.code,
            s.def.name,
            s.latitude,
            s.longitude,
            s.def.reach.label(),
            habitat
        ));
    }
    out
}

fn taxa_csv() -> String {
    let mut out = String::from("name,rank,parent,accepted\n");
    for (name, rank, parent) in HIERARCHY {
        out.push_str(&format!("{name},{rank},{parent},\n"));
    }
    for r in RECORDED.iter().filter(|r| !r.family.is_empty()) {
        out.push_str(&format!("{},genus,{},\n", r.name, r.family));
    }
    out.push_str(&format!("{OLD_NAME},genus,,{NEW_NAME}\n"));
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn own_exp_and_ln_agree_with_std() {
        // The platform's libm is the outside reference here (within a few ulps).
        for &x in &[
            -50.0, -16.0, -3.3, -0.5, 0.0, 1e-9, 0.25, 1.0, 2.5, 10.0, 300.0,
        ] {
            let (a, b) = (exp_det(x), f64::exp(x));
            assert!(
                (a - b).abs() <= 4.0 * f64::EPSILON * b,
                "exp({x}): {a} vs {b}"
            );
        }
        for &x in &[
            1e-300, 1e-16, 0.001, 0.5, 0.999, 1.0, 1.5, 2.0, 7.0, 1e10, 1e300,
        ] {
            let (a, b) = (ln_det(x), f64::ln(x));
            assert!(
                (a - b).abs() <= 4.0 * f64::EPSILON * b.abs().max(1.0),
                "ln({x}): {a} vs {b}"
            );
        }
    }

    #[test]
    fn samplers_have_their_textbook_moments() {
        // Simulation with known truth: n = 20 000 draws; tolerances are about
        // five standard errors of the sample mean / variance.
        let mut s = Stream::new(7);
        let n = 20_000;
        let mean_var = |xs: &[f64]| {
            let m = xs.iter().sum::<f64>() / xs.len() as f64;
            let v = xs.iter().map(|x| (x - m) * (x - m)).sum::<f64>() / (xs.len() - 1) as f64;
            (m, v)
        };
        // Normal(0, 1): se(mean) = 0.0071, se(var) = sqrt(2/n) = 0.01.
        let z: Vec<f64> = (0..n).map(|_| s.normal()).collect();
        let (m, v) = mean_var(&z);
        assert!(m.abs() < 0.036 && (v - 1.0).abs() < 0.05, "normal {m} {v}");
        // Gamma(2.5, 1): mean 2.5, variance 2.5; se(mean) = 0.011.
        let g: Vec<f64> = (0..n).map(|_| s.gamma(2.5)).collect();
        let (m, v) = mean_var(&g);
        assert!(
            (m - 2.5).abs() < 0.056 && (v - 2.5).abs() < 0.25,
            "gamma {m} {v}"
        );
        // Poisson(37.5) (three pieces): mean = variance = 37.5; se(mean) = 0.043.
        let p: Vec<f64> = (0..n).map(|_| s.poisson(37.5) as f64).collect();
        let (m, v) = mean_var(&p);
        assert!(
            (m - 37.5).abs() < 0.22 && (v - 37.5).abs() < 2.5,
            "poisson {m} {v}"
        );
        // Gamma–Poisson(mean 10, k 2.5): variance 10 + 100/2.5 = 50; se(mean) = 0.05.
        let q: Vec<f64> = (0..n).map(|_| s.overdispersed(10.0, 2.5) as f64).collect();
        let (m, v) = mean_var(&q);
        assert!(
            (m - 10.0).abs() < 0.25 && (v - 50.0).abs() < 6.0,
            "nb {m} {v}"
        );
    }

    #[test]
    fn generation_is_deterministic() {
        assert_eq!(generate(), generate());
    }
}
