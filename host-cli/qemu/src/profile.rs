//! Where a board's training step spends its instructions: a per-function profile from a QEMU
//! execution trace, symbolised with the firmware's ELF.
//!
//! QEMU 7.2 (Debian's) ships no plugins, so the profile is built from two of its debug logs,
//! streamed from its stderr and never written to disk:
//!
//! - `in_asm` prints every translation block (TB) once, when it is translated: its guest
//!   address and one line per guest instruction, which gives the block's instruction count;
//! - `exec` with `nochain` prints one line per executed block (its host code pointer and guest
//!   address), so every execution is seen.
//!
//! Each executed block's instructions are charged to the function that holds its first
//! instruction (a block ends at every branch, so it rarely runs into the next function). The
//! training phase is found with a shadow call stack kept from the block addresses: a block that
//! starts at a function's first instruction is a call, a block in the middle of a function
//! further down the stack is a return to it. The phase is the dynamic extent of one call of
//! the core's out-of-line training phase ([`TRAIN_ROOT`], which the session of
//! `hone_core::session` calls for every set it trains): the first call trains the calibration
//! set, the second the mislabelled set, the third (on boards with one) the throughput phase's
//! larger model. The firmware times exactly that call with its own
//! counter (the `calib_train`, `faulty_train` and `tput_train` spans), so the two counts can
//! be compared; QEMU is stopped as soon as the phase is over.
//!
//! Instruction counts are exact while QEMU runs with `-icount shift=0`: a block cut short by
//! the instruction budget or by an I/O access is translated again with its shorter length, and
//! logged again.

use std::collections::HashMap;
use std::ffi::OsString;
use std::fmt::Write as _;
use std::io::{BufRead, BufReader, Read};
use std::path::Path;
use std::process::Stdio;
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::Arc;
use std::thread;
use std::time::{Duration, Instant};

use object::{Object, ObjectSymbol, SymbolKind};
use serde::Serialize;

use crate::qemu::spawn;
use crate::{DeviceError, QemuBoard};

/// The function whose calls are the training phases (`core/src/guard.rs`).
pub const TRAIN_ROOT: &str = "hone_core::guard::train_phase";

/// Which part of the run to profile.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Phase {
    /// Training on the calibration set: the first call of [`TRAIN_ROOT`] (span `calib_train`).
    Calib,
    /// Training on the mislabelled set: the second call (span `faulty_train`).
    Faulty,
    /// The throughput phase's fixed-point training: the third call (span `tput_train`).
    Tput,
    /// The whole run, boot to exit.
    Whole,
}

impl Phase {
    /// Every phase, in the order of the command line's help.
    pub const ALL: [Self; 4] = [Self::Calib, Self::Faulty, Self::Tput, Self::Whole];

    /// Its name on the command line.
    #[must_use]
    pub const fn name(self) -> &'static str {
        match self {
            Self::Calib => "calib",
            Self::Faulty => "faulty",
            Self::Tput => "tput",
            Self::Whole => "whole",
        }
    }

    /// The firmware's span that times the same code, if any.
    #[must_use]
    pub const fn span(self) -> Option<&'static str> {
        match self {
            Self::Calib => Some("calib_train"),
            Self::Faulty => Some("faulty_train"),
            Self::Tput => Some("tput_train"),
            Self::Whole => None,
        }
    }

    /// Which call of [`TRAIN_ROOT`] the phase is, counted from 1.
    const fn call(self) -> Option<u64> {
        match self {
            Self::Calib => Some(1),
            Self::Faulty => Some(2),
            Self::Tput => Some(3),
            Self::Whole => None,
        }
    }
}

/// A phase name that is not one of [`Phase::ALL`].
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
#[error("`{0}` is not a phase; use one of {names}", names = Phase::ALL.map(Phase::name).join(", "))]
pub struct UnknownPhase(pub String);

impl std::str::FromStr for Phase {
    type Err = UnknownPhase;

    fn from_str(s: &str) -> Result<Self, Self::Err> {
        Self::ALL
            .into_iter()
            .find(|p| p.name() == s)
            .ok_or_else(|| UnknownPhase(s.to_owned()))
    }
}

/// Instructions charged to one function.
#[derive(Clone, Debug, PartialEq, Eq, Serialize)]
pub struct FunctionCount {
    /// Demangled name without its hash; monomorphic copies of one generic function share it.
    pub function: String,
    /// Instructions executed in the phase.
    pub instructions: u64,
}

/// The outcome of [`profile_elf`].
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct Profile {
    /// Board name.
    pub board: &'static str,
    /// The profiled phase.
    pub phase: Phase,
    /// Every function that ran in the phase, most instructions first.
    pub functions: Vec<FunctionCount>,
    /// Instructions of the phase.
    pub total: u64,
    /// Executed blocks whose length was not known (no `in_asm` record matched them), each
    /// counted as one instruction. Zero in a sound trace.
    pub unsized_blocks: u64,
    /// Instructions traced in the whole run up to where it was stopped.
    pub traced: u64,
    /// Wall-clock seconds of the traced run.
    pub wall_seconds: f64,
}

impl Profile {
    /// Instructions of the function named `name` (exact, demangled, no hash).
    #[must_use]
    pub fn instructions_of(&self, name: &str) -> u64 {
        self.functions
            .iter()
            .filter(|f| f.function == name)
            .map(|f| f.instructions)
            .sum()
    }

    /// An aligned table of the `top` functions with the most instructions, and a total line.
    #[must_use]
    pub fn render(&self, top: usize) -> String {
        let mut out = String::new();
        let _ = writeln!(
            out,
            "{}: {} instructions in phase `{}`{} ({} functions; QEMU trace, {:.1} s)",
            self.board,
            self.total,
            self.phase.name(),
            match self.phase.span() {
                Some(span) => format!(" (the firmware's span `{span}`)"),
                None => String::new(),
            },
            self.functions.len(),
            self.wall_seconds
        );
        let _ = writeln!(out, "{:>14}  {:>6}  function", "instructions", "share");
        for f in self.functions.iter().take(top) {
            let _ = writeln!(
                out,
                "{:>14}  {:>5.1}%  {}",
                f.instructions,
                100.0 * f.instructions as f64 / self.total.max(1) as f64,
                f.function
            );
        }
        let rest: u64 = self
            .functions
            .iter()
            .skip(top)
            .map(|f| f.instructions)
            .sum();
        if self.functions.len() > top {
            let _ = writeln!(
                out,
                "{:>14}  {:>5.1}%  ({} more functions)",
                rest,
                100.0 * rest as f64 / self.total.max(1) as f64,
                self.functions.len() - top
            );
        }
        if self.unsized_blocks > 0 {
            let _ = writeln!(
                out,
                "note: {} executed blocks had no known length and count as one instruction",
                self.unsized_blocks
            );
        }
        out
    }
}

/// The ELF's functions, sorted by address, for looking up a program counter.
#[derive(Clone, Debug, Default)]
pub struct Symbols {
    /// `(start, end, name index)`, sorted by start.
    ranges: Vec<(u64, u64, usize)>,
    /// Demangled names without hash, deduplicated.
    names: Vec<String>,
}

impl Symbols {
    /// Reads the function symbols of an ELF image. Thumb addresses lose their low bit.
    ///
    /// # Errors
    /// [`DeviceError::Elf`] when the image cannot be parsed.
    pub fn from_elf(elf: &[u8], path: &Path) -> Result<Self, DeviceError> {
        let file = object::File::parse(elf).map_err(|e| DeviceError::Elf {
            path: path.to_owned(),
            detail: e.to_string(),
        })?;
        let mut index: HashMap<String, usize> = HashMap::new();
        let mut s = Symbols::default();
        for sym in file.symbols() {
            if sym.kind() != SymbolKind::Text || sym.size() == 0 {
                continue;
            }
            let Ok(raw) = sym.name() else { continue };
            let name = format!("{:#}", rustc_demangle::demangle(raw));
            let next = s.names.len();
            let i = *index.entry(name.clone()).or_insert(next);
            if i == next {
                s.names.push(name);
            }
            let start = sym.address() & !1;
            s.ranges.push((start, start + sym.size(), i));
        }
        s.ranges.sort_unstable();
        Ok(s)
    }

    /// Builds a table from `(start, size, name)` triples (for tests).
    #[must_use]
    pub fn from_list(list: &[(u64, u64, &str)]) -> Self {
        let mut s = Symbols::default();
        for &(start, size, name) in list {
            let i = match s.names.iter().position(|n| n == name) {
                Some(i) => i,
                None => {
                    s.names.push(name.to_owned());
                    s.names.len() - 1
                }
            };
            s.ranges.push((start, start + size, i));
        }
        s.ranges.sort_unstable();
        s
    }

    /// The function holding `pc`: its range index.
    fn lookup(&self, pc: u64) -> Option<usize> {
        let after = self.ranges.partition_point(|r| r.0 <= pc);
        let i = after.checked_sub(1)?;
        (pc < self.ranges[i].1).then_some(i)
    }

    /// Whether name index `name` is the function called `wanted`.
    fn is(&self, range: usize, wanted: &str) -> bool {
        self.names[self.ranges[range].2] == wanted
    }

    /// Whether a function called `name` exists.
    #[must_use]
    pub fn contains(&self, name: &str) -> bool {
        self.names.iter().any(|n| n == name)
    }
}

/// Range index standing for code outside every function symbol.
const UNKNOWN: usize = usize::MAX;

/// Folds QEMU's `in_asm` and `exec` log lines into per-function counts.
#[derive(Debug)]
pub struct TraceFolder<'a> {
    symbols: &'a Symbols,
    /// The call of [`TRAIN_ROOT`] to profile; `None` for the whole run.
    call: Option<u64>,
    /// Host code pointer of a translated block → (guest address, instructions).
    blocks: HashMap<u64, (u64, u64)>,
    /// The block being read from `in_asm`: (guest address, instructions so far).
    reading: Option<(u64, u64)>,
    /// The last block read completely.
    last: Option<(u64, u64)>,
    /// Shadow call stack of range indices.
    stack: Vec<usize>,
    /// Calls of the root seen so far.
    calls: u64,
    /// Stack depth of the root while the profiled call runs.
    active: Option<usize>,
    done: bool,
    /// Per range index (and [`UNKNOWN`] last): instructions in the phase.
    counts: Vec<u64>,
    total: u64,
    traced: u64,
    unsized_blocks: u64,
}

impl<'a> TraceFolder<'a> {
    /// A folder for `phase` over `symbols`.
    #[must_use]
    pub fn new(symbols: &'a Symbols, phase: Phase) -> Self {
        TraceFolder {
            symbols,
            call: phase.call(),
            blocks: HashMap::new(),
            reading: None,
            last: None,
            stack: Vec::new(),
            calls: 0,
            active: None,
            done: false,
            counts: vec![0; symbols.ranges.len() + 1],
            total: 0,
            traced: 0,
            unsized_blocks: 0,
        }
    }

    /// Whether the profiled call has returned (never for the whole run).
    #[must_use]
    pub fn done(&self) -> bool {
        self.done
    }

    /// Takes one log line (without its newline).
    pub fn line(&mut self, line: &[u8]) {
        if let Some(rest) = line.strip_prefix(b"Trace ") {
            self.finish_block();
            if let Some((host, pc)) = parse_exec(rest) {
                self.executed(host, pc);
            }
        } else if line.starts_with(b"IN:") {
            self.finish_block();
            self.reading = Some((u64::MAX, 0));
        } else if let Some((pc, n)) = &mut self.reading {
            if line.is_empty() {
                self.finish_block();
            } else if let Some(addr) = parse_insn_addr(line) {
                if *n == 0 {
                    *pc = addr;
                }
                *n += 1;
            }
        }
    }

    fn finish_block(&mut self) {
        if let Some(b) = self.reading.take() {
            if b.1 > 0 {
                self.last = Some(b);
            }
        }
    }

    fn executed(&mut self, host: u64, pc: u64) {
        let len = match self.blocks.get(&host) {
            Some(&(at, n)) if at == pc => Some(n),
            _ => match self.last {
                Some((at, n)) if at == pc => {
                    self.blocks.insert(host, (at, n));
                    Some(n)
                }
                _ => None,
            },
        };
        let n = len.unwrap_or(1);
        self.traced += n;
        let f = self.symbols.lookup(pc).unwrap_or(UNKNOWN);
        self.follow(f, pc);
        let counting = match self.call {
            None => true,
            Some(_) => self.active.is_some(),
        };
        if counting {
            if len.is_none() {
                self.unsized_blocks += 1;
            }
            self.total += n;
            let slot = if f == UNKNOWN {
                self.counts.len() - 1
            } else {
                f
            };
            self.counts[slot] += n;
        }
    }

    /// Updates the shadow call stack for a block of function `f` starting at `pc`.
    fn follow(&mut self, f: usize, pc: u64) {
        let top = self.stack.last().copied();
        if top == Some(f) {
            return;
        }
        let at_start = f != UNKNOWN && self.symbols.ranges[f].0 == pc;
        let below = (!at_start)
            .then(|| self.stack.iter().rposition(|&g| g == f))
            .flatten();
        match below {
            // A return into a caller: drop the frames above it.
            Some(depth) => self.stack.truncate(depth + 1),
            // A call (or a jump into code never seen entered).
            None => {
                self.stack.push(f);
                if at_start && self.symbols.is(f, TRAIN_ROOT) {
                    self.calls += 1;
                    if self.call == Some(self.calls) {
                        self.active = Some(self.stack.len() - 1);
                    }
                }
            }
        }
        if self.active.is_some_and(|depth| self.stack.len() <= depth) {
            self.active = None;
            self.done = true;
        }
    }

    /// The counts gathered, as a profile.
    #[must_use]
    pub fn finish(self, board: &'static str, phase: Phase, wall: Duration) -> Profile {
        let mut by_name: HashMap<&str, u64> = HashMap::new();
        for (i, &n) in self.counts.iter().enumerate() {
            if n == 0 {
                continue;
            }
            let name = match self.symbols.ranges.get(i) {
                Some(r) => self.symbols.names[r.2].as_str(),
                None => "(outside every function symbol)",
            };
            *by_name.entry(name).or_default() += n;
        }
        let mut functions: Vec<FunctionCount> = by_name
            .into_iter()
            .map(|(function, instructions)| FunctionCount {
                function: function.to_owned(),
                instructions,
            })
            .collect();
        functions.sort_by(|a, b| {
            b.instructions
                .cmp(&a.instructions)
                .then_with(|| a.function.cmp(&b.function))
        });
        Profile {
            board,
            phase,
            functions,
            total: self.total,
            unsized_blocks: self.unsized_blocks,
            traced: self.traced,
            wall_seconds: wall.as_secs_f64(),
        }
    }
}

/// `0: 0x7f0c2c000100 [00000000/00000524/...] ...` → (host pointer, guest address).
fn parse_exec(rest: &[u8]) -> Option<(u64, u64)> {
    let text = std::str::from_utf8(rest).ok()?;
    let (_, after) = text.split_once(": ")?;
    let (host, after) = after.split_once(" [")?;
    let host = u64::from_str_radix(host.trim_start_matches("0x"), 16).ok()?;
    let mut fields = after.split('/');
    let _cs_base = fields.next()?;
    let pc = u64::from_str_radix(fields.next()?, 16).ok()?;
    Some((host, pc))
}

/// `0x00000524:  b580  push {r7, lr}` → the address.
fn parse_insn_addr(line: &[u8]) -> Option<u64> {
    let text = std::str::from_utf8(line).ok()?;
    let (addr, _) = text.strip_prefix("0x")?.split_once(':')?;
    u64::from_str_radix(addr, 16).ok()
}

/// What [`profile_elf`] works with.
#[derive(Clone, Debug)]
pub struct ProfileOptions {
    /// The part of the run to profile.
    pub phase: Phase,
    /// Time limit of the traced run (tracing slows QEMU down about tenfold).
    pub timeout: Duration,
}

impl Default for ProfileOptions {
    fn default() -> Self {
        ProfileOptions {
            phase: Phase::Calib,
            timeout: Duration::from_secs(600),
        }
    }
}

/// Runs `elf` on `board` under QEMU with an execution trace and profiles `opts.phase`.
///
/// # Errors
/// [`DeviceError::Io`] or [`DeviceError::Elf`] for an unreadable image,
/// [`DeviceError::Protocol`] when the image has no [`TRAIN_ROOT`] or the phase never ran,
/// [`DeviceError::QemuMissing`] or [`DeviceError::Spawn`] when QEMU cannot start, and
/// [`DeviceError::Timeout`] when the run does not end in time.
pub fn profile_elf(
    board: QemuBoard,
    elf: &Path,
    opts: &ProfileOptions,
) -> Result<Profile, DeviceError> {
    let bytes = std::fs::read(elf).map_err(|source| DeviceError::Io {
        path: elf.to_owned(),
        source,
    })?;
    let symbols = Symbols::from_elf(&bytes, elf)?;
    if opts.phase != Phase::Whole && !symbols.contains(TRAIN_ROOT) {
        return Err(DeviceError::Protocol {
            line: 0,
            detail: format!(
                "{}: no function `{TRAIN_ROOT}` in the image; profile it with phase `whole`",
                elf.display()
            ),
        });
    }
    let mut args: Vec<OsString> = ["-d", "in_asm,exec,nochain"]
        .iter()
        .map(OsString::from)
        .collect();
    args.extend(board.qemu_args(elf));
    let start = Instant::now();
    let mut child = spawn(board, board.qemu_program(), &args, Stdio::piped())?;
    let stdout = child.stdout.take();
    let stderr = child.stderr.take();
    // The firmware's own output is not needed; drain it so QEMU never blocks.
    let drain = thread::spawn(move || {
        if let Some(mut out) = stdout {
            let _ = std::io::copy(&mut out, &mut std::io::sink());
        }
    });
    let stop = Arc::new(AtomicBool::new(false));
    let stop_flag = Arc::clone(&stop);
    let phase = opts.phase;
    let deadline = start + opts.timeout;
    let folded = thread::scope(|scope| {
        let reader = scope.spawn(|| {
            let mut folder = TraceFolder::new(&symbols, phase);
            if let Some(err) = stderr {
                fold_stream(err, &mut folder);
            }
            stop_flag.store(true, Ordering::Relaxed);
            folder
        });
        let status = loop {
            if stop.load(Ordering::Relaxed) {
                let _ = child.kill();
                break child.wait().ok();
            }
            match child.try_wait() {
                Ok(Some(s)) => break Some(s),
                Ok(None) if Instant::now() < deadline => thread::sleep(Duration::from_millis(5)),
                _ => {
                    let _ = child.kill();
                    let _ = child.wait();
                    break None;
                }
            }
        };
        (status, reader.join())
    });
    let _ = drain.join();
    let wall = start.elapsed();
    let (status, folder) = folded;
    let folder = folder.map_err(|_| DeviceError::Protocol {
        line: 0,
        detail: "the trace reader stopped unexpectedly".to_owned(),
    })?;
    if status.is_none() && !folder.done() {
        return Err(DeviceError::Timeout {
            board: board.name(),
            after: opts.timeout,
            stdout_bytes: 0,
        });
    }
    if phase != Phase::Whole && !folder.done() {
        return Err(DeviceError::Protocol {
            line: 0,
            detail: format!(
                "{board}: the run ended before phase `{}` (call {} of `{TRAIN_ROOT}`) finished",
                phase.name(),
                phase.call().unwrap_or(0)
            ),
        });
    }
    Ok(folder.finish(board.name(), phase, wall))
}

/// Feeds a log stream to `folder` line by line until it ends or the phase is over.
fn fold_stream(stream: impl Read, folder: &mut TraceFolder<'_>) {
    let mut reader = BufReader::with_capacity(1 << 20, stream);
    let mut line = Vec::with_capacity(256);
    loop {
        line.clear();
        match reader.read_until(b'\n', &mut line) {
            Ok(0) | Err(_) => break,
            Ok(_) => {}
        }
        if line.last() == Some(&b'\n') {
            line.pop();
        }
        folder.line(&line);
        if folder.done() {
            break;
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn fold(symbols: &Symbols, phase: Phase, log: &str) -> Profile {
        let mut f = TraceFolder::new(symbols, phase);
        fold_stream(log.as_bytes(), &mut f);
        f.finish("test", phase, Duration::ZERO)
    }

    /// A made-up trace: `main` calls the root twice; the root calls `dot`, which loops.
    fn symbols() -> Symbols {
        Symbols::from_list(&[
            (0x100, 0x40, "main"),
            (0x200, 0x40, TRAIN_ROOT),
            (0x300, 0x20, "dot"),
        ])
    }

    const LOG: &str = "\
IN: main
0x00000100:  b580       push     {r7, lr}
0x00000102:  f000 f87d  bl       #0x200

Trace 0: 0x7f0000000100 [00000000/00000100/00000000/ff200000] main
IN: root
0x00000200:  b580       push     {r7, lr}
0x00000202:  f000 f87d  bl       #0x300

Trace 0: 0x7f0000000200 [00000000/00000200/00000000/ff200000] root
IN: dot
0x00000300:  3801       subs     r0, #1
0x00000302:  d1fd       bne      #0x300

Trace 0: 0x7f0000000300 [00000000/00000300/00000000/ff200000] dot
Trace 0: 0x7f0000000300 [00000000/00000300/00000000/ff200000] dot
IN: dot
0x00000304:  4770       bx       lr

Trace 0: 0x7f0000000400 [00000000/00000304/00000000/ff200000] dot
IN: root
0x00000206:  bd80       pop      {r7, pc}

Trace 0: 0x7f0000000500 [00000000/00000206/00000000/ff200000] root
IN: main
0x00000106:  f000 f87d  bl       #0x200

Trace 0: 0x7f0000000600 [00000000/00000106/00000000/ff200000] main
Trace 0: 0x7f0000000200 [00000000/00000200/00000000/ff200000] root
Trace 0: 0x7f0000000500 [00000000/00000206/00000000/ff200000] root
Trace 0: 0x7f0000000600 [00000000/00000106/00000000/ff200000] main
";

    #[test]
    fn the_first_call_of_the_root_is_counted_alone() {
        let p = fold(&symbols(), Phase::Calib, LOG);
        // root: 2 + 1; dot: 2 + 2 + 1.
        assert_eq!(p.total, 8);
        assert_eq!(p.instructions_of("dot"), 5);
        assert_eq!(p.instructions_of(TRAIN_ROOT), 3);
        assert_eq!(p.instructions_of("main"), 0);
        assert_eq!(p.functions[0].function, "dot");
        assert_eq!(p.unsized_blocks, 0);
    }

    #[test]
    fn the_second_call_and_the_whole_run() {
        let p = fold(&symbols(), Phase::Faulty, LOG);
        // The second call: the root's two blocks only (dot was not called).
        assert_eq!(p.total, 3);
        let whole = fold(&symbols(), Phase::Whole, LOG);
        assert_eq!(whole.total, 2 + 8 + 1 + 3 + 1);
        assert_eq!(whole.instructions_of("main"), 2 + 1 + 1);
        // The third call never happens.
        let table = symbols();
        let mut f = TraceFolder::new(&table, Phase::Tput);
        fold_stream(LOG.as_bytes(), &mut f);
        assert!(!f.done());
    }

    #[test]
    fn blocks_without_a_translation_record_are_flagged() {
        let log = "Trace 0: 0x7f0000000900 [00000000/00000100/00000000/ff200000] main\n";
        let p = fold(&symbols(), Phase::Whole, log);
        assert_eq!((p.total, p.unsized_blocks), (1, 1));
        let table = p.render(10);
        assert!(table.contains("no known length"), "{table}");
    }

    #[test]
    fn phases_parse_by_name() {
        for p in Phase::ALL {
            assert_eq!(p.name().parse::<Phase>(), Ok(p));
        }
        assert!("train".parse::<Phase>().is_err());
    }
}
