//! Colours: the map's perceptually uniform scale, built in Oklab.
//!
//! Oklab (B. Ottosson, "A perceptual color space for image processing", 2020) is a colour
//! space in which equal distances look about equally different. The isopach scale ("clay") is
//! a straight ramp in lightness (L 0.28 → 0.95) with hue turning from wine through brick,
//! copper and ochre to a pale celadon (h 5° → 125°) while chroma eases from 0.11 to 0.07, so
//! equal steps in thickness look like equal steps in colour and the scale reads in grey
//! print. Chroma is reduced only where sRGB cannot show the colour. Lightness carries the
//! order, so it survives colour-vision deficiency: [`simulate_cvd`] (Machado, Oliveira &
//! Fernandes 2009) is what the tests check it with.

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
const L_RANGE: (f64, f64) = (0.28, 0.95);
/// Hue at the two ends, degrees (wine → pale celadon, turning through the warm hues).
const H_RANGE: (f64, f64) = (5.0, 125.0);
/// Chroma aimed at the two ends (eased linearly between them).
const C_RANGE: (f64, f64) = (0.11, 0.07);

/// The scale's colour in Oklab at `t` in 0..1 (clamped), chroma reduced into sRGB gamut.
pub fn scale_oklab(t: f64) -> Oklab {
    let t = if t.is_finite() {
        t.clamp(0.0, 1.0)
    } else {
        0.5
    };
    let l = L_RANGE.0 + (L_RANGE.1 - L_RANGE.0) * t;
    let h = H_RANGE.0 + (H_RANGE.1 - H_RANGE.0) * t;
    let chroma = C_RANGE.0 + (C_RANGE.1 - C_RANGE.0) * t;
    let fits = |c: f64| in_gamut(oklab_to_linear_srgb(from_lch(l, c, h)));
    if fits(chroma) {
        return from_lch(l, chroma, h);
    }
    let (mut lo, mut hi) = (0.0, chroma);
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

/// A colour-vision deficiency, simulated at full severity.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Deficiency {
    /// No L cones (red-weak).
    Protan,
    /// No M cones (green-weak), the most common.
    Deutan,
    /// No S cones (blue-weak).
    Tritan,
}

impl Deficiency {
    pub const ALL: [Deficiency; 3] = [Deficiency::Protan, Deficiency::Deutan, Deficiency::Tritan];

    /// The linear-sRGB simulation matrix at severity 1.0 of Machado, Oliveira & Fernandes,
    /// "A physiologically-based model for simulation of color vision deficiency", IEEE TVCG
    /// 15(6), 1291–1298, 2009 (their published table of matrices).
    fn matrix(self) -> [[f64; 3]; 3] {
        match self {
            Deficiency::Protan => [
                [0.152286, 1.052583, -0.204868],
                [0.114503, 0.786281, 0.099216],
                [-0.003882, -0.048116, 1.051998],
            ],
            Deficiency::Deutan => [
                [0.367322, 0.860646, -0.227968],
                [0.280085, 0.672501, 0.047413],
                [-0.011820, 0.042940, 0.968881],
            ],
            Deficiency::Tritan => [
                [1.255528, -0.076749, -0.178779],
                [-0.078411, 0.930809, 0.147602],
                [0.004733, 0.691367, 0.303900],
            ],
        }
    }
}

/// How `c` looks to a viewer with the deficiency `d` (Machado et al. 2009, severity 1.0),
/// in Oklab; the simulated colour is clamped into the sRGB cube as a display would show it.
pub fn simulate_cvd(c: Rgb, d: Deficiency) -> Oklab {
    let lin = [c.0, c.1, c.2].map(|v| srgb_to_linear(v as f64 / 255.0));
    let m = d.matrix();
    let sim = m.map(|row| (row[0] * lin[0] + row[1] * lin[1] + row[2] * lin[2]).clamp(0.0, 1.0));
    linear_srgb_to_oklab(sim)
}

/// Oklab of an 8-bit sRGB colour.
pub fn oklab_of(c: Rgb) -> Oklab {
    linear_srgb_to_oklab([c.0, c.1, c.2].map(|v| srgb_to_linear(v as f64 / 255.0)))
}

/// Euclidean distance in Oklab (ΔE_ok; about 0.02 is a just-noticeable difference for
/// patches side by side, from memory).
pub fn delta_e(p: Oklab, q: Oklab) -> f64 {
    ((p.l - q.l).powi(2) + (p.a - q.a).powi(2) + (p.b - q.b).powi(2)).sqrt()
}

/// Black or white, whichever reads better on `bg` (by Oklab lightness).
pub fn ink_on(bg: Rgb) -> Rgb {
    if oklab_of(bg).l > 0.62 {
        Rgb(0x1a, 0x1d, 0x21)
    } else {
        Rgb(0xff, 0xff, 0xff)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn dist(p: Oklab, q: Oklab) -> f64 {
        delta_e(p, q)
    }

    fn hex(s: &str) -> Rgb {
        let v = |i: usize| u8::from_str_radix(&s[i..i + 2], 16).unwrap();
        Rgb(v(1), v(3), v(5))
    }

    /// Band colours as the map draws them: `n` bands, each at its middle.
    fn bands(n: usize) -> Vec<Rgb> {
        (0..n).map(|k| scale((k as f64 + 0.5) / n as f64)).collect()
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

    #[test]
    fn scale_lightness_steps_are_at_least_a_band_apart() {
        // 16 bands (more than the 10 isolines asked for by default): every neighbour is
        // lighter than the one below by at least 0.04 in Oklab L (two just-noticeable
        // differences, the JND of 0.02 from memory), after 8-bit rounding.
        let l: Vec<f64> = bands(16).into_iter().map(|c| oklab_of(c).l).collect();
        let min_step = l.windows(2).map(|w| w[1] - w[0]).fold(f64::MAX, f64::min);
        assert!(min_step >= 0.04, "smallest lightness step {min_step:.4}");
        assert!(l[0] < 0.32 && l[15] > 0.9, "{l:?}");
    }

    #[test]
    fn scale_survives_colour_vision_deficiency() {
        // Machado, Oliveira & Fernandes (IEEE TVCG 15(6), 2009), severity 1.0: for every
        // deficiency the simulated scale stays monotone in lightness along 64 steps, and
        // twelve neighbouring bands stay at least 0.04 ΔE_ok apart (two JNDs, from memory).
        for d in Deficiency::ALL {
            let l: Vec<f64> = (0..=64)
                .map(|i| simulate_cvd(scale(i as f64 / 64.0), d).l)
                .collect();
            assert!(
                l.windows(2).all(|w| w[1] > w[0]),
                "{d:?}: simulated lightness not monotone {l:?}"
            );
            let sim: Vec<Oklab> = bands(12).into_iter().map(|c| simulate_cvd(c, d)).collect();
            let min = sim
                .windows(2)
                .map(|w| dist(w[0], w[1]))
                .fold(f64::MAX, f64::min);
            assert!(min >= 0.04, "{d:?}: neighbouring bands {min:.4} apart");
        }
        // The simulation itself: white stays white, and under deuteranopia pure red and a
        // green of about the same lightness collapse towards each other (the confusion the
        // model exists to show), while they stay far apart for normal vision.
        let w = simulate_cvd(Rgb(255, 255, 255), Deficiency::Deutan);
        assert!((w.l - 1.0).abs() < 0.01, "{w:?}");
        let (red, green) = (Rgb(200, 60, 40), Rgb(110, 120, 30));
        let normal = dist(oklab_of(red), oklab_of(green));
        let deutan = dist(
            simulate_cvd(red, Deficiency::Deutan),
            simulate_cvd(green, Deficiency::Deutan),
        );
        assert!(
            deutan < 0.5 * normal,
            "normal {normal:.3}, deutan {deutan:.3}"
        );
    }

    #[test]
    fn scale_is_far_from_viridis() {
        // Anchor points of matplotlib's viridis at 0, ¼, ½, ¾, 1 (from memory; the first
        // agrees with its published table, 0.267 0.005 0.329). Our scale must differ
        // clearly at every anchor (ΔE_ok ≥ 0.09, several JNDs) and on average by ≥ 0.13.
        let viridis = ["#440154", "#3b528b", "#21918c", "#5ec962", "#fde725"];
        let d: Vec<f64> = viridis
            .iter()
            .enumerate()
            .map(|(i, h)| dist(oklab_of(hex(h)), oklab_of(scale(i as f64 / 4.0))))
            .collect();
        let mean = d.iter().sum::<f64>() / d.len() as f64;
        assert!(d.iter().all(|&x| x >= 0.09), "{d:?}");
        assert!(mean >= 0.13, "mean ΔE_ok {mean:.3} {d:?}");
    }
}
