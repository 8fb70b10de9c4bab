//! Colour scales of the report pictures, kept as small tables of sRGB stops.
//!
//! Both scales are straight lines in OKLab (B. Ottosson, "A perceptual color space for image
//! processing", 2020) with lightness changing linearly, so equal steps in value look like equal
//! steps. The score scale runs from pale yellow through a near-neutral middle to dark blue: the
//! blue-yellow axis of cividis (Nunez, Anderton, Renslow, PLoS ONE 13(7) 2018), which keeps its
//! order under red-green colour vision deficiency. The qubit scale is a pale-to-rust ramp, apart.

/// A sequential colour scale: sRGB stops for values 0, 1/(n-1), ..., 1, interpolated linearly.
#[derive(Clone, Copy, Debug)]
pub struct Ramp {
    stops: &'static [[u8; 3]],
}

/// Directed crosstalk scores: pale yellow (small) to dark blue (large).
///
/// Derived from the OKLab line (L, a, b) = (0.90, -0.02, 0.14) to (0.28, -0.01, -0.10) in 8 equal
/// steps; the derivation is rerun in this module's tests.
pub const SCORE: Ramp = Ramp {
    stops: &[
        [247, 223, 103],
        [214, 199, 110],
        [182, 175, 113],
        [151, 151, 114],
        [121, 128, 112],
        [92, 105, 109],
        [65, 83, 104],
        [38, 60, 97],
        [14, 36, 89],
    ],
};

/// Intrinsic slack of qubits: near white (none) to rust (large).
///
/// Derived from the OKLab line (0.97, 0.0, 0.006) to (0.58, 0.07, 0.085) in 8 equal steps.
pub const QUBIT: Ramp = Ramp {
    stops: &[
        [247, 245, 241],
        [238, 227, 217],
        [230, 208, 194],
        [221, 190, 171],
        [212, 172, 148],
        [203, 154, 126],
        [193, 137, 104],
        [184, 119, 81],
        [173, 101, 57],
    ],
};

impl Ramp {
    /// The colour at `t` in [0, 1] (clamped; NaN counts as 0).
    pub fn at(&self, t: f64) -> [u8; 3] {
        let t = if t.is_nan() { 0.0 } else { t.clamp(0.0, 1.0) };
        let last = self.stops.len() - 1;
        let x = t * last as f64;
        let i = (x.floor() as usize).min(last.saturating_sub(1));
        let f = x - i as f64;
        let (p, q) = (self.stops[i], self.stops[(i + 1).min(last)]);
        let mix = |k: usize| (p[k] as f64 + f * (q[k] as f64 - p[k] as f64)).round() as u8;
        [mix(0), mix(1), mix(2)]
    }

    /// `#rrggbb` at `t`.
    pub fn hex(&self, t: f64) -> String {
        hex(self.at(t))
    }

    /// The stops, for gradients in legends.
    pub fn stops(&self) -> &'static [[u8; 3]] {
        self.stops
    }
}

/// `#rrggbb` of an sRGB colour.
pub fn hex(c: [u8; 3]) -> String {
    format!("#{:02x}{:02x}{:02x}", c[0], c[1], c[2])
}

/// Relative luminance as defined by WCAG 2.1 (sRGB linearised, Rec. 709 weights); used to
/// choose dark or light ink for text drawn over a fill.
pub fn relative_luminance(c: [u8; 3]) -> f64 {
    let lin = |v: u8| srgb_to_linear(v as f64 / 255.0);
    0.2126 * lin(c[0]) + 0.7152 * lin(c[1]) + 0.0722 * lin(c[2])
}

/// Ink (text colour) that reads on a fill: black on light fills, white on dark ones.
pub fn ink_on(c: [u8; 3]) -> &'static str {
    // 0.179 is where the WCAG contrast ratios against black and white are equal.
    if relative_luminance(c) > 0.179 {
        "#000000"
    } else {
        "#ffffff"
    }
}

/// The sRGB transfer function's inverse (IEC 61966-2-1).
fn srgb_to_linear(v: f64) -> f64 {
    if v <= 0.04045 {
        v / 12.92
    } else {
        ((v + 0.055) / 1.055).powf(2.4)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn linear_to_srgb(x: f64) -> f64 {
        if x <= 0.0031308 {
            12.92 * x
        } else {
            1.055 * x.powf(1.0 / 2.4) - 0.055
        }
    }

    // Ottosson 2020, OKLab to linear sRGB.
    fn oklab_to_linear(l: f64, a: f64, b: f64) -> [f64; 3] {
        let l_ = l + 0.3963377774 * a + 0.2158037573 * b;
        let m_ = l - 0.1055613458 * a - 0.0638541728 * b;
        let s_ = l - 0.0894841775 * a - 1.2914855480 * b;
        let (l3, m3, s3) = (l_.powi(3), m_.powi(3), s_.powi(3));
        [
            4.0767416621 * l3 - 3.3077115913 * m3 + 0.2309699292 * s3,
            -1.2684380046 * l3 + 2.6097574011 * m3 - 0.3413193965 * s3,
            -0.0041960863 * l3 - 0.7034186147 * m3 + 1.7076147010 * s3,
        ]
    }

    // Ottosson 2020, linear sRGB to OKLab.
    fn srgb8_to_oklab(c: [u8; 3]) -> [f64; 3] {
        let [r, g, b] = c.map(|v| srgb_to_linear(v as f64 / 255.0));
        let l = (0.4122214708 * r + 0.5363325363 * g + 0.0514459929 * b).cbrt();
        let m = (0.2119034982 * r + 0.6806995451 * g + 0.1073969566 * b).cbrt();
        let s = (0.0883024619 * r + 0.2817188376 * g + 0.6299787005 * b).cbrt();
        [
            0.2104542553 * l + 0.7936177850 * m - 0.0040720468 * s,
            1.9779984951 * l - 2.4285922050 * m + 0.4505937099 * s,
            0.0259040371 * l + 0.7827717662 * m - 0.8086757660 * s,
        ]
    }

    fn derive(p0: [f64; 3], p1: [f64; 3], n: usize) -> Vec<([u8; 3], bool)> {
        (0..n)
            .map(|i| {
                let t = i as f64 / (n - 1) as f64;
                let v: Vec<f64> = (0..3).map(|k| p0[k] + t * (p1[k] - p0[k])).collect();
                let lin = oklab_to_linear(v[0], v[1], v[2]);
                let in_gamut = lin.iter().all(|&c| (-1e-9..=1.0 + 1e-9).contains(&c));
                let c = lin.map(|c| (linear_to_srgb(c.clamp(0.0, 1.0)) * 255.0).round() as u8);
                (c, in_gamut)
            })
            .collect()
    }

    #[test]
    fn oklab_matches_published_values() {
        // Ottosson 2020 lists white as L = 1, a = b = 0 and sRGB red as (0.628, 0.225, 0.126).
        let w = srgb8_to_oklab([255, 255, 255]);
        assert!((w[0] - 1.0).abs() < 1e-3 && w[1].abs() < 1e-3 && w[2].abs() < 1e-3, "{w:?}");
        let r = srgb8_to_oklab([255, 0, 0]);
        assert!((r[0] - 0.628).abs() < 2e-3, "{r:?}");
        assert!((r[1] - 0.225).abs() < 2e-3 && (r[2] - 0.126).abs() < 2e-3, "{r:?}");
    }

    #[test]
    fn tables_are_the_derived_oklab_lines_and_in_gamut() {
        for (ramp, p0, p1) in [
            (SCORE, [0.90, -0.02, 0.14], [0.28, -0.01, -0.10]),
            (QUBIT, [0.97, 0.0, 0.006], [0.58, 0.07, 0.085]),
        ] {
            let derived = derive(p0, p1, ramp.stops().len());
            for (stop, (d, in_gamut)) in ramp.stops().iter().zip(&derived) {
                assert!(in_gamut, "stop {d:?} is outside sRGB");
                for k in 0..3 {
                    assert!((stop[k] as i32 - d[k] as i32).abs() <= 1, "{stop:?} vs {d:?}");
                }
            }
        }
    }

    #[test]
    fn lightness_steps_are_monotone_and_even() {
        for (ramp, falling) in [(SCORE, true), (QUBIT, true)] {
            let l: Vec<f64> = ramp.stops().iter().map(|&c| srgb8_to_oklab(c)[0]).collect();
            let steps: Vec<f64> = l.windows(2).map(|w| w[1] - w[0]).collect();
            let mean = steps.iter().sum::<f64>() / steps.len() as f64;
            assert_eq!(mean < 0.0, falling);
            for s in &steps {
                // Rounding to 8 bits moves L by well under 0.01.
                assert!((s - mean).abs() < 0.01, "uneven lightness steps {steps:?}");
            }
        }
    }

    #[test]
    fn interpolation_hits_stops_and_clamps() {
        assert_eq!(SCORE.at(0.0), SCORE.stops()[0]);
        assert_eq!(SCORE.at(1.0), SCORE.stops()[8]);
        assert_eq!(SCORE.at(0.5), SCORE.stops()[4]);
        assert_eq!(SCORE.at(-3.0), SCORE.stops()[0]);
        assert_eq!(SCORE.at(f64::NAN), SCORE.stops()[0]);
        assert_eq!(SCORE.at(7.0), SCORE.stops()[8]);
        assert_eq!(SCORE.hex(1.0), "#0e2459");
    }

    #[test]
    fn ink_reads_on_both_ends() {
        assert_eq!(ink_on(SCORE.at(0.0)), "#000000");
        assert_eq!(ink_on(SCORE.at(1.0)), "#ffffff");
        // WCAG 2.1: white has luminance 1, black 0.
        assert!((relative_luminance([255, 255, 255]) - 1.0).abs() < 1e-9);
        assert!(relative_luminance([0, 0, 0]).abs() < 1e-12);
    }
}
