//! Measurement procedures: the TOML file that says what to measure and how
//! (front end, inputs under test, stimulus, record length, idle capture,
//! terminations, pass limits), its validation, and the plan of steps it
//! turns into. [`session`] carries a plan out on a [`crate::audio::Rig`].
//!
//! See `procedures/commissioning.toml` for a commented example of every key.

pub mod session;

use crate::dsp::freqs::nudge_coherent;
use crate::model::truth::DETECTION_FACTOR;
use crate::run::WavFormat;
use serde::Deserialize;
use std::path::Path;
use thiserror::Error;

/// How far below the set level the quiet check after each patch plays, dB.
pub const QUIET_CHECK_DB: f64 = 20.0;

/// Test frequencies when a procedure names none: octave-spaced values of
/// the third-octave preferred series, kept up to fs/2.56 and nudged.
pub const DEFAULT_PREFERRED_HZ: [f64; 8] =
    [125.0, 250.0, 500.0, 1000.0, 2000.0, 4000.0, 8000.0, 16000.0];

/// Highest stimulus level accepted, dBFS.
pub const MAX_LEVEL_DBFS: f64 = -0.5;

/// A procedure file could not be used.
#[derive(Debug, Error)]
pub enum ProcedureError {
    /// The file could not be read.
    #[error("{path}: {source}")]
    Io {
        /// The procedure file.
        path: String,
        /// What the system said.
        source: std::io::Error,
    },
    /// The file is not valid TOML or breaks a rule.
    #[error("{path}: {message}")]
    Invalid {
        /// The procedure file.
        path: String,
        /// What is wrong, with the key and the line.
        message: String,
    },
}

/// Where the test tone comes from.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Source {
    /// The interface's own output, played by septum.
    Output,
    /// An external generator the operator sets; septum only records.
    Generator,
}

/// `[front_end]`.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct FrontEnd {
    /// Label written to run.json.
    pub label: String,
    /// Serial number.
    #[serde(default)]
    pub serial: Option<String>,
    /// Free text.
    #[serde(default)]
    pub notes: Option<String>,
    /// Inputs recorded (all of them, in every capture).
    pub inputs: u32,
    /// Sample rate, Hz.
    pub sample_rate_hz: u32,
    /// Capture file format.
    #[serde(default = "default_wav")]
    pub wav: WavFormat,
    /// Termination of every victim input unless `[[input]]` says otherwise.
    pub termination: String,
}

fn default_wav() -> WavFormat {
    WavFormat::Int24
}

/// `[[input]]`: one input's name and termination.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Input {
    /// Input number, from 1.
    pub number: u32,
    /// Name.
    #[serde(default)]
    pub name: Option<String>,
    /// Termination when it is a victim.
    #[serde(default)]
    pub termination: Option<String>,
}

/// `[test]`.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Test {
    /// Inputs driven in turn (aggressors); empty: every input.
    #[serde(default)]
    pub aggressors: Vec<u32>,
    /// Further attempts at a step whose checks fail.
    #[serde(default = "default_retries")]
    pub retries: u32,
}

fn default_retries() -> u32 {
    2
}

impl Default for Test {
    fn default() -> Self {
        Self {
            aggressors: Vec::new(),
            retries: default_retries(),
        }
    }
}

/// `[stimulus]`.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Stimulus {
    /// Interface output or external generator.
    #[serde(default = "default_source")]
    pub source: Source,
    /// Output channel (from 1) that carries the tone.
    #[serde(default = "default_output")]
    pub output: u32,
    /// Tone level at the aggressor input, dBFS.
    pub level_dbfs: f64,
    /// Test frequencies as given, Hz.
    #[serde(default)]
    pub frequencies_hz: Vec<f64>,
    /// Preferred frequencies, nudged to coherent ones (used when
    /// `frequencies_hz` is absent).
    #[serde(default)]
    pub preferred_hz: Vec<f64>,
    /// Steady samples recorded per drive capture.
    #[serde(default)]
    pub record_samples: Option<u64>,
    /// Wanted detection limit, dBFS (with `expected_floor_dbfs`, instead of
    /// `record_samples`).
    #[serde(default)]
    pub detection_limit_dbfs: Option<f64>,
    /// Expected broadband noise floor of the inputs, dBFS.
    #[serde(default)]
    pub expected_floor_dbfs: Option<f64>,
    /// Tone held before the recorded part, seconds.
    #[serde(default = "default_settle")]
    pub settle_s: f64,
    /// Raised-cosine fade in and out, seconds.
    #[serde(default = "default_ramp")]
    pub ramp_s: f64,
}

fn default_source() -> Source {
    Source::Output
}
fn default_output() -> u32 {
    1
}
fn default_settle() -> f64 {
    0.05
}
fn default_ramp() -> f64 {
    0.02
}

/// `[idle]`.
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Idle {
    /// Samples of the idle capture; 0: none.
    #[serde(default)]
    pub record_samples: u64,
}

/// `[common_drive]`: one signal split to every input (gain match and
/// inter-channel skew), one capture per frequency after the drive steps.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct CommonDrive {
    /// Test frequencies, Hz, taken as written.
    pub frequencies_hz: Vec<f64>,
    /// Level at every input, dBFS.
    pub level_dbfs: f64,
    /// The input the others are compared with, from 1.
    #[serde(default = "default_output")]
    pub reference_input: u32,
}

/// A procedure as written.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Procedure {
    /// Free text shown at the start.
    #[serde(default)]
    pub title: Option<String>,
    /// Identity and converter.
    pub front_end: FrontEnd,
    /// Names and terminations.
    #[serde(default)]
    pub input: Vec<Input>,
    /// What to drive.
    #[serde(default)]
    pub test: Test,
    /// The tone.
    pub stimulus: Stimulus,
    /// The idle capture.
    #[serde(default)]
    pub idle: Idle,
    /// The common-drive step.
    #[serde(default)]
    pub common_drive: Option<CommonDrive>,
    /// Pass limits: accepted as they are and passed through to run.json.
    #[serde(default)]
    pub limits: Option<toml::Table>,
}

/// One capture of the plan.
#[derive(Debug, Clone, PartialEq)]
pub struct Step {
    /// Position in the plan, from 1.
    pub index: usize,
    /// Capture file, relative to the run folder.
    pub file: String,
    /// `(aggressor input from 1, nominal frequency Hz)`, or `None` (idle
    /// or common drive).
    pub drive: Option<(u32, f64)>,
    /// Common drive (every input fed by the one signal) at this frequency, Hz.
    pub common: Option<f64>,
}

impl Step {
    /// Whether the step plays a tone (a drive or a common drive).
    pub fn plays(&self) -> bool {
        self.drive.is_some() || self.common.is_some()
    }
}

/// The validated procedure and its steps.
#[derive(Debug, Clone)]
pub struct Plan {
    /// The procedure.
    pub procedure: Procedure,
    /// The file's text (kept in the run folder).
    pub text: String,
    /// Test frequencies, Hz.
    pub frequencies_hz: Vec<f64>,
    /// Steady samples per drive capture.
    pub record_samples: u64,
    /// Every capture, in order: each aggressor through every frequency, the
    /// common-drive frequencies, then idle.
    pub steps: Vec<Step>,
}

/// Line (from 1) of `key` in `[table]` (or at top level for `""`); the
/// `nth` occurrence of an array-of-tables header counts from 0.
fn key_line(text: &str, table: &str, nth: usize, key: &str) -> Option<usize> {
    let mut current = String::new();
    let mut seen: isize = -1;
    for (i, line) in text.lines().enumerate() {
        let t = line.trim();
        if t.starts_with('[') {
            current = t.trim_matches(|c| c == '[' || c == ']').trim().to_string();
            if current == table {
                seen += 1;
            }
            continue;
        }
        let in_table =
            (table.is_empty() && current.is_empty()) || (current == table && seen == nth as isize);
        if in_table {
            if let Some((k, _)) = t.split_once('=') {
                if k.trim() == key {
                    return Some(i + 1);
                }
            }
        }
    }
    None
}

/// Line (from 1) of the `nth` header of `[table]` or `[[table]]`.
fn table_line(text: &str, table: &str, nth: usize) -> Option<usize> {
    text.lines()
        .enumerate()
        .filter(|(_, l)| {
            let t = l.trim();
            t.starts_with('[') && t.trim_matches(|c| c == '[' || c == ']').trim() == table
        })
        .nth(nth)
        .map(|(i, _)| i + 1)
}

/// The key named on the line where a TOML error points.
fn key_on_line(text: &str, offset: usize) -> Option<String> {
    let start = text[..offset].rfind('\n').map_or(0, |i| i + 1);
    let line = text[start..].lines().next()?;
    let (k, _) = line.split_once('=')?;
    let k = k.trim();
    (!k.is_empty() && !k.starts_with('#')).then(|| k.to_string())
}

/// Time a capture of `frames` takes, seconds.
pub fn seconds(frames: u64, sample_rate_hz: u32) -> f64 {
    frames as f64 / f64::from(sample_rate_hz)
}

/// Record length that reaches `limit_dbfs` over a broadband floor of
/// `floor_dbfs` (white noise): `limit ≈ floor + 10·log10(2/L) +
/// 20·log10(k) − 3.01 dB` with `k` the detection factor, solved for `L`
/// and rounded up to a power of two.
pub fn record_for_limit(limit_dbfs: f64, floor_dbfs: f64) -> u64 {
    let k = 20.0 * DETECTION_FACTOR.log10();
    let l = 2.0 / 10f64.powf((limit_dbfs - floor_dbfs - k + 3.0103) / 10.0);
    (l.ceil().max(1.0) as u64).next_power_of_two()
}

/// Detection limit a record of `record` samples reaches over `floor_dbfs`.
pub fn limit_for_record(record: u64, floor_dbfs: f64) -> f64 {
    floor_dbfs + 10.0 * (2.0 / record as f64).log10() + 20.0 * DETECTION_FACTOR.log10() - 3.0103
}

impl Plan {
    /// Read and validate a procedure file.
    pub fn load(path: &Path) -> Result<Self, ProcedureError> {
        let text = std::fs::read_to_string(path).map_err(|source| ProcedureError::Io {
            path: path.display().to_string(),
            source,
        })?;
        Self::parse(&text, &path.display().to_string())
    }

    /// Parse and validate procedure text; `path` names it in messages.
    pub fn parse(text: &str, path: &str) -> Result<Self, ProcedureError> {
        let invalid = |message: String| ProcedureError::Invalid {
            path: path.to_string(),
            message,
        };
        let procedure: Procedure = toml::from_str(text).map_err(|e| {
            let msg = e.message().trim().replace('\n', " ");
            let place = crate::tomltext::error_offset(text, &e)
                .map(|at| {
                    let line = crate::tomltext::line_at(text, at);
                    match key_on_line(text, at) {
                        Some(k) if !msg.contains(&k) => format!("line {line}: key `{k}`: "),
                        _ => format!("line {line}: "),
                    }
                })
                .unwrap_or_default();
            invalid(format!("{place}{msg}"))
        })?;
        let plan = Self::build(procedure, text).map_err(|(table, nth, key, msg)| {
            // An absent key is reported at its table's header.
            let line = key_line(text, table, nth, key)
                .or_else(|| table_line(text, table, nth))
                .map(|l| format!("line {l}: "))
                .unwrap_or_default();
            let full = if table.is_empty() {
                key.to_string()
            } else {
                format!("{table}.{key}")
            };
            invalid(format!("{line}key `{full}`: {msg}"))
        })?;
        Ok(plan)
    }

    fn build(
        p: Procedure,
        text: &str,
    ) -> Result<Self, (&'static str, usize, &'static str, String)> {
        let fe = &p.front_end;
        let st = &p.stimulus;
        let bad = |table, key, msg: String| Err((table, 0, key, msg));
        if !(1..=64).contains(&fe.inputs) {
            return bad(
                "front_end",
                "inputs",
                format!("{} must lie between 1 and 64", fe.inputs),
            );
        }
        if !(8000..=384_000).contains(&fe.sample_rate_hz) {
            return bad(
                "front_end",
                "sample_rate_hz",
                format!("{} must lie between 8000 and 384000", fe.sample_rate_hz),
            );
        }
        if fe.termination.trim().is_empty() {
            return bad(
                "front_end",
                "termination",
                "must say how victims are terminated (\"short\", \"600 ohm\" …)".into(),
            );
        }
        let fs = f64::from(fe.sample_rate_hz);
        for (i, inp) in p.input.iter().enumerate() {
            if inp.number == 0 || inp.number > fe.inputs {
                return Err((
                    "input",
                    i,
                    "number",
                    format!("{} is not an input from 1 to {}", inp.number, fe.inputs),
                ));
            }
            if p.input[..i].iter().any(|o| o.number == inp.number) {
                return Err((
                    "input",
                    i,
                    "number",
                    format!("input {} is described twice", inp.number),
                ));
            }
        }
        let mut aggressors = p.test.aggressors.clone();
        if aggressors.is_empty() {
            aggressors = (1..=fe.inputs).collect();
        }
        for (i, a) in aggressors.iter().enumerate() {
            if *a == 0 || *a > fe.inputs {
                return bad(
                    "test",
                    "aggressors",
                    format!("{a} is not an input from 1 to {}", fe.inputs),
                );
            }
            if aggressors[..i].contains(a) {
                return bad("test", "aggressors", format!("input {a} is listed twice"));
            }
        }
        if p.test.retries > 10 {
            return bad(
                "test",
                "retries",
                format!("{} must lie between 0 and 10", p.test.retries),
            );
        }
        if st.output == 0 || st.output > 64 {
            return bad(
                "stimulus",
                "output",
                format!("{} must be an output from 1 to 64", st.output),
            );
        }
        if !(st.level_dbfs.is_finite() && st.level_dbfs <= MAX_LEVEL_DBFS && st.level_dbfs >= -80.0)
        {
            return bad(
                "stimulus",
                "level_dbfs",
                format!(
                    "{} must lie between -80 and {MAX_LEVEL_DBFS} dBFS",
                    st.level_dbfs
                ),
            );
        }
        for (k, v, lo, hi) in [
            ("settle_s", st.settle_s, 0.0, 10.0),
            ("ramp_s", st.ramp_s, 0.001, 1.0),
        ] {
            if !(v >= lo && v <= hi) {
                return bad(
                    "stimulus",
                    k,
                    format!("{v} must lie between {lo} and {hi} s"),
                );
            }
        }
        let record = match (
            st.record_samples,
            st.detection_limit_dbfs,
            st.expected_floor_dbfs,
        ) {
            (Some(_), Some(_), _) => {
                return bad(
                    "stimulus",
                    "detection_limit_dbfs",
                    "give record_samples or detection_limit_dbfs, not both".into(),
                )
            }
            (Some(r), None, _) => r,
            (None, Some(lim), Some(floor)) => {
                if !(lim < floor && lim > -250.0 && floor < 0.0) {
                    return bad(
                        "stimulus",
                        "detection_limit_dbfs",
                        format!(
                            "{lim} must lie below expected_floor_dbfs ({floor}) and above -250"
                        ),
                    );
                }
                record_for_limit(lim, floor)
            }
            (None, Some(_), None) => return bad(
                "stimulus",
                "detection_limit_dbfs",
                "needs expected_floor_dbfs (the inputs' broadband floor) to derive a record length"
                    .into(),
            ),
            (None, None, _) => return bad(
                "stimulus",
                "record_samples",
                "missing: give record_samples, or detection_limit_dbfs with expected_floor_dbfs"
                    .into(),
            ),
        };
        if !(4096..=1 << 24).contains(&record) {
            let key = if st.record_samples.is_some() {
                "record_samples"
            } else {
                "detection_limit_dbfs"
            };
            return bad(
                "stimulus",
                key,
                format!(
                    "needs {record} samples; the record must lie between 4096 and 16777216 samples"
                ),
            );
        }
        if !st.frequencies_hz.is_empty() && !st.preferred_hz.is_empty() {
            return bad(
                "stimulus",
                "preferred_hz",
                "give frequencies_hz or preferred_hz, not both".into(),
            );
        }
        let key = if st.frequencies_hz.is_empty() {
            "preferred_hz"
        } else {
            "frequencies_hz"
        };
        // Default: octave-spaced preferred frequencies within the usable band fs/2.56.
        let defaults: Vec<f64> = DEFAULT_PREFERRED_HZ
            .iter()
            .copied()
            .filter(|f| *f <= fs / 2.56)
            .collect();
        let given = match (st.frequencies_hz.is_empty(), st.preferred_hz.is_empty()) {
            (false, _) => &st.frequencies_hz,
            (true, false) => &st.preferred_hz,
            (true, true) => &defaults,
        };
        let mut freqs = Vec::new();
        for f in given {
            if !(*f >= 10.0 && *f <= 0.45 * fs) {
                return bad(
                    "stimulus",
                    key,
                    format!(
                        "{f} Hz must lie between 10 Hz and 0.45·fs = {} Hz",
                        0.45 * fs
                    ),
                );
            }
            let g = if st.frequencies_hz.is_empty() {
                match nudge_coherent(*f, fs, record, 5.0) {
                    Some((_, g)) => g,
                    None => {
                        return bad(
                            "stimulus",
                            key,
                            format!("{f} Hz has no coherent frequency clear of mains within 10 %"),
                        )
                    }
                }
            } else {
                *f
            };
            if freqs.contains(&g) {
                return bad(
                    "stimulus",
                    key,
                    format!("{f} Hz is listed twice (or nudges onto another)"),
                );
            }
            freqs.push(g);
        }
        freqs.sort_by(f64::total_cmp);
        let idle = p.idle.record_samples;
        if idle != 0 && !(4096..=1 << 24).contains(&idle) {
            return Err((
                "idle",
                0,
                "record_samples",
                format!("{idle} must be 0 (no idle capture) or lie between 4096 and 16777216"),
            ));
        }
        if let Some(c) = &p.common_drive {
            let bad = |key, msg: String| Err(("common_drive", 0, key, msg));
            if c.frequencies_hz.is_empty() {
                return bad("frequencies_hz", "give at least one frequency".into());
            }
            for (i, f) in c.frequencies_hz.iter().enumerate() {
                if !(*f >= 10.0 && *f <= 0.45 * fs) {
                    return bad(
                        "frequencies_hz",
                        format!(
                            "{f} Hz must lie between 10 Hz and 0.45·fs = {} Hz",
                            0.45 * fs
                        ),
                    );
                }
                if c.frequencies_hz[..i].contains(f) {
                    return bad("frequencies_hz", format!("{f} Hz is listed twice"));
                }
            }
            if !(c.level_dbfs.is_finite()
                && c.level_dbfs <= MAX_LEVEL_DBFS
                && c.level_dbfs >= -80.0)
            {
                return bad(
                    "level_dbfs",
                    format!(
                        "{} must lie between -80 and {MAX_LEVEL_DBFS} dBFS",
                        c.level_dbfs
                    ),
                );
            }
            if c.reference_input == 0 || c.reference_input > fe.inputs {
                return bad(
                    "reference_input",
                    format!(
                        "{} is not an input from 1 to {}",
                        c.reference_input, fe.inputs
                    ),
                );
            }
        }
        let mut steps = Vec::new();
        for &a in &aggressors {
            for &f in &freqs {
                let index = steps.len() + 1;
                steps.push(Step {
                    index,
                    file: format!("captures/{index:03}-drive-ch{a}-{}Hz.wav", format_freq(f)),
                    drive: Some((a, f)),
                    common: None,
                });
            }
        }
        if let Some(c) = &p.common_drive {
            for &f in &c.frequencies_hz {
                let index = steps.len() + 1;
                steps.push(Step {
                    index,
                    file: format!("captures/{index:03}-common-{}Hz.wav", format_freq(f)),
                    drive: None,
                    common: Some(f),
                });
            }
        }
        if idle > 0 {
            let index = steps.len() + 1;
            steps.push(Step {
                index,
                file: format!("captures/{index:03}-idle.wav"),
                drive: None,
                common: None,
            });
        }
        Ok(Self {
            procedure: p,
            text: text.to_string(),
            frequencies_hz: freqs,
            record_samples: record,
            steps,
        })
    }

    /// Name of input `n` (from 1).
    pub fn input_name(&self, n: u32) -> String {
        self.procedure
            .input
            .iter()
            .find(|i| i.number == n)
            .and_then(|i| i.name.clone())
            .unwrap_or_else(|| format!("in {n}"))
    }

    /// Termination of input `n` (from 1).
    pub fn termination(&self, n: u32) -> String {
        self.procedure
            .input
            .iter()
            .find(|i| i.number == n)
            .and_then(|i| i.termination.clone())
            .unwrap_or_else(|| self.procedure.front_end.termination.clone())
    }

    /// Frames of the stimulus: ramp, settle, record, guard, ramp.
    pub fn stimulus_frames(&self) -> usize {
        let fs = f64::from(self.procedure.front_end.sample_rate_hz);
        let st = &self.procedure.stimulus;
        let secs = |s: f64| (s * fs).round() as usize;
        2 * secs(st.ramp_s) + secs(st.settle_s) + self.record_samples as usize + secs(0.05)
    }

    /// The stimulus for a tone at `freq_hz`: a sine at the procedure's
    /// level with raised-cosine fades, as mono samples.
    pub fn stimulus(&self, freq_hz: f64) -> Vec<f32> {
        self.stimulus_at(freq_hz, self.procedure.stimulus.level_dbfs)
    }

    /// The stimulus for a tone at `freq_hz` and `level_dbfs`.
    pub fn stimulus_at(&self, freq_hz: f64, level_dbfs: f64) -> Vec<f32> {
        let fs = f64::from(self.procedure.front_end.sample_rate_hz);
        let st = &self.procedure.stimulus;
        let ramp = (st.ramp_s * fs).round() as usize;
        let total = self.stimulus_frames();
        let amp = 10f64.powf(level_dbfs / 20.0);
        tone(total, ramp, amp, 2.0 * std::f64::consts::PI * freq_hz / fs)
    }

    /// The level `step` plays at, dBFS (the common-drive level for a
    /// common-drive step, the stimulus level otherwise).
    pub fn level_of(&self, step: &Step) -> f64 {
        match (&self.procedure.common_drive, step.common) {
            (Some(c), Some(_)) => c.level_dbfs,
            _ => self.procedure.stimulus.level_dbfs,
        }
    }

    /// The short, quiet tone played after each patch before the full level:
    /// fades and 0.25 s of tone, [`QUIET_CHECK_DB`] below `level_dbfs`.
    pub fn quiet_stimulus(&self, freq_hz: f64, level_dbfs: f64) -> Vec<f32> {
        let fs = f64::from(self.procedure.front_end.sample_rate_hz);
        let st = &self.procedure.stimulus;
        let ramp = (st.ramp_s * fs).round() as usize;
        let total = 2 * ramp + (0.25 * fs) as usize;
        let amp = 10f64.powf((level_dbfs - QUIET_CHECK_DB) / 20.0);
        tone(total, ramp, amp, 2.0 * std::f64::consts::PI * freq_hz / fs)
    }

    /// Seconds the whole plan records (without prompts and retries).
    pub fn duration_s(&self, pre_roll: usize, post_roll: usize) -> f64 {
        let fs = self.procedure.front_end.sample_rate_hz;
        self.steps
            .iter()
            .map(|s| {
                if s.plays() {
                    seconds((pre_roll + self.stimulus_frames() + post_roll) as u64, fs)
                } else {
                    seconds(self.procedure.idle.record_samples, fs)
                }
            })
            .sum()
    }
}

/// `total` samples of a sine of peak `amp` and `w` rad/sample, faded in and
/// out over `ramp` samples with raised-cosine ramps.
fn tone(total: usize, ramp: usize, amp: f64, w: f64) -> Vec<f32> {
    (0..total)
        .map(|n| {
            let k = n.min(total - 1 - n);
            let env = if k < ramp {
                0.5 * (1.0 - (std::f64::consts::PI * k as f64 / ramp as f64).cos())
            } else {
                1.0
            };
            (amp * env * (w * n as f64).sin()) as f32
        })
        .collect()
}

/// A frequency as written in file names: up to three decimals.
pub fn format_freq(f: f64) -> String {
    let s = format!("{f:.3}");
    s.trim_end_matches('0').trim_end_matches('.').to_string()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn record_length_and_limit_agree() {
        let l = record_for_limit(-150.0, -115.0);
        assert!(l.is_power_of_two());
        assert!(limit_for_record(l, -115.0) <= -150.0);
        assert!(limit_for_record(l / 2, -115.0) > -150.0);
    }

    #[test]
    fn key_lines_are_found() {
        let t = "a = 1\n[x]\nb = 2\n[[y]]\nc = 1\n[[y]]\nc = 2\n";
        assert_eq!(key_line(t, "", 0, "a"), Some(1));
        assert_eq!(key_line(t, "x", 0, "b"), Some(3));
        assert_eq!(key_line(t, "y", 1, "c"), Some(7));
    }
}
