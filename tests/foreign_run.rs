//! A run folder written by another program that follows the run format:
//! written here with hound and serde_json directly (none of septum's
//! writers), with its own layout, timing, ramp shape and extra keys.

mod common;
use common::*;
use rand::{Rng, SeedableRng};
use std::f64::consts::PI;

const FS: u32 = 44_100;
const CH: usize = 4;

/// Coupling in dB from aggressor (row) into victim (column), flat with frequency.
fn coupling_db(a: usize, v: usize) -> f64 {
    -60.0 - 7.0 * (a as f64) - 3.0 * (v as f64) - if a.abs_diff(v) > 1 { 15.0 } else { 0.0 }
}

/// 16-bit capture: 30 ms silence, 10 ms linear ramps, 0.8 s tone, at
/// `freq` Hz (not coherent), level −3 dBFS, TPDF-dithered quantisation.
fn write_take(path: &std::path::Path, aggressor: usize, freq: f64, seed: u64) {
    let spec = hound::WavSpec {
        channels: CH as u16,
        sample_rate: FS,
        bits_per_sample: 16,
        sample_format: hound::SampleFormat::Int,
    };
    let mut rng = rand::rngs::StdRng::seed_from_u64(seed);
    let mut w = hound::WavWriter::create(path, spec).unwrap();
    let fs = f64::from(FS);
    let (lat, ramp, steady) = (0.03 * fs, 0.01 * fs, 0.8 * fs);
    let total = (lat + 2.0 * ramp + steady + 0.02 * fs) as usize;
    let amp = 10f64.powf(-3.0 / 20.0);
    for n in 0..total {
        let t = n as f64;
        let env = ((t - lat) / ramp).clamp(0.0, 1.0)
            * ((lat + 2.0 * ramp + steady - t) / ramp).clamp(0.0, 1.0);
        let s = amp * env * (2.0 * PI * freq * t / fs + 0.7).sin();
        for v in 0..CH {
            let gain = if v == aggressor {
                1.0
            } else {
                10f64.powf(coupling_db(aggressor, v) / 20.0)
            };
            let d: f64 = rng.random::<f64>() - rng.random::<f64>();
            let code = (s * gain * 32768.0 + d).round().clamp(-32768.0, 32767.0);
            w.write_sample(code as i16).unwrap();
        }
    }
    w.finalize().unwrap();
}

#[test]
fn analyses_a_run_written_elsewhere() {
    let w = Workdir::new();
    let run = w.path("bench-take");
    std::fs::create_dir_all(run.join("raw/day1")).unwrap();
    let freqs = [440.0, 5_000.0];
    let mut captures = Vec::new();
    for (i, f) in freqs.iter().enumerate() {
        for a in 0..CH {
            let file = format!("raw/day1/take{}_{a}.wav", i * CH + a);
            write_take(&run.join(&file), a, *f, (i * CH + a) as u64);
            captures.push(serde_json::json!({
                "file": file,
                "drive": { "channel": a + 1, "frequency_hz": f, "level_dbfs": -3.0 },
                "take_note": "written by a lab script"
            }));
        }
    }
    let manifest = serde_json::json!({
        "format": "septum.run/1",
        "operator": "bench script",
        "temperature_c": 22.5,
        "sample_rate_hz": FS,
        "channels": (1..=CH).map(|n| serde_json::json!({ "number": n })).collect::<Vec<_>>(),
        "captures": captures,
    });
    std::fs::write(
        run.join("run.json"),
        serde_json::to_string_pretty(&manifest).unwrap(),
    )
    .unwrap();

    w.ok(&["analyze", "-q", "bench-take", "--out", "out"]);
    let pairs = read_csv(&w.path("out/pairs.csv"));
    assert_eq!(pairs.len(), freqs.len() * CH * (CH - 1));
    for p in &pairs {
        let (a, v) = (
            num(p, "aggressor") as usize - 1,
            num(p, "victim") as usize - 1,
        );
        assert_eq!(p["floor_limited"], "false");
        let err = num(p, "separation_db") + coupling_db(a, v);
        let u95 = num(p, "separation_u95_db");
        // Well above the limit (u95 under 0.025 dB): within 0.05 dB; every
        // pair within 2.5 expanded uncertainties (5 standard ones).
        let allowed = if u95 < 0.025 { 0.05 } else { 2.5 * u95 };
        assert!(
            err.abs() < allowed,
            "{a}->{v} at {}: off by {err:.4} dB, u95 {u95}",
            p["frequency_hz"]
        );
        assert!((num(p, "aggressor_dbfs") + 3.0).abs() < 0.01);
    }
    // No idle capture: floors from the victim captures. TPDF-dithered 16-bit
    // quantisation leaves Q/2 rms (Q²/12 rounding + Q²/6 dither; computed):
    // 20·log10((2^-15/2)·√2) = −95.31 dBFS.
    let expected = 20.0 * ((2f64.powi(-15) / 2.0) * 2f64.sqrt()).log10();
    for c in read_csv(&w.path("out/channels.csv")) {
        assert_eq!(c["floor_source"], "victim");
        assert!(
            (num(&c, "noise_floor_dbfs") - expected).abs() < 0.1,
            "{c:?}"
        );
    }
    let summary: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(w.path("out/summary.json")).unwrap())
            .unwrap();
    assert_eq!(summary["run"]["operator"], "bench script");
    assert_eq!(summary["run"]["temperature_c"], 22.5);
    assert!(w.path("out/leakage-440Hz.csv").exists() && w.path("out/leakage-5000Hz.csv").exists());
    // The run folder is untouched: only what the script wrote.
    let names: Vec<String> = std::fs::read_dir(&run)
        .unwrap()
        .map(|e| e.unwrap().file_name().to_string_lossy().into())
        .collect();
    assert_eq!(names.len(), 2, "{names:?}");
}
