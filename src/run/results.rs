//! Writing a results folder atomically: everything is written into a
//! staging folder beside the target, then renamed into place, so a failed or
//! interrupted analysis leaves earlier results as they were.

use super::RunError;
use std::path::{Path, PathBuf};

/// A results folder being written.
#[derive(Debug)]
pub struct Staging {
    target: PathBuf,
    staging: PathBuf,
    done: bool,
}

fn normalise(path: &Path) -> PathBuf {
    let abs = if path.is_absolute() {
        path.to_path_buf()
    } else {
        std::env::current_dir().unwrap_or_default().join(path)
    };
    // Canonicalise the longest existing ancestor, keep the rest as written.
    let mut existing = abs.clone();
    let mut rest = Vec::new();
    while !existing.exists() {
        match (existing.file_name(), existing.parent()) {
            (Some(name), Some(parent)) => {
                rest.push(name.to_owned());
                existing = parent.to_path_buf();
            }
            _ => break,
        }
    }
    let mut out = existing.canonicalize().unwrap_or(existing);
    out.extend(rest.iter().rev());
    out
}

impl Staging {
    /// Prepare to write `target`. Refuses a target inside (or equal to) the
    /// run folder `protect`, and an existing non-empty target unless `force`.
    pub fn begin(target: &Path, protect: Option<&Path>, force: bool) -> Result<Self, RunError> {
        let refuse = |message: String| RunError::Results {
            path: target.to_path_buf(),
            message,
        };
        let abs = normalise(target);
        if let Some(run) = protect {
            let run = normalise(run);
            if abs.starts_with(&run) {
                return Err(refuse(format!(
                    "lies inside the run folder {}; results are never written into a run folder",
                    run.display()
                )));
            }
            if run.starts_with(&abs) {
                return Err(refuse(format!(
                    "holds the run folder {}; results may not replace or surround it",
                    run.display()
                )));
            }
        }
        if abs.exists() {
            if !abs.is_dir() {
                return Err(refuse("exists and is not a folder".into()));
            }
            let non_empty = std::fs::read_dir(&abs)
                .map_err(|e| RunError::io(target, e))?
                .next()
                .is_some();
            if non_empty && !force {
                return Err(refuse(
                    "is not empty; choose another folder or pass --force to replace it".into(),
                ));
            }
        }
        let parent = abs
            .parent()
            .ok_or_else(|| refuse("has no parent folder".into()))?;
        std::fs::create_dir_all(parent).map_err(|e| RunError::io(parent, e))?;
        let name = abs
            .file_name()
            .ok_or_else(|| refuse("has no folder name".into()))?;
        let staging = parent.join(format!(
            ".{}.partial-{}",
            name.to_string_lossy(),
            std::process::id()
        ));
        if staging.exists() {
            std::fs::remove_dir_all(&staging).map_err(|e| RunError::io(&staging, e))?;
        }
        std::fs::create_dir(&staging).map_err(|e| RunError::io(&staging, e))?;
        Ok(Self {
            target: abs,
            staging,
            done: false,
        })
    }

    /// The folder to write into now.
    pub fn path(&self) -> &Path {
        &self.staging
    }

    /// The final folder.
    pub fn target(&self) -> &Path {
        &self.target
    }

    /// Move the staged folder into place, replacing an earlier one.
    pub fn commit(mut self) -> Result<PathBuf, RunError> {
        let target = self.target.clone();
        if target.exists() {
            let old = self.staging.with_file_name(format!(
                ".{}.old-{}",
                target.file_name().unwrap_or_default().to_string_lossy(),
                std::process::id()
            ));
            std::fs::rename(&target, &old).map_err(|e| RunError::io(&target, e))?;
            if let Err(e) = std::fs::rename(&self.staging, &target) {
                // Put the earlier results back before reporting.
                let _ = std::fs::rename(&old, &target);
                return Err(RunError::io(&target, e));
            }
            let _ = std::fs::remove_dir_all(&old);
        } else {
            std::fs::rename(&self.staging, &target).map_err(|e| RunError::io(&target, e))?;
        }
        self.done = true;
        Ok(target)
    }
}

impl Drop for Staging {
    fn drop(&mut self) {
        if !self.done {
            let _ = std::fs::remove_dir_all(&self.staging);
        }
    }
}

/// Format a number with `decimals` decimals, or an empty field for `None`.
pub fn fmt_opt(v: Option<f64>, decimals: usize) -> String {
    v.map_or_else(String::new, |v| format!("{v:.decimals$}"))
}

/// The file name of the leakage matrix at a nominal frequency:
/// `leakage-997Hz.csv`, `leakage-996.826171875Hz.csv`.
pub fn leakage_file_name(frequency_hz: f64) -> String {
    format!("leakage-{frequency_hz}Hz.csv")
}

/// Write `bytes` to `path` atomically: into a temporary file beside it, then
/// renamed over it, so an earlier file survives any failure.
pub fn write_file_atomic(path: &Path, bytes: &[u8]) -> Result<(), RunError> {
    let name = path.file_name().ok_or_else(|| RunError::Results {
        path: path.to_path_buf(),
        message: "has no file name".into(),
    })?;
    if path.is_dir() {
        return Err(RunError::Results {
            path: path.to_path_buf(),
            message: "is a folder; a file name was expected".into(),
        });
    }
    let tmp = path.with_file_name(format!(
        ".{}.partial-{}",
        name.to_string_lossy(),
        std::process::id()
    ));
    let result = (|| {
        use std::io::Write;
        let mut f = std::fs::File::create(&tmp)?;
        f.write_all(bytes)?;
        f.sync_all()?;
        std::fs::rename(&tmp, path)
    })();
    result.map_err(|e| {
        let _ = std::fs::remove_file(&tmp);
        RunError::io(path, e)
    })
}
