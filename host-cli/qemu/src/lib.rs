//! Building board firmware, running it under QEMU, and decoding what it reports.
//!
//! The firmware under `boards/` writes `defmt` frames to QEMU's stdout through semihosting and
//! exits with a status code. This crate
//!
//! 1. builds a board's firmware ([`build_firmware`]) or takes a given ELF,
//! 2. boots it under QEMU with `-icount shift=0` and a time limit ([`run_qemu`]),
//! 3. decodes the frames with the ELF's defmt table ([`decode`]),
//! 4. parses the `hone:` records into typed results and reassembles byte payloads ([`report`]),
//! 5. reads the ELF's section sizes ([`elf`]).
//!
//! [`profile`] charges the instructions of one training call to functions, from a QEMU
//! execution trace. The calibration sessions that run on the boards, their simulation on the
//! host and their bit-for-bit comparison with the device are in the host library
//! (`hone_host::device`), which builds on this crate.
//!
//! [`run_board`] does all of it; [`DeviceRun::ensure_success`] turns a failed run into an error
//! that names what went wrong.

pub mod board;
pub mod decode;
pub mod elf;
mod error;
pub mod firmware;
pub mod profile;
pub mod qemu;
pub mod record;
pub mod reference;
pub mod report;
pub mod sha256;
pub mod thumb;

use std::path::{Path, PathBuf};
use std::time::Duration;

pub use board::QemuBoard;
pub use decode::LogLine;
pub use elf::SectionSizes;
pub use error::DeviceError;
pub use firmware::{
    build_bin, build_bin_in_profile, build_firmware, build_firmware_with, default_boards_dir,
    find_repo, find_repo_from, RELEASE_PROFILE, REPO_VAR,
};
pub use qemu::{run_qemu, QemuOutput};
pub use report::Report;

/// Time limit for one QEMU run unless the caller sets another.
pub const DEFAULT_TIMEOUT: Duration = Duration::from_secs(60);

/// Everything one firmware run produced.
#[derive(Clone, Debug)]
pub struct DeviceRun {
    /// Board that ran.
    pub board: QemuBoard,
    /// ELF image that ran.
    pub elf: PathBuf,
    /// Firmware exit code.
    pub exit_code: i32,
    /// Every decoded log line, records included.
    pub lines: Vec<LogLine>,
    /// The records, interpreted.
    pub report: Report,
    /// Section sizes of the ELF image.
    pub sections: SectionSizes,
    /// What QEMU wrote to stderr.
    pub stderr: String,
    /// Wall-clock time of the QEMU run.
    pub wall: Duration,
}

/// Runs an already built ELF image of `board` under QEMU and decodes the result.
///
/// # Errors
/// [`DeviceError::Io`] when the ELF cannot be read, [`DeviceError::Elf`] or
/// [`DeviceError::DefmtTable`] when it is not usable, the errors of [`run_qemu`], and
/// [`DeviceError::Decode`] or [`DeviceError::Protocol`] when the output cannot be understood.
/// A non-zero firmware exit code is not an error here; see [`DeviceRun::ensure_success`].
pub fn run_elf(board: QemuBoard, elf: &Path, timeout: Duration) -> Result<DeviceRun, DeviceError> {
    let bytes = std::fs::read(elf).map_err(|source| DeviceError::Io {
        path: elf.to_owned(),
        source,
    })?;
    let sections = elf::section_sizes(&bytes, elf)?;
    let table = decode::load_table(&bytes, elf)?;
    let out = run_qemu(board, elf, timeout)?;
    let lines = decode::decode_stream(&table, &out.stdout)?;
    let report = Report::from_lines(&lines)?;
    Ok(DeviceRun {
        board,
        elf: elf.to_owned(),
        exit_code: out.exit_code,
        lines,
        report,
        sections,
        stderr: out.stderr,
        wall: out.wall,
    })
}

/// Builds the firmware of `board` from `boards_dir` and runs it: [`build_firmware`] then
/// [`run_elf`].
///
/// # Errors
/// Those of [`build_firmware`] and [`run_elf`].
pub fn run_board(
    board: QemuBoard,
    boards_dir: &Path,
    timeout: Duration,
) -> Result<DeviceRun, DeviceError> {
    let elf = build_firmware(board, boards_dir)?;
    run_elf(board, &elf, timeout)
}

impl DeviceRun {
    /// Checks that the run finished cleanly: exit code 0, a `done` record with code 0, a boot
    /// record naming this board, a passed calibration, and no error, panic or fault record.
    ///
    /// # Errors
    /// [`DeviceError::FirmwareFailed`] listing every failed check and the last log lines.
    pub fn ensure_success(&self) -> Result<(), DeviceError> {
        let r = &self.report;
        let mut problems = Vec::new();
        if self.exit_code != 0 {
            problems.push(format!("exit code {}", self.exit_code));
        }
        match &r.boot {
            None => problems.push("no boot record".to_owned()),
            Some(b) if b.board != self.board.name() => {
                problems.push(format!("firmware says it is `{}`", b.board));
            }
            Some(_) => {}
        }
        match &r.calibration {
            None => problems.push("no calibration record".to_owned()),
            Some(c) if !c.ok => problems.push(format!(
                "calibration failed: {} instructions took {} ticks",
                c.instructions, c.ticks
            )),
            Some(_) => {}
        }
        if r.done != Some(0) {
            problems.push(format!("done record: {:?}", r.done));
        }
        if !r.errors.is_empty() {
            problems.push(format!("error records: {}", r.errors.join(", ")));
        }
        if let Some((file, line)) = &r.panic {
            problems.push(format!("panicked at {file}:{line}"));
        }
        if let Some(pc) = r.fault {
            problems.push(format!("CPU fault at pc {pc:#010x}"));
        }
        if problems.is_empty() {
            return Ok(());
        }
        let tail: Vec<&str> = self.lines[self.lines.len().saturating_sub(8)..]
            .iter()
            .map(|l| l.text.as_str())
            .collect();
        Err(DeviceError::FirmwareFailed {
            board: self.board.name(),
            detail: format!(
                "{}; last log lines:\n  {}",
                problems.join("; "),
                tail.join("\n  ")
            ),
        })
    }

    /// The decoded log as text, one line per frame, with level prefixes.
    #[must_use]
    pub fn log_text(&self) -> String {
        self.lines
            .iter()
            .map(|l| match l.level {
                Some(level) => format!("{level:<5} {}\n", l.text),
                None => format!("{}\n", l.text),
            })
            .collect()
    }
}
