//! Building a board's firmware with cargo.

use std::io::{BufRead, IsTerminal, Read};
use std::path::{Path, PathBuf};
use std::process::{Command, Stdio};

use crate::{DeviceError, QemuBoard};

/// Environment variable naming the hone source tree to build firmware from.
pub const REPO_VAR: &str = "HONE_REPO";

/// The nearest folder at or above `start` that holds `boards/Cargo.toml` and `core/Cargo.toml`.
#[must_use]
pub fn find_repo_from(start: &Path) -> Option<PathBuf> {
    start
        .ancestors()
        .find(|d| d.join("boards/Cargo.toml").is_file() && d.join("core/Cargo.toml").is_file())
        .map(Path::to_path_buf)
}

/// The hone source tree the firmware is built from: the folder [`REPO_VAR`] names (or the tree
/// above it), else the tree at or above the current directory. The installed binary does not
/// depend on where it was compiled.
///
/// # Errors
/// [`DeviceError::NoRepo`] when there is none.
pub fn find_repo() -> Result<PathBuf, DeviceError> {
    let start = match std::env::var_os(REPO_VAR) {
        Some(dir) => PathBuf::from(dir),
        None => std::env::current_dir().unwrap_or_else(|_| PathBuf::from(".")),
    };
    let start = std::fs::canonicalize(&start).unwrap_or(start);
    find_repo_from(&start).ok_or(DeviceError::NoRepo {
        start,
        var: REPO_VAR,
    })
}

/// The `boards/` folder of [`find_repo`]'s tree; `boards` under the current directory when
/// there is no tree (the build then fails naming that folder). A command checks
/// [`find_repo`] first, so its user sees [`DeviceError::NoRepo`] instead.
#[must_use]
pub fn default_boards_dir() -> PathBuf {
    find_repo().map_or_else(|_| PathBuf::from("boards"), |r| r.join("boards"))
}

/// Environment variables that would redirect or alter the board build if inherited from an outer
/// cargo run (for example when called from `cargo test`): the boards workspace has its own
/// target, target directory and flags in each board's `.cargo/config.toml`.
const CLEARED_ENV: &[&str] = &[
    "CARGO_TARGET_DIR",
    "CARGO_BUILD_TARGET",
    "CARGO_BUILD_TARGET_DIR",
    "RUSTFLAGS",
    "CARGO_ENCODED_RUSTFLAGS",
    "CARGO_BUILD_RUSTFLAGS",
    "CARGO_PROFILE_RELEASE_OPT_LEVEL",
    "CARGO_PROFILE_RELEASE_LTO",
    "CARGO_PROFILE_RELEASE_DEBUG",
    "CARGO_PROFILE_RELEASE_CODEGEN_UNITS",
    SESSION_DIR_VAR,
];

/// Environment variable the boards' build scripts read: the folder holding the session files
/// (`model.rs`, `samples.rs`) to build with instead of the board's committed `session/`.
pub const SESSION_DIR_VAR: &str = "HONE_SESSION_DIR";

/// Builds the release firmware of `board` (`cargo build --release` in `boards_dir/<board>`) and
/// returns the path of its ELF image.
///
/// # Errors
/// As [`build_bin`].
pub fn build_firmware(board: QemuBoard, boards_dir: &Path) -> Result<PathBuf, DeviceError> {
    build_firmware_with(board, boards_dir, None)
}

/// Builds the release firmware of `board` as [`build_firmware`] does, with the session files
/// from `session_dir` (absolute, or relative to the current directory) instead of the board's
/// committed `session/` folder when given.
///
/// # Errors
/// As [`build_bin`].
pub fn build_firmware_with(
    board: QemuBoard,
    boards_dir: &Path,
    session_dir: Option<&Path>,
) -> Result<PathBuf, DeviceError> {
    let session_dir = match session_dir {
        Some(d) => Some(std::path::absolute(d).map_err(|source| DeviceError::Io {
            path: d.to_owned(),
            source,
        })?),
        None => None,
    };
    build_in(
        &boards_dir.join(board.name()),
        &format!("hone-{}", board.name()),
        session_dir.as_deref(),
        RELEASE_PROFILE,
    )
}

/// Builds the binary `bin` of the firmware crate in `folder` (`cargo build --release --bin <bin>`
/// there, so the folder's `.cargo/config.toml` applies) and returns the path of its ELF image.
///
/// # Errors
/// [`DeviceError::Spawn`] when cargo cannot be started, [`DeviceError::Build`] when the build
/// fails (with the end of the compiler's output), [`DeviceError::NoArtifact`] when cargo names
/// no executable.
pub fn build_bin(folder: &Path, bin: &str) -> Result<PathBuf, DeviceError> {
    build_in(folder, bin, None, RELEASE_PROFILE)
}

/// The cargo profile of the boards' speed builds: `[profile.release]` in `boards/Cargo.toml`
/// (opt-level 3).
pub const RELEASE_PROFILE: &str = "release";

/// Builds the binary `bin` of the firmware crate in `folder` as [`build_bin`] does, in the
/// cargo profile `profile` of `boards/Cargo.toml` (`--profile <profile>`).
///
/// # Errors
/// As [`build_bin`].
pub fn build_bin_in_profile(
    folder: &Path,
    bin: &str,
    profile: &str,
) -> Result<PathBuf, DeviceError> {
    build_in(folder, bin, None, profile)
}

fn build_in(
    folder: &Path,
    bin: &str,
    session_dir: Option<&Path>,
    profile: &str,
) -> Result<PathBuf, DeviceError> {
    let what = format!(
        "`{bin}` in {}",
        folder
            .file_name()
            .unwrap_or(folder.as_os_str())
            .to_string_lossy()
    );
    let cargo = std::env::var_os("CARGO").unwrap_or_else(|| "cargo".into());
    let mut cmd = Command::new(&cargo);
    cmd.args([
        "build",
        "--profile",
        profile,
        "--message-format=json-render-diagnostics",
        "--bin",
        bin,
    ])
    .current_dir(folder)
    .stdin(Stdio::null())
    .stdout(Stdio::piped())
    .stderr(Stdio::piped());
    for var in CLEARED_ENV {
        cmd.env_remove(var);
    }
    if let Some(dir) = session_dir {
        cmd.env(SESSION_DIR_VAR, dir);
    }
    let mut child = cmd.spawn().map_err(|source| DeviceError::Spawn {
        program: cargo.to_string_lossy().into_owned(),
        source,
    })?;
    // On a terminal the user sees cargo's progress (a firmware build takes minutes on a small
    // machine); the lines are kept for the error either way.
    let show = std::io::stderr().is_terminal();
    if show {
        eprintln!("building {what} ({} profile)", profile);
    }
    let stderr_pipe = child.stderr.take();
    let stderr = std::thread::spawn(move || {
        let mut s = String::new();
        if let Some(p) = stderr_pipe {
            for line in std::io::BufReader::new(p).lines().map_while(Result::ok) {
                if show {
                    eprintln!("  {line}");
                }
                s.push_str(&line);
                s.push('\n');
            }
        }
        s
    });
    let mut stdout = String::new();
    if let Some(mut p) = child.stdout.take() {
        let _ = p.read_to_string(&mut stdout);
    }
    let status = child.wait().map_err(|source| DeviceError::Spawn {
        program: cargo.to_string_lossy().into_owned(),
        source,
    })?;
    let stderr = stderr.join().unwrap_or_default();
    if !status.success() {
        let lines: Vec<&str> = stderr.lines().collect();
        let tail = lines[lines.len().saturating_sub(40)..].join("\n");
        return Err(DeviceError::Build {
            what,
            status: status.to_string(),
            stderr_tail: tail,
        });
    }
    executable_of(&stdout, bin).ok_or(DeviceError::NoArtifact { what })
}

/// Finds the executable of binary target `bin` among cargo's JSON messages.
fn executable_of(messages: &str, bin: &str) -> Option<PathBuf> {
    messages.lines().rev().find_map(|line| {
        let m: serde_json::Value = serde_json::from_str(line).ok()?;
        if m["reason"] != "compiler-artifact" || m["target"]["name"] != bin {
            return None;
        }
        m["executable"].as_str().map(PathBuf::from)
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The tree is found from any folder inside it, and not from a folder outside one.
    #[test]
    fn the_source_tree_is_found_from_inside_it_only() {
        let base = std::env::temp_dir().join(format!("hone-find-repo-{}", std::process::id()));
        let tree = base.join("tree");
        let deep = tree.join("host-cli/cli/src");
        for d in [tree.join("boards"), tree.join("core"), deep.clone()] {
            std::fs::create_dir_all(d).unwrap();
        }
        std::fs::write(tree.join("boards/Cargo.toml"), "").unwrap();
        assert_eq!(
            find_repo_from(&deep),
            None,
            "core/Cargo.toml is still missing"
        );
        std::fs::write(tree.join("core/Cargo.toml"), "").unwrap();
        assert_eq!(find_repo_from(&deep), Some(tree.clone()));
        assert_eq!(find_repo_from(&tree), Some(tree.clone()));
        assert_eq!(find_repo_from(&base), None);
        std::fs::remove_dir_all(&base).unwrap();
    }

    #[test]
    fn finds_the_board_executable_among_cargo_messages() {
        let messages = [
            r#"{"reason":"compiler-artifact","target":{"name":"hone-fw","kind":["lib"]},"executable":null}"#,
            "not json",
            r#"{"reason":"compiler-artifact","target":{"name":"hone-microbit","kind":["bin"]},"executable":"out/hone-microbit"}"#,
            r#"{"reason":"build-finished","success":true}"#,
        ]
        .join("\n");
        assert_eq!(
            executable_of(&messages, "hone-microbit"),
            Some(PathBuf::from("out/hone-microbit"))
        );
        assert_eq!(executable_of(&messages, "hone-fw"), None);
        assert_eq!(executable_of("", "hone-microbit"), None);
    }
}
