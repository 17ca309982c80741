//! Frequency weighting A of IEC 61672-1 (analytic form of the standard's
//! Annex E: poles at 20.6 Hz, 107.7 Hz, 737.9 Hz and 12194 Hz, normalised to
//! 0 dB at 1 kHz).

/// A-weighting in dB at `f` Hz.
pub fn a_weighting_db(f: f64) -> f64 {
    20.0 * a_weighting_gain(f).log10() + A_1KHZ_OFFSET_DB
}

/// Offset that puts the analytic A curve at 0 dB at 1 kHz (the standard's 2.00 dB).
const A_1KHZ_OFFSET_DB: f64 = 2.0;

fn a_weighting_gain(f: f64) -> f64 {
    let f2 = f * f;
    let (p1, p2, p3, p4) = (20.598_997f64, 107.652_65f64, 737.862_23f64, 12_194.217f64);
    p4 * p4 * f2 * f2 / ((f2 + p1 * p1) * ((f2 + p2 * p2) * (f2 + p3 * p3)).sqrt() * (f2 + p4 * p4))
}

/// A-weighting as a power factor at `f` Hz.
pub fn a_weighting_power(f: f64) -> f64 {
    10f64.powf(a_weighting_db(f) / 10.0)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn zero_at_one_kilohertz() {
        assert!(a_weighting_db(1000.0).abs() < 0.005);
    }
}
