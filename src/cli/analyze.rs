//! `septum analyze`: replay analysis of a run folder into a results folder.

use super::{progress, summary};
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
}

/// Analyse `run_dir` into `out`; returns the results for callers that go on.
pub fn analyze_into(
    run_dir: &Path,
    out: &Path,
    force: bool,
    config: &AnalysisConfig,
    quiet: bool,
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
    staging.commit()?;
    Ok(results)
}

pub fn run(args: Args) -> Result<u8> {
    let config = AnalysisConfig {
        max_harmonic: args.harmonics as usize,
        detection_factor: args.detection_factor,
        ..AnalysisConfig::default()
    };
    let results = analyze_into(&args.run_dir, &args.out, args.force, &config, args.quiet)?;
    if !args.quiet {
        summary::print(&results, &args.run_dir, &args.out);
    }
    Ok(super::exit::OK)
}
