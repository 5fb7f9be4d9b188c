//! Reading the data file and model documents the commands work on.

use std::path::Path;

use mixgauge_data::{Dataset, ReadOptions};
use mixgauge_engine::{ModelDocument, Rows};

use crate::args::InputArgs;
use crate::failure::{Failure, io};

/// The dataset named on the command line.
pub fn dataset(input: &InputArgs) -> Result<Dataset, Failure> {
    labelled(input, None)
}

/// The dataset named on the command line, keeping `labels` as a label column.
pub fn labelled(input: &InputArgs, labels: Option<&str>) -> Result<Dataset, Failure> {
    let mut options = ReadOptions::default().drop_incomplete(input.drop_incomplete);
    if let Some(l) = labels {
        options = options.label_column(l);
    }
    if let Some(columns) = &input.columns {
        options = options.columns(columns.iter().cloned());
    }
    Ok(mixgauge_data::read_path(&input.file, &options)?)
}

/// The dataset's values as engine rows.
pub fn rows(data: &Dataset) -> Result<Rows<'_>, Failure> {
    let values = data
        .values
        .as_slice()
        .ok_or_else(|| Failure::Other("dataset values are not contiguous".into()))?;
    Ok(Rows::new(values, data.values.ncols())?)
}

/// A model document from a file.
pub fn model(path: &Path) -> Result<ModelDocument, Failure> {
    let text = std::fs::read_to_string(path).map_err(|e| io("read model", path, e))?;
    ModelDocument::from_json(&text).map_err(|e| Failure::Input(format!("{}: {e}", path.display())))
}

/// Writes `text` to `path`, or to standard output when `path` is `None`.
pub fn write_out(path: Option<&Path>, text: &str) -> Result<(), Failure> {
    match path {
        Some(p) => std::fs::write(p, text).map_err(|e| io("write", p, e)),
        None => {
            use std::io::Write;
            let mut out = std::io::stdout().lock();
            out.write_all(text.as_bytes())
                .map_err(|e| Failure::Other(format!("cannot write output: {e}")))
        }
    }
}
