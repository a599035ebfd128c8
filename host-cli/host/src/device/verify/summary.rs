//! Checking the measurements against the predictions and writing the summary of a session check.

use super::*;

impl SessionCheck {
    /// Whether every payload and guard figure equals the host's.
    #[must_use]
    pub fn bit_exact(&self) -> bool {
        self.payloads.iter().all(PayloadCheck::equal) && self.guard_diffs.is_empty()
    }

    /// Checks that the device ended exactly where the host did.
    ///
    /// # Errors
    /// [`DeviceError::Mismatch`] with every difference, readable.
    pub fn ensure_bit_exact(&self) -> Result<(), DeviceError> {
        if self.bit_exact() {
            return Ok(());
        }
        let mut detail = String::new();
        for p in self.payloads.iter().filter(|p| !p.equal()) {
            let _ = writeln!(
                detail,
                "payload `{}`: device {} bytes SHA-256 {}, host {} bytes SHA-256 {}",
                p.name, p.device_len, p.device_sha256, p.host_len, p.host_sha256
            );
            for d in &p.diffs {
                let _ = writeln!(detail, "  {d}");
            }
        }
        for d in &self.guard_diffs {
            let _ = writeln!(detail, "{d}");
        }
        Err(DeviceError::Mismatch {
            board: self.board.name(),
            detail,
        })
    }

    /// Checks the memory prediction against the measurement: the measured RAM while training
    /// must not exceed the prediction (plan arena + measured-overhead table), and the
    /// prediction must be at most 5 % above it; the engine's code likewise against the table.
    /// On boards with a throughput phase, its RAM in both arithmetics must not exceed the
    /// prediction the model was chosen with, and must leave [`MARGIN_BYTES`] free.
    ///
    /// # Errors
    /// [`DeviceError::Prediction`] naming the figure and both values, and the table row to
    /// update; also when the table has no row for this board.
    pub fn ensure_prediction(&self) -> Result<(), DeviceError> {
        let board = self.board.name();
        let err = |detail: String| DeviceError::Prediction { board, detail };
        let o = self.overhead.ok_or_else(|| {
            err("the measured-overhead table (host-cli/host/src/memplan/measured.rs) has no row for it".into())
        })?;
        let r = &self.measures.ram;
        let predicted = r.predicted.unwrap_or(0);
        let mut problems = Vec::new();
        if !within(r.measured, predicted) {
            problems.push(format!(
                "RAM while training: measured {} B (static {} + stack {}), predicted {} B \
                 (firmware {} + {} stack, arena {}, trainer {}, engine stack {})",
                r.measured,
                r.static_ram,
                r.fixed_peak,
                predicted,
                o.firmware_static_bytes,
                o.firmware_stack_bytes,
                r.arena,
                o.trainer_bytes,
                o.engine_stack_bytes
            ));
        }
        let code = self.measures.flash.engine_code();
        if !within(code, u64::from(o.engine_code_bytes)) {
            problems.push(format!(
                "engine code: measured {code} B, table {} B",
                o.engine_code_bytes
            ));
        }
        let throughput = self.throughput_problems();
        if problems.is_empty() && throughput.is_empty() {
            return Ok(());
        }
        let mut detail = Vec::new();
        if !problems.is_empty() {
            detail.push(format!(
                "{}; the measured figures now are: trainer {} B, engine stack {} B, engine code {} B, \
                 firmware static {} B, firmware stack {} B (update the row and its provenance, see \
                 boards/README.md)",
                problems.join("; "),
                r.trainer,
                r.engine_stack,
                code,
                r.static_ram,
                r.entry
            ));
        }
        detail.extend(throughput);
        Err(err(detail.join("; ")))
    }

    /// The throughput phase's RAM against the generator's prediction: each part's measured
    /// RAM must not exceed what the model was chosen with, and must leave [`MARGIN_BYTES`] of
    /// the board's RAM free. One line per problem; none for a board without the phase.
    pub(super) fn throughput_problems(&self) -> Vec<String> {
        let Some(t) = &self.measures.throughput else {
            return Vec::new();
        };
        let mut problems = Vec::new();
        for (part, measured, predicted) in [
            ("fixed point", t.fixed_ram, t.predicted.fixed),
            ("f32", t.float_ram, t.predicted.float),
        ] {
            if measured > predicted || measured + MARGIN_BYTES > t.board_ram {
                problems.push(format!(
                    "throughput model {} in {part}: measured {measured} B, predicted {predicted} B, \
                     board RAM {} B with a margin of {MARGIN_BYTES} B (the prediction is made in \
                     host-cli/host/src/device/throughput.rs)",
                    t.model, t.board_ram
                ));
            }
        }
        problems
    }

    /// The figures as text: digests, verdicts, instructions, RAM and flash.
    #[must_use]
    pub fn render(&self) -> String {
        let m = &self.measures;
        let mut s = String::new();
        let _ = writeln!(
            s,
            "{} ({}), model {}",
            self.board,
            self.board.target(),
            self.session.spec.config
        );
        for p in &self.payloads {
            let _ = writeln!(
                s,
                "  {:<17} {:>4} B  device SHA-256 {}  {}",
                p.name,
                p.device_len,
                p.device_sha256,
                if p.equal() { "equal" } else { "DIFFERENT" }
            );
            let _ = writeln!(
                s,
                "  {:<17} {:>4} B  host   SHA-256 {}",
                "", p.host_len, p.host_sha256
            );
            for d in &p.diffs {
                let _ = writeln!(s, "      {d}");
            }
        }
        for g in &self.guards {
            let _ = writeln!(
                s,
                "  guard {:<6}: {}, hold-out loss {:.6} -> {:.6}, {} samples trained, {} updates",
                g.set,
                g.verdict,
                g.before as f64 / f64::from(1u32 << 24),
                g.after as f64 / f64::from(1u32 << 24),
                g.trained,
                g.updates
            );
        }
        for d in &self.guard_diffs {
            let _ = writeln!(s, "      {d}");
        }
        let _ = writeln!(
            s,
            "  instructions: {} MACs per training sample ({} forward + {} backward)",
            m.macs_per_sample, self.engine.forward_macs, self.engine.backward_macs
        );
        let float_kind = if self.board == QemuBoard::Mps2An386 {
            "f32 (FPU)"
        } else {
            "f32 (soft float)"
        };
        for (what, r) in [("fixed point", &m.fixed), (float_kind, &m.float)] {
            let _ = writeln!(
                s,
                "    {what:<16} {:>9.1} insn/sample {:>8.1} insn/MAC",
                r.per_sample(),
                r.per_mac()
            );
        }
        let _ = writeln!(
            s,
            "    {:<16} {:>9.1} insn/sample {:>8.1} insn/MAC (forward only)",
            "hold-out eval",
            m.eval.per_sample(),
            m.eval.per_mac()
        );
        let _ = writeln!(
            s,
            "    ISA floor        dot i16 {:.3} insn/MAC, dot i8 {:.3} insn/MAC",
            m.dot_i16.per_mac(),
            m.dot_i8.per_mac()
        );
        match (&m.throughput, &self.session.throughput.spec) {
            (Some(t), Some(spec)) => {
                let train = &spec.desc.train;
                let momentum = if train.momentum.is_zero() {
                    "no momentum".to_owned()
                } else {
                    format!("momentum {}", train.momentum.to_f64())
                };
                let _ = writeln!(
                    s,
                    "  throughput: model {} (dense, ReLU, dense; squared error, SGD batch {}, {momentum}), \
                     {} MACs per training sample, {} samples trained ({} drawn on the board)",
                    t.model, train.batch, t.macs_per_sample, t.fixed.samples, spec.pool
                );
                for (what, r) in [("fixed point", &t.fixed), (float_kind, &t.float)] {
                    let _ = writeln!(
                        s,
                        "    {what:<16} {:>9.1} insn/sample {:>8.1} insn/MAC",
                        r.per_sample(),
                        r.per_mac()
                    );
                }
                let _ = writeln!(
                    s,
                    "    RAM: fixed point {} B (arena {}, predicted {}), f32 {} B (arena {}, predicted {}), of {} B",
                    t.fixed_ram,
                    t.arena,
                    t.predicted.fixed,
                    t.float_ram,
                    t.float_arena,
                    t.predicted.float,
                    t.board_ram
                );
            }
            _ => {
                let _ = writeln!(s, "  throughput: no phase on this board");
                for n in &self.session.throughput.notes {
                    let _ = writeln!(s, "    {n}");
                }
            }
        }
        let r = &m.ram;
        let _ = writeln!(
            s,
            "  RAM fixed point: measured {} B = static {} + stack {} (entry {}, arena {}, trainer {}, engine {})",
            r.measured, r.static_ram, r.fixed_peak, r.entry, r.arena, r.trainer, r.engine_stack
        );
        match r.predicted {
            Some(p) => {
                let diff = p as i64 - r.measured as i64;
                let _ = writeln!(
                    s,
                    "    predicted {p} B (plan arena {} + table), difference {diff:+} B ({:+.2} %)",
                    r.arena,
                    diff as f64 * 100.0 / r.measured.max(1) as f64
                );
            }
            None => {
                let _ = writeln!(
                    s,
                    "    no prediction: the overhead table has no row for this board"
                );
            }
        }
        let _ = writeln!(
            s,
            "  RAM f32 twin:    measured {} B = static {} + stack {} (arena {}, twin {})",
            r.measured_float, r.static_ram, r.float_peak, r.float_arena, r.twin
        );
        let _ = writeln!(
            s,
            "  RAM whole run:   {} B = static {} + deepest stack {}, of {} B (static + stack region)",
            r.static_ram + r.run_peak,
            r.static_ram,
            r.run_peak,
            r.static_ram + r.stack_size
        );
        let p = &self.session.plan_report.ram;
        let _ = writeln!(
            s,
            "  plan for {}: arena {} + trainer {} + engine stack {} + firmware {} = {} of {} B: {}",
            self.session.chip.id,
            p.arena_bytes,
            p.engine_state_bytes.map_or("?".into(), |b| b.to_string()),
            p.stack_bytes.map_or("?".into(), |b| b.to_string()),
            p.reserve_bytes,
            p.total_bytes,
            p.budget_bytes,
            if p.fits { "fits" } else { "does not fit" }
        );
        let f = &m.flash;
        let _ = writeln!(
            s,
            "  flash: fixed-point engine {} B (.text {} + .rodata {}), f32 twin .text {} B, runtime helpers {} B, rest {} B, .text section {} B",
            f.engine_code(),
            f.engine_text,
            f.engine_rodata,
            f.float_text,
            f.runtime_text,
            f.other_text,
            f.text_section
        );
        s
    }
}

/// `measured ≤ predicted ≤ measured × 1.05`.
pub(super) fn within(measured: u64, predicted: u64) -> bool {
    predicted >= measured && predicted * 100 <= measured * 105
}
