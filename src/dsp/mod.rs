//! Pure numerics: levels in dBFS, the reference oscillator, least-squares tone
//! fits, frequency estimation, spectra and windows, test-frequency planning.
//!
//! Nothing here knows about files, devices or the command line: every function
//! takes sample slices (full scale ±1.0) and a sample rate and returns plain
//! values.

pub mod fit;
pub mod frames;
pub mod freqs;
pub mod kernels;
pub mod level;
pub mod linalg;
pub mod noise;
pub mod osc;
pub mod plans;
pub mod psd;
pub mod spectrum;
pub mod weighting;
pub mod window;

pub use fit::{estimate_frequency, fit_tones, FrequencyFit, ToneFit, ToneModel};
pub use level::{amplitude_to_dbfs, dbfs_to_amplitude, power_to_dbfs, rms_to_dbfs};
