//! Which test frequencies and which pairs a limit or claim applies to.

use crate::run::read::PairRow;
use serde::{Deserialize, Serialize};

/// Half-width of a third-octave band, as a frequency ratio: 10^(1/20)
/// (base-10 band edges, IEC 61260-1).
pub const THIRD_OCTAVE_HALF: f64 = 1.122_018_454_301_963_3;

/// The test frequencies a limit or claim covers.
///
/// In a file: either `at_hz = 1000` (a nominal frequency: it covers every
/// test frequency inside that frequency's third-octave band, f/10^(1/20) to
/// f·10^(1/20), so 1000 covers 891 Hz to 1122 Hz and a coherent 1005.6 Hz
/// tone counts as "1 kHz"), or `from_hz = 20` and `to_hz = 2000` (a band:
/// every test frequency in it, both ends included).
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize, Default)]
#[serde(deny_unknown_fields)]
pub struct FrequencySpec {
    /// A nominal frequency, Hz.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub at_hz: Option<f64>,
    /// Lower edge of a band, Hz.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub from_hz: Option<f64>,
    /// Upper edge of a band, Hz.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub to_hz: Option<f64>,
}

impl FrequencySpec {
    /// The covered range, Hz, both ends included.
    pub fn range(&self) -> (f64, f64) {
        match (self.at_hz, self.from_hz, self.to_hz) {
            (Some(f), _, _) => (f / THIRD_OCTAVE_HALF, f * THIRD_OCTAVE_HALF),
            (None, Some(a), Some(b)) => (a, b),
            _ => (f64::NAN, f64::NAN),
        }
    }

    /// Does it cover the test frequency `f`?
    pub fn covers(&self, f: f64) -> bool {
        let (lo, hi) = self.range();
        f >= lo && f <= hi
    }

    /// Check the rule: `at_hz` alone, or `from_hz` with `to_hz`.
    pub fn validate(&self) -> Result<(), String> {
        let pos = |v: f64| v.is_finite() && v > 0.0;
        match (self.at_hz, self.from_hz, self.to_hz) {
            (Some(f), None, None) if pos(f) => Ok(()),
            (Some(f), None, None) => Err(format!("at_hz {f} must be a positive frequency")),
            (None, Some(a), Some(b)) if pos(a) && pos(b) && a <= b => Ok(()),
            (None, Some(a), Some(b)) => Err(format!(
                "from_hz {a} and to_hz {b} must be positive with from_hz ≤ to_hz"
            )),
            _ => Err("give either at_hz, or from_hz together with to_hz".into()),
        }
    }

    /// "1000 Hz (891–1122 Hz)" or "20–2000 Hz".
    pub fn describe(&self) -> String {
        let (lo, hi) = self.range();
        match self.at_hz {
            Some(f) => format!("{} Hz (band {}–{} Hz)", fmt_hz(f), edge(lo), edge(hi)),
            None => format!("{}–{} Hz", fmt_hz(lo), fmt_hz(hi)),
        }
    }
}

/// A band edge to four significant figures: 891.3, 1122, 17950.
fn edge(f: f64) -> String {
    let digits = f.abs().log10().floor() as i32 + 1;
    let scale = 10f64.powi(digits - 4);
    let r = (f / scale).round() * scale;
    if digits >= 4 {
        format!("{r:.0}")
    } else {
        format!("{r:.*}", (4 - digits) as usize)
    }
}

/// A frequency for people: 1000, 1005.6, 16005.6, 125.2.
pub fn fmt_hz(f: f64) -> String {
    if (f - f.round()).abs() < 0.05 {
        format!("{:.0}", f)
    } else if f < 10.0 {
        format!("{f:.2}")
    } else {
        format!("{f:.1}")
    }
}

/// Which (aggressor, victim) pairs a separation limit or claim covers.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, Default)]
#[serde(rename_all = "kebab-case")]
pub enum PairSet {
    /// Every pair.
    #[default]
    All,
    /// Neighbouring channel numbers: |aggressor − victim| = 1.
    Adjacent,
    /// Every pair that is not adjacent.
    NonAdjacent,
}

impl PairSet {
    /// Does it cover the pair?
    pub fn covers(self, p: &PairRow) -> bool {
        match self {
            PairSet::All => true,
            PairSet::Adjacent => p.adjacent(),
            PairSet::NonAdjacent => !p.adjacent(),
        }
    }

    /// "all pairs", "adjacent pairs", "non-adjacent pairs".
    pub fn describe(self) -> &'static str {
        match self {
            PairSet::All => "all pairs",
            PairSet::Adjacent => "adjacent pairs",
            PairSet::NonAdjacent => "non-adjacent pairs",
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn third_octave_band_of_a_nominal_frequency() {
        // IEC 61260-1 (base-10 band edges, from memory): the 1 kHz band runs
        // from 1000/10^(1/20) = 891.25 Hz to 1000·10^(1/20) = 1122.02 Hz.
        assert!((THIRD_OCTAVE_HALF - 10f64.powf(0.05)).abs() < 1e-15);
        let s = FrequencySpec {
            at_hz: Some(1000.0),
            ..Default::default()
        };
        let (lo, hi) = s.range();
        assert!((lo - 891.2509).abs() < 1e-3 && (hi - 1122.0185).abs() < 1e-3);
        assert!(s.covers(1005.615234375) && s.covers(996.826171875));
        assert!(!s.covers(1250.0) && !s.covers(800.0));
        let band = FrequencySpec {
            from_hz: Some(20.0),
            to_hz: Some(2000.0),
            ..Default::default()
        };
        assert!(band.covers(20.0) && band.covers(2000.0) && !band.covers(2000.1));
        assert!(FrequencySpec::default().validate().is_err());
        assert!(FrequencySpec {
            at_hz: Some(1.0),
            from_hz: Some(1.0),
            to_hz: Some(2.0)
        }
        .validate()
        .is_err());
    }
}
