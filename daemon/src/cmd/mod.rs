//! Binary-only command modules: each turns validated flags into a library call
//! and its output into files or stdout. `anyhow` lives here and in `main`.

pub mod bench;
pub mod demo;
pub mod replay;
pub mod serve;
pub mod simulate;
pub mod solve;
pub mod study;
pub mod watch;

use std::process::ExitCode;

/// Why a command stopped, and so which exit code it ends with.
#[derive(Debug)]
pub enum Failure {
    /// The input or the flags were wrong (exit code 2, like a usage error).
    BadInput(anyhow::Error),
    /// Something failed while running (exit code 1).
    Failed(anyhow::Error),
}

impl Failure {
    /// Prints the error chain on stderr and gives the exit code.
    pub fn report(self) -> ExitCode {
        let (code, err) = match self {
            Failure::BadInput(err) => (2, err),
            Failure::Failed(err) => (1, err),
        };
        eprintln!("wahbad: error: {err:#}");
        ExitCode::from(code)
    }
}

/// Shorthand for a bad-input failure from a message.
pub fn bad_input(message: impl std::fmt::Display) -> Failure {
    Failure::BadInput(anyhow::anyhow!("{message}"))
}
