//! Builds the firmware of every QEMU board, boots it, and checks what it reports: clean exit,
//! calibrated counter, dot products equal to the host's, memory figures equal to the ELF's, and
//! the 4 KiB test pattern recovered bit for bit through defmt.
//!
//! Needs `qemu-system-arm` and `qemu-system-riscv32` (Debian packages `qemu-system-arm` and
//! `qemu-system-misc`) and the rustup targets of the boards; a missing emulator fails the test
//! with a message saying what to install.

use std::time::Duration;

use hone_host::device::report::TickUnit;
use hone_host::device::{
    build_bin, build_firmware, decode, default_boards_dir, reference, run_elf, run_qemu,
    DeviceError, DeviceRun, QemuBoard, DEFAULT_TIMEOUT,
};

/// Must match `boards/fw/src/workload.rs`.
const PATTERN_LEN: usize = 4096;

fn run(board: QemuBoard) -> DeviceRun {
    let elf = build_firmware(board, &default_boards_dir()).unwrap_or_else(|e| panic!("{e}"));
    let run = run_elf(board, &elf, DEFAULT_TIMEOUT).unwrap_or_else(|e| panic!("{e}"));
    run.ensure_success()
        .unwrap_or_else(|e| panic!("{e}\nfull log:\n{}", run.log_text()));
    run
}

fn check(board: QemuBoard) {
    let run = run(board);
    let r = &run.report;

    // The payload channel: the 4 KiB counter pattern, bit for bit.
    let pattern = r.blob("pattern").expect("pattern payload");
    assert_eq!(pattern.bytes.len(), PATTERN_LEN);
    assert!(
        pattern.bytes == reference::counter_pattern(PATTERN_LEN),
        "{board}: pattern differs from the host's"
    );

    // The arithmetic: both dot products equal the host's recomputation.
    assert_eq!(r.dots.len(), 2, "{board}: dot records");
    for d in &r.dots {
        let seed = u32::try_from(d.seed).expect("seed fits u32");
        let len = usize::try_from(d.len).expect("len fits usize");
        let want = match d.name.as_str() {
            "dot_i8" => reference::dot_i8_total(seed, len, d.reps),
            "dot_i16" => reference::dot_i16_total(seed, len, d.reps),
            other => panic!("{board}: unexpected dot record {other}"),
        };
        assert_eq!(d.total, want, "{board}: {} total", d.name);
    }

    // The counter: the boot ratio agrees with the spin-loop calibration within two ticks.
    let boot = r.boot.as_ref().expect("boot record");
    let cal = r.calibration.expect("calibration record");
    let TickUnit::Instructions { num, den } = boot.unit else {
        panic!("{board}: QEMU boards count instructions")
    };
    assert!(
        (cal.ticks * num).abs_diff(cal.instructions * den) <= 2 * num,
        "{board}: {} instructions in {} ticks, documented {num}/{den} per tick",
        cal.instructions,
        cal.ticks
    );

    // The spans: one per dot product, covering len * reps MACs, at a plausible cost per MAC.
    for d in &r.dots {
        let span = r.span(&d.name).expect("span per dot product");
        assert_eq!(span.work, d.len * d.reps, "{board}: {} work", d.name);
        let per_mac = span.units_per_work().expect("work > 0");
        assert!(
            (1.0..100.0).contains(&per_mac),
            "{board}: {} costs {per_mac} instructions per MAC",
            d.name
        );
    }

    // The memory figures the firmware read from linker symbols equal the ELF's sections.
    let mem = r.memory.expect("mem record");
    let s = &run.sections;
    assert_eq!(
        (mem.text, mem.rodata, mem.data, mem.bss, mem.uninit),
        (s.text, s.rodata, s.data, s.bss, s.uninit),
        "{board}: firmware vs ELF section sizes"
    );
    assert_eq!(mem.static_ram, s.static_ram());
    assert!(
        mem.stack_peak > 0 && mem.stack_peak < mem.stack_size,
        "{board}: stack peak {} of {}",
        mem.stack_peak,
        mem.stack_size
    );

    let i8_mac = r.span("dot_i8").and_then(|s| s.units_per_work());
    let i16_mac = r.span("dot_i16").and_then(|s| s.units_per_work());
    println!(
        "{board}: insn/tick {:.3} (boot {num}/{den}); insn/MAC i8 {:.3}, i16 {:.3}; \
         stack peak {} of {}; static RAM {}; .text {}; .rodata {}; QEMU {:.2} s",
        cal.instructions_per_tick(),
        i8_mac.unwrap_or(f64::NAN),
        i16_mac.unwrap_or(f64::NAN),
        mem.stack_peak,
        mem.stack_size,
        mem.static_ram,
        s.text,
        s.rodata,
        run.wall.as_secs_f64()
    );
}

#[test]
fn lm3s6965evb_runs_and_reports() {
    check(QemuBoard::Lm3s6965evb);
}

#[test]
fn microbit_runs_and_reports() {
    check(QemuBoard::Microbit);
}

#[test]
fn mps2_an386_runs_and_reports() {
    check(QemuBoard::Mps2An386);
}

#[test]
fn sifive_e_runs_and_reports() {
    check(QemuBoard::SifiveE);
}

/// A firmware that does not exit in time is killed and reported as a timeout.
#[test]
fn timeout_kills_qemu_and_says_so() {
    let board = QemuBoard::Mps2An386;
    let elf = build_firmware(board, &default_boards_dir()).unwrap_or_else(|e| panic!("{e}"));
    let err = run_elf(board, &elf, Duration::from_millis(1)).expect_err("1 ms is too short");
    assert!(
        matches!(err, DeviceError::Timeout { .. }),
        "expected a timeout, got: {err}"
    );
    assert!(err.to_string().contains("did not exit"), "{err}");
}

/// Damaged output is rejected, never decoded into wrong values.
#[test]
fn damaged_output_is_rejected() {
    let board = QemuBoard::Lm3s6965evb;
    let elf = build_firmware(board, &default_boards_dir()).unwrap_or_else(|e| panic!("{e}"));
    let bytes = std::fs::read(&elf).expect("read ELF");
    let table = decode::load_table(&bytes, &elf).unwrap_or_else(|e| panic!("{e}"));
    let out = run_qemu(board, &elf, DEFAULT_TIMEOUT).unwrap_or_else(|e| panic!("{e}"));
    assert_eq!(out.exit_code, 0);
    let lines = decode::decode_stream(&table, &out.stdout).unwrap_or_else(|e| panic!("{e}"));
    assert!(hone_host::device::Report::from_lines(&lines).is_ok());

    // Drop the last frame's terminating zero: the stream now ends inside a frame.
    assert_eq!(out.stdout.last(), Some(&0));
    let cut = &out.stdout[..out.stdout.len() - 1];
    let err = decode::decode_stream(&table, cut).expect_err("truncated stream");
    assert!(matches!(err, DeviceError::Decode { .. }), "{err}");

    // Flip one bit in every byte of the middle of the stream (inside the pattern payload):
    // whatever still decodes must fail the payload checks.
    let mut damaged = out.stdout.clone();
    let mid = damaged.len() / 2;
    for b in &mut damaged[mid..mid + 8] {
        if *b != 0 && *b != 1 {
            *b ^= 0x01;
        }
    }
    let result = decode::decode_stream(&table, &damaged)
        .and_then(|lines| hone_host::device::Report::from_lines(&lines));
    assert!(result.is_err(), "damaged stream was accepted");
}

/// A panic in the session ends the run with a `panic` record and exit code 101, and a read past
/// the end of the micro:bit's RAM with a `fault` record and exit code 3; both are failures.
#[test]
fn panic_and_fault_end_the_run_with_their_codes() {
    let folder = default_boards_dir().join("checks");
    for (bin, code) in [("panic", 101), ("fault", 3)] {
        let elf = build_bin(&folder, bin).unwrap_or_else(|e| panic!("{e}"));
        let run =
            run_elf(QemuBoard::Microbit, &elf, DEFAULT_TIMEOUT).unwrap_or_else(|e| panic!("{e}"));
        assert_eq!(run.exit_code, code, "{bin}:\n{}", run.log_text());
        assert_eq!(run.report.done, Some(i64::from(code)), "{bin}");
        let failure = run.ensure_success().expect_err("a failed run").to_string();
        match bin {
            "panic" => {
                let (file, line) = run.report.panic.clone().expect("panic record");
                assert!(file.ends_with("panic.rs") && line > 0, "{file}:{line}");
                assert!(failure.contains("panicked at"), "{failure}");
            }
            _ => {
                assert!(run.report.fault.is_some(), "fault record");
                assert!(failure.contains("CPU fault"), "{failure}");
            }
        }
    }
}
