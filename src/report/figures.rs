//! The report's figures as inline SVG: leakage heat maps, separation against
//! frequency, noise floors per channel and spectra. Each takes figures read
//! from a results folder and returns one `<svg>` element.

use super::svg::{esc, sequential, Frame, Scale};
use crate::run::read::{SpectrumRef, SpectrumRows};
use crate::run::ResultsFolder;
use crate::verdict::limits::Limits;
use crate::verdict::select::fmt_hz;
use std::fmt::Write;

/// Line colours, dash patterns and marker shapes of highlighted series: each
/// series differs in all three, so none depends on colour vision.
const SERIES: [(&str, &str, Marker); 4] = [
    ("#1d3f8f", "", Marker::Circle),
    ("#c8741f", "7 4", Marker::Square),
    ("#8c2d69", "3 3", Marker::Triangle),
    ("#2f8f9f", "9 3 2 3", Marker::Diamond),
];

#[derive(Clone, Copy)]
enum Marker {
    Circle,
    Square,
    Triangle,
    Diamond,
}

fn marker(out: &mut String, m: Marker, x: f64, y: f64, colour: &str, hollow: bool) {
    let fill = if hollow { "#ffffff" } else { colour };
    let style = format!(r#"fill="{fill}" stroke="{colour}" stroke-width="1.5""#);
    let _ = match m {
        Marker::Circle => write!(out, r#"<circle cx="{x:.1}" cy="{y:.1}" r="4" {style}/>"#),
        Marker::Square => write!(
            out,
            r#"<rect x="{:.1}" y="{:.1}" width="7" height="7" {style}/>"#,
            x - 3.5,
            y - 3.5
        ),
        Marker::Triangle => write!(
            out,
            r#"<path d="M{x:.1} {:.1} L{:.1} {:.1} L{:.1} {:.1} Z" {style}/>"#,
            y - 4.5,
            x + 4.5,
            y + 3.5,
            x - 4.5,
            y + 3.5
        ),
        Marker::Diamond => write!(
            out,
            r#"<path d="M{x:.1} {:.1} L{:.1} {y:.1} L{x:.1} {:.1} L{:.1} {y:.1} Z" {style}/>"#,
            y - 5.0,
            x + 5.0,
            y + 5.0,
            x - 5.0
        ),
    };
    if hollow {
        // A lower bound: an arrow pointing up, towards where the truth lies.
        let _ = write!(
            out,
            r#"<path d="M{x:.1} {:.1} L{x:.1} {:.1} M{:.1} {:.1} L{x:.1} {:.1} L{:.1} {:.1}" fill="none" stroke="{colour}" stroke-width="1.2"/>"#,
            y - 6.0,
            y - 14.0,
            x - 3.0,
            y - 11.0,
            y - 14.0,
            x + 3.0,
            y - 11.0
        );
    }
}

/// The separation range shown by every heat map: whole tens around all pairs.
pub fn heat_range(r: &ResultsFolder) -> (f64, f64) {
    let (lo, hi) = r
        .pairs
        .iter()
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(a, b), p| {
            (a.min(p.separation_db), b.max(p.separation_db))
        });
    let lo = (lo / 10.0).floor() * 10.0;
    let hi = ((hi / 10.0).ceil() * 10.0).max(lo + 10.0);
    (lo, hi)
}

/// Colour position of a separation: the smallest separation (most leakage)
/// is brightest.
fn heat_t(v: f64, lo: f64, hi: f64) -> f64 {
    (hi - v) / (hi - lo)
}

/// The leakage matrix at `frequency_hz`: rows aggressors, columns victims,
/// separation in each cell; lower bounds hatched and marked "≥".
pub fn heatmap(r: &ResultsFolder, frequency_hz: f64, range: (f64, f64), id: &str) -> String {
    let lookup = r.pair_lookup();
    let n = r.channel_count() as u32;
    let aggressors: Vec<u32> = (1..=n)
        .filter(|&a| {
            r.pairs
                .iter()
                .any(|p| p.frequency_hz == frequency_hz && p.aggressor == a)
        })
        .collect();
    let cw = (600.0 / f64::from(n)).clamp(14.0, 70.0);
    let ch = if n <= 16 { 28.0 } else { cw.max(10.0) };
    let (left, top) = (78.0, 44.0);
    let width = left + cw * f64::from(n) + 12.0;
    let height = top + ch * aggressors.len() as f64 + 14.0;
    let font = if cw >= 56.0 {
        11.5
    } else if cw >= 36.0 {
        9.0
    } else {
        0.0
    };
    let mut s = String::new();
    let _ = write!(
        s,
        r##"<svg class="heatmap" viewBox="0 0 {width:.0} {height:.0}" width="{width:.0}" role="img" aria-labelledby="{id}-t" xmlns="http://www.w3.org/2000/svg"><title id="{id}-t">Separation in dB at {} Hz, rows aggressor, columns victim</title><defs><pattern id="{id}-hatch" width="6" height="6" patternUnits="userSpaceOnUse" patternTransform="rotate(45)"><line x1="0" y1="0" x2="0" y2="6" stroke="#ffffff" stroke-opacity="0.55" stroke-width="2"/></pattern></defs>"##,
        fmt_hz(frequency_hz)
    );
    let _ = write!(
        s,
        r#"<text x="{:.1}" y="14" class="axis-title" text-anchor="middle">victim channel</text><text x="4" y="{:.1}" class="axis-title">aggressor</text>"#,
        left + cw * f64::from(n) / 2.0,
        top - 8.0
    );
    for v in 1..=n {
        let _ = write!(
            s,
            r#"<text x="{:.1}" y="{:.1}" class="tick" text-anchor="middle">{v}</text>"#,
            left + cw * (f64::from(v) - 0.5),
            top - 8.0
        );
    }
    for (row, &a) in aggressors.iter().enumerate() {
        let y = top + ch * row as f64;
        let _ = write!(
            s,
            r#"<text x="{:.1}" y="{:.1}" class="tick" text-anchor="end">{a}</text>"#,
            left - 8.0,
            y + ch / 2.0 + 4.0
        );
        for v in 1..=n {
            let x = left + cw * f64::from(v - 1);
            let cell = |fill: &str, class: &str| {
                format!(
                    r#"<rect x="{x:.1}" y="{y:.1}" width="{cw:.1}" height="{ch:.1}" fill="{fill}" class="{class}"/>"#
                )
            };
            if v == a {
                s += &cell("#e9e9e6", "cell diag");
                continue;
            }
            let Some(p) = lookup.get(frequency_hz, a, v) else {
                s += &cell("#ffffff", "cell missing");
                continue;
            };
            let (colour, lightness) = sequential(heat_t(p.separation_db, range.0, range.1));
            let tip = match (p.floor_limited, p.separation_u95_db) {
                (true, _) => format!("at least {:.2} dB (noise floor)", p.separation_db),
                (false, Some(u)) => format!("{:.2} dB ± {u:.2} dB", p.separation_db),
                (false, None) => format!("{:.2} dB", p.separation_db),
            };
            let _ = write!(
                s,
                r#"<g><title>{a} → {v}: {tip}</title>{}"#,
                cell(
                    &colour.hex(),
                    if p.floor_limited {
                        "cell bound"
                    } else {
                        "cell"
                    }
                )
            );
            if p.floor_limited {
                let _ = write!(
                    s,
                    r#"<rect x="{x:.1}" y="{y:.1}" width="{cw:.1}" height="{ch:.1}" fill="url(#{id}-hatch)"/>"#
                );
            }
            if font > 0.0 {
                let ink = if lightness > 0.62 {
                    "#111111"
                } else {
                    "#ffffff"
                };
                let _ = write!(
                    s,
                    r#"<text x="{:.1}" y="{:.1}" fill="{ink}" font-size="{font}" text-anchor="middle" class="cell-value">{}{:.1}</text>"#,
                    x + cw / 2.0,
                    y + ch / 2.0 + font * 0.36,
                    if p.floor_limited { "≥" } else { "" },
                    p.separation_db
                );
            }
            s += "</g>";
        }
    }
    s += "</svg>";
    s
}

/// The colour key shared by the heat maps.
pub fn heat_legend(range: (f64, f64)) -> String {
    let (lo, hi) = range;
    let (w, left) = (420.0, 20.0);
    let mut s = String::from(
        r#"<svg class="legend" viewBox="0 0 480 58" width="480" role="img" aria-label="colour key: separation in dB" xmlns="http://www.w3.org/2000/svg">"#,
    );
    let steps = 84;
    for i in 0..steps {
        let v = lo + (hi - lo) * (i as f64 + 0.5) / steps as f64;
        let (c, _) = sequential(heat_t(v, lo, hi));
        let _ = write!(
            s,
            r#"<rect x="{:.2}" y="8" width="{:.2}" height="16" fill="{}"/>"#,
            left + w * i as f64 / steps as f64,
            w / steps as f64 + 0.3,
            c.hex()
        );
    }
    let x = Scale::linear(lo, hi, left, left + w);
    for t in super::svg::linear_ticks(lo, hi, 6) {
        let _ = write!(
            s,
            r##"<line x1="{0:.1}" y1="24" x2="{0:.1}" y2="29" stroke="#333"/><text x="{0:.1}" y="40" class="tick" text-anchor="middle">{t}</text>"##,
            x.px(t)
        );
    }
    let _ = write!(
        s,
        r#"<text x="{left}" y="54" class="tick">← more leakage (smaller separation, dB)</text><text x="{:.1}" y="54" class="tick" text-anchor="end">better isolated →</text></svg>"#,
        left + w
    );
    s
}

/// A pair's points: (frequency, separation, floor-limited), by frequency.
type Series = ((u32, u32), Vec<(f64, f64, bool)>);

fn pair_series(r: &ResultsFolder) -> Vec<Series> {
    let mut keys: Vec<(u32, u32)> = r.pairs.iter().map(|p| (p.aggressor, p.victim)).collect();
    keys.sort_unstable();
    keys.dedup();
    keys.into_iter()
        .map(|k| {
            let mut pts: Vec<(f64, f64, bool)> = r
                .pairs
                .iter()
                .filter(|p| (p.aggressor, p.victim) == k)
                .map(|p| (p.frequency_hz, p.separation_db, p.floor_limited))
                .collect();
            pts.sort_by(|a, b| a.0.total_cmp(&b.0));
            (k, pts)
        })
        .collect()
}

/// The pairs drawn in colour: the `k` with the smallest separation at any
/// frequency.
pub fn worst_pairs(r: &ResultsFolder, k: usize) -> Vec<(u32, u32)> {
    let mut s: Vec<((u32, u32), f64)> = pair_series(r)
        .into_iter()
        .map(|(key, pts)| (key, pts.iter().map(|p| p.1).fold(f64::INFINITY, f64::min)))
        .collect();
    s.sort_by(|a, b| a.1.total_cmp(&b.1).then(a.0.cmp(&b.0)));
    s.into_iter().take(k).map(|(key, _)| key).collect()
}

fn polyline(pts: &[(f64, f64)], x: &Scale, y: &Scale) -> String {
    pts.iter()
        .map(|(a, b)| format!("{:.1},{:.1}", x.px(*a), y.px(*b)))
        .collect::<Vec<_>>()
        .join(" ")
}

/// Separation against frequency for every pair (grey), the worst pairs in
/// colour, and the separation limits when given.
pub fn separation_chart(r: &ResultsFolder, limits: Option<&Limits>) -> String {
    let freqs = r.frequencies();
    let (fmin, fmax) = (freqs[0], freqs[freqs.len() - 1]);
    let (x0, x1) = (fmin / 2.0, fmax * 2.0);
    let mut lo = r
        .pairs
        .iter()
        .map(|p| p.separation_db)
        .fold(f64::INFINITY, f64::min);
    let mut hi = r
        .pairs
        .iter()
        .map(|p| p.separation_db)
        .fold(f64::NEG_INFINITY, f64::max);
    for l in limits.iter().flat_map(|l| &l.separation) {
        lo = lo.min(l.min_db);
        hi = hi.max(l.min_db);
    }
    let (lo, hi) = (
        ((lo - 5.0) / 10.0).floor() * 10.0,
        ((hi + 5.0) / 10.0).ceil() * 10.0,
    );
    let frame = Frame {
        left: 62.0,
        top: 14.0,
        right: 664.0,
        bottom: 300.0,
    };
    let x = Scale::log(x0, x1, frame.left, frame.right);
    let y = Scale::linear(lo, hi, frame.bottom, frame.top);
    let worst = worst_pairs(r, SERIES.len());
    let limit_row = limits.is_some_and(|l| !l.separation.is_empty());
    let height = if limit_row { 400.0 } else { 382.0 };
    let mut s = format!(
        r#"<svg class="chart separation-chart" viewBox="0 0 680 {height:.0}" role="img" aria-label="separation against frequency for every pair" xmlns="http://www.w3.org/2000/svg">"#
    );
    frame.draw(&mut s, &x, &y, "test frequency (Hz)", "separation (dB)");
    let series = pair_series(r);
    for (key, pts) in &series {
        if worst.contains(key) {
            continue;
        }
        let line: Vec<(f64, f64)> = pts.iter().map(|p| (p.0, p.1)).collect();
        let _ = write!(
            s,
            r#"<polyline points="{}" class="pair-line"><title>{} → {}</title></polyline>"#,
            polyline(&line, &x, &y),
            key.0,
            key.1
        );
    }
    if let Some(l) = limits {
        for (i, lim) in l.separation.iter().enumerate() {
            let (a, b) = lim.frequencies().range();
            let (a, b) = (a.max(x0), b.min(x1));
            if a >= b {
                continue;
            }
            let py = y.px(lim.min_db);
            let _ = write!(
                s,
                r#"<line x1="{:.1}" y1="{py:.1}" x2="{:.1}" y2="{py:.1}" class="limit-line"><title>limit {}: {}</title></line><text x="{:.1}" y="{:.1}" class="limit-label">{}</text>"#,
                x.px(a),
                x.px(b),
                i + 1,
                esc(&lim.describe()),
                x.px(b) + 3.0,
                py + 4.0,
                i + 1
            );
        }
    }
    for (i, key) in worst.iter().enumerate() {
        let (colour, dash, m) = SERIES[i];
        let pts = &series.iter().find(|(k, _)| k == key).expect("a series").1;
        let line: Vec<(f64, f64)> = pts.iter().map(|p| (p.0, p.1)).collect();
        let _ = write!(
            s,
            r#"<polyline points="{}" fill="none" stroke="{colour}" stroke-width="2.2" stroke-dasharray="{dash}" class="worst-line"/>"#,
            polyline(&line, &x, &y)
        );
        for p in pts {
            marker(&mut s, m, x.px(p.0), y.px(p.1), colour, p.2);
        }
    }
    // Legend below the plot.
    let ly = 354.0;
    let _ = write!(
        s,
        r#"<text x="{}" y="{ly}" class="tick">lowest:</text>"#,
        frame.left
    );
    for (i, key) in worst.iter().enumerate() {
        let (colour, dash, m) = SERIES[i];
        let lx = frame.left + 52.0 + 112.0 * i as f64;
        let _ = write!(
            s,
            r#"<line x1="{lx}" y1="{:.1}" x2="{:.1}" y2="{:.1}" stroke="{colour}" stroke-width="2.2" stroke-dasharray="{dash}"/>"#,
            ly - 4.0,
            lx + 30.0,
            ly - 4.0
        );
        marker(&mut s, m, lx + 15.0, ly - 4.0, colour, false);
        let _ = write!(
            s,
            r#"<text x="{:.1}" y="{ly}" class="tick">{} → {}</text>"#,
            lx + 36.0,
            key.0,
            key.1
        );
    }
    let _ = write!(
        s,
        r#"<text x="{}" y="{:.1}" class="tick">grey lines: the other pairs; hollow markers with an arrow: lower bounds at the noise floor</text>"#,
        frame.left,
        ly + 18.0
    );
    if limit_row {
        let _ = write!(
            s,
            r#"<line x1="{}" y1="{:.1}" x2="{:.1}" y2="{:.1}" class="limit-line"/><text x="{:.1}" y="{:.1}" class="tick">numbered dashed lines: the separation limits (minimum, dB) over the frequencies they cover</text>"#,
            frame.left,
            ly + 32.0,
            frame.left + 30.0,
            ly + 32.0,
            frame.left + 36.0,
            ly + 36.0
        );
    }
    s += "</svg>";
    s
}

/// Broadband noise floor per channel with the limit of each channel.
pub fn floors_chart(r: &ResultsFolder, limits: &[(u32, f64)]) -> String {
    let n = r.channel_count();
    let floors: Vec<f64> = r.channels.iter().map(|c| c.noise_floor_dbfs).collect();
    let mut lo = floors.iter().copied().fold(f64::INFINITY, f64::min);
    let mut hi = floors.iter().copied().fold(f64::NEG_INFINITY, f64::max);
    for &(_, l) in limits {
        lo = lo.min(l);
        hi = hi.max(l);
    }
    let (lo, hi) = (
        ((lo - 8.0) / 10.0).floor() * 10.0,
        ((hi + 6.0) / 10.0).ceil() * 10.0,
    );
    let frame = Frame {
        left: 62.0,
        top: 14.0,
        right: 664.0,
        bottom: 220.0,
    };
    let y = Scale::linear(lo, hi, frame.bottom, frame.top);
    let slot = (frame.right - frame.left) / n as f64;
    let mut s = String::from(
        r#"<svg class="chart floors-chart" viewBox="0 0 680 270" role="img" aria-label="noise floor per channel" xmlns="http://www.w3.org/2000/svg">"#,
    );
    let _ = write!(
        s,
        r#"<rect x="{}" y="{}" width="{}" height="{}" class="plot-bg"/>"#,
        frame.left,
        frame.top,
        frame.right - frame.left,
        frame.bottom - frame.top
    );
    for t in super::svg::linear_ticks(lo, hi, 6) {
        let py = y.px(t);
        let _ = write!(
            s,
            r#"<line x1="{}" y1="{py:.1}" x2="{}" y2="{py:.1}" class="grid"/><text x="{:.1}" y="{:.1}" class="tick" text-anchor="end">{t}</text>"#,
            frame.left,
            frame.right,
            frame.left - 5.0,
            py + 3.5
        );
    }
    let label_every = n.div_ceil(32);
    for (i, c) in r.channels.iter().enumerate() {
        let cx = frame.left + slot * (i as f64 + 0.5);
        let py = y.px(c.noise_floor_dbfs);
        let _ = write!(
            s,
            r##"<g><title>channel {}: {:.2} dBFS</title><line x1="{cx:.1}" y1="{}" x2="{cx:.1}" y2="{py:.1}" stroke="#1d3f8f" stroke-width="{:.1}" stroke-opacity="0.35"/><circle cx="{cx:.1}" cy="{py:.1}" r="4.5" fill="#1d3f8f"/></g>"##,
            c.channel,
            c.noise_floor_dbfs,
            frame.bottom,
            (slot * 0.35).min(14.0)
        );
        if n <= 16 {
            let _ = write!(
                s,
                r#"<text x="{cx:.1}" y="{:.1}" class="tick" text-anchor="middle">{:.1}</text>"#,
                py - 9.0,
                c.noise_floor_dbfs
            );
        }
        if i % label_every == 0 {
            let _ = write!(
                s,
                r#"<text x="{cx:.1}" y="{:.1}" class="tick" text-anchor="middle">{}</text>"#,
                frame.bottom + 14.0,
                c.channel
            );
        }
        if let Some(&(_, l)) = limits.iter().find(|(ch, _)| *ch == c.channel) {
            let ly = y.px(l);
            let _ = write!(
                s,
                r#"<line x1="{:.1}" y1="{ly:.1}" x2="{:.1}" y2="{ly:.1}" class="limit-line"><title>limit for channel {}: at most {l} dBFS</title></line>"#,
                cx - slot * 0.42,
                cx + slot * 0.42,
                c.channel
            );
        }
    }
    let _ = write!(
        s,
        r#"<rect x="{}" y="{}" width="{}" height="{}" class="plot-edge"/><text x="{:.1}" y="{:.1}" class="axis-title" text-anchor="middle">channel</text><text transform="translate(22 {:.1}) rotate(-90)" class="axis-title" text-anchor="middle">noise floor (dBFS)</text>"#,
        frame.left,
        frame.top,
        frame.right - frame.left,
        frame.bottom - frame.top,
        (frame.left + frame.right) / 2.0,
        frame.bottom + 32.0,
        (frame.top + frame.bottom) / 2.0
    );
    if !limits.is_empty() {
        let _ = write!(
            s,
            r#"<line x1="{}" y1="262" x2="{}" y2="262" class="limit-line"/><text x="{}" y="266" class="tick">dashed: the channel's noise floor limit (maximum); lower is better</text>"#,
            frame.left,
            frame.left + 30.0,
            frame.left + 36.0
        );
    }
    s += "</svg>";
    s
}

/// Spectra of the aggressor and the strongest victim at one test frequency.
pub fn spectrum_chart(rows: &SpectrumRows, sref: &SpectrumRef, nyquist_hz: f64) -> String {
    let x0 = 10.0;
    let x1 = nyquist_hz.max(x0 * 10.0);
    let visible = |f: f64| f >= x0 && f <= x1;
    let levels = rows
        .frequency_hz
        .iter()
        .zip(rows.aggressor_peak_dbfs.iter().zip(&rows.victim_peak_dbfs))
        .filter(|(f, _)| visible(**f))
        .flat_map(|(_, (a, v))| [*a, *v]);
    let lowest = levels.fold(0.0f64, f64::min);
    let lo = ((lowest - 5.0) / 20.0).floor() * 20.0;
    let frame = Frame {
        left: 62.0,
        top: 14.0,
        right: 664.0,
        bottom: 200.0,
    };
    let x = Scale::log(x0, x1, frame.left, frame.right);
    let y = Scale::linear(lo.max(-220.0), 0.0, frame.bottom, frame.top);
    let mut s = String::from(
        r#"<svg class="chart spectrum-chart" viewBox="0 0 680 262" role="img" aria-label="spectra of the aggressor and the strongest victim" xmlns="http://www.w3.org/2000/svg">"#,
    );
    frame.draw(&mut s, &x, &y, "frequency (Hz)", "level (dBFS)");
    let series = |vals: &[f64]| -> String {
        rows.frequency_hz
            .iter()
            .zip(vals)
            .filter(|(f, _)| visible(**f))
            .map(|(f, v)| format!("{:.1},{:.1}", x.px(*f), y.px(v.max(y.d0))))
            .collect::<Vec<_>>()
            .join(" ")
    };
    let fx = x.px(sref.frequency_hz);
    let _ = write!(
        s,
        r##"<line x1="{fx:.1}" y1="{}" x2="{fx:.1}" y2="{}" class="tone-line"/><polyline points="{}" fill="none" stroke="#1d3f8f" stroke-width="1.3"/><polyline points="{}" fill="none" stroke="#c8741f" stroke-width="1.3" stroke-dasharray="5 2"/>"##,
        frame.top,
        frame.bottom,
        series(&rows.aggressor_peak_dbfs),
        series(&rows.victim_peak_dbfs)
    );
    let _ = write!(
        s,
        r##"<line x1="62" y1="250" x2="92" y2="250" stroke="#1d3f8f" stroke-width="2"/><text x="98" y="254" class="tick">aggressor, channel {}</text><line x1="262" y1="250" x2="292" y2="250" stroke="#c8741f" stroke-width="2" stroke-dasharray="5 2"/><text x="298" y="254" class="tick">victim, channel {}</text><line x1="452" y1="250" x2="482" y2="250" class="tone-line"/><text x="488" y="254" class="tick">test tone {} Hz</text></svg>"##,
        sref.aggressor,
        sref.victim,
        fmt_hz(sref.frequency_hz)
    );
    s
}
