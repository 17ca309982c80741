//! The numeric core against figures from outside the project. Each check
//! names its source; "computed" marks figures derived from a formula here,
//! "from memory" marks forms not re-checked against the publication.

use rand::{Rng, SeedableRng};
use rand_distr::StandardNormal;
use septum::dsp::fit::{fit_tones, residual_into, ToneModel};
use septum::dsp::freqs::{coherent, third_octave_exact};
use septum::dsp::noise::quadrature_sigma;
use septum::dsp::window::{BLACKMAN_HARRIS_4, BLACKMAN_HARRIS_7, HANN};
use septum::dsp::{amplitude_to_dbfs, rms_to_dbfs};
use septum::model::Coupling;
use std::f64::consts::PI;

/// Quantise a sine of `cycles` cycles in `len` samples to `bits` (no dither)
/// with amplitude 1 − Q/2, fit it, and return (SINAD dB, residual rms / Q).
fn quantised_sine(bits: i32, len: usize, cycles: f64) -> (f64, f64) {
    let q = 2f64.powi(1 - bits);
    let amp = 1.0 - q / 2.0;
    let x: Vec<f32> = (0..len)
        .map(|n| {
            let v = amp * (2.0 * PI * cycles * n as f64 / len as f64 + 0.3).sin();
            ((v / q).round() * q) as f32
        })
        .collect();
    let model = ToneModel::new(cycles, len as f64, len, 1);
    let fit = &fit_tones(&[&x], &model).unwrap()[0];
    let mut bb = Vec::new();
    let ss = residual_into(&x, fit, &model, &mut bb);
    let rms = (ss / len as f64).sqrt();
    (
        amplitude_to_dbfs(fit.fundamental()) - rms_to_dbfs(rms),
        rms / q,
    )
}

/// Check values 1, 2 and 4: ideal quantiser SNR 6.02·N + 1.76 dB (Analog
/// Devices MT-001 / MT-229), error rms Q/√12, and the IEEE Std 1057 / 1241
/// three-parameter fit on a 65536-sample, 1361-cycle record (figures computed
/// with numpy, as CHECK-VALUES.md states).
#[test]
fn ideal_quantiser_sinad() {
    let (s16, e16) = quantised_sine(16, 65_536, 1361.0);
    assert!((s16 - 98.08).abs() < 0.02, "16 bit: {s16}");
    assert!(
        (s16 - (6.0206 * 16.0 + 1.7609)).abs() < 0.05,
        "16 bit vs 6.02N+1.76: {s16}"
    );
    assert!((e16 - 1.0 / 12f64.sqrt()).abs() < 0.003, "e_rms/Q = {e16}");
    let (s12, _) = quantised_sine(12, 65_536, 1361.0);
    assert!((s12 - 73.97).abs() < 0.02, "12 bit: {s12}");
    for (bits, sinad) in [(12, s12), (16, s16)] {
        let enob = (sinad - 1.76) / 6.02;
        assert!(
            (enob - bits as f64).abs() < 0.02,
            "ENOB {enob} for {bits} bits"
        );
    }
}

/// Check value 5: window figures (Heinzel, Rüdiger & Schilling 2002, App. C;
/// Harris 1978).
#[test]
fn window_figures() {
    let n = 4096;
    assert!((HANN.nenbw(n) - 1.5).abs() < 1e-4);
    assert!((HANN.coherent_gain(n) - 0.5).abs() < 1e-12);
    assert!((HANN.response_db(n, 0.5) + 1.4236).abs() < 1e-3);
    assert!((BLACKMAN_HARRIS_4.nenbw(n) - 2.0044).abs() < 1e-4);
    assert!((BLACKMAN_HARRIS_4.coherent_gain(n) - 0.35875).abs() < 1e-12);
    assert!((BLACKMAN_HARRIS_4.response_db(n, 0.5) + 0.8256).abs() < 1e-3);
    // Highest sidelobe about −92 dB: scan beyond the main lobe (4 bins).
    let side = (0..600)
        .map(|i| BLACKMAN_HARRIS_4.response_db(n, 4.2 + i as f64 * 0.01))
        .fold(f64::NEG_INFINITY, f64::max);
    assert!((side + 92.0).abs() < 0.1, "BH4 sidelobe {side}");
}

/// Check value 6: 7-term Blackman-Harris (Albrecht 2001; figures computed).
#[test]
fn seven_term_blackman_harris() {
    let n = 4096;
    assert!(
        (BLACKMAN_HARRIS_7.nenbw(n) - 2.632).abs() < 0.002,
        "{}",
        BLACKMAN_HARRIS_7.nenbw(n)
    );
    let side = (0..500)
        .map(|i| BLACKMAN_HARRIS_7.response_db(n, 7.5 + i as f64 * 0.02))
        .fold(f64::NEG_INFINITY, f64::max);
    assert!((side + 180.0).abs() < 0.5, "BH7 sidelobe {side}");
}

/// Check value 7: a bin-centred sine of amplitude A gives A·S1/2 at its bin
/// (Heinzel et al. 2002, section 9).
#[test]
fn bin_centred_sine_magnitude() {
    let n = 1024;
    let (a, bin) = (0.7, 37.0);
    let w = HANN.samples(n);
    let (mut re, mut im) = (0.0, 0.0);
    for (k, wk) in w.iter().enumerate() {
        let x = a * (2.0 * PI * bin * k as f64 / n as f64 + 0.4).cos() * wk;
        let ph = -2.0 * PI * bin * k as f64 / n as f64;
        re += x * ph.cos();
        im += x * ph.sin();
    }
    let s1: f64 = w.iter().sum();
    assert!(((re * re + im * im).sqrt() / (a * s1 / 2.0) - 1.0).abs() < 1e-12);
}

/// Check value 8: third-octave centres 1000·10^(x/10) (IEC 61260-1:2014,
/// formula from memory; ISO 266).
#[test]
fn third_octave_centres() {
    for (x, f) in [
        (-15, 31.623),
        (-12, 63.096),
        (-9, 125.893),
        (-1, 794.328),
        (5, 3162.278),
        (13, 19952.623),
    ] {
        assert!(
            (third_octave_exact(x) - f).abs() < 0.001,
            "x={x}: {}",
            third_octave_exact(x)
        );
    }
}

/// Check value 9: coherent frequencies J·fs/M (IEEE Std 1241; Maxim AN-1040).
#[test]
fn coherent_frequencies() {
    assert_eq!(coherent(1361, 48_000.0, 65_536), 996.826171875);
    assert_eq!(coherent(2503, 82e6, 8192), 25_054_443.359375);
}

/// Check value 12: capacitive coupling into a low impedance, Vn ≈ jωR·C12·V1
/// (Ott, Noise Reduction Techniques in Electronic Systems, ch. 2): 1 pF into
/// 50 Ω is −130.06 dB at 1 kHz and −110.06 dB at 10 kHz; a shared resistive
/// path is flat.
#[test]
fn capacitive_coupling_model() {
    let at_1k = 2.0 * PI * 1e3 * 50.0 * 1e-12;
    let c = Coupling {
        shared: 0.0,
        capacitive: at_1k,
    };
    assert!((amplitude_to_dbfs(c.magnitude(1e3)) + 130.06).abs() < 0.01);
    assert!((amplitude_to_dbfs(c.magnitude(1e4)) + 110.06).abs() < 0.01);
    let r = Coupling {
        shared: 1e-5,
        capacitive: 0.0,
    };
    assert_eq!(r.magnitude(100.0), r.magnitude(10_000.0));
}

/// Check value 13: a three-parameter fit to white noise σ over M samples
/// gives a Rayleigh amplitude with mean σ·√(π/M) (statistics of the
/// least-squares estimator, Kay 1993): σ = 1e-3, M = 8192 → 1.958e-5, ±3 %
/// over 1000 trials. The local-noise estimate must agree with the truth too.
#[test]
fn noise_only_fit_is_rayleigh() {
    let mut rng = rand::rngs::StdRng::seed_from_u64(13);
    let (m, sigma) = (8192, 1e-3);
    let model = ToneModel::new(997.0, 48_000.0, m, 1);
    let mut planner = rustfft::FftPlanner::new();
    let (mut amp_sum, mut est_sum) = (0.0, 0.0);
    let mut bb = Vec::new();
    for _ in 0..1000 {
        let x: Vec<f32> = (0..m)
            .map(|_| (sigma * rng.sample::<f64, _>(StandardNormal)) as f32)
            .collect();
        let fit = &fit_tones(&[&x], &model).unwrap()[0];
        amp_sum += fit.fundamental();
        residual_into(&x, fit, &model, &mut bb);
        est_sum += quadrature_sigma(&bb, 997.0, 48_000.0, 1, &mut planner).unwrap();
    }
    let mean = amp_sum / 1000.0;
    assert!(
        (mean / 1.958e-5 - 1.0).abs() < 0.03,
        "mean amplitude {mean}"
    );
    assert!((mean / (sigma * (PI / m as f64).sqrt()) - 1.0).abs() < 0.03);
    // Each quadrature part: σ·√(2/M).
    let est = est_sum / 1000.0;
    assert!(
        (est / (sigma * (2.0 / m as f64).sqrt()) - 1.0).abs() < 0.02,
        "σq estimate {est}"
    );
}

/// Check value 14: dBFS per AES17: a full-scale sine is 0.00 dBFS, a
/// full-scale square +3.01 dBFS.
#[test]
fn dbfs_convention() {
    let sine_rms = (0..48_000)
        .map(|n| (2.0 * PI * 1000.0 * n as f64 / 48_000.0).sin().powi(2))
        .sum::<f64>()
        / 48_000.0;
    assert!(rms_to_dbfs(sine_rms.sqrt()).abs() < 0.01);
    assert!((rms_to_dbfs(1.0) - 3.01).abs() < 0.01);
}

/// IEC 61672-1:2013 Table 3, frequency weighting A at the base-10 exact
/// third-octave frequencies, rounded to 0.1 dB (table values from memory of
/// the standard; the analytic form is the standard's Annex E).
#[test]
fn a_weighting_table() {
    use septum::dsp::weighting::a_weighting_db;
    let table = [
        (-20, -70.4),
        (-17, -50.5),
        (-15, -39.4),
        (-12, -26.2),
        (-10, -19.1),
        (-9, -16.1),
        (-6, -8.6),
        (-3, -3.2),
        (-1, -0.8),
        (0, 0.0),
        (2, 1.0),
        (3, 1.2),
        (5, 1.2),
        (6, 1.0),
        (8, -0.1),
        (9, -1.1),
        (10, -2.5),
        (12, -6.6),
        (13, -9.3),
    ];
    for (x, db) in table {
        let f = third_octave_exact(x);
        let got = a_weighting_db(f);
        assert!(
            (got - db).abs() <= 0.051,
            "{f:.1} Hz: {got:.3} dB vs table {db}"
        );
    }
}

/// Jitter-limited SNR −20·log10(2π·f·σt) (Analog Devices MT-007; Brannon
/// 2004): 100 MHz with 100 fs → 84.04 dB, 10 MHz with 10 ps → 64.04 dB.
#[test]
fn jitter_limited_snr() {
    use septum::dsp::level::jitter_snr_db;
    assert!((jitter_snr_db(100e6, 100e-15) - 84.04).abs() < 0.01);
    assert!((jitter_snr_db(10e6, 10e-12) - 64.04).abs() < 0.01);
}

/// ENOB from SINAD, (SINAD − 1.76)/6.02 (IEEE Std 1241, form from memory):
/// 62 dB → 10.007 bits, 50 dB → 8.013 bits; and the IEEE 1241 form from the
/// noise and distortion, log2(FSR/(NAD·√12)), agrees at full scale.
#[test]
fn enob_forms() {
    use septum::dsp::level::{enob_from_nad, enob_from_sinad};
    assert!((enob_from_sinad(62.0) - 10.007).abs() < 0.001);
    assert!((enob_from_sinad(50.0) - 8.013).abs() < 0.001);
    // Full-scale sine (rms 1/√2) with NAD such that SINAD = 62 dB.
    let nad = (1.0 / 2f64.sqrt()) / 10f64.powf(62.0 / 20.0);
    assert!((enob_from_nad(nad) - enob_from_sinad(62.0)).abs() < 0.002);
    // An ideal 16-bit quantiser: NAD = Q/√12 gives exactly 16 bits.
    assert!((enob_from_nad(2f64.powi(-15) / 12f64.sqrt()) - 16.0).abs() < 1e-12);
}
