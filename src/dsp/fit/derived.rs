//! The fit and the residual statistics in one pass.

use super::*;

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
pub(super) const DERIVED_MAX_RATIO: f64 = 1e6;

#[cfg(test)]
thread_local! {
    /// Channels whose residual statistics were derived, on this thread.
    pub(super) static DERIVED: std::cell::Cell<usize> = const { std::cell::Cell::new(0) };
}

/// Channels that the explicit pass handles one by one, from the
/// contiguous copy of a channel or a strided copy, rather than in lanes.
pub(super) const EXPLICIT_ONE_BY_ONE: usize = 3;

/// What one pass over a lane group gathers besides the projections.
pub(super) struct GroupStats {
    /// Σ(x − shift)² per lane.
    pub(super) sum_sq: f64x8,
    /// Per decimated block: Σ (x − shift)·w·cos ωt and Σ (x − shift)·w·sin ωt.
    pub(super) baseband: Vec<[f64x8; 2]>,
}

/// What [`project_with_stats`] returns.
pub(super) struct PassSums {
    /// Per channel: the constant taken off its samples.
    pub(super) shift: Vec<f64>,
    /// Per channel: `[Σx', Σx'·φ_1, …]` with `x' = x − shift`.
    pub(super) proj: Vec<Vec<f64>>,
    /// Per lane group.
    pub(super) groups: Vec<GroupStats>,
    /// Per decimated block and basis column `[1, cos ωt, sin ωt, …]`:
    /// `(Σ w·cos ωt·φ_q, Σ w·sin ωt·φ_q)`, `C + 1` entries a block.
    pub(super) columns: Vec<(f64, f64)>,
}

/// The projections of [`project_lanes`] on shifted samples, with the sums
/// of [`GroupStats`] and the basis columns' basebands over the first
/// `blocks` decimated blocks (Hann `window`).
pub(super) fn project_with_stats<const C: usize>(
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
pub(super) fn project_group_stats<const C: usize>(
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
    let chol = gram_factor(model, len)?;
    let (blocks, window, energy) = local_noise_window(len);
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
    let mut stats =
        explicit_residuals(frames, &fits, model, &need, copy, (blocks, &window, energy));
    // The derived basebands, lane group by lane group.
    for (g, group) in pass.groups.iter().enumerate() {
        let chans = g * LANES..(g * LANES + LANES).min(nch);
        if chans.clone().all(|c| need[c]) {
            continue;
        }
        let mut theta = vec![[0.0; LANES]; p];
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
            for (t, (cr, ci)) in theta.iter().zip(&pass.columns[j * p..(j + 1) * p]) {
                re = (-*t).mul_add(f64x8::splat(*cr), re);
                im = (-*t).mul_add(f64x8::splat(*ci), im);
            }
            let (re, im) = (re.as_array(), im.as_array());
            for (l, o) in out.iter_mut().enumerate() {
                o.push(Complex::new(re[l], -im[l]));
            }
        }
        for (c, baseband) in chans.zip(out) {
            if let Some(rr) = derived[c] {
                stats[c] = ResidualStats {
                    sum_sq: rr,
                    baseband,
                    window_energy: energy,
                };
            }
        }
    }
    Ok((fits, stats))
}

/// The explicit residual pass of [`fit_with_residuals`] for the channels
/// with `need[c]`; the others get empty statistics.
pub(super) fn explicit_residuals(
    frames: Frames,
    fits: &[ToneFit],
    model: &ToneModel,
    need: &[bool],
    copy: Option<(usize, &[f32])>,
    (blocks, window, energy): (usize, &[f64], f64),
) -> Vec<ResidualStats> {
    let nch = frames.channels();
    let count = need.iter().filter(|n| **n).count();
    if count == 0 {
        return vec![ResidualStats::default(); nch];
    }
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
                window,
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
            window,
            blocks,
        );
        let [st] = one;
        stats[c] = st;
    }
    stats
}
