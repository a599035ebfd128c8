//! Project automation. `cargo xtask test` is the project's one test command: on a fresh
//! machine it installs what the tests need (rustup targets, Debian's QEMU), then runs the
//! format check, clippy with `-D warnings`, every test, and the no_std builds of the core and
//! the firmware. It stops at the first failure and prints how long each step took.

use std::path::{Path, PathBuf};
use std::process::{Command, ExitCode};
use std::time::Instant;

/// Targets the core and the firmware build for.
const TARGETS: [&str; 4] = [
    "thumbv6m-none-eabi",
    "thumbv7m-none-eabi",
    "thumbv7em-none-eabihf",
    "riscv32imc-unknown-none-elf",
];
/// Targets the core alone must build for.
const CORE_TARGETS: [&str; 3] = [
    "thumbv6m-none-eabi",
    "thumbv7em-none-eabihf",
    "riscv32imc-unknown-none-elf",
];
/// Debian packages with the QEMU system emulators the firmware tests run on.
const QEMU_PACKAGES: [&str; 2] = ["qemu-system-arm", "qemu-system-misc"];
/// Board crates built in release mode (the QEMU ones also run in the tests).
const BOARDS: [&str; 6] = [
    "lm3s6965evb",
    "microbit",
    "mps2-an386",
    "sifive-e",
    "pico",
    "lean",
];

fn root() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR"))
        .parent()
        .map(Path::to_path_buf)
        .unwrap_or_else(|| PathBuf::from("."))
}

struct Step {
    name: String,
    seconds: f64,
}

fn run(
    steps: &mut Vec<Step>,
    name: &str,
    dir: &Path,
    program: &str,
    args: &[&str],
) -> Result<(), String> {
    eprintln!("\n==> {name}\n    $ {program} {}", args.join(" "));
    let start = Instant::now();
    let status = Command::new(program)
        .args(args)
        .current_dir(dir)
        .status()
        .map_err(|e| format!("{name}: cannot start `{program}`: {e}"))?;
    let seconds = start.elapsed().as_secs_f64();
    steps.push(Step {
        name: name.to_string(),
        seconds,
    });
    if status.success() {
        Ok(())
    } else {
        Err(format!("{name} failed ({status})"))
    }
}

fn have(program: &str) -> bool {
    Command::new("sh")
        .args(["-c", &format!("command -v {program} >/dev/null 2>&1")])
        .status()
        .map(|s| s.success())
        .unwrap_or(false)
}

fn setup(steps: &mut Vec<Step>, root: &Path) -> Result<(), String> {
    let mut args = vec!["target", "add"];
    args.extend(TARGETS);
    run(steps, "rustup targets", root, "rustup", &args)?;
    run(
        steps,
        "rustup components",
        root,
        "rustup",
        &["component", "add", "rustfmt", "clippy", "llvm-tools"],
    )?;
    if have("qemu-system-arm") && have("qemu-system-riscv32") {
        return Ok(());
    }
    // Debian's QEMU; CI runs as root on a fresh machine.
    run(steps, "apt-get update", root, "apt-get", &["update", "-q"])
        .map_err(|e| format!("{e}: installing QEMU needs root and Debian's apt-get"))?;
    let mut install = vec!["install", "-y", "-q", "--no-install-recommends"];
    install.extend(QEMU_PACKAGES);
    run(steps, "install QEMU", root, "apt-get", &install)?;
    if !have("qemu-system-arm") || !have("qemu-system-riscv32") {
        return Err(
            "QEMU is still missing after apt-get install qemu-system-arm qemu-system-misc".into(),
        );
    }
    Ok(())
}

fn test(steps: &mut Vec<Step>) -> Result<(), String> {
    let root = root();
    let boards = root.join("boards");
    setup(steps, &root)?;
    run(
        steps,
        "format check",
        &root,
        "cargo",
        &["fmt", "--all", "--", "--check"],
    )?;
    run(
        steps,
        "format check (boards)",
        &boards,
        "cargo",
        &["fmt", "--all", "--", "--check"],
    )?;
    run(
        steps,
        "clippy",
        &root,
        "cargo",
        &[
            "clippy",
            "--workspace",
            "--all-targets",
            "--locked",
            "--",
            "-D",
            "warnings",
        ],
    )?;
    for t in CORE_TARGETS {
        run(
            steps,
            &format!("hone-core for {t}"),
            &root,
            "cargo",
            &["build", "-p", "hone-core", "--locked", "--target", t],
        )?;
    }
    run(
        steps,
        "hone-core with defmt for thumbv6m-none-eabi",
        &root,
        "cargo",
        &[
            "build",
            "-p",
            "hone-core",
            "--locked",
            "--target",
            "thumbv6m-none-eabi",
            "--features",
            "defmt",
        ],
    )?;
    // The smallest core: every optional layer kind off. Clippy and the tests that check what
    // a build without them accepts and trains (the lean firmware runs it on a board).
    run(
        steps,
        "clippy hone-core without optional layers",
        &root,
        "cargo",
        &[
            "clippy",
            "-p",
            "hone-core",
            "--no-default-features",
            "--locked",
            "--target",
            "thumbv6m-none-eabi",
            "--",
            "-D",
            "warnings",
        ],
    )?;
    run(
        steps,
        "hone-core tests without optional layers",
        &root,
        "cargo",
        &[
            "test",
            "-p",
            "hone-core",
            "--no-default-features",
            "--locked",
            "--lib",
            "built_",
        ],
    )?;
    for b in BOARDS {
        run(
            steps,
            &format!("firmware {b}"),
            &boards.join(b),
            "cargo",
            &["build", "--release", "--locked"],
        )?;
        run(
            steps,
            &format!("clippy firmware {b}"),
            &boards.join(b),
            "cargo",
            &["clippy", "--release", "--locked", "--", "-D", "warnings"],
        )?;
    }
    run(
        steps,
        "tests",
        &root,
        "cargo",
        &["test", "--workspace", "--locked"],
    )?;
    // The fuzz project is a workspace of its own: its helpers (the checks every target runs)
    // are formatted, linted and unit-tested here; fuzzing itself is run by hand (fuzz/README.md).
    let fuzz = root.join("fuzz");
    run(
        steps,
        "format check (fuzz)",
        &fuzz,
        "cargo",
        &["fmt", "--", "--check"],
    )?;
    run(
        steps,
        "clippy fuzz",
        &fuzz,
        "cargo",
        &[
            "clippy",
            "--all-targets",
            "--locked",
            "--",
            "-D",
            "warnings",
        ],
    )?;
    run(
        steps,
        "fuzz helper tests",
        &fuzz,
        "cargo",
        &["test", "--lib", "--locked"],
    )?;
    Ok(())
}

fn main() -> ExitCode {
    let args: Vec<String> = std::env::args().skip(1).collect();
    if args.first().map(String::as_str) != Some("test") || args.len() != 1 {
        eprintln!("usage: cargo xtask test\n\nInstalls what the tests need (rustup targets, Debian's qemu-system-arm and qemu-system-misc),\nthen runs the format check, clippy with -D warnings, the no_std and firmware builds, and every test.");
        return ExitCode::from(2);
    }
    let start = Instant::now();
    let mut steps = Vec::new();
    let result = test(&mut steps);
    eprintln!("\nstep times:");
    for s in &steps {
        eprintln!("  {:>7.1} s  {}", s.seconds, s.name);
    }
    eprintln!("  {:>7.1} s  total", start.elapsed().as_secs_f64());
    match result {
        Ok(()) => {
            eprintln!("all checks passed");
            ExitCode::SUCCESS
        }
        Err(e) => {
            eprintln!("error: {e}");
            ExitCode::FAILURE
        }
    }
}
