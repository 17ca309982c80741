//! Test-frequency planning: coherent frequencies and the third-octave series.

/// Exact base-10 third-octave band centre `1000·10^(x/10)` Hz for band index `x`.
pub fn third_octave_exact(x: i32) -> f64 {
    1000.0 * 10f64.powf(f64::from(x) / 10.0)
}

/// Nominal (preferred) third-octave frequencies from 20 Hz to 20 kHz, with
/// their band index `x` (`1000·10^(x/10)` is the exact centre).
pub const THIRD_OCTAVE_NOMINAL: [(i32, f64); 31] = [
    (-17, 20.0),
    (-16, 25.0),
    (-15, 31.5),
    (-14, 40.0),
    (-13, 50.0),
    (-12, 63.0),
    (-11, 80.0),
    (-10, 100.0),
    (-9, 125.0),
    (-8, 160.0),
    (-7, 200.0),
    (-6, 250.0),
    (-5, 315.0),
    (-4, 400.0),
    (-3, 500.0),
    (-2, 630.0),
    (-1, 800.0),
    (0, 1000.0),
    (1, 1250.0),
    (2, 1600.0),
    (3, 2000.0),
    (4, 2500.0),
    (5, 3150.0),
    (6, 4000.0),
    (7, 5000.0),
    (8, 6300.0),
    (9, 8000.0),
    (10, 10000.0),
    (11, 12500.0),
    (12, 16000.0),
    (13, 20000.0),
];

/// Coherent frequency `J·fs/M`.
pub fn coherent(cycles: u64, sample_rate_hz: f64, record: u64) -> f64 {
    cycles as f64 * sample_rate_hz / record as f64
}

fn gcd(a: u64, b: u64) -> u64 {
    if b == 0 {
        a
    } else {
        gcd(b, a % b)
    }
}

/// Distance in Hz from `f` to the nearest multiple of 50 Hz or 60 Hz.
pub fn mains_distance(f: f64) -> f64 {
    [50.0, 60.0]
        .iter()
        .map(|m| {
            let k = (f / m).round();
            (f - k * m).abs()
        })
        .fold(f64::INFINITY, f64::min)
}

/// The coherent frequency nearest `target_hz` for a record of `record`
/// samples: `J·fs/M` with `J` coprime with `M`, at least `min_mains_hz` away
/// from every multiple of 50 Hz and 60 Hz. Returns the cycle count `J` and
/// the frequency, or `None` when no such `J` lies within 10 % of the target.
pub fn nudge_coherent(
    target_hz: f64,
    sample_rate_hz: f64,
    record: u64,
    min_mains_hz: f64,
) -> Option<(u64, f64)> {
    let j0 = (target_hz * record as f64 / sample_rate_hz).round() as i64;
    let limit = (0.1 * target_hz * record as f64 / sample_rate_hz).ceil() as i64 + 1;
    for step in 0..=limit {
        for j in [j0 + step, j0 - step] {
            if j <= 0 || (j as u64) * 2 >= record {
                continue;
            }
            let j = j as u64;
            let f = coherent(j, sample_rate_hz, record);
            if gcd(j, record) == 1 && mains_distance(f) >= min_mains_hz {
                return Some((j, f));
            }
        }
    }
    None
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn nudged_frequencies_are_coherent_and_clear_of_mains() {
        for (_, f) in THIRD_OCTAVE_NOMINAL {
            let (j, g) = nudge_coherent(f, 48_000.0, 65_536, 5.0).unwrap();
            assert_eq!(j % 2, 1);
            assert!(mains_distance(g) >= 5.0);
            // 50 Hz itself must move to 44.68 Hz, 10.6 % away.
            assert!((g / f - 1.0).abs() < 0.11, "{f} -> {g}");
        }
    }
}
