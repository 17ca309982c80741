//! Small pieces for hand-written SVG: escaping, scales, axes, and a
//! sequential colour scale computed in the OKLab colour space.

use std::fmt::Write;

/// Escape text for HTML and SVG (element content and quoted attributes).
pub fn esc(s: &str) -> String {
    let mut out = String::with_capacity(s.len());
    for c in s.chars() {
        match c {
            '&' => out.push_str("&amp;"),
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '"' => out.push_str("&quot;"),
            '\'' => out.push_str("&#39;"),
            c => out.push(c),
        }
    }
    out
}

/// A map from data values to pixels along one axis.
#[derive(Debug, Clone, Copy)]
pub struct Scale {
    /// Data range (for a log scale, the values themselves, not their logs).
    pub d0: f64,
    /// Upper end of the data range.
    pub d1: f64,
    /// Pixel at `d0`.
    pub p0: f64,
    /// Pixel at `d1`.
    pub p1: f64,
    /// Logarithmic (base 10).
    pub log: bool,
}

impl Scale {
    /// A linear scale.
    pub fn linear(d0: f64, d1: f64, p0: f64, p1: f64) -> Self {
        Self {
            d0,
            d1,
            p0,
            p1,
            log: false,
        }
    }

    /// A base-10 logarithmic scale (positive data only).
    pub fn log(d0: f64, d1: f64, p0: f64, p1: f64) -> Self {
        Self {
            d0,
            d1,
            p0,
            p1,
            log: true,
        }
    }

    /// Pixel of `v` (outside the range it extrapolates; clamp where needed).
    pub fn px(&self, v: f64) -> f64 {
        let t = if self.log {
            (v.log10() - self.d0.log10()) / (self.d1.log10() - self.d0.log10())
        } else {
            (v - self.d0) / (self.d1 - self.d0)
        };
        self.p0 + t * (self.p1 - self.p0)
    }

    /// Does the data range hold `v`?
    pub fn holds(&self, v: f64) -> bool {
        v >= self.d0.min(self.d1) && v <= self.d0.max(self.d1)
    }
}

/// Tick values of a linear axis: multiples of a 1-2-5 step, about `n` of them.
pub fn linear_ticks(lo: f64, hi: f64, n: usize) -> Vec<f64> {
    let raw = (hi - lo) / n.max(1) as f64;
    let mag = 10f64.powf(raw.log10().floor());
    let step = [1.0, 2.0, 5.0, 10.0]
        .iter()
        .map(|m| m * mag)
        .find(|s| *s >= raw)
        .unwrap_or(10.0 * mag);
    let mut v = (lo / step).ceil() * step;
    let mut out = Vec::new();
    while v <= hi + step * 1e-9 {
        out.push(if v.abs() < step * 1e-9 { 0.0 } else { v });
        v += step;
    }
    out
}

/// Major (decades) and minor (2–9 times a decade) ticks of a log axis.
pub fn log_ticks(lo: f64, hi: f64) -> (Vec<f64>, Vec<f64>) {
    let (mut major, mut minor) = (Vec::new(), Vec::new());
    let mut d = 10f64.powf(lo.log10().floor());
    while d <= hi {
        if d >= lo {
            major.push(d);
        }
        for k in 2..10 {
            let m = d * k as f64;
            if m >= lo && m <= hi {
                minor.push(m);
            }
        }
        d *= 10.0;
    }
    (major, minor)
}

/// "10", "100", "1k", "10k" for a frequency tick.
pub fn hz_label(f: f64) -> String {
    if f >= 1000.0 {
        format!("{}k", f / 1000.0)
    } else {
        format!("{f}")
    }
}

/// Axes, grid and labels of a plot area.
pub struct Frame {
    /// Left edge of the plot area, px.
    pub left: f64,
    /// Top edge, px.
    pub top: f64,
    /// Right edge, px.
    pub right: f64,
    /// Bottom edge, px.
    pub bottom: f64,
}

impl Frame {
    /// Grid lines and labels for a log frequency x axis and a linear y axis.
    pub fn draw(&self, out: &mut String, x: &Scale, y: &Scale, x_title: &str, y_title: &str) {
        let (l, t, r, b) = (self.left, self.top, self.right, self.bottom);
        let _ = write!(
            out,
            r#"<rect x="{l}" y="{t}" width="{}" height="{}" class="plot-bg"/>"#,
            r - l,
            b - t
        );
        if x.log {
            let (major, minor) = log_ticks(x.d0, x.d1);
            for m in minor {
                let px = x.px(m);
                let _ = write!(
                    out,
                    r#"<line x1="{px:.1}" y1="{t}" x2="{px:.1}" y2="{b}" class="grid-minor"/>"#
                );
            }
            for m in major {
                let px = x.px(m);
                let _ = write!(
                    out,
                    r#"<line x1="{px:.1}" y1="{t}" x2="{px:.1}" y2="{b}" class="grid"/><text x="{px:.1}" y="{:.1}" class="tick" text-anchor="middle">{}</text>"#,
                    b + 14.0,
                    hz_label(m)
                );
            }
        } else {
            for v in linear_ticks(x.d0, x.d1, 8) {
                let px = x.px(v);
                let _ = write!(
                    out,
                    r#"<line x1="{px:.1}" y1="{t}" x2="{px:.1}" y2="{b}" class="grid"/><text x="{px:.1}" y="{:.1}" class="tick" text-anchor="middle">{v}</text>"#,
                    b + 14.0
                );
            }
        }
        for v in linear_ticks(y.d0.min(y.d1), y.d0.max(y.d1), 6) {
            let py = y.px(v);
            let _ = write!(
                out,
                r#"<line x1="{l}" y1="{py:.1}" x2="{r}" y2="{py:.1}" class="grid"/><text x="{:.1}" y="{:.1}" class="tick" text-anchor="end">{v}</text>"#,
                l - 5.0,
                py + 3.5
            );
        }
        let _ = write!(
            out,
            r#"<rect x="{l}" y="{t}" width="{}" height="{}" class="plot-edge"/><text x="{:.1}" y="{:.1}" class="axis-title" text-anchor="middle">{}</text><text transform="translate({:.1} {:.1}) rotate(-90)" class="axis-title" text-anchor="middle">{}</text>"#,
            r - l,
            b - t,
            (l + r) / 2.0,
            b + 32.0,
            esc(x_title),
            l - 40.0,
            (t + b) / 2.0,
            esc(y_title)
        );
    }
}

/// An sRGB colour, 8 bits per channel.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Rgb(pub u8, pub u8, pub u8);

impl Rgb {
    /// "#rrggbb".
    pub fn hex(self) -> String {
        format!("#{:02x}{:02x}{:02x}", self.0, self.1, self.2)
    }
}

/// OKLab (L, a, b) to linear-light sRGB (Ottosson 2020, "A perceptual color
/// space for image processing"; matrices as published there).
pub fn oklab_to_linear_srgb(l: f64, a: f64, b: f64) -> [f64; 3] {
    let l_ = l + 0.396_337_777_4 * a + 0.215_803_757_3 * b;
    let m_ = l - 0.105_561_345_8 * a - 0.063_854_172_8 * b;
    let s_ = l - 0.089_484_177_5 * a - 1.291_485_548_0 * b;
    let (l3, m3, s3) = (l_.powi(3), m_.powi(3), s_.powi(3));
    [
        4.076_741_662_1 * l3 - 3.307_711_591_3 * m3 + 0.230_969_929_2 * s3,
        -1.268_438_004_6 * l3 + 2.609_757_401_1 * m3 - 0.341_319_396_5 * s3,
        -0.004_196_086_3 * l3 - 0.703_418_614_7 * m3 + 1.707_614_701_0 * s3,
    ]
}

/// Linear light to the sRGB transfer curve (IEC 61966-2-1).
pub fn srgb_encode(c: f64) -> f64 {
    if c <= 0.003_130_8 {
        12.92 * c
    } else {
        1.055 * c.powf(1.0 / 2.4) - 0.055
    }
}

fn in_gamut(c: &[f64; 3]) -> bool {
    c.iter().all(|v| (-1e-9..=1.0 + 1e-9).contains(v))
}

/// The report's sequential scale at `t` in [0, 1], with its OKLab lightness.
///
/// Lightness rises evenly from 0.25 (deep blue-violet) to 0.93 (pale
/// yellow) while the hue turns through teal and green; chroma is reduced
/// where needed to stay inside sRGB. Even lightness steps keep the order
/// readable without colour vision and in greyscale print.
pub fn sequential(t: f64) -> (Rgb, f64) {
    let t = t.clamp(0.0, 1.0);
    let l = 0.25 + 0.68 * t;
    let hue = (290.0 - 185.0 * t).to_radians();
    let mut chroma = 0.09 + 0.07 * t;
    let rgb = loop {
        let c = oklab_to_linear_srgb(l, chroma * hue.cos(), chroma * hue.sin());
        if in_gamut(&c) || chroma <= 0.0 {
            break c;
        }
        chroma -= 0.002;
    };
    let byte = |v: f64| (srgb_encode(v.clamp(0.0, 1.0)) * 255.0).round() as u8;
    (Rgb(byte(rgb[0]), byte(rgb[1]), byte(rgb[2])), l)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn oklab_white_and_black() {
        // OKLab L = 1, a = b = 0 is sRGB white; L = 0 is black (Ottosson 2020,
        // the matrices map the D65 white point to itself; from memory).
        let w = oklab_to_linear_srgb(1.0, 0.0, 0.0);
        assert!(w.iter().all(|v| (v - 1.0).abs() < 1e-3), "{w:?}");
        assert_eq!(oklab_to_linear_srgb(0.0, 0.0, 0.0), [0.0, 0.0, 0.0]);
        // sRGB transfer: linear 0.5 encodes to 0.7354 (IEC 61966-2-1 formula).
        assert!((srgb_encode(0.5) - 0.735_357).abs() < 1e-5);
    }

    #[test]
    fn sequential_scale_rises_in_lightness_and_luminance() {
        let lum = |c: Rgb| {
            let lin = |v: u8| {
                let s = f64::from(v) / 255.0;
                if s <= 0.04045 {
                    s / 12.92
                } else {
                    ((s + 0.055) / 1.055).powf(2.4)
                }
            };
            // Relative luminance, ITU-R BT.709 primaries.
            0.2126 * lin(c.0) + 0.7152 * lin(c.1) + 0.0722 * lin(c.2)
        };
        let mut last = -1.0;
        for i in 0..=20 {
            let (c, _) = sequential(i as f64 / 20.0);
            let y = lum(c);
            assert!(y > last, "luminance must rise monotonically: step {i}");
            last = y;
        }
        assert!(lum(sequential(0.0).0) < 0.05 && lum(sequential(1.0).0) > 0.7);
    }

    #[test]
    fn ticks() {
        assert_eq!(
            linear_ticks(-140.0, -90.0, 5),
            vec![-140.0, -130.0, -120.0, -110.0, -100.0, -90.0]
        );
        let (major, minor) = log_ticks(50.0, 20000.0);
        assert_eq!(major, vec![100.0, 1000.0, 10000.0]);
        assert_eq!(minor.first(), Some(&50.0));
        assert_eq!(hz_label(10000.0), "10k");
        let s = Scale::log(10.0, 1000.0, 0.0, 200.0);
        assert!((s.px(100.0) - 100.0).abs() < 1e-9);
        assert_eq!(esc("<a & \"b\">"), "&lt;a &amp; &quot;b&quot;&gt;");
    }
}
