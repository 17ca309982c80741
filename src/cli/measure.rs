//! `septum measure`: carry out a procedure through real audio I/O (or the
//! simulated front end) and write a run folder.

use anyhow::{bail, Context, Result};
use septum::analysis::AnalysisConfig;
use septum::audio::jack::{open_rig, JackPorts};
use septum::audio::sim::{SimFaults, SimRig};
use septum::audio::stream::{CpalRig, RigConfig};
use septum::audio::Rig;
use septum::model::synth::write_expected_files;
use septum::model::{stream, CommonDriveSection, FrontEndModel, Resolved, DEFAULT_MODEL_TOML};
use septum::procedure::session::{self, Operator, Options, SessionError};
use septum::procedure::{limit_for_record, seconds, Plan};
use serde_json::{json, Map};
use std::io::{BufRead, IsTerminal, Write};
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicBool, Ordering};

/// Measure channel separation through an audio interface: for each
/// aggressor, tell the operator what to patch (or run the switch command),
/// play a tone, record every input, check the capture, and keep a run
/// folder that `septum analyze` reads. Interrupted runs continue with
/// --resume.
#[derive(Debug, clap::Args)]
pub struct Args {
    /// The procedure file (TOML): front end, inputs, stimulus, record length.
    #[arg(long)]
    pub procedure: PathBuf,
    /// The run folder to write (new or empty; with --resume, the one to continue).
    #[arg(long)]
    pub out: PathBuf,
    /// Audio host: jack, alsa … (see `septum devices`; default: jack when
    /// JACK_DEFAULT_SERVER is set, else the system's default host).
    #[arg(long)]
    pub host: Option<String>,
    /// Device name or id (see `septum devices`) for input and output; not for JACK.
    #[arg(long)]
    pub device: Option<String>,
    /// JACK: ports the stimulus output feeds, comma-separated (e.g. system:playback_1).
    #[arg(long, value_delimiter = ',')]
    pub jack_output_ports: Vec<String>,
    /// JACK: ports captured as inputs 1, 2, …, comma-separated (e.g. system:capture_1,…).
    #[arg(long, value_delimiter = ',')]
    pub jack_input_ports: Vec<String>,
    /// Shell command run before each step of an unattended rig, with
    /// SEPTUM_STEP, SEPTUM_AGGRESSOR (0: idle), SEPTUM_FREQUENCY_HZ,
    /// SEPTUM_LEVEL_DBFS, SEPTUM_OUTPUT and SEPTUM_CAPTURE in its environment.
    #[arg(long)]
    pub switch_command: Option<String>,
    /// Do not wait for the operator: the wiring is fixed or switched by other means.
    #[arg(long)]
    pub yes: bool,
    /// Continue the interrupted run in --out.
    #[arg(long)]
    pub resume: bool,
    /// Measure the simulated front end (the built-in model, or MODEL) in
    /// process instead of an audio interface.
    #[arg(long, num_args = 0..=1, require_equals = true, default_missing_value = "")]
    pub simulated: Option<String>,
    /// Simulated front end: clock speed relative to real time.
    #[arg(long, default_value_t = 32.0, hide = true)]
    pub sim_speed: f64,
    /// Simulated front end: patch input B when asked for input A (A:B).
    #[arg(long, hide = true)]
    pub sim_miswire: Option<String>,
    /// Simulated front end: report an xrun during capture number N.
    #[arg(long, hide = true)]
    pub sim_xrun_in_capture: Option<u64>,
    /// Simulated front end: fail as an unplugged device during capture number N.
    #[arg(long, hide = true)]
    pub sim_fail_in_capture: Option<u64>,
    /// Simulated front end: ask the operator to confirm each patch.
    #[arg(long, hide = true)]
    pub sim_ask: bool,
    /// Print only the cautions, the instructions the operator must act on, and errors.
    #[arg(long, short)]
    pub quiet: bool,
}

static CANCEL: AtomicBool = AtomicBool::new(false);
static IN_PROMPT: AtomicBool = AtomicBool::new(false);

fn install_ctrlc() {
    let _ = ctrlc::set_handler(|| {
        if IN_PROMPT.load(Ordering::Relaxed) || CANCEL.load(Ordering::Relaxed) {
            // Waiting for the operator: nothing is in flight, run.json is whole.
            eprintln!("\nseptum: error: stopped by the operator; finished captures are kept, continue with --resume");
            std::process::exit(1);
        }
        CANCEL.store(true, Ordering::Relaxed);
    });
}

/// The terminal at the bench.
struct Console {
    wait: bool,
    quiet: bool,
}

impl Operator for Console {
    fn tell(&mut self, text: &str) {
        // Quiet runs keep the cautions; instructions that need the operator
        // come through `confirm`, which always prints.
        if !self.quiet || text.starts_with("Before") {
            println!("{text}");
        }
    }

    fn confirm(&mut self, text: &str) -> Result<(), SessionError> {
        println!("{text}");
        if !self.wait {
            return Ok(());
        }
        print!("  Press Enter when done (q then Enter to stop): ");
        let _ = std::io::stdout().flush();
        IN_PROMPT.store(true, Ordering::Relaxed);
        let mut line = String::new();
        let n = std::io::stdin().lock().read_line(&mut line);
        IN_PROMPT.store(false, Ordering::Relaxed);
        match n {
            Ok(0) | Err(_) => Err(SessionError::Setup(
                "the input closed while waiting for the operator; finished captures are kept, continue with --resume".into(),
            )),
            Ok(_) if line.trim().eq_ignore_ascii_case("q") => Err(SessionError::Stopped { kept: 0, total: 0 }),
            Ok(_) => Ok(()),
        }
    }
}

/// The model of a simulated run, set to the plan's frequencies, level and record.
pub fn sim_model(plan: &Plan, spec: &str) -> Result<(Resolved, String)> {
    let (model, text) = if spec.is_empty() {
        (
            FrontEndModel::default_scenario(),
            DEFAULT_MODEL_TOML.to_string(),
        )
    } else {
        let p = Path::new(spec);
        (FrontEndModel::load(p)?, std::fs::read_to_string(p)?)
    };
    let fe = &plan.procedure.front_end;
    if model.front_end.channels != fe.inputs || model.front_end.sample_rate_hz != fe.sample_rate_hz
    {
        bail!(
            "the simulated front end has {} inputs at {} Hz, the procedure wants {} at {} Hz",
            model.front_end.channels,
            model.front_end.sample_rate_hz,
            fe.inputs,
            fe.sample_rate_hz
        );
    }
    let mut m = model.clone();
    m.stimulus.frequencies_hz = plan.frequencies_hz.clone();
    m.stimulus.level_dbfs = plan.procedure.stimulus.level_dbfs;
    m.stimulus.record_samples = plan.record_samples;
    m.stimulus.idle_samples = plan.procedure.idle.record_samples;
    if plan.procedure.stimulus.source == septum::procedure::Source::Output {
        // The interface's own output shares the converter's clock.
        m.stimulus.generator_offset_ppm = 0.0;
    }
    m.common_drive = plan
        .procedure
        .common_drive
        .as_ref()
        .map(|c| CommonDriveSection {
            frequencies_hz: c.frequencies_hz.clone(),
            level_dbfs: c.level_dbfs,
            reference_channel: c.reference_input,
        });
    let mut r = m.resolve();
    // The streaming processor samples every input at the same instant (it
    // does not simulate skew), so the expected figures carry none either.
    for c in &mut r.channels {
        c.skew_us = 0.0;
    }
    Ok((r, text))
}

fn parse_pair(s: &str) -> Result<(usize, usize)> {
    let (a, b) = s.split_once(':').context("--sim-miswire takes A:B")?;
    Ok((a.trim().parse()?, b.trim().parse()?))
}

fn open_real(args: &Args, plan: &Plan) -> Result<Box<dyn Rig>> {
    use cpal::traits::{DeviceTrait, HostTrait};
    let fe = &plan.procedure.front_end;
    let st = &plan.procedure.stimulus;
    let host = match &args.host {
        Some(h) => h.to_lowercase(),
        None if std::env::var_os("JACK_DEFAULT_SERVER").is_some() => "jack".into(),
        None => cpal::default_host().id().name().to_lowercase(),
    };
    if host == "jack" {
        let ports = JackPorts {
            stimulus_to: args.jack_output_ports.clone(),
            inputs_from: args.jack_input_ports.clone(),
        };
        if ports.inputs_from.len() != fe.inputs as usize {
            bail!(
                "--jack-input-ports names {} port(s) for the procedure's {} inputs; list one source port per input, in order (see `septum devices`)",
                ports.inputs_from.len(),
                fe.inputs
            );
        }
        if st.source == septum::procedure::Source::Output && ports.stimulus_to.is_empty() {
            bail!("--jack-output-ports is missing: name the port(s) the stimulus output feeds (see `septum devices`)");
        }
        let prefix = format!("septum{}", std::process::id());
        let (rig, _conn) = open_rig(
            &prefix,
            fe.inputs as u16,
            st.output as usize - 1,
            fe.sample_rate_hz,
            &ports,
        )?;
        return Ok(Box::new(rig));
    }
    let id = cpal::available_hosts()
        .into_iter()
        .find(|h| h.name().eq_ignore_ascii_case(&host))
        .with_context(|| format!("--host {host}: not available here (see `septum devices`)"))?;
    let h = cpal::host_from_id(id)?;
    let pick = |input: bool| -> Result<cpal::Device> {
        match &args.device {
            Some(name) => h
                .devices()?
                .find(|d| {
                    d.id()
                        .map(|i| i.to_string() == *name || i.id() == name)
                        .unwrap_or(false)
                        || d.description().map(|x| x.name() == name).unwrap_or(false)
                })
                .with_context(|| format!("--device {name}: no such device on host {host}")),
            None => if input {
                h.default_input_device()
            } else {
                h.default_output_device()
            }
            .with_context(|| format!("host {host} has no default device")),
        }
    };
    let input = pick(true)?;
    let output = match st.source {
        septum::procedure::Source::Output => Some(pick(false)?),
        septum::procedure::Source::Generator => None,
    };
    let label = format!("host {host}, device {}", input);
    Ok(Box::new(CpalRig::open(RigConfig {
        input,
        output,
        inputs: fe.inputs as u16,
        outputs: st.output as u16,
        sample_rate: fe.sample_rate_hz,
        speed: 1.0,
        label,
    })?))
}

/// Everything `measure` does after parsing; `demo` calls it too.
pub fn measure(args: &Args, plan: &Plan) -> Result<usize> {
    let interactive = std::io::stdin().is_terminal();
    let sim = args.simulated.clone();
    let self_patching = sim.is_some() && !args.sim_ask;
    if !self_patching && args.switch_command.is_none() && !args.yes && !interactive {
        bail!("the input is not a terminal, so septum cannot wait for the operator; pass --yes when the wiring is fixed, or --switch-command for a switched rig");
    }
    if args.sim_speed <= 0.0 || args.sim_speed > 1000.0 {
        bail!("--sim-speed {} must lie between 0 and 1000", args.sim_speed);
    }
    let st = &plan.procedure.stimulus;
    let fs = plan.procedure.front_end.sample_rate_hz;
    if !args.quiet {
        if let Some(t) = &plan.procedure.title {
            println!("{t}");
        }
        println!(
            "{} capture(s): {} input(s) driven at {} frequency(ies), record {} samples ({:.2} s) per capture",
            plan.steps.len(),
            plan.steps.iter().filter(|s| s.drive.is_some()).count() / plan.frequencies_hz.len().max(1),
            plan.frequencies_hz.len(),
            plan.record_samples,
            seconds(plan.record_samples, fs)
        );
        if let Some(c) = &plan.procedure.common_drive {
            println!(
                "  including {} common-drive capture(s) at {:.1} dBFS on every input, reference input {}",
                c.frequencies_hz.len(),
                c.level_dbfs,
                c.reference_input
            );
        }
        if let Some(floor) = st.expected_floor_dbfs {
            println!(
                "  detection limit about {:.1} dBFS over a floor of {floor:.1} dBFS",
                limit_for_record(plan.record_samples, floor)
            );
        }
    }
    let mut extra = Map::new();
    let mut expected: Option<(Resolved, String)> = None;
    let mut rig: Box<dyn Rig> = match &sim {
        Some(spec) => {
            let (r, text) = sim_model(plan, spec)?;
            let faults = SimFaults {
                miswire: args.sim_miswire.as_deref().map(parse_pair).transpose()?,
                xrun_in_capture: args.sim_xrun_in_capture,
                fail_in_capture: args.sim_fail_in_capture,
                ask_operator: args.sim_ask,
            };
            let rig = SimRig::open(&r, args.sim_speed, faults, r.model.seed)?;
            extra.insert(
                "simulated".into(),
                json!({ "model": "model/model.toml", "seed": r.model.seed,
                        "expected_pairs": "model/expected-pairs.csv",
                        "expected_channels": "model/expected-channels.csv",
                        "expected_common": "model/expected-common.csv" }),
            );
            expected = Some((r, text));
            Box::new(rig)
        }
        None => open_real(args, plan)?,
    };
    install_ctrlc();
    let opt = Options {
        run_dir: args.out.clone(),
        resume: args.resume,
        switch_command: args.switch_command.clone(),
        analysis: AnalysisConfig::default(),
        pre_roll_s: 0.15,
        post_roll_s: 0.25,
        extra,
    };
    let mut console = Console {
        wait: !args.yes && args.switch_command.is_none(),
        quiet: args.quiet,
    };
    let outcome = session::run(plan, rig.as_mut(), &mut console, &opt, &CANCEL);
    drop(rig);
    let outcome = outcome?;
    if let Some((r, text)) = expected {
        let dir = args.out.join("model");
        std::fs::create_dir_all(&dir)?;
        write_expected_files(&r, &text, &dir, &stream::expected_pairs(&r))?;
    }
    if !args.quiet {
        println!(
            "measured {} capture(s) ({} kept from before, {} retried) into {}",
            outcome.recorded,
            outcome.resumed,
            outcome.retries,
            args.out.display()
        );
        println!(
            "analyse with: septum analyze {} --out RESULTS",
            args.out.display()
        );
    }
    Ok(outcome.recorded + outcome.resumed)
}

pub fn run(args: Args) -> Result<u8> {
    // Validate everything before a device is opened or a tone played.
    let plan = Plan::load(&args.procedure)?;
    measure(&args, &plan)?;
    Ok(super::exit::OK)
}
