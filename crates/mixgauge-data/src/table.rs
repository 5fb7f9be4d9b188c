//! The table builder shared by all readers: column choice, labels, missing
//! values and limits.
//!
//! A reader names the input's columns once ([`TableBuilder::new`], which
//! checks the caller's options against them), then hands over rows cell by
//! cell. The builder stores the candidate feature columns row-major and, per
//! column, remembers only the first text cell and the first missing or
//! non-finite cell. Which columns count as numeric, and therefore which of
//! those first faults is an error, can only be decided once every row is
//! seen: by default a column with no numbers at all is skipped as text, while
//! a column with both numbers and text is an error at its first text cell.
//! [`TableBuilder::finish`] makes that decision, reports the earliest fault
//! in row order, and drops incomplete rows if asked.

use std::collections::HashMap;

use ndarray::Array2;

use crate::cell::Cell;
use crate::error::{DataError, excerpt};
use crate::format::Format;
use crate::options::ReadOptions;

/// What a reader should do with one input column.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(crate) enum Role {
    /// A candidate feature, stored in this slot.
    Feature(usize),
    /// The label column.
    Label,
    /// Not wanted: skip it.
    Ignored,
}

/// The feature part of a [`Dataset`](crate::Dataset), before the reader adds
/// the format and checksum.
#[derive(Debug)]
pub(crate) struct Table {
    pub(crate) values: Array2<f64>,
    pub(crate) column_names: Vec<String>,
    pub(crate) labels: Option<Vec<String>>,
    pub(crate) dropped_rows: usize,
    pub(crate) skipped_columns: Vec<String>,
}

/// The first cell of some kind seen in a column.
#[derive(Debug)]
struct Note {
    row: usize,
    line: Option<u64>,
    /// The text found; `None` for a missing value.
    found: Option<String>,
}

/// What one candidate column has held so far.
#[derive(Debug, Default)]
struct ColumnStats {
    /// Cells that parsed as numbers, finite or not.
    numbers: usize,
    first_text: Option<Note>,
    /// First missing or non-finite value.
    first_gap: Option<Note>,
}

/// Collects rows of cells into a [`Table`]; see the module documentation.
#[derive(Debug)]
pub(crate) struct TableBuilder {
    format: Format,
    names: Vec<String>,
    roles: Vec<Role>,
    /// Slot → input column index.
    slots: Vec<usize>,
    /// The caller named the feature columns, so each must be numeric.
    named: bool,
    drop_incomplete: bool,
    max_rows: Option<usize>,
    stats: Vec<ColumnStats>,
    /// Row-major, `slots.len()` values per row; NaN until a cell is put.
    values: Vec<f64>,
    labels: Option<Vec<String>>,
    /// Rows begun so far; also the current row's number counted from 1.
    rows: usize,
    line: Option<u64>,
}

impl TableBuilder {
    /// Sets up for an input with these column names, checking `options`
    /// against them: limits, duplicate names, the label column and the
    /// requested feature columns.
    pub(crate) fn new(
        names: Vec<String>,
        options: &ReadOptions,
        format: Format,
    ) -> Result<TableBuilder, DataError> {
        if let Some(limit) = options.max_columns.filter(|&limit| names.len() > limit) {
            return Err(DataError::TooManyColumns {
                found: names.len(),
                limit,
            });
        }
        let mut index_of: HashMap<&str, usize> = HashMap::with_capacity(names.len());
        for (index, name) in names.iter().enumerate() {
            if let Some(&first) = index_of.get(name.as_str()) {
                return Err(DataError::DuplicateColumn {
                    name: name.clone(),
                    first: first + 1,
                    second: index + 1,
                });
            }
            index_of.insert(name, index);
        }
        let label = match &options.label_column {
            Some(name) => match index_of.get(name.as_str()) {
                Some(&index) => Some(index),
                None => {
                    return Err(DataError::UnknownLabelColumn {
                        name: name.clone(),
                        available: names.clone(),
                    });
                }
            },
            None => None,
        };
        let slots: Vec<usize> = match &options.columns {
            Some(requested) => {
                if requested.is_empty() {
                    return Err(DataError::EmptyColumnList);
                }
                let mut slots = Vec::with_capacity(requested.len());
                for name in requested {
                    let Some(&index) = index_of.get(name.as_str()) else {
                        return Err(DataError::UnknownColumn {
                            name: name.clone(),
                            available: names.clone(),
                        });
                    };
                    if Some(index) == label {
                        return Err(DataError::LabelIsFeature { name: name.clone() });
                    }
                    if slots.contains(&index) {
                        return Err(DataError::RepeatedColumn { name: name.clone() });
                    }
                    slots.push(index);
                }
                slots
            }
            None => (0..names.len())
                .filter(|&index| Some(index) != label)
                .collect(),
        };
        let mut roles = vec![Role::Ignored; names.len()];
        if let Some(index) = label {
            roles[index] = Role::Label;
        }
        for (slot, &index) in slots.iter().enumerate() {
            roles[index] = Role::Feature(slot);
        }
        Ok(TableBuilder {
            format,
            names,
            roles,
            stats: slots.iter().map(|_| ColumnStats::default()).collect(),
            slots,
            named: options.columns.is_some(),
            drop_incomplete: options.drop_incomplete,
            max_rows: options.max_rows,
            values: Vec::new(),
            labels: label.map(|_| Vec::new()),
            rows: 0,
            line: None,
        })
    }

    /// The role of input column `index`; `Ignored` for an index past the end.
    pub(crate) fn role(&self, index: usize) -> Role {
        self.roles.get(index).copied().unwrap_or(Role::Ignored)
    }

    /// Makes room for `rows` more rows, when the reader knows the count.
    pub(crate) fn reserve_rows(&mut self, rows: usize) {
        self.values.reserve(rows.saturating_mul(self.slots.len()));
    }

    /// Starts a new row; `line` is its physical line when the format has lines.
    pub(crate) fn begin_row(&mut self, line: Option<u64>) -> Result<(), DataError> {
        if let Some(limit) = self.max_rows.filter(|&limit| self.rows >= limit) {
            return Err(DataError::TooManyRows { limit });
        }
        self.rows += 1;
        self.line = line;
        self.values
            .extend(std::iter::repeat_n(f64::NAN, self.slots.len()));
        if let Some(labels) = &mut self.labels {
            labels.push(String::new());
        }
        Ok(())
    }

    /// Sets the current row's value in feature `slot`.
    ///
    /// Call only after [`begin_row`](Self::begin_row), with a slot from
    /// [`Role::Feature`].
    pub(crate) fn put(&mut self, slot: usize, cell: Cell<'_>) {
        let (row, line) = (self.rows, self.line);
        let note = |found: Option<String>| Some(Note { row, line, found });
        let stats = &mut self.stats[slot];
        let value = match cell {
            Cell::Missing => {
                if stats.first_gap.is_none() {
                    stats.first_gap = note(None);
                }
                f64::NAN
            }
            Cell::Number { value, text } => {
                stats.numbers += 1;
                if !value.is_finite() && stats.first_gap.is_none() {
                    let shown = if text.is_empty() {
                        value.to_string()
                    } else {
                        excerpt(text)
                    };
                    stats.first_gap = note(Some(shown));
                }
                value
            }
            Cell::Text(text) => {
                if stats.first_text.is_none() {
                    stats.first_text = note(Some(excerpt(text)));
                }
                f64::NAN
            }
        };
        let width = self.slots.len();
        self.values[(row - 1) * width + slot] = value;
    }

    /// Sets the current row's label.
    pub(crate) fn put_label(&mut self, text: String) {
        if let Some(last) = self.labels.as_mut().and_then(|labels| labels.last_mut()) {
            *last = text;
        }
    }

    /// The name of input column `index`.
    pub(crate) fn name(&self, index: usize) -> &str {
        self.names.get(index).map_or("", String::as_str)
    }

    /// How many columns the input has.
    pub(crate) fn column_count(&self) -> usize {
        self.names.len()
    }

    /// The number of the current row, counted from 1 (0 before the first).
    pub(crate) fn row(&self) -> usize {
        self.rows
    }

    /// Decides which columns are features, reports the earliest fault, drops
    /// incomplete rows if asked and assembles the matrix.
    pub(crate) fn finish(self) -> Result<Table, DataError> {
        if self.rows == 0 {
            return Err(DataError::NoDataRows {
                format: self.format,
            });
        }
        let mut features = Vec::with_capacity(self.slots.len());
        let mut skipped_columns = Vec::new();
        for (slot, stats) in self.stats.iter().enumerate() {
            if self.named || stats.numbers > 0 {
                features.push(slot);
            } else {
                skipped_columns.push(self.names[self.slots[slot]].clone());
            }
        }
        if features.is_empty() {
            return Err(DataError::NoFeatureColumns {
                skipped: skipped_columns,
            });
        }
        if let Some(error) = self.earliest_fault(&features) {
            return Err(error);
        }

        let width = self.slots.len();
        let mut kept = Vec::with_capacity(self.rows * features.len());
        let mut kept_labels = self
            .labels
            .as_ref()
            .map(|labels| Vec::with_capacity(labels.len()));
        let mut labels = self.labels.into_iter().flatten();
        let mut dropped_rows = 0;
        for row in self.values.chunks_exact(width) {
            let label = labels.next();
            if features.iter().all(|&slot| row[slot].is_finite()) {
                kept.extend(features.iter().map(|&slot| row[slot]));
                if let (Some(kept_labels), Some(label)) = (&mut kept_labels, label) {
                    kept_labels.push(label);
                }
            } else {
                dropped_rows += 1;
            }
        }
        let rows = self.rows - dropped_rows;
        if rows == 0 {
            return Err(DataError::AllRowsDropped {
                dropped: dropped_rows,
            });
        }
        let values = Array2::from_shape_vec((rows, features.len()), kept)
            .expect("each kept row contributes exactly one value per feature column");
        let column_names = features
            .iter()
            .map(|&slot| self.names[self.slots[slot]].clone())
            .collect();
        Ok(Table {
            values,
            column_names,
            labels: kept_labels,
            dropped_rows,
            skipped_columns,
        })
    }

    /// The first fault in row order (then feature order) among the feature
    /// columns: text always, a missing or non-finite value unless dropping.
    fn earliest_fault(&self, features: &[usize]) -> Option<DataError> {
        let mut earliest: Option<(usize, &Note, bool, &str)> = None;
        for &slot in features {
            let stats = &self.stats[slot];
            let name = self.names[self.slots[slot]].as_str();
            let gap = stats.first_gap.as_ref().filter(|_| !self.drop_incomplete);
            let candidates = [(stats.first_text.as_ref(), true), (gap, false)];
            for (note, is_text) in candidates {
                let Some(note) = note else { continue };
                // Strictly earlier rows win, so ties go to the earlier column.
                if earliest.is_none_or(|(row, ..)| note.row < row) {
                    earliest = Some((note.row, note, is_text, name));
                }
            }
        }
        let (row, note, is_text, name) = earliest?;
        let column = name.to_owned();
        let line = note.line;
        Some(match (&note.found, is_text) {
            (Some(found), true) => DataError::NotANumber {
                row,
                line,
                column,
                found: found.clone(),
            },
            (Some(found), false) => DataError::NonFinite {
                row,
                line,
                column,
                found: found.clone(),
            },
            (None, _) => DataError::MissingValue { row, line, column },
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn names(list: &[&str]) -> Vec<String> {
        list.iter().map(|name| name.to_string()).collect()
    }

    /// Feeds rows of text cells, as the CSV reader would.
    fn build(
        columns: &[&str],
        rows: &[&[&str]],
        options: &ReadOptions,
    ) -> Result<Table, DataError> {
        let mut builder = TableBuilder::new(names(columns), options, Format::Csv)?;
        for (number, row) in rows.iter().enumerate() {
            builder.begin_row(Some(number as u64 + 2))?;
            for (index, text) in row.iter().enumerate() {
                match builder.role(index) {
                    Role::Feature(slot) => builder.put(slot, Cell::from_text(text)),
                    Role::Label => builder.put_label(text.to_string()),
                    Role::Ignored => {}
                }
            }
        }
        builder.finish()
    }

    #[test]
    fn default_takes_numeric_columns_and_skips_text_ones() {
        let table = build(
            &["name", "a", "note", "b"],
            &[&["x", "1", "", "2"], &["y", "3", "hi", "4"]],
            &ReadOptions::default(),
        )
        .unwrap();
        assert_eq!(table.column_names, ["a", "b"]);
        assert_eq!(table.skipped_columns, ["name", "note"]);
        assert_eq!(table.values, ndarray::array![[1.0, 2.0], [3.0, 4.0]]);
        assert!(table.values.is_standard_layout());
    }

    #[test]
    fn named_columns_come_in_the_requested_order() {
        let options = ReadOptions::default()
            .columns(["b", "a"])
            .label_column("name");
        let table = build(
            &["name", "a", "b"],
            &[&["p", "1", "2"], &["q", "3", "4"]],
            &options,
        )
        .unwrap();
        assert_eq!(table.column_names, ["b", "a"]);
        assert_eq!(table.values, ndarray::array![[2.0, 1.0], [4.0, 3.0]]);
        assert_eq!(table.labels, Some(names(&["p", "q"])));
        assert!(table.skipped_columns.is_empty());
    }

    #[test]
    fn mixed_column_is_an_error_at_its_first_text() {
        let error = build(
            &["a", "b"],
            &[&["1", "2"], &["3", "x"], &["y", "5"]],
            &ReadOptions::default(),
        )
        .unwrap_err();
        match error {
            DataError::NotANumber {
                row,
                line,
                column,
                found,
            } => {
                assert_eq!(
                    (row, line, column.as_str(), found.as_str()),
                    (2, Some(3), "b", "x")
                );
            }
            other => panic!("unexpected {other:?}"),
        }
    }

    #[test]
    fn earliest_fault_wins_across_columns() {
        // Column b's missing value (row 1) comes before column a's text (row 2).
        let error = build(
            &["a", "b"],
            &[&["1", ""], &["q", "2"]],
            &ReadOptions::default(),
        )
        .unwrap_err();
        assert!(
            matches!(error, DataError::MissingValue { row: 1, ref column, .. } if column == "b")
        );
        // Same row: the earlier feature column is named.
        let error = build(
            &["a", "b"],
            &[&["1", "2"], &["inf", ""]],
            &ReadOptions::default(),
        )
        .unwrap_err();
        assert!(matches!(error, DataError::NonFinite { row: 2, ref column, .. } if column == "a"));
    }

    #[test]
    fn named_text_column_is_an_error() {
        let options = ReadOptions::default().columns(["name"]);
        let error = build(&["name", "a"], &[&["x", "1"]], &options).unwrap_err();
        assert!(matches!(error, DataError::NotANumber { row: 1, ref found, .. } if found == "x"));
    }

    #[test]
    fn dropping_removes_rows_and_their_labels() {
        let options = ReadOptions::default()
            .drop_incomplete(true)
            .label_column("y");
        let table = build(
            &["a", "b", "y"],
            &[
                &["1", "2", "p"],
                &["", "4", "q"],
                &["5", "NaN", "r"],
                &["7", "8", "s"],
            ],
            &options,
        )
        .unwrap();
        assert_eq!(table.dropped_rows, 2);
        assert_eq!(table.values, ndarray::array![[1.0, 2.0], [7.0, 8.0]]);
        assert_eq!(table.labels, Some(names(&["p", "s"])));
    }

    #[test]
    fn dropping_everything_is_an_error() {
        let options = ReadOptions::default().drop_incomplete(true);
        let error = build(&["a"], &[&["1e999"], &["NaN"]], &options).unwrap_err();
        assert!(matches!(error, DataError::AllRowsDropped { dropped: 2 }));
    }

    #[test]
    fn text_is_an_error_even_when_dropping() {
        let options = ReadOptions::default().drop_incomplete(true);
        let error = build(&["a"], &[&["1"], &["oops"]], &options).unwrap_err();
        assert!(matches!(error, DataError::NotANumber { row: 2, .. }));
    }

    #[test]
    fn option_checks() {
        type Check = fn(&DataError) -> bool;
        let cases: Vec<(ReadOptions, Check)> = vec![
            (ReadOptions::default().columns(["zz"]), |e| {
                matches!(e, DataError::UnknownColumn { .. })
            }),
            (ReadOptions::default().label_column("zz"), |e| {
                matches!(e, DataError::UnknownLabelColumn { .. })
            }),
            (ReadOptions::default().columns(["a", "a"]), |e| {
                matches!(e, DataError::RepeatedColumn { .. })
            }),
            (
                ReadOptions::default().columns(["a"]).label_column("a"),
                |e| matches!(e, DataError::LabelIsFeature { .. }),
            ),
            (ReadOptions::default().columns(Vec::<String>::new()), |e| {
                matches!(e, DataError::EmptyColumnList)
            }),
            (ReadOptions::default().max_columns(1), |e| {
                matches!(e, DataError::TooManyColumns { found: 2, limit: 1 })
            }),
        ];
        for (options, expected) in cases {
            let error = TableBuilder::new(names(&["a", "b"]), &options, Format::Csv).unwrap_err();
            assert!(expected(&error), "{options:?} gave {error:?}");
        }
        let error = TableBuilder::new(
            names(&["a", "b", "a"]),
            &ReadOptions::default(),
            Format::Csv,
        )
        .unwrap_err();
        assert!(matches!(
            error,
            DataError::DuplicateColumn {
                first: 1,
                second: 3,
                ..
            }
        ));
    }

    #[test]
    fn row_limit_counts_input_rows() {
        let options = ReadOptions::default().max_rows(2).drop_incomplete(true);
        assert!(build(&["a"], &[&["1"], &[""]], &options).is_ok());
        let error = build(&["a"], &[&["1"], &[""], &["3"]], &options).unwrap_err();
        assert!(matches!(error, DataError::TooManyRows { limit: 2 }));
    }

    #[test]
    fn no_rows_and_no_numbers() {
        let error = build(&["a"], &[], &ReadOptions::default()).unwrap_err();
        assert!(matches!(
            error,
            DataError::NoDataRows {
                format: Format::Csv
            }
        ));
        let error = build(&["a", "b"], &[&["x", ""]], &ReadOptions::default()).unwrap_err();
        assert!(
            matches!(error, DataError::NoFeatureColumns { ref skipped } if skipped == &names(&["a", "b"]))
        );
    }
}
