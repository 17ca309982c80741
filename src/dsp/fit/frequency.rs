//! The tone's frequency: coarse spectral peak and Gauss-Newton steps.

use super::*;

/// Result of a frequency estimate.
#[derive(Debug, Clone, PartialEq)]
pub struct FrequencyFit {
    /// Estimated frequency in Hz.
    pub freq_hz: f64,
    /// Gauss-Newton iterations used.
    pub iterations: usize,
    /// The model at the estimated frequency.
    pub model: ToneModel,
}

/// Coarse frequency of the strongest component within `search` (relative)
/// of `nominal_hz`: Hann-windowed spectrum, peak bin, parabolic interpolation
/// of the log magnitude.
pub fn coarse_frequency(
    x: &[f32],
    sample_rate_hz: f64,
    nominal_hz: f64,
    search: f64,
) -> Result<f64, FitError> {
    match coarse_frequency_mixed(x, sample_rate_hz, nominal_hz, search) {
        Some(f) => f,
        None => coarse_frequency_full(x, sample_rate_hz, nominal_hz, search),
    }
}

/// [`coarse_frequency`] from the spectrum of the whole record.
pub(super) fn coarse_frequency_full(
    x: &[f32],
    sample_rate_hz: f64,
    nominal_hz: f64,
    search: f64,
) -> Result<f64, FitError> {
    let x = &x[..crate::dsp::plans::smooth_len(x.len())];
    let len = x.len();
    let no_tone = FitError::NoTone {
        nominal_hz,
        search_pct: search * 100.0,
    };
    if len < 16 {
        return Err(no_tone);
    }
    let mean = x.iter().map(|v| f64::from(*v)).sum::<f64>() / len as f64;
    let w = crate::dsp::window::HANN.cached(len);
    let mut input: Vec<f64> = x
        .iter()
        .zip(w.iter())
        .map(|(v, w)| (f64::from(*v) - mean) * w)
        .collect();
    let fft = crate::dsp::plans::real_forward(len);
    let mut spectrum = fft.make_output_vec();
    fft.process(&mut input, &mut spectrum)
        .map_err(|_| no_tone.clone())?;
    let bin_hz = sample_rate_hz / len as f64;
    let lo = (((nominal_hz * (1.0 - search)) / bin_hz).floor() as isize - 2).max(1) as usize;
    let hi = ((((nominal_hz * (1.0 + search)) / bin_hz).ceil() as usize) + 2)
        .min(spectrum.len().saturating_sub(2));
    if lo >= hi {
        return Err(no_tone);
    }
    let mag = |i: usize| spectrum[i].norm_sqr().max(1e-300).ln();
    let peak = (lo..=hi)
        .max_by(|a, b| spectrum[*a].norm_sqr().total_cmp(&spectrum[*b].norm_sqr()))
        .ok_or(no_tone.clone())?;
    if spectrum[peak].norm_sqr() <= 0.0 {
        return Err(no_tone);
    }
    let delta = parabolic_offset(mag(peak - 1), mag(peak), mag(peak + 1));
    Ok((peak as f64 + delta) * bin_hz)
}

/// Offset of a peak from its bin, in bins (±0.5 at most), from the log
/// magnitudes `a`, `b`, `c` of the bins before, at and after it: the vertex
/// of the parabola through them.
fn parabolic_offset(a: f64, b: f64, c: f64) -> f64 {
    let denom = a - 2.0 * b + c;
    if denom.abs() > 0.0 {
        (0.5 * (a - c) / denom).clamp(-0.5, 0.5)
    } else {
        0.0
    }
}

/// [`coarse_frequency`] for a search band narrow against the sample rate:
/// the record is mixed down by the nominal frequency and summed in blocks
/// of [`DECIMATION`] samples, and the Hann-windowed spectrum of those
/// sums is searched around 0 Hz. The block sum passes the search band with
/// a droop below 1e-4 and puts its nulls on what would alias there (the
/// mixed-down DC, the tone's image and harmonics near multiples of
/// `fs/DECIMATION`), so the peak and its interpolation are those of the
/// full spectrum, for a transform a sixteenth as long. `None` where the
/// band is too wide or the record too short.
pub(super) fn coarse_frequency_mixed(
    x: &[f32],
    sample_rate_hz: f64,
    nominal_hz: f64,
    search: f64,
) -> Option<Result<f64, FitError>> {
    let blocks = crate::dsp::plans::smooth_len(x.len() / DECIMATION);
    let len = blocks * DECIMATION;
    let bin_hz = sample_rate_hz / len as f64;
    let reach = ((nominal_hz * search) / bin_hz).ceil() as usize + 2;
    // The search band within a sixteenth of the decimated band, and a
    // spectrum long enough to hold it several times over.
    if blocks < 64
        || (reach + 2) * 16 > blocks
        || nominal_hz * search * 16.0 > sample_rate_hz / 32.0
    {
        return None;
    }
    let no_tone = FitError::NoTone {
        nominal_hz,
        search_pct: search * 100.0,
    };
    let x = &x[..len];
    let mean = x.iter().map(|v| f64::from(*v)).sum::<f64>() / len as f64;
    let omega = 2.0 * PI * nominal_hz / sample_rate_hz;
    let w = crate::dsp::window::HANN.cached(blocks);
    let mut z: Vec<Complex<f64>> = Vec::with_capacity(blocks);
    let (mut c, mut s) = (vec![vec![0.0; BLOCK]], vec![vec![0.0; BLOCK]]);
    for n0 in (0..len).step_by(BLOCK) {
        let m = BLOCK.min(len - n0);
        fill_harmonics(omega, 0.0, n0, m, &mut c, &mut s);
        for (i, chunk) in x[n0..n0 + m].chunks(DECIMATION).enumerate() {
            let (mut re, mut im) = (0.0, 0.0);
            for (t, v) in chunk.iter().enumerate() {
                let v = f64::from(*v) - mean;
                re += v * c[0][i * DECIMATION + t];
                im -= v * s[0][i * DECIMATION + t];
            }
            let j = z.len();
            z.push(Complex::new(re * w[j], im * w[j]));
        }
    }
    crate::dsp::plans::complex_forward(blocks).process(&mut z);
    let at = |k: isize| z[k.rem_euclid(blocks as isize) as usize].norm_sqr();
    let reach = reach as isize;
    let peak = (-reach..=reach).max_by(|a, b| at(*a).total_cmp(&at(*b)))?;
    if at(peak) <= 0.0 {
        return Some(Err(no_tone));
    }
    let mag = |k: isize| at(k).max(1e-300).ln();
    let delta = parabolic_offset(mag(peak - 1), mag(peak), mag(peak + 1));
    Some(Ok(nominal_hz + (peak as f64 + delta) * bin_hz))
}

/// Four-parameter fit (with harmonics): estimate the frequency of the tone
/// near `nominal_hz` by Gauss-Newton iterations on the full model, starting
/// from the spectral peak. `search` is the relative half-width searched
/// (0.01 for ±1 %).
pub fn estimate_frequency(
    x: &[f32],
    sample_rate_hz: f64,
    nominal_hz: f64,
    search: f64,
    max_harmonic: usize,
) -> Result<FrequencyFit, FitError> {
    let f0 = coarse_frequency(x, sample_rate_hz, nominal_hz, search)?;
    estimate_frequency_from(x, sample_rate_hz, nominal_hz, search, max_harmonic, f0)
}

/// [`estimate_frequency`] from a known starting frequency `start_hz` (a
/// coarse estimate of the same tone, say over a longer stretch).
pub fn estimate_frequency_from(
    x: &[f32],
    sample_rate_hz: f64,
    nominal_hz: f64,
    search: f64,
    max_harmonic: usize,
    start_hz: f64,
) -> Result<FrequencyFit, FitError> {
    let len = x.len();
    let mut model = ToneModel::new(start_hz, sample_rate_hz, len, max_harmonic);
    let mut iterations = 0;
    for _ in 0..30 {
        iterations += 1;
        let delta = gauss_newton_step(x, &model)?;
        model.omega += delta;
        // Converged when the step moves the phase at the record's ends by
        // less than 0.1 µrad: far below the phase noise of any real record.
        if (delta * len as f64).abs() < 1e-7 {
            break;
        }
    }
    let freq_hz = model.freq_hz(sample_rate_hz);
    if !freq_hz.is_finite() || (freq_hz / nominal_hz - 1.0).abs() > search * 1.5 {
        return Err(FitError::NoTone {
            nominal_hz,
            search_pct: search * 100.0,
        });
    }
    Ok(FrequencyFit {
        freq_hz,
        iterations,
        model,
    })
}

/// One Gauss-Newton step: the change of ω (radians per sample) that best
/// explains what the fit at the current ω leaves over.
///
/// The step solves the normal equations of the basis and the frequency
/// derivative `d = Σ_k k·t·(−c_k·sin kωt + s_k·cos kωt)` (with the
/// coefficients of the fit at the current ω) jointly. Everything in them
/// that does not involve the samples has a closed form (see [`gram`] and
/// [`t_moments`]); one pass over the samples gives `Σx·φ_q` and `Σx·t·φ_q`,
/// which yield both the fit and `Σx·d`.
pub(super) fn gauss_newton_step(x: &[f32], model: &ToneModel) -> Result<f64, FitError> {
    let len = x.len();
    let q = model.params();
    let degenerate = FitError::Degenerate {
        freq_hz: model.omega / (2.0 * PI),
    };
    if len < 2 * q + 4 {
        return Err(FitError::TooShort {
            samples: len,
            params: q + 1,
        });
    }
    let sums = by_columns!(
        model.terms,
        moment_sums(x, model),
        moment_sums_columns(x, model)
    );
    let base = gram(model, len);
    let fit = Cholesky::new(&base, q)
        .ok_or(degenerate.clone())?
        .solve(&sums.xphi);
    // d's coefficients on the basis columns [cos ωt, sin ωt, cos 2ωt, …],
    // with t measured in units of `scale` to keep the system balanced.
    let scale = len as f64 / 2.0;
    let dcoef: Vec<f64> = (1..q)
        .map(|r| {
            let k = r.div_ceil(2) as f64;
            if r % 2 == 1 {
                k * fit[r + 1] / scale
            } else {
                -k * fit[r - 1] / scale
            }
        })
        .collect();
    let (t1, t2) = t_moments(model, len);
    let p = q + 1;
    let mut g = vec![0.0; p * p];
    for r in 0..q {
        g[r * p..r * p + q].copy_from_slice(&base[r * q..r * q + q]);
        let gd: f64 = dcoef
            .iter()
            .enumerate()
            .map(|(c, d)| d * t1[r * q + c + 1])
            .sum();
        g[r * p + q] = gd;
        g[q * p + r] = gd;
    }
    g[q * p + q] = (1..q)
        .map(|a| {
            (1..q)
                .map(|b| dcoef[a - 1] * dcoef[b - 1] * t2[a * q + b])
                .sum::<f64>()
        })
        .sum();
    let mut rhs = sums.xphi;
    rhs.push(dcoef.iter().zip(&sums.xtphi).map(|(d, e)| d * e).sum());
    let theta = Cholesky::new(&g, p).ok_or(degenerate)?.solve(&rhs);
    Ok(theta[q] / scale)
}

/// `Σ_t t·sin(θt)` and `Σ_t t²·cos(θt)` over `t = n − (len − 1)/2`,
/// `n < len`: minus the first and second derivatives of the Dirichlet
/// kernel `sin(len·θ/2)/sin(θ/2)`.
pub(super) fn dirichlet_moments(theta: f64, len: usize) -> (f64, f64) {
    let l = len as f64;
    let m = (0.5 * theta).sin();
    if m.abs() < 1e-9 {
        // θ at a multiple of 2π: sin(θt) vanishes and cos(θt) = cos(θ·c).
        let c = (l - 1.0) / 2.0;
        return (0.0, l * (l * l - 1.0) / 12.0 * (theta * c).cos());
    }
    let (n, n1, n2) = (
        (0.5 * l * theta).sin(),
        0.5 * l * (0.5 * l * theta).cos(),
        -0.25 * l * l * (0.5 * l * theta).sin(),
    );
    let (m1, m2) = (0.5 * (0.5 * theta).cos(), -0.25 * m);
    let d1 = (n1 * m - n * m1) / (m * m);
    let d2 = (n2 * m - n * m2) / (m * m) - 2.0 * m1 * d1 / m;
    (-d1, -d2)
}

/// The basis moments `T1[r][c] = Σ t·φ_r·φ_c` and `T2[r][c] = Σ t²·φ_r·φ_c`
/// over the basis `[1, cos ωt, sin ωt, cos 2ωt, …]`, in closed form (the
/// products are half-sums of sines and cosines at the sum and difference
/// frequencies; odd sums over the centred `t` vanish). Row-major `q × q`.
pub(super) fn t_moments(model: &ToneModel, len: usize) -> (Vec<f64>, Vec<f64>) {
    let q = model.params();
    let w = model.omega;
    let (mut t1, mut t2) = (vec![0.0; q * q], vec![0.0; q * q]);
    let l = len as f64;
    t2[0] = l * (l * l - 1.0) / 12.0;
    for a in 1..=model.terms {
        let (ca, sa) = (2 * a - 1, 2 * a);
        let (s1, c2) = dirichlet_moments(a as f64 * w, len);
        // With the constant column: Σ t·sin aωt and Σ t²·cos aωt.
        t1[sa] = s1;
        t1[sa * q] = s1;
        t2[ca] = c2;
        t2[ca * q] = c2;
        for b in 1..=model.terms {
            let (cb, sb) = (2 * b - 1, 2 * b);
            let (s_sum, c_sum) = dirichlet_moments((a + b) as f64 * w, len);
            let (s_diff, c_diff) = dirichlet_moments((a as f64 - b as f64) * w, len);
            // sin aωt·cos bωt = ½[sin (a+b)ωt + sin (a−b)ωt]
            t1[sa * q + cb] = 0.5 * (s_sum + s_diff);
            t1[cb * q + sa] = t1[sa * q + cb];
            t2[ca * q + cb] = 0.5 * (c_diff + c_sum);
            t2[sa * q + sb] = 0.5 * (c_diff - c_sum);
        }
    }
    (t1, t2)
}

/// What one pass of [`gauss_newton_step`] sums: `Σx·φ_q` over the basis
/// (constant first) and `Σx·t·φ_q` over the sinusoidal columns.
pub(super) struct MomentSums {
    pub(super) xphi: Vec<f64>,
    pub(super) xtphi: Vec<f64>,
}

/// [`MomentSums`] in one pass, eight samples at a time.
pub(super) fn moment_sums<const C: usize>(x: &[f32], model: &ToneModel) -> MomentSums {
    let len = x.len();
    let mut basis = BasisBlock::new(C / 2);
    let mut x1 = f64x8::ZERO;
    let (mut xp, mut xtp) = ([f64x8::ZERO; C], [f64x8::ZERO; C]);
    let lane = f64x8::new([0.0, 1.0, 2.0, 3.0, 4.0, 5.0, 6.0, 7.0]);
    // Basis rows are BLOCK long (a multiple of LANES), so eight values can
    // always be loaded; past the record's end the samples are zero.
    let load = |v: &[f64], i: usize| f64x8::new(v[i..i + LANES].try_into().unwrap());
    let mut n0 = 0;
    while n0 < len {
        let m = BLOCK.min(len - n0);
        basis.fill(model, n0, m);
        for i in (0..m).step_by(LANES) {
            let mut xs = [0.0; LANES];
            for (o, v) in xs.iter_mut().zip(&x[n0 + i..(n0 + i + LANES).min(len)]) {
                *o = f64::from(*v);
            }
            let xv = f64x8::new(xs);
            let xt = xv * (lane + f64x8::splat((n0 + i) as f64 - model.center));
            x1 += xv;
            for k in 0..C / 2 {
                let (c, s) = (load(&basis.cos[k], i), load(&basis.sin[k], i));
                xp[2 * k] = xv.mul_add(c, xp[2 * k]);
                xp[2 * k + 1] = xv.mul_add(s, xp[2 * k + 1]);
                xtp[2 * k] = xt.mul_add(c, xtp[2 * k]);
                xtp[2 * k + 1] = xt.mul_add(s, xtp[2 * k + 1]);
            }
        }
        n0 += m;
    }
    let mut xphi = vec![x1.reduce_add()];
    xphi.extend(xp.iter().map(|v| v.reduce_add()));
    MomentSums {
        xphi,
        xtphi: xtp.iter().map(|v| v.reduce_add()).collect(),
    }
}

/// [`moment_sums`] for any number of harmonics, column by column.
pub(super) fn moment_sums_columns(x: &[f32], model: &ToneModel) -> MomentSums {
    let len = x.len();
    let q = model.params();
    let mut xphi = vec![0.0; q];
    let mut xtphi = vec![0.0; q - 1];
    let mut basis = BasisBlock::new(model.terms);
    let (mut xf, mut xt) = (vec![0.0; BLOCK], vec![0.0; BLOCK]);
    let mut n0 = 0;
    while n0 < len {
        let m = BLOCK.min(len - n0);
        basis.fill(model, n0, m);
        let (xf, xt) = (&mut xf[..m], &mut xt[..m]);
        widen(&x[n0..n0 + m], xf);
        for (i, (t, v)) in xt.iter_mut().zip(xf.iter()).enumerate() {
            *t = v * ((n0 + i) as f64 - model.center);
        }
        xphi[0] += sum(xf);
        for r in 1..q {
            let col = &basis.column(r).unwrap()[..m];
            xphi[r] += dot(xf, col);
            xtphi[r - 1] += dot(xt, col);
        }
        n0 += m;
    }
    MomentSums { xphi, xtphi }
}
