//! `tally completions SHELL` and `tally manual`: shell completions and a man
//! page generated from the clap definitions themselves, so they cannot drift
//! from the commands (clap_complete, clap_mangen).

use std::io::Write;

use clap::CommandFactory;
use clap_complete::Shell;

use super::{Cli, LineFilter};

/// `tally completions` flags.
#[derive(Debug, Clone, clap::Args)]
pub struct CompletionsArgs {
    /// The shell to complete for.
    #[arg(value_enum)]
    pub shell: Shell,
}

/// Write the completion script of `shell` for every command and flag.
///
/// # Errors
/// I/O errors.
pub fn completions(args: &CompletionsArgs, out: &mut dyn Write) -> anyhow::Result<()> {
    let mut cmd = Cli::command();
    // Into memory first: the generator panics on a failed write (a closed pipe),
    // while `out` reports it as an error the caller treats as success.
    let mut script = Vec::new();
    clap_complete::generate(args.shell, &mut cmd, "tally", &mut script);
    out.write_all(&script)?;
    Ok(())
}

/// Write the man page of `tally` (roff, section 1), with every command and its
/// flags as subsections.
///
/// # Errors
/// I/O errors.
pub fn manual(out: &mut dyn Write) -> anyhow::Result<()> {
    let cmd = Cli::command();
    let man = clap_mangen::Man::new(cmd.clone());
    man.render_title(out)?;
    man.render_name_section(out)?;
    man.render_synopsis_section(out)?;
    man.render_description_section(out)?;
    man.render_options_section(out)?;
    for sub in cmd.get_subcommands().filter(|s| !s.is_hide_set()) {
        let name = sub.get_name();
        writeln!(out, ".SH \"TALLY {}\"", name.to_uppercase())?;
        let sub = sub.clone().bin_name(format!("tally {name}"));
        let page = clap_mangen::Man::new(sub);
        // The command's section headings (`.SH`) become subsections (`.SS`), so
        // that every command sits under its own heading in one page.
        let mut sub_out =
            LineFilter::new(&mut *out, |line: &str| match line.strip_prefix(".SH ") {
                Some(rest) => format!(".SS {rest}"),
                None => line.to_string(),
            });
        page.render_synopsis_section(&mut sub_out)?;
        page.render_description_section(&mut sub_out)?;
        page.render_options_section(&mut sub_out)?;
        sub_out.flush()?;
    }
    man.render_version_section(out)?;
    Ok(())
}
