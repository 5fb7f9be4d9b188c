//! The one error type of this crate, [`DataError`], and its message helpers.
//!
//! Every variant carries the facts a person needs to find the fault (file,
//! line, row, column, what was found) and its message ends with what to do
//! about it. Rows are counted from 1 and exclude a CSV header; CSV lines are
//! physical lines counted from 1, as the `csv` crate reports them, so a
//! quoted field spanning lines shifts the two apart.

use std::fmt;
use std::io;
use std::path::PathBuf;

use crate::format::Format;

/// The longest piece of offending text quoted in a message, in characters.
const EXCERPT_CHARS: usize = 40;

/// The most column names listed in a message.
const LISTED_NAMES: usize = 12;

/// Why an input could not be read.
#[derive(Debug, thiserror::Error)]
#[non_exhaustive]
pub enum DataError {
    /// The file could not be opened or read.
    #[error("could not read {}: {error}; check that the file exists and is readable", .path.display())]
    Io {
        /// The file.
        path: PathBuf,
        /// What the operating system said.
        error: io::Error,
    },

    /// An error in a file's contents; the message starts with the file name.
    #[error("{}: {error}", .path.display())]
    InFile {
        /// The file.
        path: PathBuf,
        /// The error in its contents.
        error: Box<DataError>,
    },

    /// The input has no bytes (or, for CSV and JSON, only whitespace).
    #[error(
        "the {format} input is empty; check that the right file was given and that it was written completely"
    )]
    EmptyInput {
        /// The format the input was read as.
        format: Format,
    },

    /// The input has column names but no rows of values.
    #[error("the {format} input has no data rows; add at least one row of values")]
    NoDataRows {
        /// The format the input was read as.
        format: Format,
    },

    /// A CSV row has a different number of fields from the header.
    #[error(
        "line {line} has {} but the header has {expected}; give every row one field per column \
         (quote fields that contain commas)",
        count(*.found, "field")
    )]
    RaggedRow {
        /// The line on which the row starts.
        line: u64,
        /// How many fields the row has.
        found: usize,
        /// How many fields the header has.
        expected: usize,
    },

    /// A CSV line is not valid UTF-8.
    #[error("line {line} is not valid UTF-8 text; save the file with UTF-8 encoding")]
    InvalidUtf8 {
        /// The line on which the offending row starts.
        line: u64,
    },

    /// The CSV parser failed for a reason other than ragged rows or encoding.
    #[error("the CSV could not be read{}: {detail}; check the file's quoting", at_line(*.line))]
    CsvSyntax {
        /// The line, when known.
        line: Option<u64>,
        /// The parser's description.
        detail: String,
    },

    /// Two columns share a name.
    #[error(
        "column name {name:?} appears twice (columns {first} and {second}); give every column a unique name"
    )]
    DuplicateColumn {
        /// The repeated name.
        name: String,
        /// The position of its first appearance, counted from 1.
        first: usize,
        /// The position of its second appearance, counted from 1.
        second: usize,
    },

    /// A requested feature column does not exist.
    #[error("there is no column named {name:?}; the columns are: {}; check the spelling", list(.available))]
    UnknownColumn {
        /// The requested name.
        name: String,
        /// The input's column names.
        available: Vec<String>,
    },

    /// The requested label column does not exist.
    #[error(
        "there is no label column named {name:?}; the columns are: {}; check the spelling or read without labels",
        list(.available)
    )]
    UnknownLabelColumn {
        /// The requested name.
        name: String,
        /// The input's column names.
        available: Vec<String>,
    },

    /// A feature column is requested more than once.
    #[error("column {name:?} is requested more than once; list each feature column once")]
    RepeatedColumn {
        /// The repeated name.
        name: String,
    },

    /// The label column is also requested as a feature.
    #[error(
        "column {name:?} is both the label column and a feature column; labels are kept as text, \
         so leave it out of the feature columns"
    )]
    LabelIsFeature {
        /// The column's name.
        name: String,
    },

    /// The caller gave an empty list of feature columns.
    #[error(
        "the list of feature columns is empty; name at least one column, or give no list to read every numeric column"
    )]
    EmptyColumnList,

    /// No column holds numbers.
    #[error(
        "the input has no numeric columns{}; check that the file is comma-separated with numbers \
         in its columns, or name the feature columns to read",
        skipped_note(.skipped)
    )]
    NoFeatureColumns {
        /// Columns passed over because they hold only text or nothing.
        skipped: Vec<String>,
    },

    /// Text where a number is expected.
    #[error(
        "{}, column {column:?}: found {found:?}, expected a number; fix the value, or leave the \
         column out by naming the feature columns to read",
        Place(*.row, *.line)
    )]
    NotANumber {
        /// The data row, counted from 1.
        row: usize,
        /// The physical line (CSV only).
        line: Option<u64>,
        /// The column's name.
        column: String,
        /// The text found, cut to 40 characters.
        found: String,
    },

    /// A feature value is missing (empty CSV field, JSON `null`).
    #[error(
        "{}, column {column:?}: the value is missing; fill it in, or choose to drop incomplete rows",
        Place(*.row, *.line)
    )]
    MissingValue {
        /// The data row, counted from 1.
        row: usize,
        /// The physical line (CSV only).
        line: Option<u64>,
        /// The column's name.
        column: String,
    },

    /// A feature value is NaN, infinite, or too large for `f64`.
    #[error(
        "{}, column {column:?}: found {found:?}, which is not a finite number (NaN, infinity, or \
         beyond the range of a 64-bit float); replace it, or choose to drop incomplete rows",
        Place(*.row, *.line)
    )]
    NonFinite {
        /// The data row, counted from 1.
        row: usize,
        /// The physical line (CSV only).
        line: Option<u64>,
        /// The column's name.
        column: String,
        /// The value as written in the input, cut to 40 characters.
        found: String,
    },

    /// A label cell holds something that is neither text nor a number.
    #[error("{}, label column {column:?}: found {found:?}, expected text or a number; fix the label", Place(*.row, None))]
    BadLabel {
        /// The data row, counted from 1.
        row: usize,
        /// The label column's name.
        column: String,
        /// The value found, cut to 40 characters.
        found: String,
    },

    /// Dropping incomplete rows left nothing.
    #[error(
        "all {} a missing or non-finite value, so none is left after dropping incomplete rows; \
         fill in the values or choose other feature columns",
        rows_have(*.dropped)
    )]
    AllRowsDropped {
        /// How many rows were dropped.
        dropped: usize,
    },

    /// The input has more data rows than allowed.
    #[error(
        "the input has more than {limit} data rows, the limit; read a smaller sample or raise the row limit"
    )]
    TooManyRows {
        /// The limit.
        limit: usize,
    },

    /// The input has more columns than allowed.
    #[error(
        "the input has {found} columns but the limit is {limit}; remove columns from the file or raise the column limit"
    )]
    TooManyColumns {
        /// How many columns the input has.
        found: usize,
        /// The limit.
        limit: usize,
    },

    /// The input does not start with the NPY magic string.
    #[error(
        "this is not an NPY file: it does not start with the bytes \\x93NUMPY; save the array with \
         numpy.save, or choose the input's real format"
    )]
    NpyMagic,

    /// The NPY format version is not 1.0, 2.0 or 3.0.
    #[error(
        "NPY format version {major}.{minor} is not supported (versions 1.0, 2.0 and 3.0 are); \
         save the array again with a current numpy"
    )]
    NpyVersion {
        /// The major version byte.
        major: u8,
        /// The minor version byte.
        minor: u8,
    },

    /// The NPY header is damaged or lacks a required key.
    #[error(
        "the NPY header could not be read: {detail}; the file may be damaged, so save it again"
    )]
    NpyHeader {
        /// What is wrong with it.
        detail: String,
    },

    /// The NPY element type is not one this crate reads.
    #[error(
        "NPY data type {found:?} is not supported; the supported types are <f8, <f4, <i8 and <i4 \
         and their big-endian forms >f8, >f4, >i8 and >i4; convert the array, e.g. with astype('<f8')"
    )]
    NpyDtype {
        /// The `descr` found.
        found: String,
    },

    /// The NPY array holds Python objects.
    #[error(
        "the NPY file holds Python objects (data type 'O'), which are never read because loading \
         them could run code; save a numeric array instead"
    )]
    NpyObjectArray,

    /// The NPY array is neither 1-D nor 2-D.
    #[error(
        "NPY array shape {found} is not supported; give a 2-D array (rows, columns) or a 1-D array (one column)"
    )]
    NpyShape {
        /// The shape as written in the header.
        found: String,
    },

    /// The NPY data is shorter than its header says.
    #[error(
        "the NPY data is cut short: the header promises {expected} bytes of values but only {found} \
         follow; the file is incomplete, so copy or save it again"
    )]
    NpyTruncated {
        /// Bytes of values the shape and type call for.
        expected: u64,
        /// Bytes present after the header.
        found: u64,
    },

    /// The NPY data is longer than its header says.
    #[error(
        "the NPY file has {found} bytes of values but its header promises {expected}; the header \
         and data disagree, so save the file again"
    )]
    NpyTrailingBytes {
        /// Bytes of values the shape and type call for.
        expected: u64,
        /// Bytes present after the header.
        found: u64,
    },

    /// The JSON text is not valid JSON.
    #[error("the JSON is not valid at line {line}, column {column}: {detail}; fix the syntax")]
    JsonSyntax {
        /// The line, counted from 1.
        line: usize,
        /// The column (character on the line), counted from 1.
        column: usize,
        /// The parser's description.
        detail: String,
    },

    /// Valid JSON, but not laid out as a table.
    #[error(
        "the JSON is not a table: {detail}; give an array of rows ([[1,2],[3,4]]), an array of \
         objects ([{{\"a\":1,\"b\":2}}]) or an object of columns ({{\"a\":[1,3],\"b\":[2,4]}})"
    )]
    JsonLayout {
        /// What is wrong with it.
        detail: String,
    },

    /// A JSON row array has a different length from the first row.
    #[error("row {row} has {} but row 1 has {expected}; give every row the same number of values", count(*.found, "value"))]
    JsonRowLength {
        /// The row, counted from 1.
        row: usize,
        /// How many values it has.
        found: usize,
        /// How many values row 1 has.
        expected: usize,
    },

    /// A JSON row object lacks a key the first object has.
    #[error(
        "row {row} has no key {key:?}, which row 1 has; give every object the same keys (use null for a missing value)"
    )]
    JsonMissingKey {
        /// The row, counted from 1.
        row: usize,
        /// The missing key.
        key: String,
    },

    /// A JSON row object has a key the first object lacks.
    #[error(
        "row {row} has the key {key:?}, which row 1 does not have; give every object the same keys"
    )]
    JsonExtraKey {
        /// The row, counted from 1.
        row: usize,
        /// The extra key.
        key: String,
    },

    /// A JSON row object repeats a key.
    #[error("row {row} has the key {key:?} twice; give each key once per object")]
    JsonRepeatedKey {
        /// The row, counted from 1.
        row: usize,
        /// The repeated key.
        key: String,
    },

    /// JSON columns differ in length.
    #[error(
        "column {column:?} has {} but column {first_column:?} has {expected}; give every column the same number of values",
        count(*.found, "value")
    )]
    JsonColumnLength {
        /// The column whose length differs.
        column: String,
        /// Its length.
        found: usize,
        /// The first column.
        first_column: String,
        /// The first column's length.
        expected: usize,
    },
}

/// Cuts `text` to at most 40 characters, marking the cut with `…`.
pub(crate) fn excerpt(text: &str) -> String {
    match text.char_indices().nth(EXCERPT_CHARS) {
        Some((end, _)) => format!("{}…", &text[..end]),
        None => text.to_owned(),
    }
}

/// Where a value sits: `row 17`, or `line 18 (row 17)` when the line is known.
struct Place(usize, Option<u64>);

impl fmt::Display for Place {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self.1 {
            Some(line) => write!(f, "line {line} (row {})", self.0),
            None => write!(f, "row {}", self.0),
        }
    }
}

/// `1 field`, `3 fields`.
fn count(n: usize, noun: &str) -> String {
    if n == 1 {
        format!("1 {noun}")
    } else {
        format!("{n} {noun}s")
    }
}

/// `1 row has`, `3 rows have`.
fn rows_have(n: usize) -> String {
    if n == 1 {
        "1 row has".to_owned()
    } else {
        format!("{n} rows have")
    }
}

/// ` at line 3`, or nothing.
fn at_line(line: Option<u64>) -> String {
    line.map(|line| format!(" at line {line}"))
        .unwrap_or_default()
}

/// Names joined by `, `, at most 12 of them, each quoted only if it needs it.
fn list(names: &[String]) -> String {
    if names.is_empty() {
        return "(none)".to_owned();
    }
    let mut text = names
        .iter()
        .take(LISTED_NAMES)
        .map(|name| show_name(name))
        .collect::<Vec<_>>()
        .join(", ");
    if names.len() > LISTED_NAMES {
        text.push_str(&format!(" and {} more", names.len() - LISTED_NAMES));
    }
    text
}

/// A name as it appears in a list: bare when it is plain, quoted otherwise.
fn show_name(name: &str) -> String {
    let plain = !name.is_empty()
        && name
            .chars()
            .all(|c| c.is_alphanumeric() || matches!(c, '_' | '-' | '.'));
    if plain {
        name.to_owned()
    } else {
        format!("{name:?}")
    }
}

/// ` (skipped as text or empty: a, b)`, or nothing.
fn skipped_note(names: &[String]) -> String {
    if names.is_empty() {
        String::new()
    } else {
        format!(" (skipped as text or empty: {})", list(names))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn excerpt_cuts_on_character_boundaries() {
        assert_eq!(excerpt("abc"), "abc");
        let long = "é".repeat(50);
        let cut = excerpt(&long);
        assert_eq!(cut.chars().count(), EXCERPT_CHARS + 1);
        assert!(cut.ends_with('…'));
        assert_eq!(
            excerpt(&"x".repeat(EXCERPT_CHARS)),
            "x".repeat(EXCERPT_CHARS)
        );
    }

    #[test]
    fn place_shows_line_when_known() {
        let with_line = DataError::NotANumber {
            row: 17,
            line: Some(18),
            column: "t03".into(),
            found: "abc".into(),
        };
        assert!(
            with_line
                .to_string()
                .starts_with("line 18 (row 17), column \"t03\": found \"abc\", expected a number;")
        );
        let without = DataError::MissingValue {
            row: 4,
            line: None,
            column: "x2".into(),
        };
        assert!(
            without
                .to_string()
                .starts_with("row 4, column \"x2\": the value is missing;")
        );
    }

    #[test]
    fn counts_agree_in_number() {
        let one = DataError::RaggedRow {
            line: 3,
            found: 1,
            expected: 2,
        };
        assert!(
            one.to_string()
                .starts_with("line 3 has 1 field but the header has 2;")
        );
        let many = DataError::JsonRowLength {
            row: 2,
            found: 3,
            expected: 2,
        };
        assert!(
            many.to_string()
                .starts_with("row 2 has 3 values but row 1 has 2;")
        );
        assert!(
            DataError::AllRowsDropped { dropped: 1 }
                .to_string()
                .starts_with("all 1 row has")
        );
        assert!(
            DataError::AllRowsDropped { dropped: 5 }
                .to_string()
                .starts_with("all 5 rows have")
        );
    }

    #[test]
    fn column_lists_are_bounded_and_quote_odd_names() {
        let names: Vec<String> = (1..=20).map(|i| format!("c{i}")).collect();
        let error = DataError::UnknownColumn {
            name: "zz".into(),
            available: names,
        };
        let text = error.to_string();
        assert!(text.contains("c1, c2,"));
        assert!(text.contains("c12 and 8 more"));
        assert!(!text.contains("c13"));
        let odd = DataError::UnknownColumn {
            name: "q".into(),
            available: vec!["plain_name".into(), "has space".into(), String::new()],
        };
        assert!(odd.to_string().contains("plain_name, \"has space\", \"\""));
    }

    #[test]
    fn file_errors_lead_with_the_path() {
        let inner = DataError::NoDataRows {
            format: Format::Csv,
        };
        let outer = DataError::InFile {
            path: "data/x.csv".into(),
            error: Box::new(inner),
        };
        assert_eq!(
            outer.to_string(),
            "data/x.csv: the CSV input has no data rows; add at least one row of values"
        );
    }
}
