//! Test helpers shared by the mixgauge crates: rows drawn from a known mixture (Box–Muller
//! normals from a seeded ChaCha8) and well-separated test mixtures. Dev-only.

use mixgauge_engine::{CovarianceForm, Mixture};
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;

/// A seeded source of uniform and normal draws.
pub struct Sampler {
    rng: ChaCha8Rng,
    spare: Option<f64>,
}

impl Sampler {
    /// A sampler whose draws depend only on `seed`.
    pub fn new(seed: u64) -> Self {
        Sampler {
            rng: ChaCha8Rng::seed_from_u64(seed),
            spare: None,
        }
    }

    /// A uniform draw in (0, 1).
    pub fn uniform(&mut self) -> f64 {
        ((self.rng.next_u64() >> 11) as f64 + 0.5) / (1u64 << 53) as f64
    }

    /// A standard normal draw (Box–Muller).
    pub fn normal(&mut self) -> f64 {
        if let Some(z) = self.spare.take() {
            return z;
        }
        let (u, v) = (self.uniform(), self.uniform());
        let r = (-2.0 * u.ln()).sqrt();
        let t = std::f64::consts::TAU * v;
        self.spare = Some(r * t.sin());
        r * t.cos()
    }

    /// `n` rows from `model`, row-major (the engine's own sampler, seeded from this one).
    pub fn rows(&mut self, model: &Mixture, n: usize) -> Vec<f64> {
        model.sample(n, self.rng.next_u64()).0
    }
}

/// Dense lower Cholesky factor of a D×D row-major SPD matrix.
pub fn cholesky(a: &[f64], d: usize) -> Vec<f64> {
    let mut l = vec![0.0; d * d];
    for i in 0..d {
        for j in 0..=i {
            let mut s = a[i * d + j];
            for q in 0..j {
                s -= l[i * d + q] * l[j * d + q];
            }
            l[i * d + j] = if i == j { s.sqrt() } else { s / l[j * d + j] };
        }
    }
    l
}

/// A well-separated mixture of `k` components in `d` dimensions with correlated covariances.
pub fn separated(k: usize, d: usize, form: CovarianceForm, seed: u64) -> Mixture {
    spaced(k, d, form, seed, 8.0)
}

/// Like [`separated`], with component means `spacing` apart along the axes (smaller spacing,
/// more overlap).
pub fn spaced(k: usize, d: usize, form: CovarianceForm, seed: u64, spacing: f64) -> Mixture {
    let mut s = Sampler::new(seed);
    let raw: Vec<f64> = (0..k).map(|c| 1.0 + c as f64).collect();
    let total: f64 = raw.iter().sum();
    let weights = raw.iter().map(|w| w / total).collect();
    let mut means = Vec::new();
    for c in 0..k {
        for j in 0..d {
            means.push(
                if j == c % d {
                    spacing * (1 + c / d) as f64
                } else {
                    0.0
                } + 0.3 * s.normal(),
            );
        }
    }
    let covs = random_covariances(&mut s, form, k, d, 0.5, 1.0);
    Mixture::new(form, weights, means, covs).expect("a valid test mixture")
}

/// `k` random covariances in `d` dimensions, row-major, drawn from `s`: full ones are
/// `B Bᵀ/d + floor·I` with `B` standard normal (SPD, moderately correlated); diagonal ones are
/// `floor + span·U(0, 1)` per column.
pub fn random_covariances(
    s: &mut Sampler,
    form: CovarianceForm,
    k: usize,
    d: usize,
    floor: f64,
    span: f64,
) -> Vec<f64> {
    let mut covs = Vec::new();
    for _ in 0..k {
        match form {
            CovarianceForm::Full => {
                let b: Vec<f64> = (0..d * d).map(|_| s.normal()).collect();
                for i in 0..d {
                    for j in 0..d {
                        let mut v = if i == j { floor } else { 0.0 };
                        for q in 0..d {
                            v += b[i * d + q] * b[j * d + q] / d as f64;
                        }
                        covs.push(v);
                    }
                }
            }
            CovarianceForm::Diagonal => covs.extend((0..d).map(|_| floor + span * s.uniform())),
        }
    }
    covs
}

/// Mean and standard error (sd with divisor n−1, over √n).
pub fn mean_and_stderr(v: &[f64]) -> (f64, f64) {
    let n = v.len() as f64;
    let mean = v.iter().sum::<f64>() / n;
    let var = v.iter().map(|x| (x - mean) * (x - mean)).sum::<f64>() / (n - 1.0);
    (mean, (var / n).sqrt())
}
