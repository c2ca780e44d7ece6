//! What the command line prints. `print!` and `eprint!` panic when the other end of a
//! pipe has gone (`cairn plan … | head -1`); these write through one place instead. A
//! reader that closed standard output ends the command quietly with success: it has
//! taken what it wanted. Standard error is best effort: a message nobody can read is
//! dropped.

use std::fmt;
use std::io::{ErrorKind, Write};

/// Standard output was closed by its reader. `cli::main` ends with success and prints
/// nothing more when a command fails with it.
#[derive(Debug, thiserror::Error)]
#[error("standard output was closed by its reader")]
pub struct StdoutClosed;

/// Writes to standard output and flushes, so a closed pipe is noticed at the write
/// that met it. Fails with [`StdoutClosed`] on a broken pipe and names any other
/// failure (a full disk behind a redirect).
pub fn stdout(text: fmt::Arguments<'_>) -> anyhow::Result<()> {
    let mut out = std::io::stdout().lock();
    match out.write_fmt(text).and_then(|()| out.flush()) {
        Ok(()) => Ok(()),
        Err(e) if e.kind() == ErrorKind::BrokenPipe => Err(StdoutClosed.into()),
        Err(e) => Err(anyhow::anyhow!("cannot write to standard output: {e}")),
    }
}

/// Writes to standard error, ignoring a closed or failing stream.
pub fn stderr(text: fmt::Arguments<'_>) {
    let _ = std::io::stderr().lock().write_fmt(text);
}

/// Prints to standard output through [`stdout`]; evaluates to `anyhow::Result<()>`.
macro_rules! out {
    ($($arg:tt)*) => {
        $crate::cli::out::stdout(format_args!($($arg)*))
    };
}

/// Prints a line to standard output through [`stdout`]; evaluates to `anyhow::Result<()>`.
macro_rules! outln {
    () => {
        $crate::cli::out::stdout(format_args!("\n"))
    };
    ($($arg:tt)*) => {
        $crate::cli::out::stdout(format_args!("{}\n", format_args!($($arg)*)))
    };
}

/// Prints a line to standard error through [`stderr`], never failing.
macro_rules! errln {
    ($($arg:tt)*) => {
        $crate::cli::out::stderr(format_args!("{}\n", format_args!($($arg)*)))
    };
}

pub(crate) use {errln, out, outln};
