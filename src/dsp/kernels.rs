//! Inner loops written so the compiler vectorises them: eight independent
//! accumulators break the dependency chain of a floating-point sum (which it
//! may not reorder by itself).

/// Σ a·b over the common length.
#[inline]
pub fn dot(a: &[f64], b: &[f64]) -> f64 {
    let n = a.len().min(b.len());
    let (a, b) = (&a[..n], &b[..n]);
    let mut acc = [0.0f64; 8];
    let (ca, cb) = (a.chunks_exact(8), b.chunks_exact(8));
    let (ra, rb) = (ca.remainder(), cb.remainder());
    for (x, y) in ca.zip(cb) {
        for k in 0..8 {
            acc[k] += x[k] * y[k];
        }
    }
    let tail: f64 = ra.iter().zip(rb).map(|(x, y)| x * y).sum();
    acc.iter().sum::<f64>() + tail
}

/// Σ a.
#[inline]
pub fn sum(a: &[f64]) -> f64 {
    let mut acc = [0.0f64; 8];
    let c = a.chunks_exact(8);
    let r = c.remainder();
    for x in c {
        for k in 0..8 {
            acc[k] += x[k];
        }
    }
    acc.iter().sum::<f64>() + r.iter().sum::<f64>()
}

/// `out[i] = f64::from(x[i])`.
#[inline]
pub fn widen(x: &[f32], out: &mut [f64]) {
    for (o, v) in out.iter_mut().zip(x) {
        *o = f64::from(*v);
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn match_the_plain_sums() {
        let a: Vec<f64> = (0..1037).map(|i| (i as f64 * 0.37).sin()).collect();
        let b: Vec<f64> = (0..1037).map(|i| (i as f64 * 0.11).cos()).collect();
        let plain: f64 = a.iter().zip(&b).map(|(x, y)| x * y).sum();
        assert!((dot(&a, &b) - plain).abs() < 1e-12);
        assert!((sum(&a) - a.iter().sum::<f64>()).abs() < 1e-12);
    }
}
