//! From a run folder to results: per-capture fits, per-pair separation with
//! detection limits and uncertainty, per-channel noise floors, warnings and
//! the leakage matrix per test frequency.

pub mod capture;
pub mod common;
pub mod coupling;
pub mod export;
pub mod quality;
pub mod steady;

pub use capture::{analyze_capture, CaptureAnalysis, ChannelFit};

use crate::dsp::{amplitude_to_dbfs, power_to_dbfs};
use crate::run::{read_capture, read_frames_reusing, Manifest, RunError};
use rayon::prelude::*;
use serde::Serialize;
use std::path::{Path, PathBuf};
use thiserror::Error;

/// Without an idle capture, band-limited floors come from the victims of
/// this many drive captures (enough for a stable mean, cheap on large runs).
pub const BAND_SOURCES: usize = 4;

/// Settings of an analysis.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct AnalysisConfig {
    /// Highest harmonic fitted together with the fundamental.
    pub max_harmonic: usize,
    /// Detection threshold in multiples of the quadrature standard deviation.
    /// 4.3 gives about one false detection in 10,000 noise-only pairs.
    pub detection_factor: f64,
    /// Relative half-width of the frequency search around the nominal frequency.
    pub frequency_search: f64,
    /// A sample at or beyond this fraction of full scale counts as clipped.
    pub clip_level: f64,
    /// Warn when the aggressor's tone lies less than this many dB above its
    /// own detection limit.
    pub weak_aggressor_margin_db: f64,
    /// Warn when the aggressor's tone lies this many dB below the nominal
    /// level of run.json (a wrong patch, a muted output).
    pub below_nominal_db: f64,
    /// Warn when a victim's residual exceeds its noise floor by this many dB.
    pub spurious_margin_db: f64,
    /// Warn when the aggressor's tone-to-residual ratio is below this, dB.
    pub aggressor_purity_db: f64,
    /// The usable band ends at fs divided by this (2.56 is customary for
    /// noise and vibration analysers).
    pub usable_band_ratio: f64,
    /// Report an A-weighted noise floor (IEC 61672-1) over 20 Hz to 20 kHz.
    pub a_weighting: bool,
    /// Stated rms sampling jitter for the jitter-limited SNR, seconds.
    pub jitter_s: f64,
    /// Warn when a component above the usable band reaches this level, dBFS.
    pub out_of_band_warn_dbfs: f64,
}

impl AnalysisConfig {
    /// The bands whose residual power is measured on every channel: the
    /// usable band (0 Hz to fs/ratio), then the A-weighted audio band when enabled.
    pub fn bands(&self, sample_rate_hz: f64) -> Vec<crate::dsp::psd::Band> {
        use crate::dsp::psd::Band;
        let mut b = vec![Band {
            lo_hz: 0.0,
            hi_hz: sample_rate_hz / self.usable_band_ratio,
            weighting: None,
        }];
        if self.a_weighting {
            b.push(Band {
                lo_hz: 20.0,
                hi_hz: 20_000f64.min(sample_rate_hz / 2.0),
                weighting: Some(crate::dsp::weighting::a_weighting_power),
            });
        }
        b
    }
}

impl Default for AnalysisConfig {
    fn default() -> Self {
        Self {
            max_harmonic: 5,
            detection_factor: 4.3,
            frequency_search: 0.01,
            clip_level: 0.999,
            weak_aggressor_margin_db: 40.0,
            below_nominal_db: 20.0,
            usable_band_ratio: 2.56,
            a_weighting: true,
            jitter_s: 100e-12,
            out_of_band_warn_dbfs: -10.0,
            spurious_margin_db: 10.0,
            aggressor_purity_db: 40.0,
        }
    }
}

/// Why an analysis failed.
#[derive(Debug, Error)]
pub enum AnalysisError {
    /// The run folder could not be read.
    #[error(transparent)]
    Run(#[from] RunError),
    /// A capture could not be analysed.
    #[error("{path}: {message}")]
    Capture {
        /// The capture file.
        path: PathBuf,
        /// What went wrong.
        message: String,
    },
}

/// One (frequency, aggressor, victim) result.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Pair {
    /// Nominal test frequency, Hz.
    pub frequency_hz: f64,
    /// Driven channel.
    pub aggressor: u32,
    /// Terminated channel.
    pub victim: u32,
    /// Separation in dB; a lower bound when `floor_limited`.
    pub separation_db: f64,
    /// Victim tone level in dBFS, or the detection limit when `floor_limited`.
    pub victim_dbfs: f64,
    /// The victim tone was not distinguishable from noise.
    pub floor_limited: bool,
    /// Expanded uncertainty (k = 2, about 95 %) of `separation_db`, dB; `None`
    /// for floor-limited pairs, whose figure is a bound.
    pub separation_u95_db: Option<f64>,
    /// Aggressor tone level, dBFS.
    pub aggressor_dbfs: f64,
    /// The victim's detection limit, dBFS.
    pub detection_limit_dbfs: f64,
    /// Estimated actual tone frequency, Hz.
    pub tone_hz: f64,
    /// The capture's file.
    pub capture: String,
}

/// A channel's broadband noise floor.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ChannelFloor {
    /// Channel number.
    pub channel: u32,
    /// rms of the residual over 0 Hz to fs/2, dBFS.
    pub noise_floor_dbfs: f64,
    /// The same as an average density over that band, dBFS/√Hz.
    pub noise_density_dbfs_per_rthz: f64,
    /// Upper edge of the band the floor covers, Hz.
    pub band_hz: f64,
    /// "idle" or "victim": which captures the floor comes from.
    pub source: &'static str,
    /// DC offset, full scale 1.0 (mean over the captures used).
    pub dc_offset: f64,
    /// Clipped samples over all captures.
    pub clipped: usize,
    /// Dynamic range: a full-scale sine (0 dBFS) over the broadband floor, dB.
    pub dynamic_range_db: f64,
    /// Upper edge of the usable band, Hz.
    pub usable_band_hz: f64,
    /// Noise over 0 Hz to the usable band's edge, dBFS.
    pub usable_noise_dbfs: f64,
    /// Average density over the usable band, dBFS/√Hz.
    pub usable_density_dbfs_per_rthz: f64,
    /// Dynamic range over the usable band, dB.
    pub usable_dynamic_range_db: f64,
    /// A-weighted noise over 20 Hz to 20 kHz (IEC 61672-1), dBFS.
    pub a_weighted_noise_dbfs: Option<f64>,
    /// A-weighted dynamic range, dB.
    pub a_weighted_dynamic_range_db: Option<f64>,
}

/// Something the engineer should look at.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Warning {
    /// Short code: `clipping`, `weak-aggressor`, `aggressor-impure`,
    /// `spurious`, `frequency-offset`.
    pub kind: &'static str,
    /// The capture concerned, if any.
    pub capture: Option<String>,
    /// The channel concerned, if any.
    pub channel: Option<u32>,
    /// A sentence for people.
    pub message: String,
}

/// The worst pair at one frequency.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct FrequencySummary {
    /// Nominal test frequency, Hz.
    pub frequency_hz: f64,
    /// Pairs measured.
    pub pairs: usize,
    /// Of which floor-limited.
    pub floor_limited: usize,
    /// The pair with the smallest separation (a floor-limited bound counts as its value).
    pub worst: Pair,
}

/// Everything an analysis produces.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct RunResults {
    /// The run's manifest.
    pub manifest: Manifest,
    /// Settings used.
    pub config: AnalysisConfig,
    /// Per-capture fits.
    pub captures: Vec<CaptureAnalysis>,
    /// Per-pair results, by frequency, aggressor, victim.
    pub pairs: Vec<Pair>,
    /// Per-channel floors.
    pub floors: Vec<ChannelFloor>,
    /// Worst pair per frequency.
    pub per_frequency: Vec<FrequencySummary>,
    /// Driven-channel quality per drive capture, by frequency and channel.
    pub drive_quality: Vec<quality::DriveQuality>,
    /// Coupling against frequency per ordered pair.
    pub coupling: Vec<coupling::CouplingFit>,
    /// Gain match and skew from common-drive captures.
    pub common: Vec<common::CommonDrive>,
    /// Warnings.
    pub warnings: Vec<Warning>,
}

impl RunResults {
    /// The pairs indexed by (frequency, aggressor, victim), for many lookups.
    pub fn pair_lookup(&self) -> crate::run::PairLookup<'_, Pair> {
        crate::run::PairLookup::new(&self.pairs, |p| (p.frequency_hz, p.aggressor, p.victim))
    }

    /// The pair at (frequency, aggressor, victim), if measured.
    pub fn pair(&self, frequency_hz: f64, aggressor: u32, victim: u32) -> Option<&Pair> {
        self.pairs.iter().find(|p| {
            p.frequency_hz == frequency_hz && p.aggressor == aggressor && p.victim == victim
        })
    }
}

/// Analyse every capture of the run in `run_dir`. `progress` is called once
/// per finished capture (from worker threads).
pub fn analyze_run(
    run_dir: &Path,
    config: &AnalysisConfig,
    progress: &(dyn Fn() + Sync),
) -> Result<RunResults, AnalysisError> {
    let manifest = Manifest::load(run_dir)?;
    let nch = manifest.channels.len();
    let has_idle = manifest.captures.iter().any(|c| c.drive.is_none());
    let band_sources: Vec<&str> = manifest
        .captures
        .iter()
        .take(BAND_SOURCES)
        .map(|c| c.file.as_str())
        .collect();
    // Each capture is read into a frames buffer that an earlier one has
    // left (at most one per worker), so pages are not faulted in afresh.
    let buffers: std::sync::Mutex<Vec<Vec<f32>>> = std::sync::Mutex::new(Vec::new());
    let take_buffer = || {
        buffers
            .lock()
            .map(|mut b| b.pop().unwrap_or_default())
            .unwrap_or_default()
    };
    let captures = manifest
        .captures
        .par_iter()
        .map(|entry| {
            let path = manifest.capture_path(run_dir, entry);
            let buffer = take_buffer();
            let cap = read_frames_reusing(
                &path,
                nch,
                manifest.sample_rate_hz,
                buffer,
                entry.drive.map(|d| d.channel as usize - 1),
            )?;
            // Band-limited floors come from idle captures when there are
            // any, else from the victims of the first few drive captures.
            let need_bands =
                entry.drive.is_none() || (!has_idle && band_sources.contains(&entry.file.as_str()));
            let res =
                capture::analyze_capture_with(&cap, &entry.file, entry.drive, config, need_bands)
                    .map_err(|message| AnalysisError::Capture { path, message });
            if let Ok(mut b) = buffers.lock() {
                b.push(cap.data);
            }
            progress();
            res
        })
        .collect::<Result<Vec<_>, _>>()?;
    let common = manifest
        .common_drive
        .par_iter()
        .map(|entry| {
            let path = run_dir.join(&entry.file);
            let cap = read_capture(&path, nch, manifest.sample_rate_hz)?;
            let res = common::analyze_common(&cap, entry, config)
                .map(|mut c| {
                    c.file = entry.file.clone();
                    c
                })
                .map_err(|message| AnalysisError::Capture { path, message });
            progress();
            res
        })
        .collect::<Result<Vec<_>, _>>()?;
    let mut results = assemble(manifest, config.clone(), captures);
    results.common = common;
    // Spectra for the reports: only the capture of each frequency's worst
    // pair, read again (one capture per frequency rather than two spectra
    // for every capture).
    let worst: Vec<usize> = results
        .per_frequency
        .iter()
        .filter_map(|f| {
            results
                .captures
                .iter()
                .position(|c| c.file == f.worst.capture)
        })
        .collect();
    let spectra: Vec<(usize, Vec<(u32, crate::dsp::spectrum::Spectrum)>)> = worst
        .par_iter()
        .map(|&i| {
            let analysis = &results.captures[i];
            let path = run_dir.join(&analysis.file);
            let buffer = take_buffer();
            let cap =
                read_frames_reusing(&path, nch, results.manifest.sample_rate_hz, buffer, None)?;
            Ok((i, capture::spectra_of(&cap, analysis)))
        })
        .collect::<Result<_, AnalysisError>>()?;
    for (i, s) in spectra {
        results.captures[i].spectra = s;
    }
    Ok(results)
}

/// Build pairs, floors and warnings from per-capture analyses.
pub fn assemble(
    manifest: Manifest,
    config: AnalysisConfig,
    captures: Vec<CaptureAnalysis>,
) -> RunResults {
    let floors = floors(&manifest, &captures, &config);
    let mut warnings = Vec::new();
    let mut pairs = Vec::new();
    for cap in &captures {
        check_clipping(cap, &config, &mut warnings);
        check_out_of_band(cap, manifest.sample_rate_hz, &config, &mut warnings);
        let Some(drive) = cap.drive else { continue };
        let tone_hz = cap.tone_hz.unwrap_or(drive.frequency_hz);
        let agg = &cap.channels[drive.channel as usize - 1];
        let agg_dbfs = amplitude_to_dbfs(agg.amplitude);
        let agg_rel_u = agg.quadrature_sigma.unwrap_or(0.0) / agg.amplitude;
        check_drive(cap, drive, agg, tone_hz, &floors, &config, &mut warnings);
        for v in cap.channels.iter().filter(|c| c.channel != drive.channel) {
            let sigma = v
                .quadrature_sigma
                .unwrap_or(v.residual_rms * (2.0 / cap.span_frames as f64).sqrt());
            let limit = config.detection_factor * sigma;
            let limit_dbfs = amplitude_to_dbfs(limit);
            // A NaN amplitude or limit counts as floor-limited.
            #[allow(clippy::neg_cmp_op_on_partial_ord)]
            let floor_limited = !(v.amplitude > limit);
            let (victim_dbfs, u95) = if floor_limited {
                (limit_dbfs, None)
            } else {
                let rel = (sigma / v.amplitude).hypot(agg_rel_u);
                (
                    amplitude_to_dbfs(v.amplitude),
                    Some(2.0 * 20.0 / std::f64::consts::LN_10 * rel),
                )
            };
            pairs.push(Pair {
                frequency_hz: drive.frequency_hz,
                aggressor: drive.channel,
                victim: v.channel,
                separation_db: agg_dbfs - victim_dbfs,
                victim_dbfs,
                floor_limited,
                separation_u95_db: u95,
                aggressor_dbfs: agg_dbfs,
                detection_limit_dbfs: limit_dbfs,
                tone_hz,
                capture: cap.file.clone(),
            });
        }
    }
    pairs.sort_by(|a, b| {
        a.frequency_hz
            .total_cmp(&b.frequency_hz)
            .then(a.aggressor.cmp(&b.aggressor))
            .then(a.victim.cmp(&b.victim))
    });
    let per_frequency = manifest
        .frequencies()
        .into_iter()
        .filter_map(|f| {
            let at: Vec<&Pair> = pairs.iter().filter(|p| p.frequency_hz == f).collect();
            let worst = at
                .iter()
                .min_by(|a, b| a.separation_db.total_cmp(&b.separation_db))?;
            Some(FrequencySummary {
                frequency_hz: f,
                pairs: at.len(),
                floor_limited: at.iter().filter(|p| p.floor_limited).count(),
                worst: (*worst).clone(),
            })
        })
        .collect();
    let mut drive_quality: Vec<quality::DriveQuality> = captures
        .iter()
        .filter_map(|c| c.drive_quality.clone())
        .collect();
    drive_quality.sort_by(|a, b| {
        a.frequency_hz
            .total_cmp(&b.frequency_hz)
            .then(a.channel.cmp(&b.channel))
    });
    let coupling = if manifest.frequencies().len() >= 3 {
        coupling::fit_all(&pairs)
    } else {
        Vec::new()
    };
    RunResults {
        drive_quality,
        coupling,
        common: Vec::new(),
        manifest,
        config,
        captures,
        pairs,
        floors,
        per_frequency,
        warnings,
    }
}

/// Broadband floors: from idle captures when the run has any, else from the
/// captures where the channel was a victim; mean square over the captures.
fn floors(
    manifest: &Manifest,
    captures: &[CaptureAnalysis],
    config: &AnalysisConfig,
) -> Vec<ChannelFloor> {
    let fs = f64::from(manifest.sample_rate_hz);
    let has_idle = captures.iter().any(|c| c.drive.is_none());
    (1..=manifest.channels.len() as u32)
        .map(|ch| {
            let used: Vec<&ChannelFit> = captures
                .iter()
                .filter(|c| match c.drive {
                    None => true,
                    Some(d) => !has_idle && d.channel != ch,
                })
                .map(|c| &c.channels[ch as usize - 1])
                .collect();
            let n = used.len().max(1) as f64;
            let power = used.iter().map(|f| f.residual_rms.powi(2)).sum::<f64>() / n;
            let floor = power_to_dbfs(power);
            let band = |i: usize| {
                let with: Vec<f64> = used
                    .iter()
                    .filter_map(|f| f.band_power.get(i).copied())
                    .collect();
                with.iter().sum::<f64>() / with.len().max(1) as f64
            };
            let usable_hz = fs / config.usable_band_ratio;
            let usable = power_to_dbfs(band(0));
            let a_weighted = config.a_weighting.then(|| power_to_dbfs(band(1)));
            ChannelFloor {
                channel: ch,
                noise_floor_dbfs: floor,
                noise_density_dbfs_per_rthz: floor - 10.0 * (fs / 2.0).log10(),
                band_hz: fs / 2.0,
                source: if has_idle { "idle" } else { "victim" },
                dc_offset: used.iter().map(|f| f.dc).sum::<f64>() / n,
                clipped: captures
                    .iter()
                    .map(|c| c.channels[ch as usize - 1].clipped)
                    .sum(),
                dynamic_range_db: -floor,
                usable_band_hz: usable_hz,
                usable_noise_dbfs: usable,
                usable_density_dbfs_per_rthz: usable - 10.0 * usable_hz.log10(),
                usable_dynamic_range_db: -usable,
                a_weighted_noise_dbfs: a_weighted,
                a_weighted_dynamic_range_db: a_weighted.map(|a| -a),
            }
        })
        .collect()
}

fn check_out_of_band(
    cap: &CaptureAnalysis,
    sample_rate_hz: u32,
    config: &AnalysisConfig,
    warnings: &mut Vec<Warning>,
) {
    let edge = f64::from(sample_rate_hz) / config.usable_band_ratio;
    for c in &cap.channels {
        let Some(oob) = c.out_of_band_peak.map(amplitude_to_dbfs) else {
            continue;
        };
        if oob >= config.out_of_band_warn_dbfs {
            let in_band =
                amplitude_to_dbfs(c.amplitude).max(crate::dsp::rms_to_dbfs(c.residual_rms));
            warnings.push(Warning {
                kind: "out-of-band",
                capture: Some(cap.file.clone()),
                channel: Some(c.channel),
                message: format!(
                    "channel {} carries a component at {oob:.1} dBFS above the usable band ({edge:.0} Hz), near full scale while its in-band content reads only {in_band:.1} dBFS: it can overload the converter unseen; find the source (a switching supply, a modulated carrier, a generator's images), filter it before the input or lower it",
                    c.channel
                ),
            });
        }
    }
}

fn check_clipping(cap: &CaptureAnalysis, config: &AnalysisConfig, warnings: &mut Vec<Warning>) {
    for c in cap.channels.iter().filter(|c| c.clipped > 0) {
        warnings.push(Warning {
            kind: "clipping",
            capture: Some(cap.file.clone()),
            channel: Some(c.channel),
            message: format!(
                "channel {} has {} samples at or beyond {:.1} % of full scale (peak {:.2} dBFS peak); lower the level and measure again",
                c.channel,
                c.clipped,
                config.clip_level * 100.0,
                20.0 * c.peak.log10()
            ),
        });
    }
}

#[allow(clippy::too_many_arguments)]
fn check_drive(
    cap: &CaptureAnalysis,
    drive: crate::run::Drive,
    agg: &ChannelFit,
    tone_hz: f64,
    floors: &[ChannelFloor],
    config: &AnalysisConfig,
    warnings: &mut Vec<Warning>,
) {
    let mut warn = |kind, channel: Option<u32>, message: String| {
        warnings.push(Warning {
            kind,
            capture: Some(cap.file.clone()),
            channel,
            message,
        })
    };
    let offset = (tone_hz / drive.frequency_hz - 1.0) * 100.0;
    if offset.abs() > 0.5 {
        warn(
            "frequency-offset",
            Some(drive.channel),
            format!(
                "tone measured at {tone_hz:.4} Hz, {offset:+.3} % from the nominal {} Hz (more than a generator's usual 0.5 %)",
                drive.frequency_hz
            ),
        );
    }
    let below_nominal = drive.level_dbfs - amplitude_to_dbfs(agg.amplitude);
    if below_nominal > config.below_nominal_db {
        warn(
            "weak-aggressor",
            Some(drive.channel),
            format!(
                "aggressor tone on channel {} measures {:.1} dBFS, {below_nominal:.1} dB below the nominal {:.1} dBFS: check the patch, the output level and any mute",
                drive.channel,
                amplitude_to_dbfs(agg.amplitude),
                drive.level_dbfs
            ),
        );
    } else if let Some(sigma) = agg.quadrature_sigma {
        let margin =
            amplitude_to_dbfs(agg.amplitude) - amplitude_to_dbfs(config.detection_factor * sigma);
        if margin < config.weak_aggressor_margin_db {
            warn(
                "weak-aggressor",
                Some(drive.channel),
                format!(
                    "aggressor tone on channel {} is only {margin:.1} dB above its detection limit; separations from this capture cannot exceed that and are not to be trusted",
                    drive.channel
                ),
            );
        }
    }
    let purity = amplitude_to_dbfs(agg.amplitude) - crate::dsp::rms_to_dbfs(agg.residual_rms);
    if purity < config.aggressor_purity_db {
        warn(
            "aggressor-impure",
            Some(drive.channel),
            format!(
                "aggressor channel {} carries strong content besides the tone: the rest is only {purity:.1} dB below it",
                drive.channel
            ),
        );
    }
    for v in cap.channels.iter().filter(|c| c.channel != drive.channel) {
        let floor = floors[v.channel as usize - 1].noise_floor_dbfs;
        let level = crate::dsp::rms_to_dbfs(v.residual_rms);
        if floors[v.channel as usize - 1].source == "idle"
            && level > floor + config.spurious_margin_db
        {
            warn(
                "spurious",
                Some(v.channel),
                format!(
                    "victim channel {} carries strong content other than the test tone: {level:.1} dBFS besides the tone against an idle floor of {floor:.1} dBFS",
                    v.channel
                ),
            );
        }
    }
}
