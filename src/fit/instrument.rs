//! The spectrometer's instrument function: each pixel sees the spectrum through a slit
//! function of a given FWHM, modelled as a Gaussian (common practice for a grating
//! spectrometer whose slit image is a few pixels wide). The model is evaluated on a finer
//! grid around the pixels and averaged with the slit weights, so fringes narrower than the
//! slit lose contrast in the model as they do in the measurement.

/// Fine-grid points per FWHM: enough for the trapezoidal average of a Gaussian-weighted
/// fringe to be exact to well below the noise (fringes are at least a few points apart).
const POINTS_PER_FWHM: f64 = 6.0;
/// The slit function is cut at ± this many σ (weights below 1 % of the peak are dropped).
const CUT_SIGMAS: f64 = 3.0;
/// At most this many fine points per pixel.
const MAX_OVERSAMPLING: f64 = 16.0;

/// One pixel's slit: the first fine point it averages and the weights (summing to 1).
#[derive(Debug, Clone)]
struct Row {
    start: usize,
    weights: Vec<f64>,
}

/// A Gaussian slit function of one FWHM over one pixel grid.
#[derive(Debug, Clone)]
pub struct Slit {
    /// The fine wavelength grid the model is evaluated on, nm.
    pub fine_nm: Vec<f64>,
    rows: Vec<Row>,
}

impl Slit {
    /// The slit of FWHM `fwhm_nm` for pixels at `pixels_nm` (ascending, at least 2).
    pub fn gaussian(pixels_nm: &[f64], fwhm_nm: f64) -> Slit {
        let sigma = fwhm_nm / (8.0 * std::f64::consts::LN_2).sqrt();
        let (first, last) = (pixels_nm[0], pixels_nm[pixels_nm.len() - 1]);
        let reach = CUT_SIGMAS * sigma;
        let span = last - first + 2.0 * reach;
        let spacing = (fwhm_nm / POINTS_PER_FWHM)
            .max(span / (MAX_OVERSAMPLING * pixels_nm.len() as f64))
            .max(1e-6);
        let count = (span / spacing).ceil() as usize + 1;
        let fine_nm: Vec<f64> = (0..count)
            .map(|i| first - reach + i as f64 * spacing)
            .collect();
        let rows = pixels_nm
            .iter()
            .map(|&l| {
                let start = (((l - reach) - fine_nm[0]) / spacing).floor().max(0.0) as usize;
                let end = ((((l + reach) - fine_nm[0]) / spacing).ceil() as usize).min(count - 1);
                let mut weights: Vec<f64> = (start..=end)
                    .map(|k| (-0.5 * ((fine_nm[k] - l) / sigma).powi(2)).exp())
                    .collect();
                let total: f64 = weights.iter().sum();
                weights.iter_mut().for_each(|w| *w /= total);
                Row { start, weights }
            })
            .collect();
        Slit { fine_nm, rows }
    }

    /// Number of pixels.
    pub fn pixels(&self) -> usize {
        self.rows.len()
    }

    /// The fine points pixel `j` averages: their first index and how many.
    pub fn support(&self, j: usize) -> (usize, usize) {
        (self.rows[j].start, self.rows[j].weights.len())
    }

    /// Pixel `j`'s value of a quantity given at every fine point.
    pub fn apply(&self, j: usize, fine: &[f64]) -> f64 {
        let row = &self.rows[j];
        row.weights
            .iter()
            .zip(&fine[row.start..])
            .map(|(w, v)| w * v)
            .sum()
    }

    /// Pixel `j`'s value of a quantity given at every fine point, `stride` values per point
    /// (component `c`).
    pub fn apply_strided(&self, j: usize, fine: &[f64], stride: usize, c: usize) -> f64 {
        let row = &self.rows[j];
        row.weights
            .iter()
            .enumerate()
            .map(|(i, w)| w * fine[(row.start + i) * stride + c])
            .sum()
    }

    /// Every pixel's value of a quantity given at every fine point.
    pub fn convolve(&self, fine: &[f64]) -> Vec<f64> {
        (0..self.rows.len()).map(|j| self.apply(j, fine)).collect()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_cosine_loses_the_contrast_a_gaussian_slit_predicts() {
        // A Gaussian of standard deviation σ multiplies a cosine of period P by
        // exp(−2π²σ²/P²) (its Fourier transform).
        let pixels: Vec<f64> = (0..400).map(|i| 500.0 + 0.25 * i as f64).collect();
        let fwhm = 0.5;
        let slit = Slit::gaussian(&pixels, fwhm);
        let period = 1.2;
        let fine: Vec<f64> = slit
            .fine_nm
            .iter()
            .map(|l| (2.0 * std::f64::consts::PI * l / period).cos())
            .collect();
        let out = slit.convolve(&fine);
        let sigma = fwhm / (8.0 * std::f64::consts::LN_2).sqrt();
        let damping = (-2.0 * (std::f64::consts::PI * sigma / period).powi(2)).exp();
        for (j, l) in pixels.iter().enumerate() {
            let want = damping * (2.0 * std::f64::consts::PI * l / period).cos();
            // The cut at ±3σ leaves about 1 % of the weight out.
            assert!((out[j] - want).abs() < 0.01, "{l}: {} vs {want}", out[j]);
        }
        let constant = slit.convolve(&vec![0.3; slit.fine_nm.len()]);
        assert!(constant.iter().all(|v| (v - 0.3).abs() < 1e-12));
    }
}
