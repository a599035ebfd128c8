//! `hone device …`: verify, profile or write the session of a board under QEMU.

use crate::*;

pub(crate) fn device(d: DeviceCmd) -> Result<Option<CheckFailed>> {
    use hone_host::device::{self, QemuBoard};
    let board_named = |name: &str| {
        QemuBoard::ALL
            .into_iter()
            .find(|b| b.name() == name)
            .ok_or_else(|| {
                anyhow!(
                    "--board: `{name}` is not a QEMU board; use one of {}",
                    QemuBoard::ALL.map(|b| b.name()).join(", ")
                )
            })
    };
    // Firmware is built from a source tree found at run time, not the one this binary was
    // compiled in.
    let repo = device::find_repo()?;
    let boards_dir = repo.join("boards");
    match d {
        DeviceCmd::Verify {
            board,
            session_dir,
            elf,
            json,
        } => {
            if board == device::lean::LEAN_BOARD {
                let profile =
                    device::verify::profile_opt_level(&boards_dir, device::lean::LEAN_PROFILE)?;
                if session_dir.is_some() || elf.is_some() {
                    bail!(
                        "--board {board}: --session-dir and --elf do not apply to the lean build"
                    );
                }
                let check = device::lean::verify_lean(&boards_dir, device::DEFAULT_TIMEOUT)?;
                if json {
                    outln!("{}", serde_json::to_string(&check.summary(&profile))?);
                } else {
                    out!("{}", check.render());
                }
                if !check.bit_exact() {
                    eprintln!(
                        "check failed: the lean build's output differs from the host's\n\
                         device:\n{}\nhost:\n{}",
                        check.device, check.host
                    );
                    return Ok(Some(CheckFailed));
                }
                return Ok(None);
            }
            let b = board_named(&board)?;
            let profile = device::verify::profile_opt_level(&boards_dir, device::RELEASE_PROFILE)?;
            let opts = device::verify::VerifyOptions {
                session_dir,
                elf,
                boards_dir,
                repo_dir: repo,
                ..Default::default()
            };
            let check = device::verify::verify_board(b, &opts)?;
            if json {
                outln!("{}", serde_json::to_string(&check.summary(&profile))?);
            } else {
                out!("{}", check.render());
            }
            let exact = check.ensure_bit_exact();
            let predicted = check.ensure_prediction();
            for e in [&exact, &predicted]
                .into_iter()
                .filter_map(|r| r.as_ref().err())
            {
                eprintln!("check failed: {e}");
            }
            Ok((exact.is_err() || predicted.is_err()).then_some(CheckFailed))
        }
        DeviceCmd::Profile {
            board,
            phase,
            top,
            elf,
            timeout,
            json,
        } => {
            let b = board_named(&board)?;
            let elf = match elf {
                Some(e) => e,
                None => device::build_firmware(b, &boards_dir)?,
            };
            let opts = device::profile::ProfileOptions {
                phase,
                timeout: std::time::Duration::from_secs(timeout),
            };
            let p = device::profile::profile_elf(b, &elf, &opts)?;
            if json {
                print_json(&p)?;
            } else {
                out!("{}", p.render(top));
            }
            Ok(None)
        }
        DeviceCmd::Session { board, out } => {
            let dir = match out {
                Some(d) => d,
                None => device::session::committed_dir(&boards_dir, &board),
            };
            let files = device::session::generate(&dir, &board)?;
            if files.is_empty() {
                outln!("{}: session files already current", dir.display());
            }
            for f in files {
                outln!("written: {}", f.display());
            }
            Ok(None)
        }
    }
}
