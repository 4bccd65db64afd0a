//! Writing to standard output; a closed pipe (`actswap scan m.onnx | head`) ends quietly.

use std::io::{BufWriter, Write};

use anyhow::Result;

/// Prints `text` to standard output.
pub fn print(text: &str) -> Result<()> {
    let mut out = std::io::stdout().lock();
    out.write_all(text.as_bytes())?;
    out.flush()?;
    Ok(())
}

/// Writes to standard output through a buffer, as `write` produces it.
pub fn write_with(write: impl FnOnce(&mut dyn Write) -> std::io::Result<()>) -> Result<()> {
    let mut out = BufWriter::with_capacity(1 << 16, std::io::stdout().lock());
    write(&mut out)?;
    out.flush()?;
    Ok(())
}

/// Prints a JSON document, pretty, with a final newline, as it is serialized (a large report
/// is never held as text).
pub fn print_json<T: serde::Serialize>(value: &T) -> Result<()> {
    write_with(|out| {
        serde_json::to_writer_pretty(&mut *out, value).map_err(std::io::Error::from)?;
        out.write_all(b"\n")
    })
}

/// Leaves `value` to the end of the process instead of freeing it: a decoded graph of a million
/// nodes is millions of small allocations, and freeing them one by one only delays the exit.
pub fn keep_until_exit<T>(value: T) {
    std::mem::forget(value);
}

/// True when the error is a write to a closed pipe.
pub fn is_broken_pipe(e: &anyhow::Error) -> bool {
    e.chain().any(|c| {
        c.downcast_ref::<std::io::Error>()
            .is_some_and(|io| io.kind() == std::io::ErrorKind::BrokenPipe)
    })
}
