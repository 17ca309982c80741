//! End-to-end: simulate runs with the real binary, analyse them, and hold
//! pairs.csv and channels.csv against the model's exact figures.

mod common;
use common::*;

/// Simulate with `edits` to the built-in model, analyse, compare.
fn simulate_and_analyse(w: &Workdir, edits: &[(&str, &str)]) -> Agreement {
    let model = w.model("model.toml", edits);
    w.ok(&[
        "simulate",
        "--quiet",
        "--out",
        "run",
        "--model",
        model.to_str().unwrap(),
    ]);
    w.ok(&["analyze", "--quiet", "run", "--out", "results"]);
    agreement(&w.path("run"), &w.path("results"))
}

fn assert_agrees(a: &Agreement) {
    assert!(a.strong > 0 && a.detected > a.strong, "{a:?}");
    assert!(
        a.strong_max_err <= 0.05,
        "strong pairs off by {:.4} dB: {a:?}",
        a.strong_max_err
    );
    // Every detected pair within 4.5 standard uncertainties (about 1 in 10^5 by chance).
    assert!(a.max_z <= 4.5, "{a:?}");
    // Statistics: a victim tone just below the limit may, with noise, pass it;
    // one 10 dB below passes it by chance about once in 500 pairs.
    assert!(
        a.weak_ok + a.weak / 200 >= a.weak,
        "pairs far below the limit must be floor-limited: {a:?}"
    );
    assert_eq!(
        a.bounded, a.bounded_ok,
        "a floor-limited bound must not exceed the truth: {a:?}"
    );
    assert_eq!(
        a.missed, 0,
        "pairs 10 dB above the limit must be detected: {a:?}"
    );
    assert!(a.floor_max_err <= 0.5, "{a:?}");
}

/// The built-in scenario: 24-bit integer WAVs, latency, ramps, hum, jitter,
/// harmonics on the drive, one noisy input with a ground loop.
#[test]
fn default_scenario_recovers_the_model() {
    let w = Workdir::new();
    let a = simulate_and_analyse(&w, &[]);
    assert!(
        a.bounded > 0,
        "the scenario should hold floor-limited pairs: {a:?}"
    );
    assert_agrees(&a);
    let header = csv_header(&w.path("results/pairs.csv"));
    assert_eq!(
        header[..6],
        [
            "frequency_hz",
            "aggressor",
            "victim",
            "separation_db",
            "victim_dbfs",
            "floor_limited"
        ]
    );
    assert_eq!(
        csv_header(&w.path("results/channels.csv"))[..2],
        ["channel", "noise_floor_dbfs"]
    );
}

/// An external generator 0.4 % off its dial, float WAVs, longer latency.
#[test]
fn generator_offset_and_float_wavs() {
    let w = Workdir::new();
    let a = simulate_and_analyse(
        &w,
        &[
            (
                "generator_offset_ppm = 0.0",
                "generator_offset_ppm = 4000.0",
            ),
            ("wav = \"int24\"", "wav = \"float32\""),
            ("latency_s = 0.040", "latency_s = 0.250"),
            (
                "preferred_hz = [125.0, 1000.0, 4000.0, 16000.0]",
                "preferred_hz = [315.0, 10000.0]",
            ),
        ],
    );
    assert_agrees(&a);
    // The tone frequency was estimated, not taken from the manifest.
    for row in read_csv(&w.path("results/pairs.csv")) {
        let ratio = num(&row, "tone_hz") / num(&row, "frequency_hz");
        assert!(
            (ratio - 1.004).abs() < 1e-6,
            "tone {} vs {}",
            row["tone_hz"],
            row["frequency_hz"]
        );
    }
}

/// A 16-bit converter in 16-bit WAVs, no idle capture (floors from the
/// victim captures), strong hum, long ramps.
#[test]
fn sixteen_bit_without_idle_capture() {
    let w = Workdir::new();
    let a = simulate_and_analyse(
        &w,
        &[
            ("bits = 24", "bits = 16"),
            ("wav = \"int24\"", "wav = \"int16\""),
            ("noise_dbfs = -118.0", "noise_dbfs = -96.0"),
            ("idle_samples = 65536", "idle_samples = 0"),
            ("ramp_s = 0.020", "ramp_s = 0.150"),
            (
                "levels_dbfs = [-128.0, -134.0, -140.0]",
                "levels_dbfs = [-100.0, -110.0, -115.0]",
            ),
            (
                "preferred_hz = [125.0, 1000.0, 4000.0, 16000.0]",
                "preferred_hz = [1000.0, 8000.0]",
            ),
        ],
    );
    assert!(
        a.weak > 0,
        "this run should hold pairs far below the limit: {a:?}"
    );
    assert_agrees(&a);
    for row in read_csv(&w.path("results/channels.csv")) {
        assert_eq!(row["floor_source"], "victim");
    }
}

/// The leakage matrix holds the same figures as pairs.csv, with an empty diagonal.
#[test]
fn leakage_matrix_matches_pairs() {
    let w = Workdir::new();
    let model = w.model(
        "m.toml",
        &[(
            "preferred_hz = [125.0, 1000.0, 4000.0, 16000.0]",
            "frequencies_hz = [997.0]\npreferred_hz = []",
        )],
    );
    w.ok(&[
        "simulate",
        "-q",
        "--out",
        "run",
        "--model",
        model.to_str().unwrap(),
    ]);
    w.ok(&["analyze", "-q", "run", "--out", "res"]);
    let matrix = read_csv(&w.path("res/leakage-997Hz.csv"));
    let pairs = read_csv(&w.path("res/pairs.csv"));
    assert_eq!(matrix.len(), 8);
    for row in &matrix {
        let a = &row["aggressor"];
        assert_eq!(row[a.as_str()], "", "diagonal must be empty");
        for v in 1..=8 {
            let v = v.to_string();
            if &v == a {
                continue;
            }
            let p = pairs
                .iter()
                .find(|p| &p["aggressor"] == a && p["victim"] == v)
                .unwrap();
            assert_eq!(row[&v], p["separation_db"]);
        }
    }
    let summary: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(w.path("res/summary.json")).unwrap())
            .unwrap();
    assert_eq!(summary["run"]["front_end"]["serial"], "MVL-FE8-0117");
    assert_eq!(summary["worst_pairs"][0]["frequency_hz"], 997.0);
    let worst = pairs
        .iter()
        .map(|p| num(p, "separation_db"))
        .fold(f64::INFINITY, f64::min);
    assert!(
        (summary["worst_pairs"][0]["worst"]["separation_db"]
            .as_f64()
            .unwrap()
            - worst)
            .abs()
            < 1e-3
    );
}

/// The terminal summary shows the worst pairs, floors and the results folder.
#[test]
fn demo_prints_a_summary() {
    let w = Workdir::new();
    let out = w.ok(&["demo", "--out", "d"]);
    assert!(out.contains("Worst pair per test frequency"), "{out}");
    assert!(
        out.contains("Noise floor and dynamic range per channel"),
        "{out}"
    );
    assert!(w.path("d/results/pairs.csv").exists());
    assert!(w.path("d/run/run.json").exists());
    // A second demo into the same folder is refused, the first stays.
    let err = w.fails(&["demo", "--out", "d"]);
    assert!(err.contains("d: is not empty"), "{err}");
    assert!(w.path("d/results/pairs.csv").exists());
}
