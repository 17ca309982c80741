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
