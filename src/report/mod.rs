//! The HTML report: one self-contained file (inline CSS and SVG, no script,
//! nothing fetched) built from a results folder read back from disk and,
//! when asked, a verdict. It never re-analyses captures.

pub mod figures;
mod sections;
pub mod svg;

use crate::run::{ResultsFolder, RunError};
use crate::verdict::limits::Limits;
use crate::verdict::Verdict;
use svg::esc;

/// What a report is drawn from.
pub struct ReportInput<'a> {
    /// The results folder.
    pub results: &'a ResultsFolder,
    /// The verdict, when limits, claims or a baseline were given.
    pub verdict: Option<&'a Verdict>,
    /// The limits file's content, to draw limits into the figures.
    pub limits: Option<&'a Limits>,
    /// When the report is made, as shown ("2026-12-01 UTC").
    pub made: String,
}

/// The civil date (proleptic Gregorian, UTC) of a Unix time in seconds, as
/// "YYYY-MM-DD".
pub fn utc_date(unix_seconds: i64) -> String {
    // Days to civil date: the well-known era-based algorithm (H. Hinnant,
    // "chrono-Compatible Low-Level Date Algorithms").
    let z = unix_seconds.div_euclid(86_400) + 719_468;
    let era = z.div_euclid(146_097);
    let doe = z - era * 146_097;
    let yoe = (doe - doe / 1460 + doe / 36_524 - doe / 146_096) / 365;
    let doy = doe - (365 * yoe + yoe / 4 - yoe / 100);
    let mp = (5 * doy + 2) / 153;
    let d = doy - (153 * mp + 2) / 5 + 1;
    let m = if mp < 10 { mp + 3 } else { mp - 9 };
    let y = yoe + era * 400 + i64::from(m <= 2);
    format!("{y:04}-{m:02}-{d:02}")
}

/// Render the whole report page.
pub fn render(input: &ReportInput) -> Result<String, RunError> {
    let r = input.results;
    let label = r
        .front_end("label")
        .unwrap_or("front end (no label recorded)");
    let mut body = String::new();
    body += &sections::header(r, input.verdict);
    body += &sections::job(r);
    body += &sections::identity(r, &input.made);
    body += &sections::channels(r);
    body += sections::CAUTIONS;
    body += &sections::verdict(input.verdict, r);
    body += &sections::heatmaps(r);
    body += &sections::separation(r, input.limits);
    body += &sections::floors(r, input.verdict);
    body += &sections::spectra(r)?;
    body += &sections::more_figures(r);
    body += &sections::warnings(r);
    body += &sections::footer(r);
    Ok(format!(
        "<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\n<meta name=\"generator\" content=\"septum {}\">\n<title>Channel isolation: {}</title>\n<style>\n{}</style>\n</head>\n<body>\n{body}</body>\n</html>\n",
        env!("CARGO_PKG_VERSION"),
        esc(label),
        include_str!("style.css")
    ))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn civil_dates() {
        // Unix time 0 is 1970-01-01 (POSIX); 951 782 400 s is 2000-02-29
        // (computed: 11 016 days after the epoch, a leap day).
        assert_eq!(utc_date(0), "1970-01-01");
        assert_eq!(utc_date(951_782_400), "2000-02-29");
        assert_eq!(utc_date(-1), "1969-12-31");
    }
}
