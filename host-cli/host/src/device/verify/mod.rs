//! The proof that hone works on a device: a board fine-tunes the model on the chip, and its
//! final weights must equal, bit for bit, what the host computes with the same core code.
//!
//! [`verify_board`] builds the board's firmware from its session files (see [`super::session`]),
//! runs it under QEMU, decodes what it reports, simulates the same session on the host
//! ([`super::session::simulate`]) and compares:
//!
//! - the trained tensors of the calibration set and of the mislabelled set, byte for byte;
//! - the checkpoint blob after the calibration set, byte for byte (values, momentum, generator
//!   state, counters);
//! - the float twin's `f32` tensors, bit for bit;
//! - the guard's verdicts and hold-out losses;
//! - on boards with a throughput phase (see [`super::throughput`]), its trained tensors in
//!   fixed point and in `f32`, byte for byte.
//!
//! It also gathers the measurements: instructions per training sample and per
//! multiply-accumulate (fixed point, the `f32` twin, the Phase-1 dot product floor, and the
//! throughput phase's larger model in both arithmetics), RAM
//! measured against the memory plan's prediction, and the engine's code size from the ELF's
//! symbols.

use std::fmt::Write as _;
use std::path::{Path, PathBuf};
use std::time::Duration;

use object::{Object, ObjectSection, ObjectSymbol, SectionKind};

use super::report::crc32;
use super::session::{self, payload_layout, HostOutcome, Session, TensorSpan};
use super::sha256::sha256_hex;
use super::throughput::{PhaseRam, MARGIN_BYTES};
use super::{build_firmware_with, default_boards_dir, run_elf, DeviceError, DeviceRun, QemuBoard};
use crate::memplan::{self, MeasuredOverhead};
use hone_core::session::training_macs;

mod measure;
mod records;
mod summary;

pub use measure::*;
pub use records::*;

/// The `opt-level` of the cargo profile `profile` in the boards' `Cargo.toml`, as written
/// there (`3`, `s` or `z`), following `inherits`; cargo's defaults when unset (`3` for
/// `release`, `0` for `dev`).
///
/// # Errors
/// [`DeviceError::Io`] when the file cannot be read, [`DeviceError::Manifest`] when it is not
/// valid TOML, [`DeviceError::Profile`] when the profile or one it inherits from is not there
/// (or inherits in a circle).
pub fn profile_opt_level(boards_dir: &Path, profile: &str) -> Result<String, DeviceError> {
    let path = boards_dir.join("Cargo.toml");
    let text = std::fs::read_to_string(&path).map_err(|source| DeviceError::Io {
        path: path.clone(),
        source,
    })?;
    let bad = |detail: String| DeviceError::Profile {
        path: path.clone(),
        detail,
    };
    let doc: toml::Table = text.parse().map_err(|source| DeviceError::Manifest {
        path: path.clone(),
        source,
    })?;
    let profiles = doc.get("profile");
    let mut name = profile.to_owned();
    // Cargo's own profiles need not be written; a chain longer than the table is a circle.
    for _ in 0..=profiles
        .and_then(toml::Value::as_table)
        .map_or(0, |t| t.len())
    {
        let table = profiles.and_then(|p| p.get(&name));
        match table.and_then(|t| t.get("opt-level")) {
            Some(toml::Value::Integer(n)) => return Ok(n.to_string()),
            Some(toml::Value::String(s)) => return Ok(s.clone()),
            Some(other) => return Err(bad(format!("profile.{name}.opt-level is {other}"))),
            None => {}
        }
        match table
            .and_then(|t| t.get("inherits"))
            .and_then(toml::Value::as_str)
        {
            Some(parent) => name = parent.to_owned(),
            None if name == "release" || name == "bench" => return Ok("3".to_owned()),
            None if name == "dev" || name == "test" => return Ok("0".to_owned()),
            None => return Err(bad(format!("no [profile.{name}] with an opt-level"))),
        }
    }
    Err(bad(format!("profile `{profile}` inherits in a circle")))
}

impl SessionCheck {
    /// The flat record of [`VerifySummary`], with the build's `profile` (see
    /// [`profile_opt_level`]).
    #[must_use]
    pub fn summary(&self, profile: &str) -> VerifySummary {
        let m = &self.measures;
        let t = m.throughput.as_ref();
        VerifySummary {
            board: self.board.name().to_owned(),
            bit_exact: self.bit_exact(),
            prediction_ok: Some(self.ensure_prediction().is_ok()),
            throughput_model: t.map(|t| t.model.clone()),
            fixed_insn_per_mac: t.map(|t| t.fixed.per_mac()),
            float_insn_per_mac: t.map(|t| t.float.per_mac()),
            fixed_insn_per_sample: Some(m.fixed.per_sample()),
            float_insn_per_sample: Some(m.float.per_sample()),
            engine_code_bytes: m.flash.engine_code(),
            trainer_bytes: Some(m.ram.trainer),
            engine_stack_bytes: Some(m.ram.engine_stack),
            ram_measured_bytes: Some(m.ram.measured),
            ram_predicted_bytes: m.ram.predicted,
            profile: profile.to_owned(),
        }
    }
}

fn protocol(line: usize, detail: impl Into<String>) -> DeviceError {
    DeviceError::Protocol {
        line,
        detail: detail.into(),
    }
}

/// Builds, runs and checks the calibration session of `board` (see the [module docs](self)).
///
/// # Errors
/// [`DeviceError::Session`] when the session cannot be generated, or its committed files are
/// not current; the build and run errors of [`super::run_board`];
/// [`DeviceError::FirmwareFailed`] for a run that did not finish cleanly;
/// [`DeviceError::Protocol`] for missing records or payloads. Differences between device and
/// host are not errors here: see [`SessionCheck::ensure_bit_exact`].
pub fn verify_board(board: QemuBoard, opts: &VerifyOptions) -> Result<SessionCheck, DeviceError> {
    let session_err = |source| DeviceError::Session {
        board: board.name(),
        source: Box::new(source),
    };
    let session = Session::build(&opts.repo_dir, board.name()).map_err(session_err)?;
    let dir = match &opts.session_dir {
        Some(dir) => {
            session.write(dir).map_err(session_err)?;
            Some(dir.as_path())
        }
        None => {
            session
                .check_current(&session::committed_dir(&opts.boards_dir, board.name()))
                .map_err(session_err)?;
            None
        }
    };
    let elf = match &opts.elf {
        Some(elf) => elf.clone(),
        None => build_firmware_with(board, &opts.boards_dir, dir)?,
    };
    let run = run_elf(board, &elf, opts.timeout)?;
    run.ensure_success()?;
    let host = session::simulate(&session).map_err(session_err)?;
    check_run(board, session, run, host)
}

fn check_run(
    board: QemuBoard,
    session: Session,
    run: DeviceRun,
    host: HostOutcome,
) -> Result<SessionCheck, DeviceError> {
    let mut engine = None;
    let mut throughput = None;
    let mut guards = Vec::new();
    let mut stacks = Vec::new();
    for (i, line) in run.lines.iter().enumerate() {
        let Some(r) = &line.record else { continue };
        let p = |e: super::record::RecordError| protocol(i, e.0);
        match r.kind.as_str() {
            "engine" => {
                if engine.is_some() {
                    return Err(protocol(i, "second `engine` record"));
                }
                engine = Some(EngineRecord {
                    arena: r.unsigned("arena").map_err(p)?,
                    trainer: r.unsigned("trainer").map_err(p)?,
                    float_arena: r.unsigned("float_arena").map_err(p)?,
                    twin: r.unsigned("twin").map_err(p)?,
                    blob: r.unsigned("blob").map_err(p)?,
                    forward_macs: r.unsigned("fwd_macs").map_err(p)?,
                    backward_macs: r.unsigned("bwd_macs").map_err(p)?,
                });
            }
            "guard" => guards.push(GuardRecord {
                set: r.text("set").map_err(p)?.to_owned(),
                verdict: r.text("verdict").map_err(p)?.to_owned(),
                before: r.signed("before").map_err(p)?,
                after: r.signed("after").map_err(p)?,
                before_saturations: r.unsigned("before_sat").map_err(p)?,
                after_saturations: r.unsigned("after_sat").map_err(p)?,
                trained: r.unsigned("trained").map_err(p)?,
                steps: r.unsigned("steps").map_err(p)?,
                updates: r.unsigned("updates").map_err(p)?,
            }),
            "tput" => {
                if throughput.is_some() {
                    return Err(protocol(i, "second `tput` record"));
                }
                throughput = Some(ThroughputRecord {
                    inputs: r.unsigned("inputs").map_err(p)?,
                    outputs: r.unsigned("outputs").map_err(p)?,
                    params: r.unsigned("params").map_err(p)?,
                    pool: r.unsigned("pool").map_err(p)?,
                    samples: r.unsigned("samples").map_err(p)?,
                    macs: r.unsigned("macs").map_err(p)?,
                    arena: r.unsigned("arena").map_err(p)?,
                    float_arena: r.unsigned("float_arena").map_err(p)?,
                });
            }
            "stack" => stacks.push(StackRecord {
                phase: r.text("phase").map_err(p)?.to_owned(),
                entry: r.unsigned("entry").map_err(p)?,
                peak: r.unsigned("peak").map_err(p)?,
            }),
            _ => {}
        }
    }
    let end = run.lines.len();
    let engine = engine.ok_or_else(|| protocol(end, "no `engine` record"))?;
    let desc = &session.desc;
    let layout = payload_layout(desc, &host.plan, false);
    let float_layout = payload_layout(desc, &host.float_plan, true);

    let blob = |name: &str| -> Result<Vec<u8>, DeviceError> {
        run.report
            .blob(name)
            .map(|b| b.bytes.clone())
            .ok_or_else(|| protocol(end, format!("no `{name}` payload")))
    };
    let mut payloads = vec![
        compare(
            "calib_weights",
            &blob("calib_weights")?,
            &host.calibration.weights,
            Some(&layout),
        ),
        compare(
            "calib_checkpoint",
            &blob("calib_checkpoint")?,
            &host.calibration.checkpoint,
            None,
        ),
        compare(
            "faulty_weights",
            &blob("faulty_weights")?,
            &host.faulty.weights,
            Some(&layout),
        ),
        compare(
            "faulty_checkpoint",
            &blob("faulty_checkpoint")?,
            &host.faulty.checkpoint,
            None,
        ),
        compare(
            "f32_weights",
            &blob("f32_weights")?,
            &host.float_weights,
            Some(&float_layout),
        ),
    ];

    match (&session.throughput.spec, &host.throughput, &throughput) {
        (Some(spec), Some(h), Some(_)) => {
            payloads.push(compare(
                "tput_weights",
                &blob("tput_weights")?,
                &h.weights,
                Some(&payload_layout(&spec.desc, &spec.plan, false)),
            ));
            payloads.push(compare(
                "tput_f32_weights",
                &blob("tput_f32_weights")?,
                &h.float_weights,
                Some(&payload_layout(&spec.desc, &spec.float_plan, true)),
            ));
        }
        (Some(_), _, None) => return Err(protocol(end, "no `tput` record")),
        (None, _, Some(_)) => {
            return Err(protocol(
                end,
                "a `tput` record, but the session has no throughput phase for this board",
            ))
        }
        (Some(_), None, Some(_)) => {
            return Err(protocol(
                end,
                "the host did not simulate the throughput phase",
            ))
        }
        (None, _, None) => {}
    }

    let mut guard_diffs = Vec::new();
    for (set, h) in [("calib", &host.calibration), ("faulty", &host.faulty)] {
        let Some(d) = guards.iter().find(|g| g.set == set) else {
            return Err(protocol(end, format!("no `guard` record for set `{set}`")));
        };
        let verdict = match h.report.verdict {
            hone_core::guard::Verdict::Accept => "accept",
            hone_core::guard::Verdict::Reject(hone_core::guard::Rejection::LossRose { .. }) => {
                "reject-loss"
            }
            hone_core::guard::Verdict::Reject(hone_core::guard::Rejection::Saturations {
                ..
            }) => "reject-saturation",
        };
        let host_fields: [(&str, String); 9] = [
            ("verdict", verdict.to_owned()),
            ("before", h.report.before.mean_loss.0.to_string()),
            ("after", h.report.after.mean_loss.0.to_string()),
            ("before_sat", h.report.before.saturations.to_string()),
            ("after_sat", h.report.after.saturations.to_string()),
            ("trained", h.report.trained.to_string()),
            ("steps", h.steps.to_string()),
            ("updates", h.updates.to_string()),
            ("set", set.to_owned()),
        ];
        let device_fields = [
            d.verdict.clone(),
            d.before.to_string(),
            d.after.to_string(),
            d.before_saturations.to_string(),
            d.after_saturations.to_string(),
            d.trained.to_string(),
            d.steps.to_string(),
            d.updates.to_string(),
            d.set.clone(),
        ];
        for ((name, host_value), device_value) in host_fields.iter().zip(device_fields) {
            if *host_value != device_value {
                guard_diffs.push(format!(
                    "guard `{set}` {name}: device {device_value}, host {host_value}"
                ));
            }
        }
    }

    let overhead = memplan::MEASURED_OVERHEADS
        .iter()
        .find(|m| m.board == board.name())
        .copied();
    let mut measures = measure(&session, &host, &run, &engine, &stacks, overhead.as_ref())?;
    measures.throughput = match &throughput {
        Some(t) => Some(measure_throughput(&session, &run, t, &stacks)?),
        None => None,
    };
    Ok(SessionCheck {
        board,
        session,
        run,
        host,
        engine,
        guards,
        stacks,
        throughput,
        payloads,
        guard_diffs,
        measures,
        overhead,
    })
}

/// Compares two payloads; with a layout, differences are named by layer, tensor and index.
fn compare(name: &str, device: &[u8], host: &[u8], layout: Option<&[TensorSpan]>) -> PayloadCheck {
    let mut diffs = Vec::new();
    if device.len() != host.len() {
        diffs.push(format!(
            "length: device {} bytes, host {} bytes",
            device.len(),
            host.len()
        ));
    }
    match layout {
        Some(layout) => {
            for span in layout {
                let w = span.value_bytes();
                for i in 0..span.elems {
                    let at = span.offset + i * w;
                    let (Some(d), Some(h)) = (device.get(at..at + w), host.get(at..at + w)) else {
                        continue;
                    };
                    if d != h && diffs.len() < MAX_DIFFS {
                        diffs.push(format!(
                            "layer {} {}[{i}]: device {}, host {}",
                            span.layer,
                            span.tensor,
                            show_value(span, d),
                            show_value(span, h)
                        ));
                    }
                }
            }
        }
        None => {
            for (i, (d, h)) in device.iter().zip(host).enumerate() {
                if d != h && diffs.len() < MAX_DIFFS {
                    diffs.push(format!("byte {i}: device {d:#04x}, host {h:#04x}"));
                }
            }
        }
    }
    PayloadCheck {
        name: name.to_owned(),
        device_len: device.len(),
        host_len: host.len(),
        device_crc: crc32(device),
        host_crc: crc32(host),
        device_sha256: sha256_hex(device),
        host_sha256: sha256_hex(host),
        diffs,
    }
}

/// One value of a payload as text: the raw integer, or the `f32` with its bits.
fn show_value(span: &TensorSpan, bytes: &[u8]) -> String {
    let mut b = [0u8; 4];
    b[..bytes.len().min(4)].copy_from_slice(&bytes[..bytes.len().min(4)]);
    match span.word {
        Some(hone_core::num::Word::I8) => (b[0] as i8).to_string(),
        Some(hone_core::num::Word::I16) => i16::from_le_bytes([b[0], b[1]]).to_string(),
        Some(hone_core::num::Word::I32) => i32::from_le_bytes(b).to_string(),
        None => {
            let v = f32::from_le_bytes(b);
            format!("{v:e} ({:#010x})", v.to_bits())
        }
    }
}

#[cfg(test)]
mod tests;
