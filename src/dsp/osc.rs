//! The reference oscillator: cos and sin of `k·ω·(n − c)` for the harmonics
//! `k = 1..=h` over a block of samples.
//!
//! Each block starts from exact values (one `sin_cos` call) and advances by a
//! rotating phasor (32 values, then four interleaved vector recurrences with
//! step `e^{j32ω}`); harmonics are powers of the fundamental phasor. Blocks are
//! short, so the recurrence's rounding never accumulates beyond ~1e-13.

use wide::f64x8;

/// Samples per oscillator block; also the block length of the fit passes.
pub const BLOCK: usize = 256;

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
    // Fundamental: the first SPAN values by recurrence from an exact start,
    // then SPAN/LANES independent vector recurrences with step w^SPAN.
    const LANES: usize = 8;
    const SPAN: usize = 4 * LANES;
    let (s0, c0) = (omega * (n0 as f64 - center)).sin_cos();
    let (ws, wc) = omega.sin_cos();
    {
        let (c1, s1) = (&mut cos[0], &mut sin[0]);
        let (mut zr, mut zi) = (c0, s0);
        for m in 0..SPAN.min(len) {
            c1[m] = zr;
            s1[m] = zi;
            let nr = zr * wc - zi * ws;
            zi = zr * ws + zi * wc;
            zr = nr;
        }
        let (ls, lc) = (omega * SPAN as f64).sin_cos();
        let (ls, lc) = (f64x8::splat(ls), f64x8::splat(lc));
        let mut m = SPAN;
        while m + LANES <= len {
            let pr = f64x8::new(c1[m - SPAN..m - SPAN + LANES].try_into().unwrap());
            let pi = f64x8::new(s1[m - SPAN..m - SPAN + LANES].try_into().unwrap());
            c1[m..m + LANES].copy_from_slice((pr * lc - pi * ls).as_array());
            s1[m..m + LANES].copy_from_slice((pr * ls + pi * lc).as_array());
            m += LANES;
        }
        let (ls, lc) = (ls.as_array()[0], lc.as_array()[0]);
        for m in m..len {
            let (pr, pi) = (c1[m - SPAN], s1[m - SPAN]);
            c1[m] = pr * lc - pi * ls;
            s1[m] = pr * ls + pi * lc;
        }
    }
    // Harmonics: powers of the fundamental, eight samples at a time with
    // the running power held in registers.
    let (fund_c, rest_c) = cos.split_at_mut(1);
    let (fund_s, rest_s) = sin.split_at_mut(1);
    let (fc, fs) = (&fund_c[0][..len], &fund_s[0][..len]);
    let mut m = 0;
    while m + LANES <= len {
        let c1 = f64x8::new(fc[m..m + LANES].try_into().unwrap());
        let s1 = f64x8::new(fs[m..m + LANES].try_into().unwrap());
        let (mut ck, mut sk) = (c1, s1);
        for (oc, os) in rest_c.iter_mut().zip(rest_s.iter_mut()) {
            let nc = ck * c1 - sk * s1;
            sk = ck * s1 + sk * c1;
            ck = nc;
            oc[m..m + LANES].copy_from_slice(ck.as_array());
            os[m..m + LANES].copy_from_slice(sk.as_array());
        }
        m += LANES;
    }
    for m in m..len {
        let (c1, s1) = (fc[m], fs[m]);
        let (mut ck, mut sk) = (c1, s1);
        for (oc, os) in rest_c.iter_mut().zip(rest_s.iter_mut()) {
            let nc = ck * c1 - sk * s1;
            sk = ck * s1 + sk * c1;
            ck = nc;
            oc[m] = ck;
            os[m] = sk;
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
