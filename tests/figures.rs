//! The figures beyond separation, held against the simulated model's exact
//! values and against published ones: band and A-weighted noise, dynamic
//! range, SINAD/THD/ENOB of the driven channel, the stimulus clock offset,
//! jitter-limited SNR, the coupling mechanism, out-of-band overload.

mod common;
use common::*;
use std::collections::HashMap;

fn run(w: &Workdir, edits: &[(&str, &str)]) {
    let m = w.model("m.toml", edits);
    w.ok(&[
        "simulate",
        "-q",
        "--out",
        "run",
        "--model",
        m.to_str().unwrap(),
    ]);
    w.ok(&["analyze", "-q", "run", "--out", "res"]);
}

fn by_key(
    rows: Vec<HashMap<String, String>>,
    keys: &[&str],
) -> HashMap<String, HashMap<String, String>> {
    rows.into_iter()
        .map(|r| {
            (
                keys.iter()
                    .map(|k| r[*k].clone())
                    .collect::<Vec<_>>()
                    .join("/"),
                r,
            )
        })
        .collect()
}

/// Band-limited and A-weighted floors and the driven channel's SINAD, THD
/// and ENOB in the built-in scenario.
#[test]
fn noise_bands_and_drive_quality_match_the_model() {
    let w = Workdir::new();
    run(
        &w,
        &[(
            "harmonics_dbc = [-100.0, -106.0, -115.0]",
            "harmonics_dbc = [-70.0, -80.0, -95.0]",
        )],
    );
    let chans = read_csv(&w.path("res/channels.csv"));
    let exp = read_csv(&w.path("run/model/expected-channels.csv"));
    for (m, e) in chans.iter().zip(&exp) {
        let usable = num(m, "noise_0Hz_18750Hz_dbfs");
        assert!(
            (usable - num(e, "usable_noise_dbfs")).abs() < 0.3,
            "ch {}: {usable}",
            m["channel"]
        );
        let a = num(m, "noise_a_weighted_20Hz_20kHz_dbfs");
        assert!(
            (a - num(e, "a_weighted_noise_dbfs")).abs() < 0.3,
            "ch {}: A {a}",
            m["channel"]
        );
        assert!((num(m, "dynamic_range_db") + num(e, "noise_floor_dbfs")).abs() < 0.5);
    }
    let drive = by_key(
        read_csv(&w.path("res/drive.csv")),
        &["frequency_hz", "channel"],
    );
    let exp = read_csv(&w.path("run/model/expected-drive.csv"));
    assert_eq!(drive.len(), exp.len());
    for e in &exp {
        let m = &drive[&format!("{}/{}", e["frequency_hz"], e["channel"])];
        let what = format!("{} Hz ch {}", e["frequency_hz"], e["channel"]);
        assert!(
            (num(m, "sinad_db") - num(e, "sinad_db")).abs() < 0.2,
            "{what}: SINAD {} vs {}",
            m["sinad_db"],
            e["sinad_db"]
        );
        assert!(
            (num(m, "enob_bits") - num(e, "enob_bits")).abs() < 0.04,
            "{what}: ENOB"
        );
        if e["thd_db"].is_empty() {
            assert_eq!(m["thd_db"], "", "{what}");
        } else {
            assert!(
                (num(m, "thd_db") - num(e, "thd_db")).abs() < 0.1,
                "{what}: THD {} vs {}",
                m["thd_db"],
                e["thd_db"]
            );
            // The 2nd harmonic at −70 dBc is the largest spur.
            assert!(
                (num(m, "sfdr_db") - 70.0).abs() < 0.1,
                "{what}: SFDR {}",
                m["sfdr_db"]
            );
        }
        assert!(
            num(m, "clock_offset_ppm").abs() <= num(m, "clock_offset_u95_ppm") * 2.5 + 1e-6,
            "{what}"
        );
    }
}

/// An ideal 16-bit converter with triangular dither, a −1 dBFS tone: noise is
/// Q²/12 of rounding plus Q²/6 of dither, so SINAD = 6.02·16 + 1.76 − 1 −
/// 10·log10(3) = 92.32 dB (Analog Devices MT-001 for the 6.02N + 1.76 dB
/// rule; the dither's share computed) and ENOB = 16 − log2(√3) = 15.21 bits.
#[test]
fn ideal_sixteen_bit_converter() {
    let w = Workdir::new();
    run(
        &w,
        &[
            ("bits = 24", "bits = 16"),
            ("wav = \"int24\"", "wav = \"int16\""),
            ("noise_dbfs = -118.0", "noise_dbfs = -200.0"),
            ("noise_spread_db = 1.0", "noise_spread_db = 0.0"),
            (
                "harmonics_dbc = [-100.0, -106.0, -115.0]",
                "harmonics_dbc = []",
            ),
            ("levels_dbfs = [-128.0, -134.0, -140.0]", "levels_dbfs = []"),
            ("jitter_rms_s = 20e-12", "jitter_rms_s = 0.0"),
            ("noise_dbfs = -112.0", "noise_dbfs = -200.0"),
            ("gain_spread_db = 0.05", "gain_spread_db = 0.0"),
        ],
    );
    for d in read_csv(&w.path("res/drive.csv")) {
        assert!((num(&d, "sinad_db") - 92.32).abs() < 0.1, "{d:?}");
        assert!((num(&d, "enob_bits") - 15.208).abs() < 0.02, "{d:?}");
    }
    // The idle floor is Q/2 rms: 20·log10(2^-15/2·√2) = −93.32 dBFS (computed).
    for c in read_csv(&w.path("res/channels.csv")) {
        assert!((num(&c, "noise_floor_dbfs") + 93.32).abs() < 0.1, "{c:?}");
        assert!((num(&c, "dynamic_range_db") - 93.32).abs() < 0.1, "{c:?}");
    }
}

/// 1 ns of sampling jitter limits a 16 kHz tone to −20·log10(2π·f·σt) =
/// 79.9 dB (Analog Devices MT-007), whatever else is quiet.
#[test]
fn jitter_limits_sinad_at_high_frequency() {
    let w = Workdir::new();
    run(
        &w,
        &[
            ("jitter_rms_s = 20e-12", "jitter_rms_s = 1e-9"),
            (
                "preferred_hz = [125.0, 1000.0, 4000.0, 16000.0]",
                "frequencies_hz = [16000.0]\npreferred_hz = []",
            ),
            ("noise_dbfs = -118.0", "noise_dbfs = -150.0"),
            ("noise_dbfs = -112.0", "noise_dbfs = -150.0"),
        ],
    );
    let expected = septum::dsp::level::jitter_snr_db(16_000.0, 1e-9);
    assert!((expected - 79.96).abs() < 0.01);
    for d in read_csv(&w.path("res/drive.csv")) {
        assert!((num(&d, "sinad_db") - expected).abs() < 0.3, "{d:?}");
        assert!(
            (num(&d, "jitter_snr_db") - septum::dsp::level::jitter_snr_db(16_000.0, 100e-12)).abs()
                < 0.01
        );
    }
}

/// An external generator 250 ppm fast: the offset is measured within its uncertainty.
#[test]
fn clock_offset_is_measured() {
    let w = Workdir::new();
    run(
        &w,
        &[("generator_offset_ppm = 0.0", "generator_offset_ppm = 250.0")],
    );
    for d in read_csv(&w.path("res/drive.csv")) {
        let (ppm, u) = (num(&d, "clock_offset_ppm"), num(&d, "clock_offset_u95_ppm"));
        assert!((ppm - 250.0).abs() <= 2.5 * u.max(1e-4), "{d:?}");
        assert!(u < 0.05, "{d:?}");
    }
}

/// Pure mechanisms: neighbours coupled only through a shared impedance,
/// inputs further apart only capacitively (20 dB per decade: Ott, Noise
/// Reduction Techniques in Electronic Systems, ch. 2), one pair with both.
#[test]
fn coupling_mechanism_is_named() {
    let w = Workdir::new();
    run(
        &w,
        &[
            (
                "adjacent_capacitive_db = -104.0",
                "adjacent_capacitive_db = -300.0",
            ),
            ("far_shared_db = -150.0", "far_shared_db = -300.0"),
            ("far_capacitive_db = -124.0", "far_capacitive_db = -110.0"),
            ("capacitive_step_db = 8.0", "capacitive_step_db = 2.0"),
            ("adjacent_shared_db = -122.0", "adjacent_shared_db = -105.0"),
            (
                "shared_db = -112.0\ncapacitive_db = -97.0",
                "shared_db = -100.0\ncapacitive_db = -110.0",
            ),
        ],
    );
    let fits = by_key(
        read_csv(&w.path("res/coupling.csv")),
        &["aggressor", "victim"],
    );
    let exp = by_key(
        read_csv(&w.path("run/model/expected-coupling.csv")),
        &["aggressor", "victim"],
    );
    let mut checked = (0, 0, 0);
    for (k, f) in &fits {
        let (a, v): (u32, u32) = {
            let mut it = k.split('/').map(|x| x.parse().unwrap());
            (it.next().unwrap(), it.next().unwrap())
        };
        if num(f, "points") < 4.0 {
            continue;
        }
        let e = &exp[k];
        match (a, v) {
            (4, 5) | (5, 4) => {
                assert_eq!(f["mechanism"], "mixed", "{k}");
                assert!(
                    (num(f, "shared_db") - num(e, "shared_db")).abs() < 0.3,
                    "{k}: {f:?}"
                );
                assert!(
                    (num(f, "rising_db_at_1khz") - num(e, "rising_db_at_1khz")).abs() < 0.3,
                    "{k}: {f:?}"
                );
                checked.2 += 1;
            }
            _ if a.abs_diff(v) == 1 => {
                assert_eq!(f["mechanism"], "shared-impedance", "{k}: {f:?}");
                assert!(num(f, "slope_db_per_decade").abs() < 0.5, "{k}: {f:?}");
                assert!(
                    (num(f, "shared_db") - num(e, "shared_db")).abs() < 0.2,
                    "{k}: {f:?}"
                );
                checked.0 += 1;
            }
            _ => {
                assert_eq!(f["mechanism"], "capacitive-or-inductive", "{k}: {f:?}");
                assert!(
                    (num(f, "slope_db_per_decade") - 20.0).abs() < 0.5,
                    "{k}: {f:?}"
                );
                assert!(
                    (num(f, "rising_db_at_1khz") - num(e, "rising_db_at_1khz")).abs() < 0.3,
                    "{k}: {f:?}"
                );
                checked.1 += 1;
            }
        }
    }
    assert!(
        checked.0 >= 10 && checked.1 >= 10 && checked.2 == 2,
        "{checked:?}"
    );
    assert!(w.path("res/coupling-matrix.csv").exists());
}

/// A strong component above the usable band on one victim is flagged.
#[test]
fn out_of_band_overload_is_flagged() {
    use septum::run::{read_capture, write_capture, WavFormat};
    let w = Workdir::new();
    run(
        &w,
        &[
            (
                "preferred_hz = [125.0, 1000.0, 4000.0, 16000.0]",
                "frequencies_hz = [1000.0]\npreferred_hz = []",
            ),
            ("record_samples = 65536", "record_samples = 16384"),
            ("idle_samples = 65536", "idle_samples = 16384"),
        ],
    );
    let cap = w.path("run/captures/002-drive-ch2-1000Hz.wav");
    let c = read_capture(&cap, 8, 48_000).unwrap();
    let mut chans: Vec<Vec<f64>> = c
        .channels
        .iter()
        .map(|ch| ch.iter().map(|v| f64::from(*v)).collect())
        .collect();
    for (n, v) in chans[6].iter_mut().enumerate() {
        *v += 0.5 * (2.0 * std::f64::consts::PI * 21_500.0 * n as f64 / 48_000.0).sin();
    }
    write_capture(&cap, &chans, 48_000, WavFormat::Int24).unwrap();
    w.ok(&["analyze", "-q", "run", "--out", "res", "--force"]);
    let s: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(w.path("res/summary.json")).unwrap())
            .unwrap();
    let oob: Vec<_> = s["warnings"]
        .as_array()
        .unwrap()
        .iter()
        .filter(|w| w["kind"] == "out-of-band")
        .collect();
    assert_eq!(oob.len(), 1, "{oob:?}");
    assert_eq!(oob[0]["channel"], 7);
    assert!(
        oob[0]["message"].as_str().unwrap().contains("-6.0 dBFS"),
        "{oob:?}"
    );
}

/// The common-drive step: gain match and skew against the reference input,
/// with inputs sampling at spread instants and one on a late converter.
#[test]
fn gain_match_and_skew_from_a_common_drive() {
    let w = Workdir::new();
    run(
        &w,
        &[
            ("skew_spread_us = 0.0", "skew_spread_us = 0.3"),
            (
                "frequencies_hz = [997.0]\nlevel_dbfs = -6.0\nreference_channel = 1",
                "frequencies_hz = [997.0, 15000.0]\nlevel_dbfs = -6.0\nreference_channel = 3",
            ),
            (
                "preferred_hz = [125.0, 1000.0, 4000.0, 16000.0]",
                "frequencies_hz = [1000.0]\npreferred_hz = []",
            ),
        ],
    );
    let got = by_key(
        read_csv(&w.path("res/common-drive.csv")),
        &["frequency_hz", "channel"],
    );
    let exp = read_csv(&w.path("run/model/expected-common.csv"));
    assert_eq!(got.len(), 16);
    for e in &exp {
        let g = &got[&format!("{}/{}", e["frequency_hz"], e["channel"])];
        assert_eq!(g["reference"], "3");
        let what = format!("{} Hz ch {}", e["frequency_hz"], e["channel"]);
        let du = num(g, "gain_u95_db") * 2.5 + 1e-4;
        assert!(
            (num(g, "gain_db") - num(e, "gain_db")).abs() <= du,
            "{what}: {g:?}"
        );
        let su = num(g, "skew_u95_us") * 2.5 + 1e-4;
        assert!(
            (num(g, "skew_us") - num(e, "skew_us")).abs() <= su,
            "{what}: {} vs {}",
            g["skew_us"],
            e["skew_us"]
        );
    }
}
