//! The fleet study for people: a table, plots and a report.

use hone_report::plot::{LinePlot, Series};
use hone_report::report::{Align, Block, Report, Section, Table};

use super::FleetReport;

/// A figure with its unit, for tables: five significant digits.
fn num(v: f64) -> String {
    if v.is_finite() {
        format!("{v:.5}")
    } else {
        "–".into()
    }
}

/// A small signed difference: three significant digits, exponent form.
fn diff(v: f64) -> String {
    if v == 0.0 {
        "0".into()
    } else if v.is_finite() {
        format!("{v:+.2e}")
    } else {
        "–".into()
    }
}

fn pct(v: f64) -> String {
    if v.is_finite() {
        format!("{v:.1}")
    } else {
        "–".into()
    }
}

/// The error's name and unit, as column headings say it: `RMSE m³/m³` or `error %`.
fn error_label(r: &FleetReport) -> String {
    match (r.setup.metric, r.setup.unit.as_str()) {
        ("error_rate_pct", _) => "error %".into(),
        (_, "") => "RMSE".into(),
        (_, u) => format!("RMSE {u}"),
    }
}

/// One row per reference-sample count.
pub fn table(r: &FleetReport) -> Table {
    use Align::{Left, Right};
    let mut t = Table::new(
        [
            "N",
            "median",
            "p90",
            "p99",
            "float median",
            "float p99",
            "in spec %",
            "float in spec %",
            "guard rejects %",
            "fixed−float median",
            "fixed−float p99",
        ],
        vec![
            Left, Right, Right, Right, Right, Right, Right, Right, Right, Right, Right,
        ],
    );
    for row in &r.rows {
        t.push_row([
            row.samples.to_string(),
            num(row.fixed.median),
            num(row.fixed.p90),
            num(row.fixed.p99),
            num(row.float.median),
            num(row.float.p99),
            pct(row.fixed_within_spec_pct),
            pct(row.float_within_spec_pct),
            pct(row.guard_rejected_pct),
            diff(row.fixed_minus_float.median),
            diff(row.fixed_minus_float.p99),
        ]);
    }
    t
}

/// What the figures mean, in a few lines.
pub fn notes(r: &FleetReport) -> Vec<String> {
    let s = &r.setup;
    let label = error_label(r);
    let mut v = vec![
        format!(
            "{} units, each calibrated on N reference samples ({} passes) and judged on {} \
             further samples of its own; seed {}",
            s.units, s.epochs, s.eval_samples, s.seed
        ),
        format!(
            "before calibration ({label}): median {}, p90 {}, p99 {}; {}% of units in spec",
            num(r.before_fixed.median),
            num(r.before_fixed.p90),
            num(r.before_fixed.p99),
            pct(r.before_within_spec_pct)
        ),
        format!(
            "median, p90, p99: the units' {label} after calibration in fixed point (the device); \
             float: the same units calibrated by the float twin"
        ),
        format!(
            "in spec: units whose error is at most {} {}",
            hone_report::report::short_decimal(s.spec),
            if s.metric == "error_rate_pct" {
                "%"
            } else {
                s.unit.as_str()
            }
        ),
        format!(
            "guard rejects: clean sessions the rollback guard rejected, {} samples held back \
             per unit (each one a false alarm)",
            s.guard_holdout
        ),
        "fixed−float: per unit, the fixed-point error minus the float error".into(),
    ];
    let diverged: usize = r
        .rows
        .iter()
        .map(|row| row.fixed.not_finite + row.float.not_finite)
        .sum::<usize>()
        + r.before_fixed.not_finite;
    if diverged > 0 {
        v.push(format!(
            "{diverged} unit calibrations gave no finite error (training diverged); they count \
             as out of spec and are left out of the percentiles"
        ));
    }
    if r.input_saturations > 0 {
        v.push(format!(
            "warning: {} input values saturated the model's input format; the distortions \
             reach beyond it",
            r.input_saturations
        ));
    }
    v
}

/// The table and its notes, for a terminal.
pub fn render_text(r: &FleetReport) -> String {
    let mut out = hone_report::report::render_text_table(&table(r));
    for n in notes(r) {
        out.push_str(&n);
        out.push('\n');
    }
    out
}

fn xs(r: &FleetReport, f: impl Fn(&super::FleetRow) -> f64) -> Vec<(f64, f64)> {
    r.rows
        .iter()
        .map(|row| (row.samples as f64, f(row)))
        .collect()
}

/// The error's percentiles against the reference-sample count, fixed point solid, float
/// dashed, and the spec limit.
pub fn error_plot(r: &FleetReport) -> String {
    let mut p = LinePlot::new(
        "Units' error after calibration",
        "reference samples per unit (N)",
        error_label(r),
    );
    p.series = vec![
        Series::new("median, fixed", xs(r, |row| row.fixed.median)),
        Series::new("p90, fixed", xs(r, |row| row.fixed.p90)),
        Series::new("p99, fixed", xs(r, |row| row.fixed.p99)),
        Series::new("median, float", xs(r, |row| row.float.median)).dashed(),
        Series::new("p99, float", xs(r, |row| row.float.p99)).dashed(),
    ];
    let (lo, hi) = r.rows.iter().fold((f64::MAX, f64::MIN), |(lo, hi), row| {
        (lo.min(row.samples as f64), hi.max(row.samples as f64))
    });
    if lo <= hi {
        p.series
            .push(Series::new("spec limit", vec![(lo, r.setup.spec), (hi, r.setup.spec)]).dashed());
    }
    p.to_svg()
}

/// The share of units within spec, and the guard's false alarms, against the count.
pub fn share_plot(r: &FleetReport) -> String {
    let mut p = LinePlot::new(
        "Units within spec, and the guard's false alarms",
        "reference samples per unit (N)",
        "% of units",
    );
    p.series = vec![
        Series::new("in spec, fixed", xs(r, |row| row.fixed_within_spec_pct)),
        Series::new("in spec, float", xs(r, |row| row.float_within_spec_pct)).dashed(),
        Series::new("guard rejects", xs(r, |row| row.guard_rejected_pct)),
    ];
    p.to_svg()
}

/// The report document: setup, table, notes and both plots.
pub fn document(r: &FleetReport, setup: Vec<(String, String)>) -> Report {
    let mut rep = Report::new("hone fleet study");
    rep.subtitle = Some(format!(
        "How many reference samples per unit, and what share of {} units then meets the spec",
        r.setup.units
    ));
    let spreads: Vec<(String, String)> = r
        .setup
        .features
        .iter()
        .map(|f| {
            (
                format!("spread of {}", f.name),
                format!(
                    "gain {} ± {}, offset {} ± {}, noise {} (normal: mean ± standard deviation)",
                    hone_report::report::short_decimal(f.gain[0]),
                    hone_report::report::short_decimal(f.gain[1]),
                    hone_report::report::short_decimal(f.offset[0]),
                    hone_report::report::short_decimal(f.offset[1]),
                    hone_report::report::short_decimal(f.noise)
                ),
            )
        })
        .collect();
    rep.sections.push(Section {
        heading: "Setup".into(),
        blocks: vec![Block::KeyValues(setup.into_iter().chain(spreads).collect())],
    });
    rep.sections.push(Section {
        heading: "Per reference-sample count".into(),
        blocks: vec![
            Block::Table(table(r)),
            Block::Paragraph(notes(r).join("\n")),
        ],
    });
    rep.sections.push(Section {
        heading: "Plots".into(),
        blocks: vec![
            Block::Figure {
                svg: error_plot(r),
                caption: "The units' error after calibration against the reference samples \
                          per unit: fixed point (the device) solid, float dashed."
                    .into(),
                file_stem: "error".into(),
            },
            Block::Figure {
                svg: share_plot(r),
                caption: "Units within the spec limit, and clean sessions the rollback guard \
                          rejected."
                    .into(),
                file_stem: "share".into(),
            },
        ],
    });
    rep
}
