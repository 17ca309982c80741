//! Noise near the test frequency, from the explicit residual.
//!
//! A victim's fitted tone must be told apart from the noise that lands in the
//! fit. That noise is estimated where it matters, next to the test frequency:
//! the residual is mixed down by `e^{−jωt}`, and its DFT at the offsets
//! `f + k·fs/L` (`3 ≤ |k| ≤ 41`, away from the tone's own bin) gives, bin by
//! bin, what a fit at a neighbouring frequency would return. Their mean
//! square is the quadrature variance of a fit at `f`. A Hann window keeps
//! discrete lines (mains harmonics) a few dozen bins away from leaking into
//! the bins next to `f`, as they do not leak into the fit itself; the bins
//! are normalised by the window's energy, so white noise reads the same.
//!
//! Discrete lines (mains harmonics) near `f` would inflate a plain mean, so
//! bins are censored: starting from the median (ln 2 times the mean for the
//! exponential law of `|Y|²` under Gaussian noise), bins above four times the
//! running mean are set aside and the mean of the rest is divided by the
//! truncated exponential's mean below that point; two rounds settle it. For
//! white noise this is unbiased; a line only raises the bins it occupies.

use super::osc::{fill_harmonics, BLOCK};
use rustfft::num_complex::Complex;
use rustfft::FftPlanner;

/// Offsets (in bins of `fs/L`) used around the test frequency.
pub const OFFSETS: std::ops::RangeInclusive<usize> = 3..=41;

/// Bins above this multiple of the estimated mean count as lines.
pub const CENSOR: f64 = 4.0;

/// Mean of an Exp(1) variable below `t`: `(1 − e^{−t}(1 + t)) / (1 − e^{−t})`.
fn truncated_exponential_mean(t: f64) -> f64 {
    (1.0 - (-t).exp() * (1.0 + t)) / (1.0 - (-t).exp())
}

/// Mean power of the noise among `power` (sorted ascending), lines set aside.
fn censored_mean(power: &[f64]) -> f64 {
    let mut mean = power[power.len() / 2] / std::f64::consts::LN_2;
    for _ in 0..2 {
        let limit = CENSOR * mean;
        let kept: Vec<f64> = power.iter().copied().filter(|p| *p <= limit).collect();
        if kept.is_empty() {
            break;
        }
        mean = kept.iter().sum::<f64>() / kept.len() as f64 / truncated_exponential_mean(CENSOR);
    }
    mean
}

/// Standard deviation of each quadrature part of a fitted tone's amplitude,
/// from the baseband residual of an `L`-sample record. Offsets that would fall
/// below 0 Hz, above the Nyquist frequency or onto a harmonic are left out;
/// returns `None` when fewer than eight offsets remain.
pub fn quadrature_sigma(
    residual: &[f64],
    freq_hz: f64,
    sample_rate_hz: f64,
    terms: usize,
    planner: &mut FftPlanner<f64>,
) -> Option<f64> {
    let len = residual.len();
    if len < 64 {
        return None;
    }
    let bin_hz = sample_rate_hz / len as f64;
    let window = crate::dsp::window::HANN.cached(len);
    let mut energy = 0.0;
    // Mix down by e^{−jωn}, a rotating phasor with exact values every block.
    let omega = 2.0 * std::f64::consts::PI * freq_hz / sample_rate_hz;
    let mut buf: Vec<Complex<f64>> = Vec::with_capacity(len);
    let (mut c, mut s) = (vec![vec![0.0; BLOCK]], vec![vec![0.0; BLOCK]]);
    for n0 in (0..len).step_by(BLOCK) {
        let m = BLOCK.min(len - n0);
        fill_harmonics(omega, 0.0, n0, m, &mut c, &mut s);
        for i in 0..m {
            let w = window[n0 + i];
            energy += w * w;
            let r = residual[n0 + i] * w;
            buf.push(Complex::new(r * c[0][i], -r * s[0][i]));
        }
    }
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
    let mean = censored_mean(&power);
    // White noise of variance σ² gives E|Y_k|² = σ²·Σw²; each quadrature
    // part of an L-sample fit has variance 2σ²/L.
    Some((2.0 * mean / (energy * len as f64)).sqrt())
}

/// [`quadrature_sigma`] from the decimated baseband of
/// [`crate::dsp::fit::residual_pass`]: the DFT of the block sums at bin `k`
/// has, for white noise, the same mean power as the full DFT (its kernel has
/// unit modulus), and lines further than a few hundred hertz away alias into
/// it attenuated by the block sum's nulls. `fit_len` is the length of the fit.
/// The baseband is transformed in place, so `stats` is taken whole.
pub fn quadrature_sigma_decimated(
    mut stats: crate::dsp::fit::ResidualStats,
    decimation: usize,
    fit_len: usize,
    freq_hz: f64,
    sample_rate_hz: f64,
    terms: usize,
) -> Option<f64> {
    let m = stats.baseband.len();
    if m < 2 * OFFSETS.end() + 8 {
        return None;
    }
    let bin_hz = sample_rate_hz / (m * decimation) as f64;
    super::plans::complex_forward(m).process(&mut stats.baseband);
    let power = offset_bins(&stats.baseband, freq_hz, bin_hz, sample_rate_hz, terms);
    if power.len() < 8 {
        return None;
    }
    let mean = censored_mean(&power);
    Some((2.0 * mean / (stats.window_energy * fit_len as f64)).sqrt())
}

/// |Y_k|² at the offsets around `freq_hz` that are usable, sorted ascending.
fn offset_bins(
    buf: &[Complex<f64>],
    freq_hz: f64,
    bin_hz: f64,
    sample_rate_hz: f64,
    terms: usize,
) -> Vec<f64> {
    let len = buf.len();
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
    power.sort_by(f64::total_cmp);
    power
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::dsp::fit::{fit_tones, residual_into, residual_pass, ToneModel, DECIMATION};
    use rand::{Rng, SeedableRng};
    use rand_distr::StandardNormal;

    /// The decimated estimate against the full-length one on the same records.
    #[test]
    fn decimated_estimate_agrees_with_the_full_one() {
        let mut rng = rand::rngs::StdRng::seed_from_u64(5);
        let mut planner = FftPlanner::new();
        let (mut ratio_sum, trials) = (0.0, 60);
        for t in 0..trials {
            let f = 200.0 + 300.0 * t as f64;
            let x: Vec<f32> = (0..48_000)
                .map(|n| {
                    (1e-3 * rng.sample::<f64, _>(StandardNormal)
                        + 0.3 * (2.0 * std::f64::consts::PI * f * n as f64 / 48_000.0).sin())
                        as f32
                })
                .collect();
            let model = ToneModel::new(f, 48_000.0, x.len(), 5);
            let fits = fit_tones(&[&x], &model).unwrap();
            let mut r = Vec::new();
            let ss = residual_into(&x, &fits[0], &model, &mut r);
            let full = quadrature_sigma(&r, f, 48_000.0, model.terms, &mut planner).unwrap();
            let mut kept = vec![Vec::new()];
            let st = residual_pass(&[&x], &fits, &model, &[true], &mut kept);
            assert!((st[0].sum_sq / ss - 1.0).abs() < 1e-9);
            let worst = kept[0]
                .iter()
                .zip(&r)
                .map(|(a, b)| (a - b).abs())
                .fold(0.0, f64::max);
            assert!(
                kept[0].len() == r.len() && worst < 1e-12,
                "residuals differ by {worst}"
            );
            let dec = quadrature_sigma_decimated(
                st[0].clone(),
                DECIMATION,
                x.len(),
                f,
                48_000.0,
                model.terms,
            )
            .unwrap();
            assert!((dec / full - 1.0).abs() < 0.25, "{f} Hz: {dec} vs {full}");
            ratio_sum += dec / (1e-3 * (2.0f64 / 48_000.0).sqrt());
        }
        // Unbiased for white noise within the spread of 60 estimates.
        assert!(
            (ratio_sum / trials as f64 - 1.0).abs() < 0.03,
            "{}",
            ratio_sum / trials as f64
        );
    }
}
