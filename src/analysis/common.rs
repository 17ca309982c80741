//! The common-drive step: one signal split to every input. Each channel's
//! gain against a reference channel, and its phase and time skew (the
//! sampling instant relative to the reference's), with uncertainties; a
//! simultaneous-sampling front end shows no skew.

use super::steady::steady_range;
use super::AnalysisConfig;
use crate::dsp::amplitude_to_dbfs;
use crate::dsp::fit::{coarse_frequency, estimate_frequency, fit_tones, residual_pass, DECIMATION};
use crate::dsp::noise::quadrature_sigma_decimated;
use crate::run::manifest::CommonDriveEntry;
use crate::run::Capture;
use serde::Serialize;
use std::f64::consts::PI;

/// One channel in a common-drive capture.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct CommonChannel {
    /// Channel number.
    pub channel: u32,
    /// Tone level, dBFS.
    pub level_dbfs: f64,
    /// Gain against the reference channel, dB.
    pub gain_db: f64,
    /// Expanded uncertainty (k = 2) of the gain, dB.
    pub gain_u95_db: f64,
    /// Phase against the reference, degrees (positive: leads).
    pub phase_deg: f64,
    /// Expanded uncertainty of the phase, degrees.
    pub phase_u95_deg: f64,
    /// Sampling instant against the reference, µs (positive: samples later).
    pub skew_us: f64,
    /// Expanded uncertainty of the skew, µs.
    pub skew_u95_us: f64,
}

/// The analysis of one common-drive capture.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct CommonDrive {
    /// The capture's file.
    pub file: String,
    /// Nominal frequency, Hz.
    pub frequency_hz: f64,
    /// Estimated tone frequency, Hz.
    pub tone_hz: f64,
    /// The reference channel.
    pub reference_channel: u32,
    /// Every channel, the reference included (zero by definition).
    pub channels: Vec<CommonChannel>,
}

/// Analyse a common-drive capture.
pub fn analyze_common(
    capture: &Capture,
    entry: &CommonDriveEntry,
    config: &AnalysisConfig,
) -> Result<CommonDrive, String> {
    let fs = f64::from(capture.sample_rate_hz);
    let r = entry.reference_channel as usize - 1;
    let reference = &capture.channels[r];
    let coarse = coarse_frequency(reference, fs, entry.frequency_hz, config.frequency_search)
        .map_err(|e| format!("reference channel {}: {e}", r + 1))?;
    let span = steady_range(reference, fs, coarse).map_err(|e| {
        format!(
            "reference channel {} at {} Hz: {e}",
            r + 1,
            entry.frequency_hz
        )
    })?;
    let est = estimate_frequency(
        &reference[span.clone()],
        fs,
        entry.frequency_hz,
        config.frequency_search,
        config.max_harmonic,
    )
    .map_err(|e| format!("reference channel {}: {e}", r + 1))?;
    let model = est.model;
    let slices: Vec<&[f32]> = capture.channels.iter().map(|c| &c[span.clone()]).collect();
    let fits = fit_tones(&slices, &model).map_err(|e| e.to_string())?;
    // The same residual pass and local-noise estimate as a drive capture.
    let len = span.len();
    let stats = residual_pass(
        &slices,
        &fits,
        &model,
        &vec![false; slices.len()],
        &mut vec![Vec::new(); slices.len()],
    );
    let rel_sigma: Vec<f64> = stats
        .into_iter()
        .zip(&fits)
        .map(|(st, fit)| {
            let sum_sq = st.sum_sq;
            let sigma =
                quadrature_sigma_decimated(st, DECIMATION, len, est.freq_hz, fs, model.terms)
                    .unwrap_or_else(|| (2.0 * sum_sq).sqrt() / len as f64);
            sigma / fit.fundamental()
        })
        .collect();
    let (a_ref, p_ref) = (fits[r].fundamental(), fits[r].phase(0));
    let channels = fits
        .iter()
        .enumerate()
        .map(|(c, fit)| {
            let rel = if c == r {
                0.0
            } else {
                rel_sigma[c].hypot(rel_sigma[r])
            };
            let dphi = (fit.phase(0) - p_ref + PI).rem_euclid(2.0 * PI) - PI;
            let to_us = 1e6 / (2.0 * PI * est.freq_hz);
            CommonChannel {
                channel: c as u32 + 1,
                level_dbfs: amplitude_to_dbfs(fit.fundamental()),
                gain_db: amplitude_to_dbfs(fit.fundamental() / a_ref),
                gain_u95_db: 2.0 * 20.0 / std::f64::consts::LN_10 * rel,
                phase_deg: dphi.to_degrees(),
                phase_u95_deg: (2.0 * rel).to_degrees(),
                skew_us: dphi * to_us,
                skew_u95_us: 2.0 * rel * to_us,
            }
        })
        .collect();
    Ok(CommonDrive {
        file: String::new(),
        frequency_hz: entry.frequency_hz,
        tone_hz: est.freq_hz,
        reference_channel: entry.reference_channel,
        channels,
    })
}
