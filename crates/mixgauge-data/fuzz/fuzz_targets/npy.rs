//! Feeds arbitrary bytes to the NPY reader. Any panic is a bug: every input
//! must give a dataset or an error. A dataset must also keep its promises.
#![no_main]

use libfuzzer_sys::fuzz_target;
use mixgauge_data::{Format, ReadOptions, read_bytes};

fuzz_target!(|bytes: &[u8]| {
    // The input's length picks the options, so every combination is reached
    // without taking bytes away from the reader.
    let mut options = ReadOptions::default()
        .format(Format::Npy)
        .drop_incomplete(bytes.len() % 2 == 1);
    if bytes.len() % 4 >= 2 {
        options = options.label_column("x1");
    }
    if let Ok(data) = read_bytes(bytes, &options) {
        assert!(data.values.iter().all(|value| value.is_finite()));
        assert!(data.values.is_standard_layout());
        assert_eq!(data.column_names.len(), data.values.ncols());
        assert!(data.values.nrows() > 0 && data.values.ncols() > 0);
        if let Some(labels) = &data.labels {
            assert_eq!(labels.len(), data.values.nrows());
        }
        assert_eq!(data.sha256.len(), 64);
    }
});
