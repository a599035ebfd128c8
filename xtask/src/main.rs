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
/// The minimum Rust the core declares (`rust-version` in `core/Cargo.toml`); the test command
/// checks the core with it. Its dependencies set the floor (`fixed` 1.31 needs 1.93).
const CORE_MSRV: &str = "1.93";
/// Debian packages with the Arm cross compiler and C library the C example firmware builds
/// with (`boards/ffi/example`).
const GCC_PACKAGES: [&str; 2] = ["gcc-arm-none-eabi", "libnewlib-arm-none-eabi"];
/// Targets the C static library (`boards/ffi`) is built for: the M3 for the C example under
/// QEMU, the M0 for its code size.
const FFI_TARGETS: [&str; 2] = ["thumbv7m-none-eabi", "thumbv6m-none-eabi"];

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
    run_env(steps, name, dir, program, args, &[])
}

/// [`run`] with environment variables set for the program.
fn run_env(
    steps: &mut Vec<Step>,
    name: &str,
    dir: &Path,
    program: &str,
    args: &[&str],
    env: &[(&str, &str)],
) -> Result<(), String> {
    let shown: Vec<String> = env.iter().map(|(k, v)| format!("{k}={v:?} ")).collect();
    eprintln!(
        "\n==> {name}\n    $ {}{program} {}",
        shown.concat(),
        args.join(" ")
    );
    let start = Instant::now();
    let status = Command::new(program)
        .args(args)
        .envs(env.iter().copied())
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
    let need_qemu = !have("qemu-system-arm") || !have("qemu-system-riscv32");
    let need_gcc = !have("arm-none-eabi-gcc");
    if !need_qemu && !need_gcc {
        return Ok(());
    }
    // Debian's QEMU and Arm cross compiler; CI runs as root on a fresh machine.
    run(steps, "apt-get update", root, "apt-get", &["update", "-q"])
        .map_err(|e| format!("{e}: installing QEMU and gcc needs root and Debian's apt-get"))?;
    let mut install = vec!["install", "-y", "-q", "--no-install-recommends"];
    if need_qemu {
        install.extend(QEMU_PACKAGES);
    }
    if need_gcc {
        install.extend(GCC_PACKAGES);
    }
    run(steps, "install QEMU and gcc", root, "apt-get", &install)?;
    if !have("qemu-system-arm") || !have("qemu-system-riscv32") {
        return Err(
            "QEMU is still missing after apt-get install qemu-system-arm qemu-system-misc".into(),
        );
    }
    if !have("arm-none-eabi-gcc") {
        return Err(
            "arm-none-eabi-gcc is still missing after apt-get install gcc-arm-none-eabi".into(),
        );
    }
    Ok(())
}

fn test(steps: &mut Vec<Step>) -> Result<(), String> {
    let root = root();
    let boards = root.join("boards");
    setup(steps, &root)?;
    let start = Instant::now();
    let onnx = onnx_proto(true);
    steps.push(Step {
        name: "ONNX protobuf code is current".into(),
        seconds: start.elapsed().as_secs_f64(),
    });
    onnx?;
    let start = Instant::now();
    let header = ffi_header(true);
    steps.push(Step {
        name: "C header of hone-ffi is current".into(),
        seconds: start.elapsed().as_secs_f64(),
    });
    header?;
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
    // The core's documentation, which is also its crate README, builds without a warning
    // (broken intra-doc links included).
    run_env(
        steps,
        "hone-core docs",
        &root,
        "cargo",
        &["doc", "-p", "hone-core", "--no-deps", "--locked"],
        &[("RUSTDOCFLAGS", "-D warnings")],
    )?;
    // The core's declared minimum Rust (`rust-version` in core/Cargo.toml, the crate firmware
    // depends on) is checked with that toolchain, every feature on.
    let msrv = format!("+{CORE_MSRV}");
    run(
        steps,
        &format!("rustup toolchain {CORE_MSRV}"),
        &root,
        "rustup",
        &["toolchain", "install", CORE_MSRV, "--profile", "minimal"],
    )?;
    run(
        steps,
        &format!("hone-core on Rust {CORE_MSRV}"),
        &root,
        "cargo",
        &[
            &msrv,
            "check",
            "-p",
            "hone-core",
            "--all-features",
            "--locked",
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
    // The smallest core: every optional part off (layer kinds, value words, training parts).
    // Clippy and the tests that check what a build without them accepts and trains (the lean
    // firmware runs it on a board).
    run(
        steps,
        "clippy hone-core without optional parts",
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
        "hone-core tests without optional parts",
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
    // Every board crate, in the cargo profile of the firmware table (`hone_qemu::board`).
    for hone_qemu::board::Firmware {
        folder: b, profile, ..
    } in hone_qemu::board::FIRMWARE
    {
        run(
            steps,
            &format!("firmware {b}"),
            &boards.join(b),
            "cargo",
            &["build", "--profile", profile, "--locked"],
        )?;
        run(
            steps,
            &format!("clippy firmware {b}"),
            &boards.join(b),
            "cargo",
            &[
                "clippy",
                "--profile",
                profile,
                "--locked",
                "--",
                "-D",
                "warnings",
            ],
        )?;
    }
    // The C interface's static library, once per target (the C example test links the
    // thumbv7m one), and its lint and host unit tests.
    let ffi = boards.join("ffi");
    for t in FFI_TARGETS {
        run(
            steps,
            &format!("C static library for {t}"),
            &ffi,
            "cargo",
            &["build", "--release", "--locked", "--target", t],
        )?;
    }
    run(
        steps,
        "clippy hone-ffi",
        &ffi,
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
        "hone-ffi tests",
        &ffi,
        "cargo",
        &["test", "--locked"],
    )?;
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

/// The ONNX protobuf schema (published by the ONNX project, Apache-2.0) and the Rust code
/// generated from it, both committed so that building hone needs no `protoc`.
const ONNX_PROTO: &str = "host-cli/host/proto/onnx.proto";
/// See [`ONNX_PROTO`].
const ONNX_CODE: &str = "host-cli/host/src/onnx/pb.rs";

/// The Rust code for [`ONNX_PROTO`]: parsed by `protox`, generated by `prost-build`, formatted
/// by `rustfmt`, with a header saying where it comes from.
fn onnx_code(root: &Path) -> Result<String, String> {
    let proto = root.join(ONNX_PROTO);
    let dir = proto.parent().unwrap_or(root);
    let fds = protox::compile([&proto], [dir]).map_err(|e| format!("{ONNX_PROTO}: {e}"))?;
    let tmp = std::env::temp_dir().join(format!("hone-onnx-gen-{}", std::process::id()));
    std::fs::create_dir_all(&tmp).map_err(|e| format!("{}: {e}", tmp.display()))?;
    let result = (|| {
        prost_build::Config::new()
            .out_dir(&tmp)
            .compile_fds(fds)
            .map_err(|e| format!("prost-build: {e}"))?;
        let file = tmp.join("onnx.rs");
        let status = Command::new("rustfmt")
            .args(["--edition", "2021"])
            .arg(&file)
            .status()
            .map_err(|e| format!("cannot start rustfmt: {e}"))?;
        if !status.success() {
            return Err(format!("rustfmt failed ({status})"));
        }
        let body =
            std::fs::read_to_string(&file).map_err(|e| format!("{}: {e}", file.display()))?;
        Ok(format!(
            "// Generated from {ONNX_PROTO} by `cargo xtask onnx-proto` (protox and prost-build).\n\
             // Do not edit: change the schema, then run the command again.\n\n{body}"
        ))
    })();
    let _ = std::fs::remove_dir_all(&tmp);
    result
}

/// `cargo xtask onnx-proto`: writes [`ONNX_CODE`]; with `--check`, fails when it is stale.
fn onnx_proto(check: bool) -> Result<(), String> {
    let root = root();
    let fresh = onnx_code(&root)?;
    let path = root.join(ONNX_CODE);
    if check {
        let committed =
            std::fs::read_to_string(&path).map_err(|e| format!("{}: {e}", path.display()))?;
        if committed != fresh {
            return Err(format!(
                "{ONNX_CODE} is stale: run `cargo xtask onnx-proto` and commit the result"
            ));
        }
        eprintln!("{ONNX_CODE} is current");
        return Ok(());
    }
    std::fs::write(&path, fresh).map_err(|e| format!("{}: {e}", path.display()))?;
    eprintln!("wrote {ONNX_CODE}");
    Ok(())
}

/// The C interface crate and the header cbindgen generates from it (committed).
const FFI_CRATE: &str = "boards/ffi";
/// See [`FFI_CRATE`].
const FFI_HEADER: &str = "boards/ffi/include/hone.h";

/// The C header of [`FFI_CRATE`], generated by cbindgen with the crate's `cbindgen.toml`.
fn ffi_header_text(root: &Path) -> Result<String, String> {
    let crate_dir = root.join(FFI_CRATE);
    let config = cbindgen::Config::from_file(crate_dir.join("cbindgen.toml"))
        .map_err(|e| format!("{FFI_CRATE}/cbindgen.toml: {e}"))?;
    let bindings = cbindgen::Builder::new()
        .with_config(config)
        .with_src(crate_dir.join("src/lib.rs"))
        .generate()
        .map_err(|e| format!("cbindgen: {e}"))?;
    let mut out = Vec::new();
    bindings.write(&mut out);
    String::from_utf8(out).map_err(|e| format!("cbindgen wrote non-UTF-8: {e}"))
}

/// `cargo xtask ffi-header`: writes [`FFI_HEADER`]; with `--check`, fails when it is stale.
fn ffi_header(check: bool) -> Result<(), String> {
    let root = root();
    let fresh = ffi_header_text(&root)?;
    let path = root.join(FFI_HEADER);
    if check {
        let committed =
            std::fs::read_to_string(&path).map_err(|e| format!("{}: {e}", path.display()))?;
        if committed != fresh {
            return Err(format!(
                "{FFI_HEADER} is stale: run `cargo xtask ffi-header` and commit the result"
            ));
        }
        eprintln!("{FFI_HEADER} is current");
        return Ok(());
    }
    std::fs::write(&path, fresh).map_err(|e| format!("{}: {e}", path.display()))?;
    eprintln!("wrote {FFI_HEADER}");
    Ok(())
}

const USAGE: &str = "usage: cargo xtask test\n       cargo xtask onnx-proto [--check]\n       cargo xtask ffi-header [--check]\n\n\
test: installs what the tests need (rustup targets, Debian's qemu-system-arm and qemu-system-misc),\n\
then runs the format check, clippy with -D warnings, the no_std and firmware builds, and every test.\n\
onnx-proto: generates the ONNX protobuf code from the committed schema (--check: fails when stale).\n\
ffi-header: generates the C header of boards/ffi with cbindgen (--check: fails when stale).";

fn main() -> ExitCode {
    let args: Vec<String> = std::env::args().skip(1).collect();
    let args: Vec<&str> = args.iter().map(String::as_str).collect();
    match args[..] {
        ["test"] => {}
        ["onnx-proto"] | ["onnx-proto", "--check"] => {
            return match onnx_proto(args.len() == 2) {
                Ok(()) => ExitCode::SUCCESS,
                Err(e) => {
                    eprintln!("error: {e}");
                    ExitCode::FAILURE
                }
            };
        }
        ["ffi-header"] | ["ffi-header", "--check"] => {
            return match ffi_header(args.len() == 2) {
                Ok(()) => ExitCode::SUCCESS,
                Err(e) => {
                    eprintln!("error: {e}");
                    ExitCode::FAILURE
                }
            };
        }
        _ => {
            eprintln!("{USAGE}");
            return ExitCode::from(2);
        }
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
