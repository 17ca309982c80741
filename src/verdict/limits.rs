//! Pass limits (format `septum.limits/1`): minimum separation per test
//! frequency for all, adjacent or non-adjacent pairs, maximum noise floor and
//! minimum dynamic range per channel. See procedures/limits-commissioning.toml
//! for a commented example.
//!
//! Dynamic range here is 0 dBFS (a full-scale sine) minus the channel's
//! broadband noise floor in dBFS, i.e. `−noise_floor_dbfs`.

use super::select::{fmt_hz, FrequencySpec, PairSet};
use super::{judge_at_least, parse_toml, read_text, Judgement, Outcome, VerdictError};
use crate::run::ResultsFolder;
use serde::{Deserialize, Deserializer, Serialize};
use std::path::Path;

/// The limits format this version reads.
pub const LIMITS_FORMAT: &str = "septum.limits/1";

/// A limits file (or the `[limits]` table of a procedure file).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, Default)]
#[serde(deny_unknown_fields)]
pub struct Limits {
    /// `septum.limits/1` when given.
    #[serde(default)]
    pub format: Option<String>,
    /// A name for people ("Commissioning, bay 3").
    #[serde(default)]
    pub name: Option<String>,
    /// Free text.
    #[serde(default)]
    pub note: Option<String>,
    /// Minimum separations (`[[separation]]`).
    #[serde(default)]
    pub separation: Vec<SeparationLimit>,
    /// Maximum noise floors (`[noise_floor]` or `[[noise_floor]]`).
    #[serde(default, deserialize_with = "one_or_many")]
    pub noise_floor: Vec<FloorLimit>,
    /// Minimum dynamic ranges (`[dynamic_range]` or `[[dynamic_range]]`).
    #[serde(default, deserialize_with = "one_or_many")]
    pub dynamic_range: Vec<RangeLimit>,
}

/// A minimum separation over a set of test frequencies and pairs.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SeparationLimit {
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
    /// Minimum separation, dB.
    pub min_db: f64,
    /// Free text.
    #[serde(default)]
    pub note: Option<String>,
}

impl SeparationLimit {
    /// The frequencies it covers.
    pub fn frequencies(&self) -> FrequencySpec {
        FrequencySpec {
            at_hz: self.at_hz,
            from_hz: self.from_hz,
            to_hz: self.to_hz,
        }
    }

    /// "adjacent pairs at 1000 Hz (band 891–1122 Hz): at least 95 dB".
    pub fn describe(&self) -> String {
        format!(
            "{} at {}: at least {} dB",
            self.pairs.describe(),
            self.frequencies().describe(),
            self.min_db
        )
    }
}

/// A maximum noise floor for some or all channels.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct FloorLimit {
    /// Maximum broadband noise floor, dBFS.
    pub max_dbfs: f64,
    /// The channels it applies to; absent: every channel not named by
    /// another entry.
    #[serde(default)]
    pub channels: Option<Vec<u32>>,
    /// Free text.
    #[serde(default)]
    pub note: Option<String>,
}

/// A minimum dynamic range for some or all channels.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RangeLimit {
    /// Minimum dynamic range (−noise floor in dBFS), dB.
    pub min_db: f64,
    /// The channels it applies to; absent: every channel not named by
    /// another entry.
    #[serde(default)]
    pub channels: Option<Vec<u32>>,
    /// Free text.
    #[serde(default)]
    pub note: Option<String>,
}

fn one_or_many<'de, D, T>(d: D) -> Result<Vec<T>, D::Error>
where
    D: Deserializer<'de>,
    T: Deserialize<'de>,
{
    #[derive(Deserialize)]
    #[serde(untagged)]
    enum OneOrMany<T> {
        One(T),
        Many(Vec<T>),
    }
    Ok(match OneOrMany::deserialize(d)? {
        OneOrMany::One(t) => vec![t],
        OneOrMany::Many(v) => v,
    })
}

/// A file that holds limits under `[limits]` (a procedure file).
#[derive(Deserialize)]
struct Embedded {
    limits: Limits,
}

impl Limits {
    /// Parse a limits file, or the `[limits]` table of a procedure file;
    /// `path` names it in messages.
    pub fn parse(text: &str, path: &Path) -> Result<Self, VerdictError> {
        let embedded = text
            .parse::<toml::Table>()
            .ok()
            .is_some_and(|t| t.get("limits").is_some_and(toml::Value::is_table));
        let limits: Limits = if embedded {
            parse_toml::<Embedded>(text, path)?.limits
        } else {
            parse_toml(text, path)?
        };
        limits.validate().map_err(|message| VerdictError::Invalid {
            path: path.to_path_buf(),
            message,
        })?;
        Ok(limits)
    }

    /// Read a limits file.
    pub fn load(path: &Path) -> Result<Self, VerdictError> {
        Self::parse(&read_text(path)?, path)
    }

    /// Check the rules the types alone do not enforce.
    pub fn validate(&self) -> Result<(), String> {
        if let Some(f) = &self.format {
            if f != LIMITS_FORMAT {
                return Err(format!(
                    "unknown format \"{f}\" (this septum reads \"{LIMITS_FORMAT}\")"
                ));
            }
        }
        if self.separation.is_empty()
            && self.noise_floor.is_empty()
            && self.dynamic_range.is_empty()
        {
            return Err(
                "states no limit: give [[separation]], [noise_floor] or [dynamic_range]".into(),
            );
        }
        for (i, s) in self.separation.iter().enumerate() {
            s.frequencies()
                .validate()
                .map_err(|e| format!("separation[{}]: {e}", i + 1))?;
            if !s.min_db.is_finite() {
                return Err(format!("separation[{}]: min_db must be a number", i + 1));
            }
        }
        let check_channels = |what: &str, i: usize, ch: &Option<Vec<u32>>| match ch {
            Some(v) if v.is_empty() || v.contains(&0) => Err(format!(
                "{what}[{}]: channels must list channel numbers from 1",
                i + 1
            )),
            _ => Ok(()),
        };
        for (i, l) in self.noise_floor.iter().enumerate() {
            check_channels("noise_floor", i, &l.channels)?;
            if !l.max_dbfs.is_finite() {
                return Err(format!("noise_floor[{}]: max_dbfs must be a number", i + 1));
            }
        }
        for (i, l) in self.dynamic_range.iter().enumerate() {
            check_channels("dynamic_range", i, &l.channels)?;
            if !l.min_db.is_finite() {
                return Err(format!("dynamic_range[{}]: min_db must be a number", i + 1));
            }
        }
        Ok(())
    }
}

/// One pair against the strictest limit that covers it.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct PairCheck {
    /// Nominal test frequency, Hz.
    pub frequency_hz: f64,
    /// Driven channel.
    pub aggressor: u32,
    /// Victim channel.
    pub victim: u32,
    /// Separation, dB (a lower bound when `floor_limited`).
    pub separation_db: f64,
    /// The separation is a lower bound.
    pub floor_limited: bool,
    /// Expanded uncertainty (k = 2), dB.
    pub separation_u95_db: Option<f64>,
    /// The limit applied, dB (the highest minimum among those covering the pair).
    pub limit_db: f64,
    /// Which `[[separation]]` entry (from 1) set it.
    pub limit_entry: usize,
    /// Outcome, margin (separation − limit) and what would settle it.
    #[serde(flatten)]
    pub judgement: Judgement,
}

/// One `[[separation]]` entry's result.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct SeparationSummary {
    /// Entry number, from 1.
    pub entry: usize,
    /// What it asks.
    pub description: String,
    /// Minimum separation, dB.
    pub min_db: f64,
    /// The test frequencies it covers.
    pub frequencies_hz: Vec<f64>,
    /// Pairs it covers.
    pub pairs: usize,
    /// Of which pass, inconclusive, fail (against this entry alone).
    pub pass: usize,
    /// Inconclusive pairs.
    pub inconclusive: usize,
    /// Failing pairs.
    pub fail: usize,
    /// The covered pair with the smallest margin: (frequency, aggressor, victim, margin dB).
    pub worst: Option<(f64, u32, u32, f64)>,
    /// Outcome; inconclusive when no test frequency falls in its range.
    pub outcome: Outcome,
    /// What would settle an inconclusive entry.
    pub settle: Option<String>,
}

/// Which channel figure a channel check is about.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "kebab-case")]
pub enum ChannelFigure {
    /// Broadband noise floor, dBFS; must not exceed the limit.
    NoiseFloor,
    /// Dynamic range, dB (−noise floor); must reach the limit.
    DynamicRange,
}

/// One channel against a noise-floor or dynamic-range limit.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ChannelCheck {
    /// Channel number.
    pub channel: u32,
    /// The figure checked.
    pub figure: ChannelFigure,
    /// Measured: floor in dBFS or dynamic range in dB.
    pub measured: f64,
    /// The limit, same unit.
    pub limit: f64,
    /// On the good side of the limit by this much, dB.
    pub margin_db: f64,
    /// Outcome.
    pub outcome: Outcome,
}

/// Everything a limits file decides about a results folder.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct LimitsReport {
    /// The limits' name.
    pub name: Option<String>,
    /// Per pair, for every pair some limit covers.
    pub pairs: Vec<PairCheck>,
    /// Per `[[separation]]` entry.
    pub separation: Vec<SeparationSummary>,
    /// Per channel and figure.
    pub channels: Vec<ChannelCheck>,
    /// Test frequencies no separation limit covers (not judged).
    pub uncovered_frequencies_hz: Vec<f64>,
    /// The worst of everything above.
    pub outcome: Outcome,
}

impl LimitsReport {
    /// The pairs that did not pass, fails first, then by margin (smallest first).
    pub fn not_passing(&self) -> Vec<&PairCheck> {
        let mut bad: Vec<&PairCheck> = self
            .pairs
            .iter()
            .filter(|p| p.judgement.outcome != Outcome::Pass)
            .collect();
        bad.sort_by(|a, b| {
            b.judgement
                .outcome
                .cmp(&a.judgement.outcome)
                .then(a.judgement.margin_db.total_cmp(&b.judgement.margin_db))
        });
        bad
    }

    /// Pairs with the given outcome.
    pub fn count(&self, outcome: Outcome) -> usize {
        self.pairs
            .iter()
            .filter(|p| p.judgement.outcome == outcome)
            .count()
    }
}

/// The limit entries that apply to `channel`: those naming it, else those
/// naming no channel.
fn for_channel<T>(entries: &[T], channels: impl Fn(&T) -> &Option<Vec<u32>>, ch: u32) -> Vec<&T> {
    let named: Vec<&T> = entries
        .iter()
        .filter(|e| channels(e).as_ref().is_some_and(|c| c.contains(&ch)))
        .collect();
    if named.is_empty() {
        entries.iter().filter(|e| channels(e).is_none()).collect()
    } else {
        named
    }
}

/// Evaluate `limits` on `results`. `path` names the limits file in errors
/// (a channel that the results do not have).
pub fn evaluate(
    limits: &Limits,
    results: &ResultsFolder,
    path: &Path,
) -> Result<LimitsReport, VerdictError> {
    let n = results.channel_count() as u32;
    let lists = limits
        .noise_floor
        .iter()
        .map(|l| ("noise_floor", &l.channels))
        .chain(
            limits
                .dynamic_range
                .iter()
                .map(|l| ("dynamic_range", &l.channels)),
        );
    for (what, ch) in lists {
        if let Some(c) = ch.iter().flatten().find(|&&c| c > n) {
            return Err(VerdictError::Invalid {
                path: path.to_path_buf(),
                message: format!("{what} names channel {c}, but the results have {n} channels"),
            });
        }
    }
    let pairs = pair_checks(limits, results);
    let separation = summaries(limits, results);
    let channels = channel_checks(limits, results);
    let uncovered_frequencies_hz = results
        .frequencies()
        .into_iter()
        .filter(|&f| !limits.separation.iter().any(|s| s.frequencies().covers(f)))
        .collect();
    let outcome = Outcome::worst(
        separation
            .iter()
            .map(|s| s.outcome)
            .chain(pairs.iter().map(|p| p.judgement.outcome))
            .chain(channels.iter().map(|c| c.outcome)),
    );
    Ok(LimitsReport {
        name: limits.name.clone(),
        pairs,
        separation,
        channels,
        uncovered_frequencies_hz,
        outcome,
    })
}

fn pair_checks(limits: &Limits, results: &ResultsFolder) -> Vec<PairCheck> {
    results
        .pairs
        .iter()
        .filter_map(|p| {
            // The strictest covering limit decides: the outcome only worsens
            // as the limit rises.
            let (entry, lim) = limits
                .separation
                .iter()
                .enumerate()
                .filter(|(_, s)| s.pairs.covers(p) && s.frequencies().covers(p.frequency_hz))
                .max_by(|a, b| a.1.min_db.total_cmp(&b.1.min_db))?;
            Some(PairCheck {
                frequency_hz: p.frequency_hz,
                aggressor: p.aggressor,
                victim: p.victim,
                separation_db: p.separation_db,
                floor_limited: p.floor_limited,
                separation_u95_db: p.separation_u95_db,
                limit_db: lim.min_db,
                limit_entry: entry + 1,
                judgement: judge_at_least(
                    p.separation_db,
                    p.floor_limited,
                    p.separation_u95_db,
                    lim.min_db,
                ),
            })
        })
        .collect()
}

fn summaries(limits: &Limits, results: &ResultsFolder) -> Vec<SeparationSummary> {
    let test_freqs = results.frequencies();
    limits
        .separation
        .iter()
        .enumerate()
        .map(|(i, s)| {
            let spec = s.frequencies();
            let freqs: Vec<f64> = test_freqs
                .iter()
                .copied()
                .filter(|&f| spec.covers(f))
                .collect();
            let judged: Vec<(&crate::run::read::PairRow, Judgement)> = results
                .pairs
                .iter()
                .filter(|p| s.pairs.covers(p) && spec.covers(p.frequency_hz))
                .map(|p| {
                    (
                        p,
                        judge_at_least(
                            p.separation_db,
                            p.floor_limited,
                            p.separation_u95_db,
                            s.min_db,
                        ),
                    )
                })
                .collect();
            let count = |o| judged.iter().filter(|(_, j)| j.outcome == o).count();
            let worst = judged
                .iter()
                .min_by(|a, b| a.1.margin_db.total_cmp(&b.1.margin_db))
                .map(|(p, j)| (p.frequency_hz, p.aggressor, p.victim, j.margin_db));
            let (outcome, settle) = if judged.is_empty() {
                (
                    Outcome::Inconclusive,
                    Some(format!(
                        "no {} measured at {}: add a test frequency there",
                        s.pairs.describe(),
                        spec.describe()
                    )),
                )
            } else {
                let o = Outcome::worst(judged.iter().map(|(_, j)| j.outcome));
                // The hardest inconclusive pair says what settles the entry.
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
                (o, settle)
            };
            SeparationSummary {
                entry: i + 1,
                description: s.describe(),
                min_db: s.min_db,
                frequencies_hz: freqs,
                pairs: judged.len(),
                pass: count(Outcome::Pass),
                inconclusive: count(Outcome::Inconclusive),
                fail: count(Outcome::Fail),
                worst,
                outcome,
                settle,
            }
        })
        .collect()
}

fn channel_checks(limits: &Limits, results: &ResultsFolder) -> Vec<ChannelCheck> {
    let mut out = Vec::new();
    for row in &results.channels {
        let ch = row.channel;
        let floors = for_channel(&limits.noise_floor, |l| &l.channels, ch);
        if let Some(max) = floors.iter().map(|l| l.max_dbfs).min_by(f64::total_cmp) {
            let margin = max - row.noise_floor_dbfs;
            out.push(ChannelCheck {
                channel: ch,
                figure: ChannelFigure::NoiseFloor,
                measured: row.noise_floor_dbfs,
                limit: max,
                margin_db: margin,
                outcome: if margin >= 0.0 {
                    Outcome::Pass
                } else {
                    Outcome::Fail
                },
            });
        }
        let ranges = for_channel(&limits.dynamic_range, |l| &l.channels, ch);
        if let Some(min) = ranges.iter().map(|l| l.min_db).max_by(f64::total_cmp) {
            let dr = -row.noise_floor_dbfs;
            out.push(ChannelCheck {
                channel: ch,
                figure: ChannelFigure::DynamicRange,
                measured: dr,
                limit: min,
                margin_db: dr - min,
                outcome: if dr >= min {
                    Outcome::Pass
                } else {
                    Outcome::Fail
                },
            });
        }
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn parses_bare_and_embedded() {
        let bare = "[[separation]]\nat_hz = 1000\nmin_db = 90\n[noise_floor]\nmax_dbfs = -110\n";
        let l = Limits::parse(bare, Path::new("l.toml")).unwrap();
        assert_eq!(l.separation[0].pairs, PairSet::All);
        assert_eq!(l.noise_floor.len(), 1);
        let emb = "title = \"procedure\"\n[limits]\nname = \"x\"\n[[limits.separation]]\nfrom_hz = 20\nto_hz = 20000\npairs = \"adjacent\"\nmin_db = 80\n";
        let l = Limits::parse(emb, Path::new("p.toml")).unwrap();
        assert_eq!(l.separation[0].pairs, PairSet::Adjacent);
        assert_eq!(l.name.as_deref(), Some("x"));
    }

    #[test]
    fn rejects_with_line_and_reason() {
        let e = Limits::parse(
            "[[separation]]\nat_hz = 1000\nmin_dB = 90\n",
            Path::new("l.toml"),
        )
        .unwrap_err()
        .to_string();
        assert!(
            e.starts_with("l.toml: line 3") && e.contains("min_dB"),
            "{e}"
        );
        let e = Limits::parse(
            "[[separation]]\nat_hz = 1000\nto_hz = 9\nmin_db = 1\n",
            Path::new("l.toml"),
        )
        .unwrap_err()
        .to_string();
        assert!(e.contains("separation[1]: give either at_hz"), "{e}");
        let e = Limits::parse("name = \"empty\"\n", Path::new("l.toml"))
            .unwrap_err()
            .to_string();
        assert!(e.contains("states no limit"), "{e}");
        let e = Limits::parse(
            "format = \"x/2\"\n[dynamic_range]\nmin_db = 1\n",
            Path::new("l.toml"),
        )
        .unwrap_err()
        .to_string();
        assert!(e.contains("unknown format"), "{e}");
    }

    #[test]
    fn channel_entries_naming_a_channel_override_the_general_one() {
        let l = Limits::parse(
            "[[noise_floor]]\nmax_dbfs = -115\n[[noise_floor]]\nmax_dbfs = -108\nchannels = [7]\n",
            Path::new("l.toml"),
        )
        .unwrap();
        let pick = |ch| {
            for_channel(&l.noise_floor, |x| &x.channels, ch)
                .iter()
                .map(|x| x.max_dbfs)
                .collect::<Vec<_>>()
        };
        assert_eq!(pick(7), vec![-108.0]);
        assert_eq!(pick(1), vec![-115.0]);
    }
}
