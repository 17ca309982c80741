//! FFT plans shared per thread: planning a length computes its twiddle
//! factors (and, for lengths with large prime factors, a whole Bluestein
//! set-up), so plans are made once per length and thread and reused.

use realfft::{RealFftPlanner, RealToComplex};
use rustfft::{Fft, FftPlanner};
use std::cell::RefCell;
use std::sync::Arc;

thread_local! {
    static REAL: RefCell<RealFftPlanner<f64>> = RefCell::new(RealFftPlanner::new());
    static COMPLEX: RefCell<FftPlanner<f64>> = RefCell::new(FftPlanner::new());
}

/// A forward real-to-complex FFT of `len` points.
pub fn real_forward(len: usize) -> Arc<dyn RealToComplex<f64>> {
    REAL.with(|p| p.borrow_mut().plan_fft_forward(len))
}

/// A forward complex FFT of `len` points.
pub fn complex_forward(len: usize) -> Arc<dyn Fft<f64>> {
    COMPLEX.with(|p| p.borrow_mut().plan_fft_forward(len))
}

/// The largest length not above `n` whose prime factors are 2, 3 and 5
/// (fast FFT sizes), for spectra where a few samples less do not matter.
pub fn smooth_len(n: usize) -> usize {
    let mut best = 1;
    let mut p2 = 1usize;
    while p2 <= n {
        let mut p3 = p2;
        while p3 <= n {
            let mut p5 = p3;
            while p5 <= n {
                best = best.max(p5);
                p5 *= 5;
            }
            p3 *= 3;
        }
        p2 *= 2;
    }
    best
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn smooth_lengths() {
        assert_eq!(smooth_len(96_001), 96_000);
        assert_eq!(smooth_len(97), 96);
        assert_eq!(smooth_len(1), 1);
        assert_eq!(smooth_len(65_537), 65_536);
    }
}
