//! Amplitude spectra for display: a 7-term Blackman-Harris window (sidelobes
//! near −180 dB, so a −140 dBFS floor shows beside a full-scale tone),
//! calibrated so a tone centred on a bin reads its own level in dBFS, and
//! condensed onto log-spaced frequency buckets.

use super::window::BLACKMAN_HARRIS_7;
use serde::Serialize;

/// A condensed spectrum.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Spectrum {
    /// Bucket centre frequencies (geometric), Hz.
    pub freq_hz: Vec<f64>,
    /// Highest bin level in each bucket, dBFS (sine-calibrated).
    pub peak_dbfs: Vec<f64>,
    /// Power mean of the bin levels in each bucket, dBFS (sine-calibrated).
    pub mean_dbfs: Vec<f64>,
    /// Equivalent noise bandwidth of one bin, Hz.
    pub bin_enbw_hz: f64,
}

/// Spectrum of `x` at `sample_rate_hz` on at most `buckets` log-spaced buckets
/// from the first bin to the Nyquist frequency. `None` for records under 64
/// samples.
pub fn log_spectrum(x: &[f32], sample_rate_hz: f64, buckets: usize) -> Option<Spectrum> {
    let x = &x[..super::plans::smooth_len(x.len())];
    let len = x.len();
    if len < 64 || buckets == 0 {
        return None;
    }
    let w = BLACKMAN_HARRIS_7.cached(len);
    let s1: f64 = w.iter().sum();
    let s2: f64 = w.iter().map(|v| v * v).sum();
    let mean = x.iter().map(|v| f64::from(*v)).sum::<f64>() / len as f64;
    let mut input: Vec<f64> = x
        .iter()
        .zip(w.iter())
        .map(|(v, w)| (f64::from(*v) - mean) * w)
        .collect();
    let fft = super::plans::real_forward(len);
    let mut out = fft.make_output_vec();
    fft.process(&mut input, &mut out).ok()?;
    let bin_hz = sample_rate_hz / len as f64;
    let scale = 2.0 / s1;
    let (f_lo, f_hi) = (bin_hz, sample_rate_hz / 2.0);
    let ratio = (f_hi / f_lo).ln() / buckets as f64;
    let mut spec = Spectrum {
        freq_hz: Vec::with_capacity(buckets),
        peak_dbfs: Vec::with_capacity(buckets),
        mean_dbfs: Vec::with_capacity(buckets),
        bin_enbw_hz: bin_hz * len as f64 * s2 / (s1 * s1),
    };
    let mut k = 1usize;
    for b in 0..buckets {
        let edge = f_lo * ((b + 1) as f64 * ratio).exp();
        let (mut peak, mut sum, mut n) = (0.0f64, 0.0, 0usize);
        while k < out.len() && (k as f64 * bin_hz) <= edge * (1.0 + 1e-12) {
            let p = out[k].norm_sqr() * scale * scale;
            peak = peak.max(p);
            sum += p;
            n += 1;
            k += 1;
        }
        if n == 0 {
            continue;
        }
        let centre = f_lo * ((b as f64 + 0.5) * ratio).exp();
        spec.freq_hz.push(centre);
        spec.peak_dbfs.push(10.0 * peak.max(1e-30).log10());
        spec.mean_dbfs
            .push(10.0 * (sum / n as f64).max(1e-30).log10());
    }
    Some(spec)
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::f64::consts::PI;

    #[test]
    fn a_bin_centred_tone_reads_its_level() {
        let (fs, len) = (48_000.0, 48_000);
        let x: Vec<f32> = (0..len)
            .map(|n| (0.1 * (2.0 * PI * 1000.0 * n as f64 / fs).sin()) as f32)
            .collect();
        let s = log_spectrum(&x, fs, 512).unwrap();
        let peak = s
            .peak_dbfs
            .iter()
            .cloned()
            .fold(f64::NEG_INFINITY, f64::max);
        assert!((peak + 20.0).abs() < 0.01, "{peak}");
        let i = s.peak_dbfs.iter().position(|p| *p == peak).unwrap();
        assert!((s.freq_hz[i] / 1000.0 - 1.0).abs() < 0.02);
        // Far from the tone the f32 rounding floor sits well below −150 dBFS.
        assert!(s.peak_dbfs[s.freq_hz.iter().position(|f| *f > 10_000.0).unwrap()] < -150.0);
    }
}
