//! Reads tabular numeric feature data into memory for the mixture engine.
//!
//! Three input formats are understood: CSV with a header row, NPY arrays
//! (format versions 1.0, 2.0 and 3.0) and JSON tables (an array of rows, an
//! array of objects, or an object of columns). Every reader feeds the same
//! table builder, so column selection, the optional label column, missing
//! values and limits behave identically whatever the format.
//!
//! The entry points are [`read_bytes`] and [`read_path`]; both take
//! [`ReadOptions`] and return a [`Dataset`] or a [`DataError`] whose message
//! names the row, line and column at fault and says what to change.
//! [`Standardizer`] centres and scales the feature columns and gives the
//! log-Jacobian that converts a density on standardised data back into the
//! data's own units.
//!
//! Design: the whole input is held in memory as bytes. That keeps every
//! reader a plain function over `&[u8]` (easy to fuzz) and lets the dataset
//! carry the SHA-256 of exactly what was read.
//!
//! ```
//! use mixgauge_data::{read_bytes, Format, ReadOptions};
//!
//! let csv = b"height,weight,species\n1.5,60,a\n1.7,72,b\n";
//! let options = ReadOptions::default().label_column("species");
//! let data = read_bytes(csv, &options)?;
//! assert_eq!(data.format, Format::Csv);
//! assert_eq!(data.column_names, ["height", "weight"]);
//! assert_eq!(data.values.shape(), &[2, 2]);
//! assert_eq!(data.labels.as_deref(), Some(&["a".to_string(), "b".to_string()][..]));
//! # Ok::<(), mixgauge_data::DataError>(())
//! ```
#![deny(missing_docs)]

mod cell;
mod csv_table;
mod dataset;
mod error;
mod format;
mod json_table;
mod npy;
mod options;
mod read;
mod standardize;
mod table;

pub use dataset::Dataset;
pub use error::DataError;
pub use format::Format;
pub use options::ReadOptions;
pub use read::{read_bytes, read_path};
pub use standardize::Standardizer;
