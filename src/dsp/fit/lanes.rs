//! The multichannel passes over interleaved frames: the fit's projections
//! and the explicit residual, eight channels side by side.

use super::*;

// ---------------------------------------------------------------------------
// Multichannel passes over interleaved frames.
//
// The basis (cos and sin of each harmonic) is generated once per frame and
// laid out frame by frame; LANES neighbouring channels are accumulated side by
// side, so each frame costs one load of the samples and one multiply-add per
// basis column for LANES channels at once. The number of basis columns is a
// const generic so that every accumulator stays in a register.

/// Frames per block of the multichannel passes (a multiple of [`DECIMATION`]).
pub(super) const FRAME_BLOCK: usize = BLOCK;

/// Basis values of a block, frame by frame: `[cos ωt, sin ωt, cos 2ωt, …]`.
pub(super) struct BasisRows<const C: usize> {
    pub(super) columns: BasisBlock,
    pub(super) rows: Vec<[f64; C]>,
}

impl<const C: usize> BasisRows<C> {
    pub(super) fn new() -> Self {
        Self {
            columns: BasisBlock::new(C / 2),
            rows: vec![[0.0; C]; FRAME_BLOCK],
        }
    }

    pub(super) fn fill(&mut self, model: &ToneModel, n0: usize, m: usize) -> &[[f64; C]] {
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
pub(super) struct LaneSums<const C: usize> {
    pub(super) sum: f64x8,
    pub(super) proj: [f64x8; C],
}

impl<const C: usize> LaneSums<C> {
    pub(super) const ZERO: Self = Self {
        sum: f64x8::ZERO,
        proj: [f64x8::ZERO; C],
    };

    pub(super) fn add(&mut self, o: &Self) {
        self.sum += o.sum;
        for q in 0..C {
            self.proj[q] += o.proj[q];
        }
    }
}

/// The sums of lane group `g` over one block.
#[inline(always)]
pub(super) fn project_group<const C: usize>(
    block: Frames,
    g: usize,
    rows: &[[f64; C]],
) -> LaneSums<C> {
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
pub(super) fn project_lanes<const C: usize>(frames: Frames, model: &ToneModel) -> Vec<Vec<f64>> {
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
pub(super) fn project_channels(frames: Frames, model: &ToneModel) -> Vec<Vec<f64>> {
    let len = frames.len();
    let p = model.params();
    let channels = crate::dsp::frames::deinterleave(frames);
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
pub(super) fn project_along<const C: usize>(frames: Frames, model: &ToneModel) -> Vec<Vec<f64>> {
    let len = frames.len();
    let channels = crate::dsp::frames::deinterleave(frames);
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

/// Per lane: the fitted coefficients of a lane group.
pub(super) struct LaneCoefs<const C: usize> {
    pub(super) dc: f64x8,
    pub(super) coef: [f64x8; C],
}

impl<const C: usize> LaneCoefs<C> {
    pub(super) fn new(fits: &[ToneFit]) -> Self {
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
pub(super) struct ResidualBlock<'a, const C: usize> {
    pub(super) rows: &'a [[f64; C]],
    /// Per frame: the window times cos ωt and sin ωt (0 past the window).
    pub(super) mix: &'a [(f64, f64)],
}

/// Residual of lane group `g` over one block: adds Σr² to `sum_sq`, writes
/// the decimated baseband (Σ r·w·cos ωt and Σ r·w·sin ωt per `DECIMATION`
/// frames) into `baseband`, and with `KEEP` the residual itself into `kept`
/// (one row per frame).
#[inline(always)]
pub(super) fn residual_group<const C: usize, const KEEP: bool>(
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
pub(super) fn residual_lanes<const C: usize>(
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
pub(super) fn residual_channels(
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
            basis.subtract_model(fit, r);
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
    let (blocks, window, energy) = local_noise_window(len);
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
        let channels = crate::dsp::frames::deinterleave(frames);
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
    let data = crate::dsp::frames::interleave(channels);
    residual_frames(Frames::new(&data, channels.len()), fits, model, keep, kept)
}
