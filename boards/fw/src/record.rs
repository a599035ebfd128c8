//! The fixed record shapes the firmware writes through `defmt`.
//!
//! Every record is one `defmt` frame whose format string starts with `hone:<kind>` followed by
//! space-separated `key={=type}` fields. The host decoder matches records by kind and reads fields
//! by key, so fields can be appended in later protocol versions without breaking older hosts.
//! The field types are fixed per record so the host can check them.
//!
//! | kind | fields |
//! |---|---|
//! | `boot` | `proto` u8, `board` str, `unit` str (`insn` or `cycle`), `num` u32, `den` u32 (units per tick = num/den) |
//! | `calib` | `iters` u32, `insns` u64, `ticks` u64, `ok` bool |
//! | `span` | `name` str, `work` u32, `ticks` u64, `units` u64, `milli_per_work` u64 |
//! | `dot` | `name` str, `len` u32, `reps` u32, `seed` u32, `total` i64 |
//! | `sensor` | `name` str, `samples` u32, `min` u32, `max` u32, `mean` u32 (raw converter counts) |
//! | `mem` | `text` u32, `rodata` u32, `data` u32, `bss` u32, `uninit` u32, `static_ram` u32, `stack_size` u32, `stack_peak` u32 |
//! | `blob-begin` | `id` u16, `name` str, `len` u32 |
//! | `blob` | `id` u16, `off` u32, `data` `[u8]` |
//! | `blob-end` | `id` u16, `len` u32, `chunks` u32, `crc` u32 (CRC-32/ISO-HDLC of the payload) |
//! | `error` | `what` str |
//! | `panic` | `file` str, `line` u32 |
//! | `fault` | `pc` u32 |
//! | `done` | `code` i32 |

use crate::measure::{Calibration, Span};
use crate::memory::{StackUsage, StaticMemory};
use crate::platform::TickUnit;

/// Version of the record set above. Bump it when a field changes meaning or type.
pub const PROTOCOL: u8 = 1;

/// Logs the boot record.
pub fn boot(board: &str, unit: TickUnit) {
    let (num, den) = unit.ratio();
    defmt::info!(
        "hone:boot proto={=u8} board={=str} unit={=str} num={=u32} den={=u32}",
        PROTOCOL,
        board,
        unit.name(),
        num,
        den
    );
}

/// Logs the counter calibration result.
pub fn calib(c: &Calibration) {
    defmt::info!(
        "hone:calib iters={=u32} insns={=u64} ticks={=u64} ok={=bool}",
        c.iterations,
        c.instructions,
        c.ticks,
        c.ok
    );
}

/// Logs one measured span of work.
pub fn span(name: &str, s: &Span) {
    defmt::info!(
        "hone:span name={=str} work={=u32} ticks={=u64} units={=u64} milli_per_work={=u64}",
        name,
        s.work,
        s.ticks,
        s.units,
        s.milli_units_per_work()
    );
}

/// Logs the result of a repeated dot product so the host can recompute and compare it.
pub fn dot(name: &str, len: u32, reps: u32, seed: u32, total: i64) {
    defmt::info!(
        "hone:dot name={=str} len={=u32} reps={=u32} seed={=u32} total={=i64}",
        name,
        len,
        reps,
        seed,
        total
    );
}

/// Logs a summary of raw sensor readings (converter counts).
pub fn sensor(name: &str, samples: u32, min: u32, max: u32, mean: u32) {
    defmt::info!(
        "hone:sensor name={=str} samples={=u32} min={=u32} max={=u32} mean={=u32}",
        name,
        samples,
        min,
        max,
        mean
    );
}

/// Logs static memory figures and the stack high-water mark.
pub fn mem(m: &StaticMemory, s: &StackUsage) {
    defmt::info!(
        "hone:mem text={=u32} rodata={=u32} data={=u32} bss={=u32} uninit={=u32} static_ram={=u32} stack_size={=u32} stack_peak={=u32}",
        m.text,
        m.rodata,
        m.data,
        m.bss,
        m.uninit,
        m.ram(),
        s.size,
        s.peak
    );
}

/// Logs the start of a byte payload.
pub fn blob_begin(id: u16, name: &str, len: u32) {
    defmt::info!(
        "hone:blob-begin id={=u16} name={=str} len={=u32}",
        id,
        name,
        len
    );
}

/// Logs one chunk of a byte payload at byte offset `off`.
pub fn blob_chunk(id: u16, off: u32, data: &[u8]) {
    defmt::info!("hone:blob id={=u16} off={=u32} data={=[u8]}", id, off, data);
}

/// Logs the end of a byte payload with its length, chunk count and CRC-32.
pub fn blob_end(id: u16, len: u32, chunks: u32, crc: u32) {
    defmt::info!(
        "hone:blob-end id={=u16} len={=u32} chunks={=u32} crc={=u32}",
        id,
        len,
        chunks,
        crc
    );
}

/// Logs a failure that ends the run.
pub fn error(what: &str) {
    defmt::error!("hone:error what={=str}", what);
}

/// Logs a panic location.
pub fn panic(file: &str, line: u32) {
    defmt::error!("hone:panic file={=str} line={=u32}", file, line);
}

/// Logs a CPU fault at program counter `pc`.
pub fn fault(pc: u32) {
    defmt::error!("hone:fault pc={=u32}", pc);
}

/// Logs the exit status just before the firmware exits.
pub fn done(code: i32) {
    defmt::info!("hone:done code={=i32}", code);
}
