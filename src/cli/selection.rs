//! The SELECTION flags shared by every analysis command, their resolution
//! against saved selections, and the one helper that turns a selection into a
//! count matrix (printing the assembly notes on stderr).

use anyhow::Context;
use clap::ValueEnum;

use crate::matrix::Unit;
use crate::store::{Selection, Store};
use crate::workflow::{self, Prepared};

/// What one row of the matrix is (command-line spelling of [`Unit`]).
#[derive(Debug, Clone, Copy, PartialEq, Eq, ValueEnum)]
pub enum UnitArg {
    /// One sampling event per row.
    Event,
    /// Events pooled per site and (season) year.
    SiteYear,
    /// Events pooled per site and season.
    SiteSeason,
    /// Events pooled per site.
    Site,
}

impl From<UnitArg> for Unit {
    fn from(u: UnitArg) -> Self {
        match u {
            UnitArg::Event => Unit::Event,
            UnitArg::SiteYear => Unit::SiteYear,
            UnitArg::SiteSeason => Unit::SiteSeason,
            UnitArg::Site => Unit::Site,
        }
    }
}

/// SELECTION flags: which events, and what one row of the matrix is.
/// Flatten into a command with `#[command(flatten)]`.
#[derive(Debug, Clone, Default, clap::Args)]
#[command(next_help_heading = "Selection")]
pub struct SelectionArgs {
    /// Only this site (repeatable, or comma-separated).
    #[arg(long = "site", value_name = "CODE", value_delimiter = ',')]
    pub sites: Vec<String>,
    /// Only sites with this attribute value (repeatable; the same key
    /// repeated means either value, different keys must all match).
    #[arg(long = "site-where", value_name = "KEY=VALUE", value_parser = parse_key_value)]
    pub site_where: Vec<(String, String)>,
    /// First date, inclusive (YYYY-MM-DD).
    #[arg(long, value_name = "DATE")]
    pub from: Option<String>,
    /// Last date, inclusive (YYYY-MM-DD).
    #[arg(long, value_name = "DATE")]
    pub to: Option<String>,
    /// Season years A..B, inclusive (a single year A also works).
    #[arg(long, value_name = "A..B", value_parser = crate::workflow::design::parse_years)]
    pub years: Option<(i32, i32)>,
    /// Season window: months A..B, inclusive; 11..2 wraps the year end and a
    /// January sample belongs to the season that began in November.
    #[arg(long, value_name = "A..B", value_parser = crate::workflow::design::parse_months)]
    pub months: Option<(u32, u32)>,
    /// Only events of this protocol.
    #[arg(long, value_name = "CODE")]
    pub protocol: Option<String>,
    /// Roll taxa up the parent chain to this rank.
    #[arg(long, value_name = "RANK")]
    pub rank: Option<String>,
    /// Drop taxa present in fewer than N rows.
    #[arg(long, value_name = "N")]
    pub min_occurrences: Option<usize>,
    /// With --rank, leave out the taxa recorded above the rank (kept as
    /// "Name (unidentified)" columns otherwise).
    #[arg(long)]
    pub identified_only: bool,
    /// What one row of the matrix is [default: event; `trend` and, with --every,
    /// `diversity` pool per site and period].
    #[arg(long, value_enum)]
    pub unit: Option<UnitArg>,
    /// Divide pooled counts by pooled effort.
    #[arg(long)]
    pub per_effort: bool,
    /// Keep rows with no organisms (dropped with a warning otherwise).
    #[arg(long)]
    pub keep_empty: bool,
    /// Start from a saved selection; flags given here replace its values.
    #[arg(long, value_name = "NAME")]
    pub selection: Option<String>,
}

pub(crate) fn parse_key_value(s: &str) -> Result<(String, String), String> {
    match s.split_once('=') {
        Some((k, v)) if !k.trim().is_empty() => Ok((k.trim().to_string(), v.trim().to_string())),
        _ => Err(format!("expected KEY=VALUE, got '{s}'")),
    }
}

impl SelectionArgs {
    /// The flags given on the command line, without any saved selection.
    pub fn explicit(&self) -> Selection {
        Selection {
            sites: self.sites.clone(),
            site_where: self.site_where.clone(),
            from: self.from.clone(),
            to: self.to.clone(),
            years: self.years,
            months: self.months,
            protocol: self.protocol.clone(),
            rank: self.rank.clone(),
            min_occurrences: self.min_occurrences,
            identified_only: self.identified_only,
            unit: self.unit.map(Unit::from),
            per_effort: self.per_effort,
            keep_empty: self.keep_empty,
        }
    }

    /// The effective selection: the saved one named by `--selection` (if
    /// any) with the explicit flags applied over it ([`Selection::merge`]),
    /// validated, with the unit filled in.
    ///
    /// # Errors
    /// An unknown saved selection; an invalid flag value.
    pub fn resolve(&self, store: &Store) -> anyhow::Result<Selection> {
        workflow::resolve(store, self.selection.as_deref(), &self.explicit()).with_context(|| {
            match &self.selection {
                Some(name) => format!("resolving the selection (saved selection '{name}')"),
                None => "resolving the selection".to_string(),
            }
        })
    }
}

/// Resolve the SELECTION flags and assemble their matrix, printing the
/// assembly notes on stderr.
///
/// # Errors
/// As [`SelectionArgs::resolve`] and [`workflow::prepare`].
pub fn prepare(store: &Store, args: &SelectionArgs) -> anyhow::Result<Prepared> {
    let sel = args.resolve(store)?;
    let prepared = workflow::prepare(store, &sel)?;
    for n in &prepared.notes {
        super::note(n);
    }
    Ok(prepared)
}

/// A selection written back as command-line flags (for listings): [`Selection::to_flags`].
pub fn flags_of(sel: &Selection) -> String {
    sel.to_flags()
}
