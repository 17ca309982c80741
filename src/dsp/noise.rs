//! Noise near the test frequency, from the explicit residual.
//!
//! A victim's fitted tone must be told apart from the noise that lands in the
//! fit. That noise is estimated where it matters, next to the test frequency:
//! the residual is mixed down by `e^{−jωt}`, and its DFT at the offsets
//! `f + k·fs/L` (`2 ≤ |k| ≤ 41`, away from the tone's own bin) gives, bin by
//! bin, what a fit at a neighbouring frequency would return. Their mean
//! square is the quadrature variance of a fit at `f`.
//!
//! Discrete lines (mains harmonics) near `f` would inflate a plain mean, so
//! the estimate is a trimmed mean: the lowest 80 % of the bins, scaled by the
//! mean of the lower 80 % of an exponential distribution (the law of `|Y|²`
//! for Gaussian noise), which makes it unbiased for white noise.

use rustfft::num_complex::Complex;
use rustfft::FftPlanner;

/// Offsets (in bins of `fs/L`) used around the test frequency.
pub const OFFSETS: std::ops::RangeInclusive<usize> = 2..=41;

/// Fraction of the bins kept (the quietest).
pub const KEEP: f64 = 0.8;

/// Mean of an Exp(1) variable below its `KEEP` quantile: `(1 − (1 − KEEP)·(1 + q)) / KEEP`, `q = −ln(1 − KEEP)`.
fn trimmed_exponential_mean() -> f64 {
    let q = -(1.0 - KEEP).ln();
    (1.0 - (1.0 - KEEP) * (1.0 + q)) / KEEP
}

/// Standard deviation of each quadrature part of a fitted tone's amplitude,
/// from the baseband residual of an `L`-sample record. Offsets that would fall
/// below 0 Hz, above the Nyquist frequency or onto a harmonic are left out;
/// returns `None` when fewer than eight offsets remain.
pub fn quadrature_sigma(
    baseband: &[(f64, f64)],
    freq_hz: f64,
    sample_rate_hz: f64,
    terms: usize,
    planner: &mut FftPlanner<f64>,
) -> Option<f64> {
    let len = baseband.len();
    if len < 64 {
        return None;
    }
    let bin_hz = sample_rate_hz / len as f64;
    let mut buf: Vec<Complex<f64>> = baseband.iter().map(|(r, i)| Complex::new(*r, *i)).collect();
    planner.plan_fft_forward(len).process(&mut buf);
    let mut power = Vec::with_capacity(2 * OFFSETS.end());
    for k in OFFSETS {
        for sign in [-1.0, 1.0] {
            let f = freq_hz + sign * k as f64 * bin_hz;
            let near_harmonic =
                (0..=terms.max(5)).any(|h| (f - h as f64 * freq_hz).abs() < 1.5 * bin_hz);
            if f < 2.0 * bin_hz || f > sample_rate_hz / 2.0 - 2.0 * bin_hz || near_harmonic {
                continue;
            }
            let idx = if sign > 0.0 { k } else { len - k };
            power.push(buf[idx].norm_sqr());
        }
    }
    if power.len() < 8 {
        return None;
    }
    power.sort_by(f64::total_cmp);
    let keep = ((power.len() as f64 * KEEP).round() as usize).max(1);
    let mean = power[..keep].iter().sum::<f64>() / keep as f64 / trimmed_exponential_mean();
    // |C_k|² = 4|Y_k|²/L² has mean 2σq².
    Some((2.0 * mean).sqrt() / len as f64)
}
