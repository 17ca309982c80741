//! The results folder's files: pairs.csv, channels.csv, leakage-<f>Hz.csv and
//! summary.json (format of RUN-FORMAT.md, results part).

use super::RunResults;
use crate::run::results::{fmt_opt, leakage_file_name};
use crate::run::RunError;
use serde_json::{json, Value};
use std::path::Path;

/// Identifies the results layout in summary.json.
pub const RESULTS_FORMAT: &str = "septum.results/1";

fn csv_writer(path: &Path) -> Result<csv::Writer<std::fs::File>, RunError> {
    csv::Writer::from_path(path).map_err(|e| RunError::Results {
        path: path.to_path_buf(),
        message: e.to_string(),
    })
}

fn write_rows(path: &Path, rows: impl IntoIterator<Item = Vec<String>>) -> Result<(), RunError> {
    let mut w = csv_writer(path)?;
    let err = |e: csv::Error| RunError::Results {
        path: path.to_path_buf(),
        message: e.to_string(),
    };
    for row in rows {
        w.write_record(&row).map_err(err)?;
    }
    w.flush().map_err(|e| RunError::io(path, e))
}

/// Write every results file into `dir`.
pub fn write_results(results: &RunResults, dir: &Path) -> Result<(), RunError> {
    write_pairs(results, &dir.join("pairs.csv"))?;
    write_channels(results, &dir.join("channels.csv"))?;
    for f in results.manifest.frequencies() {
        write_leakage(results, f, &dir.join(leakage_file_name(f)))?;
    }
    let path = dir.join("summary.json");
    let text = serde_json::to_string_pretty(&summary(results)).expect("summary serialises");
    std::fs::write(&path, text + "\n").map_err(|e| RunError::io(&path, e))
}

fn write_pairs(r: &RunResults, path: &Path) -> Result<(), RunError> {
    let header = [
        "frequency_hz",
        "aggressor",
        "victim",
        "separation_db",
        "victim_dbfs",
        "floor_limited",
        "separation_u95_db",
        "aggressor_dbfs",
        "detection_limit_dbfs",
        "tone_hz",
        "capture",
    ];
    let rows = r.pairs.iter().map(|p| {
        vec![
            p.frequency_hz.to_string(),
            p.aggressor.to_string(),
            p.victim.to_string(),
            format!("{:.4}", p.separation_db),
            format!("{:.4}", p.victim_dbfs),
            p.floor_limited.to_string(),
            fmt_opt(p.separation_u95_db, 4),
            format!("{:.4}", p.aggressor_dbfs),
            format!("{:.4}", p.detection_limit_dbfs),
            format!("{:.6}", p.tone_hz),
            p.capture.clone(),
        ]
    });
    write_rows(
        path,
        std::iter::once(header.map(String::from).to_vec()).chain(rows),
    )
}

fn write_channels(r: &RunResults, path: &Path) -> Result<(), RunError> {
    let header = [
        "channel",
        "noise_floor_dbfs",
        "noise_density_dbfs_per_rthz",
        "floor_band_hz",
        "floor_source",
        "dc_offset_fs",
        "clipped_samples",
        "name",
        "termination",
    ];
    let rows = r.floors.iter().map(|f| {
        let entry = &r.manifest.channels[f.channel as usize - 1];
        vec![
            f.channel.to_string(),
            format!("{:.4}", f.noise_floor_dbfs),
            format!("{:.4}", f.noise_density_dbfs_per_rthz),
            f.band_hz.to_string(),
            f.source.to_string(),
            format!("{:.3e}", f.dc_offset),
            f.clipped.to_string(),
            entry.name.clone().unwrap_or_default(),
            entry.termination.clone().unwrap_or_default(),
        ]
    });
    write_rows(
        path,
        std::iter::once(header.map(String::from).to_vec()).chain(rows),
    )
}

fn write_leakage(r: &RunResults, frequency_hz: f64, path: &Path) -> Result<(), RunError> {
    let n = r.manifest.channels.len() as u32;
    let header = std::iter::once("aggressor".to_string()).chain((1..=n).map(|v| v.to_string()));
    let aggressors: Vec<u32> = {
        let mut a: Vec<u32> = r
            .pairs
            .iter()
            .filter(|p| p.frequency_hz == frequency_hz)
            .map(|p| p.aggressor)
            .collect();
        a.dedup();
        a
    };
    let rows = aggressors.into_iter().map(|a| {
        std::iter::once(a.to_string())
            .chain((1..=n).map(|v| {
                r.pair(frequency_hz, a, v)
                    .map_or_else(String::new, |p| format!("{:.4}", p.separation_db))
            }))
            .collect()
    });
    write_rows(path, std::iter::once(header.collect()).chain(rows))
}

/// The summary.json document.
pub fn summary(r: &RunResults) -> Value {
    let m = &r.manifest;
    let manifest = serde_json::to_value(m).expect("manifest serialises");
    let mut run = serde_json::Map::new();
    if let Value::Object(o) = manifest {
        for (k, v) in o {
            if k != "captures" {
                run.insert(k, v);
            }
        }
    }
    json!({
        "format": RESULTS_FORMAT,
        "generator": format!("septum {}", env!("CARGO_PKG_VERSION")),
        "run": run,
        "settings": r.config,
        "units": {
            "levels": "dBFS, 0 dBFS = rms of a sine whose peak reaches full scale",
            "separation": "dB, aggressor level minus victim level; a lower bound when floor_limited",
            "separation_u95_db": "expanded uncertainty, k = 2",
            "frequencies": "Hz",
        },
        "frequencies_hz": m.frequencies(),
        "worst_pairs": r.per_frequency,
        "channels": r.floors,
        "pairs": r.pairs,
        "captures": r.captures.iter().map(|c| json!({
            "file": c.file,
            "drive": c.drive,
            "tone_hz": c.tone_hz,
            "frames": c.frames,
            "analysed_from_frame": c.span_start,
            "analysed_frames": c.span_frames,
        })).collect::<Vec<_>>(),
        "warnings": r.warnings,
    })
}
