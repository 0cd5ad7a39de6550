//! `tally report`: the analyses of a selection (`workflow::report`), stored
//! in one transaction, written as one self-contained HTML file
//! (`report::html`).
//!
//! With `--by`: the store summary, a correspondence analysis, the totals, the
//! size and shape comparison (`tally compare`) and the five-way partition
//! (`tally partition --compare-distances`); with `--split-by`: the trends
//! (`tally trend`). The report lists the equivalent command line and the
//! stored run of each part.

use std::io::Write;
use std::path::PathBuf;

use anyhow::Context;

use super::common::{DesignArgs, FileRunArgs, refuse_output_path, write_new_file};
use super::common::{Periods, parse_periods};
use super::selection::SelectionArgs;
use crate::report::{html, input};
use crate::store::Store;
use crate::workflow::report::{self, Spec};
use crate::workflow::{Silent, runs};

/// Arguments of `tally report`.
#[derive(Debug, Clone, clap::Args)]
#[command(group(clap::ArgGroup::new("grouping").required(true).multiple(true).args(["by", "split_by"])))]
pub struct Args {
    /// Which events, and what one row is.
    #[command(flatten)]
    pub selection: SelectionArgs,
    /// Compare the groups of this field (`period` with `--periods`).
    #[arg(long, value_name = "FIELD")]
    pub by: Option<String>,
    /// Follow each group of this field across the years.
    #[arg(long, value_name = "FIELD")]
    pub split_by: Option<String>,
    /// Year ranges defining the field `period`, e.g. 2008..2015,2016..2025.
    #[arg(long, value_name = "A..B,C..D", value_parser = parse_periods)]
    pub periods: Option<Periods>,
    /// How rows move in the tests of the comparison and the partition.
    #[command(flatten)]
    pub design: DesignArgs,
    /// The HTML file to write.
    #[arg(long, value_name = "FILE.html")]
    pub out: PathBuf,
    /// Replace an existing file.
    #[arg(long)]
    pub force: bool,
    /// Permutations, seed, storage of the runs made for the report.
    #[command(flatten)]
    pub run: FileRunArgs,
}

impl Args {
    /// The spec these arguments ask for, with `seed`.
    pub fn spec(&self, seed: u64) -> Spec {
        Spec {
            saved: self.selection.selection.clone(),
            selection: self.selection.explicit(),
            by: self.by.clone(),
            split_by: self.split_by.clone(),
            periods: self.periods.clone(),
            permute: self.design.permute,
            strata: self.design.strata.clone(),
            permutations: self.run.permutations,
            seed,
        }
    }
}

/// Run `tally report`.
///
/// # Errors
/// Selection, field and analysis errors of the parts; an existing output file
/// without `--force`; SQLite and I/O errors.
pub fn run(args: Args, store: &mut Store, out: &mut dyn Write) -> anyhow::Result<()> {
    refuse_output_path(&args.out, store.path(), args.force)?;
    let spec = args.spec(args.run.seed());
    let r = report::run(store, &spec, &Silent).context("the analyses of the report")?;
    let ids = if args.run.no_store {
        Vec::new()
    } else {
        runs::save(store, &r.to_save()?).context("storing the runs of the report")?
    };
    let page = html::render(&input::report_input(&r, &ids));
    write_new_file(&args.out, &page, store.path(), args.force)?;
    writeln!(out, "report written to {}", args.out.display())?;
    Ok(())
}
