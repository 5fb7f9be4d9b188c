//! EM iteration throughput at a fixed iteration count, measured the way
//! `shared/bench/sklearn_em_throughput.py` measures scikit-learn, so the two can be run side
//! by side on the same file:
//!
//! ```text
//! cargo bench -p mixgauge-engine --bench em_iteration -- DATA.npy [--components 8] [--repeats 3]
//! ```
//!
//! Per-iteration time = (t(51 iterations) − t(1 iteration)) / 50 with tolerance 0, a k-means++
//! start and an absolute ridge of 1e-6: both fits do the same seeding, so the difference is
//! exactly 50 fused E+M passes. The median of the repeats is printed, with GFLOP/s by the flop
//! model 4·N·K·D² (full) and 6·N·K·D (diagonal), and the process's peak resident memory.

use std::time::Instant;

use mixgauge_engine::{CovarianceForm, FitOptions, Ridge, Rows, fit};

fn main() {
    let mut args = std::env::args().skip(1).filter(|a| a != "--bench");
    let mut path = None;
    let (mut k, mut repeats) = (8usize, 3usize);
    while let Some(a) = args.next() {
        match a.as_str() {
            "--components" => {
                k = args
                    .next()
                    .and_then(|v| v.parse().ok())
                    .expect("--components N")
            }
            "--repeats" => {
                repeats = args
                    .next()
                    .and_then(|v| v.parse().ok())
                    .expect("--repeats N")
            }
            _ => path = Some(a),
        }
    }
    let path = path.expect("usage: em_iteration DATA.npy [--components K] [--repeats R]");
    let data = mixgauge_data::read_path(path.as_ref(), &Default::default()).expect("readable data");
    let (n, d) = data.values.dim();
    let rows = Rows::new(data.values.as_slice().expect("contiguous"), d).expect("rows");
    println!(
        "kernel variant: {}, threads: {}",
        mixgauge_engine::kernel_variant(),
        rayon::current_num_threads()
    );
    for form in CovarianceForm::ALL {
        let time = |iterations| {
            let mut o = FitOptions::new(k, form);
            o.tolerance = 0.0;
            o.max_iterations = iterations;
            o.ridge = Ridge::Absolute(1e-6);
            let start = Instant::now();
            let f = fit(&rows, &o).expect("fit");
            assert_eq!(f.iterations, iterations);
            start.elapsed().as_secs_f64()
        };
        time(2);
        let mut per: Vec<f64> = (0..repeats).map(|_| (time(51) - time(1)) / 50.0).collect();
        per.sort_by(f64::total_cmp);
        let median = per[per.len() / 2];
        let (nf, kf, df) = (n as f64, k as f64, d as f64);
        let flops = match form {
            CovarianceForm::Full => 4.0 * nf * kf * df * df,
            CovarianceForm::Diagonal => 6.0 * nf * kf * df,
        };
        println!(
            "EM {form:8} K={k} N={n} D={d}: {:.2} ms/iter (runs {:?}), {:.2} GFLOP/s",
            median * 1e3,
            per.iter()
                .map(|v| (v * 1e5).round() / 1e2)
                .collect::<Vec<_>>(),
            flops / median / 1e9
        );
    }
    let status = std::fs::read_to_string("/proc/self/status").unwrap_or_default();
    if let Some(line) = status.lines().find(|l| l.starts_with("VmHWM")) {
        println!(
            "peak resident memory: {}",
            line.trim_start_matches("VmHWM:").trim()
        );
    }
}
