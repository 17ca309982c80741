//! The two on-disk contracts: the run folder (manifest `run.json` plus
//! multichannel WAV captures) and the results folder (CSV and JSON).

pub mod manifest;
pub mod pairindex;
pub mod read;
pub mod results;
pub mod wav;

pub use manifest::{CaptureEntry, ChannelEntry, Drive, Manifest, RUN_FORMAT};
pub use pairindex::PairLookup;
pub use read::ResultsFolder;
pub use wav::{
    read_capture, read_frames, read_frames_reusing, write_capture, Capture, FrameCapture, WavFormat,
};

use std::path::PathBuf;
use thiserror::Error;

/// Errors reading or writing run and results folders. Every variant names
/// the file it concerns.
#[derive(Debug, Error)]
pub enum RunError {
    /// A file could not be opened, read or written.
    #[error("{path}: {source}")]
    Io {
        /// The file or folder.
        path: PathBuf,
        /// What the system said.
        source: std::io::Error,
    },
    /// The manifest is not valid JSON or does not follow the format.
    #[error("{path}: {message}")]
    Manifest {
        /// The manifest file.
        path: PathBuf,
        /// What is wrong.
        message: String,
    },
    /// A WAV capture is unreadable or does not match the manifest.
    #[error("{path}: {message}")]
    Wav {
        /// The capture file.
        path: PathBuf,
        /// What is wrong.
        message: String,
    },
    /// A results file read back is missing a part, malformed or inconsistent.
    #[error("{path}: {message}")]
    ResultsInput {
        /// The file or folder.
        path: PathBuf,
        /// What is wrong.
        message: String,
    },
    /// The results folder cannot be written as asked.
    #[error("{path}: {message}")]
    Results {
        /// The results folder.
        path: PathBuf,
        /// What is wrong.
        message: String,
    },
}

impl RunError {
    pub(crate) fn io(path: impl Into<PathBuf>, source: std::io::Error) -> Self {
        Self::Io {
            path: path.into(),
            source,
        }
    }
}
