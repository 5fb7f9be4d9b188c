//! End-to-end runs of the `mixgauge` binary.

mod malformed;
mod runs;

use std::path::Path;
use std::process::{Command, Output};

/// Runs the binary built for this test with `args`.
pub fn mixgauge<I, S>(args: I) -> Output
where
    I: IntoIterator<Item = S>,
    S: AsRef<std::ffi::OsStr>,
{
    Command::new(env!("CARGO_BIN_EXE_mixgauge"))
        .args(args)
        .output()
        .expect("the mixgauge binary runs")
}

/// The repository root.
pub fn root() -> &'static Path {
    Path::new(concat!(env!("CARGO_MANIFEST_DIR"), "/../.."))
}

pub fn stderr(o: &Output) -> String {
    String::from_utf8_lossy(&o.stderr).into_owned()
}
