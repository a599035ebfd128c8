//! Rendering a plan report as text, Markdown and HTML blocks.

use super::*;

/// Groups digits by three with spaces: 20480 → "20 480".
pub(crate) fn group(n: u64) -> String {
    let s = n.to_string();
    let mut out = String::with_capacity(s.len() + s.len() / 3);
    for (i, c) in s.chars().enumerate() {
        if i > 0 && (s.len() - i).is_multiple_of(3) {
            out.push(' ');
        }
        out.push(c);
    }
    out
}

/// Which formats of a plan made without a float model are placeholders: the `auto` formats,
/// whose fraction bits `hone quantize` chooses from data. Their word sizes, and so every byte
/// count, are final. `None` when the config has no `auto` format.
pub fn placeholder_note(config: &crate::config::Config) -> Option<String> {
    let autos = config.auto_formats();
    if autos.is_empty() {
        return None;
    }
    let mut by_layer: Vec<(usize, Vec<&str>)> = Vec::new();
    for a in &autos {
        match by_layer.last_mut() {
            Some((l, roles)) if *l == a.layer => roles.push(a.role.key()),
            _ => by_layer.push((a.layer, vec![a.role.key()])),
        }
    }
    let list: Vec<String> = by_layer
        .iter()
        .map(|(l, roles)| format!("layer {l} {}", roles.join(", ")))
        .collect();
    let text = format!(
        "Placeholder formats (auto: the fraction bits are chosen from data by `hone quantize`, \
         or here with --model and --train; word sizes and bytes are final): {}",
        list.join("; ")
    );
    Some(wrap(&text, 96, 2))
}

/// "20 480 B".
pub(crate) fn bytes(n: u64) -> String {
    format!("{} B", group(n))
}

/// "20 480 B (20.0 KiB)" from 1 KiB up, "512 B" below.
pub(crate) fn bytes_kib(n: u64) -> String {
    if n >= 1024 {
        format!("{} ({:.1} KiB)", bytes(n), n as f64 / 1024.0)
    } else {
        bytes(n)
    }
}

/// A signed byte count: "1 024 B", "-512 B".
pub(super) fn signed_bytes(n: i64) -> String {
    if n < 0 {
        format!("-{}", bytes(n.unsigned_abs()))
    } else {
        bytes(n as u64)
    }
}

/// Column alignment.
#[derive(Clone, Copy)]
pub(crate) enum Align {
    Left,
    Right,
}

/// An aligned table, two spaces between columns, indented by two; cells past the header's
/// columns are left out. The layout is [`hone_report::report::render_indented_table`].
pub(crate) fn table(head: &[&str], align: &[Align], rows: &[Vec<String>]) -> String {
    let cols = head.len();
    let mut t = hone_report::report::Table::new(
        head.iter().copied(),
        (0..cols)
            .map(|i| match align.get(i) {
                Some(Align::Right) => hone_report::report::Align::Right,
                _ => hone_report::report::Align::Left,
            })
            .collect(),
    );
    for r in rows {
        t.push_row(r.iter().take(cols).cloned());
    }
    hone_report::report::render_indented_table(&t, 2)
}

/// Wraps `text` at `width` characters. The first line continues a line already `start`
/// characters long; continuation lines are indented by `indent` spaces.
pub(crate) fn wrap_at(text: &str, width: usize, start: usize, indent: usize) -> String {
    let mut out = String::new();
    let mut len = start;
    let mut first = true;
    for word in text.split_whitespace() {
        let w = word.chars().count();
        if !first && len + 1 + w > width {
            out.push('\n');
            out.push_str(&" ".repeat(indent));
            len = indent;
        } else if !first {
            out.push(' ');
            len += 1;
        }
        out.push_str(word);
        len += w;
        first = false;
    }
    out
}

/// Wraps `text` starting at column 0, continuation lines indented by `indent` spaces.
pub(crate) fn wrap(text: &str, width: usize, indent: usize) -> String {
    wrap_at(text, width, 0, indent)
}

pub(super) fn optional_line(
    rows: &mut Vec<Vec<String>>,
    label: &str,
    value: Option<u32>,
    measured: &str,
    unmeasured: &str,
) {
    rows.push(match value {
        Some(v) => vec![label.to_owned(), bytes(v as u64), measured.to_owned()],
        None => vec![label.to_owned(), "—".to_owned(), unmeasured.to_owned()],
    });
}

pub(super) fn spare_row(spare: i64, pct: Option<f64>) -> Vec<String> {
    if spare >= 0 {
        vec![
            "spare".to_owned(),
            bytes(spare as u64),
            percent_text(pct) + " of the budget",
        ]
    } else {
        vec![
            "short".to_owned(),
            bytes(spare.unsigned_abs()),
            percent_text(pct) + " over the budget",
        ]
    }
}

pub(super) fn drift_text(d: &Option<DriftCost>, not_computed: &Option<String>) -> String {
    match (d, not_computed) {
        (Some(d), _) if d.unit.is_empty() => format!("{} {:+.4}", d.what, d.value),
        (Some(d), _) => format!("{} {:+.4} {}", d.what, d.value, d.unit),
        (None, Some(why)) => format!("not computed: {why}"),
        (None, None) => String::new(),
    }
}

/// The report as aligned text for a terminal: budget, buffers, totals, verdict and advice.
/// The plan as terminal text: model, budget, every buffer, totals, verdict and advice.
pub fn render_table(r: &PlanReport) -> String {
    plan_doc(r).plain
}

/// The plan as document blocks, for the HTML and Markdown reports: the same text as
/// [`render_table`], with every table a real table.
pub fn plan_blocks(r: &PlanReport) -> Vec<hone_report::report::Block> {
    plan_doc(r).blocks
}

/// Text and tables in order, kept both as terminal text and as document blocks.
#[derive(Default)]
pub(super) struct Doc {
    pub(super) blocks: Vec<hone_report::report::Block>,
    pub(super) pending: String,
    pub(super) plain: String,
}

impl std::fmt::Write for Doc {
    fn write_str(&mut self, s: &str) -> std::fmt::Result {
        self.pending.push_str(s);
        self.plain.push_str(s);
        Ok(())
    }
}

impl Doc {
    pub(super) fn flush(&mut self) {
        let text = std::mem::take(&mut self.pending);
        let text = text.trim();
        if !text.is_empty() {
            self.blocks
                .push(hone_report::report::Block::Paragraph(text.to_owned()));
        }
    }

    pub(super) fn table(&mut self, head: &[&str], align: &[Align], rows: &[Vec<String>]) {
        self.plain.push_str(&table(head, align, rows));
        self.flush();
        let align = (0..head.len())
            .map(|i| match align.get(i) {
                Some(Align::Right) => hone_report::report::Align::Right,
                _ => hone_report::report::Align::Left,
            })
            .collect();
        self.blocks.push(hone_report::report::Block::Table(
            hone_report::report::Table {
                headers: head.iter().map(|h| h.to_string()).collect(),
                rows: rows.to_vec(),
                align,
            },
        ));
    }

    pub(super) fn finish(mut self) -> Doc {
        self.flush();
        self
    }
}

pub(super) fn plan_doc(r: &PlanReport) -> Doc {
    const WIDTH: usize = 96;
    let mut o = Doc::default();
    let m = &r.model;
    let _ = writeln!(
        o,
        "{}",
        wrap(
            &format!(
                "Model: {} layers, input {} values in {}, output {} values, batch {}, {} MACs \
                 per forward pass",
                m.layers,
                group(m.input_values as u64),
                m.input_format,
                group(m.output_values as u64),
                m.batch,
                group(m.forward_macs)
            ),
            WIDTH,
            7
        )
    );
    let _ = writeln!(
        o,
        "{}",
        wrap(
            &format!(
                "Budget: {}: RAM {}, flash {}",
                r.budget.name,
                bytes_kib(r.budget.ram_bytes as u64),
                bytes_kib(r.budget.flash_bytes as u64)
            ),
            WIDTH,
            8
        )
    );
    let _ = writeln!(
        o,
        "        {}",
        wrap_at(&format!("source: {}", r.budget.source), WIDTH, 8, 8)
    );
    if !r.budget.note.is_empty() {
        let _ = writeln!(
            o,
            "        {}",
            wrap_at(&format!("note: {}", r.budget.note), WIDTH, 8, 8)
        );
    }
    let _ = writeln!(
        o,
        "Reserve for the rest of the firmware: RAM {}, flash {}",
        bytes_kib(r.reserve.ram_bytes as u64),
        bytes_kib(r.reserve.flash_bytes as u64)
    );
    match &r.engine {
        Some(e) => {
            let line = format!(
                "Engine{}: code {} of flash (rounded up to 2 KiB), trainer state {} and stack \
                 peak {} (rounded up to 128 B) of RAM",
                match e.basis {
                    OverheadBasis::Measured => "",
                    OverheadBasis::Estimated => " (estimate, not measured for this core)",
                },
                bytes(e.code_flash as u64),
                bytes(e.state_ram as u64),
                bytes(e.stack as u64)
            );
            let _ = writeln!(o, "{}", wrap(&line, WIDTH, 8));
            let _ = writeln!(
                o,
                "        {}",
                wrap_at(&format!("source: {}", e.source), WIDTH, 8, 8)
            );
        }
        None => {
            let _ = writeln!(
                o,
                "Engine: code size, trainer state and stack not measured: not counted below"
            );
        }
    }

    let buffer_rows = |mem: Memory| -> Vec<Vec<String>> {
        r.buffers
            .iter()
            .filter(|b| b.memory == mem)
            .map(|b| {
                let layer = b.layer.map_or_else(|| "–".to_owned(), |k| k.to_string());
                let kind = match (&b.layer_kind, b.serves_layers.is_empty()) {
                    (Some(k), _) => k.clone(),
                    (None, false) => format!(
                        "{} {}",
                        if b.serves_layers.len() == 1 {
                            "layer"
                        } else {
                            "layers"
                        },
                        b.serves_layers
                            .iter()
                            .map(ToString::to_string)
                            .collect::<Vec<_>>()
                            .join(",")
                    ),
                    (None, true) => String::new(),
                };
                vec![
                    layer,
                    kind,
                    b.role.label().to_owned(),
                    group(b.elems as u64),
                    b.format.clone().unwrap_or_else(|| b.word.clone()),
                    bytes(b.bytes as u64),
                ]
            })
            .collect()
    };
    let head = ["layer", "kind", "buffer", "values", "format", "bytes"];
    let align = [
        Align::Right,
        Align::Left,
        Align::Left,
        Align::Right,
        Align::Left,
        Align::Right,
    ];
    let _ = writeln!(
        o,
        "\nRAM: training memory (the trainer's working buffers), {}",
        bytes_kib(r.ram.arena_bytes as u64)
    );
    let rows = buffer_rows(Memory::Ram);
    if rows.is_empty() {
        let _ = writeln!(o, "  (no buffers: nothing trains)");
    } else {
        o.table(&head, &align, &rows);
    }
    let c = &r.ram_categories;
    let _ = writeln!(
        o,
        "  {}",
        wrap_at(
            &format!(
                "by use: parameters {}, master {}, accumulators {}, momentum {}, kept activations {}, scratch {}",
                bytes(c.parameters_bytes as u64),
                bytes(c.master_bytes as u64),
                bytes(c.accumulators_bytes as u64),
                bytes(c.momentum_bytes as u64),
                bytes(c.kept_activations_bytes as u64),
                bytes(c.scratch_bytes as u64)
            ),
            WIDTH,
            2,
            4
        )
    );
    let _ = writeln!(
        o,
        "\nFlash: factory parameters, {}",
        bytes_kib(r.flash.parameters_bytes as u64)
    );
    let rows = buffer_rows(Memory::Flash);
    if rows.is_empty() {
        let _ = writeln!(o, "  (none: the model has no parameters)");
    } else {
        o.table(&head, &align, &rows);
    }

    // Totals, RAM and flash side by side in one table each.
    // MEASURED_OVERHEADS: the trainer object is exact, the stack is rounded up to 128 B and
    // the code to 2 KiB.
    let (measured, stack_label, code_label) = match r.engine.as_ref().map(|e| e.basis) {
        Some(OverheadBasis::Estimated) => (
            "estimate: largest measured",
            "estimate: largest measured, rounded up to 128 B",
            "estimate: largest measured, rounded up to 2 KiB",
        ),
        _ => (
            "measured",
            "measured, rounded up to 128 B",
            "measured, rounded up to 2 KiB",
        ),
    };
    let unmeasured = "not measured, not counted";
    let mut rows = vec![vec![
        "training memory".to_owned(),
        bytes(r.ram.arena_bytes as u64),
        String::new(),
    ]];
    optional_line(
        &mut rows,
        "trainer state",
        r.ram.engine_state_bytes,
        measured,
        unmeasured,
    );
    optional_line(
        &mut rows,
        "stack peak",
        r.ram.stack_bytes,
        stack_label,
        unmeasured,
    );
    rows.push(vec![
        "reserve".to_owned(),
        bytes(r.ram.reserve_bytes as u64),
        "rest of the firmware".to_owned(),
    ]);
    rows.push(vec![
        "total".to_owned(),
        bytes(r.ram.total_bytes),
        format!("of {}", bytes_kib(r.ram.budget_bytes as u64)),
    ]);
    rows.push(spare_row(r.ram.spare_bytes, r.ram.spare_percent));
    let _ = writeln!(o, "\nRAM totals");
    o.table(
        &["", "bytes", ""],
        &[Align::Left, Align::Right, Align::Left],
        &rows,
    );
    let mut rows = vec![vec![
        "factory parameters".to_owned(),
        bytes(r.flash.parameters_bytes as u64),
        String::new(),
    ]];
    optional_line(
        &mut rows,
        "engine code",
        r.flash.engine_code_bytes,
        code_label,
        unmeasured,
    );
    rows.push(vec![
        "reserve".to_owned(),
        bytes(r.flash.reserve_bytes as u64),
        "rest of the firmware".to_owned(),
    ]);
    rows.push(vec![
        "total".to_owned(),
        bytes(r.flash.total_bytes),
        format!("of {}", bytes_kib(r.flash.budget_bytes as u64)),
    ]);
    rows.push(spare_row(r.flash.spare_bytes, r.flash.spare_percent));
    let _ = writeln!(o, "\nFlash totals");
    o.table(
        &["", "bytes", ""],
        &[Align::Left, Align::Right, Align::Left],
        &rows,
    );

    let _ = writeln!(o, "\n{}", r.verdict);

    if r.advice.is_empty() {
        let _ = writeln!(o, "\nNo change tried saves memory.");
    } else {
        let by = if r.ram.fits && !r.flash.fits {
            "flash"
        } else {
            "RAM"
        };
        let _ = writeln!(
            o,
            "\nWhat to give up (each change planned again by the core; sorted by {by} saved)"
        );
        let rows: Vec<Vec<String>> = r
            .advice
            .iter()
            .map(|a| {
                vec![
                    a.change.clone(),
                    signed_bytes(a.ram_saved_bytes),
                    signed_bytes(a.flash_saved_bytes),
                    if a.fits_alone { "yes" } else { "no" }.to_owned(),
                    drift_text(&a.drift, &a.drift_not_computed),
                ]
            })
            .collect();
        let has_drift = r
            .advice
            .iter()
            .any(|a| a.drift.is_some() || a.drift_not_computed.is_some());
        let head: &[&str] = if has_drift {
            &["change", "RAM saved", "flash saved", "fits alone", "drift"]
        } else {
            &["change", "RAM saved", "flash saved", "fits alone"]
        };
        o.table(
            head,
            &[
                Align::Left,
                Align::Right,
                Align::Right,
                Align::Left,
                Align::Left,
            ],
            &rows,
        );
    }
    if let Some(c) = &r.combination {
        let lead = if c.fits {
            "No single change fits; these together do"
        } else {
            "No single change fits; even these together do not"
        };
        let _ = writeln!(o, "\n{lead}:");
        for t in &c.changes {
            let _ = writeln!(o, "  - {}", t.change);
        }
        let left = |s: i64, what: &str| {
            if s >= 0 {
                format!("{} of {what} to spare", bytes(s as u64))
            } else {
                format!("{what} short by {}", bytes(s.unsigned_abs()))
            }
        };
        let _ = writeln!(
            o,
            "  {}",
            wrap_at(
                &format!(
                    "saves {} of RAM and {} of flash: {}, {}",
                    signed_bytes(c.ram_saved_bytes),
                    signed_bytes(c.flash_saved_bytes),
                    left(c.ram_spare_bytes, "RAM"),
                    left(c.flash_spare_bytes, "flash")
                ),
                WIDTH,
                2,
                4
            )
        );
        if c.drift.is_some() || c.drift_not_computed.is_some() {
            let _ = writeln!(
                o,
                "  drift: {}",
                drift_text(&c.drift, &c.drift_not_computed)
            );
        }
    }
    if let Some(lean) = &r.lean {
        let _ = writeln!(o, "{}", wrap(lean, WIDTH, 2));
    }
    if let Some(e) = &r.session {
        let _ = writeln!(o, "{}", wrap(&e.render(), WIDTH, 2));
    }
    o.finish()
}
