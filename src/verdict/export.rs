//! Machine output of a verdict: `verdict.json` (everything, nested) and
//! `verdict.csv` (one row per check), both written atomically.

use super::{Outcome, Verdict};
use crate::run::results::write_file_atomic;
use crate::run::RunError;
use serde_json::{json, Map, Value};
use std::path::Path;

/// Identifies the layout of verdict.json.
pub const VERDICT_FORMAT: &str = "septum.verdict/1";
/// File name of the JSON verdict.
pub const VERDICT_JSON: &str = "verdict.json";
/// File name of the CSV verdict.
pub const VERDICT_CSV: &str = "verdict.csv";

/// The verdict.json document.
pub fn document(v: &Verdict) -> Value {
    let mut doc = Map::new();
    doc.insert("format".into(), json!(VERDICT_FORMAT));
    doc.insert(
        "generator".into(),
        json!(format!("septum {}", env!("CARGO_PKG_VERSION"))),
    );
    doc.insert("outcome".into(), json!(v.outcome));
    doc.insert(
        "units".into(),
        json!({
            "separation": "dB; a lower bound where floor_limited",
            "noise_floor": "dBFS",
            "dynamic_range": "dB, 0 dBFS full-scale sine minus the broadband noise floor",
            "margin_db": "dB on the good side of the limit, claim or tolerance (negative: wrong side)",
            "u95": "expanded uncertainty, k = 2",
        }),
    );
    if let Value::Object(o) = serde_json::to_value(v).expect("verdict serialises") {
        doc.extend(o);
    }
    Value::Object(doc)
}

/// The verdict.csv header.
pub const CSV_HEADER: [&str; 14] = [
    "section",
    "check",
    "frequency_hz",
    "aggressor",
    "victim",
    "channel",
    "measured",
    "unit",
    "lower_bound",
    "u95_db",
    "reference",
    "margin_db",
    "outcome",
    "note",
];

#[derive(Default)]
struct Row {
    section: &'static str,
    check: String,
    frequency_hz: Option<f64>,
    aggressor: Option<u32>,
    victim: Option<u32>,
    channel: Option<u32>,
    measured: Option<f64>,
    unit: &'static str,
    lower_bound: Option<bool>,
    u95_db: Option<f64>,
    reference: Option<f64>,
    margin_db: Option<f64>,
    outcome: Option<Outcome>,
    note: String,
}

impl Row {
    fn fields(self) -> Vec<String> {
        let n = |v: Option<f64>| v.map_or_else(String::new, |v| format!("{v:.4}"));
        let i = |v: Option<u32>| v.map_or_else(String::new, |v| v.to_string());
        vec![
            self.section.to_string(),
            self.check,
            self.frequency_hz
                .map_or_else(String::new, |f| f.to_string()),
            i(self.aggressor),
            i(self.victim),
            i(self.channel),
            n(self.measured),
            self.unit.to_string(),
            self.lower_bound.map_or_else(String::new, |b| b.to_string()),
            n(self.u95_db),
            n(self.reference),
            n(self.margin_db),
            self.outcome.map_or("", Outcome::word).to_string(),
            self.note,
        ]
    }
}

fn rows(v: &Verdict) -> Vec<Row> {
    let mut out = Vec::new();
    if let Some(l) = &v.limits {
        for s in &l.separation {
            out.push(Row {
                section: "limits",
                check: format!("separation-limit-{}", s.entry),
                unit: "dB",
                reference: Some(s.min_db),
                margin_db: s.worst.map(|w| w.3),
                outcome: Some(s.outcome),
                note: [Some(s.description.clone()), s.settle.clone()]
                    .into_iter()
                    .flatten()
                    .collect::<Vec<_>>()
                    .join("; "),
                ..Row::default()
            });
        }
        for p in &l.pairs {
            out.push(Row {
                section: "limits",
                check: "separation".into(),
                frequency_hz: Some(p.frequency_hz),
                aggressor: Some(p.aggressor),
                victim: Some(p.victim),
                measured: Some(p.separation_db),
                unit: "dB",
                lower_bound: Some(p.floor_limited),
                u95_db: p.separation_u95_db,
                reference: Some(p.limit_db),
                margin_db: Some(p.judgement.margin_db),
                outcome: Some(p.judgement.outcome),
                note: p.judgement.settle.clone().unwrap_or_default(),
                ..Row::default()
            });
        }
        for c in &l.channels {
            let (check, unit) = match c.figure {
                super::limits::ChannelFigure::NoiseFloor => ("noise-floor", "dBFS"),
                super::limits::ChannelFigure::DynamicRange => ("dynamic-range", "dB"),
            };
            out.push(Row {
                section: "limits",
                check: check.into(),
                channel: Some(c.channel),
                measured: Some(c.measured),
                unit,
                reference: Some(c.limit),
                margin_db: Some(c.margin_db),
                outcome: Some(c.outcome),
                ..Row::default()
            });
        }
    }
    if let Some(c) = &v.claims {
        for k in &c.claims {
            out.push(Row {
                section: "claims",
                check: format!("{} {}", k.kind, k.subject),
                measured: k.measured,
                unit: k.unit,
                reference: Some(k.claimed),
                margin_db: k.margin_db,
                outcome: Some(k.outcome),
                note: [Some(k.basis.clone()), k.settle.clone()]
                    .into_iter()
                    .flatten()
                    .collect::<Vec<_>>()
                    .join("; "),
                ..Row::default()
            });
        }
    }
    if let Some(b) = &v.baseline {
        for p in &b.pairs {
            out.push(Row {
                section: "baseline",
                check: "separation-drift".into(),
                frequency_hz: Some(p.frequency_hz),
                aggressor: Some(p.aggressor),
                victim: Some(p.victim),
                measured: Some(p.drift_db),
                unit: "dB",
                lower_bound: Some(p.current_floor_limited),
                u95_db: Some(p.u95_db),
                reference: Some(-b.tolerance_db),
                margin_db: Some(p.drift_db + b.tolerance_db),
                outcome: Some(p.outcome),
                note: format!(
                    "now {:.2}{} dB, baseline {:.2}{} dB{}",
                    p.current_db,
                    if p.current_floor_limited {
                        " (bound)"
                    } else {
                        ""
                    },
                    p.baseline_db,
                    if p.baseline_floor_limited {
                        " (bound)"
                    } else {
                        ""
                    },
                    p.settle
                        .as_ref()
                        .map(|s| format!("; {s}"))
                        .unwrap_or_default()
                ),
                ..Row::default()
            });
        }
        for f in &b.floors {
            out.push(Row {
                section: "baseline",
                check: "noise-floor-drift".into(),
                channel: Some(f.channel),
                measured: Some(f.drift_db),
                unit: "dB",
                reference: Some(b.tolerance_db),
                margin_db: Some(b.tolerance_db - f.drift_db),
                outcome: Some(f.outcome),
                note: format!(
                    "now {:.2} dBFS, baseline {:.2} dBFS",
                    f.current_dbfs, f.baseline_dbfs
                ),
                ..Row::default()
            });
        }
    }
    out.push(Row {
        section: "quality",
        check: "warnings".into(),
        outcome: Some(v.quality.outcome),
        note: v.quality.concerns.join(" | "),
        ..Row::default()
    });
    out.push(Row {
        section: "overall",
        check: "verdict".into(),
        outcome: Some(v.outcome),
        ..Row::default()
    });
    out
}

/// The verdict.csv text.
pub fn csv_text(v: &Verdict) -> String {
    let mut w = csv::Writer::from_writer(Vec::new());
    w.write_record(CSV_HEADER).expect("in memory");
    for r in rows(v) {
        w.write_record(r.fields()).expect("in memory");
    }
    String::from_utf8(w.into_inner().expect("in memory")).expect("UTF-8 fields")
}

/// Write verdict.json and verdict.csv into `dir`, each atomically.
pub fn write(v: &Verdict, dir: &Path) -> Result<(), RunError> {
    let json = serde_json::to_string_pretty(&document(v)).expect("verdict serialises") + "\n";
    write_file_atomic(&dir.join(VERDICT_JSON), json.as_bytes())?;
    write_file_atomic(&dir.join(VERDICT_CSV), csv_text(v).as_bytes())
}
