//! The CSV reader: RFC 4180 text with a required header row.
//!
//! Parsing is left to the `csv` crate (quoted fields with embedded commas,
//! quotes and line breaks; CRLF or LF; optional final line break; blank
//! lines skipped). This module reads byte records into one reused
//! [`csv::ByteRecord`], so no field is allocated: each is checked as UTF-8,
//! trimmed and parsed in place. Header names are trimmed of surrounding
//! whitespace; label values are kept exactly as written. A leading UTF-8
//! byte-order mark is ignored. Line numbers in errors are physical lines,
//! counted here (see [`Lines`]).

use crate::cell::Cell;
use crate::error::DataError;
use crate::format::{Format, UTF8_BOM};
use crate::options::ReadOptions;
use crate::table::{Role, Table, TableBuilder};

/// Reads CSV bytes into a table.
pub(crate) fn read(bytes: &[u8], options: &ReadOptions) -> Result<Table, DataError> {
    let body = bytes.strip_prefix(UTF8_BOM).unwrap_or(bytes);
    let mut lines = Lines::new(body);
    let mut reader = csv::ReaderBuilder::new()
        .has_headers(false)
        .flexible(false)
        .from_reader(body);
    let mut record = csv::ByteRecord::new();
    if !reader
        .read_byte_record(&mut record)
        .map_err(|error| from_csv(error, &mut lines))?
    {
        return Err(DataError::EmptyInput {
            format: Format::Csv,
        });
    }
    let header_line = lines.of(&record);
    let names = record
        .iter()
        .map(|field| {
            std::str::from_utf8(field)
                .map(|name| name.trim().to_owned())
                .map_err(|_| DataError::InvalidUtf8 { line: header_line })
        })
        .collect::<Result<Vec<_>, _>>()?;
    let mut table = TableBuilder::new(names, options, Format::Csv)?;

    while reader
        .read_byte_record(&mut record)
        .map_err(|error| from_csv(error, &mut lines))?
    {
        let line = lines.of(&record);
        table.begin_row(Some(line))?;
        for (index, field) in record.iter().enumerate() {
            let text = std::str::from_utf8(field).map_err(|_| DataError::InvalidUtf8 { line })?;
            match table.role(index) {
                Role::Feature(slot) => table.put(slot, Cell::from_text(text)),
                Role::Label => table.put_label(text.to_owned()),
                Role::Ignored => {}
            }
        }
    }
    table.finish()
}

/// Physical line numbers of record starts.
///
/// The `csv` crate's own line count is not used: it counts only `\n`, and a
/// record's recorded start can precede the line break before it (after CRLF)
/// or the blank lines skipped before it, so its numbers fall behind on CRLF,
/// CR-only and blank-line files. Its byte offsets are reliable up to those
/// skipped line-break bytes, so this counts line breaks (`\r\n`, `\n` or a
/// lone `\r`) up to each record's first real byte, scanning the input once.
struct Lines<'a> {
    text: &'a [u8],
    /// Bytes before this have been counted.
    at: usize,
    /// The line number at `at`.
    line: u64,
}

impl<'a> Lines<'a> {
    fn new(text: &'a [u8]) -> Self {
        Lines {
            text,
            at: 0,
            line: 1,
        }
    }

    /// The line on which `record` starts.
    fn of(&mut self, record: &csv::ByteRecord) -> u64 {
        record
            .position()
            .map_or(self.line, |position| self.at_byte(position.byte()))
    }

    /// The line on which the first byte at or after `byte` that is not a
    /// line break lies. Offsets must not decrease between calls.
    fn at_byte(&mut self, byte: u64) -> u64 {
        let mut start = usize::try_from(byte)
            .unwrap_or(usize::MAX)
            .min(self.text.len());
        while matches!(self.text.get(start), Some(b'\r' | b'\n')) {
            start += 1;
        }
        if start > self.at {
            for index in self.at..start {
                let ends_line = match self.text[index] {
                    b'\n' => true,
                    b'\r' => self.text.get(index + 1) != Some(&b'\n'),
                    _ => false,
                };
                if ends_line {
                    self.line += 1;
                }
            }
            self.at = start;
        }
        self.line
    }
}

/// Maps the `csv` crate's errors; with byte records and an in-memory reader
/// only unequal field counts are expected.
fn from_csv(error: csv::Error, lines: &mut Lines<'_>) -> DataError {
    let line = error
        .position()
        .map(|position| lines.at_byte(position.byte()));
    if let csv::ErrorKind::UnequalLengths {
        expected_len, len, ..
    } = error.kind()
    {
        return DataError::RaggedRow {
            line: line.unwrap_or(0),
            found: usize::try_from(*len).unwrap_or(usize::MAX),
            expected: usize::try_from(*expected_len).unwrap_or(usize::MAX),
        };
    }
    DataError::CsvSyntax {
        line,
        detail: error.to_string(),
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use ndarray::array;

    fn read_ok(text: &[u8], options: &ReadOptions) -> Table {
        match read(text, options) {
            Ok(table) => table,
            Err(error) => panic!("{:?} failed: {error}", String::from_utf8_lossy(text)),
        }
    }

    fn read_err(text: &[u8]) -> DataError {
        match read(text, &ReadOptions::default()) {
            Ok(table) => panic!(
                "{:?} was accepted: {table:?}",
                String::from_utf8_lossy(text)
            ),
            Err(error) => error,
        }
    }

    fn labelled() -> ReadOptions {
        ReadOptions::default().label_column("label")
    }

    fn labels(table: &Table) -> Vec<&str> {
        table.labels.iter().flatten().map(String::as_str).collect()
    }

    #[test]
    fn plain_round_trip() {
        let table = read_ok(b"a,b\n1,2\n3.5,-4e2\n", &ReadOptions::default());
        assert_eq!(table.column_names, ["a", "b"]);
        assert_eq!(table.values, array![[1.0, 2.0], [3.5, -400.0]]);
        assert_eq!(table.dropped_rows, 0);
        assert_eq!(table.labels, None);
    }

    /// RFC 4180 §2 rules 1 and 2: records end with a line break (CRLF), and
    /// the last record may or may not have one.
    #[test]
    fn rfc4180_line_breaks() {
        for text in [
            &b"a,b\r\n1,2\r\n3,4\r\n"[..],
            b"a,b\r\n1,2\r\n3,4",
            b"a,b\n1,2\n3,4",
        ] {
            let table = read_ok(text, &ReadOptions::default());
            assert_eq!(table.values, array![[1.0, 2.0], [3.0, 4.0]]);
        }
    }

    /// RFC 4180 §2 rules 5–7: fields may be enclosed in double quotes; quoted
    /// fields may hold commas, line breaks and doubled double quotes.
    #[test]
    fn rfc4180_quoted_fields() {
        let text = b"\"label\",\"x\"\r\n\
                     \"plain\",\"1\"\r\n\
                     \"has, comma\",2\r\n\
                     \"line\r\nbreak\",3\r\n\
                     \"say \"\"hi\"\"\",4\r\n";
        let table = read_ok(text, &labelled());
        assert_eq!(
            labels(&table),
            ["plain", "has, comma", "line\r\nbreak", "say \"hi\""]
        );
        assert_eq!(table.values, array![[1.0], [2.0], [3.0], [4.0]]);
    }

    /// RFC 4180 §2 rule 4: spaces are part of a field. Labels keep them;
    /// numbers and header names are trimmed (this crate's documented choice).
    #[test]
    fn spaces_trimmed_from_numbers_and_names_only() {
        let table = read_ok(b" label , x \n a , 1 \n", &labelled());
        assert_eq!(table.column_names, ["x"]);
        assert_eq!(labels(&table), [" a "]);
        assert_eq!(table.values, array![[1.0]]);
    }

    #[test]
    fn byte_order_mark_is_ignored() {
        let table = read_ok(
            b"\xEF\xBB\xBFa,b\n1,2\n",
            &ReadOptions::default().columns(["a", "b"]),
        );
        assert_eq!(table.column_names, ["a", "b"]);
    }

    #[test]
    fn blank_lines_are_skipped() {
        let table = read_ok(b"a\n1\n\n2\n\n", &ReadOptions::default());
        assert_eq!(table.values, array![[1.0], [2.0]]);
    }

    #[test]
    fn line_numbers_follow_physical_lines() {
        // The quoted field spans lines 2 and 3, so the bad row starts on line 4.
        let error = read_err(b"label,x\n\"two\nlines\",1\nthree,oops\n");
        match error {
            DataError::NotANumber {
                row,
                line,
                column,
                found,
            } => {
                assert_eq!(
                    (row, line, column.as_str(), found.as_str()),
                    (2, Some(4), "x", "oops")
                );
            }
            other => panic!("unexpected {other:?}"),
        }
    }

    /// Line numbers for every kind of line break RFC 4180 files meet in
    /// practice: CRLF (§2 rule 1), LF, lone CR, blank lines, and quoted
    /// fields holding a line break (§2 rule 6).
    #[test]
    fn line_numbers_count_every_line_break() {
        let cases: [(&[u8], u64); 7] = [
            (b"a\n1\n2\nx\n", 4),
            (b"a\r\n1\r\n2\r\nx\r\n", 4),
            (b"a\r1\r2\rx\r", 4),
            (b"a\n\n\n1\n\r\n2\nx\n", 7),
            (b"\n\na\n1\nx\n", 5),
            (b"a,b\r\n1,\"p\r\nq\"\r\nx,2\r\n", 4),
            (b"\xEF\xBB\xBFa\r\n1\r\nx", 3),
        ];
        for (text, expected) in cases {
            let options = ReadOptions::default().columns(["a"]);
            match read(text, &options) {
                Err(DataError::NotANumber { line, .. }) => {
                    assert_eq!(line, Some(expected), "{:?}", String::from_utf8_lossy(text));
                }
                other => panic!("{:?} gave {other:?}", String::from_utf8_lossy(text)),
            }
        }
        let error = read_err(b"a,b,c\r\n1,2,3\r\n\r\n4,5\r\n");
        assert!(
            matches!(
                error,
                DataError::RaggedRow {
                    line: 4,
                    found: 2,
                    expected: 3
                }
            ),
            "{error:?}"
        );
    }

    #[test]
    fn ragged_rows_name_line_and_counts() {
        let error = read_err(b"a,b\n1,2\n3\n");
        assert!(matches!(
            error,
            DataError::RaggedRow {
                line: 3,
                found: 1,
                expected: 2
            }
        ));
        let error = read_err(b"a,b\n1,2,3\n");
        assert!(matches!(
            error,
            DataError::RaggedRow {
                line: 2,
                found: 3,
                expected: 2
            }
        ));
    }

    #[test]
    fn invalid_utf8_names_the_line() {
        assert!(matches!(
            read_err(b"a,b\n1,2\n3,\xff\n"),
            DataError::InvalidUtf8 { line: 3 }
        ));
        assert!(matches!(
            read_err(b"a,\xc3\n1,2\n"),
            DataError::InvalidUtf8 { line: 1 }
        ));
    }

    #[test]
    fn empty_and_header_only() {
        assert!(matches!(read_err(b""), DataError::EmptyInput { .. }));
        assert!(matches!(
            read_err(b"\xEF\xBB\xBF"),
            DataError::EmptyInput { .. }
        ));
        assert!(matches!(read_err(b"\n\n"), DataError::EmptyInput { .. }));
        assert!(matches!(read_err(b"a,b\n"), DataError::NoDataRows { .. }));
        assert!(matches!(read_err(b"a,b"), DataError::NoDataRows { .. }));
    }

    #[test]
    fn missing_and_non_finite_values() {
        assert!(matches!(
            read_err(b"a,b\n1,\n2,3\n"),
            DataError::MissingValue { row: 1, line: Some(2), ref column } if column == "b"
        ));
        // A column with no numbers at all is skipped, not reported missing,
        // unless it is named.
        let table = read_ok(b"a,b\n1,\n2,\n", &ReadOptions::default());
        assert_eq!(table.skipped_columns, ["b"]);
        let named = read(
            b"a,b\n1,\n2,\n",
            &ReadOptions::default().columns(["a", "b"]),
        );
        assert!(matches!(named, Err(DataError::MissingValue { row: 1, .. })));
        assert!(matches!(
            read_err(b"a,b\n1,2\n-inf,2\n"),
            DataError::NonFinite { row: 2, ref found, .. } if found == "-inf"
        ));
        let table = read_ok(
            b"a,b\n1,\n2,3\nNaN,4\n5,1e400\n",
            &ReadOptions::default().drop_incomplete(true),
        );
        assert_eq!(table.values, array![[2.0, 3.0]]);
        assert_eq!(table.dropped_rows, 3);
    }

    #[test]
    fn huge_finite_values_are_kept() {
        let table = read_ok(
            b"a\n1e308\n-1.7976931348623157e308\n",
            &ReadOptions::default(),
        );
        assert_eq!(table.values, array![[1e308], [f64::MIN]]);
    }

    #[test]
    fn long_text_is_cut_in_the_message() {
        let mut text = b"a\n1\n".to_vec();
        text.extend(std::iter::repeat_n(b'z', 500));
        let message = read_err(&text).to_string();
        assert!(
            message.contains(&format!("\"{}…\"", "z".repeat(40))),
            "{message}"
        );
        assert!(message.len() < 400);
    }

    #[test]
    fn ignored_columns_may_hold_anything() {
        let table = read_ok(
            b"a,b,c\n1,x,\n2,,y\n",
            &ReadOptions::default().columns(["a"]),
        );
        assert_eq!(table.values, array![[1.0], [2.0]]);
    }
}
