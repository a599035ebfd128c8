//! Sending byte payloads to the host through `defmt`, in chunks with a CRC-32 check.
//!
//! A payload is a `blob-begin` record with its declared length, `blob` records carrying at most
//! [`CHUNK`] bytes each with their byte offset, and a `blob-end` record with the number of chunks and
//! the CRC-32 of all bytes. The host reassembles by offset and checks length, chunk count and CRC.

use crate::record;
use crate::session::SessionError;

/// Largest number of payload bytes in one `blob` record.
pub const CHUNK: usize = 256;

/// CRC-32/ISO-HDLC (the zlib / Ethernet CRC), computed bit by bit to keep flash use small.
#[derive(Clone, Copy, Debug)]
pub struct Crc32 {
    state: u32,
}

impl Default for Crc32 {
    fn default() -> Self {
        Self::new()
    }
}

impl Crc32 {
    /// Starts a new checksum.
    #[must_use]
    pub const fn new() -> Self {
        Self { state: !0 }
    }

    /// Feeds bytes into the checksum.
    pub fn update(&mut self, bytes: &[u8]) {
        for &b in bytes {
            self.state ^= u32::from(b);
            for _ in 0..8 {
                let mask = (self.state & 1).wrapping_neg();
                self.state = (self.state >> 1) ^ (0xEDB8_8320 & mask);
            }
        }
    }

    /// The checksum of all bytes fed so far.
    #[must_use]
    pub const fn value(&self) -> u32 {
        !self.state
    }
}

/// An open payload being streamed to the host. Obtain one from [`crate::Ctx::blob`].
#[derive(Debug)]
pub struct BlobWriter {
    id: u16,
    len: u32,
    written: u32,
    chunks: u32,
    crc: Crc32,
}

impl BlobWriter {
    /// Logs the `blob-begin` record and returns the writer.
    pub(crate) fn begin(id: u16, name: &str, len: u32) -> Self {
        record::blob_begin(id, name, len);
        Self {
            id,
            len,
            written: 0,
            chunks: 0,
            crc: Crc32::new(),
        }
    }

    /// Payload id, unique within one run.
    #[must_use]
    pub const fn id(&self) -> u16 {
        self.id
    }

    /// Sends `bytes` as one or more `blob` records.
    ///
    /// # Errors
    /// [`SessionError::BlobOverrun`] when the bytes would go past the declared length; nothing
    /// is sent then.
    pub fn write(&mut self, bytes: &[u8]) -> Result<(), SessionError> {
        let fits = u32::try_from(bytes.len())
            .ok()
            .and_then(|n| self.written.checked_add(n))
            .is_some_and(|end| end <= self.len);
        if !fits {
            return Err(SessionError::BlobOverrun { id: self.id });
        }
        for chunk in bytes.chunks(CHUNK) {
            record::blob_chunk(self.id, self.written, chunk);
            self.crc.update(chunk);
            self.written += chunk.len() as u32;
            self.chunks += 1;
        }
        Ok(())
    }

    /// Logs the `blob-end` record.
    ///
    /// # Errors
    /// [`SessionError::BlobShort`] when fewer bytes than declared were written; the end record
    /// is still sent so the host sees the mismatch too.
    pub fn finish(self) -> Result<(), SessionError> {
        record::blob_end(self.id, self.written, self.chunks, self.crc.value());
        if self.written == self.len {
            Ok(())
        } else {
            Err(SessionError::BlobShort {
                id: self.id,
                declared: self.len,
                written: self.written,
            })
        }
    }
}
