//! Starting points for EM: k-means++ seeding (Arthur & Vassilvitskii 2007) refined by Lloyd
//! steps, or random responsibilities. Both return sufficient statistics in the same form as a
//! fitting pass, so the first model comes out of the ordinary M-step.
//!
//! Every random draw comes from a ChaCha8 stream keyed by the seed and numbered by the restart,
//! so restarts are independent and reproducible. Random responsibilities seek to a position in
//! the stream fixed by the block, so blocks can be drawn in parallel with the same result.

use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;

use crate::CovarianceForm;
use crate::kernel::{BLOCK_ROWS, LANES, PassStats, Tiled, block_count};
use crate::linalg::packed;
use crate::rows::Rows;
use crate::stats::reduce_blocks;

/// Rows drawn for k-means++ seeding; Lloyd steps then use every row.
const SEEDING_SAMPLE: usize = 16_384;

/// The random stream of restart `restart` for `purpose` (0: seeding, 1: responsibilities).
pub(crate) fn stream(seed: u64, restart: usize, purpose: u64) -> ChaCha8Rng {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    rng.set_stream(((restart as u64) << 8) | purpose);
    rng
}

/// A uniform draw in [0, 1) with 53 random bits.
fn uniform(rng: &mut ChaCha8Rng) -> f64 {
    (rng.next_u64() >> 11) as f64 * (1.0 / (1u64 << 53) as f64)
}

fn squared_distance(a: &[f64], b: &[f64]) -> f64 {
    let mut s = 0.0;
    for (x, y) in a.iter().zip(b) {
        let d = x - y;
        s += d * d;
    }
    s
}

/// Greedy k-means++ seeding on a sample of the rows: each new centre is the best (lowest
/// potential) of `2 + ⌊ln k⌋` candidates drawn with probability proportional to the squared
/// distance to the nearest centre so far. Returns K×D centres.
pub(crate) fn kmeans_plus_plus(rows: &Rows, k: usize, rng: &mut ChaCha8Rng) -> Vec<f64> {
    let n = rows.len();
    let d = rows.dims();
    let sample: Vec<usize> = if n <= SEEDING_SAMPLE {
        (0..n).collect()
    } else {
        let mut s: Vec<usize> = (0..SEEDING_SAMPLE)
            .map(|_| (uniform(rng) * n as f64) as usize)
            .collect();
        s.sort_unstable();
        s.dedup();
        s
    };
    let m = sample.len();
    let trials = 2 + (k as f64).ln().floor() as usize;
    let mut centres = Vec::with_capacity(k * d);
    let first = sample[((uniform(rng) * m as f64) as usize).min(m - 1)];
    centres.extend_from_slice(rows.row(first));
    let mut nearest: Vec<f64> = sample
        .iter()
        .map(|&i| squared_distance(rows.row(i), &centres[..d]))
        .collect();
    let mut trial_dist = vec![0.0; m];
    let mut best_dist = vec![0.0; m];
    for _ in 1..k {
        let total: f64 = nearest.iter().sum();
        let mut best: Option<(f64, usize)> = None;
        for _ in 0..trials {
            let pick = if total > 0.0 {
                let target = uniform(rng) * total;
                let mut cumulative = 0.0;
                let mut chosen = m - 1;
                for (i, &v) in nearest.iter().enumerate() {
                    cumulative += v;
                    if cumulative > target {
                        chosen = i;
                        break;
                    }
                }
                chosen
            } else {
                ((uniform(rng) * m as f64) as usize).min(m - 1)
            };
            let candidate = rows.row(sample[pick]);
            let mut potential = 0.0;
            for (t, (&i, &old)) in trial_dist.iter_mut().zip(sample.iter().zip(&nearest)) {
                let v = squared_distance(rows.row(i), candidate).min(old);
                *t = v;
                potential += v;
            }
            if best.is_none_or(|(p, _)| potential < p) {
                best = Some((potential, pick));
                best_dist.copy_from_slice(&trial_dist);
            }
        }
        let (_, pick) = best.expect("at least two trials");
        centres.extend_from_slice(rows.row(sample[pick]));
        nearest.copy_from_slice(&best_dist);
    }
    centres
}

/// One Lloyd assignment over all rows: counts, sums of (x − c) per nearest centre, the
/// inertia, and (with `form`) the second moments around each centre.
///
/// The distances are computed a tile of 8 rows at a time, one row per lane, so that the 8 sums
/// run side by side instead of one long chain of dependent additions; each row's distance is
/// still the sum over columns in column order, so the result equals a row-by-row loop bit for
/// bit. Ties go to the lower centre.
fn lloyd_pass(
    rows: &Rows,
    tiled: &Tiled,
    centres: &[f64],
    k: usize,
    form: Option<CovarianceForm>,
) -> (PassStats, f64) {
    let d = rows.dims();
    let n = rows.len();
    let p = form.map_or(0, |f| f.packed_len(d));
    reduce_blocks(
        block_count(n),
        &|b| {
            let block = tiled.block(b);
            let mut s = PassStats {
                loglik: 0.0,
                lost_rows: 0,
                weight: vec![0.0; k],
                first: vec![0.0; k * d],
                second: vec![0.0; k * p],
            };
            let mut inertia = 0.0;
            for t in 0..block.count.div_ceil(LANES) {
                let x = &block.tiles[t * d..(t + 1) * d];
                let mut best = [f64::INFINITY; LANES];
                let mut nearest = [0usize; LANES];
                for c in 0..k {
                    let centre = &centres[c * d..(c + 1) * d];
                    let mut dist = [0.0; LANES];
                    for j in 0..d {
                        for lane in 0..LANES {
                            let v = x[j][lane] - centre[j];
                            dist[lane] += v * v;
                        }
                    }
                    for lane in 0..LANES {
                        if dist[lane] < best[lane] {
                            best[lane] = dist[lane];
                            nearest[lane] = c;
                        }
                    }
                }
                for lane in 0..LANES.min(block.count - t * LANES) {
                    let x = rows.row(b * BLOCK_ROWS + t * LANES + lane);
                    let c = nearest[lane];
                    inertia += best[lane];
                    s.weight[c] += 1.0;
                    let centre = &centres[c * d..(c + 1) * d];
                    for j in 0..d {
                        s.first[c * d + j] += x[j] - centre[j];
                    }
                    match form {
                        Some(CovarianceForm::Full) => {
                            for i2 in 0..d {
                                for j in 0..=i2 {
                                    s.second[c * p + packed(i2, j)] +=
                                        (x[i2] - centre[i2]) * (x[j] - centre[j]);
                                }
                            }
                        }
                        Some(CovarianceForm::Diagonal) => {
                            for j in 0..d {
                                let v = x[j] - centre[j];
                                s.second[c * p + j] += v * v;
                            }
                        }
                        None => {}
                    }
                }
            }
            (s, inertia)
        },
        &|a, b| (a.0.merge(b.0), a.1 + b.1),
    )
}

/// k-means++ centres refined by up to `steps` Lloyd steps (stopping early when the inertia
/// improves by less than 1e-6 relative), then the hard-assignment statistics around the final
/// centres. Returns the statistics and the centres they are taken around.
pub(crate) fn seeded(
    rows: &Rows,
    tiled: &Tiled,
    k: usize,
    form: CovarianceForm,
    steps: usize,
    rng: &mut ChaCha8Rng,
) -> (PassStats, Vec<f64>) {
    let d = rows.dims();
    let mut centres = kmeans_plus_plus(rows, k, rng);
    let mut previous = f64::INFINITY;
    for _ in 0..steps {
        let (s, inertia) = lloyd_pass(rows, tiled, &centres, k, None);
        for c in 0..k {
            if s.weight[c] > 0.0 {
                for j in 0..d {
                    centres[c * d + j] += s.first[c * d + j] / s.weight[c];
                }
            }
        }
        if previous - inertia <= 1e-6 * inertia {
            break;
        }
        previous = inertia;
    }
    let (stats, _) = lloyd_pass(rows, tiled, &centres, k, Some(form));
    (stats, centres)
}

/// Statistics of uniformly random responsibilities (each row's K draws normalised to 1),
/// taken around the column means `centre` for every component.
pub(crate) fn random_responsibilities(
    rows: &Rows,
    k: usize,
    form: CovarianceForm,
    centre: &[f64],
    seed: u64,
    restart: usize,
) -> (PassStats, Vec<f64>) {
    let d = rows.dims();
    let n = rows.len();
    let p = form.packed_len(d);
    let stats = reduce_blocks(
        block_count(n),
        &|b| {
            let mut rng = stream(seed, restart, 1);
            // Two 32-bit words per draw, K draws per row: seek to this block's first row.
            rng.set_word_pos((b * BLOCK_ROWS * k * 2) as u128);
            let mut s = PassStats {
                loglik: 0.0,
                lost_rows: 0,
                weight: vec![0.0; k],
                first: vec![0.0; k * d],
                second: vec![0.0; k * p],
            };
            let mut r = vec![0.0; k];
            for i in (b * BLOCK_ROWS)..((b + 1) * BLOCK_ROWS).min(n) {
                let mut total = 0.0;
                for v in r.iter_mut() {
                    *v = uniform(&mut rng) + f64::EPSILON;
                    total += *v;
                }
                let x = rows.row(i);
                for c in 0..k {
                    let w = r[c] / total;
                    s.weight[c] += w;
                    for j in 0..d {
                        let cj = x[j] - centre[j];
                        s.first[c * d + j] += w * cj;
                        match form {
                            CovarianceForm::Full => {
                                for i2 in j..d {
                                    s.second[c * p + packed(i2, j)] +=
                                        w * (x[i2] - centre[i2]) * cj;
                                }
                            }
                            CovarianceForm::Diagonal => s.second[c * p + j] += w * cj * cj,
                        }
                    }
                }
            }
            s
        },
        &PassStats::merge,
    );
    let centres = (0..k).flat_map(|_| centre.iter().copied()).collect();
    (stats, centres)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn seeding_finds_separated_groups() {
        // Three tight groups far apart: one centre must land in each.
        let mut values = Vec::new();
        for g in 0..3 {
            for i in 0..50 {
                values.push(g as f64 * 100.0 + (i as f64) * 0.01);
            }
        }
        let rows = Rows::new(&values, 1).unwrap();
        let mut rng = stream(7, 0, 0);
        let mut c = kmeans_plus_plus(&rows, 3, &mut rng);
        c.sort_by(f64::total_cmp);
        for (g, v) in c.iter().enumerate() {
            assert!((v - g as f64 * 100.0).abs() < 1.0, "{c:?}");
        }
    }

    #[test]
    fn random_responsibilities_do_not_depend_on_the_pool() {
        let values: Vec<f64> = (0..3000).map(|i| (i as f64 * 0.7).cos()).collect();
        let rows = Rows::new(&values, 3).unwrap();
        let run = |threads| {
            let pool = rayon::ThreadPoolBuilder::new()
                .num_threads(threads)
                .build()
                .unwrap();
            pool.install(|| {
                random_responsibilities(&rows, 4, CovarianceForm::Full, &[0.0; 3], 11, 2).0
            })
        };
        let (a, b) = (run(1), run(2));
        assert_eq!(
            a.second.iter().map(|v| v.to_bits()).collect::<Vec<_>>(),
            b.second.iter().map(|v| v.to_bits()).collect::<Vec<_>>()
        );
        assert!((a.weight.iter().sum::<f64>() - 1000.0).abs() < 1e-9);
    }
}
