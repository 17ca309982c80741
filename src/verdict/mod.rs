//! Verdicts on a results folder: pass limits (`limits`), a data sheet's
//! claims (`claims`) and drift from an earlier run of the same front end
//! (`baseline`). Everything here is pure: it takes a
//! [`crate::run::ResultsFolder`] and parsed files and returns
//! plain structs; printing and exit codes belong to the command line.
//!
//! Every check ends in one of three outcomes. A measured figure whose
//! expanded uncertainty (k = 2) straddles the limit, or a lower bound (a
//! floor-limited pair) below it, is **inconclusive**: the measurement cannot
//! tell, and the check says what would settle it.

pub mod baseline;
pub mod claims;
pub mod export;
pub mod limits;
pub mod select;

pub use select::{FrequencySpec, PairSet};

use crate::run::ResultsFolder;
use serde::{Deserialize, Serialize};
use std::path::{Path, PathBuf};
use thiserror::Error;

/// Warning kinds that leave the run's figures in doubt: a verdict that
/// would pass becomes inconclusive while any of them is present.
pub const DOUBTFUL_WARNINGS: [&str; 2] = ["clipping", "weak-aggressor"];

/// What to judge a results folder against.
#[derive(Debug, Clone, Default)]
pub struct Inputs {
    /// A limits file and its path.
    pub limits: Option<(PathBuf, limits::Limits)>,
    /// A claims file and its path.
    pub claims: Option<(PathBuf, claims::Claims)>,
    /// An earlier results folder, the tolerance in dB and the part to compare.
    pub baseline: Option<(ResultsFolder, f64, baseline::Selection)>,
}

/// Whether the run's own warnings leave its figures in doubt.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Quality {
    /// Pass, or inconclusive when a doubtful warning is present.
    pub outcome: Outcome,
    /// The doubtful warnings, as sentences.
    pub concerns: Vec<String>,
}

/// Every verdict on one results folder.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Verdict {
    /// The results folder judged.
    pub results_dir: PathBuf,
    /// The limits file, when given.
    pub limits_file: Option<PathBuf>,
    /// Its verdicts.
    pub limits: Option<limits::LimitsReport>,
    /// The claims file, when given.
    pub claims_file: Option<PathBuf>,
    /// Its verdicts.
    pub claims: Option<claims::ClaimsReport>,
    /// The comparison with a baseline, when asked.
    pub baseline: Option<baseline::BaselineReport>,
    /// The run's own warnings.
    pub quality: Quality,
    /// The worst of all.
    pub outcome: Outcome,
}

/// Judge `results` against `inputs`.
pub fn evaluate(results: &ResultsFolder, inputs: &Inputs) -> Result<Verdict, VerdictError> {
    let limits = match &inputs.limits {
        Some((path, l)) => Some(limits::evaluate(l, results, path)?),
        None => None,
    };
    let claims = inputs
        .claims
        .as_ref()
        .map(|(_, c)| claims::evaluate(c, results));
    let baseline = match &inputs.baseline {
        Some((b, tol, sel)) => Some(baseline::compare(results, b, *tol, sel)?),
        None => None,
    };
    let concerns: Vec<String> = results
        .warnings
        .iter()
        .filter(|w| DOUBTFUL_WARNINGS.contains(&w.kind.as_str()))
        .map(|w| format!("{}: {}", w.kind, w.message))
        .collect();
    let quality = Quality {
        outcome: if concerns.is_empty() {
            Outcome::Pass
        } else {
            Outcome::Inconclusive
        },
        concerns,
    };
    let outcome = Outcome::worst(
        limits
            .iter()
            .map(|l| l.outcome)
            .chain(claims.iter().map(|c| c.outcome))
            .chain(baseline.iter().map(|b| b.outcome))
            .chain([quality.outcome]),
    );
    Ok(Verdict {
        results_dir: results.dir.clone(),
        limits_file: inputs.limits.as_ref().map(|(p, _)| p.clone()),
        limits,
        claims_file: inputs.claims.as_ref().map(|(p, _)| p.clone()),
        claims,
        baseline,
        quality,
        outcome,
    })
}

/// Load the inputs named on a command line (any may be absent).
pub fn load_inputs(
    limits: Option<&Path>,
    claims: Option<&Path>,
    baseline: Option<(&Path, f64, baseline::Selection)>,
) -> Result<Inputs, VerdictError> {
    Ok(Inputs {
        limits: match limits {
            Some(p) => Some((p.to_path_buf(), limits::Limits::load(p)?)),
            None => None,
        },
        claims: match claims {
            Some(p) => Some((p.to_path_buf(), claims::Claims::load(p)?)),
            None => None,
        },
        baseline: match baseline {
            Some((dir, tol, sel)) => Some((ResultsFolder::load(dir)?, tol, sel)),
            None => None,
        },
    })
}

/// The outcome of one check, or of many combined.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash, Serialize, Deserialize)]
#[serde(rename_all = "kebab-case")]
pub enum Outcome {
    /// The requirement is met beyond the measurement's uncertainty.
    Pass,
    /// The measurement cannot tell.
    Inconclusive,
    /// The requirement is missed beyond the measurement's uncertainty.
    Fail,
}

impl Outcome {
    /// The worst of several outcomes (fail over inconclusive over pass);
    /// `Pass` for none.
    pub fn worst(outcomes: impl IntoIterator<Item = Outcome>) -> Outcome {
        outcomes.into_iter().max().unwrap_or(Outcome::Pass)
    }

    /// "pass", "inconclusive", "fail".
    pub fn word(self) -> &'static str {
        match self {
            Outcome::Pass => "pass",
            Outcome::Inconclusive => "inconclusive",
            Outcome::Fail => "fail",
        }
    }

    /// The same for a claim: "met", "inconclusive", "not met".
    pub fn claim_word(self) -> &'static str {
        match self {
            Outcome::Pass => "met",
            Outcome::Inconclusive => "inconclusive",
            Outcome::Fail => "not met",
        }
    }
}

/// A limits, claims or baseline input that cannot be used.
#[derive(Debug, Error)]
pub enum VerdictError {
    /// The file could not be read.
    #[error("{path}: {source}")]
    Io {
        /// The file.
        path: PathBuf,
        /// What the system said.
        source: std::io::Error,
    },
    /// The file is not valid TOML or breaks a rule of its format.
    #[error("{path}: {message}")]
    Invalid {
        /// The file.
        path: PathBuf,
        /// What is wrong, with the line where known.
        message: String,
    },
    /// A results folder could not be read.
    #[error(transparent)]
    Results(#[from] crate::run::RunError),
    /// Two results folders cannot be compared as asked.
    #[error("{message}")]
    Mismatch {
        /// What differs and how to choose a common part.
        message: String,
    },
}

/// Parse TOML text into `T`; errors carry the line and stay on one line.
pub(crate) fn parse_toml<T: serde::de::DeserializeOwned>(
    text: &str,
    path: &std::path::Path,
) -> Result<T, VerdictError> {
    toml::from_str(text).map_err(|e| VerdictError::Invalid {
        path: path.to_path_buf(),
        message: crate::tomltext::describe(text, &e),
    })
}

pub(crate) fn read_text(path: &std::path::Path) -> Result<String, VerdictError> {
    std::fs::read_to_string(path).map_err(|source| VerdictError::Io {
        path: path.to_path_buf(),
        source,
    })
}

/// How a figure that must be at least `limit` dB compares with it.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Judgement {
    /// The outcome.
    pub outcome: Outcome,
    /// Measured (or bound) minus limit, dB; positive is on the good side.
    pub margin_db: f64,
    /// For an inconclusive outcome, what would settle it.
    pub settle: Option<String>,
}

/// Judge a separation (or any figure where bigger is better) against a
/// minimum. `floor_limited` marks `value` as a lower bound; `u95` is its
/// expanded uncertainty otherwise (`None` counts as zero).
///
/// - bound ≥ limit: pass (the true value is at least the bound);
/// - bound < limit: inconclusive; a record `10^((limit − bound)/10)` times
///   longer lowers the detection limit, and raises the bound, by enough;
/// - value − u95 ≥ limit: pass; value + u95 < limit: fail;
/// - otherwise inconclusive: the uncertainty straddles the limit. The
///   uncertainty falls with the square root of the record length.
pub fn judge_at_least(value: f64, floor_limited: bool, u95: Option<f64>, limit: f64) -> Judgement {
    let margin_db = value - limit;
    if floor_limited {
        if margin_db >= 0.0 {
            return Judgement {
                outcome: Outcome::Pass,
                margin_db,
                settle: None,
            };
        }
        let ratio = 10f64.powf(-margin_db / 10.0);
        return Judgement {
            outcome: Outcome::Inconclusive,
            margin_db,
            settle: Some(format!(
                "lower bound {:.1} dB at the noise floor; a record {} longer lowers the detection limit by {:.1} dB (10·log10 of the length ratio)",
                value,
                times(ratio),
                -margin_db
            )),
        };
    }
    let u = u95.unwrap_or(0.0);
    let outcome = if margin_db - u >= 0.0 {
        Outcome::Pass
    } else if margin_db + u < 0.0 {
        Outcome::Fail
    } else {
        Outcome::Inconclusive
    };
    let settle = (outcome == Outcome::Inconclusive).then(|| {
        if margin_db == 0.0 {
            format!("the measured value lies on the limit (±{u:.2} dB); no record length settles it")
        } else {
            let ratio = (u / margin_db.abs()).powi(2);
            format!(
                "{value:.2} ± {u:.2} dB straddles the limit; a record {} longer shrinks the uncertainty below the {:.2} dB margin if the value holds",
                times(ratio),
                margin_db.abs()
            )
        }
    });
    Judgement {
        outcome,
        margin_db,
        settle,
    }
}

/// "3.2 times", "about 40 times", "more than 10 000 times" for a length ratio.
pub fn times(ratio: f64) -> String {
    if !ratio.is_finite() || ratio > 1e4 {
        "more than 10 000 times (out of reach: lower the noise instead)".into()
    } else if ratio < 10.0 {
        format!("{:.1} times", ratio.max(1.0))
    } else {
        format!("about {:.0} times", (ratio - 1e-9).ceil())
    }
}

/// Median of a non-empty slice (mean of the two middle values for an even
/// count).
pub fn median(values: &[f64]) -> f64 {
    let mut v = values.to_vec();
    v.sort_by(f64::total_cmp);
    let n = v.len();
    if n % 2 == 1 {
        v[n / 2]
    } else {
        (v[n / 2 - 1] + v[n / 2]) / 2.0
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn outcomes_combine_worst_first() {
        use Outcome::*;
        assert_eq!(Outcome::worst([Pass, Inconclusive, Pass]), Inconclusive);
        assert_eq!(Outcome::worst([Pass, Fail, Inconclusive]), Fail);
        assert_eq!(Outcome::worst([]), Pass);
    }

    #[test]
    fn judging_a_minimum() {
        use Outcome::*;
        // Measured with uncertainty.
        assert_eq!(judge_at_least(100.0, false, Some(0.5), 99.0).outcome, Pass);
        assert_eq!(
            judge_at_least(100.0, false, Some(0.5), 100.4).outcome,
            Inconclusive
        );
        assert_eq!(
            judge_at_least(100.0, false, Some(0.5), 99.6).outcome,
            Inconclusive
        );
        assert_eq!(judge_at_least(100.0, false, Some(0.5), 100.6).outcome, Fail);
        assert_eq!(judge_at_least(100.0, false, None, 100.0).outcome, Pass);
        // A lower bound never fails.
        assert_eq!(judge_at_least(100.0, true, None, 99.0).outcome, Pass);
        let j = judge_at_least(100.0, true, None, 110.0);
        assert_eq!(j.outcome, Inconclusive);
        assert!((j.margin_db + 10.0).abs() < 1e-12);
        // Processing gain: 10 dB more needs a record 10 times longer.
        assert!(j.settle.unwrap().contains("about 10 times"));
    }

    #[test]
    fn median_of_odd_and_even() {
        assert_eq!(median(&[3.0, 1.0, 2.0]), 2.0);
        assert_eq!(median(&[4.0, 1.0, 2.0, 3.0]), 2.5);
    }
}
