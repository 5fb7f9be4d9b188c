//! The input formats and how one is chosen when the caller does not say.
//!
//! A format is taken, in order, from the caller's choice, the file name's
//! extension ([`Format::from_path_extension`]) and finally the first bytes of
//! the input ([`Format::from_first_bytes`]). Sniffing only separates the three
//! formats this crate reads; it does not validate anything.

use std::fmt;
use std::path::Path;

/// The NPY magic string: byte 0x93 followed by `NUMPY`
/// (NPY format spec, numpy docs: `numpy.lib.format`).
pub(crate) const NPY_MAGIC: &[u8] = b"\x93NUMPY";

/// The UTF-8 encoding of U+FEFF, which some editors put at the start of text files.
pub(crate) const UTF8_BOM: &[u8] = b"\xEF\xBB\xBF";

/// An input format understood by the readers.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
#[non_exhaustive]
pub enum Format {
    /// Comma-separated values with a header row (RFC 4180).
    Csv,
    /// A numpy `.npy` array file, format version 1.0, 2.0 or 3.0.
    Npy,
    /// A JSON array of rows, array of objects, or object of columns.
    Json,
}

impl Format {
    /// The format named by a path's extension (`csv`, `npy`, `json`, in any
    /// letter case), or `None` for any other or no extension.
    pub fn from_path_extension(path: &Path) -> Option<Format> {
        let extension = path.extension()?.to_str()?;
        [
            ("csv", Format::Csv),
            ("npy", Format::Npy),
            ("json", Format::Json),
        ]
        .into_iter()
        .find(|(name, _)| extension.eq_ignore_ascii_case(name))
        .map(|(_, format)| format)
    }

    /// Guesses the format from the first bytes of the input.
    ///
    /// Input starting with the NPY magic string is NPY; input whose first
    /// character after any whitespace (and an optional UTF-8 byte-order mark)
    /// is `[` or `{` is JSON; anything else, including empty input, is CSV.
    /// A CSV file whose first header name begins with `[` or `{` is therefore
    /// taken for JSON: name the format explicitly for such files.
    pub fn from_first_bytes(bytes: &[u8]) -> Format {
        if bytes.starts_with(NPY_MAGIC) {
            return Format::Npy;
        }
        let text = bytes.strip_prefix(UTF8_BOM).unwrap_or(bytes);
        match text.iter().find(|byte| !byte.is_ascii_whitespace()) {
            Some(b'[' | b'{') => Format::Json,
            _ => Format::Csv,
        }
    }

    /// The format's usual short name: `CSV`, `NPY` or `JSON`.
    pub fn name(self) -> &'static str {
        match self {
            Format::Csv => "CSV",
            Format::Npy => "NPY",
            Format::Json => "JSON",
        }
    }
}

impl fmt::Display for Format {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.name())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn extension_picks_format_in_any_case() {
        assert_eq!(
            Format::from_path_extension(Path::new("a/b.csv")),
            Some(Format::Csv)
        );
        assert_eq!(
            Format::from_path_extension(Path::new("b.NPY")),
            Some(Format::Npy)
        );
        assert_eq!(
            Format::from_path_extension(Path::new("b.Json")),
            Some(Format::Json)
        );
        assert_eq!(Format::from_path_extension(Path::new("b.txt")), None);
        assert_eq!(Format::from_path_extension(Path::new("csv")), None);
        assert_eq!(Format::from_path_extension(Path::new("b.csv.gz")), None);
    }

    #[test]
    fn first_bytes_sniffing() {
        // Magic string per the NPY format spec, numpy docs: numpy.lib.format.
        assert_eq!(Format::from_first_bytes(b"\x93NUMPY\x01\x00"), Format::Npy);
        assert_eq!(Format::from_first_bytes(b"  \n\t[[1,2]]"), Format::Json);
        assert_eq!(Format::from_first_bytes(b"{\"a\":[1]}"), Format::Json);
        assert_eq!(Format::from_first_bytes(b"\xEF\xBB\xBF [1]"), Format::Json);
        assert_eq!(Format::from_first_bytes(b"a,b\n1,2\n"), Format::Csv);
        assert_eq!(Format::from_first_bytes(b""), Format::Csv);
        // A damaged magic string is not NPY; it is left to the CSV reader to reject.
        assert_eq!(Format::from_first_bytes(b"\x93NUMPX"), Format::Csv);
    }

    #[test]
    fn display_names() {
        assert_eq!(Format::Csv.to_string(), "CSV");
        assert_eq!(Format::Npy.to_string(), "NPY");
        assert_eq!(Format::Json.to_string(), "JSON");
    }
}
