//! `septum simulate`: write a run folder from a front-end model.

use super::progress;
use anyhow::Result;
use septum::model::{synth::write_run, FrontEndModel, DEFAULT_MODEL_TOML};
use septum::run::results::Staging;
use std::path::{Path, PathBuf};

/// Synthesise a run folder from a front-end model (gains, noise,
/// quantisation, jitter, hum, coupling), with the model's exact expected
/// separations and floors under model/.
#[derive(Debug, clap::Args)]
pub struct Args {
    /// The run folder to write; must be new or empty unless --force.
    #[arg(long, required_unless_present = "print_model")]
    pub out: Option<PathBuf>,
    /// Front-end model file (TOML); default: the built-in scenario.
    #[arg(long)]
    pub model: Option<PathBuf>,
    /// Replace a non-empty folder.
    #[arg(long)]
    pub force: bool,
    /// Print the built-in model file (a commented starting point) and exit.
    #[arg(long)]
    pub print_model: bool,
    /// Print nothing but errors.
    #[arg(long, short)]
    pub quiet: bool,
}

/// Load the model (or the built-in one) and write the run; returns the
/// manifest's capture count.
pub fn simulate_into(model: Option<&Path>, out: &Path, force: bool, quiet: bool) -> Result<usize> {
    let (model, text) = match model {
        Some(p) => (FrontEndModel::load(p)?, std::fs::read_to_string(p)?),
        None => (
            FrontEndModel::default_scenario(),
            DEFAULT_MODEL_TOML.to_string(),
        ),
    };
    let resolved = model.resolve();
    let staging = Staging::begin(out, None, force)?;
    let captures = resolved.frequencies_hz.len() * resolved.channels.len()
        + usize::from(model.stimulus.idle_samples > 0)
        + model
            .common_drive
            .as_ref()
            .map_or(0, |c| c.frequencies_hz.len());
    let pb = progress::bar(captures as u64, "simulating");
    if quiet {
        pb.set_draw_target(indicatif::ProgressDrawTarget::hidden());
    }
    let manifest = write_run(&resolved, &text, staging.path(), &|| pb.inc(1))?;
    pb.finish_and_clear();
    staging.commit()?;
    Ok(manifest.captures.len())
}

pub fn run(args: Args) -> Result<u8> {
    if args.print_model {
        print!("{DEFAULT_MODEL_TOML}");
        return Ok(super::exit::OK);
    }
    let out = args.out.expect("clap requires --out");
    let n = simulate_into(args.model.as_deref(), &out, args.force, args.quiet)?;
    if !args.quiet {
        println!("wrote {n} captures and run.json to {}", out.display());
        println!(
            "the model and its expected figures are in {}",
            out.join("model").display()
        );
    }
    Ok(super::exit::OK)
}
