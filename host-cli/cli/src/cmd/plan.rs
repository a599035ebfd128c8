//! `hone plan`: the memory plan of training on a chip, with advice when it does not fit.

use crate::*;

pub(crate) fn plan(a: PlanArgs) -> Result<Option<CheckFailed>> {
    use hone_host::memplan::{self, plan_report, render_table, AdviceOptions, Budget, Reserve};
    let config = load_config(&a.cfg)?;
    let base = match (&a.model, &a.train) {
        (Some(model), Some(train)) => Some(load_base(&ModelArgs { cfg: ConfigArg { config: a.cfg.config.clone() }, model: model.clone() }, a.calib.as_ref().unwrap_or(train))?),
        (Some(_), None) => return Err(anyhow!("--model without --train and --eval: give calibration and evaluation samples, or leave out --model")),
        _ => None,
    };
    // Memory depends on word sizes only, so without a model `auto` formats may take any
    // fraction bits here.
    let desc = match &base {
        Some(b) => b.quant.desc.clone(),
        None => config.model_desc_with(hone_host::train::provisional_frac)?,
    };
    let data = match (&base, &a.train, &a.eval) {
        (Some(b), Some(t), Some(e)) => Some((prepare(b, t)?, prepare(b, e)?)),
        _ => None,
    };
    let drift_cost = |d: &hone_core::model::ModelDesc| match (base.as_ref(), data.as_ref()) {
        (Some(b), Some((train, eval))) => {
            hone_host::pipeline::drift_cost(b, train, eval, a.epochs, d).map_err(Into::into)
        }
        _ => Err("no calibration data".into()),
    };
    let chip = match &a.chip {
        Some(id) => Some(hone_host::chips::find(id).ok_or_else(|| anyhow!("--chip: unknown chip `{id}`; `hone chips` lists the built-in ones, or give --ram and --flash"))?),
        None => None,
    };
    let budget = match (chip, &a.ram, &a.flash) {
        (Some(c), _, _) => Budget::chip(c),
        (None, Some(r), Some(f)) => Budget::custom(size(r, "ram")?, size(f, "flash")?),
        _ => {
            return Err(anyhow!(
                "give a target: --chip ID, or --ram SIZE and --flash SIZE"
            ))
        }
    };
    let reserve = Reserve {
        ram_bytes: size(&a.reserve_ram, "reserve-ram")?,
        flash_bytes: size(&a.reserve_flash, "reserve-flash")?,
    };
    // The engine's own code, state and stack: measured on a board with the chip's (or the
    // named) core, or else the largest measured figures, marked as an estimate.
    let overhead = match (chip, &a.core) {
        (Some(c), _) => memplan::engine_overhead(c),
        (None, Some(name)) => {
            memplan::measured_core_overhead(memplan::measured_core(name).context("--core")?)
        }
        (None, None) => memplan::estimated_overhead(),
    };
    let report = plan_report(
        &desc,
        &budget,
        reserve,
        Some(&overhead),
        &AdviceOptions::default(),
        data.as_ref()
            .map(|_| &drift_cost as hone_host::memplan::DriftFn<'_>),
    )
    .with_context(|| a.cfg.config.display().to_string())?;
    let report = match chip {
        Some(c) => report.with_chip(c, &desc),
        None => report,
    };
    if a.json {
        print_json(&report)?;
    } else {
        out!("{}", render_table(&report));
        if base.is_none() {
            if let Some(note) = memplan::placeholder_note(&config) {
                outln!("\n{note}");
            }
        }
    }
    Ok((!report.fits).then_some(CheckFailed))
}
