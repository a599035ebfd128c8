//! The session runner: boot record, calibration, the session itself, memory report, exit.

use crate::blob::BlobWriter;
use crate::measure::{self, Span};
use crate::memory;
use crate::platform::Platform;
use crate::{exit_code, record};

/// Why a session failed.
#[derive(Clone, Copy, Debug, PartialEq, Eq, defmt::Format)]
pub enum SessionError {
    /// A payload write went past the length declared in its `blob-begin` record.
    BlobOverrun {
        /// Payload id.
        id: u16,
    },
    /// A payload was finished before all declared bytes were written.
    BlobShort {
        /// Payload id.
        id: u16,
        /// Length declared at the start.
        declared: u32,
        /// Bytes actually written.
        written: u32,
    },
    /// Every payload id of this run is used.
    TooManyBlobs,
    /// A self-check of the session failed; the text names it.
    Check(&'static str),
    /// The training engine returned an error.
    Engine(hone_core::Error),
}

impl SessionError {
    /// Short name of the error for the `error` record.
    #[must_use]
    pub const fn what(&self) -> &'static str {
        match self {
            Self::BlobOverrun { .. } => "blob-overrun",
            Self::BlobShort { .. } => "blob-short",
            Self::TooManyBlobs => "too-many-blobs",
            Self::Check(what) => what,
            Self::Engine(_) => "engine",
        }
    }
}

/// What a session gets to work with: the board's counter and the output channel to the host.
pub struct Ctx<'p, P: Platform> {
    platform: &'p P,
    next_blob: u16,
}

impl<'p, P: Platform> Ctx<'p, P> {
    /// The board the session runs on.
    #[must_use]
    pub fn platform(&self) -> &'p P {
        self.platform
    }

    /// Runs `f` and returns its result with the measured span for `work` units of work, without
    /// logging anything (log it later with [`crate::record::span`], for example once a stack
    /// measurement is done).
    pub fn time<R>(&self, work: u32, f: impl FnOnce() -> R) -> (R, Span) {
        let (r, ticks) = measure::time(self.platform, f);
        let span = Span {
            work,
            ticks,
            units: self.platform.tick_unit().to_units(ticks),
        };
        (r, span)
    }

    /// Runs `f`, logs a `span` record named `name` for `work` units of work, and returns the
    /// result of `f` with the measured span.
    pub fn measure<R>(&mut self, name: &str, work: u32, f: impl FnOnce() -> R) -> (R, Span) {
        let (r, span) = self.time(work, f);
        record::span(name, &span);
        (r, span)
    }

    /// Opens a payload of `len` bytes named `name`, to be written in pieces.
    ///
    /// # Errors
    /// [`SessionError::TooManyBlobs`] after 65 535 payloads in one run.
    pub fn blob(&mut self, name: &str, len: u32) -> Result<BlobWriter, SessionError> {
        let id = self.next_blob;
        self.next_blob = id.checked_add(1).ok_or(SessionError::TooManyBlobs)?;
        Ok(BlobWriter::begin(id, name, len))
    }

    /// Sends `bytes` to the host as one payload named `name`.
    ///
    /// # Errors
    /// [`SessionError::TooManyBlobs`] as for [`Ctx::blob`], or [`SessionError::BlobOverrun`]
    /// when `bytes` is longer than 4 GiB.
    pub fn send_blob(&mut self, name: &str, bytes: &[u8]) -> Result<(), SessionError> {
        let len = u32::try_from(bytes.len())
            .map_err(|_| SessionError::BlobOverrun { id: self.next_blob })?;
        let mut w = self.blob(name, len)?;
        w.write(bytes)?;
        w.finish()
    }
}

/// Runs one session on `platform` and exits; never returns.
///
/// Order of events: `boot` record; calibration (`calib` record; on mismatch the run ends with
/// [`exit_code::CALIBRATION_MISMATCH`]); the session; `mem` record; an `error` record if the
/// session failed; `done` record; exit with [`exit_code::SUCCESS`] or
/// [`exit_code::SESSION_FAILED`].
pub fn run<P, S>(platform: P, session: S) -> !
where
    P: Platform,
    S: FnOnce(&mut Ctx<'_, P>) -> Result<(), SessionError>,
{
    record::boot(platform.board(), platform.tick_unit());

    let cal = measure::calibrate(&platform);
    record::calib(&cal);
    if !cal.ok {
        record::error("calibration");
        record::done(exit_code::CALIBRATION_MISMATCH);
        platform.exit(exit_code::CALIBRATION_MISMATCH);
    }

    let mut ctx = Ctx {
        platform: &platform,
        next_blob: 0,
    };
    let result = session(&mut ctx);

    record::mem(&memory::static_memory(), &memory::stack_usage());
    let code = match result {
        Ok(()) => exit_code::SUCCESS,
        Err(e) => {
            record::error(e.what());
            defmt::error!("session failed: {}", e);
            exit_code::SESSION_FAILED
        }
    };
    record::done(code);
    platform.exit(code)
}
