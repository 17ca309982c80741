//! `septum measure` on the simulated front end (cpal custom host): the
//! whole measuring path end to end, wrong patches, lost blocks, a killed
//! measurement resumed, and procedure validation.

mod common;
use common::*;
use std::path::Path;
use std::process::{Command, Stdio};
use std::time::{Duration, Instant};

/// A procedure for the built-in scenario, edited by `(old, new)` replacements.
fn procedure(w: &Workdir, name: &str, edits: &[(&str, &str)]) -> String {
    let mut text = std::fs::read_to_string(concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/procedures/commissioning.toml"
    ))
    .unwrap();
    for (old, new) in edits {
        assert!(
            text.contains(old),
            "procedure edit target {old:?} not found"
        );
        text = text.replacen(old, new, 1);
    }
    std::fs::write(w.path(name), text).unwrap();
    name.to_string()
}

/// Two frequencies, shorter records: every pair of the matrix, quickly.
const SHORT: &[(&str, &str)] = &[
    (
        "preferred_hz = [125.0, 1000.0, 4000.0, 16000.0]",
        "preferred_hz = [1000.0, 16000.0]",
    ),
    (
        "record_samples = 65536     # steady",
        "record_samples = 32768     # steady",
    ),
    (
        "record_samples = 65536     # one",
        "record_samples = 32768     # one",
    ),
];

fn manifest(dir: &Path) -> serde_json::Value {
    serde_json::from_str(&std::fs::read_to_string(dir.join("run.json")).unwrap()).unwrap()
}

fn capture_files(dir: &Path) -> Vec<String> {
    manifest(dir)["captures"]
        .as_array()
        .unwrap()
        .iter()
        .map(|c| c["file"].as_str().unwrap().to_string())
        .collect()
}

#[test]
fn simulated_measure_recovers_the_model() {
    let w = Workdir::new();
    let p = procedure(&w, "p.toml", SHORT);
    w.ok(&[
        "measure",
        "--procedure",
        &p,
        "--out",
        "run",
        "--simulated",
        "--yes",
        "-q",
    ]);
    let m = manifest(&w.path("run"));
    assert_eq!(m["measure"]["complete"], true);
    assert_eq!(m["captures"].as_array().unwrap().len(), 17);
    assert_eq!(m["limits"]["min_separation_db"], 90.0);
    w.ok(&["analyze", "--quiet", "run", "--out", "results"]);
    let a = agreement(&w.path("run"), &w.path("results"));
    assert!(a.strong > 20 && a.detected > a.strong, "{a:?}");
    assert!(
        a.strong_max_err <= 0.05,
        "strong pairs off by {:.4} dB: {a:?}",
        a.strong_max_err
    );
    assert!(a.max_z <= 4.5, "{a:?}");
    assert_eq!(a.missed, 0, "{a:?}");
    assert_eq!(a.bounded, a.bounded_ok, "{a:?}");
    assert!(a.floor_max_err <= 0.5, "{a:?}");
}

#[test]
fn wrong_patch_is_caught_and_named() {
    let w = Workdir::new();
    let p = procedure(
        &w,
        "p.toml",
        &[
            (
                "preferred_hz = [125.0, 1000.0, 4000.0, 16000.0]",
                "preferred_hz = [1000.0]",
            ),
            ("retries = 2", "retries = 1"),
            (
                "record_samples = 65536     # steady",
                "record_samples = 8192     # steady",
            ),
        ],
    );
    let err = w.fails(&[
        "measure",
        "--procedure",
        &p,
        "--out",
        "run",
        "--simulated",
        "--yes",
        "-q",
        "--sim-miswire",
        "3:4",
    ]);
    assert!(err.contains("step 3"), "{err}");
    assert!(err.contains("wrong patch: the tone is on input 4"), "{err}");
    assert!(err.contains("not on input 3"), "{err}");
    assert!(err.contains("failed 2 time(s)"), "{err}");
    // Caught by the quiet check, before the full-level tone.
    assert!(err.contains("quiet check at -21.0 dBFS"), "{err}");
    // What finished before is kept in a valid run.
    assert_eq!(capture_files(&w.path("run")).len(), 2);
    septum::run::Manifest::load(&w.path("run")).unwrap();
    assert!(!w.path("run/captures/003-drive-ch3-993.164Hz.wav").exists());
}

#[test]
fn a_lost_block_voids_the_capture_and_it_is_redone() {
    let w = Workdir::new();
    let p = procedure(
        &w,
        "p.toml",
        &[
            (
                "preferred_hz = [125.0, 1000.0, 4000.0, 16000.0]",
                "preferred_hz = [1000.0]",
            ),
            (
                "aggressors = [1, 2, 3, 4, 5, 6, 7, 8]",
                "aggressors = [1, 2, 3]",
            ),
            (
                "record_samples = 65536     # steady",
                "record_samples = 8192     # steady",
            ),
            (
                "record_samples = 65536     # one",
                "record_samples = 0     # one",
            ),
        ],
    );
    let out = w.ok(&[
        "measure",
        "--procedure",
        &p,
        "--out",
        "run",
        "--simulated",
        "--yes",
        "--sim-xrun-in-capture",
        "4",
    ]);
    assert!(
        out.contains("step 2 attempt 1 failed: capture lost data: 1 xrun(s)"),
        "{out}"
    );
    let m = manifest(&w.path("run"));
    let caps = m["captures"].as_array().unwrap();
    assert_eq!(caps.len(), 3);
    assert_eq!(caps[0]["attempts"], 1);
    assert_eq!(caps[1]["attempts"], 2);
}

/// Kill the process (SIGKILL) in the middle of a capture, then resume.
#[test]
fn killed_measurement_resumes_without_loss_or_duplicates() {
    let w = Workdir::new();
    let p = procedure(
        &w,
        "p.toml",
        &[
            (
                "preferred_hz = [125.0, 1000.0, 4000.0, 16000.0]",
                "preferred_hz = [1000.0, 4000.0]",
            ),
            (
                "record_samples = 65536     # steady",
                "record_samples = 16384     # steady",
            ),
            (
                "record_samples = 65536     # one",
                "record_samples = 16384     # one",
            ),
        ],
    );
    let mut child = Command::new(env!("CARGO_BIN_EXE_septum"))
        .args([
            "measure",
            "--procedure",
            &p,
            "--out",
            "run",
            "--simulated",
            "--yes",
            "-q",
            "--sim-speed",
            "2",
        ])
        .current_dir(w.dir.path())
        .stdin(Stdio::null())
        .stdout(Stdio::null())
        .stderr(Stdio::null())
        .spawn()
        .unwrap();
    let t0 = Instant::now();
    let run = w.path("run");
    loop {
        std::thread::sleep(Duration::from_millis(20));
        let n = std::fs::read_to_string(run.join("run.json"))
            .ok()
            .and_then(|t| serde_json::from_str::<serde_json::Value>(&t).ok())
            .map_or(0, |m| m["captures"].as_array().unwrap().len());
        // Mid-capture: a part file is being written after the third capture.
        let partial = std::fs::read_dir(run.join("captures"))
            .map(|d| {
                d.flatten()
                    .any(|e| e.file_name().to_string_lossy().ends_with(".part"))
            })
            .unwrap_or(false);
        if n >= 3 && partial {
            break;
        }
        assert!(
            t0.elapsed() < Duration::from_secs(60),
            "measurement did not progress"
        );
    }
    child.kill().unwrap();
    child.wait().unwrap();
    let before = capture_files(&run);
    assert!(before.len() >= 3 && before.len() < 17, "{before:?}");
    septum::run::Manifest::load(&run).unwrap();
    // Resuming with another procedure is refused.
    let other = procedure(
        &w,
        "other.toml",
        &[("level_dbfs = -1.0", "level_dbfs = -2.0")],
    );
    let err = w.fails(&[
        "measure",
        "--procedure",
        &other,
        "--out",
        "run",
        "--simulated",
        "--yes",
        "--resume",
    ]);
    assert!(
        err.contains("differs from the one this run started with"),
        "{err}"
    );
    // Without --resume the folder is not reused.
    let err = w.fails(&[
        "measure",
        "--procedure",
        &p,
        "--out",
        "run",
        "--simulated",
        "--yes",
    ]);
    assert!(err.contains("is not empty"), "{err}");
    let out = w.ok(&[
        "measure",
        "--procedure",
        &p,
        "--out",
        "run",
        "--simulated",
        "--yes",
        "--resume",
    ]);
    assert!(
        // 16 drive captures, the common drive and the idle capture.
        out.contains(&format!("resuming: {} of 18", before.len())),
        "{out}"
    );
    let after = capture_files(&run);
    assert_eq!(after.len(), 17);
    let m = manifest(&run);
    assert_eq!(m["measure"]["complete"], true);
    assert_eq!(m["common_drive"].as_array().unwrap().len(), 1);
    assert_eq!(
        m["common_drive"][0]["file"],
        "captures/017-common-997Hz.wav"
    );
    assert_eq!(
        &after[..before.len()],
        &before[..],
        "finished captures kept as they were"
    );
    let mut unique = after.clone();
    unique.dedup();
    assert_eq!(unique.len(), 17);
    let on_disk: Vec<String> = std::fs::read_dir(run.join("captures"))
        .unwrap()
        .flatten()
        .map(|e| e.file_name().to_string_lossy().into_owned())
        .collect();
    assert_eq!(on_disk.len(), 18, "no leftovers: {on_disk:?}");
    assert_eq!(manifest(&run)["measure"]["complete"], true);
    w.ok(&["analyze", "--quiet", "run", "--out", "results"]);
    let a = agreement(&run, &w.path("results"));
    assert!(a.strong_max_err <= 0.05 && a.max_z <= 4.5, "{a:?}");
}

/// Interrupt with Ctrl-C (SIGINT): the capture in flight is dropped, the run stays valid.
#[test]
fn interrupt_keeps_a_valid_run() {
    let w = Workdir::new();
    let p = procedure(
        &w,
        "p.toml",
        &[
            (
                "preferred_hz = [125.0, 1000.0, 4000.0, 16000.0]",
                "preferred_hz = [1000.0]",
            ),
            (
                "record_samples = 65536     # steady",
                "record_samples = 16384     # steady",
            ),
        ],
    );
    let child = Command::new(env!("CARGO_BIN_EXE_septum"))
        .args([
            "measure",
            "--procedure",
            &p,
            "--out",
            "run",
            "--simulated",
            "--yes",
            "-q",
            "--sim-speed",
            "2",
        ])
        .current_dir(w.dir.path())
        .stdin(Stdio::null())
        .stdout(Stdio::null())
        .stderr(Stdio::piped())
        .spawn()
        .unwrap();
    let run = w.path("run");
    let t0 = Instant::now();
    while !run.join("run.json").exists() {
        std::thread::sleep(Duration::from_millis(20));
        assert!(t0.elapsed() < Duration::from_secs(60));
    }
    std::thread::sleep(Duration::from_millis(100));
    Command::new("kill")
        .args(["-INT", &child.id().to_string()])
        .status()
        .unwrap();
    let out = child.wait_with_output().unwrap();
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(1), "{stderr}");
    assert!(stderr.contains("stopped by the operator"), "{stderr}");
    assert!(!stderr.contains("panicked"), "{stderr}");
    let kept = capture_files(&run).len();
    assert!((1..9).contains(&kept));
    septum::run::Manifest::load(&run).unwrap();
    w.ok(&[
        "measure",
        "--procedure",
        &p,
        "--out",
        "run",
        "--simulated",
        "--yes",
        "--resume",
        "-q",
    ]);
    assert_eq!(capture_files(&run).len(), 9);
}

/// Each bad procedure: one line naming the file, the key and the line;
/// nothing created.
#[test]
fn bad_procedures_are_refused_before_anything_happens() {
    let w = Workdir::new();
    let cases: &[(&[(&str, &str)], &str)] = &[
        (
            &[("level_dbfs = -1.0", "levl_dbfs = -1.0")],
            "line 37: unknown field `levl_dbfs`",
        ),
        (
            &[("level_dbfs = -1.0", "level_dbfs = -0.2")],
            "line 37: key `stimulus.level_dbfs`: -0.2 must lie between -80 and -0.5 dBFS",
        ),
        (
            &[("level_dbfs = -1.0", "level_dbfs = \"loud\"")],
            "line 37: key `level_dbfs`: invalid type",
        ),
        (
            &[(
                "aggressors = [1, 2, 3, 4, 5, 6, 7, 8]",
                "aggressors = [1, 9]",
            )],
            "line 31: key `test.aggressors`: 9 is not an input from 1 to 8",
        ),
        (
            &[("record_samples = 65536     # steady", "# record_samples")],
            "line 34: key `stimulus.record_samples`: missing",
        ),
        (
            &[("number = 7", "number = 12")],
            "line 27: key `input.number`: 12 is not an input from 1 to 8",
        ),
        (
            &[("preferred_hz = [125.0,", "preferred_hz = [30000.0,")],
            "line 41: key `stimulus.preferred_hz`: 30000 Hz must lie between",
        ),
        (
            &[("source = \"output\"", "source = \"speaker\"")],
            "line 35: key `source`: unknown variant `speaker`",
        ),
        (
            &[("level_dbfs = -6.0", "level_dbfs = -0.1")],
            "line 60: key `common_drive.level_dbfs`: -0.1 must lie between -80 and -0.5 dBFS",
        ),
        (
            &[("reference_input = 1", "reference_input = 9")],
            "line 61: key `common_drive.reference_input`: 9 is not an input from 1 to 8",
        ),
        (
            &[("frequencies_hz = [997.0]", "frequencies_hz = [30000.0]")],
            "line 59: key `common_drive.frequencies_hz`: 30000 Hz must lie between",
        ),
        (
            &[("reference_input = 1", "reference_inptu = 1")],
            "line 61: unknown field `reference_inptu`",
        ),
    ];
    for (i, (edits, want)) in cases.iter().enumerate() {
        let name = format!("bad{i}.toml");
        let p = procedure(&w, &name, edits);
        let err = w.fails(&[
            "measure",
            "--procedure",
            &p,
            "--out",
            "run",
            "--simulated",
            "--yes",
        ]);
        assert!(err.contains(&name), "{err}");
        assert!(err.contains(want), "case {i}: want {want:?} in {err}");
        assert!(!w.path("run").exists(), "nothing may be created: {err}");
    }
    // Guided mode without a terminal is an error, not a hang.
    let p = procedure(&w, "ok.toml", &[]);
    let out = Command::new(env!("CARGO_BIN_EXE_septum"))
        .args([
            "measure",
            "--procedure",
            &p,
            "--out",
            "run",
            "--host",
            "alsa",
        ])
        .current_dir(w.dir.path())
        .stdin(Stdio::null())
        .output()
        .unwrap();
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(1), "{stderr}");
    assert!(stderr.contains("not a terminal"), "{stderr}");
    assert!(!w.path("run").exists());
    // JACK ports must be named, one per input, before any client is opened.
    let err = w.fails(&[
        "measure",
        "--procedure",
        &p,
        "--out",
        "run",
        "--host",
        "jack",
        "--yes",
        "--jack-input-ports",
        "a:1,a:2",
    ]);
    assert!(
        err.contains("--jack-input-ports names 2 port(s) for the procedure's 8 inputs"),
        "{err}"
    );
    assert!(!w.path("run").exists());
}

/// The common-drive step: one signal split to every input. It is listed
/// under run.json's `common_drive` (not `captures`), and the analysis
/// recovers the simulated inputs' gain differences. The streaming model
/// samples every input at the same instant, so the skew expected is zero.
#[test]
fn simulated_common_drive_recovers_the_gains() {
    let w = Workdir::new();
    let p = procedure(
        &w,
        "p.toml",
        &[
            (
                "preferred_hz = [125.0, 1000.0, 4000.0, 16000.0]",
                "preferred_hz = [1000.0]",
            ),
            ("aggressors = [1, 2, 3, 4, 5, 6, 7, 8]", "aggressors = [3]"),
            (
                "record_samples = 65536     # steady",
                "record_samples = 16384     # steady",
            ),
            (
                "frequencies_hz = [997.0]",
                "frequencies_hz = [997.0, 3001.0]",
            ),
            ("reference_input = 1", "reference_input = 2"),
        ],
    );
    // The device fails during the idle capture, the 6th (a quiet check
    // comes first after each patch); the common drives are kept.
    let args = [
        "measure",
        "--procedure",
        &p,
        "--out",
        "run",
        "--simulated",
        "--yes",
    ];
    let err = w.fails(&[&args[..], &["--sim-fail-in-capture", "6"]].concat());
    assert!(err.contains("3 finished capture(s) kept"), "{err}");
    let m = manifest(&w.path("run"));
    assert_eq!(m["measure"]["complete"], false);
    assert_eq!(m["common_drive"].as_array().unwrap().len(), 2);
    let out = w.ok(&[&args[..], &["--resume"]].concat());
    assert!(out.contains("resuming: 3 of 4"), "{out}");
    assert!(
        out.contains("captured captures/004-idle.wav (4/4)"),
        "{out}"
    );
    assert!(!out.contains("common drive at"), "not redone: {out}");
    let m = manifest(&w.path("run"));
    assert_eq!(m["measure"]["complete"], true);
    assert_eq!(m["measure"]["steps_planned"], 4);
    assert_eq!(
        capture_files(&w.path("run")),
        [
            "captures/001-drive-ch3-993.164Hz.wav",
            "captures/004-idle.wav"
        ]
    );
    let common = m["common_drive"].as_array().unwrap();
    assert_eq!(common.len(), 2);
    assert_eq!(common[0]["file"], "captures/002-common-997Hz.wav");
    assert_eq!(common[1]["file"], "captures/003-common-3001Hz.wav");
    assert_eq!(common[0]["level_dbfs"], -6.0);
    assert_eq!(common[0]["reference_channel"], 2);
    assert!(w.path("run/captures/003-common-3001Hz.wav").is_file());
    w.ok(&["analyze", "--quiet", "run", "--out", "results"]);
    let expected = read_csv(&w.path("run/model/expected-common.csv"));
    let got = read_csv(&w.path("results/common-drive.csv"));
    assert_eq!(expected.len(), 16);
    assert_eq!(got.len(), 16);
    let mut spread = 0.0f64;
    for e in &expected {
        let g = got
            .iter()
            .find(|g| {
                num(g, "frequency_hz") == num(e, "frequency_hz") && g["channel"] == e["channel"]
            })
            .unwrap_or_else(|| panic!("no result for {e:?}"));
        assert_eq!(g["reference"], "2");
        let tol = 2.5 * num(g, "gain_u95_db") + 0.01;
        let err = (num(g, "gain_db") - num(e, "gain_db")).abs();
        assert!(err <= tol, "{e:?} vs {g:?}: off by {err} dB");
        assert!(
            num(g, "skew_us").abs() <= 2.5 * num(g, "skew_u95_us") + 0.01,
            "{g:?}"
        );
        spread = spread.max(num(e, "gain_db").abs());
    }
    // The model's inputs really differ, so the comparison means something.
    assert!(spread > 0.02, "{spread}");
}

/// A switch command is told `SEPTUM_AGGRESSOR=all` for a common drive.
#[test]
fn switch_command_sees_all_for_the_common_drive() {
    let w = Workdir::new();
    let p = procedure(
        &w,
        "p.toml",
        &[
            (
                "preferred_hz = [125.0, 1000.0, 4000.0, 16000.0]",
                "preferred_hz = [1000.0]",
            ),
            ("aggressors = [1, 2, 3, 4, 5, 6, 7, 8]", "aggressors = [2]"),
            (
                "record_samples = 65536     # steady",
                "record_samples = 8192     # steady",
            ),
            (
                "record_samples = 65536     # one",
                "record_samples = 8192     # one",
            ),
        ],
    );
    // --sim-ask: the simulated bench follows, but septum does not know it
    // and runs the switch command as on a relay-switched rig.
    w.ok(&[
        "measure",
        "--procedure",
        &p,
        "--out",
        "run",
        "--simulated",
        "--sim-ask",
        "-q",
        "--switch-command",
        "echo \"$SEPTUM_AGGRESSOR $SEPTUM_LEVEL_DBFS $SEPTUM_FREQUENCY_HZ\" >> switch.log",
    ]);
    let log = std::fs::read_to_string(w.path("switch.log")).unwrap();
    assert_eq!(log, "2 -1 1013.671875\nall -6 997\n0 -1 0\n");
    assert_eq!(manifest(&w.path("run"))["common_drive"][0]["attempts"], 1);
}

#[test]
fn shipped_procedures_are_valid() {
    for name in ["commissioning", "periodic", "quick"] {
        let path = format!("{}/procedures/{name}.toml", env!("CARGO_MANIFEST_DIR"));
        let plan = septum::procedure::Plan::load(Path::new(&path)).unwrap();
        assert!(!plan.steps.is_empty(), "{name}");
    }
}

/// An external generator 300 ppm off its dial: septum plays nothing, checks
/// the tone is on the right input, and the analysis recovers the model.
#[test]
fn external_generator_mode() {
    let w = Workdir::new();
    let model = w.model(
        "m.toml",
        &[("generator_offset_ppm = 0.0", "generator_offset_ppm = 300.0")],
    );
    let mut edits = SHORT.to_vec();
    edits.push(("source = \"output\"", "source = \"generator\""));
    let p = procedure(&w, "p.toml", &edits);
    let sim = format!("--simulated={}", model.display());
    let out = w.ok(&["measure", "--procedure", &p, "--out", "run", &sim, "--yes"]);
    assert!(out.contains("Set the generator to 1006.348 Hz"), "{out}");
    assert!(!out.contains("quiet check"), "nothing is played: {out}");
    let m = manifest(&w.path("run"));
    assert!(
        out.contains("Split the generator, set to 997.000 Hz"),
        "{out}"
    );
    assert_eq!(m["common_drive"].as_array().unwrap().len(), 1);
    let tone = m["captures"][0]["tone_hz"].as_f64().unwrap();
    assert!((tone / 1006.34765625 - 1.0 - 300e-6).abs() < 1e-6, "{tone}");
    w.ok(&["analyze", "--quiet", "run", "--out", "results"]);
    let a = agreement(&w.path("run"), &w.path("results"));
    assert!(
        a.strong > 20 && a.strong_max_err <= 0.05 && a.max_z <= 4.5,
        "{a:?}"
    );
    assert!(a.floor_max_err <= 0.5, "{a:?}");
}

/// The device disappears in the middle of a capture: one line of error,
/// every finished capture kept in a valid run, and --resume completes it.
#[test]
fn device_failure_keeps_the_run_and_resumes() {
    let w = Workdir::new();
    let p = procedure(
        &w,
        "p.toml",
        &[
            (
                "preferred_hz = [125.0, 1000.0, 4000.0, 16000.0]",
                "preferred_hz = [1000.0]",
            ),
            (
                "aggressors = [1, 2, 3, 4, 5, 6, 7, 8]",
                "aggressors = [1, 2, 3]",
            ),
            (
                "record_samples = 65536     # steady",
                "record_samples = 8192     # steady",
            ),
            (
                "record_samples = 65536     # one",
                "record_samples = 8192     # one",
            ),
        ],
    );
    // Captures: quiet check 1, step 1, quiet check 2, step 2, quiet check 3 …
    let err = w.fails(&[
        "measure",
        "--procedure",
        &p,
        "--out",
        "run",
        "--simulated",
        "--yes",
        "-q",
        "--sim-fail-in-capture",
        "4",
    ]);
    assert!(
        err.contains("the audio device became unavailable")
            && err.contains("1 finished capture(s) kept"),
        "{err}"
    );
    assert_eq!(capture_files(&w.path("run")).len(), 1);
    septum::run::Manifest::load(&w.path("run")).unwrap();
    w.ok(&[
        "measure",
        "--procedure",
        &p,
        "--out",
        "run",
        "--simulated",
        "--yes",
        "-q",
        "--resume",
    ]);
    assert_eq!(capture_files(&w.path("run")).len(), 4);
    assert_eq!(manifest(&w.path("run"))["measure"]["complete"], true);
}

/// Run `septum args` on a pseudo-terminal (util-linux `script`) with `keys`
/// typed in; `None` when `script` is not installed.
fn on_terminal(w: &Workdir, args: &str, keys: &str) -> Option<(i32, String)> {
    if Command::new("script").arg("--version").output().is_err() {
        eprintln!(
            "SKIPPED: util-linux `script` is not installed; the guided-mode test needs a terminal"
        );
        return None;
    }
    let cmd = format!("{} {args}", env!("CARGO_BIN_EXE_septum"));
    let mut child = Command::new("script")
        .args(["-qec", &cmd, "/dev/null"])
        .current_dir(w.dir.path())
        .stdin(Stdio::piped())
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .unwrap();
    use std::io::Write;
    child
        .stdin
        .take()
        .unwrap()
        .write_all(keys.as_bytes())
        .unwrap();
    let out = child.wait_with_output().unwrap();
    let text = String::from_utf8_lossy(&out.stdout).into_owned();
    assert!(!text.contains("panicked"), "{text}");
    Some((out.status.code().unwrap_or(-1), text))
}

/// Guided mode: one wait per patch, Enter goes on, q stops with the run kept.
#[test]
fn guided_mode_waits_for_the_operator() {
    let w = Workdir::new();
    let p = procedure(
        &w,
        "p.toml",
        &[
            (
                "preferred_hz = [125.0, 1000.0, 4000.0, 16000.0]",
                "preferred_hz = [1000.0, 4000.0]",
            ),
            (
                "aggressors = [1, 2, 3, 4, 5, 6, 7, 8]",
                "aggressors = [1, 2]",
            ),
            (
                "record_samples = 65536     # steady",
                "record_samples = 8192     # steady",
            ),
            (
                "record_samples = 65536     # one",
                "record_samples = 8192     # one",
            ),
        ],
    );
    let args = format!("measure --procedure {p} --out run --simulated --sim-ask -q");
    let Some((code, text)) = on_terminal(&w, &args, "\n\n\n\n") else {
        return;
    };
    assert_eq!(code, 0, "{text}");
    // Two aggressors, the common drive and the idle capture: four patches,
    // four waits.
    assert_eq!(text.matches("Press Enter when done").count(), 4, "{text}");
    assert!(
        text.find("Before the first tone") < text.find("Press Enter"),
        "{text}"
    );
    assert_eq!(capture_files(&w.path("run")).len(), 5);
    let args = format!("measure --procedure {p} --out run2 --simulated --sim-ask -q");
    let (code, text) = on_terminal(&w, &args, "\nq\n").unwrap();
    assert_eq!(code, 1, "{text}");
    assert!(
        text.contains("stopped by the operator; 2 of 6 capture(s) finished and kept"),
        "{text}"
    );
    assert_eq!(capture_files(&w.path("run2")).len(), 2);
}
