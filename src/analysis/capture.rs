//! One capture: steady part, frequency, fits on every channel, explicit
//! residuals, local noise and detection limits.

use super::quality::{drive_quality, out_of_band_peaks, DriveQuality};
use super::steady::steady_range;
use super::AnalysisConfig;
use crate::dsp::dbfs_to_amplitude;
use crate::dsp::fit::{
    coarse_frequency, estimate_frequency_from, fit_with_residuals, residual_band_powers, ToneModel,
    DECIMATION,
};
use crate::dsp::noise::quadrature_sigma_decimated;
use crate::dsp::psd::band_powers;
use crate::dsp::spectrum::{log_spectrum, Spectrum};
use crate::run::{Drive, FrameCapture};
use rayon::prelude::*;
use serde::Serialize;
use std::borrow::Cow;

/// What one channel of one capture holds.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ChannelFit {
    /// Channel number, from 1.
    pub channel: u32,
    /// Fitted fundamental, peak amplitude (full scale 1.0); 0 in idle captures.
    pub amplitude: f64,
    /// Phase of the fundamental, radians (`a·cos(ωt + φ)`, `t` from the span's middle).
    pub phase_rad: f64,
    /// Peak amplitudes of harmonics 2, 3, … that were fitted.
    pub harmonics: Vec<f64>,
    /// DC offset (full scale 1.0).
    pub dc: f64,
    /// rms of the explicit residual (all but DC, tone and harmonics).
    pub residual_rms: f64,
    /// Standard deviation of each quadrature part of the fitted fundamental,
    /// from the noise next to the test frequency (`None` in idle captures).
    pub quadrature_sigma: Option<f64>,
    /// Largest absolute sample over the whole capture.
    pub peak: f64,
    /// Samples at or beyond the clipping threshold over the whole capture.
    pub clipped: usize,
    /// Mean-square residual in the analysis bands (see [`AnalysisConfig::bands`]).
    pub band_power: Vec<f64>,
    /// Largest component above the usable band over the whole capture, peak
    /// amplitude; `None` where the channel's peak rules out any component at
    /// the warning level (see [`out_of_band_peaks`]).
    pub out_of_band_peak: Option<f64>,
}

/// The analysis of one capture.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct CaptureAnalysis {
    /// The capture's file, as named in run.json.
    pub file: String,
    /// The drive, `None` for idle captures.
    pub drive: Option<Drive>,
    /// Frames in the capture.
    pub frames: usize,
    /// First frame of the analysed span.
    pub span_start: usize,
    /// Frames in the analysed span.
    pub span_frames: usize,
    /// Estimated tone frequency in Hz (drive captures).
    pub tone_hz: Option<f64>,
    /// Per channel, in channel order.
    pub channels: Vec<ChannelFit>,
    /// SINAD, THD, SFDR, ENOB and clock figures of the driven channel.
    pub drive_quality: Option<DriveQuality>,
    /// Spectra of the analysed span: the aggressor's and the victim's with
    /// the strongest tone, as `(channel, spectrum)`; filled by
    /// [`spectra_of`] for the captures that hold a frequency's worst pair,
    /// empty otherwise.
    #[serde(skip)]
    pub spectra: Vec<(u32, Spectrum)>,
}

/// Buckets of the condensed spectra kept for reports.
pub const SPECTRUM_BUCKETS: usize = 1024;

/// Analyse one capture. `file` names it in messages.
pub fn analyze_capture(
    capture: &FrameCapture,
    file: &str,
    drive: Option<Drive>,
    config: &AnalysisConfig,
) -> Result<CaptureAnalysis, String> {
    analyze_capture_with(capture, file, drive, config, true)
}

/// [`analyze_capture`], measuring the band-limited noise only when
/// `need_bands` (captures that feed the noise floors).
pub fn analyze_capture_with(
    capture: &FrameCapture,
    file: &str,
    drive: Option<Drive>,
    config: &AnalysisConfig,
    need_bands: bool,
) -> Result<CaptureAnalysis, String> {
    let fs = f64::from(capture.sample_rate_hz);
    let all = capture.frames();
    let frames = all.len();
    let nch = all.channels();
    // The driven channel on its own: it sets the span and the frequency
    // (copied out while reading when the reader was asked to).
    let aggressor: Option<Cow<[f32]>> = drive.map(|d| {
        let c = d.channel as usize - 1;
        match &capture.picked {
            Some((p, x)) if *p == c => Cow::Borrowed(x.as_slice()),
            _ => Cow::Owned(all.channel(c)),
        }
    });
    let (span, model) = match (drive, &aggressor) {
        (Some(d), Some(aggressor)) => {
            if aggressor.iter().all(|v| *v == 0.0) {
                return Err(format!(
                    "channel {} at {} Hz: silent, no tone",
                    d.channel, d.frequency_hz
                ));
            }
            let coarse = coarse_frequency(aggressor, fs, d.frequency_hz, config.frequency_search)
                .map_err(|e| format!("channel {}: {e}", d.channel))?;
            let span = steady_range(aggressor, fs, coarse)
                .map_err(|e| format!("channel {} at {} Hz: {e}", d.channel, d.frequency_hz))?;
            let est = estimate_frequency_from(
                &aggressor[span.clone()],
                fs,
                d.frequency_hz,
                config.frequency_search,
                config.max_harmonic,
                coarse,
            )
            .map_err(|e| format!("channel {}: {e}", d.channel))?;
            (span, Some(est.model))
        }
        _ => (0..frames, None),
    };
    let steady = all.slice(span.clone());
    let bands = config.bands(fs);
    let usable_edge = fs / config.usable_band_ratio;
    // Per channel over the whole capture: peak, clipping, out-of-band check.
    // Samples are counted only on channels whose peak reaches the level.
    let clip = config.clip_level as f32;
    let peaks: Vec<(f32, usize)> = (0..nch)
        .map(|c| {
            let peak = capture.peaks[c];
            let clipped = if peak >= clip {
                all.channel(c).iter().filter(|v| v.abs() >= clip).count()
            } else {
                0
            };
            (peak, clipped)
        })
        .collect();
    let out_of_band = out_of_band_peaks(
        all,
        &capture.peaks,
        dbfs_to_amplitude(config.out_of_band_warn_dbfs),
        fs,
        usable_edge,
    );
    let len = span.len() as f64;
    // Band-limited floors come from victims.
    let driven = drive.map(|d| d.channel as usize - 1);
    let victims: Vec<usize> = (0..nch)
        .filter(|c| need_bands && Some(*c) != driven)
        .collect();
    let channels: Vec<ChannelFit> = match &model {
        Some(m) => {
            let copy = match (drive, &aggressor) {
                (Some(d), Some(x)) => Some((d.channel as usize - 1, &x[span.clone()])),
                _ => None,
            };
            let (fits, stats) = fit_with_residuals(steady, m, copy).map_err(|e| e.to_string())?;
            let mut band_of = vec![Vec::new(); nch];
            let powers = residual_band_powers(steady, &fits, m, &victims, fs, &bands);
            for (c, p) in victims.iter().zip(powers) {
                band_of[*c] = p;
            }
            stats
                .into_iter()
                .zip(&fits)
                .enumerate()
                .map(|(i, (st, fit))| {
                    let sum_sq = st.sum_sq;
                    let sigma = quadrature_sigma_decimated(
                        st,
                        DECIMATION,
                        span.len(),
                        m.freq_hz(fs),
                        fs,
                        m.terms,
                    );
                    let band_power = std::mem::take(&mut band_of[i]);
                    ChannelFit {
                        channel: i as u32 + 1,
                        amplitude: fit.fundamental(),
                        phase_rad: fit.phase(0),
                        harmonics: (1..m.terms).map(|k| fit.amplitude(k)).collect(),
                        dc: fit.dc,
                        residual_rms: (sum_sq / (len - m.params() as f64)).sqrt(),
                        quadrature_sigma: sigma,
                        peak: f64::from(peaks[i].0),
                        clipped: peaks[i].1,
                        band_power,
                        out_of_band_peak: out_of_band[i],
                    }
                })
                .collect()
        }
        None => (0..nch)
            .map(|i| {
                let x = steady.channel(i);
                let mean = x.iter().map(|v| f64::from(*v)).sum::<f64>() / len;
                let residual: Vec<f64> = x.iter().map(|v| f64::from(*v) - mean).collect();
                let ss: f64 = residual.iter().map(|r| r * r).sum();
                let band_power = if need_bands {
                    band_powers(&residual, fs, &bands)
                } else {
                    Vec::new()
                };
                ChannelFit {
                    channel: i as u32 + 1,
                    amplitude: 0.0,
                    phase_rad: 0.0,
                    harmonics: Vec::new(),
                    dc: mean,
                    residual_rms: (ss / (len - 1.0)).sqrt(),
                    quadrature_sigma: None,
                    peak: f64::from(peaks[i].0),
                    clipped: peaks[i].1,
                    band_power,
                    out_of_band_peak: out_of_band[i],
                }
            })
            .collect(),
    };
    let mut quality = None;
    if let (Some(d), Some(m), Some(aggressor)) = (drive, &model, &aggressor) {
        quality = drive_quality(
            &aggressor[span.clone()],
            fs,
            d.channel,
            d.frequency_hz,
            m.freq_hz(fs),
            config.jitter_s,
        );
    }
    Ok(CaptureAnalysis {
        file: file.to_string(),
        drive,
        frames,
        span_start: span.start,
        span_frames: span.len(),
        tone_hz: model.map(|m: ToneModel| m.freq_hz(fs)),
        channels,
        drive_quality: quality,
        spectra: Vec::new(),
    })
}

/// The spectra of `analysis`'s span (its aggressor's, and that of the
/// victim with the strongest tone) from the capture's frames. They are
/// kept for the captures that hold a frequency's worst pair.
pub fn spectra_of(capture: &FrameCapture, analysis: &CaptureAnalysis) -> Vec<(u32, Spectrum)> {
    let mut spectra = Vec::new();
    let Some(d) = analysis.drive else {
        return spectra;
    };
    let fs = f64::from(capture.sample_rate_hz);
    let span = analysis.span_start..analysis.span_start + analysis.span_frames;
    let steady = capture.frames().slice(span);
    let loudest = analysis
        .channels
        .iter()
        .filter(|c| c.channel != d.channel)
        .max_by(|a, b| a.amplitude.total_cmp(&b.amplitude))
        .map(|c| c.channel);
    let wanted: Vec<u32> = std::iter::once(d.channel).chain(loudest).collect();
    spectra.par_extend(wanted.par_iter().filter_map(|&ch| {
        let x = steady.channel(ch as usize - 1);
        log_spectrum(&x, fs, SPECTRUM_BUCKETS).map(|s| (ch, s))
    }));
    spectra
}
