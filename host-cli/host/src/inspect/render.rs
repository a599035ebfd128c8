//! Rendering an inspection report as text for people.

use super::*;

/// A real number in at most six significant digits, without trailing zeros.
pub(crate) fn real(x: f64) -> String {
    real_sig(x, 6)
}

/// A real number in at most `sig` significant digits (1 to 17), without trailing zeros;
/// magnitudes below 10^-3 or from 10^sig up in exponent form.
pub(crate) fn real_sig(x: f64, sig: i32) -> String {
    if x == 0.0 {
        return "0".to_owned();
    }
    if !x.is_finite() {
        return x.to_string();
    }
    let sig = sig.clamp(1, 17);
    let mag = x.abs().log10().floor() as i32;
    if !(-3..sig).contains(&mag) {
        let s = format!("{x:.*e}", (sig - 1) as usize);
        return match s.split_once('e') {
            Some((m, e)) => format!("{}e{e}", m.trim_end_matches('0').trim_end_matches('.')),
            None => s,
        };
    }
    let decimals = (sig - 1 - mag).max(0) as usize;
    let s = format!("{x:.decimals$}");
    if s.contains('.') {
        s.trim_end_matches('0').trim_end_matches('.').to_owned()
    } else {
        s
    }
}

/// "[-8, 8 - 2^-12]": the range with its upper end written exactly.
pub(super) fn range_text(f: &FormatInfo) -> String {
    if f.frac == 0 {
        format!("[{}, {}]", real(f.min), real(f.max))
    } else {
        format!("[{}, {} - 2^-{}]", real(f.min), real(-f.min), f.frac)
    }
}

pub(super) fn format_line(f: &FormatInfo) -> String {
    format!(
        "{}: step 2^-{} = {}, range {}",
        f.label(),
        f.frac,
        real(f.step),
        range_text(f)
    )
}

pub(super) fn mode_text(m: &str) -> &'static str {
    match m.parse::<ModeName>().map(|m| m.0) {
        Ok(TrainMode::Frozen) => "frozen",
        Ok(TrainMode::BiasOnly) => "trains the bias",
        Ok(TrainMode::WeightsOnly) => "trains the weights",
        Ok(TrainMode::Full) => "trains weights and bias",
        Err(_) => "unknown train mode",
    }
}

pub(super) fn param_text(p: &ParamFormatsInfo) -> String {
    let mut s = p.value.label();
    if let Some(m) = &p.master {
        let _ = write!(s, ", master {}", m.label());
    }
    let _ = write!(s, ", accumulator {}", p.accum.label());
    s
}

/// The report as text for a terminal.
pub fn render(r: &InspectReport) -> String {
    let mut o = String::new();
    let _ = writeln!(
        o,
        "{}: hone {}, blob format version {}, {}, CRC {} ok",
        r.file,
        r.kind,
        r.format_version,
        bytes(r.bytes as u64),
        r.crc
    );
    let m = &r.model;
    let _ = writeln!(o, "\nModel");
    let shape = if m.input.len == 1 {
        String::new()
    } else {
        format!(" ({} channels × {} samples)", m.input.channels, m.input.len)
    };
    let _ = writeln!(
        o,
        "  input {} values{shape} in {}",
        group(m.input.values as u64),
        m.input_format.label()
    );
    let loss = match m.loss.as_str() {
        "squared_error" => "squared error, ½ Σ (y − t)²",
        _ => "softmax cross-entropy",
    };
    let _ = writeln!(
        o,
        "  output {} values, loss: {loss}",
        group(m.output.values as u64)
    );
    for l in &m.layers {
        let mut line = format!(
            "  {:>2}  {:<16} {} → {}",
            l.index,
            l.kind,
            l.input.text(),
            l.output.text()
        );
        if l.weight.is_some() {
            let _ = write!(
                line,
                ", {} weights, {} biases, {} MACs, {}",
                group(l.weights as u64),
                group(l.biases as u64),
                group(l.macs as u64),
                mode_text(&l.train_mode)
            );
        }
        let _ = writeln!(o, "{line}");
        if let (Some(w), Some(b)) = (&l.weight, &l.bias) {
            let _ = writeln!(o, "        weights   {}", param_text(w));
            let _ = writeln!(o, "        bias      {}", param_text(b));
        }
        let _ = writeln!(
            o,
            "        output    {}, gradient {}",
            l.out.label(),
            l.grad.label()
        );
    }

    let t = &r.training;
    let _ = writeln!(o, "\nTraining");
    let _ = writeln!(
        o,
        "  batch {}, learning rate {}",
        t.batch,
        t.learning_rate.text()
    );
    let _ = writeln!(
        o,
        "  momentum {}, weight decay {}, clip {}",
        t.momentum.text(),
        t.weight_decay.text(),
        t.clip.text()
    );
    let _ = writeln!(
        o,
        "  rounding: activations {}, gradients {}, updates {}",
        t.rounding.activations, t.rounding.gradients, t.rounding.updates
    );
    match t.dynamic {
        Some(d) => {
            let _ = writeln!(
                o,
                "  dynamic fixed point: every {} updates, at most {} ppm saturated",
                d.interval, d.max_rate_ppm
            );
        }
        None => {
            let _ = writeln!(o, "  dynamic fixed point: off");
        }
    }
    let _ = writeln!(o, "  seed {}", t.seed);

    if r.scaling.is_empty() {
        let _ = writeln!(o, "\nInput scaling: none (inputs arrive scaled)");
    } else {
        let _ = writeln!(o, "\nInput scaling, x = (reading − offset) · gain");
        let rows: Vec<Vec<String>> = r
            .scaling
            .iter()
            .map(|s| {
                vec![
                    s.channel.to_string(),
                    real(s.offset as f64),
                    real(s.gain as f64),
                ]
            })
            .collect();
        o.push_str(&table(
            &["channel", "offset", "gain"],
            &[Align::Right, Align::Right, Align::Right],
            &rows,
        ));
    }

    if let Some(s) = &r.state {
        let _ = writeln!(o, "\nTraining state");
        let _ = writeln!(
            o,
            "  samples stepped: {}, updates applied: {}",
            group(s.steps as u64),
            group(s.updates as u64)
        );
        let _ = writeln!(
            o,
            "  generator state {:08X} {:08X} {:08X} {:08X}",
            s.rng[0], s.rng[1], s.rng[2], s.rng[3]
        );
        let pair = |now: u8, planned: u8| {
            if now == planned {
                now.to_string()
            } else {
                format!("{now} (planned {planned})")
            }
        };
        let rows: Vec<Vec<String>> = s
            .fracs
            .iter()
            .map(|f| {
                vec![
                    f.layer.to_string(),
                    pair(f.output, f.output_planned),
                    pair(f.gradient, f.gradient_planned),
                    f.weight_accum.map_or_else(String::new, |(n, p)| pair(n, p)),
                    f.bias_accum.map_or_else(String::new, |(n, p)| pair(n, p)),
                ]
            })
            .collect();
        let _ = writeln!(o, "  current fraction bits:");
        o.push_str(&table(
            &["layer", "output", "gradient", "weight accum", "bias accum"],
            &[
                Align::Right,
                Align::Left,
                Align::Left,
                Align::Left,
                Align::Left,
            ],
            &rows,
        ));
    }

    let _ = writeln!(o, "\nTensors (values in real units), by layer");
    let rank = |role: &str| {
        [
            "weight",
            "bias",
            "master_weight",
            "master_bias",
            "momentum_weight",
            "momentum_bias",
        ]
        .iter()
        .position(|r| *r == role)
    };
    let mut order: Vec<&TensorInfo> = r.tensors.iter().collect();
    order.sort_by_key(|t| (t.layer, rank(&t.role)));
    let rows: Vec<Vec<String>> = order
        .iter()
        .map(|t| {
            vec![
                t.role.replace('_', " "),
                t.format.label(),
                group(t.elems as u64),
                bytes(t.bytes as u64),
                real(t.min),
                real(t.max),
                real_sig(t.mean, 4),
                real_sig(t.rms, 4),
                group(t.saturated as u64),
            ]
        })
        .collect();
    let text = table(
        &[
            "tensor", "format", "values", "bytes", "min", "max", "mean", "RMS", "sat.",
        ],
        &[
            Align::Left,
            Align::Left,
            Align::Right,
            Align::Right,
            Align::Right,
            Align::Right,
            Align::Right,
            Align::Right,
            Align::Right,
        ],
        &rows,
    );
    // A heading line before the tensors of each layer.
    let mut last = None;
    for (i, line) in text.lines().enumerate() {
        if let Some(t) = i.checked_sub(1).and_then(|k| order.get(k)) {
            if last != Some(t.layer) {
                let kind = m.layers.get(t.layer).map_or("", |l| l.kind.as_str());
                let _ = writeln!(o, "  · layer {} ({kind})", t.layer);
                last = Some(t.layer);
            }
        }
        let _ = writeln!(o, "{line}");
    }
    let mut formats: Vec<&FormatInfo> = Vec::new();
    for f in r.tensors.iter().map(|t| &t.format) {
        if !formats.iter().any(|g| g.q == f.q && g.word == f.word) {
            formats.push(f);
        }
    }
    let _ = writeln!(o, "  formats:");
    for f in formats {
        let _ = writeln!(o, "    {}", format_line(f));
    }
    let _ = writeln!(
        o,
        "  sat.: values at the word's smallest or largest raw value; mean and RMS in 4 digits"
    );
    for w in &r.warnings {
        let _ = writeln!(o, "\nwarning: {w}");
    }
    o
}
