//! Typed errors of the library, each mapped to a documented exit code.

use std::path::PathBuf;

/// Exit codes of the `vastmul` binary. The table is documented in README.md.
pub mod exit {
    /// Success.
    pub const OK: i32 = 0;
    /// An internal error: a bug in vastmul. Please report it.
    pub const INTERNAL: i32 = 1;
    /// Bad command line: unknown option, conflicting options, bad value.
    pub const USAGE: i32 = 2;
    /// An input file is missing, unreadable or malformed.
    pub const INPUT: i32 = 3;
    /// The output cannot be written: exists, equals an input, bad directory.
    pub const OUTPUT: i32 = 4;
    /// Not enough memory budget or scratch space for the request.
    pub const RESOURCES: i32 = 5;
    /// A residue check or hash check failed.
    pub const VERIFY: i32 = 6;
    /// Stopped by a signal; rerun the same command to resume.
    pub const INTERRUPTED: i32 = 130;
}

/// Everything that can go wrong in a vastmul operation.
#[derive(Debug, thiserror::Error)]
#[non_exhaustive]
pub enum Error {
    /// An input file is missing, unreadable, or not a valid operand.
    #[error("{path}: {what}{}\n  fix: {fix}", offset_text(*offset))]
    Input {
        /// The file at fault.
        path: PathBuf,
        /// Byte offset in the file where the problem is, when there is one.
        offset: Option<u64>,
        /// What is wrong.
        what: String,
        /// How to fix it.
        fix: String,
    },
    /// The output cannot be produced at the requested path.
    #[error("{path}: {what}\n  fix: {fix}")]
    Output {
        /// The output path at fault.
        path: PathBuf,
        /// What is wrong.
        what: String,
        /// How to fix it.
        fix: String,
    },
    /// Options that cannot work together, or a value out of range.
    #[error("{what}\n  fix: {fix}")]
    Usage {
        /// What is wrong.
        what: String,
        /// How to fix it.
        fix: String,
    },
    /// The request needs more memory or scratch space than is allowed.
    #[error("{what}\n  fix: {fix}")]
    Resources {
        /// What is missing, with the figures.
        what: String,
        /// How to fix it.
        fix: String,
    },
    /// A verification (residue or hash) failed.
    #[error("verification failed: {what}")]
    Verify {
        /// What did not match, and then the fix line where the place that
        /// found it knows one (see [`Error::verify`]).
        what: String,
    },
    /// Stopped by SIGINT or SIGTERM at a block boundary, state saved.
    #[error("{what}\n  to resume: {resume}")]
    Interrupted {
        /// Where the work stopped.
        what: String,
        /// How to resume it.
        resume: String,
    },
    /// An operating-system I/O error on a named file.
    #[error("{path}: {source}\n  fix: {}", io_fix(source))]
    Io {
        /// The file being read or written.
        path: PathBuf,
        /// The underlying error.
        source: std::io::Error,
    },
}

fn offset_text(offset: Option<u64>) -> String {
    match offset {
        Some(o) => format!(" (at byte offset {o})"),
        None => String::new(),
    }
}

/// What to do about an I/O error that reached the user without a more
/// specific message: the system's words say what failed, not what to do.
fn io_fix(e: &std::io::Error) -> &'static str {
    match (e.kind(), e.raw_os_error()) {
        (_, Some(libc::ENOSPC | libc::EDQUOT)) => {
            "free space on that disk, or choose a path on a disk with more room, then rerun"
        }
        (_, Some(libc::EROFS)) | (std::io::ErrorKind::PermissionDenied, _) => {
            "make that path writable, or choose one in a writable directory, then rerun"
        }
        (std::io::ErrorKind::NotFound, _) => {
            "check that the path exists and was not removed while vastmul ran, then rerun"
        }
        _ => "check the disk and the path named above, then rerun the same command",
    }
}

impl Error {
    /// The exit code the binary reports for this error.
    pub fn exit_code(&self) -> i32 {
        match self {
            Error::Input { .. } => exit::INPUT,
            Error::Output { .. } => exit::OUTPUT,
            Error::Usage { .. } => exit::USAGE,
            Error::Resources { .. } => exit::RESOURCES,
            Error::Verify { .. } => exit::VERIFY,
            Error::Interrupted { .. } => exit::INTERRUPTED,
            Error::Io { .. } => exit::OUTPUT,
        }
    }

    /// Shorthand for an [`Error::Input`].
    pub fn input(
        path: impl Into<PathBuf>,
        offset: Option<u64>,
        what: impl Into<String>,
        fix: impl Into<String>,
    ) -> Self {
        Error::Input {
            path: path.into(),
            offset,
            what: what.into(),
            fix: fix.into(),
        }
    }

    /// Shorthand for an [`Error::Output`].
    pub fn output(
        path: impl Into<PathBuf>,
        what: impl Into<String>,
        fix: impl Into<String>,
    ) -> Self {
        Error::Output {
            path: path.into(),
            what: what.into(),
            fix: fix.into(),
        }
    }

    /// Shorthand for an [`Error::Usage`].
    pub fn usage(what: impl Into<String>, fix: impl Into<String>) -> Self {
        Error::Usage {
            what: what.into(),
            fix: fix.into(),
        }
    }

    /// An [`Error::Verify`] whose message ends with a fix line, laid out as
    /// the other variants lay out theirs.
    pub fn verify(what: impl Into<String>, fix: impl Into<String>) -> Self {
        Error::Verify {
            what: format!("{}\n  fix: {}", what.into(), fix.into()),
        }
    }

    /// Shorthand for an [`Error::Io`].
    pub fn io(path: impl Into<PathBuf>, source: std::io::Error) -> Self {
        Error::Io {
            path: path.into(),
            source,
        }
    }
}

/// Result type of the library.
pub type Result<T> = std::result::Result<T, Error>;

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn io_errors_end_with_a_fix_that_suits_them() {
        let full = Error::io("out.txt", std::io::Error::from_raw_os_error(libc::ENOSPC));
        let text = full.to_string();
        assert!(text.starts_with("out.txt: "), "{text}");
        assert!(text.contains("\n  fix: free space"), "{text}");
        let ro = Error::io("out.txt", std::io::Error::from_raw_os_error(libc::EROFS));
        assert!(
            ro.to_string().contains("fix: make that path writable"),
            "{ro}"
        );
        let gone = Error::io("x", std::io::Error::from(std::io::ErrorKind::NotFound));
        assert!(
            gone.to_string().contains("fix: check that the path exists"),
            "{gone}"
        );
        let other = Error::io("x", std::io::Error::other("boom"));
        assert!(other.to_string().contains("fix: check the disk"), "{other}");
    }

    #[test]
    fn verify_errors_carry_their_fix_line() {
        let e = Error::verify("c.txt is not a x b", "recompute it");
        assert_eq!(
            e.to_string(),
            "verification failed: c.txt is not a x b\n  fix: recompute it"
        );
        assert_eq!(e.exit_code(), exit::VERIFY);
    }
}
