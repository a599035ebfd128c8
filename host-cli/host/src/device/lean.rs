//! The lean build (`boards/lean`): the core without its optional layer kinds trains a dense,
//! ReLU, squared-error model with SGD on the micro:bit. Its firmware prints the trained
//! tensors as plain text; [`verify_lean`] runs it under QEMU, runs the same session on the
//! host, and compares the lines, then sizes the build's engine code.

use std::path::Path;
use std::time::Duration;

use super::verify::{flash_figures, FlashFigures, VerifySummary};
use super::{build_bin_in_profile, run_qemu, DeviceError, QemuBoard};

// The lean firmware's session crate (`boards/lean-session`), compiled here with the core built
// for the host (all features; the arithmetic of the kinds the lean build keeps is the same
// code).
use hone_lean_session as lean_session;

/// The name the command line gives the lean build.
pub const LEAN_BOARD: &str = "microbit-lean";

/// The cargo profile of the lean build, from the firmware table (the README's "On the devices"
/// gives the measured trade of each opt-level).
pub use hone_qemu::board::LEAN_PROFILE;

/// The QEMU board the lean build runs on.
pub const LEAN_QEMU: QemuBoard = QemuBoard::Microbit;

/// The outcome of [`verify_lean`].
#[derive(Clone, Debug)]
pub struct LeanCheck {
    /// Firmware exit code.
    pub exit_code: i32,
    /// What the firmware printed.
    pub device: String,
    /// What the same session prints on the host.
    pub host: String,
    /// Summed loss before training (raw, 24 fraction bits).
    pub loss_before: i64,
    /// Summed loss after training.
    pub loss_after: i64,
    /// Code sizes of the lean ELF.
    pub flash: FlashFigures,
}

impl LeanCheck {
    /// Whether the device printed exactly the host's lines and exited with 0.
    #[must_use]
    pub fn bit_exact(&self) -> bool {
        self.exit_code == 0 && self.device == self.host
    }

    /// The flat record of `hone device verify --json`: the lean firmware measures no
    /// instructions, stack or RAM, so those figures are `None`.
    #[must_use]
    pub fn summary(&self, profile: &str) -> VerifySummary {
        VerifySummary {
            board: LEAN_BOARD.to_owned(),
            bit_exact: self.bit_exact(),
            prediction_ok: None,
            throughput_model: None,
            fixed_insn_per_mac: None,
            float_insn_per_mac: None,
            fixed_insn_per_sample: None,
            float_insn_per_sample: None,
            engine_code_bytes: self.flash.engine_code(),
            trainer_bytes: None,
            engine_stack_bytes: None,
            ram_measured_bytes: None,
            ram_predicted_bytes: None,
            profile: profile.to_owned(),
        }
    }

    /// A readable account of the run.
    #[must_use]
    pub fn render(&self) -> String {
        format!(
            "{LEAN_BOARD} (the lean build, boards/lean, on {}): {}\n  summed loss {} -> {} (raw, 24 fraction bits)\n  engine code {} B ({} B .text, {} B .rodata), whole .text {} B\n",
            LEAN_QEMU.name(),
            if self.bit_exact() {
                "trained weights equal the host's, bit for bit"
            } else {
                "DIFFERS from the host"
            },
            self.loss_before,
            self.loss_after,
            self.flash.engine_code(),
            self.flash.engine_text,
            self.flash.engine_rodata,
            self.flash.text_section
        )
    }
}

/// Builds the lean firmware from `boards_dir`, runs it on the micro:bit under QEMU, and
/// compares it with the host.
///
/// # Errors
/// Those of [`build_bin_in_profile`] and [`run_qemu`]; [`DeviceError::LeanHost`] when the host's run of
/// the session fails; [`DeviceError::Io`] or [`DeviceError::Elf`] for an unreadable image.
pub fn verify_lean(boards_dir: &Path, timeout: Duration) -> Result<LeanCheck, DeviceError> {
    let elf = build_bin_in_profile(&boards_dir.join("lean"), "hone-lean", LEAN_PROFILE)?;
    let out = run_qemu(LEAN_QEMU, &elf, timeout)?;
    let device = String::from_utf8_lossy(&out.stdout).into_owned();

    let mut arena = vec![0u32; lean_session::ARENA_WORDS];
    let mut host = String::new();
    let summary = lean_session::run(&mut arena, |name, values| {
        host.push_str("lean ");
        host.push_str(name);
        for v in values {
            host.push_str(&format!(" {v}"));
        }
        host.push('\n');
    })
    .map_err(|source| DeviceError::LeanHost {
        board: LEAN_BOARD,
        source,
    })?;
    host.push_str(&format!("lean loss {} {}\n", summary.before, summary.after));

    let bytes = std::fs::read(&elf).map_err(|source| DeviceError::Io {
        path: elf.clone(),
        source,
    })?;
    let flash = flash_figures(&bytes, &elf)?;
    Ok(LeanCheck {
        exit_code: out.exit_code,
        device,
        host,
        loss_before: summary.before,
        loss_after: summary.after,
        flash,
    })
}
