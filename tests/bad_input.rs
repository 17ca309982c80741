//! Every bad input gets one line naming the file and the problem, exit code
//! 1, no panic, and nothing written earlier is lost.

mod common;
use common::*;
use std::fs;

/// A small valid run to break in different ways.
fn small_run(w: &Workdir) {
    let model = w.model(
        "m.toml",
        &[
            (
                "preferred_hz = [125.0, 1000.0, 4000.0, 16000.0]",
                "frequencies_hz = [997.0]\npreferred_hz = []",
            ),
            ("record_samples = 65536", "record_samples = 8192"),
            ("idle_samples = 65536", "idle_samples = 8192"),
            ("wav = \"int24\"", "wav = \"float32\""),
        ],
    );
    w.ok(&[
        "simulate",
        "-q",
        "--out",
        "run",
        "--model",
        model.to_str().unwrap(),
    ]);
}

fn edit_manifest(w: &Workdir, f: impl FnOnce(&mut serde_json::Value)) {
    let p = w.path("run/run.json");
    let mut v: serde_json::Value = serde_json::from_str(&fs::read_to_string(&p).unwrap()).unwrap();
    f(&mut v);
    fs::write(&p, serde_json::to_string(&v).unwrap()).unwrap();
}

fn first_capture(w: &Workdir) -> std::path::PathBuf {
    w.path("run/captures/001-drive-ch1-997Hz.wav")
}

#[test]
fn the_small_run_is_valid() {
    let w = Workdir::new();
    small_run(&w);
    w.ok(&["analyze", "-q", "run", "--out", "res"]);
}

#[test]
fn missing_run_folder_or_manifest() {
    let w = Workdir::new();
    let e = w.fails(&["analyze", "nowhere", "--out", "res"]);
    assert!(
        e.contains("nowhere/run.json") && e.contains("No such file"),
        "{e}"
    );
    assert!(!w.path("res").exists(), "nothing may be written");
}

#[test]
fn malformed_and_unknown_manifests() {
    let w = Workdir::new();
    small_run(&w);
    let p = w.path("run/run.json");
    let good = fs::read_to_string(&p).unwrap();
    fs::write(&p, &good[..good.len() / 2]).unwrap();
    let e = w.fails(&["analyze", "run", "--out", "res"]);
    assert!(e.contains("run.json: not valid JSON"), "{e}");
    fs::write(&p, good.replace("septum.run/1", "septum.run/9")).unwrap();
    let e = w.fails(&["analyze", "run", "--out", "res"]);
    assert!(e.contains("unknown format \"septum.run/9\""), "{e}");
    fs::write(&p, &good).unwrap();
    edit_manifest(&w, |v| v["captures"][0]["drive"]["channel"] = 12.into());
    let e = w.fails(&["analyze", "run", "--out", "res"]);
    assert!(
        e.contains("captures[0].drive.channel 12 is not a recorded channel"),
        "{e}"
    );
    fs::write(&p, &good).unwrap();
    edit_manifest(&w, |v| v["channels"][1]["number"] = 5.into());
    let e = w.fails(&["analyze", "run", "--out", "res"]);
    assert!(e.contains("channels[1] has number 5"), "{e}");
    fs::write(&p, &good).unwrap();
    edit_manifest(&w, |v| v["sample_rate_hz"] = "fast".into());
    let e = w.fails(&["analyze", "run", "--out", "res"]);
    assert!(e.contains("run.json: does not follow septum.run/1"), "{e}");
}

#[test]
fn missing_and_truncated_wavs() {
    let w = Workdir::new();
    small_run(&w);
    let cap = first_capture(&w);
    let bytes = fs::read(&cap).unwrap();
    fs::remove_file(&cap).unwrap();
    let e = w.fails(&["analyze", "run", "--out", "res"]);
    assert!(
        e.contains("001-drive-ch1-997Hz.wav") && e.contains("No such file"),
        "{e}"
    );
    fs::write(&cap, &bytes[..bytes.len() * 2 / 3]).unwrap();
    let e = w.fails(&["analyze", "run", "--out", "res"]);
    assert!(e.contains("001-drive-ch1-997Hz.wav: truncated"), "{e}");
    fs::write(&cap, &bytes[..30]).unwrap();
    let e = w.fails(&["analyze", "run", "--out", "res"]);
    assert!(
        e.contains("001-drive-ch1-997Hz.wav: not a readable WAV file"),
        "{e}"
    );
    fs::write(&cap, b"").unwrap();
    let e = w.fails(&["analyze", "run", "--out", "res"]);
    assert!(
        e.contains("001-drive-ch1-997Hz.wav: not a readable WAV file"),
        "{e}"
    );
}

#[test]
fn channel_count_rate_and_samples() {
    let w = Workdir::new();
    small_run(&w);
    let cap = first_capture(&w);
    let write = |channels: Vec<Vec<f64>>, rate: u32, fmt| {
        septum::run::write_capture(&cap, &channels, rate, fmt).unwrap();
    };
    write(
        vec![vec![0.0; 1000]; 2],
        48_000,
        septum::run::WavFormat::Float32,
    );
    let e = w.fails(&["analyze", "run", "--out", "res"]);
    assert!(
        e.contains("001-drive-ch1-997Hz.wav: has 2 channels but run.json lists 8"),
        "{e}"
    );
    write(
        vec![vec![0.0; 1000]; 8],
        44_100,
        septum::run::WavFormat::Float32,
    );
    let e = w.fails(&["analyze", "run", "--out", "res"]);
    assert!(
        e.contains("sample rate is 44100 Hz but run.json says 48000 Hz"),
        "{e}"
    );
    let mut bad = vec![vec![0.0; 1000]; 8];
    bad[2][500] = f64::NAN;
    write(bad, 48_000, septum::run::WavFormat::Float32);
    let e = w.fails(&["analyze", "run", "--out", "res"]);
    assert!(
        e.contains("non-finite sample (NaN) at frame 500 channel 3"),
        "{e}"
    );
    write(vec![vec![]; 8], 48_000, septum::run::WavFormat::Float32);
    let e = w.fails(&["analyze", "run", "--out", "res"]);
    assert!(e.contains("empty capture"), "{e}");
    // Silence where a tone should be.
    write(
        vec![vec![0.0; 20_000]; 8],
        48_000,
        septum::run::WavFormat::Int16,
    );
    let e = w.fails(&["analyze", "run", "--out", "res"]);
    assert!(
        e.contains("001-drive-ch1-997Hz.wav: channel 1 at 997 Hz: silent, no tone"),
        "{e}"
    );
}

#[test]
fn results_are_never_lost_or_written_into_the_run() {
    let w = Workdir::new();
    small_run(&w);
    w.ok(&["analyze", "-q", "run", "--out", "res"]);
    let before = fs::read_to_string(w.path("res/pairs.csv")).unwrap();
    // A non-empty results folder is refused without --force.
    let e = w.fails(&["analyze", "run", "--out", "res"]);
    assert!(e.contains("res: is not empty"), "{e}");
    // A failing analysis with --force leaves the old results whole.
    let cap = first_capture(&w);
    let bytes = fs::read(&cap).unwrap();
    fs::write(&cap, &bytes[..bytes.len() / 2]).unwrap();
    w.fails(&["analyze", "run", "--out", "res", "--force"]);
    assert_eq!(fs::read_to_string(w.path("res/pairs.csv")).unwrap(), before);
    let leftovers: Vec<_> = fs::read_dir(w.dir.path())
        .unwrap()
        .filter_map(|e| e.ok())
        .filter(|e| e.file_name().to_string_lossy().contains("partial"))
        .collect();
    assert!(leftovers.is_empty(), "staging folders left behind");
    // With the capture restored, --force replaces the results.
    fs::write(&cap, &bytes).unwrap();
    fs::write(w.path("res/stale.txt"), "old").unwrap();
    w.ok(&["analyze", "-q", "run", "--out", "res", "--force"]);
    assert!(!w.path("res/stale.txt").exists());
    assert!(w.path("res/pairs.csv").exists());
    // Never into the run folder.
    let e = w.fails(&["analyze", "run", "--out", "run/results"]);
    assert!(e.contains("lies inside the run folder"), "{e}");
    let e = w.fails(&["analyze", "run", "--out", "run", "--force"]);
    assert!(e.contains("lies inside the run folder"), "{e}");
    // Nor over a folder that holds the run.
    let e = w.fails(&["analyze", "run", "--out", ".", "--force"]);
    assert!(e.contains("holds the run folder"), "{e}");
    assert!(w.path("run/run.json").exists());
}

#[test]
fn bad_model_files() {
    let w = Workdir::new();
    let m = w.model("m.toml", &[("bits = 24", "bits = 24\ncolour = \"red\"")]);
    let e = w.fails(&["simulate", "--out", "run", "--model", m.to_str().unwrap()]);
    assert!(e.contains("m.toml: line 20") && e.contains("colour"), "{e}");
    let m = w.model("m2.toml", &[("channels = 8", "channels = 0")]);
    let e = w.fails(&["simulate", "--out", "run", "--model", m.to_str().unwrap()]);
    assert!(e.contains("front_end.channels = 0"), "{e}");
    let m = w.model("m3.toml", &[("bits = 24", "bits = 32")]);
    let e = w.fails(&["simulate", "--out", "run", "--model", m.to_str().unwrap()]);
    assert!(e.contains("front_end.bits = 32"), "{e}");
    let e = w.fails(&["simulate", "--out", "run", "--model", "absent.toml"]);
    assert!(e.contains("absent.toml"), "{e}");
    assert!(!w.path("run").exists());
}

#[test]
fn usage_errors_exit_with_two() {
    let w = Workdir::new();
    let out = w.septum(&["analyze"]);
    assert_eq!(out.status.code(), Some(2));
    let out = w.septum(&["analyze", "run", "--out", "r", "--harmonics", "0"]);
    assert_eq!(out.status.code(), Some(2));
}
