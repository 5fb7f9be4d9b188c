//! Reads the files kept under `tests/`: the malformed corpus, which every
//! reader must refuse with a message naming the fault, and NPY files written
//! by numpy itself, which must read back to the values numpy was given.

use std::path::{Path, PathBuf};

use mixgauge_data::{DataError, Format, ReadOptions, read_bytes, read_path};
use ndarray::Array2;
use serde_json::Value;

fn fixture_dir(name: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("tests")
        .join(name)
}

/// `ReadOptions` from an `expected.json` entry's `options` object.
fn options_from(entry: &Value, name: &str) -> ReadOptions {
    let mut options = ReadOptions::default();
    let Some(given) = entry.get("options") else {
        return options;
    };
    for (key, value) in given
        .as_object()
        .unwrap_or_else(|| panic!("{name}: options is not an object"))
    {
        options = match key.as_str() {
            "columns" => options.columns(
                value
                    .as_array()
                    .unwrap_or_else(|| panic!("{name}: columns is not an array"))
                    .iter()
                    .map(|column| {
                        column
                            .as_str()
                            .unwrap_or_else(|| panic!("{name}: column is not a string"))
                    }),
            ),
            "label_column" => options.label_column(
                value
                    .as_str()
                    .unwrap_or_else(|| panic!("{name}: bad label")),
            ),
            "drop_incomplete" => options.drop_incomplete(
                value
                    .as_bool()
                    .unwrap_or_else(|| panic!("{name}: bad drop")),
            ),
            "max_rows" => options.max_rows(
                value
                    .as_u64()
                    .unwrap_or_else(|| panic!("{name}: bad max_rows")) as usize,
            ),
            "max_columns" => options.max_columns(
                value
                    .as_u64()
                    .unwrap_or_else(|| panic!("{name}: bad max_columns")) as usize,
            ),
            other => panic!("{name}: unknown option {other:?}"),
        };
    }
    options
}

#[test]
fn every_malformed_input_is_refused_with_a_message_naming_the_fault() {
    let dir = fixture_dir("malformed");
    let expected: Value = serde_json::from_slice(
        &std::fs::read(dir.join("expected.json")).expect("expected.json is readable"),
    )
    .expect("expected.json is valid JSON");
    let expected = expected.as_object().expect("expected.json holds an object");

    let mut files: Vec<String> = std::fs::read_dir(&dir)
        .expect("the corpus directory is readable")
        .map(|entry| {
            entry
                .expect("a directory entry")
                .file_name()
                .to_string_lossy()
                .into_owned()
        })
        .filter(|name| name != "expected.json" && name != "README.md")
        .collect();
    files.sort();
    assert!(
        files.len() >= 25,
        "the corpus has only {} files",
        files.len()
    );
    for name in expected.keys() {
        assert!(
            files.contains(name),
            "expected.json names {name}, which is not in the corpus"
        );
    }

    let mut failures = Vec::new();
    for name in &files {
        let Some(entry) = expected.get(name) else {
            failures.push(format!("{name}: no entry in expected.json"));
            continue;
        };
        let options = options_from(entry, name);
        let path = dir.join(name);
        let message = match read_path(&path, &options) {
            Ok(data) => {
                failures.push(format!(
                    "{name}: accepted, giving {} rows",
                    data.values.nrows()
                ));
                continue;
            }
            Err(error) => error.to_string(),
        };
        for word in entry["contains"]
            .as_array()
            .unwrap_or_else(|| panic!("{name}: contains is not an array"))
        {
            let word = word
                .as_str()
                .unwrap_or_else(|| panic!("{name}: key word is not a string"));
            if !message.contains(word) {
                failures.push(format!("{name}: {message:?} lacks {word:?}"));
            }
        }
        if !message.contains(name.as_str()) {
            failures.push(format!("{name}: {message:?} does not name the file"));
        }
        // The same bytes given in memory, with the format forced as the
        // extension chose it, give the same message without the file name.
        let format =
            Format::from_path_extension(&path).expect("corpus files have known extensions");
        let bytes = std::fs::read(&path).expect("corpus file is readable");
        match read_bytes(&bytes, &options.clone().format(format)) {
            Ok(_) => failures.push(format!("{name}: accepted as bytes")),
            Err(error) => {
                let from_bytes = error.to_string();
                if message != format!("{}: {from_bytes}", path.display()) {
                    failures.push(format!(
                        "{name}: bytes gave {from_bytes:?}, file gave {message:?}"
                    ));
                }
            }
        }
    }
    assert!(
        failures.is_empty(),
        "{} failures:\n{}",
        failures.len(),
        failures.join("\n")
    );
}

/// The values numpy was asked to save; see `tests/numpy-written/README.md`.
fn numpy_floats() -> Array2<f64> {
    Array2::from_shape_fn((4, 3), |(row, column)| {
        ((row * 3 + column) as f64 - 5.0) * 0.1
    })
}

fn numpy_ints() -> Array2<f64> {
    Array2::from_shape_fn((4, 3), |(row, column)| {
        ((row * 3 + column) as i64 * 1_000_003 - 6_000_000) as f64
    })
}

fn read_numpy(name: &str, options: &ReadOptions) -> Result<mixgauge_data::Dataset, DataError> {
    read_path(&fixture_dir("numpy-written").join(name), options)
}

#[test]
fn files_written_by_numpy_read_back_exactly() {
    let floats = numpy_floats();
    let singles = floats.mapv(|x| f64::from(x as f32));
    let ints = numpy_ints();
    let longs = ints.mapv(|x| x * 1e9);
    let cases = [
        ("f8-c.npy", &floats),
        ("f8-fortran.npy", &floats),
        ("f8-big-endian.npy", &floats),
        ("f8-version-2.npy", &floats),
        ("f8-version-3.npy", &floats),
        ("f4-c.npy", &singles),
        ("f4-big-endian-fortran.npy", &singles),
        ("i4-c.npy", &ints),
        ("i4-big-endian.npy", &ints),
        ("i8-c.npy", &longs),
        ("i8-big-endian-fortran.npy", &longs),
    ];
    for (name, expected) in cases {
        let data =
            read_numpy(name, &ReadOptions::default()).unwrap_or_else(|error| panic!("{error}"));
        assert_eq!(data.format, Format::Npy, "{name}");
        assert_eq!(&data.values, expected, "{name}");
        assert_eq!(data.column_names, ["x1", "x2", "x3"], "{name}");
        assert!(data.values.is_standard_layout(), "{name}");
        assert_eq!(data.sha256.len(), 64, "{name}");
    }
}

#[test]
fn numpy_one_dimensional_and_nan_files() {
    let floats = numpy_floats();
    let data = read_numpy("f8-one-dimensional.npy", &ReadOptions::default()).unwrap();
    assert_eq!(data.values, floats.slice(ndarray::s![.., 0..1]));

    let error = read_numpy("f8-with-nan.npy", &ReadOptions::default()).unwrap_err();
    let message = error.to_string();
    assert!(message.contains("row 3, column \"x2\""), "{message}");
    let data = read_numpy(
        "f8-with-nan.npy",
        &ReadOptions::default().drop_incomplete(true),
    )
    .unwrap();
    assert_eq!(data.dropped_rows, 1);
    let kept = ndarray::concatenate(
        ndarray::Axis(0),
        &[
            floats.slice(ndarray::s![0..2, ..]),
            floats.slice(ndarray::s![3.., ..]),
        ],
    )
    .unwrap();
    assert_eq!(data.values, kept);
}
