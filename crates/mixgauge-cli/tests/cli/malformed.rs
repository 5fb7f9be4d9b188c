//! The malformed-input corpus of the data crate, through the command line: every file gives
//! exit code 2 and one paragraph on stderr naming the problem, and nothing panics.

use crate::{mixgauge, root, stderr};

#[test]
fn every_malformed_input_is_a_clear_input_error() {
    let dir = root().join("crates/mixgauge-data/tests/malformed");
    let expected: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(dir.join("expected.json")).unwrap()).unwrap();
    let mut checked = 0;
    for (file, case) in expected.as_object().unwrap() {
        let mut args: Vec<String> = vec!["sweep".into(), dir.join(file).display().to_string()];
        let options = case
            .get("options")
            .and_then(|o| o.as_object())
            .cloned()
            .unwrap_or_default();
        // Row and column limits are service settings with no command-line flag.
        if options.contains_key("max_rows") || options.contains_key("max_columns") {
            continue;
        }
        if let Some(cols) = options.get("columns") {
            let names: Vec<&str> = cols
                .as_array()
                .unwrap()
                .iter()
                .map(|v| v.as_str().unwrap())
                .collect();
            args.push(format!("--columns={}", names.join(",")));
        }
        if let Some(label) = options.get("label_column") {
            args.push(format!("--labels={}", label.as_str().unwrap()));
        }
        if options.get("drop_incomplete").and_then(|v| v.as_bool()) == Some(true) {
            args.push("--drop-incomplete".into());
        }
        let out = mixgauge(&args);
        let err = stderr(&out);
        assert_eq!(
            out.status.code(),
            Some(2),
            "{file}: exit {:?}, stderr: {err}",
            out.status.code()
        );
        assert!(!err.contains("panicked"), "{file}: {err}");
        assert!(err.starts_with("mixgauge: "), "{file}: {err}");
        for needle in case["contains"].as_array().unwrap() {
            let needle = needle.as_str().unwrap();
            assert!(
                err.contains(needle),
                "{file}: message lacks {needle:?}: {err}"
            );
        }
        checked += 1;
    }
    assert!(
        checked >= 25,
        "only {checked} malformed inputs were checked"
    );
}

#[test]
fn numbers_too_large_for_double_precision_moments_are_an_input_error() {
    let dir = tempdir();
    let path = dir.join("huge.csv");
    let mut text = String::from("a,b\n");
    for i in 0..50 {
        text.push_str(&format!(
            "{},{}\n",
            if i % 2 == 0 { 1e200 } else { -1e200 },
            i
        ));
    }
    std::fs::write(&path, text).unwrap();
    let out = mixgauge(["sweep", path.to_str().unwrap(), "--components", "1..2"]);
    assert_eq!(out.status.code(), Some(2), "{}", stderr(&out));
    assert!(
        stderr(&out).contains("column 0 spreads too widely"),
        "{}",
        stderr(&out)
    );
}

#[test]
fn usage_errors_exit_with_2_and_say_what_to_write() {
    let out = mixgauge(["sweep", "x.csv", "--components", "5..2"]);
    assert_eq!(out.status.code(), Some(2));
    assert!(stderr(&out).contains("smaller count first"));
    let out = mixgauge(["sweep", "/no/such/file.csv"]);
    assert_eq!(out.status.code(), Some(2));
    assert!(
        stderr(&out).contains("/no/such/file.csv"),
        "{}",
        stderr(&out)
    );
    let dir = tempdir();
    let path = dir.join("ok.csv");
    std::fs::write(&path, "a\n1\n2\n3\n").unwrap();
    let out = mixgauge(["sweep", path.to_str().unwrap(), "--folds", "1"]);
    assert_eq!(out.status.code(), Some(2));
    assert!(
        stderr(&out).contains("folds = 1 is not valid"),
        "{}",
        stderr(&out)
    );
}

/// A fresh folder under the system temporary directory.
pub fn tempdir() -> std::path::PathBuf {
    use std::sync::atomic::{AtomicUsize, Ordering};
    static NEXT: AtomicUsize = AtomicUsize::new(0);
    let dir = std::env::temp_dir().join(format!(
        "mixgauge-cli-test-{}-{}",
        std::process::id(),
        NEXT.fetch_add(1, Ordering::Relaxed)
    ));
    std::fs::create_dir_all(&dir).unwrap();
    dir
}
