//! [`ModelView`]: a fitted mixture seen in two dimensions.
//!
//! The plane is spanned by the data's first two principal axes (eigenvectors of the centred
//! covariance of all rows, largest eigenvalues first), so it shows as much of the data's
//! spread as any plane can. Rows are projected onto it and coloured by their most responsible
//! component; each component's covariance Σ is projected as PᵀΣP (P the D×2 matrix of the two
//! axes), which is exactly the covariance of the component's marginal on that plane, and drawn
//! as its 1σ and 2σ ellipses. With one column there is a single axis; the second is zero and
//! the report says so.
//!
//! Large data are drawn from a deterministic, evenly strided subsample, so the same rows give
//! the same picture; the principal axes always use every row.

use mixgauge_engine::{CovarianceForm, Mixture, Rows};
use mixgauge_select::Choice;
use nalgebra::{DMatrix, SymmetricEigen};

use crate::ReportError;

/// Iteration cap of the eigen-decomposition of the data covariance; far above what a
/// symmetric matrix of finite values needs.
const EIGEN_ITERATIONS: usize = 10_000;

/// One component of the model, projected onto the view's plane.
#[derive(Clone, Debug, PartialEq)]
pub struct ProjectedComponent {
    /// Mixing weight.
    pub weight: f64,
    /// The component's mean in plane coordinates (relative to the data's mean).
    pub centre: [f64; 2],
    /// PᵀΣP: the 2×2 covariance of the component on the plane, row-major.
    pub covariance: [[f64; 2]; 2],
    /// Standard deviations along the ellipse's own axes, larger first: the square roots of
    /// the eigenvalues of `covariance` (the 1σ ellipse's semi-axes).
    pub radii: [f64; 2],
    /// Angle of the ellipse's longer axis from the first principal axis, in radians.
    pub angle: f64,
}

impl ProjectedComponent {
    fn new(weight: f64, centre: [f64; 2], covariance: [[f64; 2]; 2]) -> Self {
        // Closed-form eigen-decomposition of a symmetric 2×2 matrix.
        let (a, b, c) = (covariance[0][0], covariance[0][1], covariance[1][1]);
        let mid = 0.5 * (a + c);
        let half = (0.5 * (a - c)).hypot(b);
        let larger = (mid + half).max(0.0);
        let smaller = (mid - half).max(0.0);
        ProjectedComponent {
            weight,
            centre,
            covariance,
            radii: [larger.sqrt(), smaller.sqrt()],
            angle: 0.5 * (2.0 * b).atan2(a - c),
        }
    }

    /// `steps + 1` points (the last repeats the first) on the ellipse at `scale` standard
    /// deviations.
    pub fn ellipse(&self, scale: f64, steps: usize) -> Vec<(f64, f64)> {
        let steps = steps.max(3);
        let (sin, cos) = self.angle.sin_cos();
        (0..=steps)
            .map(|i| {
                let t = std::f64::consts::TAU * (i % steps) as f64 / steps as f64;
                let u = scale * self.radii[0] * t.cos();
                let v = scale * self.radii[1] * t.sin();
                (
                    self.centre[0] + u * cos - v * sin,
                    self.centre[1] + u * sin + v * cos,
                )
            })
            .collect()
    }
}

/// A fitted mixture and its rows, projected onto the data's first two principal axes.
#[derive(Clone, Debug, PartialEq)]
pub struct ModelView {
    form: CovarianceForm,
    dims: usize,
    rows: usize,
    axes: [Vec<f64>; 2],
    axis_variance: [f64; 2],
    total_variance: f64,
    points: Vec<[f64; 2]>,
    assignment: Vec<usize>,
    components: Vec<ProjectedComponent>,
}

impl ModelView {
    /// Projects `model` and `rows` (row-major, `dims` columns, in the units the model was
    /// fitted on) onto the rows' first two principal axes, drawing every row when there are at
    /// most `max_points`, else `max_points` rows evenly strided through the data.
    ///
    /// # Errors
    /// [`ReportError::Shape`], [`ReportError::NoRows`], [`ReportError::Dimensions`] and
    /// [`ReportError::NotFinite`] for rows that do not fit the model; [`ReportError::NoPoints`]
    /// when `max_points` is zero; [`ReportError::Axes`] when the eigen-decomposition does not
    /// converge; [`ReportError::Engine`] when the model cannot score the rows.
    ///
    /// ```
    /// use mixgauge_engine::{CovarianceForm, Mixture};
    /// use mixgauge_report::ModelView;
    ///
    /// // One component with variances 4 and 1; rows spread more along x than y.
    /// let model = Mixture::new(CovarianceForm::Diagonal, vec![1.0], vec![0.0, 0.0], vec![4.0, 1.0])?;
    /// let rows = [-2.0, 0.0, 2.0, 0.0, 0.0, -1.0, 0.0, 1.0];
    /// let view = ModelView::new(&model, &rows, 2, 5000)?;
    /// assert_eq!(view.points().len(), 4);
    /// assert!((view.components()[0].radii[0] - 2.0).abs() < 1e-12);
    /// # Ok::<(), Box<dyn std::error::Error>>(())
    /// ```
    pub fn new(
        model: &Mixture,
        rows: &[f64],
        dims: usize,
        max_points: usize,
    ) -> Result<ModelView, ReportError> {
        if dims == 0 || !rows.len().is_multiple_of(dims) {
            return Err(ReportError::Shape {
                values: rows.len(),
                dims,
            });
        }
        if rows.is_empty() {
            return Err(ReportError::NoRows);
        }
        if model.dims() != dims {
            return Err(ReportError::Dimensions {
                model: model.dims(),
                data: dims,
            });
        }
        if max_points == 0 {
            return Err(ReportError::NoPoints);
        }
        if let Some(i) = rows.iter().position(|v| !v.is_finite()) {
            return Err(ReportError::NotFinite {
                row: i / dims,
                column: i % dims,
            });
        }
        let n = rows.len() / dims;
        let centre = column_means(rows, dims);
        let PrincipalAxes {
            axes,
            variance: axis_variance,
            total: total_variance,
        } = principal_axes(rows, dims, &centre)?;
        let project = |x: &[f64]| -> [f64; 2] {
            let mut p = [0.0; 2];
            for (slot, axis) in p.iter_mut().zip(&axes) {
                *slot = x
                    .iter()
                    .zip(&centre)
                    .zip(axis)
                    .map(|((v, m), a)| (v - m) * a)
                    .sum();
            }
            p
        };

        let picked = stride(n, max_points);
        let mut sample = Vec::with_capacity(picked.len() * dims);
        for &i in &picked {
            sample.extend_from_slice(&rows[i * dims..(i + 1) * dims]);
        }
        let assignment = model.assign(&Rows::new(&sample, dims)?)?;
        let points = sample.chunks(dims).map(project).collect();

        let components = (0..model.components())
            .map(|k| {
                let sigma = model.covariance(k);
                let mut pc = [[0.0; 2]; 2];
                for (r, a) in axes.iter().enumerate() {
                    for (c, b) in axes.iter().enumerate() {
                        let mut s = 0.0;
                        for i in 0..dims {
                            for j in 0..dims {
                                s += a[i] * sigma[i * dims + j] * b[j];
                            }
                        }
                        pc[r][c] = s;
                    }
                }
                // Symmetric by construction; average away rounding so the closed form applies.
                let off = 0.5 * (pc[0][1] + pc[1][0]);
                pc[0][1] = off;
                pc[1][0] = off;
                ProjectedComponent::new(model.weights()[k], project(model.mean(k)), pc)
            })
            .collect();

        Ok(ModelView {
            form: model.form(),
            dims,
            rows: n,
            axes,
            axis_variance,
            total_variance,
            points,
            assignment,
            components,
        })
    }

    /// The model's covariance form and component count.
    pub fn choice(&self) -> Choice {
        Choice {
            covariance: self.form,
            components: self.components.len(),
        }
    }

    /// Columns of the data.
    pub fn dims(&self) -> usize {
        self.dims
    }

    /// Rows in the data (not all of which may be drawn).
    pub fn rows(&self) -> usize {
        self.rows
    }

    /// The two principal axes as unit vectors of `dims` entries (each signed so that its
    /// largest entry is positive). With one column the second axis is all zeros.
    pub fn axes(&self) -> &[Vec<f64>; 2] {
        &self.axes
    }

    /// Share of the data's total variance along each axis (0 to 1).
    pub fn axis_share(&self) -> [f64; 2] {
        if self.total_variance > 0.0 {
            self.axis_variance.map(|v| v / self.total_variance)
        } else {
            [0.0; 2]
        }
    }

    /// Whether the data has one column, so the second axis carries nothing.
    pub fn single_axis(&self) -> bool {
        self.dims == 1
    }

    /// The drawn rows in plane coordinates (relative to the data's mean).
    pub fn points(&self) -> &[[f64; 2]] {
        &self.points
    }

    /// The most responsible component of each drawn row, in the order of
    /// [`points`](Self::points).
    pub fn assignment(&self) -> &[usize] {
        &self.assignment
    }

    /// The components, projected.
    pub fn components(&self) -> &[ProjectedComponent] {
        &self.components
    }
}

/// Indices of `take` rows evenly strided through `n` (all of them when `n ≤ take`).
fn stride(n: usize, take: usize) -> Vec<usize> {
    if n <= take {
        return (0..n).collect();
    }
    // u128 keeps i·n exact for any row count.
    (0..take)
        .map(|i| (i as u128 * n as u128 / take as u128) as usize)
        .collect()
}

fn column_means(rows: &[f64], dims: usize) -> Vec<f64> {
    let n = (rows.len() / dims) as f64;
    let mut sum = vec![0.0; dims];
    for row in rows.chunks(dims) {
        for (s, v) in sum.iter_mut().zip(row) {
            *s += v;
        }
    }
    sum.iter().map(|s| s / n).collect()
}

/// The two leading eigenvectors of the centred covariance and what they carry.
struct PrincipalAxes {
    axes: [Vec<f64>; 2],
    variance: [f64; 2],
    /// The covariance's trace: the data's total variance.
    total: f64,
}

fn principal_axes(rows: &[f64], dims: usize, centre: &[f64]) -> Result<PrincipalAxes, ReportError> {
    let n = (rows.len() / dims) as f64;
    // Second pass over centred values: steadier than accumulating raw second moments.
    let mut cov = DMatrix::<f64>::zeros(dims, dims);
    let mut centred = vec![0.0; dims];
    for row in rows.chunks(dims) {
        for (c, (v, m)) in centred.iter_mut().zip(row.iter().zip(centre)) {
            *c = v - m;
        }
        for i in 0..dims {
            for j in 0..=i {
                cov[(i, j)] += centred[i] * centred[j];
            }
        }
    }
    for i in 0..dims {
        for j in 0..=i {
            let v = cov[(i, j)] / n;
            cov[(i, j)] = v;
            cov[(j, i)] = v;
        }
    }
    let total = cov.trace();
    if dims == 1 {
        return Ok(PrincipalAxes {
            axes: [vec![1.0], vec![0.0]],
            variance: [total, 0.0],
            total,
        });
    }
    let eig =
        SymmetricEigen::try_new(cov, f64::EPSILON, EIGEN_ITERATIONS).ok_or(ReportError::Axes)?;
    let mut order: Vec<usize> = (0..dims).collect();
    order.sort_by(|&a, &b| eig.eigenvalues[b].total_cmp(&eig.eigenvalues[a]));
    let axis = |k: usize| -> Vec<f64> {
        let mut v: Vec<f64> = eig.eigenvectors.column(k).iter().copied().collect();
        // Fix the sign so the picture does not flip between runs or platforms.
        let lead = v
            .iter()
            .copied()
            .fold(0.0_f64, |m, x| if x.abs() > m.abs() { x } else { m });
        if lead < 0.0 {
            v.iter_mut().for_each(|x| *x = -*x);
        }
        v
    };
    Ok(PrincipalAxes {
        axes: [axis(order[0]), axis(order[1])],
        variance: [
            eig.eigenvalues[order[0]].max(0.0),
            eig.eigenvalues[order[1]].max(0.0),
        ],
        total,
    })
}

#[cfg(test)]
pub(crate) mod tests {
    use super::*;

    /// A 9×7 grid centred at (10, −5), wider in x: its covariance is exactly diagonal, so the
    /// principal axes are x and y.
    pub(crate) fn grid() -> Vec<f64> {
        let mut v = Vec::new();
        for i in -4..=4 {
            for j in -3..=3 {
                v.push(10.0 + 2.0 * i as f64);
                v.push(-5.0 + 0.5 * j as f64);
            }
        }
        v
    }

    pub(crate) fn two_components() -> Mixture {
        Mixture::new(
            CovarianceForm::Full,
            vec![0.4, 0.6],
            vec![6.0, -5.0, 14.0, -4.0],
            vec![4.0, 1.0, 1.0, 2.0, 9.0, 0.0, 0.0, 1.0],
        )
        .unwrap()
    }

    #[test]
    fn axes_along_x_and_y_give_radii_from_the_covariance_eigenvalues() {
        let rows = grid();
        let view = ModelView::new(&two_components(), &rows, 2, 5000).unwrap();
        let [a, b] = view.axes();
        assert!((a[0] - 1.0).abs() < 1e-12 && a[1].abs() < 1e-12, "{a:?}");
        assert!(b[0].abs() < 1e-12 && (b[1] - 1.0).abs() < 1e-12, "{b:?}");

        // Component 0: Σ = [[4, 1], [1, 2]], eigenvalues 3 ± √2.
        let c0 = &view.components()[0];
        let e = SymmetricEigen::new(DMatrix::from_row_slice(2, 2, &[4.0, 1.0, 1.0, 2.0]));
        let mut ev: Vec<f64> = e.eigenvalues.iter().copied().collect();
        ev.sort_by(|x, y| y.total_cmp(x));
        assert!((c0.radii[0] - ev[0].sqrt()).abs() < 1e-9);
        assert!((c0.radii[1] - ev[1].sqrt()).abs() < 1e-9);
        assert!((c0.radii[0] - (3.0 + 2f64.sqrt()).sqrt()).abs() < 1e-9);
        // Longer axis at ½·atan2(2, 2) = π/8 from x.
        assert!((c0.angle - std::f64::consts::FRAC_PI_8).abs() < 1e-9);
        // Means are relative to the data's mean (10, −5).
        assert!((c0.centre[0] + 4.0).abs() < 1e-9 && c0.centre[1].abs() < 1e-9);

        // Component 1: diagonal Σ = diag(9, 1): radii 3 and 1, along x.
        let c1 = &view.components()[1];
        assert!((c1.radii[0] - 3.0).abs() < 1e-9 && (c1.radii[1] - 1.0).abs() < 1e-9);
        assert!(c1.angle.abs() < 1e-9);
        assert!((c1.weight - 0.6).abs() < 1e-15);
    }

    #[test]
    fn ellipse_points_lie_on_the_scaled_ellipse() {
        let view = ModelView::new(&two_components(), &grid(), 2, 5000).unwrap();
        let c = &view.components()[0];
        let [[a, b], [_, d]] = c.covariance;
        let det = a * d - b * b;
        for (x, y) in c.ellipse(2.0, 40) {
            let (u, v) = (x - c.centre[0], y - c.centre[1]);
            // Mahalanobis distance² under the 2×2 covariance equals scale².
            let m = (d * u * u - 2.0 * b * u * v + a * v * v) / det;
            assert!((m - 4.0).abs() < 1e-9, "{m}");
        }
    }

    #[test]
    fn projection_is_p_transpose_sigma_p_in_three_dimensions() {
        // Rows spread most along z, then x; y is nearly constant.
        let mut rows = Vec::new();
        for i in 0..40 {
            let t = i as f64;
            rows.extend_from_slice(&[(t * 0.7).sin() * 2.0, 0.01 * (t * 1.3).cos(), t * 0.5]);
        }
        let sigma = [2.0, 0.3, 0.1, 0.3, 1.0, 0.2, 0.1, 0.2, 3.0];
        let m = Mixture::new(
            CovarianceForm::Full,
            vec![1.0],
            vec![0.0, 0.0, 10.0],
            sigma.to_vec(),
        )
        .unwrap();
        let view = ModelView::new(&m, &rows, 3, 5000).unwrap();
        let [p, q] = view.axes();
        let quad = |a: &[f64], b: &[f64]| -> f64 {
            let mut s = 0.0;
            for i in 0..3 {
                for j in 0..3 {
                    s += a[i] * sigma[i * 3 + j] * b[j];
                }
            }
            s
        };
        let c = &view.components()[0].covariance;
        assert!((c[0][0] - quad(p, p)).abs() < 1e-12);
        assert!((c[0][1] - quad(p, q)).abs() < 1e-12);
        assert!((c[1][1] - quad(q, q)).abs() < 1e-12);
        // The axes are orthonormal and the first carries the most variance.
        let dot = |a: &[f64], b: &[f64]| a.iter().zip(b).map(|(x, y)| x * y).sum::<f64>();
        assert!((dot(p, p) - 1.0).abs() < 1e-12 && dot(p, q).abs() < 1e-12);
        let share = view.axis_share();
        assert!(share[0] >= share[1] && share[0] + share[1] <= 1.0 + 1e-12);
        assert!(p[2].abs() > 0.9, "first axis should be close to z: {p:?}");
    }

    #[test]
    fn large_data_is_strided_and_assigned_like_the_model_does() {
        let mut rows = Vec::new();
        for i in 0..1000 {
            let t = i as f64;
            rows.extend_from_slice(&[(t * 0.37).sin() * 8.0 + 10.0, (t * 0.11).cos() - 5.0]);
        }
        let m = two_components();
        let view = ModelView::new(&m, &rows, 2, 300).unwrap();
        assert_eq!(view.points().len(), 300);
        assert_eq!(view.rows(), 1000);
        let picked = stride(1000, 300);
        assert_eq!(picked[0], 0);
        assert!(picked.windows(2).all(|w| w[1] > w[0]) && *picked.last().unwrap() < 1000);
        let mut sample = Vec::new();
        for &i in &picked {
            sample.extend_from_slice(&rows[i * 2..i * 2 + 2]);
        }
        let expected = m.assign(&Rows::new(&sample, 2).unwrap()).unwrap();
        assert_eq!(view.assignment(), expected.as_slice());
        assert!(view.assignment().contains(&0) && view.assignment().contains(&1));
    }

    #[test]
    fn one_column_has_a_zero_second_axis() {
        let rows: Vec<f64> = (0..50).map(|i| (i as f64 * 0.3).sin() * 3.0).collect();
        let m = Mixture::new(
            CovarianceForm::Diagonal,
            vec![0.5, 0.5],
            vec![-2.0, 2.0],
            vec![1.0, 0.25],
        )
        .unwrap();
        let view = ModelView::new(&m, &rows, 1, 5000).unwrap();
        assert!(view.single_axis());
        assert_eq!(view.axes()[1], vec![0.0]);
        assert!(view.points().iter().all(|p| p[1] == 0.0));
        let c = &view.components()[1];
        assert!((c.radii[0] - 0.5).abs() < 1e-12 && c.radii[1] == 0.0);
        assert!((view.axis_share()[0] - 1.0).abs() < 1e-12);
    }

    #[test]
    fn bad_inputs_are_refused_with_the_facts() {
        let m = two_components();
        assert_eq!(
            ModelView::new(&m, &[1.0, 2.0, 3.0], 2, 10).unwrap_err(),
            ReportError::Shape { values: 3, dims: 2 }
        );
        assert_eq!(
            ModelView::new(&m, &[], 2, 10).unwrap_err(),
            ReportError::NoRows
        );
        assert_eq!(
            ModelView::new(&m, &[1.0, 2.0, 3.0], 3, 10).unwrap_err(),
            ReportError::Dimensions { model: 2, data: 3 }
        );
        assert_eq!(
            ModelView::new(&m, &[1.0, 2.0, 3.0, f64::NAN], 2, 10).unwrap_err(),
            ReportError::NotFinite { row: 1, column: 1 }
        );
        assert_eq!(
            ModelView::new(&m, &grid(), 2, 0).unwrap_err(),
            ReportError::NoPoints
        );
    }
}
