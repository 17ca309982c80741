//! Limits, claims and baselines on hand-built results folders (and one
//! simulated run), each built to pass, to fail or to be inconclusive; the
//! exit codes automation relies on (0 pass, 3 fail, 4 inconclusive, 1 error,
//! 2 usage).

mod common;
use common::*;
use std::fs;

/// Write a results folder with `pairs` and channel `floors` (dBFS).
fn folder(w: &Workdir, name: &str, pairs: &[PairSpec], floors: &[f64], termination: &str) {
    results_folder(&w.path(name), pairs, floors, termination);
}

/// Two channels at 1 kHz and 10 kHz: separations chosen per test.
fn two_channels(w: &Workdir, name: &str, s12: f64, s21: (f64, bool), hf: f64) {
    folder(
        w,
        name,
        &[
            (1000.0, 1, 2, s12, false, Some(0.2)),
            (1000.0, 2, 1, s21.0, s21.1, (!s21.1).then_some(0.2)),
            (10000.0, 1, 2, hf, false, Some(0.1)),
            (10000.0, 2, 1, hf + 1.0, false, Some(0.1)),
        ],
        &[-115.0, -114.0],
        "short",
    );
}

fn write(w: &Workdir, name: &str, text: &str) -> String {
    fs::write(w.path(name), text).unwrap();
    name.to_string()
}

/// Run `septum` and return (exit code, stdout).
fn run(w: &Workdir, args: &[&str]) -> (i32, String) {
    let out = w.septum(args);
    (
        out.status.code().unwrap(),
        String::from_utf8_lossy(&out.stdout).into_owned(),
    )
}

fn verdict_json(w: &Workdir, dir: &str) -> serde_json::Value {
    serde_json::from_str(&fs::read_to_string(w.path(dir).join("verdict.json")).unwrap()).unwrap()
}

const LIMITS: &str = "[[separation]]\nat_hz = 1000\nmin_db = 100\n[[separation]]\nat_hz = 10000\npairs = \"adjacent\"\nmin_db = 80\n[noise_floor]\nmax_dbfs = -110\n[dynamic_range]\nmin_db = 110\n";

#[test]
fn limits_pass_fail_and_inconclusive() {
    let w = Workdir::new();
    let l = write(&w, "limits.toml", LIMITS);
    // Clear of every limit.
    two_channels(&w, "pass", 105.0, (106.0, false), 90.0);
    let (code, out) = run(&w, &["check", "pass", "--limits", &l]);
    assert_eq!(code, 0, "{out}");
    assert!(out.contains("Verdict: PASS"), "{out}");
    let v = verdict_json(&w, "pass");
    assert_eq!(v["outcome"], "pass");
    assert_eq!(v["format"], "septum.verdict/1");
    // 105 − 100 = +5 dB margin on pair 1 → 2 at 1 kHz.
    let pair = &v["limits"]["pairs"][0];
    assert_eq!(pair["outcome"], "pass");
    assert!((pair["margin_db"].as_f64().unwrap() - 5.0).abs() < 1e-9);
    // Dynamic range is −floor: 114 dB for channel 2 → +4 dB over 110.
    let dr = v["limits"]["channels"]
        .as_array()
        .unwrap()
        .iter()
        .find(|c| c["channel"] == 2 && c["figure"] == "dynamic-range")
        .unwrap()
        .clone();
    assert!((dr["measured"].as_f64().unwrap() - 114.0).abs() < 1e-9);
    assert!((dr["margin_db"].as_f64().unwrap() - 4.0).abs() < 1e-9);

    // 99.5 ± 0.2 dB misses 100 dB beyond its uncertainty: fail.
    two_channels(&w, "fail", 99.5, (106.0, false), 90.0);
    let (code, out) = run(&w, &["check", "fail", "--limits", &l]);
    assert_eq!(code, 3, "{out}");
    assert!(out.contains("Verdict: FAIL"));
    let csv = read_csv(&w.path("fail/verdict.csv"));
    let row = csv
        .iter()
        .find(|r| {
            r["check"] == "separation" && r["aggressor"] == "1" && r["frequency_hz"] == "1000"
        })
        .unwrap();
    assert_eq!(row["outcome"], "fail");
    assert!((num(row, "margin_db") + 0.5).abs() < 1e-9);

    // 100.1 ± 0.2 dB straddles 100 dB: inconclusive.
    two_channels(&w, "straddle", 100.1, (106.0, false), 90.0);
    let (code, out) = run(&w, &["check", "straddle", "--limits", &l]);
    assert_eq!(code, 4, "{out}");
    assert!(out.contains("Verdict: INCONCLUSIVE"));

    // A lower bound of 97 dB below a 100 dB limit: inconclusive, and a
    // record 10^(3/10) ≈ 2 times longer would settle it (processing gain,
    // 10·log10 of the length ratio; MEASUREMENT.md).
    two_channels(&w, "bound", 105.0, (97.0, true), 90.0);
    let (code, out) = run(&w, &["check", "bound", "--limits", &l]);
    assert_eq!(code, 4, "{out}");
    let v = verdict_json(&w, "bound");
    let p = v["limits"]["pairs"]
        .as_array()
        .unwrap()
        .iter()
        .find(|p| p["aggressor"] == 2 && p["frequency_hz"] == 1000.0)
        .unwrap()
        .clone();
    assert_eq!(p["outcome"], "inconclusive");
    assert!(p["settle"].as_str().unwrap().contains("2.0 times"), "{p}");

    // A lower bound above the limit passes: the truth is at least the bound.
    two_channels(&w, "bound-ok", 105.0, (101.0, true), 90.0);
    assert_eq!(run(&w, &["check", "bound-ok", "--limits", &l]).0, 0);

    // Failing beats inconclusive.
    two_channels(&w, "both", 105.0, (97.0, true), 70.0);
    assert_eq!(run(&w, &["check", "both", "--limits", &l]).0, 3);
}

#[test]
fn a_limit_without_a_test_frequency_is_inconclusive() {
    let w = Workdir::new();
    two_channels(&w, "res", 105.0, (106.0, false), 90.0);
    let l = write(&w, "l.toml", "[[separation]]\nat_hz = 4000\nmin_db = 60\n");
    let (code, out) = run(&w, &["check", "res", "--limits", &l, "--no-write"]);
    assert_eq!(code, 4, "{out}");
    assert!(out.contains("add a test frequency there"), "{out}");
    assert!(
        !w.path("res/verdict.json").exists(),
        "--no-write writes nothing"
    );
    // A band covers every test frequency inside it, ends included.
    let l = write(
        &w,
        "band.toml",
        "[[separation]]\nfrom_hz = 1000\nto_hz = 10000\nmin_db = 85\n",
    );
    assert_eq!(run(&w, &["check", "res", "--limits", &l]).0, 0);
}

#[test]
fn noise_floor_limits_with_a_channel_exception() {
    let w = Workdir::new();
    folder(
        &w,
        "res",
        &[(1000.0, 1, 2, 120.0, false, Some(0.1))],
        &[-115.0, -109.0],
        "short",
    );
    let strict = write(&w, "strict.toml", "[noise_floor]\nmax_dbfs = -110\n");
    assert_eq!(run(&w, &["check", "res", "--limits", &strict]).0, 3);
    let relaxed = write(
        &w,
        "relaxed.toml",
        "[[noise_floor]]\nmax_dbfs = -110\n[[noise_floor]]\nmax_dbfs = -105\nchannels = [2]\n",
    );
    assert_eq!(run(&w, &["check", "res", "--limits", &relaxed]).0, 0);
    let named = write(
        &w,
        "ch9.toml",
        "[noise_floor]\nmax_dbfs = -110\nchannels = [9]\n",
    );
    let e = w.fails(&["check", "res", "--limits", &named]);
    assert!(e.contains("ch9.toml") && e.contains("channel 9"), "{e}");
}

#[test]
fn claims_met_not_met_and_inconclusive() {
    let w = Workdir::new();
    // 1 kHz: 1 → 2 at 103 ± 0.2, 2 → 1 a lower bound of 98.
    two_channels(&w, "res", 103.0, (98.0, true), 90.0);
    let met = write(
        &w,
        "met.toml",
        "format = \"septum.claims/1\"\n[conditions]\ntermination = \"Short\"\nlevel_dbfs = -1.5\n[[separation]]\nat_hz = 1000\nminimum_db = 95\n[noise_floor]\nmaximum_dbfs = -113\ntypical_dbfs = -114\n[dynamic_range]\nminimum_db = 113\n",
    );
    let (code, out) = run(&w, &["check", "res", "--claims", &met]);
    assert_eq!(code, 0, "{out}");
    assert!(out.contains("met"));
    // Median floor of −115 and −114 is −114.5 dBFS: a typical −114.6 is not met.
    let typ = write(&w, "typ.toml", "[noise_floor]\ntypical_dbfs = -114.6\n");
    let (code, _) = run(&w, &["check", "res", "--claims", &typ, "--no-write"]);
    assert_eq!(code, 3);
    // A minimum of 100 dB: the bound 98 cannot show it, the other pair does.
    let bound = write(
        &w,
        "bound.toml",
        "[[separation]]\nat_hz = 1000\nminimum_db = 100\n",
    );
    let (code, out) = run(&w, &["check", "res", "--claims", &bound]);
    assert_eq!(code, 4, "{out}");
    assert!(out.contains("to settle") && out.contains("longer"), "{out}");
    // The typical (median) of {103 ± 0.2, ≥ 98}: low end (102.8 + 98)/2 =
    // 100.4, high end unbounded. 100 is met, 101 cannot be told.
    let t100 = write(
        &w,
        "t100.toml",
        "[[separation]]\nat_hz = 1000\ntypical_db = 100\n",
    );
    assert_eq!(run(&w, &["check", "res", "--claims", &t100]).0, 0);
    let t101 = write(
        &w,
        "t101.toml",
        "[[separation]]\nat_hz = 1000\ntypical_db = 101\n",
    );
    assert_eq!(run(&w, &["check", "res", "--claims", &t101]).0, 4);
    // Not met: 10 kHz pairs at 90 and 91 dB against a 95 dB minimum.
    let miss = write(
        &w,
        "miss.toml",
        "[[separation]]\nat_hz = 10000\nminimum_db = 95\ntypical_db = 92\n",
    );
    let (code, out) = run(&w, &["check", "res", "--claims", &miss]);
    assert_eq!(code, 3, "{out}");
    assert!(out.contains("not met"));
    // The same claim under other conditions cannot be settled by this run.
    let other = write(
        &w,
        "other.toml",
        "[conditions]\ntermination = \"600 ohm\"\n[[separation]]\nat_hz = 10000\nminimum_db = 95\n",
    );
    let (code, out) = run(&w, &["check", "res", "--claims", &other]);
    assert_eq!(code, 4, "{out}");
    assert!(
        out.contains("DIFFERENT") && out.contains("measure under those conditions"),
        "{out}"
    );
}

#[test]
fn baseline_drift_tolerance_and_selection() {
    let w = Workdir::new();
    two_channels(&w, "then", 105.0, (106.0, false), 90.0);
    // 2 dB lost: within the default 3 dB.
    two_channels(&w, "now", 103.0, (106.0, false), 90.0);
    let (code, out) = run(&w, &["check", "now", "--baseline", "then"]);
    assert_eq!(code, 0, "{out}");
    // ... but not within 1 dB (2 ± 0.28 dB beyond).
    let (code, out) = run(
        &w,
        &["check", "now", "--baseline", "then", "--tolerance-db", "1"],
    );
    assert_eq!(code, 3, "{out}");
    assert!(out.contains("1 → 2"), "{out}");
    let v = verdict_json(&w, "now");
    let d = &v["baseline"]["pairs"][0];
    assert!((d["drift_db"].as_f64().unwrap() + 2.0).abs() < 1e-9);
    // u95 of a difference: √(0.2² + 0.2²) = 0.2828 dB (root-sum-square of
    // independent uncertainties; GUM, JCGM 100:2008, from memory).
    assert!((d["u95_db"].as_f64().unwrap() - 0.2828).abs() < 1e-4);
    // A floor-limited figure far under the baseline cannot be judged.
    two_channels(&w, "bound", 105.0, (95.0, true), 90.0);
    assert_eq!(run(&w, &["check", "bound", "--baseline", "then"]).0, 4);
    // A noisier channel: 5 dB up is beyond 3 dB.
    folder(
        &w,
        "noisy",
        &[
            (1000.0, 1, 2, 105.0, false, Some(0.2)),
            (1000.0, 2, 1, 106.0, false, Some(0.2)),
            (10000.0, 1, 2, 90.0, false, Some(0.1)),
            (10000.0, 2, 1, 91.0, false, Some(0.1)),
        ],
        &[-110.0, -114.0],
        "short",
    );
    assert_eq!(run(&w, &["check", "noisy", "--baseline", "then"]).0, 3);
}

#[test]
fn baseline_refuses_different_runs_unless_told_what_to_compare() {
    let w = Workdir::new();
    two_channels(&w, "then", 105.0, (106.0, false), 90.0);
    // Three channels and a 1005.6 Hz tone instead of 1000 Hz.
    folder(
        &w,
        "now",
        &[
            (1005.615234375, 1, 2, 104.0, false, Some(0.2)),
            (1005.615234375, 2, 1, 105.0, false, Some(0.2)),
            (1005.615234375, 1, 3, 125.0, false, Some(0.2)),
            (10000.0, 1, 2, 90.0, false, Some(0.1)),
            (10000.0, 2, 1, 91.0, false, Some(0.1)),
        ],
        &[-115.0, -114.0, -116.0],
        "short",
    );
    let e = w.fails(&["check", "now", "--baseline", "then"]);
    assert!(
        e.contains("different test frequencies") && e.contains("--frequencies"),
        "{e}"
    );
    let e = w.fails(&[
        "check",
        "now",
        "--baseline",
        "then",
        "--frequencies",
        "1000,10000",
    ]);
    assert!(
        e.contains("different channel counts") && e.contains("--channels"),
        "{e}"
    );
    let e = w.fails(&[
        "check",
        "now",
        "--baseline",
        "then",
        "--frequencies",
        "1000",
        "--channels",
        "1-3",
    ]);
    assert!(e.contains("channel 3 is not in both runs"), "{e}");
    let e = w.fails(&[
        "check",
        "now",
        "--baseline",
        "then",
        "--frequencies",
        "2000",
        "--channels",
        "1,2",
    ]);
    assert!(
        e.contains("no test frequency in the third-octave band of 2000 Hz"),
        "{e}"
    );
    let (code, out) = run(
        &w,
        &[
            "check",
            "now",
            "--baseline",
            "then",
            "--frequencies",
            "1000,10000",
            "--channels",
            "1,2",
        ],
    );
    assert_eq!(code, 0, "{out}");
    assert!(out.contains("1005.6 (then 1000)"), "{out}");
    assert!(
        !w.path("then/verdict.json").exists(),
        "the baseline folder is only read"
    );
}

#[test]
fn exit_codes_for_errors_and_usage() {
    let w = Workdir::new();
    two_channels(&w, "res", 105.0, (106.0, false), 90.0);
    let l = write(&w, "limits.toml", LIMITS);
    // A verdict written earlier survives a failed check.
    assert_eq!(run(&w, &["check", "res", "--limits", &l]).0, 0);
    let before = fs::read_to_string(w.path("res/verdict.json")).unwrap();
    let e = w.fails(&["check", "res", "--limits", "missing.toml"]);
    assert!(
        e.contains("missing.toml") && e.contains("No such file"),
        "{e}"
    );
    let bad = write(
        &w,
        "bad.toml",
        "[[separation]]\nat_hz = 1000\nmin_db = \"high\"\n",
    );
    let e = w.fails(&["check", "res", "--limits", &bad]);
    assert!(e.contains("bad.toml: line 3"), "{e}");
    let unknown = write(
        &w,
        "unknown.toml",
        "[[separation]]\nat_hz = 1000\nminimum = 90\n",
    );
    let e = w.fails(&["check", "res", "--limits", &unknown]);
    assert!(e.contains("unknown.toml") && e.contains("minimum"), "{e}");
    let claims = write(&w, "c.toml", "[[separation]]\nat_hz = 1000\n");
    let e = w.fails(&["check", "res", "--claims", &claims]);
    assert!(
        e.contains("c.toml: separation[1]: give typical_db, minimum_db or both"),
        "{e}"
    );
    fs::write(w.path("res/pairs.csv"), "frequency_hz,aggressor\n1000,1\n").unwrap();
    let e = w.fails(&["check", "res", "--limits", &l]);
    assert!(e.contains("pairs.csv: missing column"), "{e}");
    assert_eq!(
        fs::read_to_string(w.path("res/verdict.json")).unwrap(),
        before
    );
    let e = w.fails(&["check", "nowhere", "--limits", &l]);
    assert!(e.contains("nowhere"), "{e}");
    // Usage: nothing to judge against, or a baseline option without --baseline.
    assert_eq!(w.septum(&["check", "res"]).status.code(), Some(2));
    assert_eq!(
        w.septum(&["check", "res", "--limits", &l, "--channels", "1"])
            .status
            .code(),
        Some(2)
    );
}

#[test]
fn json_output_is_the_verdict_document() {
    let w = Workdir::new();
    two_channels(&w, "res", 99.0, (106.0, false), 90.0);
    let l = write(&w, "limits.toml", LIMITS);
    let (code, out) = run(
        &w,
        &["check", "res", "--limits", &l, "--json", "--no-write"],
    );
    assert_eq!(code, 3);
    let v: serde_json::Value = serde_json::from_str(&out).expect("stdout is JSON");
    assert_eq!(v["outcome"], "fail");
    assert_eq!(v["limits"]["outcome"], "fail");
}

/// A simulated run through `analyze --limits`: the built-in scenario passes
/// the commissioning limits; with the panel's 4/5 coupling made 15 dB worse
/// it fails, and the verdict lands in the results folder with them.
#[test]
fn analyze_with_limits_on_simulated_runs() {
    let w = Workdir::new();
    let limits = concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/procedures/limits-commissioning.toml"
    );
    let claims = concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/procedures/claims-example.toml"
    );
    let small = [
        ("record_samples = 65536", "record_samples = 16384"),
        ("idle_samples = 65536", "idle_samples = 16384"),
    ];
    let m = w.model("good.toml", &small);
    w.ok(&[
        "simulate",
        "-q",
        "--out",
        "run",
        "--model",
        m.to_str().unwrap(),
    ]);
    let (code, out) = run(
        &w,
        &[
            "analyze", "run", "--out", "res", "--limits", limits, "--claims", claims,
        ],
    );
    // The example claims include a noise maximum that input 7 misses.
    assert_eq!(code, 3, "{out}");
    let v = verdict_json(&w, "res");
    assert_eq!(v["limits"]["outcome"], "pass", "{}", v["limits"]);
    assert_eq!(v["claims"]["outcome"], "fail");
    let (code, _) = run(
        &w,
        &["analyze", "-q", "run", "--out", "res2", "--limits", limits],
    );
    assert_eq!(code, 0);
    let mut edits = small.to_vec();
    edits.push(("capacitive_db = -97.0", "capacitive_db = -82.0"));
    let m = w.model("bad.toml", &edits);
    w.ok(&[
        "simulate",
        "-q",
        "--out",
        "run-bad",
        "--model",
        m.to_str().unwrap(),
    ]);
    let (code, out) = run(
        &w,
        &["analyze", "run-bad", "--out", "res-bad", "--limits", limits],
    );
    assert_eq!(code, 3, "{out}");
    assert!(out.contains("4 → 5"), "{out}");
    // Bad limits are refused before anything is written.
    let e = w.fails(&["analyze", "run", "--out", "res3", "--limits", "nope.toml"]);
    assert!(e.contains("nope.toml"), "{e}");
    assert!(!w.path("res3").exists());
}

/// Two simulated runs of the same front end (same seed): the second with the
/// panel's 4 → 5 coupling 10 dB stronger. Against the first as a baseline,
/// 4 → 5 got worse at every frequency and nothing else moved.
#[test]
fn baseline_on_simulated_runs() {
    let w = Workdir::new();
    let small = [
        ("record_samples = 65536", "record_samples = 16384"),
        ("idle_samples = 65536", "idle_samples = 16384"),
    ];
    let m = w.model("then.toml", &small);
    w.ok(&[
        "simulate",
        "-q",
        "--out",
        "run-then",
        "--model",
        m.to_str().unwrap(),
    ]);
    w.ok(&["analyze", "-q", "run-then", "--out", "then"]);
    let mut edits = small.to_vec();
    edits.push(("shared_db = -112.0", "shared_db = -102.0"));
    edits.push(("capacitive_db = -97.0", "capacitive_db = -87.0"));
    let m = w.model("now.toml", &edits);
    w.ok(&[
        "simulate",
        "-q",
        "--out",
        "run-now",
        "--model",
        m.to_str().unwrap(),
    ]);
    w.ok(&["analyze", "-q", "run-now", "--out", "now"]);
    let (code, out) = run(&w, &["check", "now", "--baseline", "then"]);
    assert_eq!(code, 3, "{out}");
    let v = verdict_json(&w, "now");
    let pairs = v["baseline"]["pairs"].as_array().unwrap();
    let worse: Vec<_> = pairs.iter().filter(|p| p["outcome"] == "fail").collect();
    assert_eq!(worse.len(), 4, "4 → 5 at each of the 4 test frequencies");
    for p in &worse {
        assert_eq!(
            (p["aggressor"].as_u64(), p["victim"].as_u64()),
            (Some(4), Some(5))
        );
        // Both coupling paths 10 dB up: 10 dB less separation (the model's
        // own figure; tolerance for noise on the victim).
        assert!((p["drift_db"].as_f64().unwrap() + 10.0).abs() < 0.5, "{p}");
    }
    assert!(pairs.iter().all(|p| p["outcome"] != "inconclusive"));
    // The comparison the other way round: 4 → 5 improved, nothing worse.
    assert_eq!(
        run(&w, &["check", "then", "--baseline", "now", "--no-write"]).0,
        0
    );
}
