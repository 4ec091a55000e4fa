//! Typed errors: each says what went wrong, where, and what to do about it.

use thiserror::Error;

#[derive(Debug, Error)]
pub enum Error {
    #[error("{path}: cannot read the file: {source}")]
    Io {
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
    /// A command-line argument was wrong.
    #[error("{0}")]
    Usage(String),
}

fn where_(file: &Option<String>, line: &Option<usize>) -> String {
    match (file, line) {
        (Some(f), Some(l)) => format!("{f} line {l}: "),
        (Some(f), None) => format!("{f}: "),
        (None, Some(l)) => format!("line {l}: "),
        (None, None) => String::new(),
    }
}

impl Error {
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
