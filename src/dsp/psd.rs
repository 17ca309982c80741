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
    let Some(mut welch) = Welch::new(x.len(), 1) else {
        return vec![0.0; bands.len()];
    };
    let seg = welch.segment();
    let mut buf = vec![0.0; seg];
    for start in welch.starts() {
        buf.copy_from_slice(&x[start..start + seg]);
        welch.add(0, &mut buf);
    }
    welch.band_powers(sample_rate_hz, bands).swap_remove(0)
}

/// Welch's estimate for several records of one length at once: the caller
/// hands in each segment ([`Welch::starts`]) of each record, the estimate
/// windows, transforms and accumulates it.
pub struct Welch {
    seg: usize,
    len: usize,
    window: std::rc::Rc<[f64]>,
    fft: std::sync::Arc<dyn realfft::RealToComplex<f64>>,
    out: Vec<rustfft::num_complex::Complex<f64>>,
    /// Per record: Σ over its segments of |X_k|².
    psd: Vec<Vec<f64>>,
    /// Segments added, per record.
    segments: Vec<usize>,
}

impl Welch {
    /// An estimate for `records` records of `len` samples each; `None` when
    /// `len` is below 16 samples.
    pub fn new(len: usize, records: usize) -> Option<Self> {
        if len < 16 {
            return None;
        }
        let seg = SEGMENT.min(len);
        let fft = super::plans::real_forward(seg);
        let out = fft.make_output_vec();
        Some(Self {
            seg,
            len,
            window: HANN.cached(seg),
            psd: vec![vec![0.0; out.len()]; records],
            segments: vec![0; records],
            fft,
            out,
        })
    }

    /// Samples per segment.
    pub fn segment(&self) -> usize {
        self.seg
    }

    /// First sample of each segment (Hann segments, half overlap).
    pub fn starts(&self) -> Vec<usize> {
        let (seg, len) = (self.seg, self.len);
        (0..)
            .map(|i| i * (seg / 2))
            .take_while(|s| s + seg <= len)
            .collect()
    }

    /// Add one segment of record `r`; `segment` is overwritten (windowed).
    ///
    /// # Panics
    /// When `segment` is not [`Welch::segment`] long or `r` is out of range.
    pub fn add(&mut self, r: usize, segment: &mut [f64]) {
        assert_eq!(segment.len(), self.seg, "segment length");
        for (v, w) in segment.iter_mut().zip(self.window.iter()) {
            *v *= w;
        }
        if self.fft.process(segment, &mut self.out).is_err() {
            return;
        }
        for (p, o) in self.psd[r].iter_mut().zip(&self.out) {
            *p += o.norm_sqr();
        }
        self.segments[r] += 1;
    }

    /// Mean-square power inside each band, per record.
    pub fn band_powers(&self, sample_rate_hz: f64, bands: &[Band]) -> Vec<Vec<f64>> {
        let s2: f64 = self.window.iter().map(|v| v * v).sum();
        self.psd
            .iter()
            .zip(&self.segments)
            .map(|(psd, n)| bands_of(psd, self.seg, *n, s2, sample_rate_hz, bands))
            .collect()
    }
}

/// Band powers from the summed |X_k|² of `segments` Hann segments of `seg`
/// samples with Σw² = `s2`.
fn bands_of(
    psd: &[f64],
    seg: usize,
    segments: usize,
    s2: f64,
    sample_rate_hz: f64,
    bands: &[Band],
) -> Vec<f64> {
    let bin_hz = sample_rate_hz / seg as f64;
    // One-sided density: |X|²·2/(fs·Σw²), the DC and Nyquist bins once.
    let last = psd.len() - 1;
    let density: Vec<f64> = psd
        .iter()
        .enumerate()
        .map(|(k, p)| {
            let one_sided = if k == 0 || (k == last && seg.is_multiple_of(2)) {
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
