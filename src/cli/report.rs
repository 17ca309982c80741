//! `septum report`: one self-contained HTML file from a results folder,
//! judged against limits, claims and/or a baseline when given.

use super::check::Against;
use anyhow::{Context, Result};
use septum::report::{render, utc_date, ReportInput};
use septum::run::results::write_file_atomic;
use septum::run::ResultsFolder;
use septum::verdict::{self, Inputs, Verdict};
use std::path::{Path, PathBuf};

/// Write an HTML report of a results folder: the job, the front end and its
/// channels, the operator cautions, leakage heat maps, separation against
/// frequency, noise floors, spectra, verdicts and warnings. One file with
/// inline CSS and SVG; it opens offline and prints on A4.
///
/// With --limits, --claims or --baseline the exit code tells the verdict
/// (0 pass, 3 fail, 4 inconclusive); without, it is 0.
#[derive(Debug, clap::Args)]
pub struct Args {
    /// The results folder (pairs.csv, channels.csv, summary.json, spectra).
    pub results_dir: PathBuf,
    /// The HTML file to write; an existing file is replaced only with --force.
    #[arg(long)]
    pub out: PathBuf,
    /// Replace an existing report (atomically).
    #[arg(long)]
    pub force: bool,
    #[command(flatten)]
    pub against: Against,
    /// Print nothing but errors.
    #[arg(long, short)]
    pub quiet: bool,
}

/// Today's date for the report, UTC.
fn today() -> String {
    let secs = std::time::SystemTime::now()
        .duration_since(std::time::UNIX_EPOCH)
        .map_or(0, |d| d.as_secs() as i64);
    format!("{} (UTC)", utc_date(secs))
}

/// Refuse to overwrite `out` unless `force`; call before any work is done.
pub fn check_target(out: &Path, force: bool) -> Result<()> {
    if out.is_dir() {
        anyhow::bail!(
            "{}: is a folder; give a file name for the report",
            out.display()
        );
    }
    if out.exists() && !force {
        anyhow::bail!(
            "{}: exists; choose another name or pass --force to replace it",
            out.display()
        );
    }
    Ok(())
}

/// Judge (when `inputs` is given), render and write the report atomically.
pub fn write_report(
    results: &ResultsFolder,
    inputs: Option<&Inputs>,
    out: &Path,
) -> Result<Option<Verdict>> {
    let v = match inputs {
        Some(i) => Some(verdict::evaluate(results, i)?),
        None => None,
    };
    let limits = inputs.and_then(|i| i.limits.as_ref()).map(|(_, l)| l);
    let html = render(&ReportInput {
        results,
        verdict: v.as_ref(),
        limits,
        made: today(),
    })?;
    if let Some(parent) = out.parent().filter(|p| !p.as_os_str().is_empty()) {
        std::fs::create_dir_all(parent).with_context(|| parent.display().to_string())?;
    }
    write_file_atomic(out, html.as_bytes())?;
    Ok(v)
}

pub fn run(args: Args) -> Result<u8> {
    check_target(&args.out, args.force)?;
    let results = ResultsFolder::load(&args.results_dir)?;
    let inputs = if args.against.any() {
        Some(args.against.load()?)
    } else {
        None
    };
    let v = write_report(&results, inputs.as_ref(), &args.out)?;
    if !args.quiet {
        println!("report: {}", args.out.display());
        if let Some(v) = &v {
            println!(
                "verdict: {} (exit code {})",
                v.outcome.word(),
                super::exit::for_outcome(v.outcome)
            );
        }
    }
    Ok(v.map_or(super::exit::OK, |v| super::exit::for_outcome(v.outcome)))
}
