//! The entry points: choose the format, run its reader, add the checksum.

use std::fmt::Write as _;
use std::path::Path;

use sha2::{Digest, Sha256};

use crate::dataset::Dataset;
use crate::error::DataError;
use crate::format::Format;
use crate::options::ReadOptions;
use crate::table::Table;
use crate::{csv_table, json_table, npy};

/// Reads a dataset from bytes in memory.
///
/// The format is `options.format` or, when that is `None`, guessed with
/// [`Format::from_first_bytes`].
///
/// # Errors
///
/// Any [`DataError`] other than [`DataError::Io`] and [`DataError::InFile`]:
/// malformed input, a column the options name that the input lacks, a
/// missing or non-finite value (unless dropping incomplete rows), or a
/// limit exceeded.
pub fn read_bytes(bytes: &[u8], options: &ReadOptions) -> Result<Dataset, DataError> {
    let format = options
        .format
        .unwrap_or_else(|| Format::from_first_bytes(bytes));
    read_as(bytes, format, options)
}

/// Reads a dataset from a file.
///
/// The format is `options.format`, else the one named by the file's
/// extension ([`Format::from_path_extension`]), else the one guessed from
/// its first bytes. The whole file is read into memory.
///
/// # Errors
///
/// [`DataError::Io`] when the file cannot be read; otherwise the error
/// [`read_bytes`] would give, wrapped in [`DataError::InFile`] so that its
/// message starts with the file's path.
pub fn read_path(path: &Path, options: &ReadOptions) -> Result<Dataset, DataError> {
    let bytes = std::fs::read(path).map_err(|error| DataError::Io {
        path: path.to_owned(),
        error,
    })?;
    let format = options
        .format
        .or_else(|| Format::from_path_extension(path))
        .unwrap_or_else(|| Format::from_first_bytes(&bytes));
    read_as(&bytes, format, options).map_err(|error| DataError::InFile {
        path: path.to_owned(),
        error: Box::new(error),
    })
}

fn read_as(bytes: &[u8], format: Format, options: &ReadOptions) -> Result<Dataset, DataError> {
    let table = match format {
        Format::Csv => csv_table::read(bytes, options)?,
        Format::Npy => npy::read(bytes, options)?,
        Format::Json => json_table::read(bytes, options)?,
    };
    let Table {
        values,
        column_names,
        labels,
        dropped_rows,
        skipped_columns,
    } = table;
    Ok(Dataset {
        values,
        column_names,
        labels,
        dropped_rows,
        skipped_columns,
        sha256: sha256_hex(bytes),
        format,
    })
}

/// Lowercase hexadecimal SHA-256 of `bytes`.
fn sha256_hex(bytes: &[u8]) -> String {
    Sha256::digest(bytes)
        .iter()
        .fold(String::with_capacity(64), |mut hex, byte| {
            // Writing to a String cannot fail.
            let _ = write!(hex, "{byte:02x}");
            hex
        })
}

#[cfg(test)]
mod tests {
    use super::*;

    /// FIPS 180-4 example values (NIST CSRC "Examples with Intermediate
    /// Values", SHA-256): the digests of "abc" and of the empty message.
    #[test]
    fn sha256_matches_published_examples() {
        assert_eq!(
            sha256_hex(b"abc"),
            "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"
        );
        assert_eq!(
            sha256_hex(b""),
            "e3b0c44298fc1c149afbf4c8996fb92427ae41e4649b934ca495991b7852b855"
        );
    }

    #[test]
    fn dataset_carries_checksum_of_exact_bytes() {
        let with_bom = b"\xEF\xBB\xBFa\n1\n";
        let without = b"a\n1\n";
        let first = read_bytes(with_bom, &ReadOptions::default()).unwrap();
        let second = read_bytes(without, &ReadOptions::default()).unwrap();
        assert_eq!(first.values, second.values);
        assert_eq!(first.sha256, sha256_hex(with_bom));
        assert_eq!(second.sha256, sha256_hex(without));
        assert_ne!(first.sha256, second.sha256);
    }

    #[test]
    fn format_is_sniffed_or_forced() {
        assert_eq!(
            read_bytes(b"[[1]]", &ReadOptions::default())
                .unwrap()
                .format,
            Format::Json
        );
        assert_eq!(
            read_bytes(b"a\n1\n", &ReadOptions::default())
                .unwrap()
                .format,
            Format::Csv
        );
        // Forced to CSV, the same text is a one-column CSV named "[[1]]"
        // with no data rows.
        let error = read_bytes(b"[[1]]", &ReadOptions::default().format(Format::Csv)).unwrap_err();
        assert!(matches!(
            error,
            DataError::NoDataRows {
                format: Format::Csv
            }
        ));
        let error = read_bytes(b"a\n1\n", &ReadOptions::default().format(Format::Npy)).unwrap_err();
        assert!(matches!(error, DataError::NpyMagic));
    }

    #[test]
    fn path_errors_name_the_file() {
        let dir = std::env::temp_dir().join(format!("mixgauge-data-read-{}", std::process::id()));
        std::fs::create_dir_all(&dir).unwrap();
        let missing = dir.join("absent.csv");
        let error = read_path(&missing, &ReadOptions::default()).unwrap_err();
        assert!(matches!(error, DataError::Io { .. }));
        assert!(error.to_string().contains("absent.csv"), "{error}");

        // The extension decides the format before sniffing does.
        let file = dir.join("table.json");
        std::fs::write(&file, b"a,b\n1,2\n").unwrap();
        let error = read_path(&file, &ReadOptions::default()).unwrap_err();
        let message = error.to_string();
        assert!(
            message.starts_with(&file.display().to_string()),
            "{message}"
        );
        assert!(message.contains("JSON"), "{message}");

        let file = dir.join("table");
        std::fs::write(&file, b"[[1, 2]]").unwrap();
        let data = read_path(&file, &ReadOptions::default()).unwrap();
        assert_eq!(data.format, Format::Json);
        assert_eq!(data.sha256, sha256_hex(b"[[1, 2]]"));
        std::fs::remove_dir_all(&dir).unwrap();
    }
}
