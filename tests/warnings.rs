//! Warnings: clipping, strong content other than the tone, an aggressor too
//! weak to trust, a generator far off its nominal frequency.

mod common;
use common::*;
use septum::run::{read_capture, write_capture, WavFormat};
use std::f64::consts::PI;

fn small(w: &Workdir, extra: &[(&str, &str)]) -> serde_json::Value {
    let mut edits = vec![
        (
            "preferred_hz = [125.0, 1000.0, 4000.0, 16000.0]",
            "frequencies_hz = [1100.0]\npreferred_hz = []",
        ),
        ("record_samples = 65536", "record_samples = 16384"),
        ("idle_samples = 65536", "idle_samples = 16384"),
    ];
    edits.extend_from_slice(extra);
    let m = w.model("m.toml", &edits);
    w.ok(&[
        "simulate",
        "-q",
        "--out",
        "run",
        "--model",
        m.to_str().unwrap(),
    ]);
    w.ok(&["analyze", "-q", "run", "--out", "res"]);
    summary(w)
}

fn summary(w: &Workdir) -> serde_json::Value {
    serde_json::from_str(&std::fs::read_to_string(w.path("res/summary.json")).unwrap()).unwrap()
}

fn kinds(s: &serde_json::Value) -> Vec<(String, Option<u64>)> {
    s["warnings"]
        .as_array()
        .unwrap()
        .iter()
        .map(|w| {
            (
                w["kind"].as_str().unwrap().to_string(),
                w["channel"].as_u64(),
            )
        })
        .collect()
}

#[test]
fn a_clean_run_has_no_warnings() {
    let w = Workdir::new();
    assert_eq!(kinds(&small(&w, &[])), vec![]);
}

#[test]
fn clipping_is_flagged_per_channel() {
    let w = Workdir::new();
    let s = small(
        &w,
        &[
            ("level_dbfs = -1.0", "level_dbfs = -0.5"),
            (
                "name = \"accel 1 x\"",
                "name = \"accel 1 x\"\ngain_db = 1.0",
            ),
        ],
    );
    let k = kinds(&s);
    assert!(k.contains(&("clipping".into(), Some(1))), "{k:?}");
    assert!(
        !k.iter()
            .any(|(kind, ch)| kind == "clipping" && *ch != Some(1)),
        "{k:?}"
    );
    let clipped: u64 = read_csv(&w.path("res/channels.csv"))[0]["clipped_samples"]
        .parse()
        .unwrap();
    assert!(clipped > 100);
}

#[test]
fn a_weak_aggressor_is_flagged() {
    let w = Workdir::new();
    // Buried in noise: too weak to trust.
    let s = small(&w, &[("level_dbfs = -1.0", "level_dbfs = -110.0")]);
    let k = kinds(&s);
    assert_eq!(
        k.iter()
            .filter(|(kind, _)| kind == "weak-aggressor")
            .count(),
        8,
        "{k:?}"
    );
    // Clean but 39 dB below the level run.json names (a muted output or a wrong patch).
    let w = Workdir::new();
    small(&w, &[("level_dbfs = -1.0", "level_dbfs = -40.0")]);
    let p = w.path("run/run.json");
    let text = std::fs::read_to_string(&p)
        .unwrap()
        .replace("\"level_dbfs\": -40.0", "\"level_dbfs\": -1.0");
    std::fs::write(&p, text).unwrap();
    w.ok(&["analyze", "-q", "run", "--out", "res", "--force"]);
    let k = kinds(&summary(&w));
    assert_eq!(
        k.iter()
            .filter(|(kind, _)| kind == "weak-aggressor")
            .count(),
        8,
        "{k:?}"
    );
    assert_eq!(k.len(), 8, "{k:?}");
}

/// A second tone on a victim and broadband noise on the aggressor, added to
/// one capture after simulation.
#[test]
fn other_content_is_flagged() {
    let w = Workdir::new();
    small(&w, &[]);
    let cap = w.path("run/captures/003-drive-ch3-1100Hz.wav");
    let c = read_capture(&cap, 8, 48_000).unwrap();
    let mut chans: Vec<Vec<f64>> = c
        .channels
        .iter()
        .map(|ch| ch.iter().map(|v| f64::from(*v)).collect())
        .collect();
    for (n, v) in chans[5].iter_mut().enumerate() {
        *v += 1e-4 * (2.0 * PI * 7_321.0 * n as f64 / 48_000.0).sin();
    }
    for (n, v) in chans[2].iter_mut().enumerate() {
        *v += 0.1 * ((n as f64 * 0.618_034).fract() - 0.5);
    }
    write_capture(&cap, &chans, 48_000, WavFormat::Float32).unwrap();
    w.ok(&["analyze", "-q", "run", "--out", "res", "--force"]);
    let k = kinds(&summary(&w));
    assert!(k.contains(&("spurious".into(), Some(6))), "{k:?}");
    assert!(k.contains(&("aggressor-impure".into(), Some(3))), "{k:?}");
    assert_eq!(k.len(), 2, "{k:?}");
}

#[test]
fn a_generator_far_off_nominal_is_flagged() {
    let w = Workdir::new();
    let s = small(
        &w,
        &[(
            "generator_offset_ppm = 0.0",
            "generator_offset_ppm = -8000.0",
        )],
    );
    let k = kinds(&s);
    assert_eq!(
        k.iter()
            .filter(|(kind, _)| kind == "frequency-offset")
            .count(),
        8,
        "{k:?}"
    );
}
