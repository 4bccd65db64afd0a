//! Calls into tract with its errors and panics turned into [`RunError`]s.
//!
//! tract panics on some malformed models (a Conv `strides` of the wrong length, a Slice step of
//! 0, ...). A panic inside [`guarded`] or [`catch`] becomes an error; while one runs,
//! [`catching_panics`] tells the process's panic hook that the panic is handled, so it prints
//! nothing.

use std::cell::Cell;
use std::panic::{AssertUnwindSafe, catch_unwind};

use super::RunError;
use super::vector_state;

thread_local! {
    /// How many guarded sections the current thread is inside.
    static DEPTH: Cell<usize> = const { Cell::new(0) };
}

/// Whether the current thread is inside [`guarded`] or [`catch`], which turn a panic into an
/// error: a panic hook should then stay quiet.
pub fn catching_panics() -> bool {
    DEPTH.with(|d| d.get() > 0)
}

/// How a call into tract failed.
#[derive(Debug)]
pub(crate) enum Failure {
    /// tract returned an error.
    Error(anyhow::Error),
    /// tract panicked, with this message.
    Panic(String),
}

impl Failure {
    /// The failure as a one-line [`RunError::Tract`] at `stage`.
    pub(crate) fn at(self, stage: &'static str) -> RunError {
        match self {
            Failure::Error(error) => RunError::tract(stage, &error),
            Failure::Panic(message) => RunError::Tract {
                stage,
                message: format!("tract panicked: {message}"),
            },
        }
    }
}

/// Runs `f`, catching a panic inside it; the vector registers are then left as compiled code
/// expects them ([`vector_state::settle`]).
pub(crate) fn catch<T>(f: impl FnOnce() -> anyhow::Result<T>) -> Result<T, Failure> {
    DEPTH.with(|d| d.set(d.get() + 1));
    let result = catch_unwind(AssertUnwindSafe(f));
    DEPTH.with(|d| d.set(d.get() - 1));
    vector_state::settle();
    match result {
        Ok(Ok(value)) => Ok(value),
        Ok(Err(error)) => Err(Failure::Error(error)),
        Err(panic) => Err(Failure::Panic(
            panic
                .downcast_ref::<String>()
                .cloned()
                .or_else(|| panic.downcast_ref::<&str>().map(|s| s.to_string()))
                .unwrap_or_else(|| "internal panic".to_string()),
        )),
    }
}

/// Runs `f`, turning a tract error or a panic inside tract into [`RunError::Tract`].
pub(crate) fn guarded<T>(
    stage: &'static str,
    f: impl FnOnce() -> anyhow::Result<T>,
) -> Result<T, RunError> {
    catch(f).map_err(|failure| failure.at(stage))
}
