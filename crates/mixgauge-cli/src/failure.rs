//! The command line's error: a message for stderr and the exit code it maps to.

use std::fmt;

/// Why a command failed, split by who can fix it.
#[derive(Debug)]
pub enum Failure {
    /// The user's input or options are wrong (exit code 2).
    Input(String),
    /// Something else went wrong (exit code 1).
    Other(String),
}

impl Failure {
    pub fn exit_code(&self) -> u8 {
        match self {
            Failure::Input(_) => 2,
            Failure::Other(_) => 1,
        }
    }
}

impl fmt::Display for Failure {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Failure::Input(m) | Failure::Other(m) => f.write_str(m),
        }
    }
}

impl From<mixgauge_data::DataError> for Failure {
    fn from(e: mixgauge_data::DataError) -> Self {
        Failure::Input(e.to_string())
    }
}

impl From<mixgauge_engine::Error> for Failure {
    fn from(e: mixgauge_engine::Error) -> Self {
        use mixgauge_engine::Error as E;
        match e {
            E::NotPositiveDefinite { .. } | E::Cancelled => Failure::Other(e.to_string()),
            _ => Failure::Input(e.to_string()),
        }
    }
}

/// Wraps an I/O error with the path and what was being done.
pub fn io(action: &str, path: &std::path::Path, e: std::io::Error) -> Failure {
    match e.kind() {
        std::io::ErrorKind::NotFound | std::io::ErrorKind::PermissionDenied => {
            Failure::Input(format!("cannot {action} {}: {e}", path.display()))
        }
        _ => Failure::Other(format!("cannot {action} {}: {e}", path.display())),
    }
}
