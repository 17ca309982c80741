//! The terminal summary of an analysis: aligned, labelled tables.

use comfy_table::{presets, CellAlignment, Table};
use septum::analysis::RunResults;
use std::path::Path;

fn table(header: &[&str]) -> Table {
    let mut t = Table::new();
    t.load_preset(presets::NOTHING);
    t.set_header(header.to_vec());
    for (i, col) in t.column_iter_mut().enumerate() {
        if i > 0 {
            col.set_cell_alignment(CellAlignment::Right);
        }
    }
    t
}

fn front_end_line(r: &RunResults) -> String {
    let fe = r.manifest.extra.get("front_end");
    let label = fe
        .and_then(|f| f.get("label"))
        .and_then(|v| v.as_str())
        .unwrap_or("(no label)");
    match fe.and_then(|f| f.get("serial")).and_then(|v| v.as_str()) {
        Some(s) => format!("{label}, serial {s}"),
        None => label.to_string(),
    }
}

/// Print the summary of `r` (analysed from `run_dir` into `out`).
pub fn print(r: &RunResults, run_dir: &Path, out: &Path) {
    let m = &r.manifest;
    println!("septum: channel separation of {}", run_dir.display());
    println!("front end: {}", front_end_line(r));
    println!(
        "{} channels at {} Hz, {} captures ({} idle)",
        m.channels.len(),
        m.sample_rate_hz,
        m.captures.len(),
        m.captures.iter().filter(|c| c.drive.is_none()).count()
    );
    println!();
    println!("Worst pair per test frequency (separation in dB; \">\" marks a lower bound at the noise floor)");
    let mut t = table(&[
        "frequency (Hz)",
        "tone (Hz)",
        "aggressor",
        "victim",
        "separation (dB)",
        "u95 (dB)",
        "floor-limited pairs",
    ]);
    for s in &r.per_frequency {
        let w = &s.worst;
        t.add_row(vec![
            format!("{}", s.frequency_hz),
            format!("{:.3}", w.tone_hz),
            w.aggressor.to_string(),
            w.victim.to_string(),
            separation(w.separation_db, w.floor_limited),
            w.separation_u95_db
                .map_or("-".into(), |u| format!("{u:.2}")),
            format!("{} of {}", s.floor_limited, s.pairs),
        ]);
    }
    println!("{t}\n");
    if m.channels.len() <= 16 {
        let lookup = r.pair_lookup();
        for f in m.frequencies() {
            println!("Separation at {f} Hz (dB; rows: aggressor, columns: victim)");
            let n = m.channels.len() as u32;
            let mut header: Vec<String> = vec!["aggr.".into()];
            header.extend((1..=n).map(|v| format!("{v}")));
            let mut t = table(&header.iter().map(String::as_str).collect::<Vec<_>>());
            for a in 1..=n {
                if !r
                    .pairs
                    .iter()
                    .any(|p| p.frequency_hz == f && p.aggressor == a)
                {
                    continue;
                }
                let mut row = vec![a.to_string()];
                row.extend((1..=n).map(|v| {
                    lookup
                        .get(f, a, v)
                        .map_or("-".into(), |p| separation(p.separation_db, p.floor_limited))
                }));
                t.add_row(row);
            }
            println!("{t}\n");
        }
    }
    print_drive_quality(r);
    print_common(r);
    print_coupling(r);
    let edge = r.floors.first().map_or(0.0, |f| f.usable_band_hz);
    println!(
        "Noise floor and dynamic range per channel (broadband 0 to {} Hz; usable band 0 to {edge:.0} Hz)",
        m.sample_rate_hz / 2
    );
    let mut t = table(&[
        "channel",
        "name",
        "termination",
        "floor (dBFS)",
        "density (dBFS/√Hz)",
        "DR (dB)",
        "usable band (dBFS)",
        "DR usable (dB)",
        "A-weighted (dBFS)",
        "from",
        "clipped",
    ]);
    for f in &r.floors {
        let e = &m.channels[f.channel as usize - 1];
        t.add_row(vec![
            f.channel.to_string(),
            e.name.clone().unwrap_or_default(),
            e.termination.clone().unwrap_or_default(),
            format!("{:.1}", f.noise_floor_dbfs),
            format!("{:.1}", f.noise_density_dbfs_per_rthz),
            format!("{:.1}", f.dynamic_range_db),
            format!("{:.1}", f.usable_noise_dbfs),
            format!("{:.1}", f.usable_dynamic_range_db),
            f.a_weighted_noise_dbfs
                .map_or("-".into(), |a| format!("{a:.1}")),
            if f.source == "idle" {
                "idle capture"
            } else {
                "victim captures"
            }
            .to_string(),
            f.clipped.to_string(),
        ]);
    }
    println!("{t}\n");
    if r.warnings.is_empty() {
        println!("Warnings: none");
    } else {
        println!("Warnings ({})", r.warnings.len());
        for w in &r.warnings {
            let at = w
                .capture
                .as_deref()
                .map(|c| format!(" [{c}]"))
                .unwrap_or_default();
            println!("  {}{at}: {}", w.kind, w.message);
        }
    }
    println!();
    println!("results: {}", out.display());
}

/// Driven-channel quality, condensed per test frequency over the aggressors.
fn print_drive_quality(r: &RunResults) {
    use septum::analysis::quality::DriveQuality;
    if r.drive_quality.is_empty() {
        return;
    }
    println!(
        "Driven channel per test frequency (over all aggressors; THD over harmonics 2 to {}, jitter SNR for {} ps rms)",
        r.drive_quality.iter().map(|d| d.thd_harmonics).max().unwrap_or(0),
        r.config.jitter_s * 1e12
    );
    let mut t = table(&[
        "frequency (Hz)",
        "SINAD min (dB)",
        "THD max (dB)",
        "SFDR min (dB)",
        "ENOB min (bits)",
        "clock offset (ppm)",
        "jitter SNR (dB)",
    ]);
    for f in r.manifest.frequencies() {
        let d: Vec<&DriveQuality> = r
            .drive_quality
            .iter()
            .filter(|d| d.frequency_hz == f)
            .collect();
        if d.is_empty() {
            continue;
        }
        let min =
            |g: fn(&DriveQuality) -> f64| d.iter().map(|q| g(q)).fold(f64::INFINITY, f64::min);
        let ppm = d.iter().map(|q| q.clock_offset_ppm).sum::<f64>() / d.len() as f64;
        let ppm_u = d.iter().map(|q| q.clock_offset_u95_ppm).fold(0.0, f64::max);
        t.add_row(vec![
            format!("{f}"),
            format!("{:.1}", min(|q| q.sinad_db)),
            d.iter()
                .filter_map(|q| q.thd_db)
                .reduce(f64::max)
                .map_or("-".into(), |t| format!("{t:.1}")),
            format!("{:.1}", min(|q| q.sfdr_db)),
            format!("{:.2}", min(|q| q.enob_bits)),
            format!("{ppm:+.4} ± {ppm_u:.4}"),
            format!("{:.1}", d[0].jitter_snr_db),
        ]);
    }
    println!("{t}\n");
}

/// Gain match and skew from the common-drive captures.
fn print_common(r: &RunResults) {
    for c in &r.common {
        println!(
            "Common drive at {} Hz (one signal to every input; against channel {}; skew positive: samples later)",
            c.frequency_hz, c.reference_channel
        );
        let mut t = table(&[
            "channel",
            "level (dBFS)",
            "gain (dB)",
            "± u95 (dB)",
            "phase (°)",
            "skew (µs)",
            "± u95 (µs)",
        ]);
        for ch in &c.channels {
            t.add_row(vec![
                ch.channel.to_string(),
                format!("{:.2}", ch.level_dbfs),
                format!("{:+.4}", ch.gain_db),
                format!("{:.1e}", ch.gain_u95_db),
                format!("{:+.4}", ch.phase_deg),
                format!("{:+.4}", ch.skew_us),
                format!("{:.1e}", ch.skew_u95_us),
            ]);
        }
        println!("{t}\n");
    }
}

/// The coupling mechanism matrix (three or more test frequencies).
fn print_coupling(r: &RunResults) {
    use septum::analysis::coupling::Mechanism;
    if r.coupling.is_empty() || r.manifest.channels.len() > 16 {
        return;
    }
    println!("Dominant coupling (rows: aggressor, columns: victim; R rising 20 dB/decade: capacitive or inductive; F flat: shared impedance; M mixed; ? too few detected points)");
    let n = r.manifest.channels.len() as u32;
    let mut header: Vec<String> = vec!["aggr.".into()];
    header.extend((1..=n).map(|v| v.to_string()));
    let mut t = table(&header.iter().map(String::as_str).collect::<Vec<_>>());
    for a in 1..=n {
        let mut row = vec![a.to_string()];
        row.extend((1..=n).map(|v| {
            r.coupling
                .iter()
                .find(|c| c.aggressor == a && c.victim == v)
                .map_or("-", |c| match c.mechanism {
                    Mechanism::CapacitiveOrInductive => "R",
                    Mechanism::SharedImpedance => "F",
                    Mechanism::Mixed => "M",
                    Mechanism::Insufficient => "?",
                })
                .to_string()
        }));
        t.add_row(row);
    }
    println!("{t}\n");
}

fn separation(db: f64, floor_limited: bool) -> String {
    if floor_limited {
        format!(">{db:.1}")
    } else {
        format!("{db:.1}")
    }
}
