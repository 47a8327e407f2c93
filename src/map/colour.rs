//! Colours: the map's perceptually uniform scale, built in Oklab.
//!
//! Oklab (B. Ottosson, "A perceptual color space for image processing", 2020) is a colour
//! space in which equal distances look about equally different. The isopach scale is a
//! straight ramp in lightness (L 0.30 → 0.93) with hue turning from indigo through teal and
//! green to straw (h 275° → 95°) at nearly constant chroma, so equal steps in thickness look
//! like equal steps in colour, the scale reads in grey print and it stays clear of the
//! red–green axis. Chroma is reduced only where sRGB cannot show the colour.

/// An sRGB colour, 8 bits per channel.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Rgb(pub u8, pub u8, pub u8);

impl Rgb {
    /// `#rrggbb`.
    pub fn hex(self) -> String {
        format!("#{:02x}{:02x}{:02x}", self.0, self.1, self.2)
    }
}

/// A colour in Oklab: lightness L (0..1) and the opponent axes a, b.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Oklab {
    pub l: f64,
    pub a: f64,
    pub b: f64,
}

/// sRGB transfer function, encoded 0..1 → linear (IEC 61966-2-1).
pub fn srgb_to_linear(c: f64) -> f64 {
    if c <= 0.04045 {
        c / 12.92
    } else {
        ((c + 0.055) / 1.055).powf(2.4)
    }
}

/// Inverse sRGB transfer function, linear → encoded 0..1.
pub fn linear_to_srgb(c: f64) -> f64 {
    if c <= 0.0031308 {
        12.92 * c
    } else {
        1.055 * c.powf(1.0 / 2.4) - 0.055
    }
}

/// Linear sRGB → Oklab (Ottosson 2020 matrices).
pub fn linear_srgb_to_oklab([r, g, b]: [f64; 3]) -> Oklab {
    let l = (0.4122214708 * r + 0.5363325363 * g + 0.0514459929 * b).cbrt();
    let m = (0.2119034982 * r + 0.6806995451 * g + 0.1073969566 * b).cbrt();
    let s = (0.0883024619 * r + 0.2817188376 * g + 0.6299787005 * b).cbrt();
    Oklab {
        l: 0.2104542553 * l + 0.7936177850 * m - 0.0040720468 * s,
        a: 1.9779984951 * l - 2.4285922050 * m + 0.4505937099 * s,
        b: 0.0259040371 * l + 0.7827717662 * m - 0.8086757660 * s,
    }
}

/// Oklab → linear sRGB (may fall outside 0..1 when the colour is out of gamut).
pub fn oklab_to_linear_srgb(c: Oklab) -> [f64; 3] {
    let l = (c.l + 0.3963377774 * c.a + 0.2158037573 * c.b).powi(3);
    let m = (c.l - 0.1055613458 * c.a - 0.0638541728 * c.b).powi(3);
    let s = (c.l - 0.0894841775 * c.a - 1.2914855480 * c.b).powi(3);
    [
        4.0767416621 * l - 3.3077115913 * m + 0.2309699292 * s,
        -1.2684380046 * l + 2.6097574011 * m - 0.3413193965 * s,
        -0.0041960863 * l - 0.7034186147 * m + 1.7076147010 * s,
    ]
}

/// Oklab from lightness, chroma and hue (degrees).
pub fn from_lch(l: f64, c: f64, h_deg: f64) -> Oklab {
    let (s, co) = h_deg.to_radians().sin_cos();
    Oklab {
        l,
        a: c * co,
        b: c * s,
    }
}

fn in_gamut(rgb: [f64; 3]) -> bool {
    rgb.iter().all(|&v| (-1e-9..=1.0 + 1e-9).contains(&v))
}

/// Encodes linear sRGB (clamped) as 8-bit sRGB.
pub fn to_rgb8(rgb: [f64; 3]) -> Rgb {
    let q = |v: f64| (linear_to_srgb(v.clamp(0.0, 1.0)) * 255.0).round() as u8;
    Rgb(q(rgb[0]), q(rgb[1]), q(rgb[2]))
}

/// Lightness at the two ends of the scale.
const L_RANGE: (f64, f64) = (0.30, 0.93);
/// Hue at the two ends, degrees.
const H_RANGE: (f64, f64) = (275.0, 95.0);
/// Chroma aimed at along the whole scale.
const CHROMA: f64 = 0.115;

/// The scale's colour in Oklab at `t` in 0..1 (clamped), chroma reduced into sRGB gamut.
pub fn scale_oklab(t: f64) -> Oklab {
    let t = if t.is_finite() {
        t.clamp(0.0, 1.0)
    } else {
        0.5
    };
    let l = L_RANGE.0 + (L_RANGE.1 - L_RANGE.0) * t;
    let h = H_RANGE.0 + (H_RANGE.1 - H_RANGE.0) * t;
    let fits = |c: f64| in_gamut(oklab_to_linear_srgb(from_lch(l, c, h)));
    if fits(CHROMA) {
        return from_lch(l, CHROMA, h);
    }
    let (mut lo, mut hi) = (0.0, CHROMA);
    for _ in 0..30 {
        let mid = 0.5 * (lo + hi);
        if fits(mid) {
            lo = mid;
        } else {
            hi = mid;
        }
    }
    from_lch(l, lo, h)
}

/// The scale's sRGB colour at `t` in 0..1.
pub fn scale(t: f64) -> Rgb {
    to_rgb8(oklab_to_linear_srgb(scale_oklab(t)))
}

/// Black or white, whichever reads better on `bg` (by Oklab lightness).
pub fn ink_on(bg: Rgb) -> Rgb {
    let lin = [bg.0, bg.1, bg.2].map(|v| srgb_to_linear(v as f64 / 255.0));
    if linear_srgb_to_oklab(lin).l > 0.62 {
        Rgb(0x1a, 0x1d, 0x21)
    } else {
        Rgb(0xff, 0xff, 0xff)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn dist(p: Oklab, q: Oklab) -> f64 {
        ((p.l - q.l).powi(2) + (p.a - q.a).powi(2) + (p.b - q.b).powi(2)).sqrt()
    }

    #[test]
    fn white_is_l1_and_neutral() {
        // Oklab is defined so that D65 white maps to L = 1, a = b = 0 (Ottosson 2020).
        let w = linear_srgb_to_oklab([1.0, 1.0, 1.0]);
        assert!(
            (w.l - 1.0).abs() < 1e-4 && w.a.abs() < 1e-4 && w.b.abs() < 1e-4,
            "{w:?}"
        );
        // sRGB red: L = 0.628, a = 0.225, b = 0.126 (published worked values, from memory).
        let r = linear_srgb_to_oklab([1.0, 0.0, 0.0]);
        assert!(
            (r.l - 0.628).abs() < 2e-3 && (r.a - 0.225).abs() < 2e-3,
            "{r:?}"
        );
        assert!((r.b - 0.126).abs() < 2e-3, "{r:?}");
    }

    #[test]
    fn oklab_round_trips() {
        for rgb in [[0.2, 0.5, 0.9], [1.0, 0.0, 0.3], [0.01, 0.02, 0.0]] {
            let back = oklab_to_linear_srgb(linear_srgb_to_oklab(rgb));
            for (a, b) in rgb.iter().zip(back) {
                assert!((a - b).abs() < 1e-6, "{rgb:?} -> {back:?}");
            }
        }
        assert!((srgb_to_linear(linear_to_srgb(0.3)) - 0.3).abs() < 1e-12);
    }

    #[test]
    fn scale_is_monotone_in_lightness_and_nearly_uniform() {
        let n = 64;
        let pts: Vec<Oklab> = (0..=n).map(|i| scale_oklab(i as f64 / n as f64)).collect();
        let steps: Vec<f64> = pts.windows(2).map(|w| dist(w[0], w[1])).collect();
        assert!(pts.windows(2).all(|w| w[1].l > w[0].l));
        let (min, max) = steps
            .iter()
            .fold((f64::MAX, 0.0f64), |(a, b), &s| (a.min(s), b.max(s)));
        assert!(max / min < 1.35, "step ratio {}", max / min);
        // Every colour is shown as it was computed (in gamut after the chroma reduction).
        assert!(pts.iter().all(|&p| in_gamut(oklab_to_linear_srgb(p))));
    }
}
