//! The fits against slower, obviously right versions on seeded random data:
//! a design matrix built with a libm call per sample and solved by Gaussian
//! elimination, and a frequency estimate held to the Cramér-Rao bound.

use rand::{Rng, SeedableRng};
use rand_distr::StandardNormal;
use septum::dsp::fit::{estimate_frequency, fit_tones, ToneModel};
use std::f64::consts::PI;

/// Least squares by the book: explicit columns, normal equations, Gaussian
/// elimination with partial pivoting.
#[allow(clippy::needless_range_loop)] // textbook normal equations and Gauss-Jordan, by index
fn naive_fit(x: &[f32], omega: f64, terms: usize) -> Vec<f64> {
    let len = x.len();
    let center = (len as f64 - 1.0) / 2.0;
    let p = 1 + 2 * terms;
    let column = |j: usize, n: usize| -> f64 {
        if j == 0 {
            return 1.0;
        }
        let k = ((j - 1) / 2 + 1) as f64;
        let a = k * omega * (n as f64 - center);
        if j % 2 == 1 {
            a.cos()
        } else {
            a.sin()
        }
    };
    let mut m = vec![vec![0.0; p + 1]; p];
    for n in 0..len {
        let row: Vec<f64> = (0..p).map(|j| column(j, n)).collect();
        for i in 0..p {
            for j in 0..p {
                m[i][j] += row[i] * row[j];
            }
            m[i][p] += row[i] * f64::from(x[n]);
        }
    }
    for c in 0..p {
        let piv = (c..p)
            .max_by(|a, b| m[*a][c].abs().total_cmp(&m[*b][c].abs()))
            .unwrap();
        m.swap(c, piv);
        for r in 0..p {
            if r != c {
                let f = m[r][c] / m[c][c];
                for k in c..=p {
                    m[r][k] -= f * m[c][k];
                }
            }
        }
    }
    (0..p).map(|i| m[i][p] / m[i][i]).collect()
}

#[test]
fn multi_channel_fit_matches_the_naive_solution() {
    let mut rng = rand::rngs::StdRng::seed_from_u64(9);
    for trial in 0..6 {
        let len = rng.random_range(3000..9000);
        let f = rng.random_range(20.0..20_000.0);
        let fs = 48_000.0;
        let omega = 2.0 * PI * f / fs;
        let channels: Vec<Vec<f32>> = (0..3)
            .map(|_| {
                let (a, ph, dc) = (
                    rng.random_range(1e-6..0.9),
                    rng.random_range(0.0..6.3),
                    rng.random_range(-0.01..0.01),
                );
                let h2 = rng.random_range(0.0..1e-3);
                (0..len)
                    .map(|n| {
                        let t = n as f64;
                        (dc + a * (omega * t + ph).cos()
                            + h2 * (2.0 * omega * t).sin()
                            + 1e-4 * rng.sample::<f64, _>(StandardNormal))
                            as f32
                    })
                    .collect()
            })
            .collect();
        let slices: Vec<&[f32]> = channels.iter().map(Vec::as_slice).collect();
        let model = ToneModel::new(f, fs, len, 5);
        let fits = fit_tones(&slices, &model).unwrap();
        for (c, fit) in fits.iter().enumerate() {
            let naive = naive_fit(&channels[c], omega, model.terms);
            let mut ours = vec![fit.dc];
            for k in 0..model.terms {
                ours.push(fit.cos[k]);
                ours.push(fit.sin[k]);
            }
            for (o, r) in ours.iter().zip(&naive) {
                assert!(
                    (o - r).abs() < 1e-9,
                    "trial {trial} channel {c}: {o} vs {r}"
                );
            }
        }
    }
}

/// Noise-free: the four-parameter fit finds the frequency to ~1e-10.
#[test]
fn frequency_estimate_is_exact_without_noise() {
    let fs = 48_000.0;
    for nominal in [31.5, 997.0, 6300.0, 19_000.0] {
        for offset in [-0.005, -0.0013, 0.0, 0.0042] {
            let f = nominal * (1.0 + offset);
            let x: Vec<f32> = (0..24_000)
                .map(|n| {
                    let a = 2.0 * PI * f * n as f64 / fs;
                    (0.5 * (a + 1.0).sin() + 0.01 * (2.0 * a).cos()) as f32
                })
                .collect();
            let est = estimate_frequency(&x, fs, nominal, 0.01, 5).unwrap();
            // f32 storage limits it to about 1e-8 relative.
            assert!(
                (est.freq_hz / f - 1.0).abs() < 1e-8,
                "{nominal}{offset:+}: {} vs {f}",
                est.freq_hz
            );
        }
    }
}

/// With noise the estimate stays within 4.5 standard deviations of the
/// Cramér-Rao bound var(f) = 12/((2π)²·η·L(L²−1)), η = A²/(2σ²) (Kay 1993,
/// Fundamentals of Statistical Signal Processing I, single real tone).
#[test]
fn frequency_estimate_reaches_the_bound() {
    let mut rng = rand::rngs::StdRng::seed_from_u64(41);
    let (fs, len, amp, sigma) = (48_000.0, 16_384usize, 0.1, 0.01);
    let eta = amp * amp / (2.0 * sigma * sigma);
    let l = len as f64;
    let crlb = (12.0 / ((2.0 * PI).powi(2) * eta * l * (l * l - 1.0))).sqrt() * fs;
    let mut sq = 0.0;
    let trials = 40;
    for _ in 0..trials {
        let f = 1000.0 * (1.0 + rng.random_range(-0.005..0.005));
        let ph: f64 = rng.random_range(0.0..6.3);
        let x: Vec<f32> = (0..len)
            .map(|n| {
                (amp * (2.0 * PI * f * n as f64 / fs + ph).cos()
                    + sigma * rng.sample::<f64, _>(StandardNormal)) as f32
            })
            .collect();
        let est = estimate_frequency(&x, fs, 1000.0, 0.01, 5).unwrap();
        let err = est.freq_hz - f;
        assert!(err.abs() < 4.5 * crlb, "error {err} Hz vs bound {crlb} Hz");
        sq += err * err;
    }
    let rms = (sq / trials as f64).sqrt();
    // Efficient within sampling error (harmonic terms cost a little).
    assert!(
        rms < 1.3 * crlb && rms > 0.6 * crlb,
        "rms error {rms} Hz vs bound {crlb} Hz"
    );
}
