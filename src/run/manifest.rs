//! `run.json`: what was recorded, at which rate, on which channels, with
//! which drive. Unknown keys are kept and passed through to the results.

use super::RunError;
use serde::{Deserialize, Serialize};
use serde_json::{Map, Value};
use std::collections::BTreeSet;
use std::path::{Path, PathBuf};

/// The only run format this version reads and writes.
pub const RUN_FORMAT: &str = "septum.run/1";

/// One recorded channel.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ChannelEntry {
    /// Channel number, from 1, in WAV channel order.
    pub number: u32,
    /// Free-text name.
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub name: Option<String>,
    /// Free-text termination of the input when it is a victim ("short", "600 ohm" …).
    #[serde(default, skip_serializing_if = "Option::is_none")]
    pub termination: Option<String>,
    /// Keys this version does not know, kept.
    #[serde(flatten)]
    pub extra: Map<String, Value>,
}

/// The test tone of a capture.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct Drive {
    /// The driven (aggressor) channel, from 1.
    pub channel: u32,
    /// Nominal tone frequency in Hz.
    pub frequency_hz: f64,
    /// Nominal tone level in dBFS.
    pub level_dbfs: f64,
}

/// One capture file.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct CaptureEntry {
    /// WAV path relative to the run folder.
    pub file: String,
    /// The drive, or `None` for an idle capture (every input terminated).
    pub drive: Option<Drive>,
    /// Keys this version does not know, kept.
    #[serde(flatten)]
    pub extra: Map<String, Value>,
}

/// A capture in which one signal drove every input at once.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct CommonDriveEntry {
    /// WAV path relative to the run folder.
    pub file: String,
    /// Nominal tone frequency, Hz.
    pub frequency_hz: f64,
    /// Nominal tone level, dBFS.
    pub level_dbfs: f64,
    /// Channel the others are compared with.
    pub reference_channel: u32,
    /// Keys this version does not know, kept.
    #[serde(flatten)]
    pub extra: Map<String, Value>,
}

/// The manifest of a run folder.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Manifest {
    /// Always [`RUN_FORMAT`].
    pub format: String,
    /// Sample rate of every capture, Hz.
    pub sample_rate_hz: u32,
    /// The recorded channels in WAV order.
    pub channels: Vec<ChannelEntry>,
    /// The captures.
    pub captures: Vec<CaptureEntry>,
    /// Common-drive captures: one signal split to every input, for gain
    /// match and inter-channel skew. An additive key: readers that do not
    /// know it pass it through and are not misled.
    #[serde(default, skip_serializing_if = "Vec::is_empty")]
    pub common_drive: Vec<CommonDriveEntry>,
    /// Other keys (`front_end`, `created`, operator …), passed through.
    #[serde(flatten)]
    pub extra: Map<String, Value>,
}

impl Manifest {
    /// Read and validate `<run_dir>/run.json`.
    pub fn load(run_dir: &Path) -> Result<Self, RunError> {
        let path = run_dir.join("run.json");
        let text = std::fs::read_to_string(&path).map_err(|e| RunError::io(&path, e))?;
        Self::parse(&text, &path)
    }

    /// Parse and validate manifest text; `path` is used in messages.
    pub fn parse(text: &str, path: &Path) -> Result<Self, RunError> {
        let bad = |message: String| RunError::Manifest {
            path: path.to_path_buf(),
            message,
        };
        let value: Value =
            serde_json::from_str(text).map_err(|e| bad(format!("not valid JSON: {e}")))?;
        match value.get("format") {
            Some(Value::String(f)) if f == RUN_FORMAT => {}
            Some(Value::String(f)) => {
                return Err(bad(format!(
                    "unknown format \"{f}\" (this septum reads \"{RUN_FORMAT}\")"
                )))
            }
            Some(_) => return Err(bad("\"format\" must be a string".into())),
            None => {
                return Err(bad(format!(
                    "missing key \"format\" (expected \"{RUN_FORMAT}\")"
                )))
            }
        }
        let manifest: Manifest = serde_json::from_value(value)
            .map_err(|e| bad(format!("does not follow {RUN_FORMAT}: {e}")))?;
        manifest.validate().map_err(bad)?;
        Ok(manifest)
    }

    /// Check the rules of the format that the types alone do not enforce.
    pub fn validate(&self) -> Result<(), String> {
        if self.sample_rate_hz == 0 {
            return Err("sample_rate_hz must be positive".into());
        }
        if self.channels.is_empty() {
            return Err("no channels listed".into());
        }
        for (i, ch) in self.channels.iter().enumerate() {
            if ch.number as usize != i + 1 {
                return Err(format!(
                    "channels[{i}] has number {} but must be {} (numbers run from 1 in WAV channel order)",
                    ch.number,
                    i + 1
                ));
            }
        }
        if self.captures.is_empty() {
            return Err("no captures listed".into());
        }
        let nyquist = f64::from(self.sample_rate_hz) / 2.0;
        let mut files = BTreeSet::new();
        let mut drives = BTreeSet::new();
        for (i, cap) in self.captures.iter().enumerate() {
            if cap.file.trim().is_empty() {
                return Err(format!("captures[{i}].file is empty"));
            }
            if Path::new(&cap.file).is_absolute() || cap.file.split(['/', '\\']).any(|p| p == "..")
            {
                return Err(format!(
                    "captures[{i}].file \"{}\" must be a path inside the run folder",
                    cap.file
                ));
            }
            if !files.insert(cap.file.as_str()) {
                return Err(format!(
                    "captures[{i}].file \"{}\" is listed twice",
                    cap.file
                ));
            }
            if let Some(d) = cap.drive {
                if d.channel == 0 || d.channel as usize > self.channels.len() {
                    return Err(format!(
                        "captures[{i}].drive.channel {} is not a recorded channel (1 to {})",
                        d.channel,
                        self.channels.len()
                    ));
                }
                if !(d.frequency_hz > 0.0 && d.frequency_hz < nyquist) {
                    return Err(format!(
                        "captures[{i}].drive.frequency_hz {} must lie between 0 and {nyquist} Hz",
                        d.frequency_hz
                    ));
                }
                if !d.level_dbfs.is_finite() {
                    return Err(format!(
                        "captures[{i}].drive.level_dbfs must be a finite number"
                    ));
                }
                if !drives.insert((d.channel, d.frequency_hz.to_bits())) {
                    return Err(format!(
                        "captures[{i}] drives channel {} at {} Hz again; one capture per aggressor and frequency",
                        d.channel, d.frequency_hz
                    ));
                }
            }
        }
        for (i, c) in self.common_drive.iter().enumerate() {
            if c.file.trim().is_empty()
                || Path::new(&c.file).is_absolute()
                || c.file.split(['/', '\\']).any(|p| p == "..")
            {
                return Err(format!(
                    "common_drive[{i}].file \"{}\" must be a path inside the run folder",
                    c.file
                ));
            }
            if !files.insert(c.file.as_str()) {
                return Err(format!(
                    "common_drive[{i}].file \"{}\" is listed twice",
                    c.file
                ));
            }
            if c.reference_channel == 0 || c.reference_channel as usize > self.channels.len() {
                return Err(format!(
                    "common_drive[{i}].reference_channel {} is not a recorded channel (1 to {})",
                    c.reference_channel,
                    self.channels.len()
                ));
            }
            // Written so that a NaN frequency fails too.
            #[allow(clippy::nonminimal_bool)]
            if !(c.frequency_hz > 0.0 && c.frequency_hz < nyquist) || !c.level_dbfs.is_finite() {
                return Err(format!(
                    "common_drive[{i}]: frequency_hz must lie between 0 and {nyquist} Hz and level_dbfs be a number"
                ));
            }
        }
        Ok(())
    }

    /// Absolute path of a capture file.
    pub fn capture_path(&self, run_dir: &Path, capture: &CaptureEntry) -> PathBuf {
        run_dir.join(&capture.file)
    }

    /// Write the manifest as pretty JSON to `<run_dir>/run.json`.
    pub fn save(&self, run_dir: &Path) -> Result<(), RunError> {
        let path = run_dir.join("run.json");
        let text = serde_json::to_string_pretty(self).expect("manifest serialises");
        std::fs::write(&path, text + "\n").map_err(|e| RunError::io(&path, e))
    }

    /// The distinct nominal test frequencies, ascending.
    pub fn frequencies(&self) -> Vec<f64> {
        let mut f: Vec<f64> = self
            .captures
            .iter()
            .filter_map(|c| c.drive.map(|d| d.frequency_hz))
            .collect();
        f.sort_by(f64::total_cmp);
        f.dedup();
        f
    }
}
