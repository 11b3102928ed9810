//! Colours: categorical colours are evenly spaced hues at fixed lightness and chroma in
//! OKLCH (the polar form of OKLab, Ottosson 2020), converted to sRGB; the heatmap ramp is our
//! own path through OKLab from a pale warm white to a deep blue-violet.

use plotters::style::RGBColor;

/// An sRGB colour.
pub type Rgb = RGBColor;

fn srgb_gamma(x: f64) -> f64 {
    let x = x.clamp(0.0, 1.0);
    if x <= 0.0031308 {
        12.92 * x
    } else {
        1.055 * x.powf(1.0 / 2.4) - 0.055
    }
}

/// OKLab (L, a, b) to sRGB, clamped into gamut.
pub fn oklab_to_rgb(l: f64, a: f64, b: f64) -> Rgb {
    let l_ = l + 0.396_337_777_4 * a + 0.215_803_757_3 * b;
    let m_ = l - 0.105_561_345_8 * a - 0.063_854_172_8 * b;
    let s_ = l - 0.089_484_177_5 * a - 1.291_485_548 * b;
    let (l3, m3, s3) = (l_ * l_ * l_, m_ * m_ * m_, s_ * s_ * s_);
    let r = 4.076_741_662_1 * l3 - 3.307_711_591_3 * m3 + 0.230_969_929_2 * s3;
    let g = -1.268_438_004_6 * l3 + 2.609_757_401_1 * m3 - 0.341_319_396_5 * s3;
    let bl = -0.004_196_086_3 * l3 - 0.703_418_614_7 * m3 + 1.707_614_701 * s3;
    let to8 = |x: f64| (srgb_gamma(x) * 255.0).round() as u8;
    RGBColor(to8(r), to8(g), to8(bl))
}

/// OKLCH (lightness, chroma, hue in degrees) to sRGB.
pub fn oklch_to_rgb(l: f64, c: f64, h_deg: f64) -> Rgb {
    let h = h_deg.to_radians();
    oklab_to_rgb(l, c * h.cos(), c * h.sin())
}

/// `n` categorical colours: evenly spaced hues starting at 25 degrees, with lightness
/// alternating between two levels so neighbours in the list differ in more than hue.
pub fn category_colours(n: usize) -> Vec<Rgb> {
    (0..n)
        .map(|i| {
            let h = 25.0 + 360.0 * (i as f64) / (n.max(1) as f64);
            let l = if n > 8 && i % 2 == 1 { 0.52 } else { 0.68 };
            oklch_to_rgb(l, 0.14, h)
        })
        .collect()
}

/// Grey used for "other" and for unlabelled points.
pub const OTHER: Rgb = RGBColor(170, 170, 170);

/// Sequential ramp for heatmaps, `t` in [0, 1]: pale warm white to deep blue-violet,
/// monotone in lightness.
pub fn ramp(t: f64) -> Rgb {
    let t = if t.is_finite() {
        t.clamp(0.0, 1.0)
    } else {
        0.0
    };
    let l = 0.97 - 0.62 * t;
    let c = 0.02 + 0.13 * t.powf(0.8);
    let h = 85.0 + 190.0 * t;
    oklch_to_rgb(l, c, h)
}

/// Sequential ramp for values on a white background, `t` in [0, 1]: light olive through teal
/// to deep violet, monotone in lightness and never paler than 0.84, so low values stay visible.
pub fn value_ramp(t: f64) -> Rgb {
    let t = if t.is_finite() {
        t.clamp(0.0, 1.0)
    } else {
        0.0
    };
    let l = 0.84 - 0.48 * t;
    let c = 0.11 + 0.05 * (std::f64::consts::PI * t).sin();
    let h = 105.0 + 195.0 * t;
    oklch_to_rgb(l, c, h)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn value_ramp_gets_darker_and_stays_visible() {
        let lum = |c: Rgb| 0.2126 * c.0 as f64 + 0.7152 * c.1 as f64 + 0.0722 * c.2 as f64;
        let mut prev = f64::INFINITY;
        for i in 0..=10 {
            let v = lum(value_ramp(i as f64 / 10.0));
            assert!(v < prev, "step {i}");
            assert!(v < 225.0, "step {i} too pale: {v}");
            prev = v;
        }
    }

    #[test]
    fn oklab_white_and_black_round_trip() {
        // OKLab L=1, a=b=0 is sRGB white; L=0 is black (Ottosson 2020 definition).
        assert_eq!(oklab_to_rgb(1.0, 0.0, 0.0), RGBColor(255, 255, 255));
        assert_eq!(oklab_to_rgb(0.0, 0.0, 0.0), RGBColor(0, 0, 0));
    }

    #[test]
    fn ramp_gets_darker() {
        let lum = |c: Rgb| 0.2126 * c.0 as f64 + 0.7152 * c.1 as f64 + 0.0722 * c.2 as f64;
        let mut prev = f64::INFINITY;
        for i in 0..=10 {
            let v = lum(ramp(i as f64 / 10.0));
            assert!(v < prev);
            prev = v;
        }
    }

    #[test]
    fn category_colours_are_distinct() {
        let c = category_colours(20);
        for i in 0..20 {
            for j in 0..i {
                assert_ne!(c[i], c[j]);
            }
        }
    }
}
