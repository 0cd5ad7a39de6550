//! `tally runs verify ID`: replay a stored run in-process
//! ([`crate::workflow::runs::verify`]: its typed spec on its stored selection as
//! the store holds it now) and print what was and was not reproduced
//! ([`crate::report::text::verify`]). Exit code 1 when the run is not reproduced.

use std::io::Write;

use anyhow::bail;

use super::FormatArg;
use crate::report::format::write_json;
use crate::report::text::Render;
use crate::report::text::verify::not_reproduced;
use crate::store::Store;
use crate::workflow::runs;

/// Run `tally runs verify ID`: print the report; an error (exit code 1) when the
/// fingerprint changed or a number differs.
///
/// # Errors
/// As [`runs::verify`] (an unknown run, a run stored without a typed spec, a
/// selection that no longer assembles, refusals of the replay); a run that is
/// not reproduced.
pub fn run(id: i64, format: FormatArg, store: &Store, out: &mut dyn Write) -> anyhow::Result<()> {
    let rep = runs::verify(store, id)?;
    match format {
        FormatArg::Json => write_json(out, &serde_json::to_value(&rep)?)?,
        FormatArg::Csv => rep.csv(out)?,
        FormatArg::Table => rep.table(out)?,
    }
    if !rep.identical {
        out.flush()?;
        bail!("run {id} is not reproduced: {}", not_reproduced(&rep));
    }
    Ok(())
}
