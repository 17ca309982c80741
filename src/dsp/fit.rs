//! Least-squares tone fits (IEEE Std 1057 / 1241 style).
//!
//! The model on every channel is `dc + Σ_k (c_k·cos(kωt) + s_k·sin(kωt))` for
//! the fundamental and its low harmonics, with `t = n − center` measured from
//! the middle of the record so that the normal equations stay well
//! conditioned. The basis is the same for every channel of a capture, so one
//! Gram matrix and one Cholesky factor serve them all; per channel only the
//! projections `Σ x·φ` are accumulated, in f64.

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
        for v in r.iter_mut() {
            *v -= fit.dc;
        }
        // Harmonic by harmonic over the block (vectorised along time).
        for k in 0..model.terms {
            let (a, b) = (fit.cos[k], fit.sin[k]);
            for ((v, c), s) in r.iter_mut().zip(&basis.cos[k][..m]).zip(&basis.sin[k][..m]) {
                *v -= a * c + b * s;
            }
        }
        ss += dot(r, r);
        residual.extend_from_slice(r);
        n0 += m;
    }
    ss
}

/// Decimation of the mixed-down residual kept for the local-noise estimate.
pub const DECIMATION: usize = 16;

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

// ---------------------------------------------------------------------------
// Multichannel passes over interleaved frames.
//
// The basis (cos and sin of each harmonic) is generated once per frame and
// laid out frame by frame; LANES neighbouring channels are accumulated side by
// side, so each frame costs one load of the samples and one multiply-add per
// basis column for LANES channels at once. The number of basis columns is a
// const generic so that every accumulator stays in a register.

/// Frames per block of the multichannel passes (a multiple of [`DECIMATION`]).
const FRAME_BLOCK: usize = BLOCK;

/// Basis values of a block, frame by frame: `[cos ωt, sin ωt, cos 2ωt, …]`.
struct BasisRows<const C: usize> {
    columns: BasisBlock,
    rows: Vec<[f64; C]>,
}

impl<const C: usize> BasisRows<C> {
    fn new() -> Self {
        Self {
            columns: BasisBlock::new(C / 2),
            rows: vec![[0.0; C]; FRAME_BLOCK],
        }
    }

    fn fill(&mut self, model: &ToneModel, n0: usize, m: usize) -> &[[f64; C]] {
        self.columns.fill(model, n0, m);
        for (t, row) in self.rows[..m].iter_mut().enumerate() {
            for k in 0..C / 2 {
                row[2 * k] = self.columns.cos[k][t];
                row[2 * k + 1] = self.columns.sin[k][t];
            }
        }
        &self.rows[..m]
    }
}

/// Per lane: Σx and Σx·φ for every basis column φ.
#[derive(Clone, Copy)]
struct LaneSums<const C: usize> {
    sum: f64x8,
    proj: [f64x8; C],
}

impl<const C: usize> LaneSums<C> {
    const ZERO: Self = Self {
        sum: f64x8::ZERO,
        proj: [f64x8::ZERO; C],
    };

    fn add(&mut self, o: &Self) {
        self.sum += o.sum;
        for q in 0..C {
            self.proj[q] += o.proj[q];
        }
    }
}

/// The sums of lane group `g` over one block.
#[inline(always)]
fn project_group<const C: usize>(block: Frames, g: usize, rows: &[[f64; C]]) -> LaneSums<C> {
    let mut s = LaneSums::<C>::ZERO;
    for (t, b) in rows.iter().enumerate() {
        let x = block.lanes(t, g);
        s.sum += x;
        #[allow(clippy::needless_range_loop)] // indexing keeps the accumulators in registers
        for q in 0..C {
            s.proj[q] = x.mul_add(f64x8::splat(b[q]), s.proj[q]);
        }
    }
    s
}

/// Projections `[Σx, Σx·φ_1, …]` of every channel.
fn project_lanes<const C: usize>(frames: Frames, model: &ToneModel) -> Vec<Vec<f64>> {
    let len = frames.len();
    let mut totals = vec![LaneSums::<C>::ZERO; frames.groups()];
    let mut basis = BasisRows::<C>::new();
    for n0 in (0..len).step_by(FRAME_BLOCK) {
        let m = FRAME_BLOCK.min(len - n0);
        let rows = basis.fill(model, n0, m);
        let block = frames.slice(n0..n0 + m);
        frames
            .slice((n0 + m).min(len)..(n0 + m + FRAME_BLOCK).min(len))
            .prefetch();
        for (g, total) in totals.iter_mut().enumerate() {
            total.add(&project_group(block, g, rows));
        }
    }
    (0..frames.channels())
        .map(|c| {
            let (s, l) = (&totals[c / LANES], c % LANES);
            let mut b = Vec::with_capacity(C + 1);
            b.push(s.sum.as_array()[l]);
            b.extend(s.proj.iter().map(|p| p.as_array()[l]));
            b
        })
        .collect()
}

/// Per channel, the projections of [`project_lanes`] by the per-channel passes.
fn project_channels(frames: Frames, model: &ToneModel) -> Vec<Vec<f64>> {
    let len = frames.len();
    let p = model.params();
    let channels = super::frames::deinterleave(frames);
    let mut out = vec![vec![0.0; p]; channels.len()];
    let mut basis = BasisBlock::new(model.terms);
    let mut xf = vec![0.0; BLOCK];
    let mut n0 = 0;
    while n0 < len {
        let m = BLOCK.min(len - n0);
        basis.fill(model, n0, m);
        for (c, x) in channels.iter().enumerate() {
            let xf = &mut xf[..m];
            widen(&x[n0..n0 + m], xf);
            let b = &mut out[c];
            b[0] += sum(xf);
            for (i, bi) in b.iter_mut().enumerate().skip(1) {
                *bi += dot(xf, &basis.column(i).unwrap()[..m]);
            }
        }
        n0 += m;
    }
    out
}

/// The projections of [`project_channels`], eight samples at a time along
/// time (for few channels, where side-by-side lanes would stay empty).
fn project_along<const C: usize>(frames: Frames, model: &ToneModel) -> Vec<Vec<f64>> {
    let len = frames.len();
    let channels = super::frames::deinterleave(frames);
    let mut basis = BasisBlock::new(C / 2);
    // BLOCK is a multiple of LANES; past a short last block the samples are
    // zero, so the stale basis values there add nothing.
    let mut xf = vec![0.0; BLOCK];
    let mut acc = vec![(f64x8::ZERO, [f64x8::ZERO; C]); channels.len()];
    let load = |v: &[f64], i: usize| f64x8::new(v[i..i + LANES].try_into().unwrap());
    let mut n0 = 0;
    while n0 < len {
        let m = BLOCK.min(len - n0);
        basis.fill(model, n0, m);
        for (x, (s1, pr)) in channels.iter().zip(acc.iter_mut()) {
            widen(&x[n0..n0 + m], &mut xf[..m]);
            xf[m..].fill(0.0);
            for i in (0..m).step_by(LANES) {
                let xv = load(&xf, i);
                *s1 += xv;
                for k in 0..C / 2 {
                    pr[2 * k] = xv.mul_add(load(&basis.cos[k], i), pr[2 * k]);
                    pr[2 * k + 1] = xv.mul_add(load(&basis.sin[k], i), pr[2 * k + 1]);
                }
            }
        }
        n0 += m;
    }
    acc.iter()
        .map(|(s1, pr)| {
            let mut b = vec![s1.reduce_add()];
            b.extend(pr.iter().map(|v| v.reduce_add()));
            b
        })
        .collect()
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

/// Fit `model` to every channel of `frames` at once.
pub fn fit_frames(frames: Frames, model: &ToneModel) -> Result<Vec<ToneFit>, FitError> {
    let len = frames.len();
    let p = model.params();
    if len < 2 * p + 2 {
        return Err(FitError::TooShort {
            samples: len,
            params: p,
        });
    }
    let chol = Cholesky::new(&gram(model, len), p).ok_or(FitError::Degenerate {
        freq_hz: model.omega / (2.0 * PI),
    })?;
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

/// Per lane: the fitted coefficients of a lane group.
struct LaneCoefs<const C: usize> {
    dc: f64x8,
    coef: [f64x8; C],
}

impl<const C: usize> LaneCoefs<C> {
    fn new(fits: &[ToneFit]) -> Self {
        let (mut dc, mut coef) = ([0.0; LANES], [[0.0; LANES]; C]);
        for (l, f) in fits.iter().enumerate() {
            dc[l] = f.dc;
            for k in 0..C / 2 {
                coef[2 * k][l] = f.cos[k];
                coef[2 * k + 1][l] = f.sin[k];
            }
        }
        Self {
            dc: f64x8::new(dc),
            coef: coef.map(f64x8::new),
        }
    }
}

/// What the residual pass does with one block of one lane group.
struct ResidualBlock<'a, const C: usize> {
    rows: &'a [[f64; C]],
    /// Per frame: the window times cos ωt and sin ωt (0 past the window).
    mix: &'a [(f64, f64)],
}

/// Residual of lane group `g` over one block: adds Σr² to `sum_sq`, writes
/// the decimated baseband (Σ r·w·cos ωt and Σ r·w·sin ωt per `DECIMATION`
/// frames) into `baseband`, and with `KEEP` the residual itself into `kept`
/// (one row per frame).
#[inline(always)]
fn residual_group<const C: usize, const KEEP: bool>(
    block: Frames,
    g: usize,
    coefs: &LaneCoefs<C>,
    job: &ResidualBlock<C>,
    sum_sq: &mut f64x8,
    baseband: &mut [[f64x8; 2]],
    kept: &mut [[f64; LANES]],
) {
    let mut ss = f64x8::ZERO;
    // Local copies, so that the coefficients stay in registers.
    let (dc, coef) = (coefs.dc, coefs.coef);
    let chunks = job.rows.chunks(DECIMATION).zip(job.mix.chunks(DECIMATION));
    for ((d, (rows, mix)), out) in chunks.enumerate().zip(baseband.iter_mut()) {
        let t0 = d * DECIMATION;
        let (mut re, mut im) = (f64x8::ZERO, f64x8::ZERO);
        for (i, (b, &(wc, ws))) in rows.iter().zip(mix).enumerate() {
            let x = block.lanes(t0 + i, g);
            // The model in four independent sums, so that no long chain of
            // dependent multiply-adds forms.
            let mut part = [dc, f64x8::ZERO, f64x8::ZERO, f64x8::ZERO];
            for q in 0..C {
                part[q % 4] = coef[q].mul_add(f64x8::splat(b[q]), part[q % 4]);
            }
            let r = x - ((part[0] + part[1]) + (part[2] + part[3]));
            ss = r.mul_add(r, ss);
            re = r.mul_add(f64x8::splat(wc), re);
            im = r.mul_add(f64x8::splat(ws), im);
            if KEEP {
                kept[t0 + i] = r.to_array();
            }
        }
        *out = [re, im];
    }
    *sum_sq += ss;
}

/// The residual pass of [`residual_frames`] with the channels side by side.
#[allow(clippy::too_many_arguments)]
fn residual_lanes<const C: usize>(
    frames: Frames,
    fits: &[ToneFit],
    model: &ToneModel,
    need: &[bool],
    keep: &[bool],
    kept: &mut [Vec<f64>],
    stats: &mut [ResidualStats],
    window: &[f64],
    blocks: usize,
) {
    let len = frames.len();
    let nch = frames.channels();
    let coefs: Vec<LaneCoefs<C>> = fits.chunks(LANES).map(LaneCoefs::new).collect();
    let mut sum_sq = vec![f64x8::ZERO; frames.groups()];
    let mut basis = BasisRows::<C>::new();
    let mut mix = vec![(0.0, 0.0); FRAME_BLOCK];
    let mut rows_kept = vec![[0.0; LANES]; FRAME_BLOCK];
    let mut baseband = vec![[f64x8::ZERO; 2]; FRAME_BLOCK / DECIMATION];
    for n0 in (0..len).step_by(FRAME_BLOCK) {
        let m = FRAME_BLOCK.min(len - n0);
        let rows = basis.fill(model, n0, m);
        for (t, mx) in mix[..m].iter_mut().enumerate() {
            let w = window.get(n0 + t).copied().unwrap_or(0.0);
            *mx = (w * rows[t][0], w * rows[t][1]);
        }
        let job = ResidualBlock {
            rows,
            mix: &mix[..m],
        };
        // Decimated samples of this block that are kept.
        let first = n0 / DECIMATION;
        let wanted = blocks.saturating_sub(first).min(m.div_ceil(DECIMATION));
        let block = frames.slice(n0..n0 + m);
        frames
            .slice((n0 + m).min(len)..(n0 + m + FRAME_BLOCK).min(len))
            .prefetch();
        for g in 0..frames.groups() {
            let chans = g * LANES..(g * LANES + LANES).min(nch);
            if !need[chans.clone()].iter().any(|k| *k) {
                continue;
            }
            let keeping = keep[chans.clone()].iter().any(|k| *k);
            let bb = &mut baseband[..m.div_ceil(DECIMATION)];
            if keeping {
                residual_group::<C, true>(
                    block,
                    g,
                    &coefs[g],
                    &job,
                    &mut sum_sq[g],
                    bb,
                    &mut rows_kept[..m],
                );
            } else {
                residual_group::<C, false>(block, g, &coefs[g], &job, &mut sum_sq[g], bb, &mut []);
            }
            for (l, st) in stats[chans.clone()].iter_mut().enumerate() {
                st.baseband.extend(
                    bb[..wanted]
                        .iter()
                        .map(|[re, im]| Complex::new(re.as_array()[l], -im.as_array()[l])),
                );
            }
            if keeping {
                for (l, c) in chans.enumerate() {
                    if keep[c] {
                        kept[c].extend(rows_kept[..m].iter().map(|r| r[l]));
                    }
                }
            }
        }
    }
    for (c, st) in stats.iter_mut().enumerate() {
        if need[c] {
            st.sum_sq = sum_sq[c / LANES].as_array()[c % LANES];
        }
    }
}

/// The residual pass of [`residual_frames`], channel by channel.
#[allow(clippy::too_many_arguments)]
fn residual_channels(
    channels: &[&[f32]],
    fits: &[ToneFit],
    model: &ToneModel,
    keep: &[bool],
    kept: &mut [Vec<f64>],
    stats: &mut [ResidualStats],
    window: &[f64],
    blocks: usize,
) {
    let len = channels.first().map_or(0, |x| x.len());
    let mut basis = BasisBlock::new(model.terms);
    let (mut wc, mut ws) = (vec![0.0; BLOCK], vec![0.0; BLOCK]);
    let mut r = vec![0.0; BLOCK];
    let mut n0 = 0;
    while n0 < len {
        let m = BLOCK.min(len - n0);
        basis.fill(model, n0, m);
        for i in 0..m {
            let w = window.get(n0 + i).copied().unwrap_or(0.0);
            wc[i] = w * basis.cos[0][i];
            ws[i] = w * basis.sin[0][i];
        }
        for (c, x) in channels.iter().enumerate() {
            let fit = &fits[c];
            let r = &mut r[..m];
            widen(&x[n0..n0 + m], r);
            for v in r.iter_mut() {
                *v -= fit.dc;
            }
            for k in 0..model.terms {
                let (a, b) = (fit.cos[k], fit.sin[k]);
                for ((v, co), si) in r.iter_mut().zip(&basis.cos[k][..m]).zip(&basis.sin[k][..m]) {
                    *v -= a * co + b * si;
                }
            }
            let st = &mut stats[c];
            st.sum_sq += dot(r, r);
            for (j, chunk) in r.chunks(DECIMATION).enumerate() {
                if chunk.len() == DECIMATION && st.baseband.len() < blocks {
                    let o = j * DECIMATION;
                    let re = dot(chunk, &wc[o..o + DECIMATION]);
                    let im = -dot(chunk, &ws[o..o + DECIMATION]);
                    st.baseband.push(Complex::new(re, im));
                }
            }
            if keep[c] {
                kept[c].extend_from_slice(r);
            }
        }
        n0 += m;
    }
}

/// One pass over every channel of `frames`: the explicit residual
/// `x − model`, with the basis generated once per frame for all channels.
/// Keeps its sum of squares and its decimated baseband (see
/// [`ResidualStats`]); channels with `keep[c]` also get the whole residual
/// appended to `kept[c]`.
///
/// # Panics
/// When `fits`, `keep` or `kept` do not have one entry per channel.
pub fn residual_frames(
    frames: Frames,
    fits: &[ToneFit],
    model: &ToneModel,
    keep: &[bool],
    kept: &mut [Vec<f64>],
) -> Vec<ResidualStats> {
    let nch = frames.channels();
    assert!(fits.len() == nch && keep.len() == nch && kept.len() == nch);
    let len = frames.len();
    let blocks = super::plans::smooth_len(len / DECIMATION);
    let window = super::window::HANN.cached(blocks * DECIMATION);
    let energy = super::kernels::dot(&window, &window);
    let mut stats: Vec<ResidualStats> = (0..nch)
        .map(|_| ResidualStats {
            sum_sq: 0.0,
            baseband: Vec::with_capacity(blocks),
            window_energy: energy,
        })
        .collect();
    for (c, k) in kept.iter_mut().enumerate() {
        if keep[c] {
            k.reserve(len);
        }
    }
    // Few channels would leave most lanes empty: they go one by one.
    let one_by_one = |kept: &mut [Vec<f64>], stats: &mut [ResidualStats]| {
        let channels = super::frames::deinterleave(frames);
        let channels: Vec<&[f32]> = channels.iter().map(Vec::as_slice).collect();
        residual_channels(&channels, fits, model, keep, kept, stats, &window, blocks);
    };
    if nch < LANES / 2 {
        one_by_one(kept, &mut stats);
        return stats;
    }
    let need = vec![true; nch];
    by_columns!(
        model.terms,
        residual_lanes(frames, fits, model, &need, keep, kept, &mut stats, &window, blocks),
        one_by_one(kept, &mut stats)
    );
    stats
}

/// [`residual_frames`] over separate, equally long channels.
///
/// # Panics
/// When the slices differ in length from each other or from `fits`/`keep`.
pub fn residual_pass(
    channels: &[&[f32]],
    fits: &[ToneFit],
    model: &ToneModel,
    keep: &[bool],
    kept: &mut [Vec<f64>],
) -> Vec<ResidualStats> {
    if channels.is_empty() {
        return Vec::new();
    }
    let data = super::frames::interleave(channels);
    residual_frames(Frames::new(&data, channels.len()), fits, model, keep, kept)
}

// ---------------------------------------------------------------------------
// Fit and residual statistics in one pass.
//
// The residual's sum of squares and its decimated baseband are linear or
// quadratic in the samples, so they follow from sums the fit pass can take
// along: with θ the fitted coefficients and b the projections,
// Σr² = Σx² − θ·b (the normal equations), and the baseband of r is that of x
// less Σ_q θ_q times the baseband of basis column q, which is the same for
// every channel. Each channel's samples are shifted by a constant first (the
// mean of its first block), so that a DC offset does not inflate Σx².
//
// The subtraction Σx² − θ·b loses digits when the tone stands far above the
// residual; channels where Σx² exceeds Σr² by more than `DERIVED_MAX_RATIO`
// (the driven channel, strong leakage) take the explicit pass instead.

/// Largest ratio of the shifted Σx² to the derived Σr² accepted. The sums
/// are good to a few 1e-14 of Σx² (f64 over blocks of a few hundred
/// samples, a basis good to 1e-13), so a derived Σr² is good to about 1e-7.
const DERIVED_MAX_RATIO: f64 = 1e6;

#[cfg(test)]
thread_local! {
    /// Channels whose residual statistics were derived, on this thread.
    static DERIVED: std::cell::Cell<usize> = const { std::cell::Cell::new(0) };
}

/// Channels that the explicit pass handles one by one, from the
/// contiguous copy of a channel or a strided copy, rather than in lanes.
const EXPLICIT_ONE_BY_ONE: usize = 3;

/// What one pass over a lane group gathers besides the projections.
struct GroupStats {
    /// Σ(x − shift)² per lane.
    sum_sq: f64x8,
    /// Per decimated block: Σ (x − shift)·w·cos ωt and Σ (x − shift)·w·sin ωt.
    baseband: Vec<[f64x8; 2]>,
}

/// What [`project_with_stats`] returns.
struct PassSums {
    /// Per channel: the constant taken off its samples.
    shift: Vec<f64>,
    /// Per channel: `[Σx', Σx'·φ_1, …]` with `x' = x − shift`.
    proj: Vec<Vec<f64>>,
    /// Per lane group.
    groups: Vec<GroupStats>,
    /// Per decimated block and basis column `[1, cos ωt, sin ωt, …]`:
    /// `(Σ w·cos ωt·φ_q, Σ w·sin ωt·φ_q)`, `C + 1` entries a block.
    columns: Vec<(f64, f64)>,
}

/// The projections of [`project_lanes`] on shifted samples, with the sums
/// of [`GroupStats`] and the basis columns' basebands over the first
/// `blocks` decimated blocks (Hann `window`).
fn project_with_stats<const C: usize>(
    frames: Frames,
    model: &ToneModel,
    window: &[f64],
    blocks: usize,
) -> PassSums {
    let len = frames.len();
    let nch = frames.channels();
    let head = frames.slice(0..FRAME_BLOCK.min(len));
    let shift: Vec<f64> = (0..nch)
        .map(|c| {
            let x = head.channel(c);
            x.iter().map(|v| f64::from(*v)).sum::<f64>() / x.len().max(1) as f64
        })
        .collect();
    let shifts: Vec<f64x8> = shift
        .chunks(LANES)
        .map(|s| {
            let mut a = [0.0; LANES];
            a[..s.len()].copy_from_slice(s);
            f64x8::new(a)
        })
        .collect();
    let mut totals = vec![LaneSums::<C>::ZERO; frames.groups()];
    let mut groups: Vec<GroupStats> = (0..frames.groups())
        .map(|_| GroupStats {
            sum_sq: f64x8::ZERO,
            baseband: vec![[f64x8::ZERO; 2]; len.div_ceil(DECIMATION)],
        })
        .collect();
    let mut columns = Vec::with_capacity(blocks * (C + 1));
    let mut basis = BasisRows::<C>::new();
    let mut mix = vec![(0.0, 0.0); FRAME_BLOCK];
    for n0 in (0..len).step_by(FRAME_BLOCK) {
        let m = FRAME_BLOCK.min(len - n0);
        let rows = basis.fill(model, n0, m);
        for (t, mx) in mix[..m].iter_mut().enumerate() {
            let w = window.get(n0 + t).copied().unwrap_or(0.0);
            *mx = (w * rows[t][0], w * rows[t][1]);
        }
        let mix = &mix[..m];
        let wanted = blocks
            .saturating_sub(n0 / DECIMATION)
            .min(m.div_ceil(DECIMATION));
        for (rows, mix) in rows
            .chunks(DECIMATION)
            .zip(mix.chunks(DECIMATION))
            .take(wanted)
        {
            // Eight columns at a time (the last chunk padded with zeros).
            let (mut dc, mut re, mut im) = ((0.0, 0.0), [f64x8::ZERO; 3], [f64x8::ZERO; 3]);
            for (b, &(wc, ws)) in rows.iter().zip(mix) {
                dc = (dc.0 + wc, dc.1 + ws);
                let (wc, ws) = (f64x8::splat(wc), f64x8::splat(ws));
                for (i, chunk) in b.chunks(LANES).enumerate() {
                    let mut v = [0.0; LANES];
                    v[..chunk.len()].copy_from_slice(chunk);
                    let v = f64x8::new(v);
                    re[i] = v.mul_add(wc, re[i]);
                    im[i] = v.mul_add(ws, im[i]);
                }
            }
            columns.push(dc);
            let (re, im) = (re.map(|v| v.to_array()), im.map(|v| v.to_array()));
            columns.extend((0..C).map(|q| (re[q / LANES][q % LANES], im[q / LANES][q % LANES])));
        }
        let block = frames.slice(n0..n0 + m);
        frames
            .slice((n0 + m).min(len)..(n0 + m + FRAME_BLOCK).min(len))
            .prefetch();
        let first = n0 / DECIMATION;
        for (g, (total, stats)) in totals.iter_mut().zip(groups.iter_mut()).enumerate() {
            // The group's baseband has room for a whole block past `blocks`.
            let out = &mut stats.baseband[first..first + m.div_ceil(DECIMATION)];
            stats.sum_sq += project_group_stats(block, g, rows, mix, shifts[g], total, out);
        }
    }
    for stats in &mut groups {
        stats.baseband.truncate(blocks);
    }
    let proj = (0..nch)
        .map(|c| {
            let (s, l) = (&totals[c / LANES], c % LANES);
            let mut b = Vec::with_capacity(C + 1);
            b.push(s.sum.as_array()[l]);
            b.extend(s.proj.iter().map(|p| p.as_array()[l]));
            b
        })
        .collect();
    PassSums {
        shift,
        proj,
        groups,
        columns,
    }
}

/// One block of lane group `g` for [`project_with_stats`]: adds the
/// projections to `total`, writes the decimated baseband of every
/// `DECIMATION` frames to `baseband` and returns Σx'². Accumulators are
/// plain locals and nothing is called inside the loop, so that they stay
/// in registers.
#[allow(clippy::too_many_arguments)]
#[inline(always)]
fn project_group_stats<const C: usize>(
    block: Frames,
    g: usize,
    rows: &[[f64; C]],
    mix: &[(f64, f64)],
    shift: f64x8,
    total: &mut LaneSums<C>,
    baseband: &mut [[f64x8; 2]],
) -> f64x8 {
    let (mut sum, mut proj, mut ss) = (f64x8::ZERO, [f64x8::ZERO; C], f64x8::ZERO);
    let (mut re, mut im) = (f64x8::ZERO, f64x8::ZERO);
    let last = rows.len().saturating_sub(1);
    for (t, (b, &(wc, ws))) in rows.iter().zip(mix).enumerate() {
        let x = block.lanes(t, g) - shift;
        sum += x;
        ss = x.mul_add(x, ss);
        #[allow(clippy::needless_range_loop)] // indexing keeps the accumulators in registers
        for q in 0..C {
            proj[q] = x.mul_add(f64x8::splat(b[q]), proj[q]);
        }
        re = x.mul_add(f64x8::splat(wc), re);
        im = x.mul_add(f64x8::splat(ws), im);
        if t % DECIMATION == DECIMATION - 1 || t == last {
            baseband[t / DECIMATION] = [re, im];
            (re, im) = (f64x8::ZERO, f64x8::ZERO);
        }
    }
    total.add(&LaneSums { sum, proj });
    ss
}

/// Fit `model` to every channel of `frames` (as [`fit_frames`]) and give
/// each channel's residual statistics (as [`residual_frames`]), deriving
/// them from sums taken during the fit wherever rounding allows and
/// making the explicit residual pass only for the channels whose tone
/// stands too far above the residual. `copy` may hold a contiguous copy
/// of one channel, `(channel, samples)`, for that pass.
///
/// # Panics
/// When `copy` differs in length from the frames.
pub fn fit_with_residuals(
    frames: Frames,
    model: &ToneModel,
    copy: Option<(usize, &[f32])>,
) -> Result<(Vec<ToneFit>, Vec<ResidualStats>), FitError> {
    let nch = frames.channels();
    let len = frames.len();
    if nch < LANES / 2 || model.terms > 10 {
        let fits = fit_frames(frames, model)?;
        let none = vec![false; nch];
        let stats = residual_frames(frames, &fits, model, &none, &mut vec![Vec::new(); nch]);
        return Ok((fits, stats));
    }
    let p = model.params();
    if len < 2 * p + 2 {
        return Err(FitError::TooShort {
            samples: len,
            params: p,
        });
    }
    let chol = Cholesky::new(&gram(model, len), p).ok_or(FitError::Degenerate {
        freq_hz: model.omega / (2.0 * PI),
    })?;
    let blocks = super::plans::smooth_len(len / DECIMATION);
    let window = super::window::HANN.cached(blocks * DECIMATION);
    let energy = super::kernels::dot(&window, &window);
    let pass = by_columns!(
        model.terms,
        project_with_stats(frames, model, &window, blocks),
        unreachable!("more than 10 terms take the two-pass route")
    );
    let thetas: Vec<Vec<f64>> = pass.proj.iter().map(|b| chol.solve(b)).collect();
    let fits: Vec<ToneFit> = thetas
        .iter()
        .zip(&pass.shift)
        .map(|(theta, shift)| ToneFit {
            dc: theta[0] + shift,
            cos: theta[1..].iter().step_by(2).copied().collect(),
            sin: theta[2..].iter().step_by(2).copied().collect(),
        })
        .collect();
    // Σr² by the normal equations, where the ratio allows.
    let derived: Vec<Option<f64>> = (0..nch)
        .map(|c| {
            let xx = pass.groups[c / LANES].sum_sq.as_array()[c % LANES];
            let tb: f64 = thetas[c]
                .iter()
                .zip(&pass.proj[c])
                .map(|(t, b)| t * b)
                .sum();
            let rr = xx - tb;
            (rr > 0.0 && rr * DERIVED_MAX_RATIO >= xx).then_some(rr)
        })
        .collect();
    let need: Vec<bool> = derived.iter().map(Option::is_none).collect();
    #[cfg(test)]
    DERIVED.with(|d| d.set(d.get() + need.iter().filter(|n| !**n).count()));
    let mut stats = explicit_residuals(frames, &fits, model, &need, copy);
    // The derived basebands, lane group by lane group.
    let q = p;
    for (g, group) in pass.groups.iter().enumerate() {
        let chans = g * LANES..(g * LANES + LANES).min(nch);
        if chans.clone().all(|c| need[c]) {
            continue;
        }
        let mut theta = vec![[0.0; LANES]; q];
        for (l, c) in chans.clone().enumerate() {
            for (t, v) in theta.iter_mut().zip(&thetas[c]) {
                t[l] = *v;
            }
        }
        let theta: Vec<f64x8> = theta.into_iter().map(f64x8::new).collect();
        // (Each built on its own: a cloned empty Vec would not keep the capacity.)
        let mut out: Vec<Vec<Complex<f64>>> = (0..chans.len())
            .map(|_| Vec::with_capacity(group.baseband.len()))
            .collect();
        for (j, [xr, xi]) in group.baseband.iter().enumerate() {
            let (mut re, mut im) = (*xr, *xi);
            for (t, (cr, ci)) in theta.iter().zip(&pass.columns[j * q..(j + 1) * q]) {
                re = (-*t).mul_add(f64x8::splat(*cr), re);
                im = (-*t).mul_add(f64x8::splat(*ci), im);
            }
            let (re, im) = (re.as_array(), im.as_array());
            for (l, o) in out.iter_mut().enumerate() {
                o.push(Complex::new(re[l], -im[l]));
            }
        }
        for ((l, c), baseband) in chans.enumerate().zip(out) {
            if let Some(rr) = derived[c] {
                stats[c] = ResidualStats {
                    sum_sq: rr,
                    baseband,
                    window_energy: energy,
                };
                debug_assert!(l < LANES);
            }
        }
    }
    Ok((fits, stats))
}

/// The explicit residual pass of [`fit_with_residuals`] for the channels
/// with `need[c]`; the others get empty statistics.
fn explicit_residuals(
    frames: Frames,
    fits: &[ToneFit],
    model: &ToneModel,
    need: &[bool],
    copy: Option<(usize, &[f32])>,
) -> Vec<ResidualStats> {
    let nch = frames.channels();
    let count = need.iter().filter(|n| **n).count();
    if count == 0 {
        return vec![ResidualStats::default(); nch];
    }
    let len = frames.len();
    let blocks = super::plans::smooth_len(len / DECIMATION);
    let window = super::window::HANN.cached(blocks * DECIMATION);
    let energy = super::kernels::dot(&window, &window);
    if count > EXPLICIT_ONE_BY_ONE {
        let mut stats: Vec<ResidualStats> = (0..nch)
            .map(|_| ResidualStats {
                sum_sq: 0.0,
                baseband: Vec::new(),
                window_energy: energy,
            })
            .collect();
        let none = vec![false; nch];
        by_columns!(
            model.terms,
            residual_lanes(
                frames,
                fits,
                model,
                need,
                &none,
                &mut [],
                &mut stats,
                &window,
                blocks
            ),
            unreachable!("more than 10 terms take the two-pass route")
        );
        return stats;
    }
    let mut stats = vec![ResidualStats::default(); nch];
    for c in (0..nch).filter(|c| need[*c]) {
        let owned;
        let x: &[f32] = match copy {
            Some((k, x)) if k == c => {
                assert_eq!(x.len(), frames.len(), "copy of channel {c}");
                x
            }
            _ => {
                owned = frames.channel(c);
                &owned
            }
        };
        let mut one = [ResidualStats {
            sum_sq: 0.0,
            baseband: Vec::with_capacity(blocks),
            window_energy: energy,
        }];
        residual_channels(
            &[x],
            &fits[c..=c],
            model,
            &[false],
            &mut [Vec::new()],
            &mut one,
            &window,
            blocks,
        );
        let [st] = one;
        stats[c] = st;
    }
    stats
}

/// Welch band powers ([`super::psd::band_powers`]) of the residual
/// `x − model` of the listed `channels` of `frames`, one entry per listed
/// channel. The residual is computed once per frame, half a segment at a
/// time (the segments overlap by half), with eight channels side by side;
/// nothing longer than a segment is kept.
///
/// # Panics
/// When `fits` does not have one entry per channel of `frames`, or a listed
/// channel is out of range.
pub fn residual_band_powers(
    frames: Frames,
    fits: &[ToneFit],
    model: &ToneModel,
    channels: &[usize],
    sample_rate_hz: f64,
    bands: &[super::psd::Band],
) -> Vec<Vec<f64>> {
    assert_eq!(fits.len(), frames.channels(), "one fit per channel");
    let Some(mut welch) = super::psd::Welch::new(frames.len(), channels.len()) else {
        return vec![vec![0.0; bands.len()]; channels.len()];
    };
    let seg = welch.segment();
    let starts = welch.starts();
    // Segment s is made of pieces s and s + 1 (a lone segment of odd
    // length is one piece).
    let (piece, pieces) = if seg.is_multiple_of(2) {
        (seg / 2, starts.len() + 1)
    } else {
        (seg, 1)
    };
    let mut ring = vec![vec![vec![0.0; piece]; channels.len()]; 2];
    let mut buf = vec![0.0; seg];
    for h in 0..pieces {
        let (now, before) = (h % 2, 1 - h % 2);
        by_columns!(
            model.terms,
            residual_piece(frames, fits, model, channels, h * piece, &mut ring[now]),
            residual_piece_plain(frames, fits, model, channels, h * piece, &mut ring[now])
        );
        if pieces > 1 && h == 0 {
            continue;
        }
        for (r, (earlier, latest)) in ring[before].iter().zip(&ring[now]).enumerate() {
            if pieces == 1 {
                buf.copy_from_slice(latest);
            } else {
                buf[..piece].copy_from_slice(earlier);
                buf[piece..].copy_from_slice(latest);
            }
            welch.add(r, &mut buf);
        }
    }
    welch.band_powers(sample_rate_hz, bands)
}

/// The residual of the listed channels over the frames from `first`, as
/// many as `out`'s rows hold, lane group by lane group.
fn residual_piece<const C: usize>(
    frames: Frames,
    fits: &[ToneFit],
    model: &ToneModel,
    channels: &[usize],
    first: usize,
    out: &mut [Vec<f64>],
) {
    let nch = frames.channels();
    let n = out.first().map_or(0, Vec::len);
    let mut basis = BasisRows::<C>::new();
    let mut rows = vec![[0.0; LANES]; FRAME_BLOCK];
    for b0 in (0..n).step_by(FRAME_BLOCK) {
        let m = FRAME_BLOCK.min(n - b0);
        let phi = basis.fill(model, first + b0, m);
        let block = frames.slice(first + b0..first + b0 + m);
        for g in 0..frames.groups() {
            let lanes = g * LANES..(g * LANES + LANES).min(nch);
            if !channels.iter().any(|c| lanes.contains(c)) {
                continue;
            }
            let coefs = LaneCoefs::<C>::new(&fits[lanes.clone()]);
            let (dc, coef) = (coefs.dc, coefs.coef);
            for (t, (row, b)) in rows[..m].iter_mut().zip(phi).enumerate() {
                let mut part = [dc, f64x8::ZERO, f64x8::ZERO, f64x8::ZERO];
                for q in 0..C {
                    part[q % 4] = coef[q].mul_add(f64x8::splat(b[q]), part[q % 4]);
                }
                *row = (block.lanes(t, g) - ((part[0] + part[1]) + (part[2] + part[3]))).to_array();
            }
            for (r, &c) in channels.iter().enumerate() {
                if lanes.contains(&c) {
                    let l = c - lanes.start;
                    for (o, row) in out[r][b0..b0 + m].iter_mut().zip(&rows[..m]) {
                        *o = row[l];
                    }
                }
            }
        }
    }
}

/// [`residual_piece`] channel by channel, for any number of harmonics.
fn residual_piece_plain(
    frames: Frames,
    fits: &[ToneFit],
    model: &ToneModel,
    channels: &[usize],
    first: usize,
    out: &mut [Vec<f64>],
) {
    let n = out.first().map_or(0, Vec::len);
    let mut basis = BasisBlock::new(model.terms);
    for b0 in (0..n).step_by(BLOCK) {
        let m = BLOCK.min(n - b0);
        basis.fill(model, first + b0, m);
        for (r, &c) in channels.iter().enumerate() {
            let fit = &fits[c];
            let x = frames.channel_range(c, first + b0..first + b0 + m);
            let o = &mut out[r][b0..b0 + m];
            for (o, v) in o.iter_mut().zip(&x) {
                *o = f64::from(*v) - fit.dc;
            }
            for k in 0..model.terms {
                let (a, b) = (fit.cos[k], fit.sin[k]);
                for ((v, co), si) in o.iter_mut().zip(&basis.cos[k][..m]).zip(&basis.sin[k][..m]) {
                    *v -= a * co + b * si;
                }
            }
        }
    }
}

/// Result of a frequency estimate.
#[derive(Debug, Clone, PartialEq)]
pub struct FrequencyFit {
    /// Estimated frequency in Hz.
    pub freq_hz: f64,
    /// Gauss-Newton iterations used.
    pub iterations: usize,
    /// The model at the estimated frequency.
    pub model: ToneModel,
}

/// Coarse frequency of the strongest component within `search` (relative)
/// of `nominal_hz`: Hann-windowed spectrum, peak bin, parabolic interpolation
/// of the log magnitude.
pub fn coarse_frequency(
    x: &[f32],
    sample_rate_hz: f64,
    nominal_hz: f64,
    search: f64,
) -> Result<f64, FitError> {
    match coarse_frequency_mixed(x, sample_rate_hz, nominal_hz, search) {
        Some(f) => f,
        None => coarse_frequency_full(x, sample_rate_hz, nominal_hz, search),
    }
}

/// [`coarse_frequency`] from the spectrum of the whole record.
fn coarse_frequency_full(
    x: &[f32],
    sample_rate_hz: f64,
    nominal_hz: f64,
    search: f64,
) -> Result<f64, FitError> {
    let x = &x[..super::plans::smooth_len(x.len())];
    let len = x.len();
    let no_tone = FitError::NoTone {
        nominal_hz,
        search_pct: search * 100.0,
    };
    if len < 16 {
        return Err(no_tone);
    }
    let mean = x.iter().map(|v| f64::from(*v)).sum::<f64>() / len as f64;
    let w = super::window::HANN.cached(len);
    let mut input: Vec<f64> = x
        .iter()
        .zip(w.iter())
        .map(|(v, w)| (f64::from(*v) - mean) * w)
        .collect();
    let fft = super::plans::real_forward(len);
    let mut spectrum = fft.make_output_vec();
    fft.process(&mut input, &mut spectrum)
        .map_err(|_| no_tone.clone())?;
    let bin_hz = sample_rate_hz / len as f64;
    let lo = (((nominal_hz * (1.0 - search)) / bin_hz).floor() as isize - 2).max(1) as usize;
    let hi = ((((nominal_hz * (1.0 + search)) / bin_hz).ceil() as usize) + 2)
        .min(spectrum.len().saturating_sub(2));
    if lo >= hi {
        return Err(no_tone);
    }
    let mag = |i: usize| spectrum[i].norm_sqr().max(1e-300).ln();
    let peak = (lo..=hi)
        .max_by(|a, b| spectrum[*a].norm_sqr().total_cmp(&spectrum[*b].norm_sqr()))
        .ok_or(no_tone.clone())?;
    if spectrum[peak].norm_sqr() <= 0.0 {
        return Err(no_tone);
    }
    let (a, b, c) = (mag(peak - 1), mag(peak), mag(peak + 1));
    let denom = a - 2.0 * b + c;
    let delta = if denom.abs() > 0.0 {
        (0.5 * (a - c) / denom).clamp(-0.5, 0.5)
    } else {
        0.0
    };
    Ok((peak as f64 + delta) * bin_hz)
}

/// [`coarse_frequency`] for a search band narrow against the sample rate:
/// the record is mixed down by the nominal frequency and summed in blocks
/// of [`DECIMATION`] samples, and the Hann-windowed spectrum of those
/// sums is searched around 0 Hz. The block sum passes the search band with
/// a droop below 1e-4 and puts its nulls on what would alias there (the
/// mixed-down DC, the tone's image and harmonics near multiples of
/// `fs/DECIMATION`), so the peak and its interpolation are those of the
/// full spectrum, for a transform a sixteenth as long. `None` where the
/// band is too wide or the record too short.
fn coarse_frequency_mixed(
    x: &[f32],
    sample_rate_hz: f64,
    nominal_hz: f64,
    search: f64,
) -> Option<Result<f64, FitError>> {
    let blocks = super::plans::smooth_len(x.len() / DECIMATION);
    let len = blocks * DECIMATION;
    let bin_hz = sample_rate_hz / len as f64;
    let reach = ((nominal_hz * search) / bin_hz).ceil() as usize + 2;
    // The search band within a sixteenth of the decimated band, and a
    // spectrum long enough to hold it several times over.
    if blocks < 64
        || (reach + 2) * 16 > blocks
        || nominal_hz * search * 16.0 > sample_rate_hz / 32.0
    {
        return None;
    }
    let no_tone = FitError::NoTone {
        nominal_hz,
        search_pct: search * 100.0,
    };
    let x = &x[..len];
    let mean = x.iter().map(|v| f64::from(*v)).sum::<f64>() / len as f64;
    let omega = 2.0 * PI * nominal_hz / sample_rate_hz;
    let w = super::window::HANN.cached(blocks);
    let mut z: Vec<Complex<f64>> = Vec::with_capacity(blocks);
    let (mut c, mut s) = (vec![vec![0.0; BLOCK]], vec![vec![0.0; BLOCK]]);
    for n0 in (0..len).step_by(BLOCK) {
        let m = BLOCK.min(len - n0);
        fill_harmonics(omega, 0.0, n0, m, &mut c, &mut s);
        for (i, chunk) in x[n0..n0 + m].chunks(DECIMATION).enumerate() {
            let (mut re, mut im) = (0.0, 0.0);
            for (t, v) in chunk.iter().enumerate() {
                let v = f64::from(*v) - mean;
                re += v * c[0][i * DECIMATION + t];
                im -= v * s[0][i * DECIMATION + t];
            }
            let j = z.len();
            z.push(Complex::new(re * w[j], im * w[j]));
        }
    }
    super::plans::complex_forward(blocks).process(&mut z);
    let at = |k: isize| z[k.rem_euclid(blocks as isize) as usize].norm_sqr();
    let reach = reach as isize;
    let peak = (-reach..=reach).max_by(|a, b| at(*a).total_cmp(&at(*b)))?;
    if at(peak) <= 0.0 {
        return Some(Err(no_tone));
    }
    let mag = |k: isize| at(k).max(1e-300).ln();
    let (a, b, c) = (mag(peak - 1), mag(peak), mag(peak + 1));
    let denom = a - 2.0 * b + c;
    let delta = if denom.abs() > 0.0 {
        (0.5 * (a - c) / denom).clamp(-0.5, 0.5)
    } else {
        0.0
    };
    Some(Ok(nominal_hz + (peak as f64 + delta) * bin_hz))
}

/// Four-parameter fit (with harmonics): estimate the frequency of the tone
/// near `nominal_hz` by Gauss-Newton iterations on the full model, starting
/// from the spectral peak. `search` is the relative half-width searched
/// (0.01 for ±1 %).
pub fn estimate_frequency(
    x: &[f32],
    sample_rate_hz: f64,
    nominal_hz: f64,
    search: f64,
    max_harmonic: usize,
) -> Result<FrequencyFit, FitError> {
    let f0 = coarse_frequency(x, sample_rate_hz, nominal_hz, search)?;
    estimate_frequency_from(x, sample_rate_hz, nominal_hz, search, max_harmonic, f0)
}

/// [`estimate_frequency`] from a known starting frequency `start_hz` (a
/// coarse estimate of the same tone, say over a longer stretch).
pub fn estimate_frequency_from(
    x: &[f32],
    sample_rate_hz: f64,
    nominal_hz: f64,
    search: f64,
    max_harmonic: usize,
    start_hz: f64,
) -> Result<FrequencyFit, FitError> {
    let len = x.len();
    let mut model = ToneModel::new(start_hz, sample_rate_hz, len, max_harmonic);
    let mut iterations = 0;
    for _ in 0..30 {
        iterations += 1;
        let delta = gauss_newton_step(x, &model)?;
        model.omega += delta;
        // Converged when the step moves the phase at the record's ends by
        // less than 0.1 µrad: far below the phase noise of any real record.
        if (delta * len as f64).abs() < 1e-7 {
            break;
        }
    }
    let freq_hz = model.freq_hz(sample_rate_hz);
    if !freq_hz.is_finite() || (freq_hz / nominal_hz - 1.0).abs() > search * 1.5 {
        return Err(FitError::NoTone {
            nominal_hz,
            search_pct: search * 100.0,
        });
    }
    Ok(FrequencyFit {
        freq_hz,
        iterations,
        model,
    })
}

/// One Gauss-Newton step: the change of ω (radians per sample) that best
/// explains what the fit at the current ω leaves over.
///
/// The step solves the normal equations of the basis and the frequency
/// derivative `d = Σ_k k·t·(−c_k·sin kωt + s_k·cos kωt)` (with the
/// coefficients of the fit at the current ω) jointly. Everything in them
/// that does not involve the samples has a closed form (see [`gram`] and
/// [`t_moments`]); one pass over the samples gives `Σx·φ_q` and `Σx·t·φ_q`,
/// which yield both the fit and `Σx·d`.
fn gauss_newton_step(x: &[f32], model: &ToneModel) -> Result<f64, FitError> {
    let len = x.len();
    let q = model.params();
    let degenerate = FitError::Degenerate {
        freq_hz: model.omega / (2.0 * PI),
    };
    if len < 2 * q + 4 {
        return Err(FitError::TooShort {
            samples: len,
            params: q + 1,
        });
    }
    let sums = by_columns!(
        model.terms,
        moment_sums(x, model),
        moment_sums_columns(x, model)
    );
    let base = gram(model, len);
    let fit = Cholesky::new(&base, q)
        .ok_or(degenerate.clone())?
        .solve(&sums.xphi);
    // d's coefficients on the basis columns [cos ωt, sin ωt, cos 2ωt, …],
    // with t measured in units of `scale` to keep the system balanced.
    let scale = len as f64 / 2.0;
    let dcoef: Vec<f64> = (1..q)
        .map(|r| {
            let k = r.div_ceil(2) as f64;
            if r % 2 == 1 {
                k * fit[r + 1] / scale
            } else {
                -k * fit[r - 1] / scale
            }
        })
        .collect();
    let (t1, t2) = t_moments(model, len);
    let p = q + 1;
    let mut g = vec![0.0; p * p];
    for r in 0..q {
        g[r * p..r * p + q].copy_from_slice(&base[r * q..r * q + q]);
        let gd: f64 = dcoef
            .iter()
            .enumerate()
            .map(|(c, d)| d * t1[r * q + c + 1])
            .sum();
        g[r * p + q] = gd;
        g[q * p + r] = gd;
    }
    g[q * p + q] = (1..q)
        .map(|a| {
            (1..q)
                .map(|b| dcoef[a - 1] * dcoef[b - 1] * t2[a * q + b])
                .sum::<f64>()
        })
        .sum();
    let mut rhs = sums.xphi;
    rhs.push(dcoef.iter().zip(&sums.xtphi).map(|(d, e)| d * e).sum());
    let theta = Cholesky::new(&g, p).ok_or(degenerate)?.solve(&rhs);
    Ok(theta[q] / scale)
}

/// `Σ_t t·sin(θt)` and `Σ_t t²·cos(θt)` over `t = n − (len − 1)/2`,
/// `n < len`: minus the first and second derivatives of the Dirichlet
/// kernel `sin(len·θ/2)/sin(θ/2)`.
fn dirichlet_moments(theta: f64, len: usize) -> (f64, f64) {
    let l = len as f64;
    let m = (0.5 * theta).sin();
    if m.abs() < 1e-9 {
        // θ at a multiple of 2π: sin(θt) vanishes and cos(θt) = cos(θ·c).
        let c = (l - 1.0) / 2.0;
        return (0.0, l * (l * l - 1.0) / 12.0 * (theta * c).cos());
    }
    let (n, n1, n2) = (
        (0.5 * l * theta).sin(),
        0.5 * l * (0.5 * l * theta).cos(),
        -0.25 * l * l * (0.5 * l * theta).sin(),
    );
    let (m1, m2) = (0.5 * (0.5 * theta).cos(), -0.25 * m);
    let d1 = (n1 * m - n * m1) / (m * m);
    let d2 = (n2 * m - n * m2) / (m * m) - 2.0 * m1 * d1 / m;
    (-d1, -d2)
}

/// The basis moments `T1[r][c] = Σ t·φ_r·φ_c` and `T2[r][c] = Σ t²·φ_r·φ_c`
/// over the basis `[1, cos ωt, sin ωt, cos 2ωt, …]`, in closed form (the
/// products are half-sums of sines and cosines at the sum and difference
/// frequencies; odd sums over the centred `t` vanish). Row-major `q × q`.
fn t_moments(model: &ToneModel, len: usize) -> (Vec<f64>, Vec<f64>) {
    let q = model.params();
    let w = model.omega;
    let (mut t1, mut t2) = (vec![0.0; q * q], vec![0.0; q * q]);
    let l = len as f64;
    t2[0] = l * (l * l - 1.0) / 12.0;
    for a in 1..=model.terms {
        let (ca, sa) = (2 * a - 1, 2 * a);
        let (s1, c2) = dirichlet_moments(a as f64 * w, len);
        // With the constant column: Σ t·sin aωt and Σ t²·cos aωt.
        t1[sa] = s1;
        t1[sa * q] = s1;
        t2[ca] = c2;
        t2[ca * q] = c2;
        for b in 1..=model.terms {
            let (cb, sb) = (2 * b - 1, 2 * b);
            let (s_sum, c_sum) = dirichlet_moments((a + b) as f64 * w, len);
            let (s_diff, c_diff) = dirichlet_moments((a as f64 - b as f64) * w, len);
            // sin aωt·cos bωt = ½[sin (a+b)ωt + sin (a−b)ωt]
            t1[sa * q + cb] = 0.5 * (s_sum + s_diff);
            t1[cb * q + sa] = t1[sa * q + cb];
            t2[ca * q + cb] = 0.5 * (c_diff + c_sum);
            t2[sa * q + sb] = 0.5 * (c_diff - c_sum);
        }
    }
    (t1, t2)
}

/// What one pass of [`gauss_newton_step`] sums: `Σx·φ_q` over the basis
/// (constant first) and `Σx·t·φ_q` over the sinusoidal columns.
struct MomentSums {
    xphi: Vec<f64>,
    xtphi: Vec<f64>,
}

/// [`MomentSums`] in one pass, eight samples at a time.
fn moment_sums<const C: usize>(x: &[f32], model: &ToneModel) -> MomentSums {
    let len = x.len();
    let mut basis = BasisBlock::new(C / 2);
    let mut x1 = f64x8::ZERO;
    let (mut xp, mut xtp) = ([f64x8::ZERO; C], [f64x8::ZERO; C]);
    let lane = f64x8::new([0.0, 1.0, 2.0, 3.0, 4.0, 5.0, 6.0, 7.0]);
    // Basis rows are BLOCK long (a multiple of LANES), so eight values can
    // always be loaded; past the record's end the samples are zero.
    let load = |v: &[f64], i: usize| f64x8::new(v[i..i + LANES].try_into().unwrap());
    let mut n0 = 0;
    while n0 < len {
        let m = BLOCK.min(len - n0);
        basis.fill(model, n0, m);
        for i in (0..m).step_by(LANES) {
            let mut xs = [0.0; LANES];
            for (o, v) in xs.iter_mut().zip(&x[n0 + i..(n0 + i + LANES).min(len)]) {
                *o = f64::from(*v);
            }
            let xv = f64x8::new(xs);
            let xt = xv * (lane + f64x8::splat((n0 + i) as f64 - model.center));
            x1 += xv;
            for k in 0..C / 2 {
                let (c, s) = (load(&basis.cos[k], i), load(&basis.sin[k], i));
                xp[2 * k] = xv.mul_add(c, xp[2 * k]);
                xp[2 * k + 1] = xv.mul_add(s, xp[2 * k + 1]);
                xtp[2 * k] = xt.mul_add(c, xtp[2 * k]);
                xtp[2 * k + 1] = xt.mul_add(s, xtp[2 * k + 1]);
            }
        }
        n0 += m;
    }
    let mut xphi = vec![x1.reduce_add()];
    xphi.extend(xp.iter().map(|v| v.reduce_add()));
    MomentSums {
        xphi,
        xtphi: xtp.iter().map(|v| v.reduce_add()).collect(),
    }
}

/// [`moment_sums`] for any number of harmonics, column by column.
fn moment_sums_columns(x: &[f32], model: &ToneModel) -> MomentSums {
    let len = x.len();
    let q = model.params();
    let mut xphi = vec![0.0; q];
    let mut xtphi = vec![0.0; q - 1];
    let mut basis = BasisBlock::new(model.terms);
    let (mut xf, mut xt) = (vec![0.0; BLOCK], vec![0.0; BLOCK]);
    let mut n0 = 0;
    while n0 < len {
        let m = BLOCK.min(len - n0);
        basis.fill(model, n0, m);
        let (xf, xt) = (&mut xf[..m], &mut xt[..m]);
        widen(&x[n0..n0 + m], xf);
        for (i, (t, v)) in xt.iter_mut().zip(xf.iter()).enumerate() {
            *t = v * ((n0 + i) as f64 - model.center);
        }
        xphi[0] += sum(xf);
        for r in 1..q {
            let col = &basis.column(r).unwrap()[..m];
            xphi[r] += dot(xf, col);
            xtphi[r - 1] += dot(xt, col);
        }
        n0 += m;
    }
    MomentSums { xphi, xtphi }
}

#[cfg(test)]
mod gram_tests {
    use super::*;

    /// The one-pass moment sums against the column-by-column ones.
    #[test]
    fn moment_sums_match_the_column_sums() {
        let len = 5_003;
        let x: Vec<f32> = (0..len)
            .map(|n| (0.4 * (0.0911 * n as f64 + 0.3).cos() + 1e-3 * (0.2 * n as f64).sin()) as f32)
            .collect();
        for h in [1usize, 5, 8] {
            let model = ToneModel::new(0.0912 * 48_000.0 / (2.0 * PI), 48_000.0, len, h);
            let one = by_columns!(h, moment_sums(&x, &model), unreachable!());
            let cols = moment_sums_columns(&x, &model);
            let close = |a: f64, b: f64, s: f64| (a - b).abs() <= 1e-11 * s;
            for (a, b) in one.xphi.iter().zip(&cols.xphi) {
                assert!(close(*a, *b, len as f64), "h {h}: {a} vs {b}");
            }
            for (a, b) in one.xtphi.iter().zip(&cols.xtphi) {
                assert!(close(*a, *b, (len * len) as f64), "h {h}: {a} vs {b}");
            }
            assert_eq!(
                (one.xphi.len(), one.xtphi.len()),
                (cols.xphi.len(), cols.xtphi.len())
            );
        }
    }

    /// The closed-form moments against sample-by-sample sums, at record
    /// lengths odd and even and at low, middle and high frequencies.
    #[test]
    fn closed_form_moments_match_the_sums() {
        for (f, len) in [
            (997.3, 4801usize),
            (31.5, 96_000),
            (15_999.0, 65_536),
            (9_000.0, 48_001),
        ] {
            let model = ToneModel::new(f, 48_000.0, len, 5);
            let q = model.params();
            let (t1, t2) = t_moments(&model, len);
            let c = (len as f64 - 1.0) / 2.0;
            let phi = |r: usize, t: f64| {
                if r == 0 {
                    1.0
                } else {
                    let a = r.div_ceil(2) as f64 * model.omega * t;
                    if r % 2 == 1 {
                        a.cos()
                    } else {
                        a.sin()
                    }
                }
            };
            let (mut s1, mut s2) = (vec![0.0; q * q], vec![0.0; q * q]);
            for n in 0..len {
                let t = n as f64 - c;
                let v: Vec<f64> = (0..q).map(|r| phi(r, t)).collect();
                for r in 0..q {
                    for k in 0..q {
                        s1[r * q + k] += t * v[r] * v[k];
                        s2[r * q + k] += t * t * v[r] * v[k];
                    }
                }
            }
            let l = len as f64;
            for r in 0..q {
                for k in 0..q {
                    let (a, b) = (t1[r * q + k], s1[r * q + k]);
                    assert!(
                        (a - b).abs() < 1e-9 * l * l,
                        "{f} Hz, {len}: T1[{r}][{k}] {a} vs {b}"
                    );
                    // T2 rows and columns of the constant are not used beyond
                    // [0][c] (d has no constant part); check them all anyway.
                    let (a, b) = (t2[r * q + k], s2[r * q + k]);
                    assert!(
                        (a - b).abs() < 1e-9 * l * l * l,
                        "{f} Hz, {len}: T2[{r}][{k}] {a} vs {b}"
                    );
                }
            }
        }
    }

    /// The multichannel kernels against the per-channel passes, on a
    /// channel count that leaves the last lane group partly empty.
    #[test]
    fn lane_kernels_match_the_per_channel_passes() {
        let (nch, len) = (11usize, 5_000usize);
        let data: Vec<f32> = (0..nch * len)
            .map(|i| {
                let (n, c) = ((i / nch) as f64, (i % nch) as f64);
                (0.3 / (1.0 + c) * (0.131 * n + c).sin()
                    + 1e-3 * (0.262 * n).cos()
                    + 1e-4 * (c + 1.0)
                    + 1e-5 * ((n * 7.7 + c * 3.1).sin() * 1e4).sin()) as f32
            })
            .collect();
        let frames = Frames::new(&data, nch);
        for h in [1usize, 5, 9] {
            let model = ToneModel::new(0.131 * 48_000.0 / (2.0 * PI), 48_000.0, len, h);
            assert_eq!(model.terms, h);
            let lanes = by_columns!(model.terms, project_lanes(frames, &model), unreachable!());
            let plain = project_channels(frames, &model);
            let along = by_columns!(model.terms, project_along(frames, &model), unreachable!());
            // Each channel's √Σx² sets the scale of its projections.
            let norms: Vec<f64> = super::super::frames::deinterleave(frames)
                .iter()
                .map(|x| x.iter().map(|v| f64::from(*v).powi(2)).sum::<f64>().sqrt())
                .collect();
            for (i, (b1, b2)) in lanes
                .iter()
                .chain(&along)
                .zip(plain.iter().chain(&plain))
                .enumerate()
            {
                let c = i % nch;
                for (x, y) in b1.iter().zip(b2) {
                    assert!(
                        (x - y).abs() <= 1e-11 * norms[c],
                        "h {h} channel {c}: {x} vs {y}"
                    );
                }
            }
            let fits = fit_frames(frames, &model).unwrap();
            let keep: Vec<bool> = (0..nch).map(|c| c % 3 == 0).collect();
            let blocks = super::super::plans::smooth_len(len / DECIMATION);
            let window = super::super::window::HANN.cached(blocks * DECIMATION);
            let run = |lane: bool| {
                let mut kept = vec![Vec::new(); nch];
                let mut stats = vec![ResidualStats::default(); nch];
                if lane {
                    by_columns!(
                        model.terms,
                        residual_lanes(
                            frames,
                            &fits,
                            &model,
                            &vec![true; nch],
                            &keep,
                            &mut kept,
                            &mut stats,
                            &window,
                            blocks
                        ),
                        unreachable!()
                    );
                } else {
                    let chans = super::super::frames::deinterleave(frames);
                    let chans: Vec<&[f32]> = chans.iter().map(Vec::as_slice).collect();
                    residual_channels(
                        &chans, &fits, &model, &keep, &mut kept, &mut stats, &window, blocks,
                    );
                }
                (stats, kept)
            };
            let ((s1, k1), (s2, k2)) = (run(true), run(false));
            for c in 0..nch {
                assert!(
                    (s1[c].sum_sq - s2[c].sum_sq).abs() <= 1e-9 * s2[c].sum_sq,
                    "h {h} ch {c}"
                );
                assert_eq!(s1[c].baseband.len(), blocks);
                assert_eq!(s2[c].baseband.len(), blocks);
                let scale = s2[c].sum_sq.sqrt();
                for (a, b) in s1[c].baseband.iter().zip(&s2[c].baseband) {
                    assert!(
                        (a.re - b.re).abs() <= 1e-9 * scale && (a.im - b.im).abs() <= 1e-9 * scale
                    );
                }
                assert_eq!(k1[c].len(), if keep[c] { len } else { 0 });
                for (a, b) in k1[c].iter().zip(&k2[c]) {
                    assert!((a - b).abs() <= 1e-12, "h {h} ch {c} kept residual");
                }
            }
        }
    }

    /// The one-pass fit with derived residuals against the fit and the
    /// explicit residual pass: channels with a quiet tone (derived) and with
    /// a strong one (explicit, one by one or in lanes).
    #[test]
    fn derived_residuals_match_the_explicit_pass() {
        let len = 20_011usize;
        let mut rng = 0x2545_f491_4f6c_dd1du64;
        let mut noise = move || {
            rng ^= rng << 13;
            rng ^= rng >> 7;
            rng ^= rng << 17;
            (rng >> 11) as f64 / (1u64 << 53) as f64 - 0.5
        };
        for (nch, strong) in [(11usize, vec![3usize]), (13, vec![0, 4, 5, 9, 12])] {
            let data: Vec<f32> = (0..nch * len)
                .map(|i| {
                    let (n, c) = ((i / nch) as f64, i % nch);
                    let amp = if strong.contains(&c) {
                        0.5
                    } else {
                        1e-4 / (1.0 + c as f64)
                    };
                    (amp * (0.0731 * n + c as f64).cos()
                        + 0.1 * amp * (2.0 * 0.0731 * n).sin()
                        + 2e-3 * (c as f64 - 4.0)
                        + 1e-6 * noise()) as f32
                })
                .collect();
            let frames = Frames::new(&data, nch);
            let model = ToneModel::new(0.0731 * 48_000.0 / (2.0 * PI), 48_000.0, len, 5);
            let copy = frames.channel(strong[0]);
            DERIVED.with(|d| d.set(0));
            let (fits, stats) =
                fit_with_residuals(frames, &model, Some((strong[0], &copy))).unwrap();
            let ref_fits = fit_frames(frames, &model).unwrap();
            let keep = vec![false; nch];
            let ref_stats =
                residual_frames(frames, &ref_fits, &model, &keep, &mut vec![Vec::new(); nch]);
            for c in 0..nch {
                let (a, b) = (&fits[c], &ref_fits[c]);
                let scale = 1e-12 * (1.0 + b.fundamental() / 1e-4);
                assert!((a.dc - b.dc).abs() < 1e-12, "{nch} ch {c}: dc");
                for k in 0..model.terms {
                    assert!((a.cos[k] - b.cos[k]).abs() < scale, "{nch} ch {c}: cos {k}");
                    assert!((a.sin[k] - b.sin[k]).abs() < scale, "{nch} ch {c}: sin {k}");
                }
                let (s, r) = (&stats[c], &ref_stats[c]);
                assert!(
                    (s.sum_sq / r.sum_sq - 1.0).abs() < 1e-6,
                    "{nch} ch {c}: Σr² {} vs {}",
                    s.sum_sq,
                    r.sum_sq
                );
                assert_eq!(s.baseband.len(), r.baseband.len());
                assert!((s.window_energy - r.window_energy).abs() < 1e-9 * r.window_energy);
                let bound = 1e-6 * (r.sum_sq / len as f64).sqrt();
                for (x, y) in s.baseband.iter().zip(&r.baseband) {
                    assert!(
                        (x.re - y.re).abs() < bound && (x.im - y.im).abs() < bound,
                        "{nch} ch {c}: baseband {x:?} vs {y:?}"
                    );
                }
            }
            // All but the strong channels went the derived way.
            assert_eq!(DERIVED.with(|d| d.get()), nch - strong.len());
        }
    }

    /// The coarse frequency from the mixed-down block sums against the one
    /// from the whole record's spectrum: tones off their nominal frequency
    /// by up to the search width, with noise, a DC offset and harmonics,
    /// including tones whose image or harmonics fall near multiples of
    /// `fs/DECIMATION`.
    #[test]
    fn mixed_down_coarse_frequency_matches_the_full_spectrum() {
        let fs = 48_000.0;
        let len = 96_000usize;
        let mut rng = 0x9e37_79b9_7f4a_7c15u64;
        let mut noise = move || {
            rng ^= rng << 13;
            rng ^= rng >> 7;
            rng ^= rng << 17;
            (rng >> 11) as f64 / (1u64 << 53) as f64 - 0.5
        };
        let mut used_mixed = 0;
        for (nominal, offset) in [
            (20.0, 0.19),
            (100.0, -0.9),
            (997.0, 3.1),
            (1_500.0, 0.02),
            (3_000.0, -14.0),
            (4_500.3, 40.0),
            (7_000.0, 69.0),
            (15_000.0, -140.0),
        ] {
            let f = nominal + offset;
            let x: Vec<f32> = (0..len)
                .map(|n| {
                    let p = 2.0 * PI * f * n as f64 / fs;
                    (0.4 * p.sin() + 1e-3 * (2.0 * p).cos() + 0.01 + 1e-5 * noise()) as f32
                })
                .collect();
            let full = coarse_frequency_full(&x, fs, nominal, 0.01).unwrap();
            if let Some(mixed) = coarse_frequency_mixed(&x, fs, nominal, 0.01) {
                used_mixed += 1;
                let mixed = mixed.unwrap();
                let bin = fs / len as f64;
                assert!(
                    (mixed - full).abs() < 0.02 * bin && (mixed - f).abs() < 0.1 * bin,
                    "{f} Hz: mixed {mixed} vs full {full}"
                );
            }
            assert!((coarse_frequency(&x, fs, nominal, 0.01).unwrap() - f).abs() < 0.1);
        }
        assert!(
            used_mixed >= 6,
            "the mixed-down path served {used_mixed} tones"
        );
    }

    /// Band powers of the residual computed piece by piece against those
    /// of the residual kept whole by the explicit pass, on lengths that
    /// make several overlapping segments, a lone even one and a lone odd
    /// one, with 5 harmonics (lanes) and 12 (channel by channel).
    #[test]
    fn residual_band_powers_match_the_kept_residual() {
        let nch = 11usize;
        let bands = [
            super::super::psd::Band {
                lo_hz: 0.0,
                hi_hz: 18_750.0,
                weighting: None,
            },
            super::super::psd::Band {
                lo_hz: 20.0,
                hi_hz: 20_000.0,
                weighting: Some(super::super::weighting::a_weighting_power),
            },
        ];
        for (len, h) in [(30_011usize, 5usize), (6_000, 5), (5_001, 5), (20_000, 12)] {
            let data: Vec<f32> = (0..nch * len)
                .map(|i| {
                    let (n, c) = ((i / nch) as f64, (i % nch) as f64);
                    (0.3 / (1.0 + c) * (0.0731 * n + c).sin()
                        + 1e-4 * (c + 1.0)
                        + 1e-5 * ((n * 7.7 + c * 3.1).sin() * 1e4).sin()) as f32
                })
                .collect();
            let frames = Frames::new(&data, nch);
            let model = ToneModel::new(0.0731 * 48_000.0 / (2.0 * PI), 48_000.0, len, h);
            let fits = fit_frames(frames, &model).unwrap();
            let listed: Vec<usize> = (0..nch).filter(|c| *c != 3).collect();
            let pieces = residual_band_powers(frames, &fits, &model, &listed, 48_000.0, &bands);
            let keep: Vec<bool> = (0..nch).map(|c| c != 3).collect();
            let mut kept = vec![Vec::new(); nch];
            residual_frames(frames, &fits, &model, &keep, &mut kept);
            assert_eq!(pieces.len(), listed.len());
            for (p, &c) in pieces.iter().zip(&listed) {
                let whole = super::super::psd::band_powers(&kept[c], 48_000.0, &bands);
                for (a, b) in p.iter().zip(&whole) {
                    assert!(
                        (a / b - 1.0).abs() < 1e-9 && *b > 0.0,
                        "{len} frames, {h} harmonics, channel {c}: {a} vs {b}"
                    );
                }
            }
        }
    }

    /// The closed form against the sample-by-sample sums.
    #[test]
    fn closed_form_gram_matches_the_sums() {
        for (f, len) in [
            (997.3, 4801usize),
            (31.5, 96_000),
            (15_999.0, 65_536),
            (12_000.0, 48_000),
        ] {
            let m = ToneModel::new(f, 48_000.0, len, 5);
            let (a, b) = (gram(&m, len), gram_summed(&m, len));
            for (x, y) in a.iter().zip(&b) {
                assert!(
                    (x - y).abs() < 1e-7 * len as f64,
                    "{f} Hz, {len}: {x} vs {y}"
                );
            }
        }
    }
}
