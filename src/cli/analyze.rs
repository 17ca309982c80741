//! `septum analyze`: replay analysis of a run folder into a results folder.

use super::{check, progress, summary};
use anyhow::Result;
use septum::analysis::{analyze_run, export::write_results, AnalysisConfig};
use septum::run::results::Staging;
use std::path::{Path, PathBuf};

/// Analyse a run folder (captures recorded, simulated or received) and write
/// pairs.csv, channels.csv, leakage-<f>Hz.csv and summary.json.
#[derive(Debug, clap::Args)]
pub struct Args {
    /// The run folder (holds run.json and the captures).
    pub run_dir: PathBuf,
    /// The results folder to write; must be new or empty unless --force.
    #[arg(long)]
    pub out: PathBuf,
    /// Replace a non-empty results folder (atomically: old results stay if this fails).
    #[arg(long)]
    pub force: bool,
    /// Highest harmonic fitted and removed together with the tone.
    #[arg(long, default_value_t = 5, value_parser = clap::value_parser!(u32).range(1..=20))]
    pub harmonics: u32,
    /// Detection threshold in standard deviations of the noise next to the tone.
    #[arg(long, default_value_t = 4.3)]
    pub detection_factor: f64,
    /// Print nothing but errors.
    #[arg(long, short)]
    pub quiet: bool,
    /// Judge the results right away (writes verdict.json and verdict.csv into
    /// the results folder; the exit code tells the verdict: 0, 3 or 4).
    #[command(flatten)]
    pub against: check::Against,
    /// Also write an HTML report of the results (and the verdict) to this file.
    #[arg(long, value_name = "FILE")]
    pub report: Option<PathBuf>,
}

/// Analyse `run_dir` into `out`; returns the results for callers that go on.
pub fn analyze_into(
    run_dir: &Path,
    out: &Path,
    force: bool,
    config: &AnalysisConfig,
    quiet: bool,
) -> Result<septum::analysis::RunResults> {
    analyze_then(run_dir, out, force, config, quiet, &mut |_| Ok(()))
}

/// The same, calling `more` with the staging folder once the results are
/// written into it and before it is moved into place, so whatever `more`
/// adds arrives together with them.
pub fn analyze_then(
    run_dir: &Path,
    out: &Path,
    force: bool,
    config: &AnalysisConfig,
    quiet: bool,
    more: &mut dyn FnMut(&Path) -> Result<()>,
) -> Result<septum::analysis::RunResults> {
    if !(config.detection_factor > 1.0 && config.detection_factor < 20.0) {
        anyhow::bail!(
            "--detection-factor {} must lie between 1 and 20",
            config.detection_factor
        );
    }
    // Read the manifest first: a bad run folder is reported before anything is written.
    let manifest = septum::run::Manifest::load(run_dir)?;
    let staging = Staging::begin(out, Some(run_dir), force)?;
    let pb = progress::bar(
        (manifest.captures.len() + manifest.common_drive.len()) as u64,
        "analysing",
    );
    if quiet {
        pb.set_draw_target(indicatif::ProgressDrawTarget::hidden());
    }
    let results = analyze_run(run_dir, config, &|| pb.inc(1))?;
    pb.finish_and_clear();
    write_results(&results, staging.path())?;
    more(staging.path())?;
    staging.commit()?;
    Ok(results)
}

pub fn run(args: Args) -> Result<u8> {
    let config = AnalysisConfig {
        max_harmonic: args.harmonics as usize,
        detection_factor: args.detection_factor,
        ..AnalysisConfig::default()
    };
    if let Some(r) = &args.report {
        super::report::check_target(r, args.force)?;
    }
    // Read the limits, claims and baseline before anything is written.
    let inputs = if args.against.any() {
        Some(args.against.load()?)
    } else {
        None
    };
    let mut verdict = None;
    let results = analyze_then(
        &args.run_dir,
        &args.out,
        args.force,
        &config,
        args.quiet,
        &mut |staging| {
            if let Some(inputs) = &inputs {
                // Judge what was written, read back like any results folder.
                let mut folder = septum::run::ResultsFolder::load(staging)?;
                folder.dir = args.out.clone();
                let v = septum::verdict::evaluate(&folder, inputs)?;
                septum::verdict::export::write(&v, staging)?;
                verdict = Some((folder, v));
            }
            Ok(())
        },
    )?;
    if !args.quiet {
        summary::print(&results, &args.run_dir, &args.out);
    }
    if let Some(path) = &args.report {
        let folder = septum::run::ResultsFolder::load(&args.out)?;
        super::report::write_report(&folder, inputs.as_ref(), path)?;
        if !args.quiet {
            println!("report: {}", path.display());
        }
    }
    let Some((folder, v)) = verdict else {
        return Ok(super::exit::OK);
    };
    if !args.quiet {
        println!();
        super::verdict_tables::print(&v, &folder);
    }
    Ok(super::exit::for_outcome(v.outcome))
}
