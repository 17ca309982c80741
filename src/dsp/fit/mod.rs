//! Least-squares tone fits (IEEE Std 1057 / 1241 style).
//!
//! The model on every channel is `dc + Σ_k (c_k·cos(kωt) + s_k·sin(kωt))` for
//! the fundamental and its low harmonics, with `t = n − center` measured from
//! the middle of the record so that the normal equations stay well
//! conditioned. The basis is the same for every channel of a capture, so one
//! Gram matrix and one Cholesky factor serve them all; per channel only the
//! projections `Σ x·φ` are accumulated, in f64.
//!
//! Here: the model, the fit and its closed-form Gram matrix. `lanes`: the
//! multichannel passes over interleaved frames (projections, explicit
//! residual). `derived`: the fit and the residual statistics in one pass.
//! `bands`: band-limited floors from the residual. `frequency`: the coarse
//! peak and the Gauss-Newton frequency estimate.

use super::frames::{Frames, LANES};
use super::linalg::Cholesky;
use super::osc::{fill_harmonics, BLOCK};
use rustfft::num_complex::Complex;
use std::f64::consts::PI;
use thiserror::Error;
use wide::f64x8;

/// Why a fit could not be made.
#[derive(Debug, Error, Clone, PartialEq)]
pub enum FitError {
    /// Too few samples for the number of unknowns.
    #[error("record of {samples} samples is too short to fit {params} parameters")]
    TooShort {
        /// Samples in the record.
        samples: usize,
        /// Unknowns in the model.
        params: usize,
    },
    /// The basis is degenerate (a frequency at 0 or at the Nyquist frequency).
    #[error("degenerate fit at {freq_hz} Hz")]
    Degenerate {
        /// Fundamental frequency of the fit.
        freq_hz: f64,
    },
    /// No tone was found near the nominal frequency.
    #[error("no tone found within {search_pct}% of {nominal_hz} Hz")]
    NoTone {
        /// Nominal frequency searched around.
        nominal_hz: f64,
        /// Half-width of the search, in percent of the nominal frequency.
        search_pct: f64,
    },
}

/// What is fitted: the fundamental's angular frequency in radians per sample,
/// the number of sinusoidal terms (fundamental plus harmonics), and the
/// sample index that counts as `t = 0`.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ToneModel {
    /// Fundamental in radians per sample.
    pub omega: f64,
    /// Sinusoidal terms: 1 for the fundamental alone, 5 for up to the 5th harmonic.
    pub terms: usize,
    /// Sample index of `t = 0` (the middle of the record).
    pub center: f64,
}

impl ToneModel {
    /// A model for a record of `len` samples at `freq_hz` with up to
    /// `max_harmonic` (≥ 1) terms; harmonics within 1 % of the Nyquist
    /// frequency or above it are left out.
    pub fn new(freq_hz: f64, sample_rate_hz: f64, len: usize, max_harmonic: usize) -> Self {
        let omega = 2.0 * PI * freq_hz / sample_rate_hz;
        let terms = (1..=max_harmonic.max(1))
            .take_while(|k| *k as f64 * freq_hz < 0.49 * sample_rate_hz)
            .count()
            .max(1);
        Self {
            omega,
            terms,
            center: (len as f64 - 1.0) / 2.0,
        }
    }

    /// Number of unknowns: DC plus two per sinusoidal term.
    pub fn params(&self) -> usize {
        1 + 2 * self.terms
    }

    /// Fundamental frequency in Hz at `sample_rate_hz`.
    pub fn freq_hz(&self, sample_rate_hz: f64) -> f64 {
        self.omega * sample_rate_hz / (2.0 * PI)
    }
}

/// The fitted parameters of one channel.
#[derive(Debug, Clone, PartialEq)]
pub struct ToneFit {
    /// DC offset (full scale 1.0).
    pub dc: f64,
    /// Cosine coefficients, fundamental first.
    pub cos: Vec<f64>,
    /// Sine coefficients, fundamental first.
    pub sin: Vec<f64>,
}

impl ToneFit {
    /// Peak amplitude of term `k` (0 = fundamental).
    pub fn amplitude(&self, k: usize) -> f64 {
        self.cos[k].hypot(self.sin[k])
    }

    /// Peak amplitude of the fundamental.
    pub fn fundamental(&self) -> f64 {
        self.amplitude(0)
    }

    /// Phase of term `k` in radians, as `a·cos(kωt + φ)`.
    pub fn phase(&self, k: usize) -> f64 {
        (-self.sin[k]).atan2(self.cos[k])
    }
}

/// Block buffers for the basis columns.
struct BasisBlock {
    cos: Vec<Vec<f64>>,
    sin: Vec<Vec<f64>>,
}

impl BasisBlock {
    fn new(terms: usize) -> Self {
        Self {
            cos: vec![vec![0.0; BLOCK]; terms],
            sin: vec![vec![0.0; BLOCK]; terms],
        }
    }

    fn fill(&mut self, model: &ToneModel, n0: usize, len: usize) {
        fill_harmonics(
            model.omega,
            model.center,
            n0,
            len,
            &mut self.cos,
            &mut self.sin,
        );
    }

    /// Take `fit`'s model off the samples in `r` (the block's first
    /// `r.len()` frames), harmonic by harmonic, vectorised along time.
    fn subtract_model(&self, fit: &ToneFit, r: &mut [f64]) {
        let m = r.len();
        for v in r.iter_mut() {
            *v -= fit.dc;
        }
        for (k, (a, b)) in fit.cos.iter().zip(&fit.sin).enumerate() {
            for ((v, c), s) in r.iter_mut().zip(&self.cos[k][..m]).zip(&self.sin[k][..m]) {
                *v -= a * c + b * s;
            }
        }
    }

    /// Column `p` of the basis `[1, cos1, sin1, cos2, sin2, …]`, or `None` for DC.
    fn column(&self, p: usize) -> Option<&[f64]> {
        match p {
            0 => None,
            _ => {
                let k = (p - 1) / 2;
                Some(if p % 2 == 1 {
                    &self.cos[k]
                } else {
                    &self.sin[k]
                })
            }
        }
    }
}

use super::kernels::{dot, sum, widen};

/// Gram matrix of the model's basis over `len` samples, summed sample by
/// sample (the reference for [`gram`]).
#[cfg_attr(not(test), allow(dead_code))]
fn gram_summed(model: &ToneModel, len: usize) -> Vec<f64> {
    let p = model.params();
    let mut g = vec![0.0; p * p];
    let mut basis = BasisBlock::new(model.terms);
    let mut n0 = 0;
    while n0 < len {
        let m = BLOCK.min(len - n0);
        basis.fill(model, n0, m);
        g[0] += m as f64;
        for i in 1..p {
            let ci = &basis.column(i).unwrap()[..m];
            g[i] += ci.iter().sum::<f64>();
            for j in i..p {
                g[i * p + j] += dot(ci, &basis.column(j).unwrap()[..m]);
            }
        }
        n0 += m;
    }
    for i in 0..p {
        for j in 0..i {
            g[i * p + j] = g[j * p + i];
        }
    }
    g
}

/// `Σ_n cos(θ·(n − c))` over `n < len` with `c = (len − 1)/2`: the Dirichlet
/// kernel `sin(len·θ/2)/sin(θ/2)` (the sine sums vanish by symmetry).
fn dirichlet(theta: f64, len: usize) -> f64 {
    let half = (0.5 * theta).sin();
    if half.abs() < 1e-9 {
        // θ at a multiple of 2π: every term is cos(θ·c).
        let c = (len as f64 - 1.0) / 2.0;
        return len as f64 * (theta * c).cos();
    }
    (0.5 * len as f64 * theta).sin() / half
}

/// Gram matrix of the model's basis over `len` samples, in closed form:
/// with time centred on the record, cos·sin products sum to zero and the
/// others are half-sums of Dirichlet kernels at the sum and difference
/// frequencies.
fn gram(model: &ToneModel, len: usize) -> Vec<f64> {
    let p = model.params();
    let w = model.omega;
    let mut g = vec![0.0; p * p];
    g[0] = len as f64;
    for a in 1..=model.terms {
        let (ca, sa) = (2 * a - 1, 2 * a);
        g[ca] = dirichlet(a as f64 * w, len);
        g[ca * p] = g[ca];
        for b in 1..=model.terms {
            let (cb, sb) = (2 * b - 1, 2 * b);
            let diff = dirichlet((a as f64 - b as f64) * w, len);
            let sum = dirichlet((a + b) as f64 * w, len);
            g[ca * p + cb] = 0.5 * (diff + sum);
            g[sa * p + sb] = 0.5 * (diff - sum);
        }
    }
    g
}

/// Explicit residual `x − model` of one channel into `residual`; returns
/// its sum of squares.
pub fn residual_into(x: &[f32], fit: &ToneFit, model: &ToneModel, residual: &mut Vec<f64>) -> f64 {
    let len = x.len();
    residual.clear();
    residual.reserve(len);
    let mut basis = BasisBlock::new(model.terms);
    let mut r = vec![0.0; BLOCK];
    let mut ss = 0.0;
    let mut n0 = 0;
    while n0 < len {
        let m = BLOCK.min(len - n0);
        basis.fill(model, n0, m);
        let r = &mut r[..m];
        widen(&x[n0..n0 + m], r);
        basis.subtract_model(fit, r);
        ss += dot(r, r);
        residual.extend_from_slice(r);
        n0 += m;
    }
    ss
}

/// Decimation of the mixed-down residual kept for the local-noise estimate.
pub const DECIMATION: usize = 16;

/// The local-noise window of a record of `len` samples: the decimated
/// blocks kept (a fast FFT length), the Hann window over them and its Σw².
fn local_noise_window(len: usize) -> (usize, std::rc::Rc<[f64]>, f64) {
    let blocks = super::plans::smooth_len(len / DECIMATION);
    let window = super::window::HANN.cached(blocks * DECIMATION);
    let energy = super::kernels::dot(&window, &window);
    (blocks, window, energy)
}

/// What the residual pass keeps of one channel.
#[derive(Debug, Clone, Default)]
pub struct ResidualStats {
    /// Σ (x − model)² over the record.
    pub sum_sq: f64,
    /// The residual, Hann-weighted over the first `DECIMATION·baseband.len()`
    /// samples, mixed down by `e^{−jωt}` and summed in blocks of `DECIMATION`.
    pub baseband: Vec<Complex<f64>>,
    /// Σ w² of that Hann window.
    pub window_energy: f64,
}

/// Call `$f::<2·terms>` for the harmonic counts the kernels are built for
/// (up to 10); more harmonics take `$fallback`, the per-channel passes.
macro_rules! by_columns {
    ($terms:expr, $f:ident ( $($arg:expr),* ), $fallback:expr) => {
        match $terms {
            1 => $f::<2>($($arg),*),
            2 => $f::<4>($($arg),*),
            3 => $f::<6>($($arg),*),
            4 => $f::<8>($($arg),*),
            5 => $f::<10>($($arg),*),
            6 => $f::<12>($($arg),*),
            7 => $f::<14>($($arg),*),
            8 => $f::<16>($($arg),*),
            9 => $f::<18>($($arg),*),
            10 => $f::<20>($($arg),*),
            _ => $fallback,
        }
    };
}

mod bands;
mod derived;
mod frequency;
mod lanes;
#[cfg(test)]
mod tests;

pub use bands::residual_band_powers;
pub use derived::fit_with_residuals;
pub use frequency::{coarse_frequency, estimate_frequency, estimate_frequency_from, FrequencyFit};
use lanes::*;
pub use lanes::{residual_frames, residual_pass};

/// The factor of the model's Gram matrix over `len` samples, shared by every
/// channel's solve; an error when the record is too short or the basis
/// degenerate.
fn gram_factor(model: &ToneModel, len: usize) -> Result<Cholesky, FitError> {
    let p = model.params();
    if len < 2 * p + 2 {
        return Err(FitError::TooShort {
            samples: len,
            params: p,
        });
    }
    Cholesky::new(&gram(model, len), p).ok_or(FitError::Degenerate {
        freq_hz: model.omega / (2.0 * PI),
    })
}

/// Fit `model` to every channel of `frames` at once.
pub fn fit_frames(frames: Frames, model: &ToneModel) -> Result<Vec<ToneFit>, FitError> {
    let chol = gram_factor(model, frames.len())?;
    // Side by side the lanes pay off from half a group of channels on;
    // fewer channels are summed one by one, vectorised along time.
    let proj = if frames.channels() < LANES / 2 {
        by_columns!(
            model.terms,
            project_along(frames, model),
            project_channels(frames, model)
        )
    } else {
        by_columns!(
            model.terms,
            project_lanes(frames, model),
            project_channels(frames, model)
        )
    };
    Ok(proj
        .into_iter()
        .map(|b| {
            let theta = chol.solve(&b);
            ToneFit {
                dc: theta[0],
                cos: theta[1..].iter().step_by(2).copied().collect(),
                sin: theta[2..].iter().step_by(2).copied().collect(),
            }
        })
        .collect())
}

/// Fit `model` to every channel at once. All channels must have the same length.
///
/// # Panics
/// When the channels differ in length.
pub fn fit_tones(channels: &[&[f32]], model: &ToneModel) -> Result<Vec<ToneFit>, FitError> {
    if channels.is_empty() {
        return Ok(Vec::new());
    }
    let data = super::frames::interleave(channels);
    fit_frames(Frames::new(&data, channels.len()), model)
}
