//! Tests of the fit's kernels against their plain references and closed forms.

use super::derived::*;
use super::frequency::*;
use super::lanes::*;
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
                assert!((a.re - b.re).abs() <= 1e-9 * scale && (a.im - b.im).abs() <= 1e-9 * scale);
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
        let (fits, stats) = fit_with_residuals(frames, &model, Some((strong[0], &copy))).unwrap();
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
