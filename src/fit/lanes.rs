//! Several values at a time: complex numbers as lanes of real and imaginary parts, and a
//! sine/cosine with no branches and no library call, so that the fitters' inner loops
//! compile to vector instructions (four f64 wide with AVX2, see [`with_avx2`]).

use num_complex::Complex64;
use std::ops::{Add, Mul, Sub};

/// Lanes per vector: two AVX2 registers, so that two independent chains of arithmetic
/// overlap (the polynomial and the recursion are long chains of dependent operations).
pub const W: usize = 8;

/// W reals.
pub type Fv = [f64; W];

/// W complex numbers.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Cv {
    pub re: Fv,
    pub im: Fv,
}

#[inline(always)]
fn map2(a: Fv, b: Fv, f: impl Fn(f64, f64) -> f64) -> Fv {
    std::array::from_fn(|i| f(a[i], b[i]))
}

impl Cv {
    pub const ZERO: Cv = Cv {
        re: [0.0; W],
        im: [0.0; W],
    };
    pub const ONE: Cv = Cv {
        re: [1.0; W],
        im: [0.0; W],
    };

    /// The same value in every lane.
    #[inline(always)]
    pub fn splat(c: Complex64) -> Cv {
        Cv {
            re: [c.re; W],
            im: [c.im; W],
        }
    }

    /// Lane `i` as a complex number.
    #[inline(always)]
    pub fn lane(&self, i: usize) -> Complex64 {
        Complex64::new(self.re[i], self.im[i])
    }

    /// Sets lane `i`.
    #[inline(always)]
    pub fn set(&mut self, i: usize, c: Complex64) {
        self.re[i] = c.re;
        self.im[i] = c.im;
    }

    /// |z|² of each lane.
    #[inline(always)]
    pub fn norm_sqr(self) -> Fv {
        map2(self.re, self.im, |a, b| a * a + b * b)
    }

    /// 1/z of each lane (one division: z̄ times 1/|z|²).
    #[inline(always)]
    pub fn inv(self) -> Cv {
        let n = self.norm_sqr().map(|n| 1.0 / n);
        Cv {
            re: map2(self.re, n, |a, n| a * n),
            im: map2(self.im, n, |b, n| -b * n),
        }
    }

    /// Each lane times a real.
    #[inline(always)]
    pub fn scale(self, s: Fv) -> Cv {
        Cv {
            re: map2(self.re, s, |a, s| a * s),
            im: map2(self.im, s, |a, s| a * s),
        }
    }

    /// The complex conjugate of each lane.
    #[inline(always)]
    pub fn conj(self) -> Cv {
        Cv {
            re: self.re,
            im: self.im.map(|v| -v),
        }
    }

    /// i·z.
    #[inline(always)]
    pub fn times_i(self) -> Cv {
        Cv {
            re: self.im.map(|v| -v),
            im: self.re,
        }
    }

    /// Re(conj(self)·o) of each lane.
    #[inline(always)]
    pub fn re_conj_mul(self, o: Cv) -> Fv {
        let a = map2(self.re, o.re, |a, b| a * b);
        let b = map2(self.im, o.im, |a, b| a * b);
        map2(a, b, |a, b| a + b)
    }
}

impl Add for Cv {
    type Output = Cv;
    #[inline(always)]
    fn add(self, o: Cv) -> Cv {
        Cv {
            re: map2(self.re, o.re, |a, b| a + b),
            im: map2(self.im, o.im, |a, b| a + b),
        }
    }
}

impl Sub for Cv {
    type Output = Cv;
    #[inline(always)]
    fn sub(self, o: Cv) -> Cv {
        Cv {
            re: map2(self.re, o.re, |a, b| a - b),
            im: map2(self.im, o.im, |a, b| a - b),
        }
    }
}

impl Mul for Cv {
    type Output = Cv;
    #[inline(always)]
    fn mul(self, o: Cv) -> Cv {
        let rr = map2(self.re, o.re, |a, b| a * b);
        let ii = map2(self.im, o.im, |a, b| a * b);
        let ri = map2(self.re, o.im, |a, b| a * b);
        let ir = map2(self.im, o.re, |a, b| a * b);
        Cv {
            re: map2(rr, ii, |a, b| a - b),
            im: map2(ri, ir, |a, b| a + b),
        }
    }
}

/// 1.5·2⁵²: adding it rounds a double below 2⁵¹ in magnitude to an integer, which then sits
/// in the low bits of the sum's representation.
const ROUNDER: f64 = 6755399441055744.0;
/// π/2 in three parts: the top 27 bits of the double nearest π/2, its remaining bits, and
/// π/2 minus that double (6.123…·10⁻¹⁷, the value cos(π/2) takes in floating point). k·HI and
/// k·MID are exact for |k| < 2²⁶, so the reduction x − k·π/2 loses nothing to cancellation.
const PIO2_HI: f64 = f64::from_bits(std::f64::consts::FRAC_PI_2.to_bits() & !((1u64 << 26) - 1));
const PIO2_MID: f64 = std::f64::consts::FRAC_PI_2 - PIO2_HI;
const PIO2_LO: f64 = 6.123_233_995_736_766e-17;
/// Largest |x| [`sin_cos`] reduces itself (exact for |k| < 2²⁶).
pub const SIN_COS_LIMIT: f64 = 1.0e7;

/// Minimax coefficients of sin r = r + r³·P(r²) and cos r = 1 − r²/2 + r⁴·Q(r²) on
/// |r| ≤ π/4: the kernels of fdlibm (Sun Microsystems, 1993; `k_sin.c`, `k_cos.c`), values
/// from memory, checked here against 40-digit arithmetic (mpmath: within 0.33 and 0.54 of
/// 2⁻⁵² over the interval) and by the unit test below against the library. Written with
/// fdlibm's 21 digits, which round to the same doubles.
#[allow(clippy::excessive_precision)]
const SIN_C: [f64; 6] = [
    -1.666_666_666_666_663_243_48e-1,
    8.333_333_333_322_489_461_24e-3,
    -1.984_126_982_985_794_931_34e-4,
    2.755_731_370_707_006_767_89e-6,
    -2.505_076_025_340_686_341_95e-8,
    1.589_690_995_211_550_102_21e-10,
];
#[allow(clippy::excessive_precision)]
const COS_C: [f64; 6] = [
    4.166_666_666_666_660_190_37e-2,
    -1.388_888_888_887_410_957_49e-3,
    2.480_158_728_947_672_941_78e-5,
    -2.755_731_435_139_066_330_35e-7,
    2.087_572_321_298_174_827_90e-9,
    -1.135_964_755_778_819_482_65e-11,
];

/// sin x and cos x of each lane, within a few units in the last place (lanes beyond
/// [`SIN_COS_LIMIT`] go to the library): x is reduced by the nearest multiple k of
/// π/2 (Cody–Waite, three parts), minimax polynomials evaluated on |r| ≤ π/4, and the
/// quadrant k mod 4 applied by bit masks.
#[inline(always)]
pub fn sin_cos(x: Fv) -> (Fv, Fv) {
    if !all(x.map(|v| v.abs() <= SIN_COS_LIMIT)) {
        // Beyond the exact reduction (or NaN): the library, lane by lane.
        let sc = x.map(f64::sin_cos);
        return (sc.map(|v| v.0), sc.map(|v| v.1));
    }
    let mut s = [0.0; W];
    let mut c = [0.0; W];
    for i in 0..W {
        let shifted = x[i] * std::f64::consts::FRAC_2_PI + ROUNDER;
        let k = shifted - ROUNDER;
        let q = shifted.to_bits();
        let r = ((x[i] - k * PIO2_HI) - k * PIO2_MID) - k * PIO2_LO;
        let r2 = r * r;
        // Estrin's scheme: pairs first, then powers of r⁴, a shorter chain of dependent
        // operations than Horner's.
        let r4 = r2 * r2;
        let poly = |c: &[f64; 6]| {
            let (a, b, e) = (c[0] + c[1] * r2, c[2] + c[3] * r2, c[4] + c[5] * r2);
            a + r4 * (b + r4 * e)
        };
        let sin_r = r + r * r2 * poly(&SIN_C);
        let cos_r = 1.0 + r2 * (-0.5 + r2 * poly(&COS_C));
        // Quadrant q: sin x = (sin r, cos r, −sin r, −cos r), cos x = (cos r, −sin r, −cos r, sin r).
        let odd = (q & 1).wrapping_neg();
        let a = (cos_r.to_bits() & odd) | (sin_r.to_bits() & !odd);
        let b = (sin_r.to_bits() & odd) | (cos_r.to_bits() & !odd);
        s[i] = f64::from_bits(a ^ ((q & 2) << 62));
        c[i] = f64::from_bits(b ^ ((q.wrapping_add(1) & 2) << 62));
    }
    (s, c)
}

/// Whether every lane is true, without a branch per lane.
#[inline(always)]
pub fn all(v: [bool; W]) -> bool {
    v.iter().fold(true, |a, b| a & b)
}

/// Σ a_i b_i in W independent partial sums (equal to the plain sum up to rounding).
#[inline(always)]
pub fn dot(a: &[f64], b: &[f64]) -> f64 {
    let n = a.len().min(b.len());
    let full = n - n % W;
    let mut acc = [0.0; W];
    for (x, y) in a[..full].chunks_exact(W).zip(b[..full].chunks_exact(W)) {
        for l in 0..W {
            acc[l] += x[l] * y[l];
        }
    }
    let tail: f64 = (full..n).map(|i| a[i] * b[i]).sum();
    acc.iter().sum::<f64>() + tail
}

/// Σ f(i) over i < n in W independent partial sums: a single running sum makes every
/// addition wait for the one before it. Equal to the plain sum up to rounding.
#[inline(always)]
pub fn sum(n: usize, f: impl Fn(usize) -> f64) -> f64 {
    let mut acc = [0.0; W];
    let full = n - n % W;
    for start in (0..full).step_by(W) {
        for (l, a) in acc.iter_mut().enumerate() {
            *a += f(start + l);
        }
    }
    let tail: f64 = (full..n).map(&f).sum();
    acc.iter().sum::<f64>() + tail
}

/// Runs `f` compiled for AVX2 when the processor has it (every lane loop inlined into `f`
/// then runs four f64 wide), as plain x86-64 otherwise. Same arithmetic either way: Rust does
/// not contract a·b + c into a fused multiply-add, so the results are bit for bit the same.
#[inline(always)]
pub fn with_avx2<R>(f: impl FnOnce() -> R) -> R {
    #[cfg(target_arch = "x86_64")]
    {
        #[target_feature(enable = "avx2")]
        fn avx2<R>(f: impl FnOnce() -> R) -> R {
            f()
        }
        if std::arch::is_x86_feature_detected!("avx2") {
            // SAFETY: the processor was just checked to support AVX2.
            return unsafe { avx2(f) };
        }
    }
    f()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn sin_cos_agrees_with_the_library_to_a_few_ulp() {
        // Quadrant boundaries, small and large phases (a 15 µm film at 400 nm is ~700 rad).
        let mut xs: Vec<f64> = (-4000..=4000).map(|i| i as f64 * 0.25).collect();
        xs.extend((0..64).map(|k| k as f64 * std::f64::consts::FRAC_PI_4));
        xs.extend((0..2000).map(|i| 1e-3 * 1.618f64.powi(i % 40) * (i as f64).sin()));
        xs.extend([1e5 + 0.3, -9.9e6, 0.0, -0.0, 1e-300, 3e9, -1e300]);
        let mut worst = 0.0f64;
        for chunk in xs.chunks(W) {
            let mut x = [0.0; W];
            x[..chunk.len()].copy_from_slice(chunk);
            let (s, c) = sin_cos(x);
            for i in 0..chunk.len() {
                let (ws, wc) = x[i].sin_cos();
                // Absolute error against libm, in units of 2⁻⁵³ (half an ulp of 1): the
                // reduction's error grows like |x|·2⁻⁸⁰, below this at these magnitudes.
                let e = ((s[i] - ws).abs()).max((c[i] - wc).abs()) / f64::EPSILON;
                worst = worst.max(e);
                assert!(e <= 2.0, "x = {}: {} {} vs {ws} {wc}", x[i], s[i], c[i]);
            }
        }
        eprintln!("worst error {worst} eps");
    }

    #[test]
    fn lane_sums_equal_plain_sums() {
        for n in [0, 1, 7, 8, 9, 100, 2048] {
            let f = |i: usize| 1.0 / (1.0 + i as f64);
            let plain: f64 = (0..n).map(f).sum();
            assert!(
                (sum(n, f) - plain).abs() <= 1e-14 * plain.max(1.0),
                "n = {n}"
            );
        }
    }

    #[test]
    fn complex_lanes_match_num_complex() {
        let a: [Complex64; W] = std::array::from_fn(|i| {
            [
                Complex64::new(0.3, -1.2),
                Complex64::new(-2.0, 0.5),
                Complex64::new(1e-3, 4.0),
                Complex64::new(7.0, 0.0),
            ][i % 4]
                * (1.0 + i as f64)
        });
        let b: [Complex64; W] = std::array::from_fn(|i| {
            [
                Complex64::new(1.1, 0.4),
                Complex64::new(0.0, -3.0),
                Complex64::new(-0.7, 0.9),
                Complex64::new(2.0, 2.0),
            ][i % 4]
                / (1.0 + i as f64)
        });
        let mut va = Cv::ZERO;
        let mut vb = Cv::ZERO;
        for i in 0..W {
            va.set(i, a[i]);
            vb.set(i, b[i]);
        }
        for i in 0..W {
            let close = |x: Complex64, y: Complex64| (x - y).norm() <= 1e-15 * y.norm().max(1.0);
            assert!(close((va * vb).lane(i), a[i] * b[i]));
            assert!(close((va + vb).lane(i), a[i] + b[i]));
            assert!(close((va - vb).lane(i), a[i] - b[i]));
            assert!(close(va.inv().lane(i), a[i].inv()));
            assert!(close(va.times_i().lane(i), a[i] * Complex64::i()));
            assert!(close(va.conj().lane(i), a[i].conj()));
            assert!((va.re_conj_mul(vb)[i] - (a[i].conj() * b[i]).re).abs() < 1e-15);
            assert!((va.norm_sqr()[i] - a[i].norm_sqr()).abs() < 1e-15);
        }
    }
}
