//! Noise power in a band from a record: Welch's method (Hann segments, half
//! overlap), one-sided, optionally weighted.

use super::window::HANN;

/// Segment length of the Welch estimate (shorter records use one segment).
pub const SEGMENT: usize = 8192;

/// A frequency band, with an optional weighting (as a power factor of f).
#[derive(Debug, Clone, Copy)]
pub struct Band {
    /// Lower edge, Hz (inclusive).
    pub lo_hz: f64,
    /// Upper edge, Hz (inclusive).
    pub hi_hz: f64,
    /// Power weighting, e.g. [`super::weighting::a_weighting_power`].
    pub weighting: Option<fn(f64) -> f64>,
}

/// Mean-square power of `x` inside each band. `x` should have its DC removed.
pub fn band_powers(x: &[f64], sample_rate_hz: f64, bands: &[Band]) -> Vec<f64> {
    let len = x.len();
    if len < 16 || bands.is_empty() {
        return vec![0.0; bands.len()];
    }
    let seg = SEGMENT.min(len);
    let hop = seg / 2;
    let w = HANN.cached(seg);
    let s2: f64 = w.iter().map(|v| v * v).sum();
    let fft = super::plans::real_forward(seg);
    let mut buf = fft.make_input_vec();
    let mut out = fft.make_output_vec();
    let mut psd = vec![0.0; out.len()];
    let mut segments = 0usize;
    let mut start = 0;
    while start + seg <= len {
        for (b, (v, wv)) in buf
            .iter_mut()
            .zip(x[start..start + seg].iter().zip(w.iter()))
        {
            *b = v * wv;
        }
        if fft.process(&mut buf, &mut out).is_err() {
            break;
        }
        for (p, o) in psd.iter_mut().zip(&out) {
            *p += o.norm_sqr();
        }
        segments += 1;
        start += hop;
    }
    let bin_hz = sample_rate_hz / seg as f64;
    // One-sided density: |X|²·2/(fs·Σw²), the DC and Nyquist bins once.
    let last = psd.len() - 1;
    let density: Vec<f64> = psd
        .iter()
        .enumerate()
        .map(|(k, p)| {
            let one_sided = if k == 0 || (k == last && seg % 2 == 0) {
                1.0
            } else {
                2.0
            };
            p / segments.max(1) as f64 * one_sided / (sample_rate_hz * s2)
        })
        .collect();
    bands
        .iter()
        .map(|b| {
            // Bins k with lo_hz <= k·bin_hz <= hi_hz (the quotient gives the
            // edges; the products decide, as they would bin by bin).
            let inside = |k: usize| {
                let f = k as f64 * bin_hz;
                f >= b.lo_hz && f <= b.hi_hz
            };
            let mut first = (b.lo_hz / bin_hz).ceil().max(0.0) as usize;
            while first > 0 && inside(first - 1) {
                first -= 1;
            }
            while first < density.len() && !inside(first) && (first as f64) * bin_hz < b.lo_hz {
                first += 1;
            }
            let mut end = ((b.hi_hz / bin_hz).floor().max(0.0) as usize + 1).min(density.len());
            while end < density.len() && inside(end) {
                end += 1;
            }
            while end > first && !inside(end - 1) {
                end -= 1;
            }
            if first >= end {
                return 0.0;
            }
            match b.weighting {
                None => density[first..end].iter().sum::<f64>() * bin_hz,
                Some(wf) => {
                    let gains = weights(wf, bin_hz, density.len());
                    density[first..end]
                        .iter()
                        .zip(&gains[first..end])
                        .map(|(d, g)| d * g)
                        .sum::<f64>()
                        * bin_hz
                }
            }
        })
        .collect()
}

/// `wf` at every bin `k·bin_hz`, `k < bins`, kept per thread (the same few
/// weightings and segment lengths serve every channel).
fn weights(wf: fn(f64) -> f64, bin_hz: f64, bins: usize) -> std::rc::Rc<Vec<f64>> {
    use std::cell::RefCell;
    use std::collections::HashMap;
    type Key = (usize, u64, usize);
    thread_local! {
        static CACHE: RefCell<HashMap<Key, std::rc::Rc<Vec<f64>>>> = RefCell::new(HashMap::new());
    }
    let key = (wf as usize, bin_hz.to_bits(), bins);
    CACHE.with(|c| {
        c.borrow_mut()
            .entry(key)
            .or_insert_with(|| std::rc::Rc::new((0..bins).map(|k| wf(k as f64 * bin_hz)).collect()))
            .clone()
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use rand::{Rng, SeedableRng};
    use rand_distr::StandardNormal;

    #[test]
    fn white_noise_splits_by_bandwidth() {
        let mut rng = rand::rngs::StdRng::seed_from_u64(3);
        let x: Vec<f64> = (0..200_000)
            .map(|_| rng.sample::<f64, _>(StandardNormal))
            .collect();
        let fs = 48_000.0;
        let p = band_powers(
            &x,
            fs,
            &[
                Band {
                    lo_hz: 0.0,
                    hi_hz: fs / 2.0,
                    weighting: None,
                },
                Band {
                    lo_hz: 0.0,
                    hi_hz: fs / 2.56,
                    weighting: None,
                },
            ],
        );
        assert!((p[0] - 1.0).abs() < 0.02, "{}", p[0]);
        assert!((p[1] - 1.0 / 1.28).abs() < 0.02, "{}", p[1]);
    }
}
