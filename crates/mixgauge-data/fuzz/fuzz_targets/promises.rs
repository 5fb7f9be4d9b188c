//! The check every fuzz target shares: read the bytes in one format, with options picked by the
//! input's length, and if a dataset comes back, check what it promises.

use mixgauge_data::{Format, ReadOptions, read_bytes};

pub fn check(bytes: &[u8], format: Format) {
    // The input's length picks the options, so every combination is reached
    // without taking bytes away from the reader.
    let mut options = ReadOptions::default()
        .format(format)
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
}
