//! Band-limited floors from the residual, half a Welch segment at a time.

use super::*;

/// Welch band powers ([`crate::dsp::psd::band_powers`]) of the residual
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
    bands: &[crate::dsp::psd::Band],
) -> Vec<Vec<f64>> {
    assert_eq!(fits.len(), frames.channels(), "one fit per channel");
    let Some(mut welch) = crate::dsp::psd::Welch::new(frames.len(), channels.len()) else {
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
pub(super) fn residual_piece<const C: usize>(
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
pub(super) fn residual_piece_plain(
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
            widen(&x, o);
            basis.subtract_model(fit, o);
        }
    }
}
