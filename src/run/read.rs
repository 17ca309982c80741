//! Reading a results folder back: pairs.csv, channels.csv and summary.json
//! (and, on request, the spectra). The reader follows the contract of
//! RUN-FORMAT.md, not the analysis' own types, so that folders written by an
//! earlier version or by another program read the same way.

use super::RunError;
use serde::{Deserialize, Serialize};
use serde_json::{Map, Value};
use std::collections::{BTreeSet, HashMap};
use std::path::{Path, PathBuf};

/// One row of pairs.csv.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct PairRow {
    /// Nominal test frequency, Hz.
    pub frequency_hz: f64,
    /// Driven channel, from 1.
    pub aggressor: u32,
    /// Terminated channel, from 1.
    pub victim: u32,
    /// Separation, dB; a lower bound when `floor_limited`.
    pub separation_db: f64,
    /// Victim tone level (or its detection limit), dBFS.
    pub victim_dbfs: f64,
    /// The victim tone could not be told from noise.
    pub floor_limited: bool,
    /// Expanded uncertainty (k = 2) of `separation_db`, dB; `None` when
    /// floor-limited or when the writer gave none.
    pub separation_u95_db: Option<f64>,
    /// Aggressor tone level, dBFS, when given.
    pub aggressor_dbfs: Option<f64>,
    /// The victim's detection limit, dBFS, when given.
    pub detection_limit_dbfs: Option<f64>,
}

impl PairRow {
    /// Adjacent channels: |aggressor − victim| = 1.
    pub fn adjacent(&self) -> bool {
        self.aggressor.abs_diff(self.victim) == 1
    }
}

/// One row of channels.csv.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ChannelRow {
    /// Channel number, from 1.
    pub channel: u32,
    /// Broadband noise floor, dBFS.
    pub noise_floor_dbfs: f64,
    /// Upper edge of the floor's band, Hz, when given.
    pub floor_band_hz: Option<f64>,
    /// Free-text name, when given.
    pub name: Option<String>,
    /// Free-text termination, when given.
    pub termination: Option<String>,
}

/// A warning recorded in summary.json.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct WarningRow {
    /// Short code (`clipping`, `weak-aggressor`, …).
    pub kind: String,
    /// The capture concerned.
    #[serde(default)]
    pub capture: Option<String>,
    /// The channel concerned.
    #[serde(default)]
    pub channel: Option<u32>,
    /// A sentence for people.
    pub message: String,
}

/// Where the spectra of one test frequency are (summary.json `spectra`).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct SpectrumRef {
    /// Nominal test frequency, Hz.
    pub frequency_hz: f64,
    /// The CSV file in the results folder.
    pub file: String,
    /// The capture the spectra come from.
    #[serde(default)]
    pub capture: Option<String>,
    /// The driven channel.
    pub aggressor: u32,
    /// The victim with the strongest tone.
    pub victim: u32,
    /// Equivalent noise bandwidth of one bin, Hz.
    #[serde(default)]
    pub bin_enbw_hz: Option<f64>,
    /// Window used.
    #[serde(default)]
    pub window: Option<String>,
}

/// The columns of one `spectrum-<f>Hz.csv`, levels in dBFS.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct SpectrumRows {
    /// Bucket frequency, Hz.
    pub frequency_hz: Vec<f64>,
    /// Aggressor, highest bin level in the bucket.
    pub aggressor_peak_dbfs: Vec<f64>,
    /// Victim, highest bin level in the bucket.
    pub victim_peak_dbfs: Vec<f64>,
}

/// A results folder as read back.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ResultsFolder {
    /// The folder.
    pub dir: PathBuf,
    /// pairs.csv, in file order.
    pub pairs: Vec<PairRow>,
    /// channels.csv, by channel number (1, 2, …).
    pub channels: Vec<ChannelRow>,
    /// summary.json `run`: the manifest without its capture list.
    pub run: Map<String, Value>,
    /// summary.json `generator`, when given.
    pub generator: Option<String>,
    /// The nominal drive levels of the drive captures, dBFS.
    pub drive_levels_dbfs: Vec<f64>,
    /// summary.json `spectra`.
    pub spectra: Vec<SpectrumRef>,
    /// summary.json `warnings`.
    pub warnings: Vec<WarningRow>,
    /// The optional figure tables, as text, when present: `drive.csv`,
    /// `coupling-matrix.csv`, `common-drive.csv`, and the band-limited
    /// columns of channels.csv.
    pub extra: Vec<TextTable>,
}

/// A CSV file kept as text, for display.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct TextTable {
    /// The file name (`drive.csv`).
    pub file: String,
    /// Column names.
    pub header: Vec<String>,
    /// Rows of fields.
    pub rows: Vec<Vec<String>>,
}

/// Read `dir/file` as a text table, if it exists; a malformed file is an error.
fn text_table(
    dir: &Path,
    file: &str,
    keep: impl Fn(&str) -> bool,
) -> Result<Option<TextTable>, RunError> {
    let path = dir.join(file);
    if !path.exists() {
        return Ok(None);
    }
    let mut r = csv::Reader::from_path(&path).map_err(|e| bad(&path, e.to_string()))?;
    let header: Vec<String> = r
        .headers()
        .map_err(|e| bad(&path, e.to_string()))?
        .iter()
        .map(String::from)
        .collect();
    let cols: Vec<usize> = (0..header.len()).filter(|i| keep(&header[*i])).collect();
    let mut rows = Vec::new();
    for rec in r.records() {
        let rec = rec.map_err(|e| bad(&path, e.to_string()))?;
        rows.push(
            cols.iter()
                .map(|i| rec.get(*i).unwrap_or("").to_string())
                .collect(),
        );
    }
    Ok(Some(TextTable {
        file: file.to_string(),
        header: cols.iter().map(|i| header[*i].clone()).collect(),
        rows,
    }))
}

fn bad(path: &Path, message: impl Into<String>) -> RunError {
    RunError::ResultsInput {
        path: path.to_path_buf(),
        message: message.into(),
    }
}

/// A CSV file as rows of named text fields.
struct Table {
    path: PathBuf,
    columns: HashMap<String, usize>,
    rows: Vec<csv::StringRecord>,
}

impl Table {
    fn read(path: &Path, required: &[&str]) -> Result<Self, RunError> {
        let file = std::fs::File::open(path).map_err(|e| RunError::io(path, e))?;
        let mut r = csv::Reader::from_reader(file);
        let header = r
            .headers()
            .map_err(|e| bad(path, format!("unreadable header: {e}")))?
            .clone();
        let columns: HashMap<String, usize> = header
            .iter()
            .enumerate()
            .map(|(i, h)| (h.trim().to_string(), i))
            .collect();
        for need in required {
            if !columns.contains_key(*need) {
                return Err(bad(path, format!("missing column \"{need}\"")));
            }
        }
        let rows = r
            .records()
            .collect::<Result<Vec<_>, _>>()
            .map_err(|e| bad(path, format!("not valid CSV: {e}")))?;
        Ok(Self {
            path: path.to_path_buf(),
            columns,
            rows,
        })
    }

    fn text(&self, row: usize, column: &str) -> Option<&str> {
        let i = *self.columns.get(column)?;
        self.rows[row]
            .get(i)
            .map(str::trim)
            .filter(|s| !s.is_empty())
    }

    fn err(&self, row: usize, message: String) -> RunError {
        // Row numbers as a spreadsheet shows them: the header is line 1.
        bad(&self.path, format!("line {}: {message}", row + 2))
    }

    fn number(&self, row: usize, column: &str) -> Result<f64, RunError> {
        let t = self
            .text(row, column)
            .ok_or_else(|| self.err(row, format!("{column} is empty")))?;
        match t.parse::<f64>() {
            Ok(v) if v.is_finite() => Ok(v),
            _ => Err(self.err(row, format!("{column} \"{t}\" is not a finite number"))),
        }
    }

    fn opt_number(&self, row: usize, column: &str) -> Result<Option<f64>, RunError> {
        match self.text(row, column) {
            None => Ok(None),
            Some(_) => self.number(row, column).map(Some),
        }
    }

    fn channel(&self, row: usize, column: &str) -> Result<u32, RunError> {
        let t = self.text(row, column).unwrap_or("");
        match t.parse::<u32>() {
            Ok(v) if v >= 1 => Ok(v),
            _ => Err(self.err(
                row,
                format!("{column} \"{t}\" is not a channel number (1, 2, …)"),
            )),
        }
    }
}

fn read_pairs(path: &Path) -> Result<Vec<PairRow>, RunError> {
    let t = Table::read(
        path,
        &[
            "frequency_hz",
            "aggressor",
            "victim",
            "separation_db",
            "victim_dbfs",
            "floor_limited",
        ],
    )?;
    let mut seen = BTreeSet::new();
    let mut pairs = Vec::with_capacity(t.rows.len());
    for row in 0..t.rows.len() {
        let frequency_hz = t.number(row, "frequency_hz")?;
        if frequency_hz <= 0.0 {
            return Err(t.err(row, format!("frequency_hz {frequency_hz} must be positive")));
        }
        let aggressor = t.channel(row, "aggressor")?;
        let victim = t.channel(row, "victim")?;
        if aggressor == victim {
            return Err(t.err(row, format!("aggressor and victim are both {victim}")));
        }
        if !seen.insert((frequency_hz.to_bits(), aggressor, victim)) {
            return Err(t.err(
                row,
                format!("the pair {aggressor} → {victim} at {frequency_hz} Hz is listed twice"),
            ));
        }
        let floor_limited = match t.text(row, "floor_limited") {
            Some("true") => true,
            Some("false") => false,
            other => {
                return Err(t.err(
                    row,
                    format!(
                        "floor_limited \"{}\" must be true or false",
                        other.unwrap_or("")
                    ),
                ))
            }
        };
        let u95 = t.opt_number(row, "separation_u95_db")?;
        if u95.is_some_and(|u| u < 0.0) {
            return Err(t.err(row, "separation_u95_db must not be negative".into()));
        }
        pairs.push(PairRow {
            frequency_hz,
            aggressor,
            victim,
            separation_db: t.number(row, "separation_db")?,
            victim_dbfs: t.number(row, "victim_dbfs")?,
            floor_limited,
            separation_u95_db: if floor_limited { None } else { u95 },
            aggressor_dbfs: t.opt_number(row, "aggressor_dbfs")?,
            detection_limit_dbfs: t.opt_number(row, "detection_limit_dbfs")?,
        });
    }
    if pairs.is_empty() {
        return Err(bad(path, "holds no pairs"));
    }
    Ok(pairs)
}

fn read_channels(path: &Path) -> Result<Vec<ChannelRow>, RunError> {
    let t = Table::read(path, &["channel", "noise_floor_dbfs"])?;
    let mut out = Vec::with_capacity(t.rows.len());
    for row in 0..t.rows.len() {
        let channel = t.channel(row, "channel")?;
        if channel as usize != row + 1 {
            return Err(t.err(
                row,
                format!(
                    "channel {channel} where {} was expected (one row per channel, from 1 in order)",
                    row + 1
                ),
            ));
        }
        out.push(ChannelRow {
            channel,
            noise_floor_dbfs: t.number(row, "noise_floor_dbfs")?,
            floor_band_hz: t.opt_number(row, "floor_band_hz")?,
            name: t.text(row, "name").map(String::from),
            termination: t.text(row, "termination").map(String::from),
        });
    }
    if out.is_empty() {
        return Err(bad(path, "holds no channels"));
    }
    Ok(out)
}

/// The parts of summary.json the reader uses.
#[derive(Deserialize)]
struct SummaryDoc {
    #[serde(default)]
    generator: Option<String>,
    #[serde(default)]
    run: Map<String, Value>,
    #[serde(default)]
    captures: Vec<Value>,
    #[serde(default)]
    spectra: Vec<SpectrumRef>,
    #[serde(default)]
    warnings: Vec<WarningRow>,
}

/// The results format this reader understands (summary.json `format`).
pub const READABLE_RESULTS_FORMAT: &str = "septum.results/1";

fn read_summary(path: &Path) -> Result<SummaryDoc, RunError> {
    let text = std::fs::read_to_string(path).map_err(|e| RunError::io(path, e))?;
    let value: Value =
        serde_json::from_str(&text).map_err(|e| bad(path, format!("not valid JSON: {e}")))?;
    match value.get("format").and_then(Value::as_str) {
        Some(READABLE_RESULTS_FORMAT) => {}
        Some(f) => {
            return Err(bad(
                path,
                format!("unknown format \"{f}\" (this septum reads \"{READABLE_RESULTS_FORMAT}\")"),
            ))
        }
        None => {
            return Err(bad(
                path,
                format!("missing \"format\" (expected \"{READABLE_RESULTS_FORMAT}\")"),
            ))
        }
    }
    serde_json::from_value(value).map_err(|e| bad(path, format!("unexpected content: {e}")))
}

impl ResultsFolder {
    /// Read and cross-check `<dir>/pairs.csv`, `channels.csv` and
    /// `summary.json`.
    pub fn load(dir: &Path) -> Result<Self, RunError> {
        if !dir.is_dir() {
            return Err(bad(dir, "is not a results folder (no such folder)"));
        }
        let pairs_path = dir.join("pairs.csv");
        let pairs = read_pairs(&pairs_path)?;
        let channels = read_channels(&dir.join("channels.csv"))?;
        let summary = read_summary(&dir.join("summary.json"))?;
        let n = channels.len() as u32;
        if let Some(p) = pairs.iter().find(|p| p.aggressor > n || p.victim > n) {
            return Err(bad(
                &pairs_path,
                format!(
                    "the pair {} → {} names a channel beyond the {n} of channels.csv",
                    p.aggressor, p.victim
                ),
            ));
        }
        let drive_levels_dbfs = summary
            .captures
            .iter()
            .filter_map(|c| c.get("drive")?.get("level_dbfs")?.as_f64())
            .collect();
        Ok(Self {
            dir: dir.to_path_buf(),
            pairs,
            channels,
            run: summary.run,
            generator: summary.generator,
            drive_levels_dbfs,
            spectra: summary.spectra,
            extra: [
                text_table(dir, "channels.csv", |h| {
                    h == "channel"
                        || h.starts_with("noise_0Hz_")
                        || h.starts_with("noise_a_weighted")
                        || h.starts_with("dynamic_range")
                })?,
                text_table(dir, "drive.csv", |h| h != "tone_hz" && h != "jitter_snr_db")?,
                text_table(dir, "coupling-matrix.csv", |_| true)?,
                text_table(dir, "common-drive.csv", |h| {
                    h != "capture" && h != "tone_hz"
                })?,
            ]
            .into_iter()
            .flatten()
            .filter(|t| t.header.len() > 1)
            .collect(),
            warnings: summary.warnings,
        })
    }

    /// Number of channels (rows of channels.csv).
    pub fn channel_count(&self) -> usize {
        self.channels.len()
    }

    /// The distinct nominal test frequencies of pairs.csv, ascending.
    pub fn frequencies(&self) -> Vec<f64> {
        let mut f: Vec<f64> = self.pairs.iter().map(|p| p.frequency_hz).collect();
        f.sort_by(f64::total_cmp);
        f.dedup();
        f
    }

    /// The pairs indexed by (frequency, aggressor, victim), for many lookups.
    pub fn pair_lookup(&self) -> super::PairLookup<'_, PairRow> {
        super::PairLookup::new(&self.pairs, |p| (p.frequency_hz, p.aggressor, p.victim))
    }

    /// The pair at (frequency, aggressor, victim).
    pub fn pair(&self, frequency_hz: f64, aggressor: u32, victim: u32) -> Option<&PairRow> {
        self.pairs.iter().find(|p| {
            p.frequency_hz == frequency_hz && p.aggressor == aggressor && p.victim == victim
        })
    }

    /// A text field of summary.json `run.front_end` (`label`, `serial`, `notes`).
    pub fn front_end(&self, key: &str) -> Option<&str> {
        self.run.get("front_end")?.get(key)?.as_str()
    }

    /// The sample rate of the run, Hz, when recorded.
    pub fn sample_rate_hz(&self) -> Option<f64> {
        self.run.get("sample_rate_hz")?.as_f64()
    }

    /// A channel's termination: channels.csv, else summary.json's run.
    pub fn termination(&self, channel: u32) -> Option<String> {
        let row = self.channels.get(channel as usize - 1)?;
        row.termination.clone().or_else(|| {
            self.run
                .get("channels")?
                .as_array()?
                .get(channel as usize - 1)?
                .get("termination")?
                .as_str()
                .map(String::from)
        })
    }

    /// A channel's name: channels.csv, else summary.json's run.
    pub fn channel_name(&self, channel: u32) -> Option<String> {
        let row = self.channels.get(channel as usize - 1)?;
        row.name.clone().or_else(|| {
            self.run
                .get("channels")?
                .as_array()?
                .get(channel as usize - 1)?
                .get("name")?
                .as_str()
                .map(String::from)
        })
    }

    /// Read the spectra named by `r` (a file of this folder).
    pub fn read_spectrum(&self, r: &SpectrumRef) -> Result<SpectrumRows, RunError> {
        if Path::new(&r.file).components().count() != 1 {
            return Err(bad(
                &self.dir.join("summary.json"),
                format!(
                    "spectrum file \"{}\" is not a file name in the folder",
                    r.file
                ),
            ));
        }
        let path = self.dir.join(&r.file);
        let t = Table::read(
            &path,
            &["frequency_hz", "aggressor_peak_dbfs", "victim_peak_dbfs"],
        )?;
        let mut s = SpectrumRows::default();
        for row in 0..t.rows.len() {
            s.frequency_hz.push(t.number(row, "frequency_hz")?);
            s.aggressor_peak_dbfs
                .push(t.number(row, "aggressor_peak_dbfs")?);
            s.victim_peak_dbfs.push(t.number(row, "victim_peak_dbfs")?);
        }
        Ok(s)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn folder(pairs: &str, channels: &str) -> tempfile::TempDir {
        let d = tempfile::tempdir().unwrap();
        std::fs::write(d.path().join("pairs.csv"), pairs).unwrap();
        std::fs::write(d.path().join("channels.csv"), channels).unwrap();
        std::fs::write(
            d.path().join("summary.json"),
            r#"{"format":"septum.results/1","run":{"front_end":{"label":"L"}}}"#,
        )
        .unwrap();
        d
    }

    const HEAD: &str = "frequency_hz,aggressor,victim,separation_db,victim_dbfs,floor_limited\n";

    #[test]
    fn reads_minimal_folder() {
        let d = folder(
            &format!("{HEAD}1000,1,2,90.5,-91.5,false\n1000,2,1,120,-121,true\n"),
            "channel,noise_floor_dbfs\n1,-110\n2,-111.5\n",
        );
        let r = ResultsFolder::load(d.path()).unwrap();
        assert_eq!(r.pairs.len(), 2);
        assert!(r.pairs[1].floor_limited && r.pairs[0].separation_u95_db.is_none());
        assert_eq!(r.channel_count(), 2);
        assert_eq!(r.front_end("label"), Some("L"));
        assert_eq!(r.frequencies(), vec![1000.0]);
    }

    #[test]
    fn names_file_line_and_problem() {
        let d = folder(
            &format!("{HEAD}1000,1,2,abc,-91.5,false\n"),
            "channel,noise_floor_dbfs\n1,-110\n2,-111\n",
        );
        let e = ResultsFolder::load(d.path()).unwrap_err().to_string();
        assert!(
            e.contains("pairs.csv: line 2: separation_db \"abc\""),
            "{e}"
        );
        let d = folder(
            &format!("{HEAD}1000,1,3,90,-91.5,false\n"),
            "channel,noise_floor_dbfs\n1,-110\n2,-111\n",
        );
        let e = ResultsFolder::load(d.path()).unwrap_err().to_string();
        assert!(e.contains("beyond the 2 of channels.csv"), "{e}");
        let d = folder(
            "frequency_hz,aggressor\n",
            "channel,noise_floor_dbfs\n1,-1\n",
        );
        let e = ResultsFolder::load(d.path()).unwrap_err().to_string();
        assert!(e.contains("missing column \"victim\""), "{e}");
    }
}
