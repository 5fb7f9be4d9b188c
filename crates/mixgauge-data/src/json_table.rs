//! The JSON reader: three table layouts, streamed into the table builder.
//!
//! Accepted layouts:
//! - an array of rows, `[[1, 2], [3, 4]]`, with columns `x1` … `xD`;
//! - an array of objects, `[{"a": 1, "b": 2}, …]`, whose first object's keys,
//!   in order, name the columns; every object must have exactly those keys;
//! - an object of columns, `{"a": [1, 3], "b": [2, 4]}`, all of equal length.
//!
//! `null` is a missing value. A string, `true`, `false`, an array or an
//! object in a feature column is text (an error, or a skipped column by
//! default). Label values may be strings, numbers (kept as written), `true`
//! or `false`; `null` gives an empty label.
//!
//! Syntax is checked by `serde_json`, but each cell is taken as a borrowed
//! [`RawValue`] and its number parsed here, because `serde_json` refuses
//! numbers beyond the `f64` range (`1e400`) outright; this crate counts them
//! as non-finite values like NaN, so they can be dropped with their row.
//! Rows of the two array layouts go straight into the table builder, with no
//! intermediate document tree.

use std::borrow::Cow;
use std::collections::HashMap;
use std::fmt;

use serde::de::{self, Deserialize, DeserializeSeed, Deserializer, MapAccess, SeqAccess, Visitor};
use serde_json::value::RawValue;

use crate::cell::Cell;
use crate::error::{DataError, excerpt};
use crate::format::{Format, UTF8_BOM};
use crate::options::ReadOptions;
use crate::table::{Role, Table, TableBuilder};

/// Reads JSON bytes into a table.
pub(crate) fn read(bytes: &[u8], options: &ReadOptions) -> Result<Table, DataError> {
    let body = bytes.strip_prefix(UTF8_BOM).unwrap_or(bytes);
    if body.iter().all(u8::is_ascii_whitespace) {
        return Err(DataError::EmptyInput {
            format: Format::Json,
        });
    }
    let mut reader = JsonReader {
        options,
        table: None,
        layout: None,
        key_index: HashMap::new(),
        seen: Vec::new(),
        fault: None,
    };
    let mut deserializer = serde_json::Deserializer::from_slice(body);
    let parsed = Document(&mut reader)
        .deserialize(&mut deserializer)
        .and_then(|()| deserializer.end());
    // A fault found by this module travels through serde as an opaque error;
    // the real one waits here.
    if let Some(fault) = reader.fault.take() {
        return Err(fault);
    }
    parsed.map_err(from_json)?;
    match reader.table {
        Some(table) => table.finish(),
        None => Err(DataError::NoDataRows {
            format: Format::Json,
        }),
    }
}

/// Maps a `serde_json` error: wrong value types are layout errors, the rest syntax.
fn from_json(error: serde_json::Error) -> DataError {
    let (line, column) = (error.line(), error.column());
    match error.classify() {
        serde_json::error::Category::Data => DataError::JsonLayout {
            detail: error.to_string(),
        },
        _ => {
            let message = error.to_string();
            let suffix = format!(" at line {line} column {column}");
            let detail = message.strip_suffix(&suffix).unwrap_or(&message).to_owned();
            DataError::JsonSyntax {
                line,
                column,
                detail,
            }
        }
    }
}

/// Which array layout the rows follow, fixed by row 1.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Layout {
    Arrays,
    Objects,
}

impl Layout {
    fn noun(self) -> &'static str {
        match self {
            Layout::Arrays => "an array",
            Layout::Objects => "an object",
        }
    }
}

/// State shared by the visitors while one document is read.
struct JsonReader<'o> {
    options: &'o ReadOptions,
    table: Option<TableBuilder>,
    layout: Option<Layout>,
    /// Object layout: key → column index.
    key_index: HashMap<String, usize>,
    /// Object layout: which columns the current row has given.
    seen: Vec<bool>,
    fault: Option<DataError>,
}

impl JsonReader<'_> {
    /// Records `fault` and returns the opaque serde error that unwinds the parse.
    fn fail<E: de::Error>(&mut self, fault: DataError) -> E {
        self.fault = Some(fault);
        E::custom("stopped by a table error")
    }

    /// Checks that a row follows the layout of row 1.
    fn check_layout(&mut self, layout: Layout) -> Result<(), DataError> {
        match self.layout {
            None => {
                self.layout = Some(layout);
                Ok(())
            }
            Some(first) if first == layout => Ok(()),
            Some(first) => {
                let row = self.table.as_ref().map_or(0, TableBuilder::row) + 1;
                Err(DataError::JsonLayout {
                    detail: format!(
                        "row {row} is {} but row 1 is {}",
                        layout.noun(),
                        first.noun()
                    ),
                })
            }
        }
    }

    /// Starts the table from the first row's column names.
    fn start(&mut self, names: Vec<String>) -> Result<&mut TableBuilder, DataError> {
        let table = TableBuilder::new(names, self.options, Format::Json)?;
        Ok(self.table.insert(table))
    }

    /// One whole row given as column-indexed cells.
    fn push_row<'de>(
        &mut self,
        cells: impl IntoIterator<Item = &'de RawValue>,
    ) -> Result<(), DataError> {
        let Some(table) = &mut self.table else {
            return Ok(());
        };
        table.begin_row(None)?;
        for (index, raw) in cells.into_iter().enumerate() {
            put(table, index, raw)?;
        }
        Ok(())
    }

    /// The object-of-columns layout, gathered whole.
    fn columns(&mut self, columns: Vec<(String, Vec<&RawValue>)>) -> Result<(), DataError> {
        let Some((first_column, first_values)) = columns.first() else {
            return Ok(());
        };
        let rows = first_values.len();
        if let Some((column, values)) = columns.iter().find(|(_, values)| values.len() != rows) {
            return Err(DataError::JsonColumnLength {
                column: column.clone(),
                found: values.len(),
                first_column: first_column.clone(),
                expected: rows,
            });
        }
        let names = columns.iter().map(|(name, _)| name.clone()).collect();
        let table = self.start(names)?;
        table.reserve_rows(rows);
        for row in 0..rows {
            table.begin_row(None)?;
            for (index, (_, values)) in columns.iter().enumerate() {
                put(table, index, values[row])?;
            }
        }
        Ok(())
    }
}

/// Hands one cell to the table according to its column's role.
fn put(table: &mut TableBuilder, index: usize, raw: &RawValue) -> Result<(), DataError> {
    match table.role(index) {
        Role::Feature(slot) => table.put(slot, cell(raw)),
        Role::Label => match label(raw) {
            Ok(text) => table.put_label(text),
            Err(found) => {
                return Err(DataError::BadLabel {
                    row: table.row(),
                    column: table.name(index).to_owned(),
                    found,
                });
            }
        },
        Role::Ignored => {}
    }
    Ok(())
}

/// Classifies a feature value. Strings are shown without their quotes.
fn cell(raw: &RawValue) -> Cell<'_> {
    let text = raw.get().trim();
    match text.as_bytes().first() {
        Some(b'"') => Cell::Text(text.get(1..text.len() - 1).unwrap_or(text)),
        Some(b'n') => Cell::Missing,
        Some(b't' | b'f' | b'[' | b'{') => Cell::Text(text),
        // serde_json has checked the number's syntax, which `str::parse`
        // accepts; out-of-range values parse to infinity.
        _ => match text.parse::<f64>() {
            Ok(value) => Cell::Number { value, text },
            Err(_) => Cell::Text(text),
        },
    }
}

/// A label value as text, or the excerpt of what was found instead.
fn label(raw: &RawValue) -> Result<String, String> {
    let text = raw.get().trim();
    match text.as_bytes().first() {
        Some(b'"') => serde_json::from_str::<String>(text).map_err(|_| excerpt(text)),
        Some(b'n') => Ok(String::new()),
        Some(b'[' | b'{') => Err(excerpt(text)),
        _ => Ok(text.to_owned()),
    }
}

/// The top-level value: an array of rows or an object of columns.
struct Document<'r, 'o>(&'r mut JsonReader<'o>);

impl<'de> DeserializeSeed<'de> for Document<'_, '_> {
    type Value = ();

    fn deserialize<D: Deserializer<'de>>(self, deserializer: D) -> Result<(), D::Error> {
        deserializer.deserialize_any(self)
    }
}

impl<'de> Visitor<'de> for Document<'_, '_> {
    type Value = ();

    fn expecting(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str("an array of rows or an object of columns")
    }

    fn visit_seq<A: SeqAccess<'de>>(self, mut rows: A) -> Result<(), A::Error> {
        while rows.next_element_seed(Row(&mut *self.0))?.is_some() {}
        Ok(())
    }

    fn visit_map<A: MapAccess<'de>>(self, mut map: A) -> Result<(), A::Error> {
        let mut columns = Vec::new();
        while let Some(Key(name)) = map.next_key()? {
            let values = map.next_value_seed(Column)?;
            columns.push((name.into_owned(), values));
        }
        self.0.columns(columns).map_err(|fault| self.0.fail(fault))
    }
}

/// One element of the top-level array.
struct Row<'r, 'o>(&'r mut JsonReader<'o>);

impl<'de> DeserializeSeed<'de> for Row<'_, '_> {
    type Value = ();

    fn deserialize<D: Deserializer<'de>>(self, deserializer: D) -> Result<(), D::Error> {
        deserializer.deserialize_any(self)
    }
}

impl<'de> Visitor<'de> for Row<'_, '_> {
    type Value = ();

    fn expecting(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str("a row (an array of values or an object of named values)")
    }

    fn visit_seq<A: SeqAccess<'de>>(self, mut values: A) -> Result<(), A::Error> {
        let reader = self.0;
        reader
            .check_layout(Layout::Arrays)
            .map_err(|fault| reader.fail(fault))?;
        let Some(table) = &mut reader.table else {
            let mut cells = Vec::new();
            while let Some(raw) = values.next_element::<&'de RawValue>()? {
                cells.push(raw);
            }
            let names = (1..=cells.len())
                .map(|number| format!("x{number}"))
                .collect();
            let outcome = reader
                .start(names)
                .map(|_| ())
                .and_then(|()| reader.push_row(cells));
            return outcome.map_err(|fault| reader.fail(fault));
        };
        let expected = table.column_count();
        let mut found = 0;
        let mut outcome = table.begin_row(None);
        while let Some(raw) = values.next_element::<&'de RawValue>()? {
            if found < expected && outcome.is_ok() {
                outcome = put(table, found, raw);
            }
            found += 1;
        }
        if outcome.is_ok() && found != expected {
            outcome = Err(DataError::JsonRowLength {
                row: table.row(),
                found,
                expected,
            });
        }
        outcome.map_err(|fault| reader.fail(fault))
    }

    fn visit_map<A: MapAccess<'de>>(self, mut entries: A) -> Result<(), A::Error> {
        let reader = self.0;
        reader
            .check_layout(Layout::Objects)
            .map_err(|fault| reader.fail(fault))?;
        if reader.table.is_none() {
            let mut names = Vec::new();
            let mut cells = Vec::new();
            while let Some(Key(name)) = entries.next_key()? {
                names.push(name.into_owned());
                cells.push(entries.next_value::<&'de RawValue>()?);
            }
            reader.key_index = names
                .iter()
                .enumerate()
                .map(|(index, name)| (name.clone(), index))
                .collect();
            reader.seen = vec![false; names.len()];
            let outcome = reader
                .start(names)
                .map(|_| ())
                .and_then(|()| reader.push_row(cells));
            return outcome.map_err(|fault| reader.fail(fault));
        }
        let JsonReader {
            table: Some(table),
            key_index,
            seen,
            ..
        } = &mut *reader
        else {
            return Ok(());
        };
        seen.fill(false);
        let mut outcome = table.begin_row(None);
        while let Some(Key(name)) = entries.next_key()? {
            let raw = entries.next_value::<&'de RawValue>()?;
            if outcome.is_err() {
                continue;
            }
            let row = table.row();
            outcome = match key_index.get(name.as_ref()) {
                None => Err(DataError::JsonExtraKey {
                    row,
                    key: name.into_owned(),
                }),
                Some(&index) if seen[index] => Err(DataError::JsonRepeatedKey {
                    row,
                    key: name.into_owned(),
                }),
                Some(&index) => {
                    seen[index] = true;
                    put(table, index, raw)
                }
            };
        }
        if let (Ok(()), Some(index)) = (&outcome, seen.iter().position(|given| !given)) {
            let key = table.name(index).to_owned();
            outcome = Err(DataError::JsonMissingKey {
                row: table.row(),
                key,
            });
        }
        outcome.map_err(|fault| reader.fail(fault))
    }
}

/// One column of the object-of-columns layout.
struct Column;

impl<'de> DeserializeSeed<'de> for Column {
    type Value = Vec<&'de RawValue>;

    fn deserialize<D: Deserializer<'de>>(self, deserializer: D) -> Result<Self::Value, D::Error> {
        deserializer.deserialize_seq(self)
    }
}

impl<'de> Visitor<'de> for Column {
    type Value = Vec<&'de RawValue>;

    fn expecting(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str("a column (an array of values)")
    }

    fn visit_seq<A: SeqAccess<'de>>(self, mut values: A) -> Result<Self::Value, A::Error> {
        let mut column = Vec::with_capacity(values.size_hint().unwrap_or(0));
        while let Some(raw) = values.next_element()? {
            column.push(raw);
        }
        Ok(column)
    }
}

/// An object key, borrowed from the input unless it holds escapes.
struct Key<'de>(Cow<'de, str>);

impl<'de> Deserialize<'de> for Key<'de> {
    fn deserialize<D: Deserializer<'de>>(deserializer: D) -> Result<Self, D::Error> {
        struct KeyVisitor;

        impl<'de> Visitor<'de> for KeyVisitor {
            type Value = Key<'de>;

            fn expecting(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
                f.write_str("a key")
            }

            fn visit_borrowed_str<E: de::Error>(self, key: &'de str) -> Result<Key<'de>, E> {
                Ok(Key(Cow::Borrowed(key)))
            }

            fn visit_str<E: de::Error>(self, key: &str) -> Result<Key<'de>, E> {
                Ok(Key(Cow::Owned(key.to_owned())))
            }

            fn visit_string<E: de::Error>(self, key: String) -> Result<Key<'de>, E> {
                Ok(Key(Cow::Owned(key)))
            }
        }

        deserializer.deserialize_str(KeyVisitor)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::array;

    fn read_ok(text: &str, options: &ReadOptions) -> Table {
        read(text.as_bytes(), options).unwrap_or_else(|error| panic!("{text} failed: {error}"))
    }

    fn read_err(text: &str, options: &ReadOptions) -> DataError {
        match read(text.as_bytes(), options) {
            Ok(table) => panic!("{text} was accepted: {table:?}"),
            Err(error) => error,
        }
    }

    #[test]
    fn three_layouts_give_the_same_table() {
        let expected = array![[1.0, 2.0], [3.0, 4.0]];
        let rows = read_ok("[[1, 2], [3, 4]]", &ReadOptions::default());
        assert_eq!(rows.values, expected);
        assert_eq!(rows.column_names, ["x1", "x2"]);
        let objects = read_ok(
            r#"[{"a": 1, "b": 2}, {"b": 4, "a": 3}]"#,
            &ReadOptions::default(),
        );
        assert_eq!(objects.values, expected);
        assert_eq!(objects.column_names, ["a", "b"]);
        let columns = read_ok(r#"{"a": [1, 3], "b": [2, 4]}"#, &ReadOptions::default());
        assert_eq!(columns.values, expected);
        assert_eq!(columns.column_names, ["a", "b"]);
    }

    /// RFC 8259 §6: numbers have an optional minus, an integer part, an
    /// optional fraction and an optional exponent with `e` or `E` and a sign.
    #[test]
    fn rfc8259_number_forms() {
        let table = read_ok(
            "[[-0, 0.5, 1E+2, 2e-1, 12345678901234567890, -1.5E3]]",
            &ReadOptions::default(),
        );
        assert_eq!(
            table.values,
            array![[-0.0, 0.5, 100.0, 0.2, 12345678901234567890.0, -1500.0]]
        );
    }

    /// RFC 8259 §7: escapes in strings, including \u escapes and a UTF-16
    /// surrogate pair, decode in keys and labels.
    #[test]
    fn rfc8259_string_escapes() {
        let text = r#"[{"caf\u00e9": 1, "y": "tab\there \"q\" \ud83d\ude00"}]"#;
        let table = read_ok(text, &ReadOptions::default().label_column("y"));
        assert_eq!(table.column_names, ["café"]);
        assert_eq!(table.labels, Some(vec!["tab\there \"q\" 😀".to_string()]));
    }

    #[test]
    fn labels_keep_numbers_as_written() {
        let table = read_ok(
            r#"{"x": [1, 2, 3, 4], "y": ["a", 2.50, null, true]}"#,
            &ReadOptions::default().label_column("y"),
        );
        assert_eq!(
            table.labels,
            Some(vec![
                "a".into(),
                "2.50".into(),
                String::new(),
                "true".into()
            ])
        );
        let error = read_err(
            r#"[{"x": 1, "y": [1]}]"#,
            &ReadOptions::default().label_column("y"),
        );
        assert!(
            matches!(error, DataError::BadLabel { row: 1, ref column, ref found } if column == "y" && found == "[1]")
        );
    }

    #[test]
    fn overflowing_numbers_are_non_finite() {
        let error = read_err("[[1, 2], [3, 1e400]]", &ReadOptions::default());
        assert!(
            matches!(error, DataError::NonFinite { row: 2, ref column, ref found, .. } if column == "x2" && found == "1e400")
        );
        let table = read_ok(
            "[[1, 2], [3, 1e400]]",
            &ReadOptions::default().drop_incomplete(true),
        );
        assert_eq!(table.values, array![[1.0, 2.0]]);
        assert_eq!(table.dropped_rows, 1);
        let table = read_ok("[[1e308]]", &ReadOptions::default());
        assert_eq!(table.values, array![[1e308]]);
    }

    #[test]
    fn null_is_missing() {
        let error = read_err("[[1, null], [2, 3]]", &ReadOptions::default());
        assert!(
            matches!(error, DataError::MissingValue { row: 1, ref column, .. } if column == "x2")
        );
    }

    #[test]
    fn text_columns_are_skipped_and_mixed_ones_rejected() {
        let table = read_ok(
            r#"[{"name": "p", "a": 1}, {"name": "q", "a": 2}]"#,
            &ReadOptions::default(),
        );
        assert_eq!(table.column_names, ["a"]);
        assert_eq!(table.skipped_columns, ["name"]);
        let error = read_err(
            r#"[{"a": 1, "b": "x"}, {"a": 2, "b": 3}]"#,
            &ReadOptions::default(),
        );
        assert!(
            matches!(error, DataError::NotANumber { row: 1, ref column, ref found, .. } if column == "b" && found == "x")
        );
        let error = read_err("[[1, true], [2, 3]]", &ReadOptions::default());
        assert!(matches!(error, DataError::NotANumber { ref found, .. } if found == "true"));
        let error = read_err("[[1, [2]], [2, 3]]", &ReadOptions::default());
        assert!(matches!(error, DataError::NotANumber { ref found, .. } if found == "[2]"));
    }

    #[test]
    fn shape_errors() {
        let none = ReadOptions::default();
        assert!(matches!(
            read_err("[[1, 2], [3]]", &none),
            DataError::JsonRowLength {
                row: 2,
                found: 1,
                expected: 2
            }
        ));
        assert!(matches!(
            read_err("[[1, 2], [3, 4, 5]]", &none),
            DataError::JsonRowLength {
                row: 2,
                found: 3,
                expected: 2
            }
        ));
        assert!(matches!(
            read_err(r#"[{"a": 1, "b": 2}, {"a": 3}]"#, &none),
            DataError::JsonMissingKey { row: 2, ref key } if key == "b"
        ));
        assert!(matches!(
            read_err(r#"[{"a": 1}, {"a": 3, "c": 4}]"#, &none),
            DataError::JsonExtraKey { row: 2, ref key } if key == "c"
        ));
        assert!(matches!(
            read_err(r#"[{"a": 1}, {"a": 3, "a": 4}]"#, &none),
            DataError::JsonRepeatedKey { row: 2, ref key } if key == "a"
        ));
        assert!(matches!(
            read_err(r#"[{"a": 1, "a": 2}]"#, &none),
            DataError::DuplicateColumn { ref name, first: 1, second: 2 } if name == "a"
        ));
        assert!(matches!(
            read_err(r#"{"a": [1, 2], "b": [3]}"#, &none),
            DataError::JsonColumnLength { ref column, found: 1, expected: 2, .. } if column == "b"
        ));
        assert!(
            matches!(read_err(r#"[[1], {"a": 1}]"#, &none), DataError::JsonLayout { ref detail } if detail.contains("row 2"))
        );
        assert!(matches!(
            read_err("[1, 2]", &none),
            DataError::JsonLayout { .. }
        ));
        assert!(matches!(
            read_err("42", &none),
            DataError::JsonLayout { .. }
        ));
        assert!(matches!(
            read_err(r#"{"a": 1}"#, &none),
            DataError::JsonLayout { .. }
        ));
    }

    #[test]
    fn syntax_and_emptiness() {
        let none = ReadOptions::default();
        match read_err("[[1, 2],\n [3, 4]", &none) {
            DataError::JsonSyntax {
                line: 2, detail, ..
            } => assert!(detail.contains("EOF"), "{detail}"),
            other => panic!("unexpected {other:?}"),
        }
        assert!(matches!(
            read_err("[[1, 2]] x", &none),
            DataError::JsonSyntax { .. }
        ));
        assert!(matches!(
            read_err("[[1, 02]]", &none),
            DataError::JsonSyntax { .. }
        ));
        assert!(matches!(
            read_err("  \n ", &none),
            DataError::EmptyInput { .. }
        ));
        assert!(matches!(
            read_err("[]", &none),
            DataError::NoDataRows { .. }
        ));
        assert!(matches!(
            read_err("{}", &none),
            DataError::NoDataRows { .. }
        ));
        assert!(matches!(
            read_err(r#"{"a": []}"#, &none),
            DataError::NoDataRows { .. }
        ));
        let invalid = read(b"[[1, \"\xff\"]]", &none).unwrap_err();
        assert!(
            matches!(invalid, DataError::JsonSyntax { line: 1, .. }),
            "{invalid:?}"
        );
    }

    #[test]
    fn options_apply_to_json_columns() {
        let text = r#"[{"a": 1, "b": 2, "y": "p"}, {"a": 3, "b": null, "y": "q"}]"#;
        let options = ReadOptions::default().columns(["a"]).label_column("y");
        let table = read_ok(text, &options);
        assert_eq!(table.values, array![[1.0], [3.0]]);
        assert_eq!(table.labels, Some(vec!["p".to_string(), "q".to_string()]));
        let error = read_err(text, &ReadOptions::default().columns(["zz"]));
        assert!(matches!(error, DataError::UnknownColumn { ref name, .. } if name == "zz"));
        let error = read_err("[[1], [2], [3]]", &ReadOptions::default().max_rows(2));
        assert!(matches!(error, DataError::TooManyRows { limit: 2 }));
    }

    #[test]
    fn byte_order_mark_is_ignored() {
        let table = read(b"\xEF\xBB\xBF[[1]]", &ReadOptions::default()).unwrap();
        assert_eq!(table.values, array![[1.0]]);
    }
}
