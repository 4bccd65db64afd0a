//! Encoding a message straight into a file: the encoder writes into a small buffer that is
//! drained to the file whenever it fills, so saving a 200 MB model does not first build a
//! 200 MB vector.

use std::io::{self, Write};

use bytes::BufMut;
use bytes::buf::UninitSlice;
use prost::Message;

/// Bytes buffered before they are written out.
const CHUNK: usize = 1 << 20;

/// A [`BufMut`] that writes what it is given to `out`, keeping the first write error.
struct Streamed<W: Write> {
    out: W,
    buf: Vec<u8>,
    written: usize,
    error: Option<io::Error>,
}

impl<W: Write> Streamed<W> {
    fn drain(&mut self) {
        if self.error.is_none()
            && let Err(e) = self.out.write_all(&self.buf)
        {
            self.error = Some(e);
        }
        self.written += self.buf.len();
        self.buf.clear();
    }
}

// SAFETY: every method delegates to `Vec<u8>`'s implementation. Draining only moves the
// initialized bytes out between calls and keeps the vector's capacity, so it never invalidates
// a slice handed out by `chunk_mut` before the matching `advance_mut`.
unsafe impl<W: Write> BufMut for Streamed<W> {
    fn remaining_mut(&self) -> usize {
        isize::MAX as usize - self.written - self.buf.len()
    }

    unsafe fn advance_mut(&mut self, cnt: usize) {
        // SAFETY: the caller's contract for `cnt` is the one `Vec::advance_mut` requires.
        unsafe { self.buf.advance_mut(cnt) };
        if self.buf.len() >= CHUNK {
            self.drain();
        }
    }

    fn chunk_mut(&mut self) -> &mut UninitSlice {
        self.buf.chunk_mut()
    }
}

/// Writes the encoding of `message` to `out`, the same bytes `encode_to_vec` gives.
pub fn encode_into(message: &impl Message, out: impl Write) -> io::Result<()> {
    let mut sink = Streamed {
        out,
        buf: Vec::with_capacity(2 * CHUNK),
        written: 0,
        error: None,
    };
    message.encode(&mut sink).map_err(io::Error::other)?;
    sink.drain();
    match sink.error {
        Some(e) => Err(e),
        None => sink.out.flush(),
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::onnx::proto::{ModelProto, TensorProto};

    #[test]
    fn streamed_bytes_equal_the_encoded_vector() {
        // Several tensors larger than the buffer, and many small fields between them.
        let big = |n: usize| TensorProto {
            name: Some(format!("t{n}")),
            raw_data: Some(vec![n as u8; CHUNK + 12345 * n].into()),
            ..Default::default()
        };
        let mut model = ModelProto::default();
        let graph = model.graph.get_or_insert_default();
        graph.initializer = (0..3).map(big).collect();
        graph.doc_string = Some("x".repeat(1000));
        let mut out = Vec::new();
        encode_into(&model, &mut out).unwrap();
        assert_eq!(out, model.encode_to_vec());
    }
}
