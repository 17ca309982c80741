//! Carrying out a plan on a rig: operator instructions or the switch
//! command before each step, one capture per step checked at once (tone on
//! the expected input and nowhere else, or on every input for a common
//! drive; no clipping, no lost block), bounded
//! retries, and a run folder whose `run.json` is rewritten atomically after
//! every finished capture, so an interruption loses nothing finished and
//! `resume` continues where it stopped.

use super::{Plan, Source, Step};
use crate::analysis::steady::steady_range;
use crate::analysis::AnalysisConfig;
use crate::audio::{AudioError, CaptureRequest, Rig};
use crate::dsp::fit::{estimate_frequency, fit_tones};
use crate::dsp::level::{amplitude_to_dbfs, rms_to_dbfs};
use crate::run::manifest::CommonDriveEntry;
use crate::run::{read_capture, CaptureEntry, ChannelEntry, Drive, Manifest, RunError, RUN_FORMAT};
use serde_json::{json, Map, Value};
use std::collections::BTreeMap;
use std::path::{Path, PathBuf};
use std::process::Command;
use std::sync::atomic::{AtomicBool, Ordering};
use thiserror::Error;

/// What the operator must know before any signal is driven.
pub const CAUTIONS: &str = "\
Before the first tone:
  - Sensor excitation off: switch off IEPE (constant-current) supply on every input
    that a generator or an interface output will feed.
  - Rated range, low start: keep every input inside its rated range; septum starts each
    tone with a fade-in and never plays above -0.5 dBFS.
  - Ears and speakers: mute any output also patched to monitors or headphones.
  - Mains equipment: follow your laboratory's procedures and local electrical-safety
    codes; leave anything beyond them to licensed people.";

/// Errors of a measuring session.
#[derive(Debug, Error)]
pub enum SessionError {
    /// The run folder could not be read or written.
    #[error(transparent)]
    Run(#[from] RunError),
    /// The audio device failed.
    #[error("{source}; {kept} finished capture(s) kept, continue with --resume once it is fixed")]
    Audio {
        /// What the device did.
        source: AudioError,
        /// Captures finished and recorded.
        kept: usize,
    },
    /// The rig, the run folder or the options do not fit the procedure.
    #[error("{0}")]
    Setup(String),
    /// A step kept failing its checks.
    #[error("step {step} ({file}) failed {attempts} time(s), last: {reason}; {kept} finished capture(s) kept, fix the cause and continue with --resume")]
    StepFailed {
        /// Step number.
        step: usize,
        /// Its capture file.
        file: String,
        /// Attempts made.
        attempts: u32,
        /// The last failure.
        reason: String,
        /// Captures finished and recorded.
        kept: usize,
    },
    /// Interrupted by the operator.
    #[error("stopped by the operator; {kept} of {total} capture(s) finished and kept, continue with --resume")]
    Stopped {
        /// Captures finished.
        kept: usize,
        /// Captures planned.
        total: usize,
    },
}

/// The person (or the stand-in) at the bench.
pub trait Operator {
    /// Show a message.
    fn tell(&mut self, text: &str);
    /// Show an instruction and wait until it is done; `Err(Stopped)` to stop.
    fn confirm(&mut self, text: &str) -> Result<(), SessionError>;
}

/// How a session runs.
#[derive(Debug, Clone)]
pub struct Options {
    /// The run folder.
    pub run_dir: PathBuf,
    /// Continue an interrupted run in `run_dir`.
    pub resume: bool,
    /// Shell command run before each step (unattended rigs).
    pub switch_command: Option<String>,
    /// Settings of the per-capture checks.
    pub analysis: AnalysisConfig,
    /// Silence captured before the stimulus starts, seconds.
    pub pre_roll_s: f64,
    /// Capture kept running after the stimulus ends, seconds.
    pub post_roll_s: f64,
    /// Further keys for run.json (e.g. `simulated`).
    pub extra: Map<String, Value>,
}

/// What a session achieved.
#[derive(Debug, Clone, PartialEq)]
pub struct Outcome {
    /// Captures recorded by this session.
    pub recorded: usize,
    /// Captures already there (resume).
    pub resumed: usize,
    /// Retries made.
    pub retries: usize,
}

/// The run folder of a session.
struct Folder {
    dir: PathBuf,
    done: BTreeMap<usize, CaptureEntry>,
    /// Finished common-drive steps (listed under `common_drive`).
    common: BTreeMap<usize, CommonDriveEntry>,
    created: String,
    extra: Map<String, Value>,
}

fn io(path: &Path, e: std::io::Error) -> SessionError {
    SessionError::Run(RunError::Io {
        path: path.to_path_buf(),
        source: e,
    })
}

fn now() -> String {
    humantime::format_rfc3339_seconds(std::time::SystemTime::now()).to_string()
}

impl Folder {
    /// Create a new run folder, or reopen one to resume.
    fn open(plan: &Plan, opt: &Options) -> Result<Self, SessionError> {
        let dir = opt.run_dir.clone();
        let stored = dir.join("procedure.toml");
        let mut folder = Folder {
            dir: dir.clone(),
            done: BTreeMap::new(),
            common: BTreeMap::new(),
            created: now(),
            extra: opt.extra.clone(),
        };
        if !opt.resume {
            if dir.exists()
                && std::fs::read_dir(&dir)
                    .map_err(|e| io(&dir, e))?
                    .next()
                    .is_some()
            {
                return Err(SessionError::Setup(format!(
                    "{}: is not empty; measure into a new folder, or pass --resume to continue the run there",
                    dir.display()
                )));
            }
            std::fs::create_dir_all(dir.join("captures")).map_err(|e| io(&dir, e))?;
            std::fs::write(&stored, &plan.text).map_err(|e| io(&stored, e))?;
            return Ok(folder);
        }
        let text = std::fs::read_to_string(&stored).map_err(|_| {
            SessionError::Setup(format!(
                "{}: no procedure.toml; this is not a run septum measure started, nothing to resume",
                dir.display()
            ))
        })?;
        if text != plan.text {
            return Err(SessionError::Setup(format!(
                "{}: the procedure differs from the one this run started with; resume with the same file",
                stored.display()
            )));
        }
        std::fs::create_dir_all(dir.join("captures")).map_err(|e| io(&dir, e))?;
        // Leftovers of a capture cut short are not captures.
        for e in std::fs::read_dir(dir.join("captures"))
            .map_err(|e| io(&dir, e))?
            .flatten()
        {
            if e.file_name().to_string_lossy().ends_with(".part") {
                let _ = std::fs::remove_file(e.path());
            }
        }
        if dir.join("run.json").exists() {
            let m = Manifest::load(&dir)?;
            if let Some(Value::String(c)) = m.extra.get("created") {
                folder.created = c.clone();
            }
            for entry in m.captures {
                let step = plan.steps.iter().find(|s| s.file == entry.file);
                if let Some(step) = step {
                    if dir.join(&entry.file).is_file() {
                        folder.done.insert(step.index, entry);
                    }
                }
            }
            for entry in m.common_drive {
                let step = plan
                    .steps
                    .iter()
                    .find(|s| s.file == entry.file && s.common.is_some());
                if let Some(step) = step {
                    if dir.join(&entry.file).is_file() {
                        folder.common.insert(step.index, entry);
                    }
                }
            }
        }
        Ok(folder)
    }

    /// Steps finished (captures and common drives).
    fn finished(&self) -> usize {
        self.done.len() + self.common.len()
    }

    /// Whether step `index` is finished.
    fn has(&self, index: usize) -> bool {
        self.done.contains_key(&index) || self.common.contains_key(&index)
    }

    fn manifest(&self, plan: &Plan, rig: &str) -> Manifest {
        let p = &plan.procedure;
        let fe = &p.front_end;
        let mut front_end = Map::new();
        front_end.insert("label".into(), json!(fe.label));
        if let Some(s) = &fe.serial {
            front_end.insert("serial".into(), json!(s));
        }
        if let Some(s) = &fe.notes {
            front_end.insert("notes".into(), json!(s));
        }
        let mut extra = self.extra.clone();
        extra.insert("front_end".into(), Value::Object(front_end));
        extra.insert("created".into(), json!(self.created));
        extra.insert("procedure".into(), json!("procedure.toml"));
        if let Some(l) = &p.limits {
            extra.insert(
                "limits".into(),
                serde_json::to_value(l).unwrap_or(Value::Null),
            );
        }
        extra.insert(
            "measure".into(),
            json!({
                "rig": rig,
                "source": match p.stimulus.source { Source::Output => "output", Source::Generator => "generator" },
                "stimulus_output": p.stimulus.output,
                "record_samples": plan.record_samples,
                "steps_planned": plan.steps.len(),
                "steps_finished": self.finished(),
                "complete": self.finished() == plan.steps.len(),
                "updated": now(),
            }),
        );
        Manifest {
            format: RUN_FORMAT.into(),
            sample_rate_hz: fe.sample_rate_hz,
            channels: (1..=fe.inputs)
                .map(|n| ChannelEntry {
                    number: n,
                    name: Some(plan.input_name(n)),
                    termination: Some(plan.termination(n)),
                    extra: Map::new(),
                })
                .collect(),
            captures: self.done.values().cloned().collect(),
            common_drive: self.common.values().cloned().collect(),
            extra,
        }
    }

    /// Write run.json through a temporary file and a rename.
    fn save(&self, plan: &Plan, rig: &str) -> Result<(), SessionError> {
        let m = self.manifest(plan, rig);
        let tmp = self.dir.join("run.json.tmp");
        let text = serde_json::to_string_pretty(&m).expect("manifest serialises") + "\n";
        {
            use std::io::Write;
            let mut f = std::fs::File::create(&tmp).map_err(|e| io(&tmp, e))?;
            f.write_all(text.as_bytes()).map_err(|e| io(&tmp, e))?;
            f.sync_all().map_err(|e| io(&tmp, e))?;
        }
        let dst = self.dir.join("run.json");
        std::fs::rename(&tmp, &dst).map_err(|e| io(&dst, e))
    }
}

/// Check that the rig fits the procedure, before any sound.
fn check_rig(plan: &Plan, rig: &dyn Rig) -> Result<(), SessionError> {
    let fe = &plan.procedure.front_end;
    let st = &plan.procedure.stimulus;
    if rig.sample_rate() != fe.sample_rate_hz {
        return Err(SessionError::Setup(format!(
            "the rig runs at {} Hz, the procedure's front_end.sample_rate_hz is {}",
            rig.sample_rate(),
            fe.sample_rate_hz
        )));
    }
    if rig.inputs() != fe.inputs as usize {
        return Err(SessionError::Setup(format!(
            "the rig captures {} inputs, the procedure's front_end.inputs is {}",
            rig.inputs(),
            fe.inputs
        )));
    }
    if st.source == Source::Output && rig.outputs() < st.output as usize {
        return Err(SessionError::Setup(format!(
            "the procedure plays on output {}, the rig has {} output(s)",
            st.output,
            rig.outputs()
        )));
    }
    Ok(())
}

/// What the operator must do before `step`.
fn instruction(plan: &Plan, step: &Step) -> String {
    let p = &plan.procedure;
    let n = plan.steps.len();
    let victims = |agg: Option<u32>| -> String {
        let mut by_term: BTreeMap<String, Vec<String>> = BTreeMap::new();
        for i in (1..=p.front_end.inputs).filter(|i| Some(*i) != agg) {
            by_term
                .entry(plan.termination(i))
                .or_default()
                .push(i.to_string());
        }
        by_term
            .iter()
            .map(|(t, ins)| format!("input(s) {}: {t}", ins.join(", ")))
            .collect::<Vec<_>>()
            .join("; ")
    };
    if let (Some(f), Some(c)) = (step.common, &p.common_drive) {
        let source = match p.stimulus.source {
            Source::Output => format!("output {}", p.stimulus.output),
            Source::Generator => format!(
                "the generator, set to {f:.3} Hz at {:.1} dBFS at the inputs,",
                c.level_dbfs
            ),
        };
        return format!(
            "Step {} of {n}: common drive at {f:.3} Hz. Split {source} to every input under test \
             (a passive splitter or a distribution amplifier, equal cable lengths);\n  \
             IEPE supply off on every input; input {} ({}) is the reference.",
            step.index,
            c.reference_input,
            plan.input_name(c.reference_input)
        );
    }
    match step.drive {
        Some((a, f)) => {
            let source = match p.stimulus.source {
                Source::Output => format!("Connect output {} to input {a} ({})", p.stimulus.output, plan.input_name(a)),
                Source::Generator => format!(
                    "Set the generator to {f:.3} Hz at {:.1} dBFS at the input and connect it to input {a} ({})",
                    p.stimulus.level_dbfs,
                    plan.input_name(a)
                ),
            };
            format!(
                "Step {} of {n}: {source}.\n  Terminate every other input ({}); IEPE supply off on input {a}.",
                step.index,
                victims(Some(a))
            )
        }
        None => format!(
            "Step {} of {n}: idle capture. Disconnect the stimulus and terminate every input ({}).",
            step.index,
            victims(None)
        ),
    }
}

fn run_switch(cmd: &str, plan: &Plan, step: &Step, dir: &Path) -> Result<(), String> {
    let (agg, f) = match (step.drive, step.common) {
        (Some((a, f)), _) => (a.to_string(), f),
        (None, Some(f)) => ("all".to_string(), f),
        (None, None) => ("0".to_string(), 0.0),
    };
    let st = &plan.procedure.stimulus;
    let status = Command::new("sh")
        .arg("-c")
        .arg(cmd)
        .env("SEPTUM_STEP", step.index.to_string())
        .env("SEPTUM_STEPS", plan.steps.len().to_string())
        .env("SEPTUM_AGGRESSOR", agg)
        .env("SEPTUM_FREQUENCY_HZ", format!("{f}"))
        .env("SEPTUM_LEVEL_DBFS", format!("{}", plan.level_of(step)))
        .env("SEPTUM_OUTPUT", st.output.to_string())
        .env("SEPTUM_CAPTURE", &step.file)
        .env("SEPTUM_RUN_DIR", dir)
        .stdin(std::process::Stdio::null())
        .status()
        .map_err(|e| format!("switch command could not start: {e}"))?;
    if status.success() {
        Ok(())
    } else {
        Err(format!("switch command exited with {status}"))
    }
}

/// Check a finished capture; returns extra keys for run.json.
fn check(
    plan: &Plan,
    step: &Step,
    path: &Path,
    clipped: &[usize],
    config: &AnalysisConfig,
    nominal: f64,
) -> Result<Map<String, Value>, String> {
    let fe = &plan.procedure.front_end;
    if let Some((i, n)) = clipped.iter().enumerate().find(|(_, n)| **n > 0) {
        return Err(format!(
            "input {} clipped ({n} samples at or beyond full scale); lower the level or the input gain",
            i + 1
        ));
    }
    let cap =
        read_capture(path, fe.inputs as usize, fe.sample_rate_hz).map_err(|e| e.to_string())?;
    let level: Vec<f64> = cap
        .channels
        .iter()
        .map(|x| {
            let m = x.iter().map(|v| f64::from(*v)).sum::<f64>() / x.len() as f64;
            let ms = x.iter().map(|v| (f64::from(*v) - m).powi(2)).sum::<f64>() / x.len() as f64;
            rms_to_dbfs(ms.sqrt())
        })
        .collect();
    let mut order: Vec<usize> = (0..level.len()).collect();
    order.sort_by(|a, b| level[*b].total_cmp(&level[*a]));
    let mut extra = Map::new();
    if let Some(f) = step.common {
        return check_common(plan, &cap.channels, &level, f, config, nominal);
    }
    let Some((agg, f)) = step.drive else {
        let loud = order[0];
        if level[loud] > nominal - 40.0 {
            return Err(format!(
                "a signal of {:.1} dBFS is on input {} during the idle capture; disconnect the stimulus and terminate every input",
                level[loud],
                loud + 1
            ));
        }
        return Ok(extra);
    };
    let loud = order[0];
    if level[loud] < nominal - 20.0 {
        return Err(format!(
            "no tone on any input (loudest: input {} at {:.1} dBFS, {:.1} dBFS expected on input {agg}); check the patch and that the source is not muted",
            loud + 1,
            level[loud],
            nominal
        ));
    }
    if loud + 1 != agg as usize {
        return Err(format!(
            "wrong patch: the tone is on input {} ({:.1} dBFS), not on input {agg} ({:.1} dBFS)",
            loud + 1,
            level[loud],
            level[agg as usize - 1]
        ));
    }
    if let Some(&second) = order.get(1) {
        if level[second] > level[loud] - 30.0 {
            return Err(format!(
                "the tone is on input {} and on input {} ({:.1} dB apart); only the aggressor may be driven",
                loud + 1,
                second + 1,
                level[loud] - level[second]
            ));
        }
    }
    let x = &cap.channels[agg as usize - 1];
    let fs = f64::from(fe.sample_rate_hz);
    let span = steady_range(x, fs, f).map_err(|e| format!("input {agg} at {f} Hz: {e}"))?;
    let est = estimate_frequency(
        &x[span.clone()],
        fs,
        f,
        config.frequency_search,
        config.max_harmonic,
    )
    .map_err(|e| format!("input {agg}: {e}"))?;
    let fit =
        fit_tones(&[&x[span.clone()]], &est.model).map_err(|e| format!("input {agg}: {e}"))?;
    let amplitude = fit[0].fundamental();
    let got = amplitude_to_dbfs(amplitude);
    if got < nominal - 10.0 {
        return Err(format!(
            "the tone on input {agg} is {got:.1} dBFS, more than 10 dB below the nominal {nominal:.1} dBFS"
        ));
    }
    let onset = x
        .iter()
        .position(|v| f64::from(v.abs()) >= 0.5 * amplitude)
        .unwrap_or(0);
    extra.insert("onset_frame".into(), json!(onset));
    extra.insert("steady_frames".into(), json!(span.len()));
    extra.insert("tone_hz".into(), json!(est.freq_hz));
    extra.insert("aggressor_dbfs".into(), json!(got));
    Ok(extra)
}

/// Check a common-drive capture: the tone on every input, none missing
/// (clipping is checked before). `level` is each input's rms over the capture.
fn check_common(
    plan: &Plan,
    channels: &[Vec<f32>],
    level: &[f64],
    f: f64,
    config: &AnalysisConfig,
    nominal: f64,
) -> Result<Map<String, Value>, String> {
    let missing: Vec<String> = level
        .iter()
        .enumerate()
        .filter(|(_, l)| **l < nominal - 20.0)
        .map(|(i, _)| (i + 1).to_string())
        .collect();
    if !missing.is_empty() {
        return Err(format!(
            "common drive: no tone on input(s) {} ({nominal:.1} dBFS expected on every input); check the splitter and its cables",
            missing.join(", ")
        ));
    }
    let fs = f64::from(plan.procedure.front_end.sample_rate_hz);
    let r = plan
        .procedure
        .common_drive
        .as_ref()
        .map_or(1, |c| c.reference_input) as usize
        - 1;
    let x = &channels[r];
    let span = steady_range(x, fs, f).map_err(|e| format!("input {} at {f} Hz: {e}", r + 1))?;
    let est = estimate_frequency(
        &x[span.clone()],
        fs,
        f,
        config.frequency_search,
        config.max_harmonic,
    )
    .map_err(|e| format!("input {}: {e}", r + 1))?;
    let slices: Vec<&[f32]> = channels.iter().map(|c| &c[span.clone()]).collect();
    let fits = fit_tones(&slices, &est.model).map_err(|e| e.to_string())?;
    let got: Vec<f64> = fits
        .iter()
        .map(|fit| amplitude_to_dbfs(fit.fundamental()))
        .collect();
    if let Some((i, g)) = got.iter().enumerate().find(|(_, g)| **g < nominal - 10.0) {
        return Err(format!(
            "common drive: the tone on input {} is {g:.1} dBFS, more than 10 dB below the nominal {nominal:.1} dBFS; check the splitter and its cables",
            i + 1
        ));
    }
    let onset = x
        .iter()
        .position(|v| f64::from(v.abs()) >= 0.5 * fits[r].fundamental())
        .unwrap_or(0);
    let mut extra = Map::new();
    extra.insert("onset_frame".into(), json!(onset));
    extra.insert("steady_frames".into(), json!(span.len()));
    extra.insert("tone_hz".into(), json!(est.freq_hz));
    extra.insert("input_dbfs".into(), json!(got));
    Ok(extra)
}

/// Turn an interruption into `Stopped` with the right counts.
fn stop(e: SessionError, kept: usize, total: usize) -> SessionError {
    match e {
        SessionError::Stopped { .. } => SessionError::Stopped { kept, total },
        SessionError::Audio { source, .. } => SessionError::Audio { source, kept },
        e => e,
    }
}

/// Make one capture into `part` and check it. The outer error stops the
/// session (interrupt, device failure); the inner one is a failed attempt.
#[allow(clippy::too_many_arguments)]
fn capture_and_check(
    plan: &Plan,
    rig: &mut dyn Rig,
    step: &Step,
    part: &Path,
    stimulus: Option<&[f32]>,
    frames: usize,
    nominal: f64,
    opt: &Options,
    cancel: &AtomicBool,
) -> Result<Result<Map<String, Value>, String>, SessionError> {
    let p = &plan.procedure;
    let pre = (opt.pre_roll_s * f64::from(p.front_end.sample_rate_hz)).round() as usize;
    let req = CaptureRequest {
        stimulus,
        output: p.stimulus.output as usize - 1,
        pre_roll: pre,
        frames,
        wav: part.to_path_buf(),
        format: p.front_end.wav,
        clip_level: opt.analysis.clip_level as f32,
    };
    match rig.capture(&req, cancel) {
        Ok(report) => Ok(check(
            plan,
            step,
            part,
            &report.clipped,
            &opt.analysis,
            nominal,
        )),
        Err(AudioError::Interrupted) => {
            let _ = std::fs::remove_file(part);
            Err(SessionError::Stopped { kept: 0, total: 0 })
        }
        Err(AudioError::Lost(m)) => Ok(Err(format!("capture lost data: {m}"))),
        Err(e) => {
            let _ = std::fs::remove_file(part);
            Err(SessionError::Audio { source: e, kept: 0 })
        }
    }
}

/// A session under way: the plan, the rig, the person, the run folder.
struct Session<'a> {
    plan: &'a Plan,
    rig: &'a mut dyn Rig,
    operator: &'a mut dyn Operator,
    opt: &'a Options,
    cancel: &'a AtomicBool,
    folder: Folder,
    desc: String,
    pre: usize,
    post: usize,
    last_patch: Option<Option<u32>>,
}

impl Session<'_> {
    fn total(&self) -> usize {
        self.plan.steps.len()
    }

    /// An interruption with the right counts; other errors as they are.
    fn stopped(&self, e: SessionError) -> SessionError {
        stop(e, self.folder.finished(), self.total())
    }

    /// Set up `step`: the rig itself, the switch command, or a person.
    /// Returns whether the patch changed (or is being redone).
    fn set_up(&mut self, step: &Step, retry: bool) -> Result<bool, SessionError> {
        let p = &self.plan.procedure;
        // Input 0 stands for "every input" (common drive).
        let patch = step.drive.map(|(a, _)| a).or(step.common.map(|_| 0));
        let input = step.drive.map(|(a, _)| a as usize - 1);
        let out_idx = p.stimulus.output as usize - 1;
        let self_set = match (p.stimulus.source, step.drive, step.common) {
            (Source::Output, None, Some(f)) => self
                .rig
                .self_split(Some(out_idx), (f, self.plan.level_of(step))),
            (Source::Generator, None, Some(f)) => {
                self.rig.self_split(None, (f, self.plan.level_of(step)))
            }
            (Source::Generator, Some((_, f)), _) => {
                self.rig.self_generator(input, f, p.stimulus.level_dbfs)
            }
            (Source::Generator, None, None) => self.rig.self_generator(None, 0.0, -200.0),
            (Source::Output, _, _) => self.rig.self_patch(out_idx, input),
        };
        let changed = self.last_patch != Some(patch);
        let text = instruction(self.plan, step);
        if self_set {
            if changed {
                self.operator
                    .tell(&format!("{text}\n  (the simulated rig patches itself)"));
            }
        } else if let Some(cmd) = &self.opt.switch_command {
            self.operator.tell(&text);
            run_switch(cmd, self.plan, step, &self.folder.dir).map_err(SessionError::Setup)?;
        } else if retry || changed || p.stimulus.source == Source::Generator {
            let r = self.operator.confirm(&text);
            r.map_err(|e| self.stopped(e))?;
        }
        self.last_patch = Some(patch);
        Ok(changed || retry)
    }

    /// Record `step` into its part file and check it; after a (re)patch,
    /// a quiet check comes first. The inner error is a failed attempt.
    fn record(
        &mut self,
        step: &Step,
        repatched: bool,
    ) -> Result<Result<Map<String, Value>, String>, SessionError> {
        let (plan, opt) = (self.plan, self.opt);
        let p = &plan.procedure;
        let part = self.folder.dir.join(format!("{}.part", step.file));
        let level = plan.level_of(step);
        let tone = step.drive.map(|(_, f)| f).or(step.common);
        // Start quiet: after every (re)patch, a short tone well below the
        // set level must reach the expected input, and only that one (every
        // input, for a common drive).
        if let (Source::Output, Some(f), true) = (p.stimulus.source, tone, repatched) {
            let quiet = level - super::QUIET_CHECK_DB;
            let probe = plan.quiet_stimulus(f, level);
            let frames = self.pre + probe.len() + self.post;
            let r = capture_and_check(
                plan,
                self.rig,
                step,
                &part,
                Some(&probe),
                frames,
                quiet,
                opt,
                self.cancel,
            );
            let _ = std::fs::remove_file(&part);
            if let Err(why) = r.map_err(|e| self.stopped(e))? {
                return Ok(Err(format!("quiet check at {quiet:.1} dBFS: {why}")));
            }
            let reach = match step.drive {
                Some((a, _)) => format!("input {a} only"),
                None => "every input".to_string(),
            };
            self.operator.tell(&format!(
                "  quiet check at {quiet:.1} dBFS: the tone reaches {reach}"
            ));
        }
        let stim = match (p.stimulus.source, tone) {
            (Source::Output, Some(f)) => Some(plan.stimulus_at(f, level)),
            _ => None,
        };
        let frames = if step.plays() {
            self.pre + plan.stimulus_frames() + self.post
        } else {
            p.idle.record_samples as usize
        };
        let r = capture_and_check(
            plan,
            self.rig,
            step,
            &part,
            stim.as_deref(),
            frames,
            level,
            opt,
            self.cancel,
        );
        let r = r.map_err(|e| self.stopped(e))?;
        if r.is_err() {
            let _ = std::fs::remove_file(&part);
        }
        Ok(r)
    }

    /// Move a checked capture into place and list it in run.json.
    fn keep(
        &mut self,
        step: &Step,
        attempt: u32,
        mut extra: Map<String, Value>,
    ) -> Result<(), SessionError> {
        let part = self.folder.dir.join(format!("{}.part", step.file));
        let dst = self.folder.dir.join(&step.file);
        std::fs::rename(&part, &dst).map_err(|e| io(&dst, e))?;
        extra.insert("attempts".into(), json!(attempt));
        extra.insert("recorded".into(), json!(now()));
        let level_dbfs = self.plan.level_of(step);
        match (step.common, &self.plan.procedure.common_drive) {
            (Some(f), Some(c)) => {
                let entry = CommonDriveEntry {
                    file: step.file.clone(),
                    frequency_hz: f,
                    level_dbfs,
                    reference_channel: c.reference_input,
                    extra,
                };
                self.folder.common.insert(step.index, entry);
            }
            _ => {
                let entry = CaptureEntry {
                    file: step.file.clone(),
                    drive: step.drive.map(|(a, f)| Drive {
                        channel: a,
                        frequency_hz: f,
                        level_dbfs,
                    }),
                    extra,
                };
                self.folder.done.insert(step.index, entry);
            }
        }
        self.folder.save(self.plan, &self.desc)?;
        let (n, total) = (self.folder.finished(), self.total());
        self.operator
            .tell(&format!("  captured {} ({n}/{total})", step.file));
        Ok(())
    }

    /// Carry out one step with bounded retries; returns the retries made.
    fn step(&mut self, step: &Step) -> Result<u32, SessionError> {
        let retries = self.plan.procedure.test.retries;
        let mut attempt = 0u32;
        loop {
            if self.cancel.load(Ordering::Relaxed) {
                return Err(self.stopped(SessionError::Stopped { kept: 0, total: 0 }));
            }
            attempt += 1;
            let repatched = self.set_up(step, attempt > 1)?;
            match self.record(step, repatched)? {
                Ok(extra) => {
                    self.keep(step, attempt, extra)?;
                    return Ok(attempt - 1);
                }
                Err(why) => {
                    self.operator.tell(&format!(
                        "  step {} attempt {attempt} failed: {why}",
                        step.index
                    ));
                    if attempt > retries {
                        return Err(SessionError::StepFailed {
                            step: step.index,
                            file: step.file.clone(),
                            attempts: attempt,
                            reason: why,
                            kept: self.folder.finished(),
                        });
                    }
                }
            }
        }
    }

    /// Say what is about to happen; the cautions before any tone.
    fn announce(&mut self, todo: &[&Step]) {
        let fs = self.plan.procedure.front_end.sample_rate_hz;
        let (resumed, total) = (self.folder.finished(), self.total());
        self.operator.tell(&format!("rig: {}", self.desc));
        if resumed > 0 {
            self.operator.tell(&format!(
                "resuming: {resumed} of {total} capture(s) already finished"
            ));
        }
        let secs: f64 = todo
            .iter()
            .map(|s| {
                if s.plays() {
                    super::seconds(
                        (self.pre + self.plan.stimulus_frames() + self.post) as u64,
                        fs,
                    )
                } else {
                    super::seconds(self.plan.procedure.idle.record_samples, fs)
                }
            })
            .sum();
        self.operator.tell(&format!(
            "{} capture(s) to make: about {secs:.0} s of recording at real time, plus patching",
            todo.len()
        ));
        if todo.iter().any(|s| s.plays()) {
            self.operator.tell(CAUTIONS);
        }
    }
}

/// Carry out `plan` on `rig`. Stops on `cancel`.
pub fn run(
    plan: &Plan,
    rig: &mut dyn Rig,
    operator: &mut dyn Operator,
    opt: &Options,
    cancel: &AtomicBool,
) -> Result<Outcome, SessionError> {
    check_rig(plan, rig)?;
    let folder = Folder::open(plan, opt)?;
    let fs = f64::from(plan.procedure.front_end.sample_rate_hz);
    let desc = rig.describe();
    let mut s = Session {
        plan,
        rig,
        operator,
        opt,
        cancel,
        folder,
        desc,
        pre: (opt.pre_roll_s * fs).round() as usize,
        post: (opt.post_roll_s * fs).round() as usize,
        last_patch: None,
    };
    let resumed = s.folder.finished();
    let todo: Vec<&Step> = plan
        .steps
        .iter()
        .filter(|st| !s.folder.has(st.index))
        .collect();
    s.announce(&todo);
    let mut retries = 0;
    for step in &todo {
        retries += s.step(step)? as usize;
    }
    s.rig
        .self_patch(plan.procedure.stimulus.output as usize - 1, None);
    s.folder.save(plan, &s.desc)?;
    Ok(Outcome {
        recorded: todo.len(),
        resumed,
        retries,
    })
}
