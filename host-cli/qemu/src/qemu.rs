//! Running a firmware image under QEMU with a time limit.

use std::ffi::OsString;
use std::io::Read;
use std::path::Path;
use std::process::{Child, Command, ExitStatus, Stdio};
use std::thread;
use std::time::{Duration, Instant};

use crate::{DeviceError, QemuBoard};

/// What a finished QEMU run produced.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct QemuOutput {
    /// Exit status: the firmware's semihosting exit code.
    pub exit_code: i32,
    /// Raw bytes QEMU wrote to stdout: the firmware's defmt frames.
    pub stdout: Vec<u8>,
    /// What QEMU wrote to stderr (warnings from the machine model).
    pub stderr: String,
    /// Wall-clock time of the run.
    pub wall: Duration,
}

/// Boots `elf` on `board` under QEMU and waits at most `timeout` for it to exit.
///
/// # Errors
/// [`DeviceError::QemuMissing`] when the emulator is not installed, [`DeviceError::Spawn`] when it
/// cannot be started, [`DeviceError::Timeout`] when the firmware does not exit in time (QEMU is
/// then killed), [`DeviceError::Killed`] when QEMU ends without an exit status.
pub fn run_qemu(
    board: QemuBoard,
    elf: &Path,
    timeout: Duration,
) -> Result<QemuOutput, DeviceError> {
    run_emulator(board, board.qemu_program(), elf, timeout)
}

/// [`run_qemu`] with the emulator program given by name.
fn run_emulator(
    board: QemuBoard,
    program: &'static str,
    elf: &Path,
    timeout: Duration,
) -> Result<QemuOutput, DeviceError> {
    let start = Instant::now();
    let mut child = spawn(board, program, &board.qemu_args(elf), Stdio::piped())?;

    // Drain both pipes on their own threads so QEMU never blocks on a full pipe.
    let stdout = drain(child.stdout.take());
    let stderr = drain(child.stderr.take());
    let status = wait_until(&mut child, start + timeout);
    let stdout = stdout.join().unwrap_or_default();
    let stderr = String::from_utf8_lossy(&stderr.join().unwrap_or_default()).into_owned();
    let wall = start.elapsed();

    let status = match status {
        Some(s) => s,
        None => {
            return Err(DeviceError::Timeout {
                board: board.name(),
                after: timeout,
                stdout_bytes: stdout.len(),
            })
        }
    };
    let exit_code = status.code().ok_or_else(|| DeviceError::Killed {
        board: board.name(),
        stderr: stderr.clone(),
    })?;
    Ok(QemuOutput {
        exit_code,
        stdout,
        stderr,
        wall,
    })
}

/// Starts `program` with `args` for `board`: stdin closed, stdout piped, stderr as given.
///
/// # Errors
/// [`DeviceError::QemuMissing`] when the emulator is not installed, [`DeviceError::Spawn`] when
/// it cannot be started.
pub(crate) fn spawn(
    board: QemuBoard,
    program: &'static str,
    args: &[OsString],
    stderr: Stdio,
) -> Result<Child, DeviceError> {
    Command::new(program)
        .args(args)
        .stdin(Stdio::null())
        .stdout(Stdio::piped())
        .stderr(stderr)
        .spawn()
        .map_err(|source| {
            if source.kind() == std::io::ErrorKind::NotFound {
                DeviceError::QemuMissing {
                    program,
                    package: board.debian_package(),
                    board: board.name(),
                }
            } else {
                DeviceError::Spawn {
                    program: program.to_owned(),
                    source,
                }
            }
        })
}

fn drain(pipe: Option<impl Read + Send + 'static>) -> thread::JoinHandle<Vec<u8>> {
    thread::spawn(move || {
        let mut buf = Vec::new();
        if let Some(mut p) = pipe {
            // A read error ends the capture; what arrived so far is kept.
            let _ = p.read_to_end(&mut buf);
        }
        buf
    })
}

/// Waits for `child` until `deadline`; on expiry kills it and returns `None`.
fn wait_until(child: &mut Child, deadline: Instant) -> Option<ExitStatus> {
    loop {
        match child.try_wait() {
            Ok(Some(status)) => return Some(status),
            Ok(None) if Instant::now() < deadline => thread::sleep(Duration::from_millis(5)),
            _ => {
                // Kill and reap; errors mean it is already gone.
                let _ = child.kill();
                let _ = child.wait();
                return None;
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_missing_emulator_says_what_to_install() {
        let err = run_emulator(
            QemuBoard::SifiveE,
            "hone-test-no-such-emulator",
            Path::new("fw.elf"),
            Duration::from_secs(1),
        )
        .unwrap_err();
        assert!(matches!(err, DeviceError::QemuMissing { .. }), "{err}");
        let msg = err.to_string();
        assert!(
            msg.contains("apt-get install -y qemu-system-misc") && msg.contains("sifive-e"),
            "{msg}"
        );
    }
}
