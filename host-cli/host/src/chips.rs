//! Built-in table of microcontrollers for the memory planner.
//!
//! Each entry gives the core, the floating-point unit, and the on-chip RAM and program flash in
//! bytes (1 KB = 1024 bytes here, as vendors mean it for memory sizes). Every entry's `source`
//! names the document its numbers were checked against, or says "from memory" where they were
//! not looked up; `note` explains entries that are boards or lack on-chip flash.
//!
//! The first four entries are the targets the project runs under QEMU; `qemu_machine` gives the
//! emulator's machine name for them.

use std::fmt;

/// Processor core of a chip.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
pub enum CoreKind {
    /// Arm Cortex-M0 (Armv6-M).
    CortexM0,
    /// Arm Cortex-M0+ (Armv6-M).
    CortexM0Plus,
    /// Arm Cortex-M3 (Armv7-M).
    CortexM3,
    /// Arm Cortex-M4 (Armv7E-M); see [`Chip::fpu`] for whether the FPU is fitted.
    CortexM4,
    /// Arm Cortex-M7 (Armv7E-M).
    CortexM7,
    /// 32-bit RISC-V with the I, M, A and C extensions.
    Rv32imac,
    /// 32-bit RISC-V with the I, M and C extensions.
    Rv32imc,
    /// 32-bit RISC-V, embedded base (16 registers) with the C extension.
    Rv32ec,
}

impl CoreKind {
    /// Whether the core implements the RISC-V instruction set (otherwise it is an Arm core).
    pub fn is_riscv(self) -> bool {
        matches!(
            self,
            CoreKind::Rv32imac | CoreKind::Rv32imc | CoreKind::Rv32ec
        )
    }

    /// Whether the instruction set has a 32-bit integer multiply instruction. False only for
    /// the RV32EC parts here, which lack RISC-V's "M" extension and multiply in software.
    pub fn has_hw_multiply(self) -> bool {
        !matches!(self, CoreKind::Rv32ec)
    }
}

impl fmt::Display for CoreKind {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(match self {
            CoreKind::CortexM0 => "Cortex-M0",
            CoreKind::CortexM0Plus => "Cortex-M0+",
            CoreKind::CortexM3 => "Cortex-M3",
            CoreKind::CortexM4 => "Cortex-M4",
            CoreKind::CortexM7 => "Cortex-M7",
            CoreKind::Rv32imac => "RV32IMAC",
            CoreKind::Rv32imc => "RV32IMC",
            CoreKind::Rv32ec => "RV32EC",
        })
    }
}

/// Hardware floating-point support.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub enum Fpu {
    /// No floating-point hardware: float arithmetic is done in software.
    None,
    /// Single precision (32-bit `float`) in hardware.
    Single,
    /// Single and double precision in hardware.
    Double,
}

impl fmt::Display for Fpu {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(match self {
            Fpu::None => "none",
            Fpu::Single => "single",
            Fpu::Double => "double",
        })
    }
}

/// One microcontroller (or, for the QEMU FPGA image, one board configuration).
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Chip {
    /// Lowercase identifier used on the command line, e.g. `stm32f103c8`.
    pub id: &'static str,
    /// Marketing name.
    pub name: &'static str,
    /// Manufacturer.
    pub vendor: &'static str,
    /// Processor core.
    pub core: CoreKind,
    /// Floating-point hardware.
    pub fpu: Fpu,
    /// On-chip data RAM, bytes (all banks together; see `note` where they are split).
    pub ram_bytes: u32,
    /// Program flash, bytes. For chips without on-chip flash, the flash of the usual board,
    /// as `note` says.
    pub flash_bytes: u32,
    /// QEMU machine name, for the targets the project emulates.
    pub qemu_machine: Option<&'static str>,
    /// Caveats about the numbers; empty when there are none.
    pub note: &'static str,
    /// Where the numbers come from: a document title, or "from memory".
    pub source: &'static str,
}

impl Chip {
    /// Core and FPU as one label, e.g. "Cortex-M4F" or "Cortex-M7 (double-precision FPU)".
    pub fn core_label(&self) -> String {
        core_label(self.core, self.fpu)
    }
}

/// Core and FPU as one label, e.g. "Cortex-M4F" or "Cortex-M7 (double-precision FPU)".
pub fn core_label(core: CoreKind, fpu: Fpu) -> String {
    match (core, fpu) {
        (_, Fpu::None) => core.to_string(),
        (CoreKind::CortexM4, Fpu::Single) => "Cortex-M4F".to_string(),
        (core, fpu) => format!("{core} ({fpu}-precision FPU)"),
    }
}

const KIB: u32 = 1024;
const MIB: u32 = 1024 * 1024;

static CHIPS: [Chip; 19] = [
    Chip {
        id: "lm3s6965",
        name: "Stellaris LM3S6965",
        vendor: "Texas Instruments",
        core: CoreKind::CortexM3,
        fpu: Fpu::None,
        ram_bytes: 64 * KIB,
        flash_bytes: 256 * KIB,
        qemu_machine: Some("lm3s6965evb"),
        note: "",
        source: "from memory (the Cortex-M3 core agrees with Zephyr's SOC_TI_LM3S6965 Kconfig)",
    },
    Chip {
        id: "nrf51822",
        name: "nRF51822-QFAA (BBC micro:bit v1)",
        vendor: "Nordic Semiconductor",
        core: CoreKind::CortexM0,
        fpu: Fpu::None,
        ram_bytes: 16 * KIB,
        flash_bytes: 256 * KIB,
        qemu_machine: Some("microbit"),
        note: "other nRF51822 variants have 128 KB flash or 32 KB RAM; the micro:bit v1 uses \
               this one",
        source: "Zephyr devicetree nrf51822_qfaa.dtsi (flash 256 KiB, SRAM 16 KiB)",
    },
    Chip {
        id: "mps2-an386",
        name: "Arm MPS2+ with the AN386 FPGA image",
        vendor: "Arm",
        core: CoreKind::CortexM4,
        fpu: Fpu::Single,
        ram_bytes: 4 * MIB,
        flash_bytes: 4 * MIB,
        qemu_machine: Some("mps2-an386"),
        note: "an FPGA board image, not a chip: \"flash\" is the 4 MB ZBT SSRAM1 at address 0 \
               that holds code, RAM the 4 MB ZBT SSRAM2/3 at 0x2000_0000 (16 MB of PSRAM \
               more are not counted)",
        source: "QEMU hw/arm/mps2.c memory map, read for AN385; that AN386 shares it and adds \
                 the FPU is from memory",
    },
    Chip {
        id: "fe310",
        name: "SiFive FE310-G000 (HiFive1)",
        vendor: "SiFive",
        core: CoreKind::Rv32imac,
        fpu: Fpu::None,
        ram_bytes: 16 * KIB,
        flash_bytes: 16 * MIB,
        qemu_machine: Some("sifive_e"),
        note: "no on-chip flash: the HiFive1 board's 128 Mbit SPI flash, executed in place",
        source: "SiFive HiFive1 product page (FE310-G000, RV32IMAC, 16 KB data SRAM, 128 Mbit \
                 off-chip flash)",
    },
    Chip {
        id: "stm32f103c8",
        name: "STM32F103C8",
        vendor: "STMicroelectronics",
        core: CoreKind::CortexM3,
        fpu: Fpu::None,
        ram_bytes: 20 * KIB,
        flash_bytes: 64 * KIB,
        qemu_machine: None,
        note: "",
        source: "STM32F103x8 STM32F103xB datasheet, \"Medium-density performance line \
                 Arm-based 32-bit MCU with 64 or 128 KB Flash\"",
    },
    Chip {
        id: "stm32f411ce",
        name: "STM32F411CE",
        vendor: "STMicroelectronics",
        core: CoreKind::CortexM4,
        fpu: Fpu::Single,
        ram_bytes: 128 * KIB,
        flash_bytes: 512 * KIB,
        qemu_machine: None,
        note: "",
        source: "RM0383 reference manual, STM32F411xC/E (256/512 KB flash, 128 KB SRAM, \
                 Cortex-M4 with FPU)",
    },
    Chip {
        id: "stm32l031k6",
        name: "STM32L031K6",
        vendor: "STMicroelectronics",
        core: CoreKind::CortexM0Plus,
        fpu: Fpu::None,
        ram_bytes: 8 * KIB,
        flash_bytes: 32 * KIB,
        qemu_machine: None,
        note: "",
        source: "STM32L031x4 STM32L031x6 datasheet (DS10668), \"Access line ultra-low-power \
                 32-bit MCU Arm-based Cortex-M0+, up to 32KB Flash, 8KB SRAM\"",
    },
    Chip {
        id: "stm32g031k8",
        name: "STM32G031K8",
        vendor: "STMicroelectronics",
        core: CoreKind::CortexM0Plus,
        fpu: Fpu::None,
        ram_bytes: 8 * KIB,
        flash_bytes: 64 * KIB,
        qemu_machine: None,
        note: "",
        source: "STM32G031x4/x6/x8 datasheet (DS12992), \"Arm Cortex-M0+ 32-bit MCU, up to \
                 64 KB Flash, 8 KB RAM\"",
    },
    Chip {
        id: "nrf52832",
        name: "nRF52832-QFAA",
        vendor: "Nordic Semiconductor",
        core: CoreKind::CortexM4,
        fpu: Fpu::Single,
        ram_bytes: 64 * KIB,
        flash_bytes: 512 * KIB,
        qemu_machine: None,
        note: "",
        source: "from memory",
    },
    Chip {
        id: "nrf52840",
        name: "nRF52840",
        vendor: "Nordic Semiconductor",
        core: CoreKind::CortexM4,
        fpu: Fpu::Single,
        ram_bytes: 256 * KIB,
        flash_bytes: MIB,
        qemu_machine: None,
        note: "",
        source: "Zephyr board page \"Adafruit Feather nRF52840 Express\" (nRF52840 Cortex-M4F, \
                 1 MB flash, 256 KB SRAM)",
    },
    Chip {
        id: "rp2040",
        name: "RP2040 (Raspberry Pi Pico)",
        vendor: "Raspberry Pi",
        core: CoreKind::CortexM0Plus,
        fpu: Fpu::None,
        ram_bytes: 264 * KIB,
        flash_bytes: 2 * MIB,
        qemu_machine: None,
        note: "two cores; no on-chip flash: the Raspberry Pi Pico board's 2 MB QSPI flash \
               (the chip addresses up to 16 MB)",
        source: "MicroPython docs \"General information about the RP2xxx port\", summarising \
                 the RP2040 datasheet (264 KB SRAM, no internal flash); the Pico's 2 MB is from \
                 memory",
    },
    Chip {
        id: "samd21g18",
        name: "ATSAMD21G18A",
        vendor: "Microchip (Atmel)",
        core: CoreKind::CortexM0Plus,
        fpu: Fpu::None,
        ram_bytes: 32 * KIB,
        flash_bytes: 256 * KIB,
        qemu_machine: None,
        note: "",
        source: "Zephyr board page \"Arduino/Genuino Zero\" (ATSAMD21G18A, 256 KiB flash, \
                 32 KiB RAM)",
    },
    Chip {
        id: "atsamd51j19",
        name: "ATSAMD51J19A",
        vendor: "Microchip (Atmel)",
        core: CoreKind::CortexM4,
        fpu: Fpu::Single,
        ram_bytes: 192 * KIB,
        flash_bytes: 512 * KIB,
        qemu_machine: None,
        note: "",
        source: "from memory",
    },
    Chip {
        id: "esp32c3",
        name: "ESP32-C3FH4",
        vendor: "Espressif",
        core: CoreKind::Rv32imc,
        fpu: Fpu::None,
        ram_bytes: 400 * KIB,
        flash_bytes: 4 * MIB,
        qemu_machine: None,
        note: "16 KB of the 400 KB SRAM serve as flash cache; the 4 MB flash sits in the \
               package of the FH4 variant",
        source: "ESP32-C3 Series Datasheet v2.0 (Espressif); the SRAM size as listed on \
                 Zephyr's \"ESP32-C3 Features\" page (400 KB SRAM, 16 KB for cache)",
    },
    Chip {
        id: "stm32h743zi",
        name: "STM32H743ZI",
        vendor: "STMicroelectronics",
        core: CoreKind::CortexM7,
        fpu: Fpu::Double,
        ram_bytes: MIB,
        flash_bytes: 2 * MIB,
        qemu_machine: None,
        note: "RAM is split over several non-contiguous banks (TCM, AXI SRAM, SRAM1-4)",
        source: "from memory",
    },
    Chip {
        id: "stm32f407vg",
        name: "STM32F407VG",
        vendor: "STMicroelectronics",
        core: CoreKind::CortexM4,
        fpu: Fpu::Single,
        ram_bytes: 192 * KIB,
        flash_bytes: MIB,
        qemu_machine: None,
        note: "64 KB of the RAM is core-coupled memory that DMA cannot reach",
        source: "from memory",
    },
    Chip {
        id: "stm32l476rg",
        name: "STM32L476RG",
        vendor: "STMicroelectronics",
        core: CoreKind::CortexM4,
        fpu: Fpu::Single,
        ram_bytes: 128 * KIB,
        flash_bytes: MIB,
        qemu_machine: None,
        note: "RAM is two banks, 96 KB and 32 KB",
        source: "from memory",
    },
    Chip {
        id: "gd32vf103cb",
        name: "GD32VF103CB",
        vendor: "GigaDevice",
        core: CoreKind::Rv32imac,
        fpu: Fpu::None,
        ram_bytes: 32 * KIB,
        flash_bytes: 128 * KIB,
        qemu_machine: None,
        note: "",
        source: "from memory",
    },
    Chip {
        id: "ch32v003f4",
        name: "CH32V003F4",
        vendor: "WCH",
        core: CoreKind::Rv32ec,
        fpu: Fpu::None,
        ram_bytes: 2 * KIB,
        flash_bytes: 16 * KIB,
        qemu_machine: None,
        note: "",
        source: "from memory",
    },
];

/// Widest line of [`render_text`], in characters.
pub const TEXT_WIDTH: usize = 120;

/// The table as text for people: one row per chip, memory in bytes as `hone plan` writes
/// them (`16 384 B`), and the source of its figures on the lines below it, all within
/// [`TEXT_WIDTH`] columns.
pub fn render_text(chips: &[Chip]) -> String {
    use std::fmt::Write;
    let name_w = chips
        .iter()
        .map(|c| c.name.chars().count())
        .max()
        .unwrap_or(4)
        .max(4);
    let mut s = String::new();
    let _ = writeln!(
        s,
        "{:<12} {:<name_w$} {:<11} {:<7} {:>13} {:>13}",
        "id", "name", "core", "FPU", "RAM", "flash"
    );
    let indent = 13;
    for c in chips {
        let _ = writeln!(
            s,
            "{:<12} {:<name_w$} {:<11} {:<7} {:>13} {:>13}",
            c.id,
            c.name,
            c.core.to_string(),
            c.fpu.to_string(),
            crate::memplan::bytes(c.ram_bytes as u64),
            crate::memplan::bytes(c.flash_bytes as u64)
        );
        let source = format!("source: {}", c.source);
        let _ = writeln!(
            s,
            "{:indent$}{}",
            "",
            crate::memplan::wrap_at(&source, TEXT_WIDTH, indent, indent)
        );
    }
    s
}

/// Every chip in the table, QEMU targets first.
pub fn all() -> &'static [Chip] {
    &CHIPS
}

/// The chip whose id equals `id`, ignoring ASCII case.
pub fn find(id: &str) -> Option<&'static Chip> {
    CHIPS.iter().find(|c| c.id.eq_ignore_ascii_case(id))
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::collections::HashSet;

    #[test]
    fn the_flash_limit_is_the_largest_flash_of_the_chip_table() {
        let largest = all().iter().map(|c| c.flash_bytes).max().unwrap();
        assert_eq!(crate::limits::FLASH_BYTES, u64::from(largest));
    }

    #[test]
    fn ids_are_unique_lowercase_and_plain() {
        let mut seen = HashSet::new();
        for c in all() {
            assert!(seen.insert(c.id), "duplicate id {}", c.id);
            assert!(
                c.id.bytes()
                    .all(|b| b.is_ascii_lowercase() || b.is_ascii_digit() || b == b'-'),
                "id {} has characters other than a-z, 0-9, -",
                c.id
            );
        }
        assert!(all().len() >= 12);
    }

    #[test]
    fn every_entry_is_filled_in() {
        for c in all() {
            assert!(c.ram_bytes > 0 && c.flash_bytes > 0, "{}", c.id);
            assert!(!c.name.is_empty() && !c.vendor.is_empty(), "{}", c.id);
            assert!(!c.source.trim().is_empty(), "{} has no source", c.id);
        }
    }

    #[test]
    fn lookup_ignores_case_and_rejects_unknown_ids() {
        let c = find("STM32F103C8").expect("known chip");
        assert_eq!(c.id, "stm32f103c8");
        assert!(std::ptr::eq(c, find("stm32f103c8").expect("known chip")));
        assert_eq!(find("Mps2-AN386").map(|c| c.id), Some("mps2-an386"));
        assert!(find("stm32f103").is_none());
        assert!(find("").is_none());
        for c in all() {
            assert_eq!(find(c.id).map(|f| f.id), Some(c.id));
        }
    }

    /// The emulated targets carry the sizes the project's QEMU runs are built for.
    #[test]
    fn qemu_targets_have_the_expected_memory() {
        let expect = [
            (
                "lm3s6965",
                CoreKind::CortexM3,
                Fpu::None,
                64 * KIB,
                256 * KIB,
            ),
            (
                "nrf51822",
                CoreKind::CortexM0,
                Fpu::None,
                16 * KIB,
                256 * KIB,
            ),
            (
                "mps2-an386",
                CoreKind::CortexM4,
                Fpu::Single,
                4 * MIB,
                4 * MIB,
            ),
            ("fe310", CoreKind::Rv32imac, Fpu::None, 16 * KIB, 16 * MIB),
        ];
        for (id, core, fpu, ram, flash) in expect {
            let c = find(id).expect("QEMU target present");
            assert_eq!(
                (c.core, c.fpu, c.ram_bytes, c.flash_bytes),
                (core, fpu, ram, flash)
            );
            assert!(c.qemu_machine.is_some(), "{id} lacks its QEMU machine name");
        }
        let emulated = all().iter().filter(|c| c.qemu_machine.is_some()).count();
        assert_eq!(emulated, 4);
    }

    #[test]
    fn text_table_fits_its_width_and_shows_every_source() {
        let text = render_text(all());
        for line in text.lines() {
            assert!(line.chars().count() <= TEXT_WIDTH, "{line}");
        }
        let flat = text.split_whitespace().collect::<Vec<_>>().join(" ");
        for c in all() {
            let source = c.source.split_whitespace().collect::<Vec<_>>().join(" ");
            assert!(flat.contains(&format!("source: {source}")), "{}", c.id);
        }
        assert!(text.contains("16 384 B"), "{text}");
    }

    #[test]
    fn labels() {
        assert_eq!(CoreKind::CortexM0Plus.to_string(), "Cortex-M0+");
        assert_eq!(Fpu::Double.to_string(), "double");
        let f411 = find("stm32f411ce").expect("known chip");
        assert_eq!(f411.core_label(), "Cortex-M4F");
        let h7 = find("stm32h743zi").expect("known chip");
        assert_eq!(h7.core_label(), "Cortex-M7 (double-precision FPU)");
        let m0 = find("nrf51822").expect("known chip");
        assert_eq!(m0.core_label(), "Cortex-M0");
        assert!(CoreKind::Rv32imac.is_riscv() && !CoreKind::CortexM3.is_riscv());
        assert!(!CoreKind::Rv32ec.has_hw_multiply() && CoreKind::CortexM0.has_hw_multiply());
    }
}

/// Clock, run current and supply of a chip, for the time and energy estimate of a training
/// session (`hone plan`). Kept apart from [`Chip`] so that chips without these figures need
/// none.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct ChipPower {
    /// The chip's [`Chip::id`].
    pub id: &'static str,
    /// Core clock the estimate assumes (the chip's maximum), MHz.
    pub clock_mhz: f64,
    /// Run-mode supply current per MHz, executing from flash, µA/MHz.
    pub run_ua_per_mhz: f64,
    /// Supply voltage, volts.
    pub supply_v: f64,
    /// Where the figures come from: a datasheet, or "from memory".
    pub source: &'static str,
}

/// Run-mode figures of the chips that have them. Every row is from memory (the datasheets'
/// headline run currents, not looked up for this table); treat the estimates as rough.
pub static CHIP_POWER: [ChipPower; 8] = [
    ChipPower {
        id: "stm32l031k6",
        clock_mhz: 32.0,
        run_ua_per_mhz: 76.0,
        supply_v: 3.0,
        source: "from memory (DS10668 headline: 76 µA/MHz in run mode)",
    },
    ChipPower {
        id: "stm32g031k8",
        clock_mhz: 64.0,
        run_ua_per_mhz: 100.0,
        supply_v: 3.0,
        source: "from memory (DS12992 headline: 100 µA/MHz in run mode)",
    },
    ChipPower {
        id: "stm32f103c8",
        clock_mhz: 72.0,
        run_ua_per_mhz: 500.0,
        supply_v: 3.3,
        source: "from memory (STM32F103x8 datasheet: about 36 mA at 72 MHz)",
    },
    ChipPower {
        id: "stm32f411ce",
        clock_mhz: 100.0,
        run_ua_per_mhz: 100.0,
        supply_v: 3.3,
        source: "from memory (STM32F411xC/E datasheet headline: 100 µA/MHz)",
    },
    ChipPower {
        id: "stm32l476rg",
        clock_mhz: 80.0,
        run_ua_per_mhz: 100.0,
        supply_v: 3.0,
        source: "from memory (STM32L476xx datasheet headline: 100 µA/MHz in run mode)",
    },
    ChipPower {
        id: "nrf51822",
        clock_mhz: 16.0,
        run_ua_per_mhz: 275.0,
        supply_v: 3.0,
        source: "from memory (nRF51822 product specification: about 4.4 mA running from flash \
                 at 16 MHz)",
    },
    ChipPower {
        id: "nrf52832",
        clock_mhz: 64.0,
        run_ua_per_mhz: 58.0,
        supply_v: 3.0,
        source: "from memory (nRF52832 product specification: 58 µA/MHz from flash, DC/DC on)",
    },
    ChipPower {
        id: "nrf52840",
        clock_mhz: 64.0,
        run_ua_per_mhz: 52.0,
        supply_v: 3.0,
        source: "from memory (nRF52840 product specification: 52 µA/MHz from flash, DC/DC on)",
    },
];

/// The run-mode figures of chip `id`, if the table has them.
pub fn power(id: &str) -> Option<&'static ChipPower> {
    CHIP_POWER.iter().find(|p| p.id == id)
}

/// Average clock cycles per instruction of a core running integer code from flash, for the
/// time estimate, and where the figure comes from. All from memory: the cores' published
/// cycle counts (one cycle for most data instructions, two for loads, two to three for a
/// taken branch) averaged over a typical mix, plus a little for flash wait states.
pub fn cycles_per_instruction(core: CoreKind) -> (f64, &'static str) {
    match core {
        CoreKind::CortexM0 => (
            1.5,
            "from memory (Cortex-M0: taken branches 3 cycles, loads 2)",
        ),
        CoreKind::CortexM0Plus => (
            1.4,
            "from memory (Cortex-M0+: taken branches 2 cycles, loads 2)",
        ),
        CoreKind::CortexM3 | CoreKind::CortexM4 => (
            1.3,
            "from memory (Cortex-M3/M4: pipelined loads, taken branches 2 to 4 cycles)",
        ),
        CoreKind::CortexM7 => (0.8, "from memory (Cortex-M7: dual issue)"),
        CoreKind::Rv32imac | CoreKind::Rv32imc | CoreKind::Rv32ec => (
            1.3,
            "from memory (small in-order RV32 cores: loads and taken branches 2 cycles)",
        ),
    }
}
