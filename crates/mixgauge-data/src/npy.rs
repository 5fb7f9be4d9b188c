//! The NPY reader: numpy's binary array format, versions 1.0, 2.0 and 3.0.
//!
//! Layout (NPY format spec, numpy docs: `numpy.lib.format`): the magic string
//! `\x93NUMPY`; one byte each of major and minor version; the header length
//! as a little-endian `u16` (version 1.0) or `u32` (2.0 and 3.0); the header,
//! a Python dict literal with the keys `descr`, `fortran_order` and `shape`,
//! padded with spaces and ended by a newline (latin-1 text in 1.0 and 2.0,
//! UTF-8 in 3.0); then the raw values.
//!
//! Supported element types are 8- and 4-byte floats and integers (`f8`, `f4`,
//! `i8`, `i4`) in either byte order. Integers convert to `f64` exactly up to
//! 2^53 in magnitude; larger `i8` values round to the nearest `f64`. A 2-D
//! array is read as rows × columns, in C or Fortran order; a 1-D array is one
//! column. Columns are named `x1` … `xD`.
//!
//! The header is parsed by a small parser for the literal subset numpy writes
//! (strings, integers with an optional Python 2 `L` suffix, `True`, `False`,
//! `None`, tuples, lists, dicts), never evaluated. Object arrays are refused:
//! reading them would mean unpickling, which can run code.

use crate::cell::Cell;
use crate::error::DataError;
use crate::format::{Format, NPY_MAGIC};
use crate::options::ReadOptions;
use crate::table::{Role, Table, TableBuilder};

/// Deeper nesting than this in the header is refused, so hostile input cannot
/// exhaust the stack. Real headers nest at most a few levels.
const MAX_NESTING: usize = 32;

/// Reads NPY bytes into a table.
pub(crate) fn read(bytes: &[u8], options: &ReadOptions) -> Result<Table, DataError> {
    if bytes.is_empty() {
        return Err(DataError::EmptyInput {
            format: Format::Npy,
        });
    }
    let (header, data) = split(bytes)?;
    let (rows, columns) = match header.shape.as_slice() {
        [rows] => (*rows, 1),
        [rows, columns] => (*rows, *columns),
        other => {
            return Err(DataError::NpyShape {
                found: shape_text(other),
            });
        }
    };
    let too_large = || DataError::NpyHeader {
        detail: format!(
            "the shape {} is too large to hold in memory",
            shape_text(&header.shape)
        ),
    };
    let rows = usize::try_from(rows).map_err(|_| too_large())?;
    let columns = usize::try_from(columns).map_err(|_| too_large())?;
    let expected = rows
        .checked_mul(columns)
        .and_then(|count| count.checked_mul(header.dtype.size()))
        .ok_or_else(too_large)?;
    if data.len() < expected {
        return Err(DataError::NpyTruncated {
            expected: expected as u64,
            found: data.len() as u64,
        });
    }
    if data.len() > expected {
        return Err(DataError::NpyTrailingBytes {
            expected: expected as u64,
            found: data.len() as u64,
        });
    }

    let names = (1..=columns).map(|number| format!("x{number}")).collect();
    let mut table = TableBuilder::new(names, options, Format::Npy)?;
    if let Some(limit) = options.max_rows.filter(|&limit| rows > limit) {
        return Err(DataError::TooManyRows { limit });
    }
    let values = header.dtype.decode_all(data);
    table.reserve_rows(rows);
    for row in 0..rows {
        table.begin_row(None)?;
        for column in 0..columns {
            let index = if header.fortran_order {
                column * rows + row
            } else {
                row * columns + column
            };
            let value = values[index];
            match table.role(column) {
                Role::Feature(slot) => table.put(slot, Cell::Number { value, text: "" }),
                Role::Label => table.put_label(value.to_string()),
                Role::Ignored => {}
            }
        }
    }
    table.finish()
}

/// The parts of the header this reader uses.
#[derive(Debug, PartialEq)]
struct Header {
    dtype: Dtype,
    fortran_order: bool,
    shape: Vec<u64>,
}

/// A supported element type.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
struct Dtype {
    kind: Kind,
    big_endian: bool,
}

#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Kind {
    F8,
    F4,
    I8,
    I4,
}

impl Dtype {
    /// Bytes per element.
    fn size(self) -> usize {
        match self.kind {
            Kind::F8 | Kind::I8 => 8,
            Kind::F4 | Kind::I4 => 4,
        }
    }

    /// Converts every element of `data` (whose length is a multiple of the
    /// element size) to `f64`, in storage order.
    fn decode_all(self, data: &[u8]) -> Vec<f64> {
        let decode: fn(&[u8]) -> f64 = match (self.kind, self.big_endian) {
            (Kind::F8, false) => |b| f64::from_le_bytes(array(b)),
            (Kind::F8, true) => |b| f64::from_be_bytes(array(b)),
            (Kind::F4, false) => |b| f64::from(f32::from_le_bytes(array(b))),
            (Kind::F4, true) => |b| f64::from(f32::from_be_bytes(array(b))),
            (Kind::I8, false) => |b| i64::from_le_bytes(array(b)) as f64,
            (Kind::I8, true) => |b| i64::from_be_bytes(array(b)) as f64,
            (Kind::I4, false) => |b| f64::from(i32::from_le_bytes(array(b))),
            (Kind::I4, true) => |b| f64::from(i32::from_be_bytes(array(b))),
        };
        data.chunks_exact(self.size()).map(decode).collect()
    }
}

/// The first `N` bytes of a chunk of exactly `N` bytes.
fn array<const N: usize>(bytes: &[u8]) -> [u8; N] {
    <[u8; N]>::try_from(bytes).unwrap_or([0; N])
}

/// Checks magic and version, parses the header, and returns it with the data bytes.
fn split(bytes: &[u8]) -> Result<(Header, &[u8]), DataError> {
    let Some(rest) = bytes.strip_prefix(NPY_MAGIC) else {
        return Err(DataError::NpyMagic);
    };
    let cut_short = |what: &str| DataError::NpyHeader {
        detail: format!("the file ends inside {what}"),
    };
    let [major, minor, rest @ ..] = rest else {
        return Err(cut_short("the version bytes"));
    };
    let (length, rest, utf8) = match (*major, *minor) {
        (1, 0) => match rest {
            [a, b, rest @ ..] => (usize::from(u16::from_le_bytes([*a, *b])), rest, false),
            _ => return Err(cut_short("the header length")),
        },
        (2 | 3, 0) => match rest {
            [a, b, c, d, rest @ ..] => {
                let length = u32::from_le_bytes([*a, *b, *c, *d]);
                let length = usize::try_from(length).unwrap_or(usize::MAX);
                (length, rest, *major == 3)
            }
            _ => return Err(cut_short("the header length")),
        },
        (major, minor) => return Err(DataError::NpyVersion { major, minor }),
    };
    if rest.len() < length {
        return Err(DataError::NpyHeader {
            detail: format!(
                "the header should be {length} bytes but the file ends after {}",
                rest.len()
            ),
        });
    }
    let (header, data) = rest.split_at(length);
    let text = if utf8 {
        std::str::from_utf8(header)
            .map_err(|_| DataError::NpyHeader {
                detail: "the version 3.0 header is not valid UTF-8".into(),
            })?
            .to_owned()
    } else {
        // Versions 1.0 and 2.0 store the header as latin-1: each byte is one code point.
        header.iter().map(|&byte| char::from(byte)).collect()
    };
    Ok((parse_header(&text)?, data))
}

/// Interprets the header dict.
fn parse_header(text: &str) -> Result<Header, DataError> {
    let bad = |detail: String| DataError::NpyHeader { detail };
    let Literal::Dict(entries) = Parser::parse_all(text).map_err(bad)? else {
        return Err(bad("the header is not a dict".into()));
    };
    let get = |key: &str| {
        entries
            .iter()
            .find(|(name, _)| matches!(name, Literal::Str(name) if name == key))
            .map(|(_, value)| value)
            .ok_or_else(|| bad(format!("the header has no '{key}' key")))
    };
    let dtype = match get("descr")? {
        Literal::Str(descr) => parse_dtype(descr)?,
        Literal::List(_) => {
            return Err(DataError::NpyDtype {
                found: "a structured dtype with named fields".into(),
            });
        }
        _ => return Err(bad("'descr' is not a string".into())),
    };
    let fortran_order = match get("fortran_order")? {
        Literal::Bool(value) => *value,
        _ => return Err(bad("'fortran_order' is not True or False".into())),
    };
    let shape = match get("shape")? {
        Literal::Tuple(items) => items
            .iter()
            .map(|item| match item {
                Literal::Int(size) => Ok(*size),
                _ => Err(bad(
                    "'shape' holds something other than whole numbers".into()
                )),
            })
            .collect::<Result<Vec<_>, _>>()?,
        _ => return Err(bad("'shape' is not a tuple".into())),
    };
    Ok(Header {
        dtype,
        fortran_order,
        shape,
    })
}

/// Maps a `descr` string such as `<f8` to a supported type.
fn parse_dtype(descr: &str) -> Result<Dtype, DataError> {
    let (order, code) = match descr.chars().next() {
        Some(order @ ('<' | '>' | '|' | '=')) => (Some(order), &descr[1..]),
        _ => (None, descr),
    };
    if code.starts_with('O') {
        return Err(DataError::NpyObjectArray);
    }
    let kind = match code {
        "f8" => Kind::F8,
        "f4" => Kind::F4,
        "i8" => Kind::I8,
        "i4" => Kind::I4,
        _ => {
            return Err(DataError::NpyDtype {
                found: descr.to_owned(),
            });
        }
    };
    match order {
        Some('<') => Ok(Dtype {
            kind,
            big_endian: false,
        }),
        Some('>') => Ok(Dtype {
            kind,
            big_endian: true,
        }),
        _ => Err(DataError::NpyDtype {
            found: descr.to_owned(),
        }),
    }
}

/// A shape written the way Python writes a tuple: `()`, `(3,)`, `(2, 2, 2)`.
fn shape_text(shape: &[u64]) -> String {
    match shape {
        [only] => format!("({only},)"),
        _ => {
            let parts: Vec<String> = shape.iter().map(u64::to_string).collect();
            format!("({})", parts.join(", "))
        }
    }
}

/// A Python literal, as far as NPY headers use them.
#[derive(Debug, Clone, PartialEq)]
enum Literal {
    Str(String),
    Int(u64),
    Bool(bool),
    None,
    Tuple(Vec<Literal>),
    List(Vec<Literal>),
    Dict(Vec<(Literal, Literal)>),
}

/// A recursive-descent parser over the header text.
struct Parser<'a> {
    text: &'a str,
    at: usize,
}

impl<'a> Parser<'a> {
    /// Parses `text` as exactly one literal surrounded by whitespace.
    fn parse_all(text: &'a str) -> Result<Literal, String> {
        let mut parser = Parser { text, at: 0 };
        let value = parser.value(0)?;
        parser.skip_space();
        match parser.peek() {
            None => Ok(value),
            Some(c) => Err(format!(
                "unexpected {c:?} after the dict at character {}",
                parser.at + 1
            )),
        }
    }

    fn peek(&self) -> Option<char> {
        self.text[self.at..].chars().next()
    }

    fn bump(&mut self) -> Option<char> {
        let c = self.peek()?;
        self.at += c.len_utf8();
        Some(c)
    }

    fn skip_space(&mut self) {
        while self.peek().is_some_and(char::is_whitespace) {
            self.bump();
        }
    }

    fn unexpected(&self, wanted: &str) -> String {
        match self.peek() {
            Some(c) => format!(
                "expected {wanted} at character {}, found {c:?}",
                self.at + 1
            ),
            None => format!("expected {wanted}, but the header ends"),
        }
    }

    fn value(&mut self, depth: usize) -> Result<Literal, String> {
        if depth > MAX_NESTING {
            return Err(format!("nested more than {MAX_NESTING} levels deep"));
        }
        self.skip_space();
        match self.peek() {
            Some(quote @ ('\'' | '"')) => self.string(quote),
            Some('0'..='9') => self.integer(),
            Some('(') => self.sequence(')', depth).map(Literal::Tuple),
            Some('[') => self.sequence(']', depth).map(Literal::List),
            Some('{') => self.dict(depth),
            Some(c) if c.is_ascii_alphabetic() => self.word(),
            _ => Err(self.unexpected("a value")),
        }
    }

    fn string(&mut self, quote: char) -> Result<Literal, String> {
        self.bump();
        let mut value = String::new();
        loop {
            match self.bump() {
                None => return Err("a string is not closed".into()),
                Some(c) if c == quote => return Ok(Literal::Str(value)),
                Some('\\') => match self.bump() {
                    Some(c) => value.push(c),
                    None => return Err("a string is not closed".into()),
                },
                Some(c) => value.push(c),
            }
        }
    }

    fn integer(&mut self) -> Result<Literal, String> {
        let start = self.at;
        while self.peek().is_some_and(|c| c.is_ascii_digit()) {
            self.bump();
        }
        let digits = &self.text[start..self.at];
        // Python 2 wrote long integers with an `L` suffix, e.g. `(3L, 2L)`.
        if matches!(self.peek(), Some('L' | 'l')) {
            self.bump();
        }
        digits
            .parse()
            .map(Literal::Int)
            .map_err(|_| format!("the number {digits} is too large"))
    }

    fn word(&mut self) -> Result<Literal, String> {
        let start = self.at;
        while self
            .peek()
            .is_some_and(|c| c.is_ascii_alphanumeric() || c == '_')
        {
            self.bump();
        }
        match &self.text[start..self.at] {
            "True" => Ok(Literal::Bool(true)),
            "False" => Ok(Literal::Bool(false)),
            "None" => Ok(Literal::None),
            word => Err(format!("unknown word {word:?} at character {}", start + 1)),
        }
    }

    /// Items up to `close`, separated by commas, with an optional trailing comma.
    fn sequence(&mut self, close: char, depth: usize) -> Result<Vec<Literal>, String> {
        self.bump();
        let mut items = Vec::new();
        loop {
            self.skip_space();
            if self.peek() == Some(close) {
                self.bump();
                return Ok(items);
            }
            items.push(self.value(depth + 1)?);
            self.skip_space();
            match self.peek() {
                Some(',') => {
                    self.bump();
                }
                Some(c) if c == close => {}
                _ => return Err(self.unexpected(&format!("',' or '{close}'"))),
            }
        }
    }

    fn dict(&mut self, depth: usize) -> Result<Literal, String> {
        self.bump();
        let mut entries = Vec::new();
        loop {
            self.skip_space();
            if self.peek() == Some('}') {
                self.bump();
                return Ok(Literal::Dict(entries));
            }
            let key = self.value(depth + 1)?;
            self.skip_space();
            if self.bump() != Some(':') {
                return Err(format!(
                    "expected ':' after a key, before character {}",
                    self.at + 1
                ));
            }
            let value = self.value(depth + 1)?;
            entries.push((key, value));
            self.skip_space();
            match self.peek() {
                Some(',') => {
                    self.bump();
                }
                Some('}') => {}
                _ => return Err(self.unexpected("',' or '}'")),
            }
        }
    }
}

#[cfg(test)]
mod tests {
    //! NPY bytes here are written by hand following the NPY format spec,
    //! numpy docs: `numpy.lib.format` (magic, version, little-endian header
    //! length, space-padded dict header ending in a newline, total preamble
    //! a multiple of 64 bytes). Files written by numpy itself are checked in
    //! the crate's integration tests.

    use super::*;
    use ndarray::array;

    /// One NPY file: `version` is (major, minor); `header` the dict text.
    fn npy(version: (u8, u8), header: &str, data: &[u8]) -> Vec<u8> {
        let length_bytes = if version.0 == 1 { 2 } else { 4 };
        let preamble = NPY_MAGIC.len() + 2 + length_bytes;
        let mut dict = header.to_owned();
        // Pad with spaces so the preamble plus header, newline included, is a
        // multiple of 64 bytes, as the spec asks.
        let padding = (64 - (preamble + dict.len() + 1) % 64) % 64;
        dict.push_str(&" ".repeat(padding));
        dict.push('\n');
        let mut bytes = NPY_MAGIC.to_vec();
        bytes.extend([version.0, version.1]);
        if version.0 == 1 {
            bytes.extend(u16::try_from(dict.len()).unwrap().to_le_bytes());
        } else {
            bytes.extend(u32::try_from(dict.len()).unwrap().to_le_bytes());
        }
        bytes.extend(dict.as_bytes());
        bytes.extend(data);
        bytes
    }

    fn header(descr: &str, fortran: bool, shape: &str) -> String {
        let order = if fortran { "True" } else { "False" };
        format!("{{'descr': '{descr}', 'fortran_order': {order}, 'shape': {shape}, }}")
    }

    /// The test matrix: values chosen to be exact in every supported type.
    fn matrix() -> ndarray::Array2<f64> {
        array![[1.0, -2.0], [3.0, 4.0], [-5.0, 6.0]]
    }

    /// The matrix's elements in storage order, each encoded by `encode`.
    fn elements(fortran: bool, encode: impl Fn(f64) -> Vec<u8>) -> Vec<u8> {
        let m = matrix();
        let order: Vec<f64> = if fortran {
            m.t().iter().copied().collect()
        } else {
            m.iter().copied().collect()
        };
        order.into_iter().flat_map(encode).collect()
    }

    fn encoder(code: &str, big: bool) -> Box<dyn Fn(f64) -> Vec<u8>> {
        match (code, big) {
            ("f8", false) => Box::new(|v| v.to_le_bytes().to_vec()),
            ("f8", true) => Box::new(|v| v.to_be_bytes().to_vec()),
            ("f4", false) => Box::new(|v| (v as f32).to_le_bytes().to_vec()),
            ("f4", true) => Box::new(|v| (v as f32).to_be_bytes().to_vec()),
            ("i8", false) => Box::new(|v| (v as i64).to_le_bytes().to_vec()),
            ("i8", true) => Box::new(|v| (v as i64).to_be_bytes().to_vec()),
            ("i4", false) => Box::new(|v| (v as i32).to_le_bytes().to_vec()),
            ("i4", true) => Box::new(|v| (v as i32).to_be_bytes().to_vec()),
            _ => unreachable!("no encoder for {code}"),
        }
    }

    #[test]
    fn round_trip_every_type_order_and_version() {
        for version in [(1, 0), (2, 0), (3, 0)] {
            for code in ["f8", "f4", "i8", "i4"] {
                for big in [false, true] {
                    for fortran in [false, true] {
                        let descr = format!("{}{code}", if big { '>' } else { '<' });
                        let data = elements(fortran, encoder(code, big));
                        let bytes = npy(version, &header(&descr, fortran, "(3, 2)"), &data);
                        let table = read(&bytes, &ReadOptions::default()).unwrap_or_else(|e| {
                            panic!("{version:?} {descr} fortran={fortran}: {e}")
                        });
                        assert_eq!(
                            table.values,
                            matrix(),
                            "{version:?} {descr} fortran={fortran}"
                        );
                        assert_eq!(table.column_names, ["x1", "x2"]);
                        assert!(table.values.is_standard_layout());
                    }
                }
            }
        }
    }

    #[test]
    fn f4_values_widen_exactly() {
        let data: Vec<u8> = [0.1f32, 1e-30]
            .iter()
            .flat_map(|v| v.to_le_bytes())
            .collect();
        let table = read(
            &npy((1, 0), &header("<f4", false, "(2,)"), &data),
            &ReadOptions::default(),
        )
        .unwrap();
        assert_eq!(
            table.values,
            array![[f64::from(0.1f32)], [f64::from(1e-30f32)]]
        );
    }

    #[test]
    fn large_i8_rounds_to_nearest_f64() {
        let big = (1i64 << 53) + 1;
        let data: Vec<u8> = [big, i64::MIN]
            .iter()
            .flat_map(|v| v.to_le_bytes())
            .collect();
        let table = read(
            &npy((1, 0), &header("<i8", false, "(2,)"), &data),
            &ReadOptions::default(),
        )
        .unwrap();
        assert_eq!(
            table.values,
            array![[9007199254740992.0], [-9223372036854775808.0]]
        );
    }

    #[test]
    fn one_dimensional_is_one_column() {
        let data: Vec<u8> = [1.0f64, 2.0, 3.0]
            .iter()
            .flat_map(|v| v.to_le_bytes())
            .collect();
        let table = read(
            &npy((1, 0), &header("<f8", false, "(3,)"), &data),
            &ReadOptions::default(),
        )
        .unwrap();
        assert_eq!(table.values, array![[1.0], [2.0], [3.0]]);
        assert_eq!(table.column_names, ["x1"]);
    }

    #[test]
    fn python2_long_suffix_and_double_quotes() {
        let data = elements(false, encoder("f8", false));
        let text = "{\"descr\": \"<f8\", \"fortran_order\": False, \"shape\": (3L, 2L)}";
        let table = read(&npy((1, 0), text, &data), &ReadOptions::default()).unwrap();
        assert_eq!(table.values, matrix());
    }

    #[test]
    fn key_order_does_not_matter_and_extra_keys_are_ignored() {
        let data = elements(true, encoder("i4", false));
        let text = "{'shape': (3, 2), 'extra': None, 'fortran_order': True, 'descr': '<i4'}";
        let table = read(&npy((2, 0), text, &data), &ReadOptions::default()).unwrap();
        assert_eq!(table.values, matrix());
    }

    #[test]
    fn label_and_column_choice_use_x_names() {
        let data: Vec<u8> = [1.5f64, 2.0, 0.0, 3.5, 4.0, 1.0]
            .iter()
            .flat_map(|v| v.to_le_bytes())
            .collect();
        let options = ReadOptions::default().label_column("x3").columns(["x2"]);
        let table = read(
            &npy((1, 0), &header("<f8", false, "(2, 3)"), &data),
            &options,
        )
        .unwrap();
        assert_eq!(table.values, array![[2.0], [4.0]]);
        assert_eq!(table.labels, Some(vec!["0".to_string(), "1".to_string()]));
    }

    #[test]
    fn nan_is_missing_or_dropped() {
        let data: Vec<u8> = [1.0f64, f64::NAN, 3.0]
            .iter()
            .flat_map(|v| v.to_le_bytes())
            .collect();
        let bytes = npy((1, 0), &header("<f8", false, "(3,)"), &data);
        let error = read(&bytes, &ReadOptions::default()).unwrap_err();
        assert!(
            matches!(error, DataError::NonFinite { row: 2, line: None, ref column, ref found } if column == "x1" && found == "NaN")
        );
        let table = read(&bytes, &ReadOptions::default().drop_incomplete(true)).unwrap();
        assert_eq!(table.values, array![[1.0], [3.0]]);
        assert_eq!(table.dropped_rows, 1);
    }

    #[test]
    fn header_errors() {
        let data = elements(false, encoder("f8", false));
        type Check = fn(&DataError) -> bool;
        let cases: Vec<(Vec<u8>, Check)> = vec![
            (b"\x93NUMPX\x01\x00".to_vec(), |e| {
                matches!(e, DataError::NpyMagic)
            }),
            (b"\x93NUMPY\x01".to_vec(), |e| {
                matches!(e, DataError::NpyHeader { .. })
            }),
            (b"\x93NUMPY\x01\x00\x10".to_vec(), |e| {
                matches!(e, DataError::NpyHeader { .. })
            }),
            (b"\x93NUMPY\x01\x00\xff\x00{".to_vec(), |e| {
                matches!(e, DataError::NpyHeader { .. })
            }),
            (npy((4, 0), &header("<f8", false, "(3, 2)"), &data), |e| {
                matches!(e, DataError::NpyVersion { major: 4, minor: 0 })
            }),
            (npy((1, 1), &header("<f8", false, "(3, 2)"), &data), |e| {
                matches!(e, DataError::NpyVersion { major: 1, minor: 1 })
            }),
            (
                npy((1, 0), &header("<c16", false, "(3, 2)"), &data),
                |e| matches!(e, DataError::NpyDtype { found } if found == "<c16"),
            ),
            (npy((1, 0), &header("f8", false, "(3, 2)"), &data), |e| {
                matches!(e, DataError::NpyDtype { .. })
            }),
            (npy((1, 0), &header("|O", false, "(3, 2)"), &data), |e| {
                matches!(e, DataError::NpyObjectArray)
            }),
            (
                npy(
                    (1, 0),
                    "{'descr': [('a', '<f8')], 'fortran_order': False, 'shape': (3,)}",
                    &data,
                ),
                |e| matches!(e, DataError::NpyDtype { .. }),
            ),
            (
                npy((1, 0), &header("<f8", false, "(3, 1, 2)"), &data),
                |e| matches!(e, DataError::NpyShape { found } if found == "(3, 1, 2)"),
            ),
            (
                npy((1, 0), &header("<f8", false, "()"), &data),
                |e| matches!(e, DataError::NpyShape { found } if found == "()"),
            ),
            (
                npy((1, 0), "{'descr': '<f8', 'fortran_order': False}", &data),
                |e| matches!(e, DataError::NpyHeader { detail } if detail.contains("'shape'")),
            ),
            (
                npy(
                    (1, 0),
                    "{'descr': '<f8', 'fortran_order': 0, 'shape': (3, 2)}",
                    &data,
                ),
                |e| matches!(e, DataError::NpyHeader { detail } if detail.contains("fortran_order")),
            ),
            (
                npy(
                    (1, 0),
                    "{'descr': '<f8', 'fortran_order': False, 'shape': (3, 2}",
                    &data,
                ),
                |e| matches!(e, DataError::NpyHeader { .. }),
            ),
            (npy((1, 0), "['descr']", &data), |e| {
                matches!(e, DataError::NpyHeader { .. })
            }),
            (
                npy((1, 0), &header("<f8", false, "(3, 2)"), &data[..40]),
                |e| {
                    matches!(
                        e,
                        DataError::NpyTruncated {
                            expected: 48,
                            found: 40
                        }
                    )
                },
            ),
            (
                npy(
                    (1, 0),
                    &header("<f8", false, "(3, 2)"),
                    &[&data[..], &[0; 8]].concat(),
                ),
                |e| {
                    matches!(
                        e,
                        DataError::NpyTrailingBytes {
                            expected: 48,
                            found: 56
                        }
                    )
                },
            ),
            (
                npy(
                    (1, 0),
                    &header("<f8", false, "(99999999999999999999, 2)"),
                    &data,
                ),
                |e| matches!(e, DataError::NpyHeader { .. }),
            ),
            (
                npy(
                    (1, 0),
                    &header("<f8", false, "(4294967296, 4294967296)"),
                    &data,
                ),
                |e| matches!(e, DataError::NpyHeader { detail } if detail.contains("too large")),
            ),
            (npy((1, 0), &header("<f8", false, "(0, 2)"), &[]), |e| {
                matches!(e, DataError::NoDataRows { .. })
            }),
            (Vec::new(), |e| matches!(e, DataError::EmptyInput { .. })),
        ];
        for (bytes, expected) in cases {
            let error = read(&bytes, &ReadOptions::default()).unwrap_err();
            assert!(
                expected(&error),
                "{:?} gave {error:?}",
                String::from_utf8_lossy(&bytes)
            );
        }
    }

    #[test]
    fn deep_nesting_is_refused_without_overflow() {
        let text = format!("{}{}", "(".repeat(10_000), ")".repeat(10_000));
        let error = Parser::parse_all(&text).unwrap_err();
        assert!(error.contains("nested"), "{error}");
    }

    #[test]
    fn v3_header_may_hold_utf8() {
        let data = elements(false, encoder("f8", false));
        let text = "{'descr': '<f8', 'fortran_order': False, 'shape': (3, 2), 'note': 'größe'}";
        let table = read(&npy((3, 0), text, &data), &ReadOptions::default()).unwrap();
        assert_eq!(table.values, matrix());
    }

    #[test]
    fn row_limit_is_checked_before_decoding() {
        let data = elements(false, encoder("f8", false));
        let bytes = npy((1, 0), &header("<f8", false, "(3, 2)"), &data);
        let error = read(&bytes, &ReadOptions::default().max_rows(2)).unwrap_err();
        assert!(matches!(error, DataError::TooManyRows { limit: 2 }));
        let error = read(&bytes, &ReadOptions::default().max_columns(1)).unwrap_err();
        assert!(matches!(
            error,
            DataError::TooManyColumns { found: 2, limit: 1 }
        ));
    }
}
