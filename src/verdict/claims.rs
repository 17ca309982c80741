//! A data sheet's claims (format `septum.claims/1`) against a results
//! folder: separation at stated frequencies (typical and/or minimum, for
//! all, adjacent or non-adjacent pairs), noise floor and dynamic range, under
//! stated conditions. See procedures/claims-example.toml.
//!
//! How a claim is read:
//!
//! - **minimum** (a guarantee): every covered pair or channel must reach it.
//!   Each pair is judged as a limit is (uncertainty and lower bounds count).
//! - **typical**: the median over the covered pairs or channels must reach
//!   it. For pairs the median is bracketed: its low end takes every measured
//!   value less its u95 and every lower bound as it stands; its high end takes
//!   the measured values plus their u95 and lower bounds as unbounded. Met
//!   when the low end reaches the claim, not met when the high end misses it,
//!   inconclusive in between.
//! - **maximum** noise floor: every channel at or below it; a typical floor:
//!   the median channel at or below it.
//!
//! Claims measured under other conditions than the run's (termination,
//! level, sample rate) cannot be settled by the run: they come out
//! inconclusive whatever the figures say.

use super::select::{fmt_hz, FrequencySpec, PairSet};
use super::{judge_at_least, median, parse_toml, read_text, times, Outcome, VerdictError};
use crate::run::read::PairRow;
use crate::run::ResultsFolder;
use serde::{Deserialize, Serialize};
use std::path::Path;

/// The claims format this version reads.
pub const CLAIMS_FORMAT: &str = "septum.claims/1";

/// Level tolerance for comparing a claimed test level with the run's drive
/// levels, dB (our choice: separation is a level ratio, so a small level
/// difference does not change it).
pub const LEVEL_TOLERANCE_DB: f64 = 1.0;

/// A claims file.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, Default)]
#[serde(deny_unknown_fields)]
pub struct Claims {
    /// `septum.claims/1` when given.
    #[serde(default)]
    pub format: Option<String>,
    /// The product the claims are for.
    #[serde(default)]
    pub product: Option<String>,
    /// Where the claims come from (document, revision, table).
    #[serde(default)]
    pub source: Option<String>,
    /// The conditions the claims are stated for.
    #[serde(default)]
    pub conditions: Conditions,
    /// Separation claims (`[[separation]]`).
    #[serde(default)]
    pub separation: Vec<SeparationClaim>,
    /// Noise floor claim.
    #[serde(default)]
    pub noise_floor: Option<FloorClaim>,
    /// Dynamic range claim.
    #[serde(default)]
    pub dynamic_range: Option<RangeClaim>,
}

/// Conditions of the claims.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, Default)]
#[serde(deny_unknown_fields)]
pub struct Conditions {
    /// How the victim inputs were terminated ("short", "50 ohm", …),
    /// compared with each channel's termination (letter case ignored).
    #[serde(default)]
    pub termination: Option<String>,
    /// Test level, dBFS, compared with the run's drive levels (±1 dB).
    #[serde(default)]
    pub level_dbfs: Option<f64>,
    /// Sample rate, Hz, compared with the run's.
    #[serde(default)]
    pub sample_rate_hz: Option<f64>,
    /// Anything else, as the data sheet words it (shown, not compared).
    #[serde(default)]
    pub text: Option<String>,
}

/// A separation claim.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SeparationClaim {
    /// A nominal frequency standing for its third-octave band, Hz.
    #[serde(default)]
    pub at_hz: Option<f64>,
    /// Lower edge of a band, Hz.
    #[serde(default)]
    pub from_hz: Option<f64>,
    /// Upper edge of a band, Hz.
    #[serde(default)]
    pub to_hz: Option<f64>,
    /// `all` (default), `adjacent` or `non-adjacent`.
    #[serde(default)]
    pub pairs: PairSet,
    /// Typical separation, dB.
    #[serde(default)]
    pub typical_db: Option<f64>,
    /// Guaranteed minimum separation, dB.
    #[serde(default)]
    pub minimum_db: Option<f64>,
    /// Free text.
    #[serde(default)]
    pub note: Option<String>,
}

impl SeparationClaim {
    /// The frequencies it covers.
    pub fn frequencies(&self) -> FrequencySpec {
        FrequencySpec {
            at_hz: self.at_hz,
            from_hz: self.from_hz,
            to_hz: self.to_hz,
        }
    }
}

/// A noise floor claim, dBFS.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct FloorClaim {
    /// Typical broadband noise floor, dBFS.
    #[serde(default)]
    pub typical_dbfs: Option<f64>,
    /// Guaranteed maximum, dBFS.
    #[serde(default)]
    pub maximum_dbfs: Option<f64>,
}

/// A dynamic range claim, dB (against −noise floor).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RangeClaim {
    /// Typical dynamic range, dB.
    #[serde(default)]
    pub typical_db: Option<f64>,
    /// Guaranteed minimum, dB.
    #[serde(default)]
    pub minimum_db: Option<f64>,
}

impl Claims {
    /// Parse a claims file; `path` names it in messages.
    pub fn parse(text: &str, path: &Path) -> Result<Self, VerdictError> {
        let claims: Claims = parse_toml(text, path)?;
        claims.validate().map_err(|message| VerdictError::Invalid {
            path: path.to_path_buf(),
            message,
        })?;
        Ok(claims)
    }

    /// Read a claims file.
    pub fn load(path: &Path) -> Result<Self, VerdictError> {
        Self::parse(&read_text(path)?, path)
    }

    /// Check the rules the types alone do not enforce.
    pub fn validate(&self) -> Result<(), String> {
        if let Some(f) = &self.format {
            if f != CLAIMS_FORMAT {
                return Err(format!(
                    "unknown format \"{f}\" (this septum reads \"{CLAIMS_FORMAT}\")"
                ));
            }
        }
        let finite = |v: Option<f64>| v.is_none_or(f64::is_finite);
        for (i, s) in self.separation.iter().enumerate() {
            s.frequencies()
                .validate()
                .map_err(|e| format!("separation[{}]: {e}", i + 1))?;
            if s.typical_db.is_none() && s.minimum_db.is_none() {
                return Err(format!(
                    "separation[{}]: give typical_db, minimum_db or both",
                    i + 1
                ));
            }
            if !finite(s.typical_db) || !finite(s.minimum_db) {
                return Err(format!("separation[{}]: figures must be numbers", i + 1));
            }
        }
        if let Some(f) = &self.noise_floor {
            if f.typical_dbfs.is_none() && f.maximum_dbfs.is_none() {
                return Err("noise_floor: give typical_dbfs, maximum_dbfs or both".into());
            }
        }
        if let Some(d) = &self.dynamic_range {
            if d.typical_db.is_none() && d.minimum_db.is_none() {
                return Err("dynamic_range: give typical_db, minimum_db or both".into());
            }
        }
        if self.separation.is_empty() && self.noise_floor.is_none() && self.dynamic_range.is_none()
        {
            return Err(
                "states no claim: give [[separation]], [noise_floor] or [dynamic_range]".into(),
            );
        }
        Ok(())
    }
}

/// One condition compared with the run.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ConditionCheck {
    /// "termination", "level", "sample rate".
    pub what: String,
    /// As claimed.
    pub claimed: String,
    /// As the run has it.
    pub measured: String,
    /// They agree.
    pub matches: bool,
}

/// One claim's verdict.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ClaimCheck {
    /// What is claimed: "separation, adjacent pairs, 1000 Hz (band 891–1122 Hz)".
    pub subject: String,
    /// `typical`, `minimum` or `maximum`.
    pub kind: &'static str,
    /// The claimed figure.
    pub claimed: f64,
    /// Its unit, "dB" or "dBFS".
    pub unit: &'static str,
    /// The measured figure set against it (worst pair or channel, or median).
    pub measured: Option<f64>,
    /// The measured figure for people: "≥ 98.1", "96.93 ± 0.01", "98.1 to 98.4".
    pub measured_text: String,
    /// Which pairs or channels and how the figure was formed.
    pub basis: String,
    /// On the good side of the claim by this much, dB (measured figure against claim).
    pub margin_db: Option<f64>,
    /// Met (pass), not met (fail) or inconclusive.
    pub outcome: Outcome,
    /// What would settle an inconclusive claim.
    pub settle: Option<String>,
}

/// Everything a claims file decides about a results folder.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ClaimsReport {
    /// The product named by the claims.
    pub product: Option<String>,
    /// Where the claims come from.
    pub source: Option<String>,
    /// Conditions compared.
    pub conditions: Vec<ConditionCheck>,
    /// Free-text conditions of the claims.
    pub conditions_text: Option<String>,
    /// One per claimed figure.
    pub claims: Vec<ClaimCheck>,
    /// The worst outcome.
    pub outcome: Outcome,
}

fn conditions(c: &Conditions, r: &ResultsFolder) -> Vec<ConditionCheck> {
    let mut out = Vec::new();
    if let Some(t) = &c.termination {
        let terms: Vec<Option<String>> = (1..=r.channel_count() as u32)
            .map(|ch| r.termination(ch))
            .collect();
        let mut distinct: Vec<String> = terms
            .iter()
            .map(|t| t.clone().unwrap_or_else(|| "not recorded".into()))
            .collect();
        distinct.sort();
        distinct.dedup();
        out.push(ConditionCheck {
            what: "termination".into(),
            claimed: t.clone(),
            measured: distinct.join(", "),
            matches: terms.iter().all(|m| {
                m.as_deref()
                    .is_some_and(|m| m.trim().eq_ignore_ascii_case(t.trim()))
            }),
        });
    }
    if let Some(l) = c.level_dbfs {
        let levels = &r.drive_levels_dbfs;
        let (lo, hi) = levels
            .iter()
            .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), &v| {
                (a.min(v), b.max(v))
            });
        out.push(ConditionCheck {
            what: "level".into(),
            claimed: format!("{l} dBFS"),
            measured: if levels.is_empty() {
                "not recorded".into()
            } else if lo == hi {
                format!("{lo} dBFS")
            } else {
                format!("{lo} to {hi} dBFS")
            },
            matches: !levels.is_empty()
                && levels.iter().all(|v| (v - l).abs() <= LEVEL_TOLERANCE_DB),
        });
    }
    if let Some(fs) = c.sample_rate_hz {
        let run = r.sample_rate_hz();
        out.push(ConditionCheck {
            what: "sample rate".into(),
            claimed: format!("{fs} Hz"),
            measured: run.map_or("not recorded".into(), |v| format!("{v} Hz")),
            matches: run == Some(fs),
        });
    }
    out
}

/// Evaluate `claims` on `results`.
pub fn evaluate(claims: &Claims, results: &ResultsFolder) -> ClaimsReport {
    let conds = conditions(&claims.conditions, results);
    let mut checks = Vec::new();
    for s in &claims.separation {
        let spec = s.frequencies();
        let subject = format!("separation, {}, {}", s.pairs.describe(), spec.describe());
        let covered: Vec<&PairRow> = results
            .pairs
            .iter()
            .filter(|p| s.pairs.covers(p) && spec.covers(p.frequency_hz))
            .collect();
        if let Some(min) = s.minimum_db {
            checks.push(minimum_separation(&subject, min, &covered, &spec, s.pairs));
        }
        if let Some(typ) = s.typical_db {
            checks.push(typical_separation(&subject, typ, &covered, &spec, s.pairs));
        }
    }
    let floors: Vec<f64> = results
        .channels
        .iter()
        .map(|c| c.noise_floor_dbfs)
        .collect();
    let worst_floor = results
        .channels
        .iter()
        .max_by(|a, b| a.noise_floor_dbfs.total_cmp(&b.noise_floor_dbfs))
        .expect("a results folder has channels");
    if let Some(f) = &claims.noise_floor {
        if let Some(max) = f.maximum_dbfs {
            checks.push(exact_check(
                "noise floor, every channel",
                "maximum",
                max,
                "dBFS",
                worst_floor.noise_floor_dbfs,
                format!("noisiest channel: {}", worst_floor.channel),
                max - worst_floor.noise_floor_dbfs,
            ));
        }
        if let Some(typ) = f.typical_dbfs {
            let m = median(&floors);
            checks.push(exact_check(
                "noise floor, median channel",
                "typical",
                typ,
                "dBFS",
                m,
                format!("median of {} channels", floors.len()),
                typ - m,
            ));
        }
    }
    if let Some(d) = &claims.dynamic_range {
        if let Some(min) = d.minimum_db {
            let dr = -worst_floor.noise_floor_dbfs;
            checks.push(exact_check(
                "dynamic range (−noise floor), every channel",
                "minimum",
                min,
                "dB",
                dr,
                format!("smallest: channel {}", worst_floor.channel),
                dr - min,
            ));
        }
        if let Some(typ) = d.typical_db {
            let m = -median(&floors);
            checks.push(exact_check(
                "dynamic range (−noise floor), median channel",
                "typical",
                typ,
                "dB",
                m,
                format!("median of {} channels", floors.len()),
                m - typ,
            ));
        }
    }
    let differing: Vec<&str> = conds
        .iter()
        .filter(|c| !c.matches)
        .map(|c| c.what.as_str())
        .collect();
    if !differing.is_empty() {
        for c in &mut checks {
            if c.outcome != Outcome::Inconclusive {
                c.outcome = Outcome::Inconclusive;
                c.settle = Some(format!(
                    "the run's {} differs from the claim's conditions: measure under those conditions",
                    differing.join(" and ")
                ));
            }
        }
    }
    let outcome = Outcome::worst(checks.iter().map(|c| c.outcome));
    ClaimsReport {
        product: claims.product.clone(),
        source: claims.source.clone(),
        conditions: conds,
        conditions_text: claims.conditions.text.clone(),
        claims: checks,
        outcome,
    }
}

fn no_pairs(
    subject: &str,
    kind: &'static str,
    claimed: f64,
    spec: &FrequencySpec,
    set: PairSet,
) -> ClaimCheck {
    ClaimCheck {
        subject: subject.to_string(),
        kind,
        claimed,
        unit: "dB",
        measured: None,
        measured_text: "not measured".into(),
        basis: format!(
            "no {} at a test frequency in {}",
            set.describe(),
            spec.describe()
        ),
        margin_db: None,
        outcome: Outcome::Inconclusive,
        settle: Some(format!(
            "measure at a test frequency in {}",
            spec.describe()
        )),
    }
}

fn pair_text(p: &PairRow) -> String {
    match (p.floor_limited, p.separation_u95_db) {
        (true, _) => format!("≥ {:.1}", p.separation_db),
        (false, Some(u)) if u < 0.005 => format!("{:.2} ± <0.01", p.separation_db),
        (false, Some(u)) => format!("{:.2} ± {u:.2}", p.separation_db),
        (false, None) => format!("{:.2}", p.separation_db),
    }
}

fn minimum_separation(
    subject: &str,
    min: f64,
    covered: &[&PairRow],
    spec: &FrequencySpec,
    set: PairSet,
) -> ClaimCheck {
    let Some(worst) = covered
        .iter()
        .min_by(|a, b| a.separation_db.total_cmp(&b.separation_db))
    else {
        return no_pairs(subject, "minimum", min, spec, set);
    };
    let judged: Vec<_> = covered
        .iter()
        .map(|p| {
            (
                p,
                judge_at_least(p.separation_db, p.floor_limited, p.separation_u95_db, min),
            )
        })
        .collect();
    let outcome = Outcome::worst(judged.iter().map(|(_, j)| j.outcome));
    let settle = judged
        .iter()
        .filter(|(_, j)| j.outcome == Outcome::Inconclusive)
        .min_by(|a, b| a.1.margin_db.total_cmp(&b.1.margin_db))
        .and_then(|(p, j)| {
            j.settle.as_ref().map(|t| {
                format!(
                    "{} → {} at {} Hz: {t}",
                    p.aggressor,
                    p.victim,
                    fmt_hz(p.frequency_hz)
                )
            })
        });
    let failing = judged
        .iter()
        .filter(|(_, j)| j.outcome == Outcome::Fail)
        .count();
    ClaimCheck {
        subject: subject.to_string(),
        kind: "minimum",
        claimed: min,
        unit: "dB",
        measured: Some(worst.separation_db),
        measured_text: pair_text(worst),
        basis: format!(
            "worst of {} pairs: {} → {} at {} Hz{}",
            covered.len(),
            worst.aggressor,
            worst.victim,
            fmt_hz(worst.frequency_hz),
            if failing > 0 {
                format!("; {failing} below the claim")
            } else {
                String::new()
            }
        ),
        margin_db: Some(worst.separation_db - min),
        outcome,
        settle,
    }
}

fn typical_separation(
    subject: &str,
    typ: f64,
    covered: &[&PairRow],
    spec: &FrequencySpec,
    set: PairSet,
) -> ClaimCheck {
    if covered.is_empty() {
        return no_pairs(subject, "typical", typ, spec, set);
    }
    let u = |p: &PairRow| p.separation_u95_db.unwrap_or(0.0);
    let low: Vec<f64> = covered
        .iter()
        .map(|p| {
            if p.floor_limited {
                p.separation_db
            } else {
                p.separation_db - u(p)
            }
        })
        .collect();
    let high: Vec<f64> = covered
        .iter()
        .map(|p| {
            if p.floor_limited {
                f64::INFINITY
            } else {
                p.separation_db + u(p)
            }
        })
        .collect();
    let values: Vec<f64> = covered.iter().map(|p| p.separation_db).collect();
    let (lo, hi, mid) = (median(&low), median(&high), median(&values));
    let bounds = covered.iter().filter(|p| p.floor_limited).count();
    let outcome = if lo >= typ {
        Outcome::Pass
    } else if hi < typ {
        Outcome::Fail
    } else {
        Outcome::Inconclusive
    };
    let settle = (outcome == Outcome::Inconclusive).then(|| {
        if bounds > 0 && hi.is_infinite() {
            format!(
                "too many pairs are at the noise floor to place the median; a record {} longer lowers the detection limit by {:.1} dB",
                times(10f64.powf((typ - lo) / 10.0)),
                typ - lo
            )
        } else {
            let half = ((hi - lo) / 2.0).max(1e-9);
            format!(
                "the median's uncertainty straddles the claim; a record {} longer narrows it enough if the value holds",
                times((half / (mid - typ).abs().max(1e-9)).powi(2))
            )
        }
    });
    let measured_text = if hi.is_infinite() {
        format!("≥ {lo:.1}")
    } else if hi - lo < 0.05 {
        format!("{mid:.2}")
    } else {
        format!("{lo:.2} to {hi:.2}")
    };
    ClaimCheck {
        subject: subject.to_string(),
        kind: "typical",
        claimed: typ,
        unit: "dB",
        measured: Some(mid),
        measured_text,
        basis: format!(
            "median of {} pairs{}",
            covered.len(),
            if bounds > 0 {
                format!(", {bounds} of them lower bounds")
            } else {
                String::new()
            }
        ),
        margin_db: Some(mid - typ),
        outcome,
        settle,
    }
}

fn exact_check(
    subject: &str,
    kind: &'static str,
    claimed: f64,
    unit: &'static str,
    measured: f64,
    basis: String,
    margin_db: f64,
) -> ClaimCheck {
    ClaimCheck {
        subject: subject.to_string(),
        kind,
        claimed,
        unit,
        measured: Some(measured),
        measured_text: format!("{measured:.1}"),
        basis,
        margin_db: Some(margin_db),
        outcome: if margin_db >= 0.0 {
            Outcome::Pass
        } else {
            Outcome::Fail
        },
        settle: None,
    }
}
