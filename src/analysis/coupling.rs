//! Coupling against frequency: for a pair measured at three or more
//! frequencies, the slope of its coupling in dB per decade and the model
//! `|H(f)|² = s² + (c·f/1 kHz)²` (a flat shared-impedance part `s` and a part
//! rising 20 dB per decade `c`, in quadrature), which names the dominant
//! mechanism. Capacitive and inductive coupling both rise 20 dB per decade;
//! measuring again with the victims open (or with a resistor) instead of
//! shorted tells them apart: capacitive coupling grows with the victim's
//! impedance, inductive coupling falls.

use super::Pair;
use serde::Serialize;

/// What dominates a pair's coupling over the measured frequencies.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "kebab-case")]
pub enum Mechanism {
    /// Rising about 20 dB per decade over the whole range.
    CapacitiveOrInductive,
    /// Flat over the whole range.
    SharedImpedance,
    /// The two parts cross within the range.
    Mixed,
    /// Fewer than three frequencies with a detected victim tone.
    Insufficient,
}

impl Mechanism {
    /// The label used in files and tables.
    pub fn label(self) -> &'static str {
        match self {
            Mechanism::CapacitiveOrInductive => "capacitive-or-inductive",
            Mechanism::SharedImpedance => "shared-impedance",
            Mechanism::Mixed => "mixed",
            Mechanism::Insufficient => "insufficient",
        }
    }
}

/// The coupling fit of one ordered pair.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct CouplingFit {
    /// Driven channel.
    pub aggressor: u32,
    /// Victim channel.
    pub victim: u32,
    /// Frequencies with a detected victim tone used in the fit.
    pub points: usize,
    /// Least-squares slope of coupling (−separation) against log10 f, dB per decade.
    pub slope_db_per_decade: Option<f64>,
    /// Flat part, dB (`None` when fitted as zero).
    pub shared_db: Option<f64>,
    /// Rising part at 1 kHz, dB (`None` when fitted as zero).
    pub rising_db_at_1khz: Option<f64>,
    /// Frequency where the two parts are equal, Hz.
    pub crossover_hz: Option<f64>,
    /// The verdict.
    pub mechanism: Mechanism,
}

/// Fit every ordered pair found in `pairs` (floor-limited points left out).
pub fn fit_all(pairs: &[Pair]) -> Vec<CouplingFit> {
    let mut keys: Vec<(u32, u32)> = pairs.iter().map(|p| (p.aggressor, p.victim)).collect();
    keys.sort_unstable();
    keys.dedup();
    keys.into_iter()
        .map(|(a, v)| {
            let pts: Vec<(f64, f64)> = pairs
                .iter()
                .filter(|p| p.aggressor == a && p.victim == v && !p.floor_limited)
                .map(|p| (p.tone_hz, -p.separation_db))
                .collect();
            fit_pair(a, v, &pts)
        })
        .collect()
}

/// Fit one pair from `(frequency Hz, coupling dB)` points.
pub fn fit_pair(aggressor: u32, victim: u32, points: &[(f64, f64)]) -> CouplingFit {
    let mut out = CouplingFit {
        aggressor,
        victim,
        points: points.len(),
        slope_db_per_decade: None,
        shared_db: None,
        rising_db_at_1khz: None,
        crossover_hz: None,
        mechanism: Mechanism::Insufficient,
    };
    if points.len() < 3 {
        return out;
    }
    // Slope: ordinary least squares of dB on log10 f.
    let n = points.len() as f64;
    let xs: Vec<f64> = points.iter().map(|(f, _)| f.log10()).collect();
    let mx = xs.iter().sum::<f64>() / n;
    let my = points.iter().map(|(_, d)| d).sum::<f64>() / n;
    let sxx: f64 = xs.iter().map(|x| (x - mx).powi(2)).sum();
    let sxy: f64 = xs
        .iter()
        .zip(points)
        .map(|(x, (_, d))| (x - mx) * (d - my))
        .sum();
    if sxx > 0.0 {
        out.slope_db_per_decade = Some(sxy / sxx);
    }
    // Parts: P = a + b·u with u = (f/1 kHz)², weighted by 1/P (relative error).
    let (s, c) = power_fit(points);
    out.shared_db = (s > 0.0).then(|| 10.0 * s.log10());
    out.rising_db_at_1khz = (c > 0.0).then(|| 10.0 * c.log10());
    let (f_min, f_max) = points
        .iter()
        .fold((f64::INFINITY, 0.0f64), |(lo, hi), (f, _)| {
            (lo.min(*f), hi.max(*f))
        });
    out.mechanism = if c <= 0.0 {
        Mechanism::SharedImpedance
    } else if s <= 0.0 {
        Mechanism::CapacitiveOrInductive
    } else {
        let fx = 1000.0 * (s / c).sqrt();
        out.crossover_hz = Some(fx);
        if fx < f_min / 2.0 {
            Mechanism::CapacitiveOrInductive
        } else if fx > 2.0 * f_max {
            Mechanism::SharedImpedance
        } else {
            Mechanism::Mixed
        }
    };
    out
}

/// Non-negative weighted least squares of power `P = a + b·(f/1 kHz)²`.
fn power_fit(points: &[(f64, f64)]) -> (f64, f64) {
    let rows: Vec<(f64, f64)> = points
        .iter()
        .map(|(f, db)| {
            let p = 10f64.powf(db / 10.0);
            (1.0 / p, (f / 1000.0).powi(2) / p)
        })
        .collect();
    let (s11, s12, s22) = rows.iter().fold((0.0, 0.0, 0.0), |(a, b, c), (x, y)| {
        (a + x * x, b + x * y, c + y * y)
    });
    let (r1, r2) = rows
        .iter()
        .fold((0.0, 0.0), |(a, b), (x, y)| (a + x, b + y));
    let det = s11 * s22 - s12 * s12;
    if det.abs() > 0.0 {
        let a = (r1 * s22 - r2 * s12) / det;
        let b = (s11 * r2 - s12 * r1) / det;
        if a >= 0.0 && b >= 0.0 {
            return (a, b);
        }
    }
    // One part only: whichever explains the points better.
    let only_a = r1 / s11;
    let only_b = r2 / s22;
    let err = |a: f64, b: f64| {
        rows.iter()
            .map(|(x, y)| (a * x + b * y - 1.0).powi(2))
            .sum::<f64>()
    };
    if err(only_a, 0.0) <= err(0.0, only_b) {
        (only_a, 0.0)
    } else {
        (0.0, only_b)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn points(shared_db: Option<f64>, rising_db: Option<f64>, freqs: &[f64]) -> Vec<(f64, f64)> {
        freqs
            .iter()
            .map(|f| {
                let s = shared_db.map_or(0.0, |d| 10f64.powf(d / 10.0));
                let c = rising_db.map_or(0.0, |d| 10f64.powf(d / 10.0)) * (f / 1000.0).powi(2);
                (*f, 10.0 * (s + c).log10())
            })
            .collect()
    }

    #[test]
    fn recovers_both_parts_and_names_the_mechanism() {
        let f = [125.0, 1000.0, 4000.0, 16000.0];
        let fit = fit_pair(1, 2, &points(None, Some(-110.0), &f));
        assert_eq!(fit.mechanism, Mechanism::CapacitiveOrInductive);
        assert!((fit.slope_db_per_decade.unwrap() - 20.0).abs() < 1e-9);
        assert!((fit.rising_db_at_1khz.unwrap() + 110.0).abs() < 1e-9);
        let fit = fit_pair(1, 2, &points(Some(-120.0), None, &f));
        assert_eq!(fit.mechanism, Mechanism::SharedImpedance);
        assert!(fit.slope_db_per_decade.unwrap().abs() < 1e-9);
        let fit = fit_pair(1, 2, &points(Some(-100.0), Some(-110.0), &f));
        assert_eq!(fit.mechanism, Mechanism::Mixed);
        assert!((fit.crossover_hz.unwrap() - 1000.0 * 10f64.sqrt()).abs() < 1e-6);
        assert!((fit.shared_db.unwrap() + 100.0).abs() < 1e-9);
        assert_eq!(
            fit_pair(
                1,
                2,
                &f[..2].iter().map(|f| (*f, -100.0)).collect::<Vec<_>>()
            )
            .mechanism,
            Mechanism::Insufficient
        );
    }
}
