//! EM iteration throughput: `cargo bench -p mixgauge-engine --bench em_iteration -- DATA.npy [K] [REPEATS]`
fn main() {
    let args: Vec<String> = std::env::args().filter(|a| a != "--bench").collect();
    let path = args
        .get(1)
        .expect("usage: em_iteration DATA.npy [K] [REPEATS]");
    let k: usize = args.get(2).map_or(8, |v| v.parse().unwrap());
    let repeats: usize = args.get(3).map_or(3, |v| v.parse().unwrap());
    let bytes = std::fs::read(path).unwrap();
    let hl = u16::from_le_bytes([bytes[8], bytes[9]]) as usize;
    let header = std::str::from_utf8(&bytes[10..10 + hl]).unwrap();
    let shape = header.split("'shape': (").nth(1).unwrap();
    let dims: usize = shape
        .split(',')
        .nth(1)
        .unwrap()
        .trim()
        .trim_end_matches(')')
        .trim()
        .parse()
        .unwrap();
    let values: Vec<f64> = bytes[10 + hl..]
        .chunks_exact(8)
        .map(|c| f64::from_le_bytes(c.try_into().unwrap()))
        .collect();
    let rows = mixgauge_engine::Rows::new(&values, dims).unwrap();
    for form in mixgauge_engine::CovarianceForm::ALL {
        let time = |iters| {
            let mut o = mixgauge_engine::FitOptions::new(k, form);
            o.tolerance = 0.0;
            o.max_iterations = iters;
            o.ridge = mixgauge_engine::Ridge::Absolute(1e-6);
            let t = std::time::Instant::now();
            let f = mixgauge_engine::fit(&rows, &o).unwrap();
            assert_eq!(f.iterations, iters);
            t.elapsed().as_secs_f64()
        };
        time(2);
        let mut per = Vec::new();
        for _ in 0..repeats {
            let t1 = time(1);
            let tn = time(51);
            per.push((tn - t1) / 50.0);
        }
        per.sort_by(f64::total_cmp);
        let med = per[per.len() / 2];
        let d = dims as f64;
        let flops = 4.0 * rows.len() as f64 * k as f64 * d * d;
        println!(
            "EM {form} K={k} N={} D={dims}: {:.2} ms/iter, {:.2} GFLOP/s by 4NKD^2",
            rows.len(),
            med * 1e3,
            flops / med / 1e9
        );
    }
}
