//! septum: channel-isolation and leakage measurement for multichannel
//! acquisition front ends.
//!
//! The library is split by concern:
//!
//! - [`dsp`]: pure numerics (tone fits, frequency estimation, levels, windows).
//! - [`run`]: the run folder (manifest and WAV captures) and the results folder.
//! - [`analysis`]: steady-part finding, per-capture fits, separation, detection
//!   limits, noise floors, warnings and the leakage matrix.
//! - [`model`]: the simulated front end and its exact expected figures.
//! - [`report`]: the self-contained HTML report (inline SVG figures).
//! - [`verdict`]: pass limits, data-sheet claims and baselines judged on a
//!   results folder read back from disk.
//!
//! Conventions used everywhere: channels are numbered from 1; 0 dBFS is the
//! rms level of a sine whose peak reaches full scale (±1.0), so a sine of peak
//! amplitude `a` is `20·log10(a)` dBFS; separation is aggressor level minus
//! victim level in dB (positive, bigger is better).
//!
//! ```
//! use septum::dsp::{fit_tones, ToneModel, amplitude_to_dbfs};
//! let fs = 48_000.0;
//! let x: Vec<f32> = (0..4800)
//!     .map(|n| (0.5 * (2.0 * std::f64::consts::PI * 1000.0 * n as f64 / fs).cos()) as f32)
//!     .collect();
//! let model = ToneModel::new(1000.0, fs, x.len(), 5);
//! let fit = &fit_tones(&[&x], &model).unwrap()[0];
//! assert!((amplitude_to_dbfs(fit.fundamental()) - (-6.0206)).abs() < 1e-3);
//! ```
#![warn(missing_docs)]

pub mod analysis;
pub mod audio;
pub mod dsp;
pub mod model;
pub mod procedure;
pub mod report;
pub mod run;
mod tomltext;
pub mod verdict;
