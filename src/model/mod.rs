//! The simulated front end: a model of a multichannel acquisition front end
//! (gains, offsets, noise, quantisation, clocks, hum, coupling between every
//! pair of inputs) that can synthesise whole run folders and states the exact
//! figures an analysis should recover.
//!
//! The model file is TOML; see `examples/models/mossgate-fe8.toml` for a
//! commented example of every key. [`FrontEndModel::resolve`] turns the
//! file's defaults, spreads and per-channel or per-pair overrides into one
//! explicit table ([`Resolved`]), drawn from the model's seed; synthesis and
//! the expected figures both use that table and nothing else.

pub mod stream;
pub mod synth;
pub mod truth;

use crate::dsp::freqs::nudge_coherent;
use crate::run::WavFormat;
use rand::{Rng, SeedableRng};
use rand_distr::StandardNormal;
use serde::{Deserialize, Serialize};
use std::path::Path;
use thiserror::Error;

/// A model file could not be used.
#[derive(Debug, Error)]
pub enum ModelError {
    /// The file could not be read.
    #[error("{path}: {source}")]
    Io {
        /// The model file.
        path: String,
        /// What the system said.
        source: std::io::Error,
    },
    /// The file is not valid TOML or breaks a rule.
    #[error("{path}: {message}")]
    Invalid {
        /// The model file.
        path: String,
        /// What is wrong, with the key and line where known.
        message: String,
    },
}

/// Identity and converter of the simulated front end.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct FrontEndSection {
    /// Label written to run.json's `front_end`.
    pub label: String,
    /// Serial number.
    #[serde(default)]
    pub serial: Option<String>,
    /// Free text.
    #[serde(default)]
    pub notes: Option<String>,
    /// Number of inputs.
    pub channels: u32,
    /// Sample rate, Hz.
    pub sample_rate_hz: u32,
    /// Converter resolution, bits (quantised with TPDF dither).
    pub bits: u32,
    /// WAV sample format of the captures.
    pub wav: WavFormat,
    /// Default white-noise floor of every input, dBFS over 0 to fs/2.
    pub noise_dbfs: f64,
    /// Spread (standard deviation) of the gain error, dB.
    #[serde(default)]
    pub gain_spread_db: f64,
    /// Spread (standard deviation) of the DC offset, full scale 1.0.
    #[serde(default)]
    pub dc_spread: f64,
    /// Spread (standard deviation) of the per-channel noise floor, dB.
    #[serde(default)]
    pub noise_spread_db: f64,
    /// Spread (standard deviation) of each input's sampling instant, µs
    /// (0 for simultaneous sampling).
    #[serde(default)]
    pub skew_spread_us: f64,
    /// Termination of every victim input (free text written to run.json).
    #[serde(default = "default_termination")]
    pub termination: String,
}

fn default_termination() -> String {
    "short".into()
}

/// The test tone and the capture timing.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct StimulusSection {
    /// Nominal test frequencies, Hz; empty or absent: third-octave
    /// preferred frequencies `preferred_hz` nudged to coherent values.
    #[serde(default)]
    pub frequencies_hz: Vec<f64>,
    /// Preferred frequencies to nudge when `frequencies_hz` is empty.
    #[serde(default = "default_preferred")]
    pub preferred_hz: Vec<f64>,
    /// Tone level at the aggressor input, dBFS.
    pub level_dbfs: f64,
    /// Samples in the steady part of each drive capture.
    pub record_samples: u64,
    /// Silence before the tone (play-to-record latency), seconds.
    #[serde(default)]
    pub latency_s: f64,
    /// Raised-cosine fade in and out, seconds.
    #[serde(default)]
    pub ramp_s: f64,
    /// Silence after the fade out, seconds.
    #[serde(default)]
    pub tail_s: f64,
    /// Generator clock offset from the converter's clock, ppm (0: the tone
    /// comes from the interface's own output).
    #[serde(default)]
    pub generator_offset_ppm: f64,
    /// Harmonics of the drive, dB relative to the fundamental: 2nd, 3rd, …
    #[serde(default)]
    pub harmonics_dbc: Vec<f64>,
    /// Samples of the idle capture (every input terminated); 0 for none.
    #[serde(default)]
    pub idle_samples: u64,
}

fn default_preferred() -> Vec<f64> {
    vec![125.0, 1000.0, 4000.0, 16000.0]
}

/// Sampling clock.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ClockSection {
    /// rms sampling jitter, seconds (common to all channels).
    #[serde(default)]
    pub jitter_rms_s: f64,
}

/// Mains hum.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct HumSection {
    /// Mains frequency, Hz.
    #[serde(default = "default_mains")]
    pub mains_hz: f64,
    /// Levels of the mains fundamental and its harmonics on every input, dBFS.
    #[serde(default)]
    pub levels_dbfs: Vec<f64>,
}

fn default_mains() -> f64 {
    50.0
}

/// Coupling between inputs.
#[derive(Debug, Clone, Default, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct CouplingSection {
    /// Flat (shared-impedance) coupling between neighbouring inputs, dB.
    pub adjacent_shared_db: f64,
    /// Capacitive coupling between neighbouring inputs at 1 kHz, dB
    /// (rises 20 dB per decade, leads by 90°).
    pub adjacent_capacitive_db: f64,
    /// Flat coupling between inputs further apart, dB.
    pub far_shared_db: f64,
    /// Capacitive coupling at 1 kHz between inputs two apart, dB.
    pub far_capacitive_db: f64,
    /// Extra loss of the capacitive part per further step apart, dB.
    #[serde(default)]
    pub capacitive_step_db: f64,
    /// Spread (standard deviation) drawn per pair and part, dB.
    #[serde(default)]
    pub spread_db: f64,
    /// Overrides for single pairs.
    #[serde(default)]
    pub pair: Vec<PairOverride>,
}

/// Coupling of one (aggressor, victim) pair, overriding the defaults.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct PairOverride {
    /// Driven input.
    pub aggressor: u32,
    /// Coupled-into input.
    pub victim: u32,
    /// Flat part, dB (absent: no flat part).
    #[serde(default)]
    pub shared_db: Option<f64>,
    /// Capacitive part at 1 kHz, dB (absent: no capacitive part).
    #[serde(default)]
    pub capacitive_db: Option<f64>,
}

/// The common-drive step: one signal split to every input.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct CommonDriveSection {
    /// Test frequencies, Hz.
    pub frequencies_hz: Vec<f64>,
    /// Level at every input, dBFS.
    pub level_dbfs: f64,
    /// The channel the others are compared with.
    #[serde(default = "one")]
    pub reference_channel: u32,
}

fn one() -> u32 {
    1
}

/// One input's overrides.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ChannelOverride {
    /// Input number, from 1.
    pub number: u32,
    /// Name written to run.json.
    #[serde(default)]
    pub name: Option<String>,
    /// Termination written to run.json.
    #[serde(default)]
    pub termination: Option<String>,
    /// Gain error, dB.
    #[serde(default)]
    pub gain_db: Option<f64>,
    /// DC offset, full scale 1.0.
    #[serde(default)]
    pub dc_offset: Option<f64>,
    /// White-noise floor, dBFS.
    #[serde(default)]
    pub noise_dbfs: Option<f64>,
    /// Hum on this input relative to `[hum]`, dB.
    #[serde(default)]
    pub hum_db: Option<f64>,
    /// Sampling instant relative to the nominal one, µs (later is positive).
    #[serde(default)]
    pub skew_us: Option<f64>,
}

/// A front-end model as written in a model file.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct FrontEndModel {
    /// Seed of every random draw (spreads, noise, dither, jitter, phases).
    pub seed: u64,
    /// Identity and converter.
    pub front_end: FrontEndSection,
    /// Tone and timing.
    pub stimulus: StimulusSection,
    /// Sampling clock.
    #[serde(default)]
    pub clock: ClockSection,
    /// Mains hum.
    #[serde(default)]
    pub hum: HumSection,
    /// Coupling.
    pub coupling: CouplingSection,
    /// Per-input overrides.
    #[serde(default)]
    pub channel: Vec<ChannelOverride>,
    /// Common-drive captures (one signal split to every input).
    #[serde(default)]
    pub common_drive: Option<CommonDriveSection>,
}

/// The default scenario's model file, with comments.
pub const DEFAULT_MODEL_TOML: &str = include_str!("../../examples/models/mossgate-fe8.toml");

/// One input, fully resolved.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ResolvedChannel {
    /// Input number.
    pub number: u32,
    /// Name.
    pub name: String,
    /// Termination.
    pub termination: String,
    /// Gain error, dB.
    pub gain_db: f64,
    /// DC offset, full scale 1.0.
    pub dc_offset: f64,
    /// White-noise floor (before quantisation), dBFS.
    pub noise_dbfs: f64,
    /// Hum relative to the `[hum]` levels, dB.
    pub hum_db: f64,
    /// Sampling instant relative to the nominal one, µs (later is positive).
    pub skew_us: f64,
}

/// The coupling of one ordered pair: `H(f) = shared + j·capacitive·f/1 kHz`
/// (linear amplitude ratios, referred to the victim's input).
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct Coupling {
    /// Flat part (signed).
    pub shared: f64,
    /// Capacitive part at 1 kHz.
    pub capacitive: f64,
}

impl Coupling {
    /// Complex coupling `(re, im)` at `freq_hz`.
    pub fn at(&self, freq_hz: f64) -> (f64, f64) {
        (self.shared, self.capacitive * freq_hz / 1000.0)
    }

    /// Magnitude at `freq_hz`.
    pub fn magnitude(&self, freq_hz: f64) -> f64 {
        let (re, im) = self.at(freq_hz);
        re.hypot(im)
    }
}

/// A model with every parameter explicit.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Resolved {
    /// The model as written.
    pub model: FrontEndModel,
    /// Nominal test frequencies, Hz.
    pub frequencies_hz: Vec<f64>,
    /// Inputs.
    pub channels: Vec<ResolvedChannel>,
    /// `coupling[a-1][v-1]`: from aggressor `a` into victim `v` (diagonal unused).
    pub coupling: Vec<Vec<Coupling>>,
}

fn db(x: f64) -> f64 {
    10f64.powf(x / 20.0)
}

impl FrontEndModel {
    /// Parse a model file's text; `path` names it in messages.
    pub fn parse(text: &str, path: &str) -> Result<Self, ModelError> {
        let invalid = |message: String| ModelError::Invalid {
            path: path.to_string(),
            message,
        };
        let model: FrontEndModel =
            toml::from_str(text).map_err(|e| invalid(crate::tomltext::describe(text, &e)))?;
        model.validate().map_err(invalid)?;
        Ok(model)
    }

    /// Read a model file.
    pub fn load(path: &Path) -> Result<Self, ModelError> {
        let text = std::fs::read_to_string(path).map_err(|source| ModelError::Io {
            path: path.display().to_string(),
            source,
        })?;
        Self::parse(&text, &path.display().to_string())
    }

    /// The default scenario.
    pub fn default_scenario() -> Self {
        Self::parse(DEFAULT_MODEL_TOML, "built-in model").expect("the built-in model is valid")
    }

    fn validate(&self) -> Result<(), String> {
        let fe = &self.front_end;
        let st = &self.stimulus;
        let fs = f64::from(fe.sample_rate_hz);
        if !(1..=1024).contains(&fe.channels) {
            return Err(format!(
                "front_end.channels = {} must lie between 1 and 1024",
                fe.channels
            ));
        }
        if !(1000..=1_000_000).contains(&fe.sample_rate_hz) {
            return Err(format!(
                "front_end.sample_rate_hz = {} must lie between 1000 and 1000000",
                fe.sample_rate_hz
            ));
        }
        let wav_bits = match fe.wav {
            WavFormat::Int16 => 16,
            WavFormat::Int24 | WavFormat::Float32 => 24,
            WavFormat::Int32 => 32,
        };
        if !(8..=wav_bits).contains(&fe.bits) {
            return Err(format!(
                "front_end.bits = {} must lie between 8 and the {wav_bits} bits that wav = \"{:?}\" holds exactly",
                fe.bits, fe.wav
            ));
        }
        for f in st.frequencies_hz.iter().chain(&st.preferred_hz) {
            if !(*f > 0.0 && *f < 0.45 * fs) {
                return Err(format!(
                    "stimulus frequency {f} Hz must lie between 0 and 0.45·fs = {} Hz",
                    0.45 * fs
                ));
            }
        }
        if !(st.level_dbfs <= -0.5 && st.level_dbfs >= -140.0) {
            return Err(format!(
                "stimulus.level_dbfs = {} must lie between -140 and -0.5 dBFS",
                st.level_dbfs
            ));
        }
        if st.record_samples < 1024 || st.record_samples > 1 << 26 {
            return Err(format!(
                "stimulus.record_samples = {} must lie between 1024 and 67108864",
                st.record_samples
            ));
        }
        for (k, v) in [
            ("latency_s", st.latency_s),
            ("ramp_s", st.ramp_s),
            ("tail_s", st.tail_s),
        ] {
            if !(0.0..=10.0).contains(&v) {
                return Err(format!("stimulus.{k} = {v} must lie between 0 and 10 s"));
            }
        }
        if st.generator_offset_ppm.abs() > 10_000.0 {
            return Err("stimulus.generator_offset_ppm must lie within ±10000 ppm".into());
        }
        if self.clock.jitter_rms_s < 0.0 || self.clock.jitter_rms_s > 1e-6 {
            return Err("clock.jitter_rms_s must lie between 0 and 1e-6 s".into());
        }
        let n = fe.channels;
        for p in &self.coupling.pair {
            if p.aggressor == 0
                || p.aggressor > n
                || p.victim == 0
                || p.victim > n
                || p.aggressor == p.victim
            {
                return Err(format!(
                    "coupling.pair aggressor {} victim {}: both must be distinct inputs from 1 to {n}",
                    p.aggressor, p.victim
                ));
            }
        }
        if let Some(c) = &self.common_drive {
            if c.reference_channel == 0 || c.reference_channel > n {
                return Err(format!(
                    "common_drive.reference_channel {} is not an input from 1 to {n}",
                    c.reference_channel
                ));
            }
            if !(c.level_dbfs <= -0.5 && c.level_dbfs >= -140.0) {
                return Err(format!(
                    "common_drive.level_dbfs = {} must lie between -140 and -0.5 dBFS",
                    c.level_dbfs
                ));
            }
            for f in &c.frequencies_hz {
                if !(*f > 0.0 && *f < 0.45 * fs) {
                    return Err(format!(
                        "common_drive frequency {f} Hz must lie between 0 and 0.45·fs"
                    ));
                }
            }
        }
        for c in &self.channel {
            if c.number == 0 || c.number > n {
                return Err(format!(
                    "channel number {} is not an input from 1 to {n}",
                    c.number
                ));
            }
        }
        Ok(())
    }

    /// The nominal test frequencies: as listed, or the preferred ones nudged
    /// to coherent frequencies at least 5 Hz from mains harmonics.
    pub fn frequencies(&self) -> Vec<f64> {
        let st = &self.stimulus;
        if !st.frequencies_hz.is_empty() {
            return st.frequencies_hz.clone();
        }
        let fs = f64::from(self.front_end.sample_rate_hz);
        let mut out: Vec<f64> = st
            .preferred_hz
            .iter()
            .filter_map(|f| nudge_coherent(*f, fs, st.record_samples, 5.0).map(|(_, g)| g))
            .collect();
        out.sort_by(f64::total_cmp);
        out.dedup();
        out
    }

    /// Draw the spreads and apply the overrides.
    #[allow(clippy::needless_range_loop)] // aggressor and victim indices, as in the model file
    pub fn resolve(&self) -> Resolved {
        let fe = &self.front_end;
        let mut rng = rand::rngs::StdRng::seed_from_u64(self.seed ^ 0x5e97_0000);
        let mut normal = || -> f64 { rng.sample(StandardNormal) };
        let channels = (1..=fe.channels)
            .map(|number| {
                let (g, d, n, k) = (normal(), normal(), normal(), normal());
                let o = self.channel.iter().find(|c| c.number == number);
                ResolvedChannel {
                    number,
                    name: o
                        .and_then(|o| o.name.clone())
                        .unwrap_or_else(|| format!("in {number}")),
                    termination: o
                        .and_then(|o| o.termination.clone())
                        .unwrap_or_else(|| fe.termination.clone()),
                    gain_db: o.and_then(|o| o.gain_db).unwrap_or(g * fe.gain_spread_db),
                    dc_offset: o.and_then(|o| o.dc_offset).unwrap_or(d * fe.dc_spread),
                    noise_dbfs: o
                        .and_then(|o| o.noise_dbfs)
                        .unwrap_or(fe.noise_dbfs + n * fe.noise_spread_db),
                    hum_db: o.and_then(|o| o.hum_db).unwrap_or(0.0),
                    skew_us: o.and_then(|o| o.skew_us).unwrap_or(k * fe.skew_spread_us),
                }
            })
            .collect();
        let c = &self.coupling;
        let n = fe.channels as usize;
        let mut coupling = vec![
            vec![
                Coupling {
                    shared: 0.0,
                    capacitive: 0.0
                };
                n
            ];
            n
        ];
        for a in 0..n {
            for v in 0..n {
                let (s1, s2, sign) = (normal(), normal(), normal());
                if a == v {
                    continue;
                }
                let dist = a.abs_diff(v);
                let (shared_db, cap_db) = if dist == 1 {
                    (c.adjacent_shared_db, c.adjacent_capacitive_db)
                } else {
                    (
                        c.far_shared_db,
                        c.far_capacitive_db - c.capacitive_step_db * (dist - 2) as f64,
                    )
                };
                let mut k = Coupling {
                    shared: db(shared_db + s1 * c.spread_db) * sign.signum(),
                    capacitive: db(cap_db + s2 * c.spread_db),
                };
                if let Some(p) = c
                    .pair
                    .iter()
                    .find(|p| p.aggressor as usize == a + 1 && p.victim as usize == v + 1)
                {
                    k = Coupling {
                        shared: p.shared_db.map_or(0.0, db),
                        capacitive: p.capacitive_db.map_or(0.0, db),
                    };
                }
                coupling[a][v] = k;
            }
        }
        Resolved {
            model: self.clone(),
            frequencies_hz: self.frequencies(),
            channels,
            coupling,
        }
    }
}
