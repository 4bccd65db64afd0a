//! Writing to standard output; a closed pipe (`actswap scan m.onnx | head`) ends quietly.

use std::io::Write;

use anyhow::Result;

/// Prints `text` to standard output.
pub fn print(text: &str) -> Result<()> {
    let mut out = std::io::stdout().lock();
    out.write_all(text.as_bytes())?;
    out.flush()?;
    Ok(())
}

/// Prints a JSON document, pretty, with a final newline.
pub fn print_json<T: serde::Serialize>(value: &T) -> Result<()> {
    print(&(serde_json::to_string_pretty(value)? + "\n"))
}

/// True when the error is a write to a closed pipe.
pub fn is_broken_pipe(e: &anyhow::Error) -> bool {
    e.chain().any(|c| {
        c.downcast_ref::<std::io::Error>()
            .is_some_and(|io| io.kind() == std::io::ErrorKind::BrokenPipe)
    })
}
