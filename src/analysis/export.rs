//! The results folder's files: pairs.csv, channels.csv, `leakage-<f>Hz.csv` and
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

/// Write every results file into `dir`. The files are independent, so they
/// are written side by side (with hundreds of channels, formatting the
/// pairs for pairs.csv and summary.json takes as long as the analysis).
pub fn write_results(results: &RunResults, dir: &Path) -> Result<(), RunError> {
    use rayon::prelude::*;
    type Job<'a> = Box<dyn FnOnce() -> Result<(), RunError> + Send + 'a>;
    let r = results;
    let mut jobs: Vec<Job> = vec![
        Box::new(move || {
            let path = dir.join("summary.json");
            let text = serde_json::to_string_pretty(&summary(r)).expect("summary serialises");
            std::fs::write(&path, text + "\n").map_err(|e| RunError::io(&path, e))
        }),
        Box::new(move || write_pairs(r, &dir.join("pairs.csv"))),
        Box::new(move || write_channels(r, &dir.join("channels.csv"))),
    ];
    for f in r.manifest.frequencies() {
        jobs.push(Box::new(move || {
            write_leakage(r, f, &dir.join(leakage_file_name(f)))
        }));
    }
    for s in &r.per_frequency {
        let f = s.frequency_hz;
        jobs.push(Box::new(move || {
            write_spectrum(r, f, &dir.join(spectrum_file_name(f)))
        }));
    }
    if !r.drive_quality.is_empty() {
        jobs.push(Box::new(move || write_drive(r, &dir.join("drive.csv"))));
    }
    if !r.coupling.is_empty() {
        jobs.push(Box::new(move || write_coupling(r, dir)));
    }
    if !r.common.is_empty() {
        jobs.push(Box::new(move || {
            write_common(r, &dir.join("common-drive.csv"))
        }));
    }
    jobs.into_par_iter()
        .map(|job| job())
        .collect::<Result<Vec<()>, RunError>>()
        .map(|_| ())
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
    let edge = r.floors.first().map_or(0.0, |f| f.usable_band_hz);
    let mut header: Vec<String> = [
        "channel",
        "noise_floor_dbfs",
        "noise_density_dbfs_per_rthz",
        "floor_band_hz",
        "floor_source",
        "dc_offset_fs",
        "clipped_samples",
        "name",
        "termination",
        "dynamic_range_db",
    ]
    .map(String::from)
    .to_vec();
    header.push(format!("noise_0Hz_{edge}Hz_dbfs"));
    header.push(format!("density_0Hz_{edge}Hz_dbfs_per_rthz"));
    header.push(format!("dynamic_range_0Hz_{edge}Hz_db"));
    if r.config.a_weighting {
        header.push("noise_a_weighted_20Hz_20kHz_dbfs".into());
        header.push("dynamic_range_a_weighted_db".into());
    }
    let rows = r.floors.iter().map(|f| {
        let entry = &r.manifest.channels[f.channel as usize - 1];
        let mut row = vec![
            f.channel.to_string(),
            format!("{:.4}", f.noise_floor_dbfs),
            format!("{:.4}", f.noise_density_dbfs_per_rthz),
            f.band_hz.to_string(),
            f.source.to_string(),
            format!("{:.3e}", f.dc_offset),
            f.clipped.to_string(),
            entry.name.clone().unwrap_or_default(),
            entry.termination.clone().unwrap_or_default(),
            format!("{:.4}", f.dynamic_range_db),
            format!("{:.4}", f.usable_noise_dbfs),
            format!("{:.4}", f.usable_density_dbfs_per_rthz),
            format!("{:.4}", f.usable_dynamic_range_db),
        ];
        if r.config.a_weighting {
            row.push(fmt_opt(f.a_weighted_noise_dbfs, 4));
            row.push(fmt_opt(f.a_weighted_dynamic_range_db, 4));
        }
        row
    });
    write_rows(path, std::iter::once(header).chain(rows))
}

fn write_drive(r: &RunResults, path: &Path) -> Result<(), RunError> {
    let header = [
        "frequency_hz",
        "channel",
        "tone_hz",
        "level_dbfs",
        "sinad_db",
        "thd_db",
        "thd_harmonics",
        "sfdr_db",
        "enob_bits",
        "clock_offset_ppm",
        "clock_offset_u95_ppm",
        "jitter_snr_db",
    ];
    let rows = r.drive_quality.iter().map(|d| {
        vec![
            d.frequency_hz.to_string(),
            d.channel.to_string(),
            format!("{:.6}", d.tone_hz),
            format!("{:.4}", d.level_dbfs),
            format!("{:.3}", d.sinad_db),
            fmt_opt(d.thd_db, 3),
            d.thd_harmonics.to_string(),
            format!("{:.3}", d.sfdr_db),
            format!("{:.4}", d.enob_bits),
            format!("{:.4}", d.clock_offset_ppm),
            format!("{:.4}", d.clock_offset_u95_ppm),
            format!("{:.3}", d.jitter_snr_db),
        ]
    });
    write_rows(
        path,
        std::iter::once(header.map(String::from).to_vec()).chain(rows),
    )
}

fn write_common(r: &RunResults, path: &Path) -> Result<(), RunError> {
    let header = [
        "frequency_hz",
        "channel",
        "reference",
        "level_dbfs",
        "gain_db",
        "gain_u95_db",
        "phase_deg",
        "phase_u95_deg",
        "skew_us",
        "skew_u95_us",
        "tone_hz",
        "capture",
    ];
    let rows = r.common.iter().flat_map(|c| {
        c.channels.iter().map(move |ch| {
            vec![
                c.frequency_hz.to_string(),
                ch.channel.to_string(),
                c.reference_channel.to_string(),
                format!("{:.4}", ch.level_dbfs),
                format!("{:.5}", ch.gain_db),
                format!("{:.5}", ch.gain_u95_db),
                format!("{:.5}", ch.phase_deg),
                format!("{:.5}", ch.phase_u95_deg),
                format!("{:.5}", ch.skew_us),
                format!("{:.5}", ch.skew_u95_us),
                format!("{:.6}", c.tone_hz),
                c.file.clone(),
            ]
        })
    });
    write_rows(
        path,
        std::iter::once(header.map(String::from).to_vec()).chain(rows),
    )
}

fn write_coupling(r: &RunResults, dir: &Path) -> Result<(), RunError> {
    let header = [
        "aggressor",
        "victim",
        "points",
        "slope_db_per_decade",
        "shared_db",
        "rising_db_at_1khz",
        "crossover_hz",
        "mechanism",
    ];
    let rows = r.coupling.iter().map(|c| {
        vec![
            c.aggressor.to_string(),
            c.victim.to_string(),
            c.points.to_string(),
            fmt_opt(c.slope_db_per_decade, 3),
            fmt_opt(c.shared_db, 3),
            fmt_opt(c.rising_db_at_1khz, 3),
            fmt_opt(c.crossover_hz, 1),
            c.mechanism.label().to_string(),
        ]
    });
    write_rows(
        &dir.join("coupling.csv"),
        std::iter::once(header.map(String::from).to_vec()).chain(rows),
    )?;
    let n = r.manifest.channels.len() as u32;
    let header = std::iter::once("aggressor".to_string()).chain((1..=n).map(|v| v.to_string()));
    let mut aggressors: Vec<u32> = r.coupling.iter().map(|c| c.aggressor).collect();
    aggressors.dedup();
    let lookup = crate::run::PairLookup::new(&r.coupling, |c| (0.0, c.aggressor, c.victim));
    let rows = aggressors.into_iter().map(|a| {
        std::iter::once(a.to_string())
            .chain((1..=n).map(|v| {
                lookup
                    .get(0.0, a, v)
                    .map_or_else(String::new, |c| c.mechanism.label().to_string())
            }))
            .collect()
    });
    write_rows(
        &dir.join("coupling-matrix.csv"),
        std::iter::once(header.collect()).chain(rows),
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
    let lookup = r.pair_lookup();
    let rows = aggressors.into_iter().map(|a| {
        std::iter::once(a.to_string())
            .chain((1..=n).map(|v| {
                lookup
                    .get(frequency_hz, a, v)
                    .map_or_else(String::new, |p| format!("{:.4}", p.separation_db))
            }))
            .collect()
    });
    write_rows(path, std::iter::once(header.collect()).chain(rows))
}

/// The file name of the spectra at a nominal frequency.
pub fn spectrum_file_name(frequency_hz: f64) -> String {
    format!("spectrum-{frequency_hz}Hz.csv")
}

/// The capture of the worst pair at `frequency_hz` and its spectra
/// (aggressor first, then the victim with the strongest tone).
fn spectra_at(r: &RunResults, frequency_hz: f64) -> Option<&super::CaptureAnalysis> {
    let worst = &r
        .per_frequency
        .iter()
        .find(|s| s.frequency_hz == frequency_hz)?
        .worst;
    r.captures
        .iter()
        .find(|c| c.file == worst.capture && c.spectra.len() == 2)
}

fn write_spectrum(r: &RunResults, frequency_hz: f64, path: &Path) -> Result<(), RunError> {
    let Some(cap) = spectra_at(r, frequency_hz) else {
        return Ok(());
    };
    let (a, v) = (&cap.spectra[0].1, &cap.spectra[1].1);
    let header = [
        "frequency_hz",
        "aggressor_peak_dbfs",
        "aggressor_mean_dbfs",
        "victim_peak_dbfs",
        "victim_mean_dbfs",
    ];
    let rows = (0..a.freq_hz.len().min(v.freq_hz.len())).map(|i| {
        vec![
            format!("{:.4}", a.freq_hz[i]),
            format!("{:.3}", a.peak_dbfs[i]),
            format!("{:.3}", a.mean_dbfs[i]),
            format!("{:.3}", v.peak_dbfs[i]),
            format!("{:.3}", v.mean_dbfs[i]),
        ]
    });
    write_rows(
        path,
        std::iter::once(header.map(String::from).to_vec()).chain(rows),
    )
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
        "spectra": r.per_frequency.iter().filter_map(|s| {
            let cap = spectra_at(r, s.frequency_hz)?;
            Some(json!({
                "frequency_hz": s.frequency_hz,
                "file": spectrum_file_name(s.frequency_hz),
                "capture": cap.file,
                "aggressor": cap.spectra[0].0,
                "victim": cap.spectra[1].0,
                "bin_enbw_hz": cap.spectra[0].1.bin_enbw_hz,
                "window": "7-term Blackman-Harris",
                "levels": "sine-calibrated bin levels in dBFS; peak and power mean over log-spaced buckets",
            }))
        }).collect::<Vec<_>>(),
        "drive_quality": r.drive_quality,
        "common_drive": r.common,
        "coupling": r.coupling,
        "coupling_note": "capacitive and inductive coupling both rise about 20 dB per decade; measure again with the victims open or loaded by a resistor: capacitive coupling grows with the victim's impedance, inductive coupling falls",
        "warnings": r.warnings,
    })
}
