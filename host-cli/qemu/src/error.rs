//! Errors of the device runner, each naming the step that failed.

use std::path::PathBuf;
use std::time::Duration;

/// Everything that can go wrong while building, running or decoding board firmware.
#[derive(Debug, thiserror::Error)]
pub enum DeviceError {
    /// No hone source tree was found to build firmware from.
    #[error(
        "no hone source tree (a folder holding boards/Cargo.toml and core/Cargo.toml) at or \
         above {}; run the command inside one, or set {var} to its folder",
        start.display()
    )]
    NoRepo {
        /// Where the search started (the current directory, or the folder `var` names).
        start: PathBuf,
        /// The environment variable that names the tree.
        var: &'static str,
    },
    /// The QEMU system emulator for the board is not installed.
    #[error(
        "`{program}` is not installed, and it is needed to run the {board} firmware; \
         install it with `apt-get install -y {package}`"
    )]
    QemuMissing {
        /// Program that was looked for.
        program: &'static str,
        /// Debian package that provides it.
        package: &'static str,
        /// Board being run.
        board: &'static str,
    },
    /// A program exists but could not be started.
    #[error("could not start `{program}`: {source}")]
    Spawn {
        /// Program that failed to start.
        program: String,
        /// Operating-system error.
        #[source]
        source: std::io::Error,
    },
    /// The firmware did not exit in time; QEMU was killed.
    #[error(
        "the {board} firmware did not exit within {:.1} s, so QEMU was killed \
         ({stdout_bytes} bytes of output had arrived)", after.as_secs_f64()
    )]
    Timeout {
        /// Board being run.
        board: &'static str,
        /// The time limit that was exceeded.
        after: Duration,
        /// Bytes QEMU had written to stdout before it was killed.
        stdout_bytes: usize,
    },
    /// QEMU ended without an exit status (killed by a signal).
    #[error("QEMU running the {board} firmware was ended by a signal; stderr: {stderr}")]
    Killed {
        /// Board being run.
        board: &'static str,
        /// What QEMU wrote to stderr.
        stderr: String,
    },
    /// `cargo build` of a firmware binary failed.
    #[error("building firmware {what} failed ({status}); last compiler output:\n{stderr_tail}")]
    Build {
        /// Binary and folder being built.
        what: String,
        /// Exit status of cargo.
        status: String,
        /// Last lines cargo wrote to stderr.
        stderr_tail: String,
    },
    /// `cargo build` succeeded but named no executable.
    #[error("`cargo build` of firmware {what} reported no executable")]
    NoArtifact {
        /// Binary and folder being built.
        what: String,
    },
    /// A file could not be read.
    #[error("cannot read {}: {source}", path.display())]
    Io {
        /// File that could not be read.
        path: PathBuf,
        /// Operating-system error.
        #[source]
        source: std::io::Error,
    },
    /// The ELF file could not be parsed.
    #[error("cannot parse the ELF file {}: {detail}", path.display())]
    Elf {
        /// ELF file.
        path: PathBuf,
        /// Parser message.
        detail: String,
    },
    /// The ELF file has no `.defmt` section, or its table cannot be read.
    #[error("cannot use the defmt table of {}: {detail}", path.display())]
    DefmtTable {
        /// ELF file.
        path: PathBuf,
        /// What is wrong with the table.
        detail: String,
    },
    /// The bytes on QEMU's stdout are not valid defmt frames for this ELF.
    #[error("defmt decoding failed after {frames} good frames: {detail}")]
    Decode {
        /// Frames decoded before the failure.
        frames: usize,
        /// What went wrong.
        detail: String,
    },
    /// A `hone:` record is malformed or breaks the output protocol.
    #[error("output protocol violated at log line {line}: {detail}")]
    Protocol {
        /// Index of the offending log line (0-based).
        line: usize,
        /// What is wrong.
        detail: String,
    },
    /// The firmware ran but did not finish cleanly.
    #[error("the {board} firmware failed: {detail}")]
    FirmwareFailed {
        /// Board that was run.
        board: &'static str,
        /// Exit code, failed checks and the last log lines.
        detail: String,
    },
    /// A board's calibration session could not be generated or simulated, or its committed
    /// files are out of date.
    #[error("calibration session of {board}: {source}")]
    Session {
        /// Board.
        board: &'static str,
        /// What went wrong (the host library's session error).
        #[source]
        source: Box<dyn std::error::Error + Send + Sync>,
    },
    /// The host's run of the lean build's session failed.
    #[error("calibration session of {board}: host run of the lean session: {source}")]
    LeanHost {
        /// Board.
        board: &'static str,
        /// The core's error.
        #[source]
        source: hone_core::Error,
    },
    /// The boards' cargo manifest is not valid TOML.
    #[error("{}: {source}", path.display())]
    Manifest {
        /// The manifest.
        path: PathBuf,
        /// The TOML parser's error.
        #[source]
        source: toml::de::Error,
    },
    /// A cargo profile of the boards' manifest is missing or has no usable `opt-level`.
    #[error("{}: {detail}", path.display())]
    Profile {
        /// The manifest.
        path: PathBuf,
        /// What is wrong.
        detail: String,
    },
    /// The device's result differs from the host's.
    #[error("the {board} firmware did not end where the host did:\n{detail}")]
    Mismatch {
        /// Board.
        board: &'static str,
        /// Every difference, one a line.
        detail: String,
    },
    /// A memory prediction disagrees with the measurement.
    #[error("memory prediction for {board}: {detail}")]
    Prediction {
        /// Board.
        board: &'static str,
        /// The figures.
        detail: String,
    },
    /// A board name that the runner does not know.
    #[error("unknown board `{name}`; known boards: {known}")]
    UnknownBoard {
        /// Name that was given.
        name: String,
        /// Names that would have been accepted.
        known: String,
    },
}
