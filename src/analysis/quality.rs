//! Figures of the driven channel and full-band checks: SINAD, THD, SFDR and
//! ENOB of the aggressor, the stimulus clock's offset from the converter's,
//! the jitter-limited SNR, and the strongest component above the usable band.

use crate::dsp::fit::{fit_tones, residual_into, ToneModel};
use crate::dsp::frames::Frames;
use crate::dsp::level::{enob_from_nad, jitter_snr_db};
use crate::dsp::window::{FLAT_TOP, HANN};
use crate::dsp::{amplitude_to_dbfs, rms_to_dbfs};
use serde::Serialize;
use std::f64::consts::PI;

/// Highest harmonic counted in THD.
pub const THD_HARMONICS: usize = 9;

/// The quality of the tone on the driven channel of one capture.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct DriveQuality {
    /// Nominal test frequency, Hz.
    pub frequency_hz: f64,
    /// Driven channel.
    pub channel: u32,
    /// Estimated tone frequency, Hz.
    pub tone_hz: f64,
    /// Tone level, dBFS.
    pub level_dbfs: f64,
    /// Signal to noise and distortion, dB.
    pub sinad_db: f64,
    /// Total harmonic distortion (harmonics 2 to `thd_harmonics`), dB re the
    /// tone; `None` when no harmonic lies below the Nyquist frequency.
    pub thd_db: Option<f64>,
    /// Highest harmonic counted in THD (those below the Nyquist frequency; 1: none).
    pub thd_harmonics: usize,
    /// Spurious-free dynamic range: tone over the largest other component, dB.
    pub sfdr_db: f64,
    /// Effective number of bits, IEEE Std 1241 form `log2(FSR/(NAD·√12))`.
    pub enob_bits: f64,
    /// Offset of the stimulus clock from the converter's, ppm (tone against nominal).
    pub clock_offset_ppm: f64,
    /// Expanded uncertainty (k = 2) of that offset, ppm.
    pub clock_offset_u95_ppm: f64,
    /// SNR a full-scale tone at this frequency would have with the stated jitter, dB.
    pub jitter_snr_db: f64,
}

/// Measure the driven channel `x` (the steady span) at the estimated tone.
pub fn drive_quality(
    x: &[f32],
    sample_rate_hz: f64,
    channel: u32,
    nominal_hz: f64,
    tone_hz: f64,
    jitter_s: f64,
) -> Option<DriveQuality> {
    let len = x.len();
    let model = ToneModel::new(tone_hz, sample_rate_hz, len, THD_HARMONICS);
    let fit = fit_tones(&[x], &model).ok()?.pop()?;
    let mut residual = Vec::new();
    let ss = residual_into(x, &fit, &model, &mut residual);
    let a1 = fit.fundamental();
    let noise_ms = ss / (len - model.params()) as f64;
    let harm: Vec<f64> = (1..model.terms).map(|k| fit.amplitude(k)).collect();
    let harm_ms: f64 = harm.iter().map(|a| a * a / 2.0).sum();
    let nad = (noise_ms + harm_ms).sqrt();
    let spur = harm
        .iter()
        .copied()
        .fold(largest_line(&residual, model.omega), f64::max);
    // Cramér-Rao bound of the frequency (Kay 1993): var = 12/((2π)²·η·L³), η = A²/(2σ²).
    let eta = a1 * a1 / (2.0 * noise_ms.max(1e-300));
    let sigma_f =
        (12.0 / ((2.0 * PI).powi(2) * eta * (len as f64).powi(3))).sqrt() * sample_rate_hz;
    Some(DriveQuality {
        frequency_hz: nominal_hz,
        channel,
        tone_hz,
        level_dbfs: amplitude_to_dbfs(a1),
        sinad_db: rms_to_dbfs(a1 / 2f64.sqrt()) - rms_to_dbfs(nad),
        thd_db: (model.terms > 1).then(|| 10.0 * (harm_ms / (a1 * a1 / 2.0)).max(1e-30).log10()),
        thd_harmonics: model.terms,
        sfdr_db: amplitude_to_dbfs(a1) - amplitude_to_dbfs(spur),
        enob_bits: enob_from_nad(nad),
        clock_offset_ppm: (tone_hz / nominal_hz - 1.0) * 1e6,
        clock_offset_u95_ppm: 2.0 * sigma_f / nominal_hz * 1e6,
        jitter_snr_db: jitter_snr_db(tone_hz, jitter_s),
    })
}

/// Peak amplitude of the largest line in `r` (Hann, sine-calibrated), away
/// from DC and from the fitted tone's bin (`omega` in radians per sample).
fn largest_line(r: &[f64], omega: f64) -> f64 {
    let r = &r[..crate::dsp::plans::smooth_len(r.len())];
    let len = r.len();
    let w = HANN.cached(len);
    let s1: f64 = w.iter().sum();
    let mut buf: Vec<f64> = r.iter().zip(w.iter()).map(|(a, b)| a * b).collect();
    let fft = crate::dsp::plans::real_forward(len);
    let mut out = fft.make_output_vec();
    if fft.process(&mut buf, &mut out).is_err() {
        return 0.0;
    }
    let tone_bin = omega / (2.0 * PI) * len as f64;
    out.iter()
        .enumerate()
        .filter(|(k, _)| *k > 3 && (*k as f64 - tone_bin).abs() > 3.0)
        .map(|(_, c)| c.norm_sqr())
        .fold(0.0, f64::max)
        .sqrt()
        * 2.0
        / s1
}

/// Per channel, the largest component above `edge_hz`, as a peak
/// amplitude: the highest sine-calibrated flat-top bin over up to four
/// 8192-frame segments spread over the whole capture.
///
/// A bin's estimate `2·|Σ w·x·e^{−jθn}| / Σw` cannot exceed
/// `2·Σ|w| / Σw` times the channel's largest sample (`peaks`). Channels
/// for which that bound is below `level` (the warning level) are not
/// transformed and get `None`.
pub fn out_of_band_peaks(
    frames: Frames,
    peaks: &[f32],
    level: f64,
    sample_rate_hz: f64,
    edge_hz: f64,
) -> Vec<Option<f64>> {
    let (len, nch) = (frames.len(), frames.channels());
    let seg = 8192.min(len);
    if seg < 64 {
        return vec![Some(0.0); nch];
    }
    let w = FLAT_TOP.cached(seg);
    let s1: f64 = w.iter().sum();
    let gain_bound = 2.0 * w.iter().map(|v| v.abs()).sum::<f64>() / s1;
    let mut peak: Vec<Option<f64>> = peaks
        .iter()
        .map(|p| (f64::from(*p) * gain_bound >= level).then_some(0.0))
        .collect();
    let wanted: Vec<usize> = (0..nch).filter(|c| peak[*c].is_some()).collect();
    if wanted.is_empty() {
        return peak;
    }
    let fft = crate::dsp::plans::real_forward(seg);
    let mut buf = fft.make_input_vec();
    let mut out = fft.make_output_vec();
    let first_bin = (edge_hz / sample_rate_hz * seg as f64).ceil() as usize + 5;
    let starts = 4.min(len / seg).max(1);
    for i in 0..starts {
        let start = if starts == 1 {
            0
        } else {
            i * (len - seg) / (starts - 1)
        };
        for &c in &wanted {
            let x = frames.channel_range(c, start..start + seg);
            let mean = x.iter().map(|v| f64::from(*v)).sum::<f64>() / seg as f64;
            for (b, (v, wv)) in buf.iter_mut().zip(x.iter().zip(w.iter())) {
                *b = (f64::from(*v) - mean) * wv;
            }
            if fft.process(&mut buf, &mut out).is_ok() {
                let p = out
                    .iter()
                    .skip(first_bin)
                    .map(|c| c.norm_sqr())
                    .fold(0.0, f64::max);
                peak[c] = peak[c].map(|q| q.max(2.0 * p.sqrt() / s1));
            }
        }
    }
    peak
}
