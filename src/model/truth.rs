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
        .map(|c| ExpectedChannel {
            channel: c as u32 + 1,
            noise_floor_dbfs: power_to_dbfs(white_power(r, c) + hum_power(r, c)),
            white_floor_dbfs: power_to_dbfs(white_power(r, c)),
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
