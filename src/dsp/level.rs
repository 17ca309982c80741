//! Level conventions.
//!
//! 0 dBFS is the rms level of a sine whose peak just reaches full scale
//! (the AES17 convention), with full scale ±1.0. So a sine of peak amplitude
//! `a` sits at `20·log10(a)` dBFS and any signal of rms `r` at
//! `20·log10(r·√2)` dBFS.

/// dBFS of a sine with peak amplitude `amplitude` (full scale 1.0).
pub fn amplitude_to_dbfs(amplitude: f64) -> f64 {
    20.0 * amplitude.log10()
}

/// Peak amplitude of a sine at `dbfs`.
pub fn dbfs_to_amplitude(dbfs: f64) -> f64 {
    10f64.powf(dbfs / 20.0)
}

/// dBFS of any signal with rms value `rms`.
pub fn rms_to_dbfs(rms: f64) -> f64 {
    20.0 * (rms * std::f64::consts::SQRT_2).log10()
}

/// dBFS of any signal with mean-square value `power`.
pub fn power_to_dbfs(power: f64) -> f64 {
    10.0 * (2.0 * power).log10()
}

/// rms value of a signal at `dbfs`.
pub fn dbfs_to_rms(dbfs: f64) -> f64 {
    10f64.powf(dbfs / 20.0) / std::f64::consts::SQRT_2
}

/// Jitter-limited SNR of a full-scale sine at `freq_hz` sampled with rms
/// jitter `jitter_s`: `−20·log10(2π·f·σt)` dB.
pub fn jitter_snr_db(freq_hz: f64, jitter_s: f64) -> f64 {
    -20.0 * (2.0 * std::f64::consts::PI * freq_hz * jitter_s).log10()
}

/// Effective number of bits from SINAD at full scale: `(SINAD − 1.76)/6.02`,
/// with the rounded constants data sheets use (the exact ones,
/// `20·log10(√1.5)` and `20·log10(2)`, differ by under 0.002 bits at 62 dB).
pub fn enob_from_sinad(sinad_db: f64) -> f64 {
    (sinad_db - 1.76) / 6.02
}

/// Effective number of bits from the rms noise and distortion `nad` (full
/// scale ±1.0, so a full-scale range of 2): `log2(FSR / (NAD·√12))`. This
/// form needs no correction for a tone below full scale.
pub fn enob_from_nad(nad: f64) -> f64 {
    (2.0 / (nad * 12f64.sqrt())).log2()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn conventions_agree() {
        assert!((amplitude_to_dbfs(1.0)).abs() < 1e-12);
        assert!((rms_to_dbfs(1.0 / 2f64.sqrt())).abs() < 1e-12);
        assert!((power_to_dbfs(0.5)).abs() < 1e-12);
        assert!((dbfs_to_rms(-20.0) - 0.1 / 2f64.sqrt()).abs() < 1e-15);
        assert!((dbfs_to_amplitude(amplitude_to_dbfs(0.0123)) - 0.0123).abs() < 1e-15);
    }
}
