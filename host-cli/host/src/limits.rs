//! The largest size of each kind of file hone reads. A file larger than its limit is refused
//! before it is read (`hone_report::fsutil::read_limited`), so no input can make hone allocate
//! more than its limit.

/// A model blob, checkpoint or flash image: the largest flash of any chip in the built-in
/// table (16 MiB), which no blob or checkpoint area can exceed. Also the largest
/// `checkpoint write --region`.
pub const FLASH_BYTES: u64 = 16 * 1024 * 1024;
/// A float model (JSON): 64 MiB. A model whose parameters fit [`FLASH_BYTES`] as 8-bit
/// words needs fewer than four bytes of JSON text per parameter on average to stay below.
pub const MODEL_BYTES: u64 = 64 * 1024 * 1024;
/// A config (TOML): 1 MiB, far above any real description.
pub const CONFIG_BYTES: u64 = 1024 * 1024;
/// A data file (CSV): 1 GiB.
pub const CSV_BYTES: u64 = 1024 * 1024 * 1024;
