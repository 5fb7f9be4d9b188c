//! The knee of a curve by Kneedle (Satopää, Albrecht, Irwin & Raghavan 2011): after scaling both
//! axes to [0, 1], the point of an increasing concave curve farthest above the diagonal.
//! mixgauge shows it for the training curve as one more view, never as the decider.

/// Index of the knee of the increasing curve `(x[i], y[i])`, or `None` with fewer than three
/// points or a flat curve.
pub fn knee(x: &[f64], y: &[f64]) -> Option<usize> {
    if x.len() < 3 || x.len() != y.len() {
        return None;
    }
    let (x0, x1) = (x[0], x[x.len() - 1]);
    let ymin = y.iter().copied().fold(f64::INFINITY, f64::min);
    let ymax = y.iter().copied().fold(f64::NEG_INFINITY, f64::max);
    if !(x1 > x0 && ymax > ymin) {
        return None;
    }
    let mut best: Option<(f64, usize)> = None;
    for i in 0..x.len() {
        let xn = (x[i] - x0) / (x1 - x0);
        let yn = (y[i] - ymin) / (ymax - ymin);
        let d = yn - xn;
        if best.is_none_or(|(b, _)| d > b) {
            best = Some((d, i));
        }
    }
    best.filter(|(d, _)| *d > 0.0).map(|(_, i)| i)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn knee_of_a_saturating_curve() {
        // y = 1 − 1/x on x = 1..10 has its largest scaled gap above the diagonal at x = 3
        // (hand computation of yn − xn at x = 2, 3, 4, 5: 0.444, 0.519, 0.500, 0.444).
        let x: Vec<f64> = (1..=10).map(f64::from).collect();
        let y: Vec<f64> = x.iter().map(|v| 1.0 - 1.0 / v).collect();
        assert_eq!(knee(&x, &y), Some(2));
        assert_eq!(knee(&x[..2], &y[..2]), None);
    }
}
