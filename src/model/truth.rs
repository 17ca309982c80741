//! The figures a perfect analysis of a simulated run would report, computed
//! from the resolved model's parameters (never from samples).

use super::Resolved;
use crate::dsp::level::dbfs_to_rms;
use crate::dsp::{amplitude_to_dbfs, power_to_dbfs};
use serde::Serialize;

/// Detection factor the expected limits assume (the analysis default).
pub const DETECTION_FACTOR: f64 = 4.3;

/// The exact separation of one pair.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ExpectedPair {
    /// Nominal test frequency, Hz.
    pub frequency_hz: f64,
    /// Driven input.
    pub aggressor: u32,
    /// Victim input.
    pub victim: u32,
    /// Aggressor level minus victim level, dB.
    pub separation_db: f64,
    /// Victim tone level, dBFS.
    pub victim_dbfs: f64,
    /// Aggressor tone level, dBFS.
    pub aggressor_dbfs: f64,
    /// Approximate detection limit for a record of `record_samples`, dBFS.
    pub detection_limit_dbfs: f64,
    /// Whether the victim tone lies below that limit.
    pub floor_limited: bool,
    /// Actual tone frequency (generator clock applied), Hz.
    pub tone_hz: f64,
}

/// The exact noise floor of one input.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ExpectedChannel {
    /// Input number.
    pub channel: u32,
    /// Broadband floor over 0 to fs/2 (white noise, dithered quantisation, hum), dBFS.
    pub noise_floor_dbfs: f64,
    /// White noise plus dithered quantisation only (what lies next to a test tone), dBFS.
    pub white_floor_dbfs: f64,
    /// Noise over 0 Hz to fs/2.56 (hum lines in the band included), dBFS.
    pub usable_noise_dbfs: f64,
    /// A-weighted noise over 20 Hz to 20 kHz (IEC 61672-1), dBFS.
    pub a_weighted_noise_dbfs: f64,
}

/// The exact figures of the driven channel in one drive capture.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ExpectedDrive {
    /// Nominal test frequency, Hz.
    pub frequency_hz: f64,
    /// Driven input.
    pub channel: u32,
    /// Tone level, dBFS.
    pub level_dbfs: f64,
    /// SINAD over noise, quantisation, hum, jitter and harmonics 2 to 9, dB.
    pub sinad_db: f64,
    /// THD over the harmonics below 0.49·fs, dB (`None`: none below it).
    pub thd_db: Option<f64>,
    /// ENOB, `log2(2/(NAD·√12))`.
    pub enob_bits: f64,
    /// Stimulus clock offset, ppm.
    pub clock_offset_ppm: f64,
}

/// The coupling of one ordered pair as the victim's reading sees it
/// (gains applied): flat part and rising part at 1 kHz, dB.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ExpectedCoupling {
    /// Driven input.
    pub aggressor: u32,
    /// Victim input.
    pub victim: u32,
    /// Flat part, dB.
    pub shared_db: f64,
    /// Rising part at 1 kHz, dB.
    pub rising_db_at_1khz: f64,
}

/// The exact gain and skew of one input in a common-drive capture.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ExpectedCommon {
    /// Test frequency, Hz.
    pub frequency_hz: f64,
    /// Input.
    pub channel: u32,
    /// Gain against the reference input, dB.
    pub gain_db: f64,
    /// Sampling instant against the reference input, µs.
    pub skew_us: f64,
}

/// Expected gain match and skew (the coupling between inputs, −90 dB and
/// below, is left out: it moves these figures by under 1e-4 dB).
pub fn expected_common(r: &Resolved) -> Vec<ExpectedCommon> {
    let Some(c) = &r.model.common_drive else {
        return Vec::new();
    };
    let reference = c.reference_channel as usize - 1;
    c.frequencies_hz
        .iter()
        .flat_map(|f| {
            (0..r.channels.len()).map(move |ch| ExpectedCommon {
                frequency_hz: *f,
                channel: ch as u32 + 1,
                gain_db: r.channels[ch].gain_db - r.channels[reference].gain_db,
                skew_us: r.channels[ch].skew_us - r.channels[reference].skew_us,
            })
        })
        .collect()
}

/// Usable band edge as a fraction of the sample rate (fs/2.56).
pub const USABLE_BAND_RATIO: f64 = 2.56;

fn hum_lines(r: &Resolved, ch: usize) -> Vec<(f64, f64)> {
    let scale = 10f64.powf(r.channels[ch].hum_db / 10.0);
    let fs = f64::from(r.model.front_end.sample_rate_hz);
    r.model
        .hum
        .levels_dbfs
        .iter()
        .enumerate()
        .map(|(k, l)| {
            (
                r.model.hum.mains_hz * (k + 1) as f64,
                dbfs_to_rms(*l).powi(2) * scale,
            )
        })
        .filter(|(f, _)| *f < fs / 2.0)
        .collect()
}

/// ∫ A²(f) df over `lo..hi` Hz (trapezoids of 0.5 Hz).
fn a_weighting_integral(lo: f64, hi: f64) -> f64 {
    let steps = ((hi - lo) / 0.5).ceil() as usize;
    let h = (hi - lo) / steps as f64;
    (0..=steps)
        .map(|i| {
            let w = if i == 0 || i == steps { 0.5 } else { 1.0 };
            w * crate::dsp::weighting::a_weighting_power(lo + i as f64 * h)
        })
        .sum::<f64>()
        * h
}

/// Expected driven-channel figures of every drive capture.
pub fn expected_drive(r: &Resolved) -> Vec<ExpectedDrive> {
    let st = &r.model.stimulus;
    let fs = f64::from(r.model.front_end.sample_rate_hz);
    let mut out = Vec::new();
    for &f in &r.frequencies_hz {
        let tone = f * (1.0 + st.generator_offset_ppm * 1e-6);
        for a in 0..r.channels.len() {
            let amp = crate::dsp::dbfs_to_amplitude(st.level_dbfs) * gain(r, a);
            let harmonics: Vec<f64> = st
                .harmonics_dbc
                .iter()
                .enumerate()
                .filter(|(k, _)| ((k + 2) as f64) * tone < 0.49 * fs && k + 2 <= 9)
                .map(|(_, dbc)| (amp * crate::dsp::dbfs_to_amplitude(*dbc)).powi(2) / 2.0)
                .collect();
            let any_harmonic_slot = 2.0 * tone < 0.49 * fs;
            let harm_power: f64 = harmonics.iter().sum();
            let jitter = (amp * 2.0 * std::f64::consts::PI * tone * r.model.clock.jitter_rms_s)
                .powi(2)
                / 2.0;
            let nad2 = white_power(r, a) + hum_power(r, a) + jitter + harm_power;
            out.push(ExpectedDrive {
                frequency_hz: f,
                channel: a as u32 + 1,
                level_dbfs: amplitude_to_dbfs(amp),
                sinad_db: 10.0 * ((amp * amp / 2.0) / nad2).log10(),
                thd_db: any_harmonic_slot
                    .then(|| 10.0 * (harm_power.max(1e-300) / (amp * amp / 2.0)).log10()),
                enob_bits: crate::dsp::level::enob_from_nad(nad2.sqrt()),
                clock_offset_ppm: st.generator_offset_ppm,
            });
        }
    }
    out
}

/// Expected coupling parts of every ordered pair.
pub fn expected_coupling(r: &Resolved) -> Vec<ExpectedCoupling> {
    let n = r.channels.len();
    let mut out = Vec::new();
    for a in 0..n {
        for v in (0..n).filter(|v| *v != a) {
            let g = gain(r, v) / gain(r, a);
            let k = r.coupling[a][v];
            out.push(ExpectedCoupling {
                aggressor: a as u32 + 1,
                victim: v as u32 + 1,
                shared_db: amplitude_to_dbfs(k.shared.abs() * g),
                rising_db_at_1khz: amplitude_to_dbfs(k.capacitive * g),
            });
        }
    }
    out
}

/// Mean square of the dithered quantisation error: Q²/12 rounding plus
/// Q²/6 of triangular dither spanning ±1 LSB.
pub fn quantisation_power(bits: u32) -> f64 {
    let q = 2f64.powi(1 - bits as i32);
    q * q / 4.0
}

fn white_power(r: &Resolved, ch: usize) -> f64 {
    dbfs_to_rms(r.channels[ch].noise_dbfs).powi(2) + quantisation_power(r.model.front_end.bits)
}

fn hum_power(r: &Resolved, ch: usize) -> f64 {
    let scale = 10f64.powf(r.channels[ch].hum_db / 10.0);
    r.model
        .hum
        .levels_dbfs
        .iter()
        .map(|l| dbfs_to_rms(*l).powi(2) * scale)
        .sum()
}

/// Gain of input `ch` (0-based) as a linear factor.
pub fn gain(r: &Resolved, ch: usize) -> f64 {
    10f64.powf(r.channels[ch].gain_db / 20.0)
}

/// Expected floors of every input.
pub fn expected_channels(r: &Resolved) -> Vec<ExpectedChannel> {
    (0..r.channels.len())
        .map(|c| {
            let fs = f64::from(r.model.front_end.sample_rate_hz);
            let density = white_power(r, c) / (fs / 2.0);
            let edge = fs / USABLE_BAND_RATIO;
            let hum = hum_lines(r, c);
            let usable = density * edge
                + hum
                    .iter()
                    .filter(|(f, _)| *f <= edge)
                    .map(|(_, p)| p)
                    .sum::<f64>();
            let a_hi = 20_000f64.min(fs / 2.0);
            let a_weighted = density * a_weighting_integral(20.0, a_hi)
                + hum
                    .iter()
                    .filter(|(f, _)| (20.0..=a_hi).contains(f))
                    .map(|(f, p)| p * crate::dsp::weighting::a_weighting_power(*f))
                    .sum::<f64>();
            ExpectedChannel {
                channel: c as u32 + 1,
                noise_floor_dbfs: power_to_dbfs(white_power(r, c) + hum_power(r, c)),
                white_floor_dbfs: power_to_dbfs(white_power(r, c)),
                usable_noise_dbfs: power_to_dbfs(usable),
                a_weighted_noise_dbfs: power_to_dbfs(a_weighted),
            }
        })
        .collect()
}

/// Expected separation of every pair at every test frequency, for the
/// ideal coupling `H(f) = shared + j·capacitive·f/1 kHz` of `septum simulate`.
pub fn expected_pairs(r: &Resolved) -> Vec<ExpectedPair> {
    expected_pairs_with(r, &|c, f| c.magnitude(f))
}

/// Expected separations for a coupling realised with the magnitude
/// response `magnitude(coupling, tone_hz)` (the streaming model realises
/// the capacitive part with a filter whose response differs from the ideal).
pub fn expected_pairs_with(
    r: &Resolved,
    magnitude: &dyn Fn(&super::Coupling, f64) -> f64,
) -> Vec<ExpectedPair> {
    let n = r.channels.len();
    let st = &r.model.stimulus;
    let record = st.record_samples as f64;
    let mut out = Vec::new();
    for &f in &r.frequencies_hz {
        let tone = f * (1.0 + st.generator_offset_ppm * 1e-6);
        for a in 0..n {
            let agg = st.level_dbfs + r.channels[a].gain_db;
            for v in (0..n).filter(|v| *v != a) {
                let victim = agg - r.channels[a].gain_db
                    + r.channels[v].gain_db
                    + amplitude_to_dbfs(magnitude(&r.coupling[a][v], tone));
                let sigma_q = (white_power(r, v) * 2.0 / record).sqrt();
                let limit = amplitude_to_dbfs(DETECTION_FACTOR * sigma_q);
                out.push(ExpectedPair {
                    frequency_hz: f,
                    aggressor: a as u32 + 1,
                    victim: v as u32 + 1,
                    separation_db: agg - victim,
                    victim_dbfs: victim,
                    aggressor_dbfs: agg,
                    detection_limit_dbfs: limit,
                    floor_limited: victim < limit,
                    tone_hz: tone,
                });
            }
        }
    }
    out
}
