//! Centring and scaling of feature columns, and the matching log-Jacobian.
//!
//! Each column is centred on its mean and divided by its population standard
//! deviation (divisor N, the maximum-likelihood estimate; any positive scale
//! would do, because [`Standardizer::log_jacobian`] converts densities back).
//! The variance is the corrected two-pass formula of Chan, Golub & LeVeque,
//! "Algorithms for computing the sample variance: analysis and
//! recommendations", The American Statistician 37(3), 1983, eq. 1.7:
//! `(Σd² − (Σd)²/N) / N` with `d = x − mean`, which stays accurate when the
//! spread is small beside the mean.
//!
//! Before summing, each column is multiplied by a power of two that brings
//! its largest magnitude near 1. That is exact in binary floating point and
//! keeps the sums of squares finite even for values near `f64::MAX`.
//!
//! A column whose spread is within rounding of nothing (standard deviation
//! at most 64 ulps of its largest magnitude) is constant: it gets scale 1 and
//! is listed in [`Standardizer::constant_columns`], since dividing by such a
//! spread would only amplify rounding noise.

use ndarray::{Array2, ArrayView1, ArrayView2};

/// A standard deviation at most this many units in the last place of the
/// column's largest magnitude counts as zero.
const CONSTANT_ULPS: f64 = 64.0;

/// Per-column means and scales fitted to a data matrix.
#[derive(Debug, Clone, PartialEq)]
pub struct Standardizer {
    /// Each column's mean.
    pub means: Vec<f64>,
    /// Each column's population standard deviation, or 1 for a constant column.
    pub scales: Vec<f64>,
    /// Indices (from 0) of the columns found constant.
    pub constant_columns: Vec<usize>,
}

impl Standardizer {
    /// Fits means and scales to the columns of `values` (rows × columns).
    ///
    /// The values should be finite, as every [`Dataset`](crate::Dataset)'s
    /// are; non-finite values give meaningless results (but no panic): a
    /// column whose largest magnitude is infinite is reported constant.
    /// With no rows every column is reported constant, with mean 0.
    pub fn fit(values: ArrayView2<'_, f64>) -> Standardizer {
        let mut fitted = Standardizer {
            means: Vec::with_capacity(values.ncols()),
            scales: Vec::with_capacity(values.ncols()),
            constant_columns: Vec::new(),
        };
        for (index, column) in values.columns().into_iter().enumerate() {
            let (mean, scale) = column_moments(column);
            fitted.means.push(mean);
            match scale {
                Some(scale) => fitted.scales.push(scale),
                None => {
                    fitted.scales.push(1.0);
                    fitted.constant_columns.push(index);
                }
            }
        }
        fitted
    }

    /// Replaces each value `x` in column `d` by `(x − means[d]) / scales[d]`.
    ///
    /// # Panics
    ///
    /// If `values` has a different number of columns from the fitted data:
    /// that is a mistake in the calling code, not in the data.
    pub fn apply(&self, values: &mut Array2<f64>) {
        assert_eq!(
            values.ncols(),
            self.means.len(),
            "standardizer fitted to {} columns applied to {}",
            self.means.len(),
            values.ncols()
        );
        for (mut column, (&mean, &scale)) in values
            .columns_mut()
            .into_iter()
            .zip(self.means.iter().zip(&self.scales))
        {
            column.mapv_inplace(|x| {
                let centred = x - mean;
                // Only values of opposite sign near f64::MAX overflow here;
                // dividing first is then safe and the cancellation harmless.
                if centred.is_finite() {
                    centred / scale
                } else {
                    x / scale - mean / scale
                }
            });
        }
    }

    /// The log-Jacobian of the standardising map, per row: `−Σ_d ln scales[d]`.
    ///
    /// A log-density computed on standardised rows, plus this, is the
    /// log-density of the same rows in the data's own units. Summed over N
    /// rows it is N times this value.
    pub fn log_jacobian(&self) -> f64 {
        -self.scales.iter().map(|scale| scale.ln()).sum::<f64>()
    }
}

/// A column's mean and population standard deviation, or `None` for the
/// scale when the column is constant.
fn column_moments(column: ArrayView1<'_, f64>) -> (f64, Option<f64>) {
    let count = column.len() as f64;
    let largest = column
        .iter()
        .fold(0.0_f64, |largest, x| largest.max(x.abs()));
    if column.is_empty() || largest <= 0.0 || !largest.is_finite() {
        return (0.0, None);
    }
    let (down, up) = power_of_two_near(largest);
    let mean_unit = column.iter().map(|&x| x * down).sum::<f64>() / count;
    let (sum, sum_squares) = column.iter().fold((0.0, 0.0), |(sum, squares), &x| {
        let deviation = x * down - mean_unit;
        (sum + deviation, squares + deviation * deviation)
    });
    let variance_unit = ((sum_squares - sum * sum / count) / count).max(0.0);
    let deviation_unit = variance_unit.sqrt();
    let mean = mean_unit * up;
    if deviation_unit <= CONSTANT_ULPS * f64::EPSILON * largest * down {
        (mean, None)
    } else {
        (mean, Some(deviation_unit * up))
    }
}

/// `(2^-k, 2^k)` with `2^k` close to `magnitude` (a positive finite number),
/// `k` limited to the normal exponent range so both are exact.
fn power_of_two_near(magnitude: f64) -> (f64, f64) {
    let exponent = (magnitude.log2().ceil() as i32).clamp(-1022, 1022);
    let power = |k: i32| f64::from_bits(((1023 + k) as u64) << 52);
    (power(-exponent), power(exponent))
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::{Array2, array};

    fn close(a: f64, b: f64, tolerance: f64) -> bool {
        (a - b).abs() <= tolerance * b.abs().max(1.0)
    }

    #[test]
    fn population_deviation_of_a_small_column() {
        // Mean 5; squared deviations 9+1+1+1+0+0+4+16 = 32; 32 / 8 = 4.
        let values = array![[2.0], [4.0], [4.0], [4.0], [5.0], [5.0], [7.0], [9.0]];
        let fitted = Standardizer::fit(values.view());
        assert!(close(fitted.means[0], 5.0, 1e-15));
        assert!(close(fitted.scales[0], 2.0, 1e-15));
        assert!(fitted.constant_columns.is_empty());
        assert!(close(fitted.log_jacobian(), -(2.0f64.ln()), 1e-15));
    }

    /// A large offset with a small spread: 1e9 + {4, 7, 13, 16} has
    /// population variance 22.5. A one-pass Σx² − (Σx)²/N formula loses
    /// most digits here (Chan, Golub & LeVeque 1983, §2).
    #[test]
    fn large_offset_keeps_its_digits() {
        let values = array![[1e9 + 4.0], [1e9 + 7.0], [1e9 + 13.0], [1e9 + 16.0]];
        let fitted = Standardizer::fit(values.view());
        assert!(close(fitted.means[0], 1e9 + 10.0, 1e-15));
        assert!(
            close(fitted.scales[0], 22.5f64.sqrt(), 1e-12),
            "{}",
            fitted.scales[0]
        );
    }

    #[test]
    fn values_near_the_float_limit_stay_finite() {
        let mut values = array![[1e308, 1.7e308], [-1e308, 1.6e308]];
        let fitted = Standardizer::fit(values.view());
        assert!(close(fitted.means[0], 0.0, 1e-15));
        assert!(close(fitted.scales[0], 1e308, 1e-15));
        assert!(close(fitted.means[1], 1.65e308, 1e-15));
        assert!(close(fitted.scales[1], 0.05e308, 1e-12));
        assert!(fitted.log_jacobian().is_finite());
        fitted.apply(&mut values);
        assert!(values.iter().all(|x| x.is_finite()));
        assert!(close(values[[0, 0]], 1.0, 1e-15) && close(values[[1, 0]], -1.0, 1e-15));
        assert!(close(values[[0, 1]], 1.0, 1e-9) && close(values[[1, 1]], -1.0, 1e-9));
    }

    #[test]
    fn opposite_extremes_do_not_overflow_when_applied() {
        let fitted = Standardizer {
            means: vec![-1.5e308],
            scales: vec![1e308],
            constant_columns: vec![],
        };
        let mut values = array![[1.5e308]];
        fitted.apply(&mut values);
        assert!(close(values[[0, 0]], 3.0, 1e-15), "{}", values[[0, 0]]);
    }

    #[test]
    fn constant_columns_get_scale_one_and_are_reported() {
        // 0.1 is not exact in binary, so its computed mean may differ from
        // each value by rounding; the column must still count as constant.
        let mut values = Array2::from_shape_fn((10, 3), |(row, column)| match column {
            0 => 0.1,
            1 => row as f64,
            _ => -7.25,
        });
        let fitted = Standardizer::fit(values.view());
        assert_eq!(fitted.constant_columns, [0, 2]);
        assert_eq!(fitted.scales[0], 1.0);
        assert_eq!(fitted.scales[2], 1.0);
        assert!(fitted.scales[1] > 1.0);
        fitted.apply(&mut values);
        assert!(values.column(0).iter().all(|x| x.abs() < 1e-15));
        assert!(values.column(2).iter().all(|x| x.abs() < 1e-15));
        let all_zero = Standardizer::fit(Array2::<f64>::zeros((4, 1)).view());
        assert_eq!(all_zero.constant_columns, [0]);
    }

    #[test]
    fn standardised_columns_have_mean_zero_and_unit_deviation() {
        let mut values = Array2::from_shape_fn((97, 2), |(row, column)| {
            let t = row as f64;
            if column == 0 {
                (t * 0.37).sin() * 40.0 + 3.0
            } else {
                t * t * 1e-3 - 5e4
            }
        });
        let fitted = Standardizer::fit(values.view());
        fitted.apply(&mut values);
        for column in values.columns() {
            let n = column.len() as f64;
            let mean = column.sum() / n;
            let variance = column.iter().map(|x| (x - mean).powi(2)).sum::<f64>() / n;
            // Centring values near 5e4 leaves rounding of about 5e4·ε per value.
            assert!(mean.abs() < 1e-10, "{mean}");
            assert!(close(variance, 1.0, 1e-10), "{variance}");
        }
    }

    /// Change of variables: a normal log-density of the original values equals
    /// the standard normal log-density of the standardised values plus the
    /// log-Jacobian.
    #[test]
    fn log_jacobian_converts_densities_back() {
        let original = array![
            [12.0, -300.0],
            [15.0, -340.0],
            [9.0, -310.0],
            [14.0, -290.0]
        ];
        let fitted = Standardizer::fit(original.view());
        let mut standardised = original.clone();
        fitted.apply(&mut standardised);
        let half_log_two_pi = 0.5 * (2.0 * std::f64::consts::PI).ln();
        for (raw, z) in original.rows().into_iter().zip(standardised.rows()) {
            let mut in_own_units = 0.0;
            let mut on_standard = 0.0;
            for d in 0..2 {
                let (m, s) = (fitted.means[d], fitted.scales[d]);
                in_own_units += -half_log_two_pi - s.ln() - 0.5 * ((raw[d] - m) / s).powi(2);
                on_standard += -half_log_two_pi - 0.5 * z[d].powi(2);
            }
            assert!(close(
                on_standard + fitted.log_jacobian(),
                in_own_units,
                1e-13
            ));
        }
    }

    #[test]
    fn no_rows_is_all_constant() {
        let fitted = Standardizer::fit(Array2::<f64>::zeros((0, 2)).view());
        assert_eq!(fitted.means, [0.0, 0.0]);
        assert_eq!(fitted.scales, [1.0, 1.0]);
        assert_eq!(fitted.constant_columns, [0, 1]);
        assert_eq!(fitted.log_jacobian(), 0.0);
    }

    #[test]
    fn powers_of_two_are_exact() {
        for magnitude in [1e-310, 1e-300, 0.75, 1.0, 3.0, 1e300, f64::MAX] {
            let (down, up) = power_of_two_near(magnitude);
            assert_eq!(down * up, 1.0, "{magnitude}");
            assert!(
                magnitude * down <= 4.0 && magnitude * down > 0.0,
                "{magnitude}"
            );
        }
    }
}
