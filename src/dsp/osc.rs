//! The reference oscillator: cos and sin of `k·ω·(n − c)` for the harmonics
//! `k = 1..=h` over a block of samples.
//!
//! Each block starts from exact values (one `sin_cos` call) and advances by a
//! rotating phasor; harmonics are powers of the fundamental phasor. Blocks are
//! short, so the recurrence's rounding never accumulates beyond ~1e-13.

/// Samples per oscillator block; also the block length of the fit passes.
pub const BLOCK: usize = 1024;

/// Fill `cos[k-1][m]` and `sin[k-1][m]` with `cos(k·ω·(n0 + m − center))` and
/// `sin(…)` for `m < len` and `k = 1..=cos.len()`.
///
/// # Panics
/// When `cos` and `sin` differ in length or any row is shorter than `len`.
pub fn fill_harmonics(
    omega: f64,
    center: f64,
    n0: usize,
    len: usize,
    cos: &mut [Vec<f64>],
    sin: &mut [Vec<f64>],
) {
    assert_eq!(cos.len(), sin.len(), "cos and sin rows");
    let h = cos.len();
    if h == 0 || len == 0 {
        return;
    }
    // Fundamental: the first LANES values by recurrence from an exact start,
    // then LANES independent recurrences with step w^LANES (vectorisable).
    const LANES: usize = 8;
    let (s0, c0) = (omega * (n0 as f64 - center)).sin_cos();
    let (ws, wc) = omega.sin_cos();
    let (c1, s1) = (&mut cos[0], &mut sin[0]);
    let (mut zr, mut zi) = (c0, s0);
    for m in 0..LANES.min(len) {
        c1[m] = zr;
        s1[m] = zi;
        let nr = zr * wc - zi * ws;
        zi = zr * ws + zi * wc;
        zr = nr;
    }
    let (ls, lc) = (omega * LANES as f64).sin_cos();
    for m in LANES..len {
        let (pr, pi) = (c1[m - LANES], s1[m - LANES]);
        c1[m] = pr * lc - pi * ls;
        s1[m] = pr * ls + pi * lc;
    }
    // Harmonics: powers of the fundamental, sample by sample.
    for k in 1..h {
        let (lo_c, hi_c) = cos.split_at_mut(k);
        let (lo_s, hi_s) = sin.split_at_mut(k);
        let (pc, ps) = (&lo_c[k - 1][..len], &lo_s[k - 1][..len]);
        let (fc, fs) = (&lo_c[0][..len], &lo_s[0][..len]);
        let (oc, os) = (&mut hi_c[0][..len], &mut hi_s[0][..len]);
        for m in 0..len {
            oc[m] = pc[m] * fc[m] - ps[m] * fs[m];
            os[m] = pc[m] * fs[m] + ps[m] * fc[m];
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The recurrence against a libm call per sample (the obviously right version).
    #[test]
    fn matches_direct_evaluation() {
        let omega = 2.0 * std::f64::consts::PI * 997.3 / 48_000.0;
        let center = 40_000.5;
        let h = 5;
        let mut c = vec![vec![0.0; BLOCK]; h];
        let mut s = vec![vec![0.0; BLOCK]; h];
        for n0 in [0usize, 1024 * 70, 81_000] {
            fill_harmonics(omega, center, n0, BLOCK, &mut c, &mut s);
            for k in 1..=h {
                for m in (0..BLOCK).step_by(7) {
                    let a = k as f64 * omega * ((n0 + m) as f64 - center);
                    assert!((c[k - 1][m] - a.cos()).abs() < 1e-11, "cos k={k} m={m}");
                    assert!((s[k - 1][m] - a.sin()).abs() < 1e-11, "sin k={k} m={m}");
                }
            }
        }
    }
}
