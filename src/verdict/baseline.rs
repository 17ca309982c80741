//! Drift against an earlier results folder of the same front end.
//!
//! Drift is current minus baseline, dB. For separation a negative drift is a
//! loss; for a noise floor a positive drift (a higher floor) is. The question
//! asked is "what got worse beyond the tolerance?":
//!
//! - a pair **got worse** (fail) when its loss exceeds the tolerance by more
//!   than the combined expanded uncertainty of both runs
//!   (drift + u95 < −tolerance);
//! - it is **undecided** (inconclusive) when its loss exceeds the tolerance
//!   but not by more than that uncertainty;
//! - otherwise it **holds** (pass), however large its uncertainty: a pair far
//!   down at the noise floor may carry several dB of it.
//!
//! A floor-limited pair of the baseline counts at its bound: the baseline
//! showed no more than that. A floor-limited pair of the current run is a
//! lower bound: it passes when even the bound is within tolerance of the
//! baseline, and is inconclusive otherwise.

use super::select::{fmt_hz, THIRD_OCTAVE_HALF};
use super::{times, Outcome, VerdictError};
use crate::run::read::PairRow;
use crate::run::ResultsFolder;
use serde::Serialize;
use std::path::PathBuf;

/// The default tolerance, dB.
pub const DEFAULT_TOLERANCE_DB: f64 = 3.0;

/// Which part of two runs to compare when they differ.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct Selection {
    /// Channel numbers to keep (a pair is kept when both its channels are).
    pub channels: Option<Vec<u32>>,
    /// Nominal frequencies to keep; each stands for its third-octave band
    /// and must find exactly one test frequency in each run.
    pub frequencies_hz: Option<Vec<f64>>,
}

/// One pair's drift.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct PairDrift {
    /// Test frequency of the current run, Hz.
    pub frequency_hz: f64,
    /// Test frequency of the baseline, Hz.
    pub baseline_frequency_hz: f64,
    /// Driven channel.
    pub aggressor: u32,
    /// Victim channel.
    pub victim: u32,
    /// Current separation, dB.
    pub current_db: f64,
    /// The current figure is a lower bound.
    pub current_floor_limited: bool,
    /// Baseline separation, dB.
    pub baseline_db: f64,
    /// The baseline figure is a lower bound.
    pub baseline_floor_limited: bool,
    /// Current minus baseline, dB (a lower bound of the drift when the
    /// current figure is).
    pub drift_db: f64,
    /// Combined expanded uncertainty of the drift, dB.
    pub u95_db: f64,
    /// Pass (within tolerance), fail (worse beyond it) or inconclusive.
    pub outcome: Outcome,
    /// What would settle an inconclusive pair.
    pub settle: Option<String>,
}

/// One channel's noise floor drift.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct FloorDrift {
    /// Channel number.
    pub channel: u32,
    /// Current floor, dBFS.
    pub current_dbfs: f64,
    /// Baseline floor, dBFS.
    pub baseline_dbfs: f64,
    /// Current minus baseline, dB (positive: noisier now).
    pub drift_db: f64,
    /// Fail when the floor rose by more than the tolerance.
    pub outcome: Outcome,
}

/// A comparison with a baseline.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct BaselineReport {
    /// The baseline results folder.
    pub baseline_dir: PathBuf,
    /// The tolerance, dB.
    pub tolerance_db: f64,
    /// Channels compared.
    pub channels: Vec<u32>,
    /// Test frequencies compared: (current, baseline), Hz.
    pub frequencies_hz: Vec<(f64, f64)>,
    /// Per pair.
    pub pairs: Vec<PairDrift>,
    /// Baseline pairs the current run lacks (frequency, aggressor, victim).
    pub missing_now: Vec<(f64, u32, u32)>,
    /// Per channel.
    pub floors: Vec<FloorDrift>,
    /// Notes for people (a different serial number, …).
    pub notes: Vec<String>,
    /// The worst outcome; inconclusive when pairs are missing now.
    pub outcome: Outcome,
}

impl BaselineReport {
    /// The pairs that did not pass, fails first, then by drift (most
    /// negative first).
    pub fn not_passing(&self) -> Vec<&PairDrift> {
        let mut bad: Vec<&PairDrift> = self
            .pairs
            .iter()
            .filter(|p| p.outcome != Outcome::Pass)
            .collect();
        bad.sort_by(|x, y| {
            y.outcome
                .cmp(&x.outcome)
                .then(x.drift_db.total_cmp(&y.drift_db))
        });
        bad
    }
}

fn mismatch(message: String) -> VerdictError {
    VerdictError::Mismatch { message }
}

fn list_hz(f: &[f64]) -> String {
    f.iter().map(|&f| fmt_hz(f)).collect::<Vec<_>>().join(", ")
}

/// Pair up the test frequencies of the two runs.
fn match_frequencies(
    current: &ResultsFolder,
    baseline: &ResultsFolder,
    selection: &Selection,
) -> Result<Vec<(f64, f64)>, VerdictError> {
    let (fc, fb) = (current.frequencies(), baseline.frequencies());
    let Some(wanted) = &selection.frequencies_hz else {
        if fc != fb {
            return Err(mismatch(format!(
                "the runs have different test frequencies (current: {} Hz; baseline {}: {} Hz); choose common ones with --frequencies",
                list_hz(&fc),
                baseline.dir.display(),
                list_hz(&fb)
            )));
        }
        return Ok(fc.into_iter().map(|f| (f, f)).collect());
    };
    let pick = |set: &[f64], f: f64, which: &str| -> Result<f64, VerdictError> {
        let hits: Vec<f64> = set
            .iter()
            .copied()
            .filter(|&t| t >= f / THIRD_OCTAVE_HALF && t <= f * THIRD_OCTAVE_HALF)
            .collect();
        match hits.as_slice() {
            [one] => Ok(*one),
            [] => Err(mismatch(format!(
                "the {which} run has no test frequency in the third-octave band of {} Hz (it has {} Hz)",
                fmt_hz(f),
                list_hz(set)
            ))),
            _ => Err(mismatch(format!(
                "the {which} run has several test frequencies in the third-octave band of {} Hz ({} Hz); name one exactly",
                fmt_hz(f),
                list_hz(&hits)
            ))),
        }
    };
    wanted
        .iter()
        .map(|&f| Ok((pick(&fc, f, "current")?, pick(&fb, f, "baseline")?)))
        .collect()
}

fn match_channels(
    current: &ResultsFolder,
    baseline: &ResultsFolder,
    selection: &Selection,
) -> Result<Vec<u32>, VerdictError> {
    let (nc, nb) = (
        current.channel_count() as u32,
        baseline.channel_count() as u32,
    );
    match &selection.channels {
        None if nc != nb => Err(mismatch(format!(
            "the runs have different channel counts (current: {nc}; baseline {}: {nb}); choose common channels with --channels",
            baseline.dir.display()
        ))),
        None => Ok((1..=nc).collect()),
        Some(list) => {
            if let Some(c) = list.iter().find(|&&c| c == 0 || c > nc.min(nb)) {
                return Err(mismatch(format!(
                    "channel {c} is not in both runs (current has 1 to {nc}, baseline 1 to {nb})"
                )));
            }
            let mut v = list.clone();
            v.sort_unstable();
            v.dedup();
            Ok(v)
        }
    }
}

/// Compare `current` with `baseline`.
pub fn compare(
    current: &ResultsFolder,
    baseline: &ResultsFolder,
    tolerance_db: f64,
    selection: &Selection,
) -> Result<BaselineReport, VerdictError> {
    if !(tolerance_db.is_finite() && tolerance_db >= 0.0) {
        return Err(mismatch(format!(
            "the tolerance {tolerance_db} dB must be a number of 0 or more"
        )));
    }
    let freqs = match_frequencies(current, baseline, selection)?;
    let channels = match_channels(current, baseline, selection)?;
    let keep = |p: &PairRow| channels.contains(&p.aggressor) && channels.contains(&p.victim);
    let mut pairs = Vec::new();
    let mut missing_now = Vec::new();
    let lookup = current.pair_lookup();
    for &(fc, fb) in &freqs {
        for b in baseline
            .pairs
            .iter()
            .filter(|p| p.frequency_hz == fb && keep(p))
        {
            match lookup.get(fc, b.aggressor, b.victim) {
                Some(c) => pairs.push(pair_drift(c, b, tolerance_db)),
                None => missing_now.push((fb, b.aggressor, b.victim)),
            }
        }
    }
    pairs.sort_by(|a, b| {
        a.frequency_hz
            .total_cmp(&b.frequency_hz)
            .then(a.aggressor.cmp(&b.aggressor))
            .then(a.victim.cmp(&b.victim))
    });
    let floors: Vec<FloorDrift> = channels
        .iter()
        .map(|&ch| {
            let c = current.channels[ch as usize - 1].noise_floor_dbfs;
            let b = baseline.channels[ch as usize - 1].noise_floor_dbfs;
            FloorDrift {
                channel: ch,
                current_dbfs: c,
                baseline_dbfs: b,
                drift_db: c - b,
                outcome: if c - b > tolerance_db {
                    Outcome::Fail
                } else {
                    Outcome::Pass
                },
            }
        })
        .collect();
    let mut notes = Vec::new();
    for key in ["serial", "label"] {
        let (c, b) = (current.front_end(key), baseline.front_end(key));
        if c != b {
            notes.push(format!(
                "front end {key} differs: \"{}\" now, \"{}\" in the baseline; is it the same front end?",
                c.unwrap_or("not recorded"),
                b.unwrap_or("not recorded")
            ));
        }
    }
    if !missing_now.is_empty() {
        notes.push(format!(
            "{} pairs of the baseline were not measured in the current run",
            missing_now.len()
        ));
    }
    let outcome = Outcome::worst(
        pairs
            .iter()
            .map(|p| p.outcome)
            .chain(floors.iter().map(|f| f.outcome))
            .chain((!missing_now.is_empty()).then_some(Outcome::Inconclusive)),
    );
    Ok(BaselineReport {
        baseline_dir: baseline.dir.clone(),
        tolerance_db,
        channels,
        frequencies_hz: freqs,
        pairs,
        missing_now,
        floors,
        notes,
        outcome,
    })
}

/// One pair's drift and outcome (see the module text for the rules).
pub fn pair_drift(c: &PairRow, b: &PairRow, tolerance_db: f64) -> PairDrift {
    let drift = c.separation_db - b.separation_db;
    let u = c
        .separation_u95_db
        .unwrap_or(0.0)
        .hypot(b.separation_u95_db.unwrap_or(0.0));
    let (outcome, settle) = if c.floor_limited {
        if drift >= -tolerance_db {
            (Outcome::Pass, None)
        } else {
            let short = -tolerance_db - drift;
            (
                Outcome::Inconclusive,
                Some(format!(
                    "the current figure is a lower bound {:.1} dB short of the baseline less the tolerance; a record {} longer lowers the detection limit enough",
                    short,
                    times(10f64.powf(short / 10.0))
                )),
            )
        }
    } else if drift + u < -tolerance_db {
        (Outcome::Fail, None)
    } else if drift >= -tolerance_db {
        (Outcome::Pass, None)
    } else {
        let margin = (drift + tolerance_db).abs().max(1e-9);
        (
            Outcome::Inconclusive,
            Some(format!(
                "drift {drift:.2} ± {u:.2} dB lies beyond the tolerance, but not by more than its uncertainty; records {} longer (both runs) would tell if the drift holds",
                times((u / margin).powi(2))
            )),
        )
    };
    PairDrift {
        frequency_hz: c.frequency_hz,
        baseline_frequency_hz: b.frequency_hz,
        aggressor: c.aggressor,
        victim: c.victim,
        current_db: c.separation_db,
        current_floor_limited: c.floor_limited,
        baseline_db: b.separation_db,
        baseline_floor_limited: b.floor_limited,
        drift_db: drift,
        u95_db: u,
        outcome,
        settle,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn row(sep: f64, floor: bool, u: Option<f64>) -> PairRow {
        PairRow {
            frequency_hz: 1000.0,
            aggressor: 1,
            victim: 2,
            separation_db: sep,
            victim_dbfs: -sep,
            floor_limited: floor,
            separation_u95_db: u,
            aggressor_dbfs: None,
            detection_limit_dbfs: None,
        }
    }

    #[test]
    fn drift_rules() {
        use Outcome::*;
        let b = row(100.0, false, Some(0.3));
        assert_eq!(
            pair_drift(&row(98.0, false, Some(0.4)), &b, 3.0).outcome,
            Pass
        );
        assert_eq!(
            pair_drift(&row(96.0, false, Some(0.4)), &b, 3.0).outcome,
            Fail
        );
        // −3.2 ± 0.5 straddles −3.
        assert_eq!(
            pair_drift(&row(96.8, false, Some(0.4)), &b, 3.0).outcome,
            Inconclusive
        );
        // A current lower bound within tolerance passes; far below, inconclusive.
        assert_eq!(pair_drift(&row(99.0, true, None), &b, 3.0).outcome, Pass);
        let d = pair_drift(&row(90.0, true, None), &b, 3.0);
        assert_eq!(d.outcome, Inconclusive);
        assert!(d.settle.unwrap().contains("lower bound"));
        // A baseline bound counts as its value.
        assert_eq!(
            pair_drift(&row(140.0, false, Some(1.0)), &row(150.0, true, None), 3.0).outcome,
            Fail
        );
        // Improvements never fail.
        assert_eq!(
            pair_drift(&row(120.0, false, Some(0.1)), &b, 0.0).outcome,
            Pass
        );
    }
}
