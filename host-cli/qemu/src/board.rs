//! The boards the host can boot under QEMU, and their QEMU command lines.

use std::ffi::OsString;
use std::fmt;
use std::path::Path;
use std::str::FromStr;

use crate::DeviceError;

/// A board whose firmware runs under QEMU. Its name is also its folder under `boards/`.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
pub enum QemuBoard {
    /// TI Stellaris LM3S6965 evaluation board: Cortex-M3, 64 KiB RAM.
    Lm3s6965evb,
    /// BBC micro:bit (nRF51): Cortex-M0, 16 KiB RAM.
    Microbit,
    /// Arm MPS2 with the AN386 image: Cortex-M4F.
    Mps2An386,
    /// SiFive E (FE310-like): RV32IMAC, 16 KiB RAM.
    SifiveE,
}

/// QEMU options shared by every board run: exact instruction-driven time, semihosting to the
/// host's stdout, and no display, monitor or serial port (so a closed stdin is fine).
pub const COMMON_QEMU_ARGS: &[&str] = &[
    "-icount",
    "shift=0",
    "-semihosting-config",
    "enable=on,target=native",
    "-display",
    "none",
    "-monitor",
    "none",
    "-serial",
    "null",
];

impl QemuBoard {
    /// Every QEMU board, in a fixed order.
    pub const ALL: [Self; 4] = [
        Self::Lm3s6965evb,
        Self::Microbit,
        Self::Mps2An386,
        Self::SifiveE,
    ];

    /// The board's name: its folder under `boards/` and the name its firmware reports at boot.
    #[must_use]
    pub const fn name(self) -> &'static str {
        match self {
            Self::Lm3s6965evb => "lm3s6965evb",
            Self::Microbit => "microbit",
            Self::Mps2An386 => "mps2-an386",
            Self::SifiveE => "sifive-e",
        }
    }

    /// Rust target triple of the firmware.
    #[must_use]
    pub const fn target(self) -> &'static str {
        match self {
            Self::Lm3s6965evb => "thumbv7m-none-eabi",
            Self::Microbit => "thumbv6m-none-eabi",
            Self::Mps2An386 => "thumbv7em-none-eabihf",
            Self::SifiveE => "riscv32imc-unknown-none-elf",
        }
    }

    /// QEMU system emulator program.
    #[must_use]
    pub const fn qemu_program(self) -> &'static str {
        match self {
            Self::SifiveE => "qemu-system-riscv32",
            _ => "qemu-system-arm",
        }
    }

    /// Debian package that provides [`QemuBoard::qemu_program`].
    #[must_use]
    pub const fn debian_package(self) -> &'static str {
        match self {
            Self::SifiveE => "qemu-system-misc",
            _ => "qemu-system-arm",
        }
    }

    /// Options selecting the machine (and CPU where the machine needs it).
    #[must_use]
    pub const fn machine_args(self) -> &'static [&'static str] {
        match self {
            Self::Lm3s6965evb => &["-cpu", "cortex-m3", "-machine", "lm3s6965evb"],
            Self::Microbit => &["-machine", "microbit"],
            Self::Mps2An386 => &["-machine", "mps2-an386"],
            Self::SifiveE => &["-machine", "sifive_e", "-bios", "none"],
        }
    }

    /// Full QEMU argument list that boots `elf`.
    #[must_use]
    pub fn qemu_args(self, elf: &Path) -> Vec<OsString> {
        let mut args: Vec<OsString> = self.machine_args().iter().map(OsString::from).collect();
        args.extend(COMMON_QEMU_ARGS.iter().map(OsString::from));
        args.push("-kernel".into());
        args.push(elf.as_os_str().to_owned());
        args
    }
}

/// The cargo profile of the lean build (`[profile.lean]` in `boards/Cargo.toml`): the release
/// profile at opt-level `z`, since the lean build exists to be small.
pub const LEAN_PROFILE: &str = "lean";

/// A firmware crate under `boards/` that the test command builds and lints.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Firmware {
    /// Its folder under `boards/`.
    pub folder: &'static str,
    /// The cargo profile it is built in: the tests build the QEMU boards in the same profile,
    /// so each firmware is built once.
    pub profile: &'static str,
    /// The QEMU board it runs on, if it is one the host runs itself.
    pub qemu: Option<QemuBoard>,
}

/// The one table of board firmware: `cargo xtask test` builds and lints every row, and the
/// QEMU rows are the boards of [`QemuBoard::ALL`] (a test checks both ways).
pub const FIRMWARE: [Firmware; 7] = [
    Firmware {
        folder: "lm3s6965evb",
        profile: "release",
        qemu: Some(QemuBoard::Lm3s6965evb),
    },
    Firmware {
        folder: "minimal",
        profile: "release",
        qemu: None,
    },
    Firmware {
        folder: "microbit",
        profile: "release",
        qemu: Some(QemuBoard::Microbit),
    },
    Firmware {
        folder: "mps2-an386",
        profile: "release",
        qemu: Some(QemuBoard::Mps2An386),
    },
    Firmware {
        folder: "sifive-e",
        profile: "release",
        qemu: Some(QemuBoard::SifiveE),
    },
    Firmware {
        folder: "pico",
        profile: "release",
        qemu: None,
    },
    Firmware {
        folder: "lean",
        profile: LEAN_PROFILE,
        qemu: None,
    },
];

impl fmt::Display for QemuBoard {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.name())
    }
}

impl FromStr for QemuBoard {
    type Err = DeviceError;

    fn from_str(s: &str) -> Result<Self, Self::Err> {
        Self::ALL
            .into_iter()
            .find(|b| b.name() == s)
            .ok_or_else(|| DeviceError::UnknownBoard {
                name: s.to_owned(),
                known: Self::ALL.map(Self::name).join(", "),
            })
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::path::PathBuf;

    /// The quoted strings of the `runner = [...]` array in a board's `.cargo/config.toml`.
    fn runner_of(config: &str) -> Vec<String> {
        let start = config
            .find("runner = [")
            .expect("config has a runner array");
        let rest = &config[start + "runner = [".len()..];
        let body = &rest[..rest.find(']').expect("runner array is closed")];
        body.split('"')
            .skip(1)
            .step_by(2)
            .map(str::to_owned)
            .collect()
    }

    #[test]
    fn names_round_trip() {
        for b in QemuBoard::ALL {
            assert_eq!(b.name().parse::<QemuBoard>().unwrap(), b);
        }
        let err = "pdp11".parse::<QemuBoard>().unwrap_err().to_string();
        assert!(err.contains("pdp11") && err.contains("microbit"), "{err}");
    }

    #[test]
    fn the_firmware_table_holds_every_qemu_board_under_its_name() {
        let boards = Path::new(env!("CARGO_MANIFEST_DIR")).join("../../boards");
        for f in FIRMWARE {
            assert!(
                boards.join(f.folder).join("Cargo.toml").is_file(),
                "boards/{} has no Cargo.toml",
                f.folder
            );
            if let Some(b) = f.qemu {
                assert_eq!(b.name(), f.folder);
            }
        }
        for b in QemuBoard::ALL {
            assert_eq!(
                FIRMWARE.iter().filter(|f| f.qemu == Some(b)).count(),
                1,
                "{b} is not in FIRMWARE once"
            );
        }
    }

    /// The host runs QEMU exactly as `cargo run` in the board folder does: the runner there is
    /// `boards/qemu-run.sh` with the machine's name, and the script prints the command it runs.
    #[test]
    fn qemu_command_matches_board_cargo_runner() {
        let boards = Path::new(env!("CARGO_MANIFEST_DIR")).join("../../boards");
        for b in QemuBoard::ALL {
            let path = boards.join(b.name()).join(".cargo/config.toml");
            let config = std::fs::read_to_string(&path)
                .unwrap_or_else(|e| panic!("read {}: {e}", path.display()));
            let runner = runner_of(&config);
            assert_eq!(
                runner.first().map(String::as_str),
                Some("../qemu-run.sh"),
                "{b}"
            );
            let machine = runner.last().expect("the runner names the machine");
            let out = std::process::Command::new("sh")
                .arg(boards.join("qemu-run.sh"))
                .args(["--print", machine, "fw.elf"])
                .output()
                .expect("sh runs");
            assert!(
                out.status.success(),
                "{b}: {}",
                String::from_utf8_lossy(&out.stderr)
            );
            let printed: Vec<String> = String::from_utf8_lossy(&out.stdout)
                .lines()
                .map(str::to_owned)
                .collect();
            // `timeout <secs>`, then the QEMU program and its options, ending in -kernel <elf>.
            assert_eq!(printed.first().map(String::as_str), Some("timeout"), "{b}");
            assert_eq!(printed[2], b.qemu_program(), "{b}");
            let ours: Vec<String> = b
                .qemu_args(&PathBuf::from("fw.elf"))
                .iter()
                .map(|a| a.to_string_lossy().into_owned())
                .collect();
            assert_eq!(&printed[3..], ours.as_slice(), "{b}");
            assert!(
                config.contains(&format!("target = \"{}\"", b.target())),
                "{b}"
            );
        }
    }
}
