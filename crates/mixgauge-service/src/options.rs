//! [`DataOptions`]: how a sweep reads its dataset — the HTTP twin of the CLI's `--columns`,
//! `--labels`, `--drop-incomplete` and `--standardise` — and [`prepare`], which turns stored
//! bytes into the rows a sweep fits, exactly as the CLI does.

use mixgauge_data::{DataError, Dataset, Format, ReadOptions, Standardizer};
use serde::{Deserialize, Serialize};

/// Read options of one sweep. Every field is optional; the defaults read every numeric
/// column, keep no labels, reject missing values and do not standardise.
#[derive(Clone, Debug, Default, PartialEq, Eq, Serialize, Deserialize)]
#[serde(deny_unknown_fields, default)]
pub struct DataOptions {
    /// Feature columns, by name and in this order.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub columns: Option<Vec<String>>,
    /// A column kept as labels for agreement scores (never used to choose).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub labels: Option<String>,
    /// Drop rows with a missing or non-finite value instead of refusing the file.
    pub drop_incomplete: bool,
    /// Centre and scale every column before fitting; results stay in the data's units.
    pub standardise: bool,
}

impl DataOptions {
    /// The read options for `format`, with the service's row and column limits.
    pub fn read_options(&self, format: Format, limits: &ReadLimits) -> ReadOptions {
        let mut o = ReadOptions::default()
            .format(format)
            .drop_incomplete(self.drop_incomplete)
            .max_rows(limits.rows)
            .max_columns(limits.columns);
        if let Some(c) = &self.columns {
            o = o.columns(c.iter().cloned());
        }
        if let Some(l) = &self.labels {
            o = o.label_column(l.clone());
        }
        o
    }
}

/// The largest dataset the service reads.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct ReadLimits {
    /// Data rows, counted before any is dropped.
    pub rows: usize,
    /// Columns of the input, all of them.
    pub columns: usize,
}

/// A dataset read for a sweep: values (standardised when asked), and the per-column map back
/// to the data's units.
pub struct Prepared {
    /// The dataset; `values` are standardised when the options ask for it.
    pub data: Dataset,
    /// The standardiser applied, if any.
    pub standardizer: Option<Standardizer>,
}

impl Prepared {
    /// Added to each per-row log-likelihood to report it in the data's units.
    pub fn log_jacobian(&self) -> f64 {
        self.standardizer.as_ref().map_or(0.0, |s| s.log_jacobian())
    }
}

/// Reads `bytes` under `options`, standardising as the CLI's `sweep --standardise` does.
///
/// # Errors
/// The reader's error, which names the row, column or field at fault.
pub fn prepare(
    bytes: &[u8],
    format: Format,
    options: &DataOptions,
    limits: &ReadLimits,
) -> Result<Prepared, DataError> {
    let mut data = mixgauge_data::read_bytes(bytes, &options.read_options(format, limits))?;
    let standardizer = options.standardise.then(|| {
        let s = Standardizer::fit(data.values.view());
        s.apply(&mut data.values);
        s
    });
    Ok(Prepared { data, standardizer })
}
