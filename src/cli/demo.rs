//! `septum demo`: measure the simulated front end of the built-in scenario
//! with the built-in commissioning procedure (the whole measuring path,
//! through cpal's custom host), analyse the run, print the summary and how
//! closely the measurement recovered the model, and write the report.

use super::{analyze::analyze_into, measure, summary};
use anyhow::Result;
use septum::analysis::AnalysisConfig;
use septum::model::stream::expected_pairs;
use septum::model::truth::expected_channels;
use septum::procedure::Plan;
use std::path::PathBuf;

/// The built-in commissioning procedure.
pub const COMMISSIONING: &str = include_str!("../../procedures/commissioning.toml");

/// Measure the simulated 8-channel front end of the built-in scenario with
/// the commissioning procedure, analyse the run, print the summary and write
/// report.html (judged against the example limits and claims), in one
/// command. Nothing is played on or recorded from real hardware.
#[derive(Debug, clap::Args)]
pub struct Args {
    /// Folder for the demo's run and results (default: ./septum-demo, or
    /// ./septum-demo-2 … if that exists; an existing folder is never reused).
    #[arg(long)]
    pub out: Option<PathBuf>,
}

fn fresh_folder() -> PathBuf {
    (1..)
        .map(|i| {
            PathBuf::from(if i == 1 {
                "septum-demo".into()
            } else {
                format!("septum-demo-{i}")
            })
        })
        .find(|p| !p.exists())
        .expect("an unused name")
}

pub fn run(args: Args) -> Result<u8> {
    let base = args.out.unwrap_or_else(fresh_folder);
    if base.exists() && std::fs::read_dir(&base)?.next().is_some() {
        anyhow::bail!(
            "{}: is not empty; the demo writes only into a new or empty folder",
            base.display()
        );
    }
    let run_dir = base.join("run");
    let results_dir = base.join("results");
    println!("septum demo: measuring the simulated front end (in process, faster than real time); no hardware is used");
    let t0 = std::time::Instant::now();
    let plan = Plan::parse(COMMISSIONING, "built-in commissioning procedure")?;
    let args = measure::Args {
        procedure: PathBuf::from("procedures/commissioning.toml"),
        out: run_dir.clone(),
        host: None,
        device: None,
        jack_output_ports: Vec::new(),
        jack_input_ports: Vec::new(),
        switch_command: None,
        yes: true,
        resume: false,
        simulated: Some(String::new()),
        sim_speed: 32.0,
        sim_miswire: None,
        sim_xrun_in_capture: None,
        sim_fail_in_capture: None,
        sim_ask: false,
        quiet: true,
    };
    measure::measure(&args, &plan)?;
    let t1 = t0.elapsed();
    let results = analyze_into(
        &run_dir,
        &results_dir,
        false,
        &AnalysisConfig::default(),
        false,
    )?;
    let t2 = t0.elapsed() - t1;
    summary::print(&results, &run_dir, &results_dir);
    let (model, _) = measure::sim_model(&plan, "")?;
    let expected = expected_pairs(&model);
    let (mut worst, mut n) = (0.0f64, 0);
    for e in expected
        .iter()
        .filter(|e| e.victim_dbfs > e.detection_limit_dbfs + 20.0)
    {
        if let Some(p) = results.pair(e.frequency_hz, e.aggressor, e.victim) {
            worst = worst.max((p.separation_db - e.separation_db).abs());
            n += 1;
        }
    }
    let floors = expected_channels(&model);
    let floor_dev = results
        .floors
        .iter()
        .zip(&floors)
        .map(|(m, e)| (m.noise_floor_dbfs - e.noise_floor_dbfs).abs())
        .fold(0.0, f64::max);
    println!();
    println!("Against the model's exact figures:");
    println!(
        "  {n} pairs at least 20 dB above the detection limit: largest deviation {worst:.3} dB"
    );
    println!("  noise floors: largest deviation {floor_dev:.3} dB");
    println!(
        "  measured in {:.2} s, analysed in {:.2} s",
        t1.as_secs_f64(),
        t2.as_secs_f64()
    );
    let report = base.join("report.html");
    let folder = septum::run::ResultsFolder::load(&results_dir)?;
    let v = super::report::write_report(&folder, Some(&example_inputs()), &report)?;
    println!();
    println!(
        "report: {} (judged against the example limits and claims of procedures/: {})",
        report.display(),
        v.map_or("no verdict", |v| v.outcome.word())
    );
    Ok(super::exit::OK)
}

/// The example limits and claims shipped in procedures/, built in.
fn example_inputs() -> septum::verdict::Inputs {
    use septum::verdict::{claims::Claims, limits::Limits};
    let lp = PathBuf::from("procedures/limits-commissioning.toml (built in)");
    let cp = PathBuf::from("procedures/claims-example.toml (built in)");
    septum::verdict::Inputs {
        limits: Some((
            lp.clone(),
            Limits::parse(
                include_str!("../../procedures/limits-commissioning.toml"),
                &lp,
            )
            .expect("the example limits are valid"),
        )),
        claims: Some((
            cp.clone(),
            Claims::parse(include_str!("../../procedures/claims-example.toml"), &cp)
                .expect("the example claims are valid"),
        )),
        baseline: None,
    }
}
