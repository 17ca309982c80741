//! The streaming face of the front-end model: a processor that turns the
//! signals arriving at the inputs, block by block, into what the converter
//! delivers: coupling between inputs, gains, DC, white noise, mains hum,
//! latency and dithered quantisation. The simulated audio device runs it.
//!
//! Coupling from aggressor `a` into victim `v` is realised sample by sample
//! as `shared·x[n−1] + K·capacitive·(x[n] − x[n−2])/2` with
//! `K = fs/(2π·1 kHz)`, while the direct path is `x[n−1]`. Relative to the
//! direct path the coupling is therefore exactly
//! `H(f) = shared + j·capacitive·K·sin(2πf/fs)`, which is the model's ideal
//! `shared + j·capacitive·f/1 kHz` at low frequencies and falls below it
//! towards fs/2. [`coupling_at`] states that response, and [`expected_pairs`]
//! the separations a measurement through this processor should recover.
//! Jitter and the drive's harmonics are not simulated here (a played
//! stimulus is as clean as the output that plays it).

use super::truth::{expected_pairs_with, ExpectedPair};
use super::{Coupling, Resolved};
use crate::dsp::level::{dbfs_to_amplitude, dbfs_to_rms};
use rand::{Rng, SeedableRng};
use rand_distr::StandardNormal;
use std::f64::consts::PI;

/// The complex coupling `(re, im)` the streaming processor realises at
/// `freq_hz`, relative to the direct path.
pub fn coupling_at(c: &Coupling, freq_hz: f64, sample_rate_hz: f64) -> (f64, f64) {
    let k = sample_rate_hz / (2.0 * PI * 1000.0);
    (
        c.shared,
        c.capacitive * k * (2.0 * PI * freq_hz / sample_rate_hz).sin(),
    )
}

/// Expected separations of a measurement through the streaming processor.
pub fn expected_pairs(r: &Resolved) -> Vec<ExpectedPair> {
    let fs = f64::from(r.model.front_end.sample_rate_hz);
    expected_pairs_with(r, &|c, f| {
        let (re, im) = coupling_at(c, f, fs);
        re.hypot(im)
    })
}

/// Turns the signals at the inputs into converter output, one frame at a
/// time, with state carried across blocks. Every buffer is allocated in
/// [`StreamProcessor::new`]; [`StreamProcessor::process`] never allocates.
pub struct StreamProcessor {
    n: usize,
    gain: Vec<f64>,
    dc: Vec<f64>,
    sigma: Vec<f64>,
    hum_scale: Vec<f64>,
    hum: Vec<(f64, f64, f64)>,
    shared: Vec<f64>,
    cap: Vec<f64>,
    q: f64,
    /// Delay line per input, `depth` frames, interleaved.
    line: Vec<f64>,
    depth: usize,
    pos: usize,
    active: Vec<u32>,
    sample: u64,
    rng: rand::rngs::StdRng,
}

impl StreamProcessor {
    /// A processor for the resolved model with `latency` frames from the
    /// input connectors to the converter output (on top of the one-frame
    /// delay of the coupling filter).
    pub fn new(r: &Resolved, latency: usize, seed: u64) -> Self {
        let fe = &r.model.front_end;
        let fs = f64::from(fe.sample_rate_hz);
        let n = r.channels.len();
        let mut rng = rand::rngs::StdRng::seed_from_u64(seed);
        let k = fs / (2.0 * PI * 1000.0);
        let mut shared = vec![0.0; n * n];
        let mut cap = vec![0.0; n * n];
        for a in 0..n {
            for v in (0..n).filter(|v| *v != a) {
                shared[a * n + v] = r.coupling[a][v].shared;
                cap[a * n + v] = r.coupling[a][v].capacitive * k;
            }
        }
        let hum = r
            .model
            .hum
            .levels_dbfs
            .iter()
            .enumerate()
            .map(|(i, l)| {
                let f = r.model.hum.mains_hz * (i + 1) as f64;
                (
                    dbfs_to_amplitude(*l),
                    2.0 * PI * f / fs,
                    rng.random::<f64>() * 2.0 * PI,
                )
            })
            .filter(|(_, w, _)| *w < PI)
            .collect();
        let depth = latency + 3;
        Self {
            n,
            gain: r
                .channels
                .iter()
                .map(|c| 10f64.powf(c.gain_db / 20.0))
                .collect(),
            dc: r.channels.iter().map(|c| c.dc_offset).collect(),
            sigma: r
                .channels
                .iter()
                .map(|c| dbfs_to_rms(c.noise_dbfs))
                .collect(),
            hum_scale: r
                .channels
                .iter()
                .map(|c| dbfs_to_amplitude(c.hum_db))
                .collect(),
            hum,
            shared,
            cap,
            q: 2f64.powi(1 - fe.bits as i32),
            line: vec![0.0; depth * n],
            depth,
            pos: 0,
            active: vec![0; n],
            sample: 0,
            rng,
        }
    }

    /// Inputs (channels) of the front end.
    pub fn channels(&self) -> usize {
        self.n
    }

    /// Process one block. `at_inputs` holds, interleaved, the signal at each
    /// input connector (`channels()` per frame); `out` receives the
    /// converter's samples, interleaved, full scale ±1.0.
    ///
    /// # Panics
    /// When the two buffers differ in length or are not whole frames.
    #[allow(clippy::needless_range_loop)] // channel indices into several arrays at once
    pub fn process(&mut self, at_inputs: &[f32], out: &mut [f32]) {
        let n = self.n;
        assert_eq!(at_inputs.len(), out.len());
        assert_eq!(at_inputs.len() % n, 0);
        for (fin, fout) in at_inputs.chunks_exact(n).zip(out.chunks_exact_mut(n)) {
            self.pos = (self.pos + 1) % self.depth;
            let row = self.pos * n;
            for c in 0..n {
                let x = f64::from(fin[c]);
                self.line[row + c] = x;
                if x != 0.0 {
                    self.active[c] = self.depth as u32;
                } else if self.active[c] > 0 {
                    self.active[c] -= 1;
                }
            }
            let tap =
                |k: usize| ((self.pos + self.depth * 2 - (self.depth - 3) - k) % self.depth) * n;
            let (r0, r1, r2) = (tap(0), tap(1), tap(2));
            let t = self.sample as f64;
            let hum: f64 = self.hum.iter().map(|(a, w, p)| a * (w * t + p).cos()).sum();
            self.sample += 1;
            for v in 0..n {
                let mut y = self.line[r1 + v];
                for a in (0..n).filter(|a| *a != v && self.active[*a] > 0) {
                    let s = self.shared[a * n + v];
                    let k = self.cap[a * n + v];
                    y += s * self.line[r1 + a] + 0.5 * k * (self.line[r0 + a] - self.line[r2 + a]);
                }
                let noise: f64 = self.rng.sample(StandardNormal);
                let y =
                    y * self.gain[v] + self.dc[v] + hum * self.hum_scale[v] + self.sigma[v] * noise;
                let dither = self.rng.random::<f64>() - self.rng.random::<f64>();
                let code = (y / self.q + dither)
                    .round()
                    .clamp(-1.0 / self.q, 1.0 / self.q - 1.0);
                fout[v] = (code * self.q) as f32;
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::dsp::fit::{fit_tones, ToneModel};
    use crate::model::FrontEndModel;

    /// A quiet, hum-free model so the coupled tone stands far above noise.
    fn quiet() -> Resolved {
        let mut m = FrontEndModel::default_scenario();
        m.front_end.noise_dbfs = -200.0;
        m.front_end.noise_spread_db = 0.0;
        m.front_end.bits = 32;
        m.front_end.wav = crate::run::WavFormat::Int32;
        m.hum.levels_dbfs.clear();
        m.channel.retain(|c| c.noise_dbfs.is_none());
        m.resolve()
    }

    #[test]
    fn coupled_tone_follows_the_stated_response() {
        let r = quiet();
        let fs = 48_000.0;
        let n = r.channels.len();
        for &f in &[997.0, 12_003.0] {
            let mut p = StreamProcessor::new(&r, 5, 1);
            let len = 48_000;
            let mut at = vec![0.0f32; len * n];
            for i in 0..len {
                at[i * n + 3] = (0.5 * (2.0 * PI * f * i as f64 / fs).cos()) as f32;
            }
            let mut out = vec![0.0f32; len * n];
            for (a, o) in at.chunks(256 * n).zip(out.chunks_mut(256 * n)) {
                p.process(a, o);
            }
            let skip = 100;
            let ch = |c: usize| -> Vec<f32> { out.chunks(n).skip(skip).map(|fr| fr[c]).collect() };
            let model = ToneModel::new(f, fs, len - skip, 0);
            let (agg, vic) = (ch(3), ch(4));
            let fits = fit_tones(&[&agg, &vic], &model).unwrap();
            let g = |c: usize| 10f64.powf(r.channels[c].gain_db / 20.0);
            let (re, im) = coupling_at(&r.coupling[3][4], f, fs);
            let want = re.hypot(im) * g(4) / g(3);
            let got = fits[1].fundamental() / fits[0].fundamental();
            assert!((got / want - 1.0).abs() < 1e-3, "{f} Hz: {got} vs {want}");
        }
    }
}
