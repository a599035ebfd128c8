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
//! | `engine` | `arena` u32, `trainer` u32, `float_arena` u32, `twin` u32, `blob` u32 (bytes: fixed-point arena, `Trainer`, `f32` arena, `Twin<f32>`, decoded blob), `fwd_macs` u32, `bwd_macs` u32 (per training sample) |
//! | `guard` | `set` str, `verdict` str (`accept`, `reject-loss`, `reject-saturation`), `before` i64, `after` i64 (mean hold-out loss, 24 fraction bits), `before_sat` u32, `after_sat` u32, `trained` u32, `steps` u32, `updates` u32 |
//! | `tput` | `inputs` u32, `outputs` u32, `params` u32 (values per sample and parameter values of the throughput model), `pool` u32 (distinct samples drawn), `samples` u32 (samples trained), `macs` u32 (per training sample), `arena` u32, `float_arena` u32 (bytes) |
//! | `stack` | `phase` str, `entry` u32 (stack depth where the phase starts), `peak` u32 (deepest point during the phase), bytes from the stack top |
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

/// Sizes the training engine reports about itself.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct EngineSizes {
    /// Bytes of the fixed-point arena (the memory plan's figure).
    pub arena: u32,
    /// `size_of::<Trainer>()`.
    pub trainer: u32,
    /// Bytes of the `f32` twin's arena.
    pub float_arena: u32,
    /// `size_of::<Twin<f32>>()`.
    pub twin: u32,
    /// `size_of::<CheckedBlob>()`: a decoded blob, as the guard keeps the last good one.
    pub blob: u32,
    /// Multiply-accumulates of one forward pass.
    pub forward_macs: u32,
    /// Multiply-accumulates of one backward pass over the trained layers.
    pub backward_macs: u32,
}

/// Logs the engine's sizes.
pub fn engine(e: &EngineSizes) {
    defmt::info!(
        "hone:engine arena={=u32} trainer={=u32} float_arena={=u32} twin={=u32} blob={=u32} fwd_macs={=u32} bwd_macs={=u32}",
        e.arena,
        e.trainer,
        e.float_arena,
        e.twin,
        e.blob,
        e.forward_macs,
        e.backward_macs
    );
}

/// What one guarded calibration did.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct GuardRecord<'a> {
    /// Sample set: `calib` or `faulty`.
    pub set: &'a str,
    /// `accept`, `reject-loss` or `reject-saturation`.
    pub verdict: &'a str,
    /// Mean hold-out loss before training, raw with 24 fraction bits.
    pub before: i64,
    /// Mean hold-out loss after training, raw with 24 fraction bits.
    pub after: i64,
    /// Saturated activations on the hold-out samples before training.
    pub before_saturations: u32,
    /// Saturated activations on the hold-out samples after training.
    pub after_saturations: u32,
    /// Samples trained on.
    pub trained: u32,
    /// The trainer's step count at the end (after a rollback, as the factory blob left it).
    pub steps: u32,
    /// The trainer's update count at the end.
    pub updates: u32,
}

/// Logs the outcome of a guarded calibration.
pub fn guard(g: &GuardRecord<'_>) {
    defmt::info!(
        "hone:guard set={=str} verdict={=str} before={=i64} after={=i64} before_sat={=u32} after_sat={=u32} trained={=u32} steps={=u32} updates={=u32}",
        g.set,
        g.verdict,
        g.before,
        g.after,
        g.before_saturations,
        g.after_saturations,
        g.trained,
        g.steps,
        g.updates
    );
}

/// The throughput phase's model and workload.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct ThroughputRecord {
    /// Input values per sample.
    pub inputs: u32,
    /// Output values per sample.
    pub outputs: u32,
    /// Parameter values of the model.
    pub params: u32,
    /// Distinct samples drawn.
    pub pool: u32,
    /// Samples trained in each arithmetic.
    pub samples: u32,
    /// Multiply-accumulates of one training sample.
    pub macs: u32,
    /// Bytes of the fixed-point arena.
    pub arena: u32,
    /// Bytes of the `f32` arena.
    pub float_arena: u32,
}

/// Logs the throughput phase's model and workload.
pub fn throughput(t: &ThroughputRecord) {
    defmt::info!(
        "hone:tput inputs={=u32} outputs={=u32} params={=u32} pool={=u32} samples={=u32} macs={=u32} arena={=u32} float_arena={=u32}",
        t.inputs,
        t.outputs,
        t.params,
        t.pool,
        t.samples,
        t.macs,
        t.arena,
        t.float_arena
    );
}

/// Logs the stack of one phase: the depth where it started and the deepest point it reached,
/// both in bytes from the stack top.
pub fn stack(phase: &str, entry: u32, peak: u32) {
    defmt::info!(
        "hone:stack phase={=str} entry={=u32} peak={=u32}",
        phase,
        entry,
        peak
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
