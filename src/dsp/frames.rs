//! Interleaved multichannel frames, as a WAV file stores them: sample `c` of
//! frame `n` at `data[n·channels + c]`.
//!
//! The multichannel passes ([`crate::dsp::fit::fit_frames`],
//! [`crate::dsp::fit::residual_frames`]) work on this layout
//! directly, with [`LANES`] neighbouring channels side by side in one vector
//! register and the per-frame values (oscillator, window) shared by all of
//! them, so a capture never has to be deinterleaved.

use std::ops::Range;
use wide::f64x8;

/// Channels handled side by side by the multichannel kernels.
pub const LANES: usize = 8;

/// A borrowed block of interleaved frames.
#[derive(Debug, Clone, Copy)]
pub struct Frames<'a> {
    data: &'a [f32],
    channels: usize,
}

impl<'a> Frames<'a> {
    /// View `data` as frames of `channels` samples.
    ///
    /// # Panics
    /// When `channels` is 0 or `data` is not a whole number of frames.
    pub fn new(data: &'a [f32], channels: usize) -> Self {
        assert!(channels > 0, "frames need at least one channel");
        assert_eq!(data.len() % channels, 0, "data is not whole frames");
        Self { data, channels }
    }

    /// Samples per frame.
    pub fn channels(&self) -> usize {
        self.channels
    }

    /// Number of frames.
    pub fn len(&self) -> usize {
        self.data.len() / self.channels
    }

    /// Whether there are no frames.
    pub fn is_empty(&self) -> bool {
        self.data.is_empty()
    }

    /// The interleaved samples.
    pub fn data(&self) -> &'a [f32] {
        self.data
    }

    /// The frames in `range`.
    ///
    /// # Panics
    /// When `range` reaches past the last frame.
    pub fn slice(&self, range: Range<usize>) -> Frames<'a> {
        Frames {
            data: &self.data[range.start * self.channels..range.end * self.channels],
            channels: self.channels,
        }
    }

    /// Channel `c` (from 0) of every frame in `range`, copied out.
    pub fn channel_range(&self, c: usize, range: Range<usize>) -> Vec<f32> {
        assert!(c < self.channels, "channel {c} of {}", self.channels);
        self.slice(range)
            .data
            .chunks_exact(self.channels)
            .map(|row| row[c])
            .collect()
    }

    /// Channel `c` (from 0), copied out.
    pub fn channel(&self, c: usize) -> Vec<f32> {
        self.channel_range(c, 0..self.len())
    }

    /// Channels `LANES·g ..` of frame `n` widened to f64; lanes past the
    /// last channel are 0.
    #[inline(always)]
    pub(crate) fn lanes(&self, n: usize, g: usize) -> f64x8 {
        let first = g * LANES;
        let row = &self.data[n * self.channels..(n + 1) * self.channels];
        let mut x = [0.0f32; LANES];
        if first + LANES <= self.channels {
            x = row[first..first + LANES].try_into().unwrap();
        } else {
            x[..self.channels - first].copy_from_slice(&row[first..]);
        }
        f64x8::new(x.map(f64::from))
    }

    /// Ask the processor to bring these frames into its caches ahead of use
    /// (a hint; nothing on targets without a prefetch instruction).
    #[inline]
    pub(crate) fn prefetch(&self) {
        #[cfg(target_arch = "x86_64")]
        for line in self.data.chunks(16) {
            use std::arch::x86_64::{_mm_prefetch, _MM_HINT_T1};
            // SAFETY: a prefetch is only a hint; it reads nothing, cannot
            // fault, and the pointer is in bounds anyway.
            unsafe { _mm_prefetch::<_MM_HINT_T1>(line.as_ptr().cast()) };
        }
    }

    /// Groups of [`LANES`] channels (the last one may be partly empty).
    pub(crate) fn groups(&self) -> usize {
        self.channels.div_ceil(LANES)
    }
}

/// Interleave equally long channels into frames.
///
/// # Panics
/// When the channels differ in length or there are none.
pub fn interleave(channels: &[&[f32]]) -> Vec<f32> {
    let nch = channels.len();
    assert!(nch > 0, "no channels to interleave");
    let len = channels[0].len();
    assert!(
        channels.iter().all(|c| c.len() == len),
        "channels differ in length"
    );
    let mut out = vec![0.0; len * nch];
    for (c, x) in channels.iter().enumerate() {
        for (o, v) in out.iter_mut().skip(c).step_by(nch).zip(x.iter()) {
            *o = *v;
        }
    }
    out
}

/// Split frames into one vector per channel.
pub fn deinterleave(frames: Frames) -> Vec<Vec<f32>> {
    (0..frames.channels()).map(|c| frames.channel(c)).collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn interleave_round_trip_and_views() {
        let a: Vec<f32> = (0..7).map(|i| i as f32).collect();
        let b: Vec<f32> = (0..7).map(|i| -(i as f32)).collect();
        let c: Vec<f32> = (0..7).map(|i| 0.5 * i as f32).collect();
        let data = interleave(&[&a, &b, &c]);
        let f = Frames::new(&data, 3);
        assert_eq!(f.len(), 7);
        assert_eq!(deinterleave(f), vec![a.clone(), b.clone(), c.clone()]);
        assert_eq!(f.channel_range(1, 2..5), vec![-2.0, -3.0, -4.0]);
        assert_eq!(f.slice(3..4).data(), &[3.0, -3.0, 1.5]);
        assert_eq!(f.lanes(4, 0).to_array()[..4], [4.0, -4.0, 2.0, 0.0]);
    }
}
