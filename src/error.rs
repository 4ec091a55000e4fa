//! Typed errors: each says what went wrong, where, and what to do about it.

use thiserror::Error;

#[derive(Debug, Error)]
pub enum Error {
    /// An input file could not be read.
    #[error("{path}: cannot read the file: {source}")]
    Io {
        path: String,
        #[source]
        source: std::io::Error,
    },
    /// An output file could not be written (a missing directory, no permission, a full
    /// disk): nothing is wrong with the input.
    #[error("{path}: cannot write: {source}")]
    Write {
        path: String,
        #[source]
        source: std::io::Error,
    },
    #[error(
        "{path}: this is not a text file; a layout file is TOML text (see docs/layout-file.md)"
    )]
    NotText { path: String },
    /// The TOML did not parse, or a key or value had the wrong shape.
    #[error("{}{}", where_(file, line), message)]
    Syntax {
        file: Option<String>,
        line: Option<usize>,
        message: String,
    },
    /// The file parsed but describes no valid layout.
    #[error("{}{}", where_(file, line), message)]
    Invalid {
        file: Option<String>,
        line: Option<usize>,
        message: String,
    },
    /// A data file (CSV) could not be used: what is wrong, and the line where it is known.
    #[error("{}{}", where_(&Some(path.clone()), line), message)]
    Data {
        path: String,
        line: Option<usize>,
        message: String,
    },
    /// A command-line value was wrong (one that the argument parser accepted, such as an
    /// out-of-range `--runs` or a `--set` key that names no factor).
    #[error("{0}")]
    Usage(String),
}

/// The process's exit status, the same for every command: what the caller must do next.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ExitStatus {
    /// 0: the job ran and its output was written.
    Success,
    /// 1: a file or value the user must fix (a layout, a data file, a `--set` value).
    BadInput,
    /// 2: the command line itself is wrong (an unknown flag, a missing argument); the
    /// argument parser reports these.
    Usage,
    /// 3: the output could not be written.
    CannotWrite,
}

impl ExitStatus {
    pub fn code(self) -> u8 {
        match self {
            ExitStatus::Success => 0,
            ExitStatus::BadInput => 1,
            ExitStatus::Usage => 2,
            ExitStatus::CannotWrite => 3,
        }
    }
}

pub(crate) fn where_(file: &Option<String>, line: &Option<usize>) -> String {
    match (file, line) {
        (Some(f), Some(l)) => format!("{f} line {l}: "),
        (Some(f), None) => format!("{f}: "),
        (None, Some(l)) => format!("line {l}: "),
        (None, None) => String::new(),
    }
}

impl Error {
    /// How the process exits on this error: every error of a job is bad input except a
    /// failure to write the output. (Usage errors of the argument parser never reach here.)
    pub fn exit_status(&self) -> ExitStatus {
        match self {
            Error::Write { .. } => ExitStatus::CannotWrite,
            Error::Io { .. }
            | Error::NotText { .. }
            | Error::Syntax { .. }
            | Error::Invalid { .. }
            | Error::Data { .. }
            | Error::Usage(_) => ExitStatus::BadInput,
        }
    }

    /// An invalid-layout error at a known line (if any).
    pub fn invalid(line: Option<usize>, message: impl Into<String>) -> Self {
        Error::Invalid {
            file: None,
            line,
            message: message.into(),
        }
    }

    /// Attaches the file name to errors raised while the file was being read.
    pub fn in_file(self, path: &std::path::Path) -> Self {
        let name = Some(path.display().to_string());
        match self {
            Error::Syntax { line, message, .. } => Error::Syntax {
                file: name,
                line,
                message,
            },
            Error::Invalid { line, message, .. } => Error::Invalid {
                file: name,
                line,
                message,
            },
            other => other,
        }
    }
}
