//! Terminal tables of a verdict: limits, claims, baseline, overall.

use comfy_table::{presets, CellAlignment, Table};
use septum::run::ResultsFolder;
use septum::verdict::limits::ChannelFigure;
use septum::verdict::select::fmt_hz;
use septum::verdict::{median, Outcome, Verdict};

/// Rows of the long tables shown; the rest is in verdict.csv.
const MAX_ROWS: usize = 20;

fn table(header: &[&str], left: &[usize]) -> Table {
    let mut t = Table::new();
    t.load_preset(presets::NOTHING);
    t.set_header(header.to_vec());
    for (i, col) in t.column_iter_mut().enumerate() {
        if !left.contains(&i) {
            col.set_cell_alignment(CellAlignment::Right);
        }
    }
    t
}

fn signed(v: f64) -> String {
    format!("{v:+.2}")
}

fn sep(v: f64, bound: bool) -> String {
    if bound {
        format!(">{v:.2}")
    } else {
        format!("{v:.2}")
    }
}

/// Print `v` (judged on `r`).
pub fn print(v: &Verdict, r: &ResultsFolder) {
    println!("septum: verdict on {}", r.dir.display());
    let label = r.front_end("label").unwrap_or("(no label)");
    match r.front_end("serial") {
        Some(s) => println!("front end: {label}, serial {s}"),
        None => println!("front end: {label}"),
    }
    println!();
    if let (Some(l), Some(path)) = (&v.limits, &v.limits_file) {
        print_limits(l, r, path);
    }
    if let (Some(c), Some(path)) = (&v.claims, &v.claims_file) {
        print_claims(c, path);
    }
    if let Some(b) = &v.baseline {
        print_baseline(b);
    }
    if !v.quality.concerns.is_empty() {
        println!("Run warnings that leave the figures in doubt (the verdict cannot be a pass):");
        for c in &v.quality.concerns {
            println!("  {c}");
        }
        println!();
    }
    println!(
        "Verdict: {} (exit code {})",
        v.outcome.word().to_uppercase(),
        super::exit::for_outcome(v.outcome)
    );
}

fn print_limits(
    l: &septum::verdict::limits::LimitsReport,
    r: &ResultsFolder,
    path: &std::path::Path,
) {
    println!(
        "Limits: {} ({}): {}",
        l.name.as_deref().unwrap_or("unnamed"),
        path.display(),
        l.outcome.word()
    );
    let mut t = table(
        &[
            "limit",
            "applies to",
            "test frequencies (Hz)",
            "pairs",
            "pass",
            "inconcl.",
            "fail",
            "worst pair",
            "margin (dB)",
            "verdict",
        ],
        &[1, 2, 7, 9],
    );
    for s in &l.separation {
        t.add_row(vec![
            s.entry.to_string(),
            s.description.clone(),
            if s.frequencies_hz.is_empty() {
                "none".into()
            } else {
                s.frequencies_hz
                    .iter()
                    .map(|&f| fmt_hz(f))
                    .collect::<Vec<_>>()
                    .join(", ")
            },
            s.pairs.to_string(),
            s.pass.to_string(),
            s.inconclusive.to_string(),
            s.fail.to_string(),
            s.worst.map_or("-".into(), |w| {
                format!("{} → {} at {} Hz", w.1, w.2, fmt_hz(w.0))
            }),
            s.worst.map_or("-".into(), |w| signed(w.3)),
            s.outcome.word().into(),
        ]);
    }
    if !l.separation.is_empty() {
        println!("{t}");
        for s in l.separation.iter().filter(|s| s.settle.is_some()) {
            println!("  limit {}: {}", s.entry, s.settle.as_deref().unwrap_or(""));
        }
        println!();
    }
    let bad = l.not_passing();
    if !bad.is_empty() {
        println!(
            "Pairs not passing ({} of {} judged{}; separation \">\" is a lower bound):",
            bad.len(),
            l.pairs.len(),
            if bad.len() > MAX_ROWS {
                format!(", the first {MAX_ROWS} shown, all in verdict.csv")
            } else {
                String::new()
            }
        );
        let mut t = table(
            &[
                "frequency (Hz)",
                "aggressor",
                "victim",
                "separation (dB)",
                "u95 (dB)",
                "limit (dB)",
                "margin (dB)",
                "verdict",
            ],
            &[7],
        );
        for p in bad.iter().take(MAX_ROWS) {
            t.add_row(vec![
                fmt_hz(p.frequency_hz),
                p.aggressor.to_string(),
                p.victim.to_string(),
                sep(p.separation_db, p.floor_limited),
                p.separation_u95_db
                    .map_or("-".into(), |u| format!("{u:.2}")),
                format!("{}", p.limit_db),
                signed(p.judgement.margin_db),
                p.judgement.outcome.word().into(),
            ]);
        }
        println!("{t}\n");
    }
    if !l.channels.is_empty() {
        println!(
            "Channels (dynamic range = 0 dBFS full-scale sine minus the broadband noise floor):"
        );
        let mut t = table(
            &[
                "channel",
                "name",
                "figure",
                "measured",
                "limit",
                "margin (dB)",
                "verdict",
            ],
            &[1, 2, 6],
        );
        for c in &l.channels {
            let (fig, unit, rel) = match c.figure {
                ChannelFigure::NoiseFloor => ("noise floor", "dBFS", "at most"),
                ChannelFigure::DynamicRange => ("dynamic range", "dB", "at least"),
            };
            t.add_row(vec![
                c.channel.to_string(),
                r.channel_name(c.channel).unwrap_or_default(),
                fig.into(),
                format!("{:.1} {unit}", c.measured),
                format!("{rel} {} {unit}", c.limit),
                signed(c.margin_db),
                c.outcome.word().into(),
            ]);
        }
        println!("{t}\n");
    }
    if !l.uncovered_frequencies_hz.is_empty() && !l.separation.is_empty() {
        println!(
            "Test frequencies no separation limit covers (not judged): {} Hz\n",
            l.uncovered_frequencies_hz
                .iter()
                .map(|&f| fmt_hz(f))
                .collect::<Vec<_>>()
                .join(", ")
        );
    }
}

fn print_claims(c: &septum::verdict::claims::ClaimsReport, path: &std::path::Path) {
    println!(
        "Data-sheet claims ({}){}{}: {}",
        path.display(),
        c.product
            .as_deref()
            .map(|p| format!(" for {p}"))
            .unwrap_or_default(),
        c.source
            .as_deref()
            .map(|s| format!(", from {s}"))
            .unwrap_or_default(),
        c.outcome.claim_word()
    );
    if let Some(t) = &c.conditions_text {
        println!("  stated conditions: {t}");
    }
    for k in &c.conditions {
        println!(
            "  {}: claimed {}, run {}: {}",
            k.what,
            k.claimed,
            k.measured,
            if k.matches { "same" } else { "DIFFERENT" }
        );
    }
    let mut t = table(
        &[
            "claim",
            "kind",
            "claimed",
            "measured",
            "from",
            "margin (dB)",
            "verdict",
        ],
        &[0, 1, 4, 6],
    );
    for k in &c.claims {
        t.add_row(vec![
            k.subject.clone(),
            k.kind.into(),
            format!("{} {}", k.claimed, k.unit),
            format!("{} {}", k.measured_text, k.unit),
            k.basis.clone(),
            k.margin_db.map_or("-".into(), signed),
            k.outcome.claim_word().into(),
        ]);
    }
    println!("{t}");
    for (i, k) in c
        .claims
        .iter()
        .enumerate()
        .filter(|(_, k)| k.settle.is_some())
    {
        println!(
            "  claim {} ({} {}): to settle: {}",
            i + 1,
            k.kind,
            k.subject,
            k.settle.as_deref().unwrap_or("")
        );
    }
    println!();
}

fn print_baseline(b: &septum::verdict::baseline::BaselineReport) {
    println!(
        "Against the baseline {} (tolerance {} dB; drift = now − then): {}",
        b.baseline_dir.display(),
        b.tolerance_db,
        b.outcome.word()
    );
    for n in &b.notes {
        println!("  note: {n}");
    }
    let mut t = table(
        &[
            "frequency (Hz)",
            "pairs",
            "within",
            "worse",
            "inconcl.",
            "median drift (dB)",
            "largest loss",
            "loss (dB)",
        ],
        &[6],
    );
    for &(fc, fb) in &b.frequencies_hz {
        let at: Vec<_> = b.pairs.iter().filter(|p| p.frequency_hz == fc).collect();
        let count = |o| at.iter().filter(|p| p.outcome == o).count();
        let drifts: Vec<f64> = at.iter().map(|p| p.drift_db).collect();
        let worst = at.iter().min_by(|a, b| a.drift_db.total_cmp(&b.drift_db));
        t.add_row(vec![
            if fc == fb {
                fmt_hz(fc)
            } else {
                format!("{} (then {})", fmt_hz(fc), fmt_hz(fb))
            },
            at.len().to_string(),
            count(Outcome::Pass).to_string(),
            count(Outcome::Fail).to_string(),
            count(Outcome::Inconclusive).to_string(),
            if drifts.is_empty() {
                "-".into()
            } else {
                signed(median(&drifts))
            },
            worst.map_or("-".into(), |p| format!("{} → {}", p.aggressor, p.victim)),
            worst.map_or("-".into(), |p| signed(p.drift_db)),
        ]);
    }
    println!("{t}");
    let bad = b.not_passing();
    if !bad.is_empty() {
        println!(
            "\nPairs worse than the baseline or undecided ({}{}):",
            bad.len(),
            if bad.len() > MAX_ROWS {
                format!(", the first {MAX_ROWS} shown, all in verdict.csv")
            } else {
                String::new()
            }
        );
        let mut t = table(
            &[
                "frequency (Hz)",
                "aggressor",
                "victim",
                "now (dB)",
                "then (dB)",
                "drift (dB)",
                "u95 (dB)",
                "verdict",
            ],
            &[7],
        );
        for p in bad.iter().take(MAX_ROWS) {
            t.add_row(vec![
                fmt_hz(p.frequency_hz),
                p.aggressor.to_string(),
                p.victim.to_string(),
                sep(p.current_db, p.current_floor_limited),
                sep(p.baseline_db, p.baseline_floor_limited),
                signed(p.drift_db),
                format!("{:.2}", p.u95_db),
                p.outcome.word().into(),
            ]);
        }
        println!("{t}");
    }
    println!("\nNoise floor drift per channel (positive: noisier now):");
    let mut t = table(
        &[
            "channel",
            "now (dBFS)",
            "then (dBFS)",
            "drift (dB)",
            "verdict",
        ],
        &[4],
    );
    for f in &b.floors {
        t.add_row(vec![
            f.channel.to_string(),
            format!("{:.1}", f.current_dbfs),
            format!("{:.1}", f.baseline_dbfs),
            signed(f.drift_db),
            f.outcome.word().into(),
        ]);
    }
    println!("{t}\n");
}
