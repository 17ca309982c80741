//! Finding the steady part of a drive capture: the span where the tone on the
//! aggressor holds its level, with latency silence and fade ramps left out.

use std::ops::Range;

/// Why no steady part was found.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum SteadyError {
    /// The capture is too short to judge.
    #[error("capture of {frames} frames is too short to find a steady tone")]
    TooShort {
        /// Frames in the capture.
        frames: usize,
    },
    /// The channel holds digital silence.
    #[error("silent, no tone")]
    Silent,
    /// No span of constant level long enough was found.
    #[error("no steady tone: the longest span of constant level is {found_s:.3} s, at least {needed_s:.3} s is needed")]
    NotSteady {
        /// Longest steady span found, seconds.
        found_s: f64,
        /// Shortest span accepted, seconds.
        needed_s: f64,
    },
}

/// Envelope blocks: whole periods of the nominal tone, at least 10 ms.
fn block_len(sample_rate_hz: f64, freq_hz: f64) -> usize {
    let period = sample_rate_hz / freq_hz;
    let periods = (0.01 * sample_rate_hz / period).ceil().max(1.0);
    (periods * period).round().max(8.0) as usize
}

/// The steady span of `x` (the aggressor channel) for a tone at `freq_hz`
/// (known to a fraction of a block's bandwidth, e.g. from
/// [`crate::dsp::fit::coarse_frequency`]): the longest run of envelope blocks
/// whose tone level lies within a tolerance of the steady level, less one
/// guard block at each end.
/// The span is at least 20 periods and 50 ms long.
pub fn steady_range(
    x: &[f32],
    sample_rate_hz: f64,
    freq_hz: f64,
) -> Result<Range<usize>, SteadyError> {
    let block = block_len(sample_rate_hz, freq_hz);
    let blocks = x.len() / block;
    if blocks < 5 {
        return Err(SteadyError::TooShort { frames: x.len() });
    }
    // The tone's envelope: each block mixed down by e^{−jωn} and summed, so
    // that noise outside the block's narrow band does not blur the level.
    let omega = 2.0 * std::f64::consts::PI * freq_hz / sample_rate_hz;
    let (ws, wc) = omega.sin_cos();
    let level: Vec<f64> = x
        .chunks_exact(block)
        .enumerate()
        .map(|(i, b)| {
            let (s0, c0) = (omega * (i * block) as f64).sin_cos();
            let (mut zr, mut zi) = (c0, -s0);
            let (mut re, mut im) = (0.0, 0.0);
            for v in b {
                let v = f64::from(*v);
                re += v * zr;
                im += v * zi;
                let nr = zr * wc + zi * ws;
                zi = zi * wc - zr * ws;
                zr = nr;
            }
            let amp2 = (re * re + im * im) * 4.0 / (block * block) as f64;
            10.0 * amp2.max(1e-30).log10()
        })
        .collect();
    let mut sorted = level.clone();
    sorted.sort_by(f64::total_cmp);
    // The tone's level: a high percentile, robust to a few spikes and to
    // silence and ramps taking up most of the capture.
    let reference = sorted[(blocks * 9) / 10];
    if reference < -250.0 {
        return Err(SteadyError::Silent);
    }
    // Spread of the loud blocks sets the tolerance (noise on a weak tone).
    let loud: Vec<f64> = level
        .iter()
        .copied()
        .filter(|l| (l - reference).abs() < 1.0)
        .collect();
    let mean = loud.iter().sum::<f64>() / loud.len() as f64;
    let spread = (loud.iter().map(|l| (l - mean).powi(2)).sum::<f64>() / loud.len() as f64).sqrt();
    let tolerance = (4.0 * spread).clamp(0.05, 1.0);
    let steady: Vec<bool> = level
        .iter()
        .map(|l| (l - reference).abs() <= tolerance)
        .collect();
    let (mut best, mut start) = (0..0, None);
    for (i, s) in steady.iter().chain(std::iter::once(&false)).enumerate() {
        match (s, start) {
            (true, None) => start = Some(i),
            (false, Some(b)) => {
                if i - b > best.len() {
                    best = b..i;
                }
                start = None;
            }
            _ => {}
        }
    }
    let guarded = (best.start + 1)..best.end.saturating_sub(1);
    let frames = guarded.len() * block;
    let needed = (20.0 * sample_rate_hz / freq_hz).max(0.05 * sample_rate_hz);
    if guarded.is_empty() || (frames as f64) < needed {
        return Err(SteadyError::NotSteady {
            found_s: frames as f64 / sample_rate_hz,
            needed_s: needed / sample_rate_hz,
        });
    }
    Ok(guarded.start * block..guarded.end * block)
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::f64::consts::PI;

    fn ramped(fs: f64, f: f64, latency: usize, ramp: usize, steady: usize) -> Vec<f32> {
        let total = latency + 2 * ramp + steady + latency;
        (0..total)
            .map(|n| {
                let env = if n < latency || n >= latency + 2 * ramp + steady {
                    0.0
                } else {
                    let k = n - latency;
                    if k < ramp {
                        0.5 * (1.0 - (PI * k as f64 / ramp as f64).cos())
                    } else if k >= ramp + steady {
                        0.5 * (1.0 - (PI * (2 * ramp + steady - k) as f64 / ramp as f64).cos())
                    } else {
                        1.0
                    }
                };
                (0.5 * env * (2.0 * PI * f * n as f64 / fs).sin()) as f32
            })
            .collect()
    }

    #[test]
    fn excludes_latency_and_ramps() {
        let fs = 48_000.0;
        let (lat, ramp, steady) = (4_000, 2_400, 48_000);
        for f in [31.0, 997.0, 15_013.0] {
            let x = ramped(fs, f, lat, ramp, steady);
            let r = steady_range(&x, fs, f).unwrap();
            // Inside the steady span, losing at most 30 ms of it.
            assert!(r.start >= lat + ramp, "{f}: {r:?}");
            assert!(r.end <= lat + ramp + steady, "{f}: {r:?}");
            assert!(
                r.len() as f64 >= steady as f64 - 0.03 * fs - 2.0 * fs / f,
                "{f}: {r:?}"
            );
        }
    }

    #[test]
    fn refuses_a_capture_without_tone_span() {
        let x = vec![0.0f32; 1000];
        assert!(steady_range(&x, 48_000.0, 1000.0).is_err());
    }
}
