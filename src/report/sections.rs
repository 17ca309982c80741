//! The report's sections as HTML fragments.

use super::figures;
use super::svg::esc;
use crate::run::{ResultsFolder, RunError};
use crate::verdict::limits::{ChannelFigure, Limits, LimitsReport};
use crate::verdict::select::fmt_hz;
use crate::verdict::{baseline::BaselineReport, claims::ClaimsReport, median, Outcome, Verdict};
use std::fmt::Write;

/// Rows shown in the long verdict tables; verdict.csv holds all.
const MAX_ROWS: usize = 40;

/// The operator cautions (MEASUREMENT.md, last section), in the report's words.
pub const CAUTIONS: &str = r#"<section id="cautions"><h2>Before driving a real front end</h2><div class="cautions"><p>These figures come from captures in which a test tone was fed into the inputs. Whoever repeats the measurement on real equipment should keep to these points, and to the local electrical codes and the practice of licensed staff where those ask for more:</p><ul>
<li><strong>Excitation off.</strong> Switch off IEPE (constant-current) sensor supply on every input that a generator or the interface's own output will feed; never connect a signal to an input whose excitation is still on.</li>
<li><strong>Stay in range, start low.</strong> Keep each input within its rated range and raise the level in steps from a low start; an aggressor tone between −6 dBFS and −1 dBFS leaves headroom.</li>
<li><strong>Protect ears and loudspeakers.</strong> Mute any output that is also wired to monitors or headphones: a full-scale tone can damage hearing and destroy speakers.</li>
<li><strong>Mains equipment.</strong> Handle mains-powered gear only as the laboratory's procedures and the local electrical-safety rules allow; leave the rest to licensed people.</li>
<li><strong>A check, not a calibration.</strong> This report verifies a front end; it does not replace calibration by an accredited laboratory.</li>
</ul></div></section>
"#;

fn outcome_cell(o: Outcome, claim: bool) -> String {
    format!(
        r#"<td class="o-{}">{}</td>"#,
        o.word(),
        if claim { o.claim_word() } else { o.word() }
    )
}

fn badge(o: Option<Outcome>) -> String {
    match o {
        Some(o) => format!(
            r#"<span class="badge {}" id="verdict-badge" data-outcome="{}">{}</span>"#,
            o.word(),
            o.word(),
            o.word().to_uppercase()
        ),
        None => r#"<span class="badge none" id="verdict-badge" data-outcome="none">no verdict asked</span>"#.into(),
    }
}

fn num(v: f64, decimals: usize) -> String {
    format!(r#"<td class="num">{v:.decimals$}</td>"#)
}

fn signed(v: f64) -> String {
    format!(r#"<td class="num">{v:+.2}</td>"#)
}

fn sep(v: f64, bound: bool) -> String {
    format!(
        r#"<td class="num">{}{v:.2}</td>"#,
        if bound { "≥ " } else { "" }
    )
}

fn list_hz(f: &[f64]) -> String {
    match f {
        [] => "none".into(),
        [one] => format!("{} Hz", fmt_hz(*one)),
        _ => format!(
            "{} and {} Hz",
            f[..f.len() - 1]
                .iter()
                .map(|&x| fmt_hz(x))
                .collect::<Vec<_>>()
                .join(", "),
            fmt_hz(f[f.len() - 1])
        ),
    }
}

pub fn header(r: &ResultsFolder, v: Option<&Verdict>) -> String {
    let label = r
        .front_end("label")
        .unwrap_or("front end (no label recorded)");
    format!(
        r#"<header class="top"><div><h1>Channel isolation report</h1><div class="sub">{}{}</div></div><div>{}</div></header>
"#,
        esc(label),
        r.front_end("serial")
            .map(|s| format!(" · serial {}", esc(s)))
            .unwrap_or_default(),
        badge(v.map(|v| v.outcome))
    )
}

pub fn job(r: &ResultsFolder) -> String {
    let levels = &r.drive_levels_dbfs;
    let level = if levels.is_empty() {
        "a test tone".to_string()
    } else {
        let (lo, hi) = levels
            .iter()
            .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), &x| {
                (a.min(x), b.max(x))
            });
        if lo == hi {
            format!("a test tone at {lo} dBFS (nominal)")
        } else {
            format!("a test tone at {lo} to {hi} dBFS (nominal)")
        }
    };
    let floor_limited = r.pairs.iter().filter(|p| p.floor_limited).count();
    format!(
        r#"<section id="job"><h2>What was measured</h2><p>This report shows how well the {} inputs of this front end are kept apart. One input at a time (the aggressor) was driven with {level} while every other input (the victims) was terminated, and all inputs were recorded together, at {}. The separation of a pair is the aggressor's tone level minus the victim's, both in dBFS, in dB: bigger is better, and crosstalk is the same figure with its sign turned. Of the {} pairs measured, {floor_limited} had a victim tone that could not be told from noise; their figure is a lower bound (marked ≥): the true separation is at least that. Everything below is read from the results folder; no capture was analysed again for this report.</p></section>
"#,
        r.channel_count(),
        list_hz(&r.frequencies()),
        r.pairs.len()
    )
}

pub fn identity(r: &ResultsFolder, made: &str) -> String {
    let mut rows: Vec<(&str, String)> = vec![
        (
            "Front end",
            r.front_end("label").unwrap_or("not recorded").to_string(),
        ),
        (
            "Serial number",
            r.front_end("serial").unwrap_or("not recorded").to_string(),
        ),
    ];
    if let Some(n) = r.front_end("notes") {
        rows.push(("Notes", n.to_string()));
    }
    rows.push((
        "Run recorded",
        r.run
            .get("created")
            .and_then(|v| v.as_str())
            .unwrap_or("not recorded")
            .to_string(),
    ));
    rows.push(("Report made", made.to_string()));
    rows.push((
        "Sample rate",
        r.sample_rate_hz()
            .map_or("not recorded".into(), |f| format!("{f} Hz")),
    ));
    rows.push(("Test frequencies", list_hz(&r.frequencies())));
    rows.push(("Results folder", r.dir.display().to_string()));
    if let Some(g) = &r.generator {
        rows.push(("Analysed by", g.clone()));
    }
    let mut s =
        String::from(r#"<section id="identity"><h2>Front end and run</h2><table class="facts">"#);
    for (k, v) in rows {
        let _ = write!(s, "<tr><th>{k}</th><td>{}</td></tr>", esc(&v));
    }
    s += "</table></section>\n";
    s
}

pub fn channels(r: &ResultsFolder) -> String {
    let mut s = String::from(
        r#"<section id="channels"><h2>Channels and terminations</h2><table><thead><tr><th class="num">channel</th><th>name</th><th>termination (as a victim)</th><th class="num">noise floor (dBFS)</th><th class="num">dynamic range (dB)</th></tr></thead><tbody>"#,
    );
    for c in &r.channels {
        let _ = write!(
            s,
            r#"<tr><td class="num">{}</td><td>{}</td><td>{}</td>{}{}</tr>"#,
            c.channel,
            esc(&r.channel_name(c.channel).unwrap_or_default()),
            esc(&r
                .termination(c.channel)
                .unwrap_or_else(|| "not recorded".into())),
            num(c.noise_floor_dbfs, 1),
            num(-c.noise_floor_dbfs, 1)
        );
    }
    let band = r
        .channels
        .first()
        .and_then(|c| c.floor_band_hz)
        .map(|b| format!(" over 0 Hz to {} Hz", fmt_hz(b)))
        .unwrap_or_default();
    let _ = writeln!(
        s,
        r#"</tbody></table><p class="note">Noise floor: the broadband rms left after removing DC, the tone and its harmonics{band}, in dBFS (0 dBFS is the rms of a sine whose peak reaches full scale). Dynamic range here is a full-scale sine (0 dBFS) over that floor, i.e. minus the floor in dBFS.</p></section>"#
    );
    s
}

pub fn verdict(v: Option<&Verdict>, r: &ResultsFolder) -> String {
    let mut s = String::from(r#"<section id="verdict"><h2>Verdict</h2>"#);
    let Some(v) = v else {
        s += r#"<p>No verdict was asked for: give limits, data-sheet claims or a baseline (<code>--limits</code>, <code>--claims</code>, <code>--baseline</code>) to have the figures judged.</p></section>
"#;
        return s;
    };
    let _ = write!(
        s,
        r#"<p>Overall: {} A check passes when its figure clears the limit by more than its expanded uncertainty (k = 2), fails when it misses by more than that, and is inconclusive in between, or when a lower bound at the noise floor falls short of the limit.</p>"#,
        badge(Some(v.outcome))
    );
    if let (Some(l), Some(p)) = (&v.limits, &v.limits_file) {
        s += &limits(l, r, &p.display().to_string());
    }
    if let (Some(c), Some(p)) = (&v.claims, &v.claims_file) {
        s += &claims(c, &p.display().to_string());
    }
    if let Some(b) = &v.baseline {
        s += &baseline(b);
    }
    if !v.quality.concerns.is_empty() {
        s += r#"<h3>Run warnings that leave the figures in doubt</h3><p>While these stand, no verdict can be a pass:</p><ul class="warnings">"#;
        for c in &v.quality.concerns {
            let _ = write!(s, "<li>{}</li>", esc(c));
        }
        s += "</ul>";
    }
    s += "</section>\n";
    s
}

fn limits(l: &LimitsReport, r: &ResultsFolder, path: &str) -> String {
    let mut s = format!(
        r#"<h3>Limits: {} <span class="note">({})</span></h3>"#,
        esc(l.name.as_deref().unwrap_or("unnamed")),
        esc(path)
    );
    if !l.separation.is_empty() {
        s += r#"<table><thead><tr><th class="num">#</th><th>minimum separation</th><th>test frequencies</th><th class="num">pairs</th><th class="num">pass</th><th class="num">inconcl.</th><th class="num">fail</th><th>worst pair</th><th class="num">margin (dB)</th><th>verdict</th></tr></thead><tbody>"#;
        for e in &l.separation {
            let _ = write!(
                s,
                r#"<tr><td class="num">{}</td><td>{}</td><td>{}</td><td class="num">{}</td><td class="num">{}</td><td class="num">{}</td><td class="num">{}</td><td>{}</td>{}{}</tr>"#,
                e.entry,
                esc(&e.description),
                list_hz(&e.frequencies_hz),
                e.pairs,
                e.pass,
                e.inconclusive,
                e.fail,
                e.worst.map_or("–".into(), |w| format!(
                    "{} → {} at {} Hz",
                    w.1,
                    w.2,
                    fmt_hz(w.0)
                )),
                e.worst
                    .map_or(r#"<td class="num">–</td>"#.into(), |w| signed(w.3)),
                outcome_cell(e.outcome, false)
            );
            if let Some(t) = &e.settle {
                let _ = write!(
                    s,
                    r#"<tr><td></td><td colspan="9" class="note">To settle: {}</td></tr>"#,
                    esc(t)
                );
            }
        }
        s += "</tbody></table>";
    }
    let bad = l.not_passing();
    if !bad.is_empty() {
        let _ = write!(
            s,
            r#"<p>{} of {} pairs judged do not pass{}:</p><table><thead><tr><th class="num">frequency (Hz)</th><th class="num">aggressor</th><th class="num">victim</th><th class="num">separation (dB)</th><th class="num">u95 (dB)</th><th class="num">limit (dB)</th><th class="num">margin (dB)</th><th>verdict</th></tr></thead><tbody>"#,
            bad.len(),
            l.pairs.len(),
            if bad.len() > MAX_ROWS {
                format!(" (the first {MAX_ROWS}; verdict.csv lists all)")
            } else {
                String::new()
            }
        );
        for p in bad.iter().take(MAX_ROWS) {
            let _ = write!(
                s,
                r#"<tr><td class="num">{}</td><td class="num">{}</td><td class="num">{}</td>{}<td class="num">{}</td>{}{}{}</tr>"#,
                fmt_hz(p.frequency_hz),
                p.aggressor,
                p.victim,
                sep(p.separation_db, p.floor_limited),
                p.separation_u95_db
                    .map_or("–".into(), |u| format!("{u:.2}")),
                num(p.limit_db, 1),
                signed(p.judgement.margin_db),
                outcome_cell(p.judgement.outcome, false)
            );
        }
        s += "</tbody></table>";
    } else if !l.pairs.is_empty() {
        let _ = write!(s, "<p>All {} pairs judged pass.</p>", l.pairs.len());
    }
    if !l.uncovered_frequencies_hz.is_empty() && !l.separation.is_empty() {
        let _ = write!(
            s,
            r#"<p class="note">No separation limit covers {}; those pairs are not judged.</p>"#,
            list_hz(&l.uncovered_frequencies_hz)
        );
    }
    if !l.channels.is_empty() {
        s += r#"<table><thead><tr><th class="num">channel</th><th>name</th><th>figure</th><th class="num">measured</th><th class="num">limit</th><th class="num">margin (dB)</th><th>verdict</th></tr></thead><tbody>"#;
        for c in &l.channels {
            let (fig, unit, rel) = match c.figure {
                ChannelFigure::NoiseFloor => ("noise floor", "dBFS", "≤"),
                ChannelFigure::DynamicRange => ("dynamic range", "dB", "≥"),
            };
            let _ = write!(
                s,
                r#"<tr><td class="num">{}</td><td>{}</td><td>{fig}</td><td class="num">{:.1} {unit}</td><td class="num">{rel} {} {unit}</td>{}{}</tr>"#,
                c.channel,
                esc(&r.channel_name(c.channel).unwrap_or_default()),
                c.measured,
                c.limit,
                signed(c.margin_db),
                outcome_cell(c.outcome, false)
            );
        }
        s += "</tbody></table>";
    }
    s
}

fn claims(c: &ClaimsReport, path: &str) -> String {
    let mut s = format!(
        r#"<h3>Data-sheet claims{} <span class="note">({})</span></h3>"#,
        c.product
            .as_deref()
            .map(|p| format!(": {}", esc(p)))
            .unwrap_or_default(),
        esc(path)
    );
    if let Some(src) = &c.source {
        let _ = write!(s, "<p>Source: {}.</p>", esc(src));
    }
    if !c.conditions.is_empty() || c.conditions_text.is_some() {
        s += r#"<table><thead><tr><th>condition</th><th>claimed</th><th>in this run</th><th>agrees</th></tr></thead><tbody>"#;
        for k in &c.conditions {
            let _ = write!(
                s,
                r#"<tr><td>{}</td><td>{}</td><td>{}</td>{}</tr>"#,
                esc(&k.what),
                esc(&k.claimed),
                esc(&k.measured),
                if k.matches {
                    r#"<td class="o-pass">yes</td>"#.to_string()
                } else {
                    r#"<td class="o-inconclusive">no: claims cannot be settled by this run</td>"#
                        .to_string()
                }
            );
        }
        if let Some(t) = &c.conditions_text {
            let _ = write!(
                s,
                r#"<tr><td>as stated</td><td colspan="3">{}</td></tr>"#,
                esc(t)
            );
        }
        s += "</tbody></table>";
    }
    s += r#"<table><thead><tr><th>claim</th><th>kind</th><th class="num">claimed</th><th class="num">measured</th><th>from</th><th class="num">margin (dB)</th><th>verdict</th></tr></thead><tbody>"#;
    for k in &c.claims {
        let _ = write!(
            s,
            r#"<tr><td>{}</td><td>{}</td><td class="num">{} {}</td><td class="num">{} {}</td><td>{}</td>{}{}</tr>"#,
            esc(&k.subject),
            k.kind,
            k.claimed,
            k.unit,
            esc(&k.measured_text),
            k.unit,
            esc(&k.basis),
            k.margin_db
                .map_or(r#"<td class="num">–</td>"#.into(), signed),
            outcome_cell(k.outcome, true)
        );
        if let Some(t) = &k.settle {
            let _ = write!(
                s,
                r#"<tr><td colspan="7" class="note">To settle: {}</td></tr>"#,
                esc(t)
            );
        }
    }
    s += "</tbody></table>";
    s
}

fn baseline(b: &BaselineReport) -> String {
    let mut s = format!(
        r#"<h3>Against the baseline <span class="note">({})</span></h3><p>Drift is now minus then, in dB. A pair counts as worse when it lost more than {} dB beyond the combined uncertainty of both runs, as undecided when its loss exceeds {} dB but not by more than that uncertainty. A noise floor counts as worse when it rose by more than {} dB.</p>"#,
        esc(&b.baseline_dir.display().to_string()),
        b.tolerance_db,
        b.tolerance_db,
        b.tolerance_db
    );
    for n in &b.notes {
        let _ = write!(s, r#"<p class="note">Note: {}</p>"#, esc(n));
    }
    s += r#"<table><thead><tr><th class="num">frequency (Hz)</th><th class="num">pairs</th><th class="num">within</th><th class="num">worse</th><th class="num">undecided</th><th class="num">median drift (dB)</th><th>largest loss</th><th class="num">loss (dB)</th></tr></thead><tbody>"#;
    for &(fc, fb) in &b.frequencies_hz {
        let at: Vec<_> = b.pairs.iter().filter(|p| p.frequency_hz == fc).collect();
        let count = |o| at.iter().filter(|p| p.outcome == o).count();
        let drifts: Vec<f64> = at.iter().map(|p| p.drift_db).collect();
        let worst = at.iter().min_by(|a, b| a.drift_db.total_cmp(&b.drift_db));
        let _ = write!(
            s,
            r#"<tr><td class="num">{}</td><td class="num">{}</td><td class="num">{}</td><td class="num">{}</td><td class="num">{}</td>{}<td>{}</td>{}</tr>"#,
            if fc == fb {
                fmt_hz(fc)
            } else {
                format!("{} (then {})", fmt_hz(fc), fmt_hz(fb))
            },
            at.len(),
            count(Outcome::Pass),
            count(Outcome::Fail),
            count(Outcome::Inconclusive),
            if drifts.is_empty() {
                r#"<td class="num">–</td>"#.into()
            } else {
                signed(median(&drifts))
            },
            worst.map_or("–".into(), |p| format!("{} → {}", p.aggressor, p.victim)),
            worst.map_or(r#"<td class="num">–</td>"#.into(), |p| signed(p.drift_db))
        );
    }
    s += "</tbody></table>";
    let bad = b.not_passing();
    if !bad.is_empty() {
        s += r#"<table><thead><tr><th class="num">frequency (Hz)</th><th class="num">aggressor</th><th class="num">victim</th><th class="num">now (dB)</th><th class="num">then (dB)</th><th class="num">drift (dB)</th><th class="num">u95 (dB)</th><th>verdict</th></tr></thead><tbody>"#;
        for p in bad.iter().take(MAX_ROWS) {
            let _ = write!(
                s,
                r#"<tr><td class="num">{}</td><td class="num">{}</td><td class="num">{}</td>{}{}{}{}{}</tr>"#,
                fmt_hz(p.frequency_hz),
                p.aggressor,
                p.victim,
                sep(p.current_db, p.current_floor_limited),
                sep(p.baseline_db, p.baseline_floor_limited),
                signed(p.drift_db),
                num(p.u95_db, 2),
                outcome_cell(p.outcome, false)
            );
        }
        s += "</tbody></table>";
    }
    s += r#"<table><thead><tr><th class="num">channel</th><th class="num">floor now (dBFS)</th><th class="num">then (dBFS)</th><th class="num">drift (dB)</th><th>verdict</th></tr></thead><tbody>"#;
    for f in &b.floors {
        let _ = write!(
            s,
            r#"<tr><td class="num">{}</td>{}{}{}{}</tr>"#,
            f.channel,
            num(f.current_dbfs, 1),
            num(f.baseline_dbfs, 1),
            signed(f.drift_db),
            outcome_cell(f.outcome, false)
        );
    }
    s += "</tbody></table>";
    s
}

pub fn heatmaps(r: &ResultsFolder) -> String {
    let range = figures::heat_range(r);
    let mut s = format!(
        r#"<section class="figures heatmaps" id="leakage"><h2>Leakage matrices</h2><p>One matrix per test frequency: rows are the driven channel (aggressor), columns the terminated one (victim), each cell the separation in dB. Brighter cells leak more. Hatched cells marked ≥ are lower bounds at the noise floor. The matrix is not symmetric: read both directions.</p>{}"#,
        figures::heat_legend(range)
    );
    for (i, f) in r.frequencies().into_iter().enumerate() {
        let at: Vec<_> = r.pairs.iter().filter(|p| p.frequency_hz == f).collect();
        let bounds = at.iter().filter(|p| p.floor_limited).count();
        let worst = at
            .iter()
            .min_by(|a, b| a.separation_db.total_cmp(&b.separation_db))
            .expect("pairs at a frequency of pairs.csv");
        let _ = write!(
            s,
            r#"<figure>{}<figcaption>Separation at {} Hz (dB). Smallest: {} → {}, {}{:.1} dB; {} of {} pairs are lower bounds.</figcaption></figure>"#,
            figures::heatmap(r, f, range, &format!("hm{i}")),
            fmt_hz(f),
            worst.aggressor,
            worst.victim,
            if worst.floor_limited { "≥ " } else { "" },
            worst.separation_db,
            bounds,
            at.len()
        );
    }
    s += "</section>\n";
    s
}

pub fn separation(r: &ResultsFolder, limits: Option<&Limits>) -> String {
    let worst = figures::worst_pairs(r, 4);
    format!(
        r#"<section id="separation"><h2>Separation against frequency</h2><figure>{}<figcaption>Every pair in grey; in colour the {} pairs with the smallest separation at any test frequency ({}). Logarithmic frequency axis.{}</figcaption></figure></section>
"#,
        figures::separation_chart(r, limits),
        worst.len(),
        worst
            .iter()
            .map(|(a, v)| format!("{a} → {v}"))
            .collect::<Vec<_>>()
            .join(", "),
        if limits.is_some() {
            " Dashed red lines: the separation limits, numbered as in the verdict table."
        } else {
            ""
        }
    )
}

pub fn floors(r: &ResultsFolder, v: Option<&Verdict>) -> String {
    let limits: Vec<(u32, f64)> = v
        .and_then(|v| v.limits.as_ref())
        .map(|l| {
            l.channels
                .iter()
                .filter(|c| c.figure == ChannelFigure::NoiseFloor)
                .map(|c| (c.channel, c.limit))
                .collect()
        })
        .unwrap_or_default();
    format!(
        r#"<section id="floors"><h2>Noise floor per channel</h2><figure>{}<figcaption>Broadband noise floor of each channel in dBFS (lower is better); dynamic range is the same figure with its sign turned.</figcaption></figure></section>
"#,
        figures::floors_chart(r, &limits)
    )
}

pub fn spectra(r: &ResultsFolder) -> Result<String, RunError> {
    let mut s = String::from(
        r#"<section id="spectra"><h2>Spectra of the aggressor and the strongest victim</h2>"#,
    );
    if r.spectra.is_empty() {
        s += "<p>This results folder holds no spectra.</p></section>\n";
        return Ok(s);
    }
    s += r#"<p>For each test frequency, the capture of the pair with the smallest separation: the driven channel and the victim that picked up most of the tone. Levels are the highest bin of each band of the plot, calibrated so that a sine reads its level in dBFS.</p>"#;
    for sref in &r.spectra {
        let rows = r.read_spectrum(sref)?;
        let nyquist = r
            .sample_rate_hz()
            .map(|f| f / 2.0)
            .or_else(|| rows.frequency_hz.last().copied())
            .unwrap_or(24_000.0);
        let _ = write!(
            s,
            r#"<figure>{}<figcaption>At {} Hz: aggressor channel {}, victim channel {}{}{}.</figcaption></figure>"#,
            figures::spectrum_chart(&rows, sref, nyquist),
            fmt_hz(sref.frequency_hz),
            sref.aggressor,
            sref.victim,
            sref.window
                .as_deref()
                .map(|w| format!("; {} window", esc(w)))
                .unwrap_or_default(),
            sref.bin_enbw_hz
                .map(|b| format!(", {b:.2} Hz noise bandwidth per bin"))
                .unwrap_or_default()
        );
    }
    s += "</section>\n";
    Ok(s)
}

/// The other figures of the same captures, as the results folder holds them.
pub fn more_figures(r: &ResultsFolder) -> String {
    if r.extra.is_empty() {
        return String::new();
    }
    let mut s =
        String::from(r#"<section id="more-figures"><h2>More figures from the same captures</h2>"#);
    for t in &r.extra {
        let caption = match t.file.as_str() {
            "channels.csv" => "Noise over the usable band and A-weighted (IEC 61672-1), with dynamic range: a full-scale sine over that noise, dB",
            "drive.csv" => "The driven channel of every capture: level (dBFS), SINAD, THD (harmonics 2 to the count given), SFDR (dB), ENOB (bits, IEEE Std 1241 form) and the stimulus clock against the converter's (ppm)",
            "coupling-matrix.csv" => "Dominant coupling per pair (rows: aggressor, columns: victim): rising about 20 dB per decade (capacitive or inductive; measuring again with the victims open tells them apart), flat (a shared impedance) or mixed",
            "common-drive.csv" => "One signal to every input: gain (dB), phase (°) and sampling skew (µs) against the reference channel, with expanded uncertainties",
            _ => "",
        };
        let _ = write!(
            s,
            "<h3>{}</h3><p class=\"note\">{} ({})</p><table class=\"data\"><thead><tr>",
            esc(&t.file),
            esc(caption),
            esc(&t.file)
        );
        for h in &t.header {
            let _ = write!(s, "<th>{}</th>", esc(&h.replace('_', " ")));
        }
        s += "</tr></thead><tbody>";
        for row in &t.rows {
            s += "<tr>";
            for v in row {
                let _ = write!(s, "<td>{}</td>", esc(v));
            }
            s += "</tr>";
        }
        s += "</tbody></table>";
    }
    s += "</section>\n";
    s
}

pub fn warnings(r: &ResultsFolder) -> String {
    let mut s = String::from(r#"<section id="warnings"><h2>Warnings from the analysis</h2>"#);
    if r.warnings.is_empty() {
        s += "<p>None: no clipping, no weak or impure aggressor, no spurious content on a victim, no tone far off its nominal frequency.</p>";
    } else {
        s += r#"<ul class="warnings">"#;
        for w in &r.warnings {
            let _ = write!(
                s,
                "<li><strong>{}</strong>{}: {}</li>",
                esc(&w.kind),
                w.capture
                    .as_deref()
                    .map(|c| format!(" ({})", esc(c)))
                    .unwrap_or_default(),
                esc(&w.message)
            );
        }
        s += "</ul>";
    }
    s += "</section>\n";
    s
}

pub fn footer(r: &ResultsFolder) -> String {
    format!(
        r#"<footer>Made by septum {} from {}. Levels in dBFS: 0 dBFS is the rms of a sine whose peak reaches full scale. u95: expanded uncertainty, k = 2 (about 95 %). A longer record lowers the detection limit by 10·log10 of the length ratio.</footer>
"#,
        env!("CARGO_PKG_VERSION"),
        esc(&r.dir.display().to_string())
    )
}
