//! Drawing rows from a mixture: component by weight, then μ + L·z with L the Cholesky factor
//! of the component's covariance and z standard normal (Box–Muller). One ChaCha8 stream per
//! seed, drawn in row order, so the same seed always gives the same rows.

use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;

use crate::model::Mixture;

/// The stream number of sampling (EM starts use streams numbered by restart).
const SAMPLE_STREAM: u64 = u64::MAX - 1;

struct Normals {
    rng: ChaCha8Rng,
    spare: Option<f64>,
}

impl Normals {
    fn uniform(&mut self) -> f64 {
        // In (0, 1): never 0, so ln is finite.
        ((self.rng.next_u64() >> 11) as f64 + 0.5) * (1.0 / (1u64 << 53) as f64)
    }

    fn normal(&mut self) -> f64 {
        if let Some(z) = self.spare.take() {
            return z;
        }
        let (u, v) = (self.uniform(), self.uniform());
        let r = (-2.0 * u.ln()).sqrt();
        let t = std::f64::consts::TAU * v;
        self.spare = Some(r * t.sin());
        r * t.cos()
    }
}

impl Mixture {
    /// `rows` rows drawn from the mixture (row-major, D per row) and the component each came
    /// from.
    pub fn sample(&self, rows: usize, seed: u64) -> (Vec<f64>, Vec<usize>) {
        let d = self.dims();
        let k = self.components();
        let mut draws = Normals {
            rng: ChaCha8Rng::seed_from_u64(seed),
            spare: None,
        };
        draws.rng.set_stream(SAMPLE_STREAM);
        let factors: Vec<Vec<f64>> = (0..k)
            .map(|c| {
                let m = nalgebra::DMatrix::from_row_slice(d, d, &self.covariance(c));
                let l = nalgebra::Cholesky::new(m)
                    .expect("a valid mixture's covariances are positive definite")
                    .l();
                (0..d * d).map(|i| l[(i / d, i % d)]).collect()
            })
            .collect();
        let mut values = Vec::with_capacity(rows * d);
        let mut labels = Vec::with_capacity(rows);
        let mut z = vec![0.0; d];
        for _ in 0..rows {
            let u = draws.uniform();
            let mut c = 0;
            let mut cumulative = self.weights()[0];
            while u > cumulative && c + 1 < k {
                c += 1;
                cumulative += self.weights()[c];
            }
            for v in z.iter_mut() {
                *v = draws.normal();
            }
            let l = &factors[c];
            for i in 0..d {
                let mut x = self.mean(c)[i];
                for j in 0..=i {
                    x += l[i * d + j] * z[j];
                }
                values.push(x);
            }
            labels.push(c);
        }
        (values, labels)
    }
}

#[cfg(test)]
mod tests {
    use crate::{CovarianceForm, Mixture};

    #[test]
    fn samples_have_the_mixture_moments() {
        // Two components; the sample mean must approach Σ w μ within a few standard errors.
        let m = Mixture::new(
            CovarianceForm::Full,
            vec![0.25, 0.75],
            vec![-4.0, 0.0, 4.0, 1.0],
            vec![1.0, 0.5, 0.5, 2.0, 1.0, 0.0, 0.0, 1.0],
        )
        .unwrap();
        let (x, labels) = m.sample(40_000, 3);
        let mean0: f64 = x.chunks(2).map(|r| r[0]).sum::<f64>() / 40_000.0;
        assert!((mean0 - 2.0).abs() < 0.05, "{mean0}");
        let share = labels.iter().filter(|&&c| c == 0).count() as f64 / 40_000.0;
        assert!((share - 0.25).abs() < 0.01);
        assert_eq!(m.sample(10, 3), m.sample(10, 3));
    }
}
