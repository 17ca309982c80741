//! Helpers shared by the integration tests: run the real binary in a fresh
//! temporary folder and read what it writes.
#![allow(dead_code)]

use std::collections::HashMap;
use std::path::{Path, PathBuf};
use std::process::{Command, Output};

/// A scratch folder that lives as long as the test.
pub struct Workdir {
    pub dir: tempfile::TempDir,
}

impl Workdir {
    pub fn new() -> Self {
        Self {
            dir: tempfile::tempdir().expect("temp dir"),
        }
    }

    pub fn path(&self, rel: &str) -> PathBuf {
        self.dir.path().join(rel)
    }

    /// Run `septum` with `args` in this folder.
    pub fn septum(&self, args: &[&str]) -> Output {
        let out = Command::new(env!("CARGO_BIN_EXE_septum"))
            .args(args)
            .current_dir(self.dir.path())
            .output()
            .expect("septum runs");
        let stderr = String::from_utf8_lossy(&out.stderr);
        assert!(!stderr.contains("panicked"), "septum panicked: {stderr}");
        out
    }

    /// Run `septum` and require success.
    pub fn ok(&self, args: &[&str]) -> String {
        let out = self.septum(args);
        assert!(
            out.status.success(),
            "septum {args:?} failed: {}",
            String::from_utf8_lossy(&out.stderr)
        );
        String::from_utf8_lossy(&out.stdout).into_owned()
    }

    /// Run `septum`, require failure with exit code 1, return the one-line error.
    pub fn fails(&self, args: &[&str]) -> String {
        let out = self.septum(args);
        let stderr = String::from_utf8_lossy(&out.stderr).into_owned();
        assert_eq!(
            out.status.code(),
            Some(1),
            "septum {args:?} should fail: {stderr}"
        );
        let lines: Vec<&str> = stderr.lines().filter(|l| !l.trim().is_empty()).collect();
        assert_eq!(lines.len(), 1, "one line of error expected, got: {stderr}");
        assert!(lines[0].starts_with("septum: error: "), "{stderr}");
        lines[0].to_string()
    }

    /// Write a model file built from the built-in one with `edits`
    /// (`(old, new)` text replacements, each of which must apply).
    pub fn model(&self, name: &str, edits: &[(&str, &str)]) -> PathBuf {
        let mut text = septum::model::DEFAULT_MODEL_TOML.to_string();
        for (old, new) in edits {
            assert!(text.contains(old), "model edit target {old:?} not found");
            text = text.replacen(old, new, 1);
        }
        let p = self.path(name);
        std::fs::write(&p, text).unwrap();
        p
    }
}

/// Rows of a CSV file as maps from column name to text.
pub fn read_csv(path: &Path) -> Vec<HashMap<String, String>> {
    let mut r = csv::Reader::from_path(path).unwrap_or_else(|e| panic!("{}: {e}", path.display()));
    let headers = r.headers().unwrap().clone();
    r.records()
        .map(|rec| {
            let rec = rec.unwrap();
            headers
                .iter()
                .zip(rec.iter())
                .map(|(h, v)| (h.to_string(), v.to_string()))
                .collect()
        })
        .collect()
}

/// The header of a CSV file.
pub fn csv_header(path: &Path) -> Vec<String> {
    let mut r = csv::Reader::from_path(path).unwrap();
    r.headers().unwrap().iter().map(String::from).collect()
}

pub fn num(row: &HashMap<String, String>, key: &str) -> f64 {
    row.get(key)
        .unwrap_or_else(|| panic!("no column {key}"))
        .parse()
        .unwrap_or_else(|e| panic!("{key}={:?}: {e}", row[key]))
}

/// Key of a pair row.
pub fn pair_key(row: &HashMap<String, String>) -> (String, String, String) {
    (
        row["frequency_hz"].clone(),
        row["aggressor"].clone(),
        row["victim"].clone(),
    )
}

/// How a measured results folder compares with a simulated run's model.
#[derive(Debug, Default)]
pub struct Agreement {
    /// Pairs at least 40 dB above the detection limit: largest |error|, dB.
    pub strong_max_err: f64,
    pub strong: usize,
    /// Detected pairs: largest |error| in standard uncertainties.
    pub max_z: f64,
    pub detected: usize,
    /// Pairs whose truth lies 10 dB or more below the limit.
    pub weak: usize,
    /// Of those: flagged floor-limited.
    pub weak_ok: usize,
    /// Floor-limited pairs whose truth lies 2 dB or more below the limit.
    pub bounded: usize,
    /// Of those: the bound is not above the truth.
    pub bounded_ok: usize,
    /// Pairs 10 dB or more above the limit reported as floor-limited.
    pub missed: usize,
    /// Largest |floor error|, dB.
    pub floor_max_err: f64,
}

/// Compare `results/pairs.csv` and `channels.csv` with `run/model/expected-*.csv`.
pub fn agreement(run: &Path, results: &Path) -> Agreement {
    let measured: HashMap<_, _> = read_csv(&results.join("pairs.csv"))
        .into_iter()
        .map(|r| (pair_key(&r), r))
        .collect();
    let expected = read_csv(&run.join("model/expected-pairs.csv"));
    assert_eq!(measured.len(), expected.len(), "pair count");
    let mut a = Agreement::default();
    for e in &expected {
        let m = &measured[&pair_key(e)];
        let margin = num(e, "victim_dbfs") - num(e, "detection_limit_dbfs");
        let truth = num(e, "separation_db");
        let got = num(m, "separation_db");
        if m["floor_limited"] == "false" {
            let u = num(m, "separation_u95_db") / 2.0;
            a.detected += 1;
            a.max_z = a.max_z.max((got - truth).abs() / u);
            if margin >= 40.0 {
                a.strong += 1;
                a.strong_max_err = a.strong_max_err.max((got - truth).abs());
            }
        }
        let flagged = m["floor_limited"] == "true";
        if margin <= -10.0 {
            a.weak += 1;
            a.weak_ok += usize::from(flagged);
        }
        if flagged && margin <= -2.0 {
            a.bounded += 1;
            a.bounded_ok += usize::from(got <= truth);
        }
        if flagged && margin >= 10.0 {
            a.missed += 1;
        }
    }
    let floors = read_csv(&results.join("channels.csv"));
    let exp_floors = read_csv(&run.join("model/expected-channels.csv"));
    for (m, e) in floors.iter().zip(&exp_floors) {
        assert_eq!(m["channel"], e["channel"]);
        a.floor_max_err = a
            .floor_max_err
            .max((num(m, "noise_floor_dbfs") - num(e, "noise_floor_dbfs")).abs());
    }
    a
}

/// One pair of a hand-built results folder: (frequency, aggressor, victim,
/// separation, floor-limited, u95).
pub type PairSpec = (f64, u32, u32, f64, bool, Option<f64>);

/// Write a hand-built results folder into `dir`: pairs.csv, channels.csv
/// (`floors` in dBFS, one per channel, all with `termination`) and a
/// summary.json for the invented Mossgate test bench.
pub fn results_folder(dir: &Path, pairs: &[PairSpec], floors: &[f64], termination: &str) {
    std::fs::create_dir_all(dir).unwrap();
    let mut p = String::from(
        "frequency_hz,aggressor,victim,separation_db,victim_dbfs,floor_limited,separation_u95_db\n",
    );
    for (f, a, v, s, fl, u) in pairs {
        p += &format!(
            "{f},{a},{v},{s},{},{fl},{}\n",
            -1.0 - s,
            u.map_or(String::new(), |u| u.to_string())
        );
    }
    std::fs::write(dir.join("pairs.csv"), p).unwrap();
    let mut c = String::from("channel,noise_floor_dbfs,name,termination\n");
    for (i, fl) in floors.iter().enumerate() {
        c += &format!("{},{fl},in {},{termination}\n", i + 1, i + 1);
    }
    std::fs::write(dir.join("channels.csv"), c).unwrap();
    let summary = serde_json::json!({
        "format": "septum.results/1",
        "run": {
            "sample_rate_hz": 48000,
            "front_end": {"label": "Mossgate Vibration Lab, test bench", "serial": "MVL-T-1"},
        },
        "captures": [{"drive": {"channel": 1, "frequency_hz": 1000.0, "level_dbfs": -1.0}}],
        "warnings": [],
    });
    std::fs::write(dir.join("summary.json"), summary.to_string()).unwrap();
}
