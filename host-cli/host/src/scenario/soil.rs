//! Capacitive soil-moisture probe: the primary (regression) demo. **All data are invented.**
//!
//! # Physics (published)
//! Volumetric water content θ (m³/m³) follows from the soil's bulk relative permittivity ε by
//! the empirical cubic of Topp, Davis and Annan, "Electromagnetic determination of soil water
//! content: measurements in coaxial transmission lines", Water Resources Research 16(3), 1980:
//!
//! θ = −5.3·10⁻² + 2.92·10⁻²·ε − 5.5·10⁻⁴·ε² + 4.3·10⁻⁶·ε³
//!
//! The generator draws θ, inverts this cubic for ε ([`topp_permittivity`]) and feeds ε to the
//! probe model below.
//!
//! # Probe model (invented for this demo)
//! The probe's electrodes form a capacitor whose value grows with the permittivity of the soil
//! around them, `C = C_stray + k·ε`, and drifts with temperature by a coefficient α:
//! `C(T) = C·(1 + α·(T − 25 °C))`. It sits under a reference capacitor `C_ref` in a divider
//! driven by an AC excitation; the rectified output is read by a 12-bit ADC, so wetter soil
//! gives fewer counts:
//!
//! `raw_counts = offset + gain · 4095 · C_ref / (C_ref + C(T)) + noise`, rounded and clipped to
//! 0..=4095.
//!
//! `gain` and `offset` are per unit (manufacturing spread). The constants below
//! ([`STRAY_PF`], [`PF_PER_PERMITTIVITY`], [`REFERENCE_PF`], [`TEMP_COEFF_PER_K`], the spreads
//! and noise levels) are all invented; they were chosen only so the counts span most of the
//! ADC range over θ = 0.05..0.45. Besides ADC noise, the permittivity the probe sees differs
//! from the bulk value by a small random factor ([`PACKING_SPREAD`]), standing in for air gaps
//! and uneven packing around the electrodes.
//!
//! # Tables
//! Columns `unit, raw_counts, temp_c, vwc` (unit id, ADC counts, °C, m³/m³).
//! - [`soil_factory`]: [`FACTORY_UNITS`] units × [`SAMPLES_PER_FACTORY_UNIT`] samples, θ uniform
//!   in [`VWC_RANGE`], temperature uniform in [`TEMP_RANGE_C`].
//! - [`soil_unit`]: the new unit [`NEW_UNIT`], whose gain and offset lie well outside the
//!   factory spread: [`CALIBRATION_SAMPLES`] reference samples spread evenly over the θ range
//!   (as a technician would take them against a reference method) and [`HOLDOUT_SAMPLES`]
//!   random samples for validation.

use super::prng::Sampler;
use super::Table;

/// Full scale of the 12-bit ADC, in counts.
pub const ADC_MAX: f64 = 4095.0;
/// Fixed capacitance of the probe's traces and leads, pF (invented).
pub const STRAY_PF: f64 = 12.0;
/// Probe capacitance added per unit of soil relative permittivity, pF (invented geometry).
pub const PF_PER_PERMITTIVITY: f64 = 2.0;
/// Reference capacitor of the divider, pF (invented).
pub const REFERENCE_PF: f64 = 40.0;
/// Relative change of the probe capacitance per kelvin away from [`REFERENCE_TEMP_C`]
/// (invented).
pub const TEMP_COEFF_PER_K: f64 = 0.004;
/// Temperature at which [`TEMP_COEFF_PER_K`] gives no correction, °C.
pub const REFERENCE_TEMP_C: f64 = 25.0;
/// Relative standard deviation of the permittivity the probe sees around the bulk value
/// (contact and packing variation; invented).
pub const PACKING_SPREAD: f64 = 0.02;
/// Standard deviation of the ADC noise, counts (invented).
pub const ADC_NOISE_COUNTS: f64 = 4.0;
/// Standard deviation of the per-unit gain around 1 in the factory population (invented).
pub const FACTORY_GAIN_SD: f64 = 0.03;
/// Standard deviation of the per-unit offset around 0 in the factory population, counts
/// (invented).
pub const FACTORY_OFFSET_SD_COUNTS: f64 = 30.0;
/// Factory draws of gain and offset are redrawn beyond this many standard deviations, so the
/// factory spread is bounded and [`NEW_UNIT`] is outside it for every seed.
pub const FACTORY_SPREAD_LIMIT_SD: f64 = 2.5;
/// Number of units in the factory table.
pub const FACTORY_UNITS: usize = 40;
/// Samples per factory unit.
pub const SAMPLES_PER_FACTORY_UNIT: usize = 50;
/// Reference samples taken on the new unit for calibration.
pub const CALIBRATION_SAMPLES: usize = 10;
/// Hold-out samples of the new unit.
pub const HOLDOUT_SAMPLES: usize = 40;
/// Range of volumetric water content drawn, m³/m³.
pub const VWC_RANGE: (f64, f64) = (0.05, 0.45);
/// Range of soil temperature drawn for the factory and hold-out tables, °C.
pub const TEMP_RANGE_C: (f64, f64) = (5.0, 35.0);
/// Temperature range of the technician's calibration visit, °C.
pub const CALIBRATION_TEMP_RANGE_C: (f64, f64) = (12.0, 28.0);

/// The column names of every soil table.
pub const COLUMNS: [&str; 4] = ["unit", "raw_counts", "temp_c", "vwc"];
const DECIMALS: [usize; 4] = [0, 0, 2, 4];

/// The new unit (invented): gain and offset each about 3.3 factory standard deviations low,
/// beyond the bounded factory spread, and both pulling the reading the same way (fewer
/// counts, so a factory-trained model reads the soil as wetter than it is).
pub const NEW_UNIT: ProbeUnit = ProbeUnit {
    id: 101,
    gain: 0.90,
    offset_counts: -100.0,
};

/// Random streams of this scenario (see [`super::prng::SplitMix64::stream`]).
const STREAM_UNITS: u64 = 1;
const STREAM_FACTORY: u64 = 2;
const STREAM_CALIBRATION: u64 = 3;
const STREAM_HOLDOUT: u64 = 4;

/// The per-unit parameters of one simulated probe.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct ProbeUnit {
    /// Unit id written in the `unit` column.
    pub id: u32,
    /// Multiplier on the divider output (1 is nominal).
    pub gain: f64,
    /// Additive offset, ADC counts.
    pub offset_counts: f64,
}

/// Topp et al. (1980) volumetric water content (m³/m³) for bulk relative permittivity `eps`.
pub fn topp_vwc(eps: f64) -> f64 {
    -5.3e-2 + eps * (2.92e-2 + eps * (-5.5e-4 + eps * 4.3e-6))
}

/// Lowest and highest permittivity [`topp_permittivity`] searches: air and (about) water.
pub const PERMITTIVITY_SEARCH: (f64, f64) = (1.0, 81.0);

/// The bulk relative permittivity whose [`topp_vwc`] is `vwc`, found by bisection, or `None`
/// when `vwc` lies outside what the cubic gives over [`PERMITTIVITY_SEARCH`].
///
/// The cubic is strictly increasing everywhere (its derivative
/// 2.92·10⁻² − 1.1·10⁻³·ε + 1.29·10⁻⁵·ε² has a negative discriminant), so the root is unique.
pub fn topp_permittivity(vwc: f64) -> Option<f64> {
    let (mut lo, mut hi) = PERMITTIVITY_SEARCH;
    if !(topp_vwc(lo)..=topp_vwc(hi)).contains(&vwc) {
        return None;
    }
    // 80 halvings shrink the bracket far below one ulp; a fixed count keeps it deterministic.
    for _ in 0..80 {
        let mid = 0.5 * (lo + hi);
        if topp_vwc(mid) < vwc {
            lo = mid;
        } else {
            hi = mid;
        }
    }
    Some(0.5 * (lo + hi))
}

/// Probe capacitance in pF for permittivity `eps` at `temp_c`, per the invented model in the
/// [module docs](self).
pub fn probe_capacitance_pf(eps: f64, temp_c: f64) -> f64 {
    (STRAY_PF + PF_PER_PERMITTIVITY * eps) * (1.0 + TEMP_COEFF_PER_K * (temp_c - REFERENCE_TEMP_C))
}

/// The noise-free, unrounded ADC reading of `unit` for permittivity `eps` at `temp_c`.
pub fn ideal_counts(unit: &ProbeUnit, eps: f64, temp_c: f64) -> f64 {
    let c = probe_capacitance_pf(eps, temp_c);
    unit.offset_counts + unit.gain * ADC_MAX * REFERENCE_PF / (REFERENCE_PF + c)
}

/// A normal draw redrawn until it lies within [`FACTORY_SPREAD_LIMIT_SD`] deviations.
fn bounded_normal(rng: &mut Sampler, mean: f64, sd: f64) -> f64 {
    loop {
        let z = rng.standard_normal();
        if z.abs() <= FACTORY_SPREAD_LIMIT_SD {
            return mean + sd * z;
        }
    }
}

/// The [`FACTORY_UNITS`] factory probes for `seed`, ids 1, 2, ….
pub fn factory_units(seed: u64) -> Vec<ProbeUnit> {
    let mut rng = Sampler::new(seed, STREAM_UNITS);
    (1..=FACTORY_UNITS as u32)
        .map(|id| {
            let gain = bounded_normal(&mut rng, 1.0, FACTORY_GAIN_SD);
            let offset_counts = bounded_normal(&mut rng, 0.0, FACTORY_OFFSET_SD_COUNTS);
            ProbeUnit {
                id,
                gain,
                offset_counts,
            }
        })
        .collect()
}

fn empty_table() -> Table {
    let cols: Vec<(&str, usize)> = COLUMNS.iter().copied().zip(DECIMALS).collect();
    Table::new(&cols)
}

/// One simulated reading of `unit` at water content `vwc` and temperature `temp_c`.
fn sample_row(rng: &mut Sampler, unit: &ProbeUnit, vwc: f64, temp_c: f64) -> Vec<f64> {
    let eps = topp_permittivity(vwc).expect("VWC_RANGE lies inside the Topp search range");
    let eps_seen = eps * (1.0 + PACKING_SPREAD * rng.standard_normal());
    let counts = ideal_counts(unit, eps_seen, temp_c) + ADC_NOISE_COUNTS * rng.standard_normal();
    let counts = counts.round().clamp(0.0, ADC_MAX);
    vec![unit.id as f64, counts, temp_c, vwc]
}

/// The factory table for `seed`: every factory unit, [`SAMPLES_PER_FACTORY_UNIT`] rows each,
/// θ and temperature drawn uniformly.
pub fn soil_factory(seed: u64) -> Table {
    let mut rng = Sampler::new(seed, STREAM_FACTORY);
    let mut table = empty_table();
    for unit in factory_units(seed) {
        for _ in 0..SAMPLES_PER_FACTORY_UNIT {
            let vwc = rng.uniform(VWC_RANGE.0, VWC_RANGE.1);
            let temp = rng.uniform(TEMP_RANGE_C.0, TEMP_RANGE_C.1);
            let row = sample_row(&mut rng, &unit, vwc, temp);
            table.push(row);
        }
    }
    table
}

/// The new unit's `(calibration, holdout)` tables for `seed`.
///
/// Calibration θ values are stratified: one sample drawn from the middle of each of
/// [`CALIBRATION_SAMPLES`] equal slices of [`VWC_RANGE`], in ascending order. Hold-out samples
/// are drawn like the factory ones.
pub fn soil_unit(seed: u64) -> (Table, Table) {
    let unit = NEW_UNIT;
    let mut cal_rng = Sampler::new(seed, STREAM_CALIBRATION);
    let mut calibration = empty_table();
    let slice = (VWC_RANGE.1 - VWC_RANGE.0) / CALIBRATION_SAMPLES as f64;
    for i in 0..CALIBRATION_SAMPLES {
        let vwc = VWC_RANGE.0 + slice * (i as f64 + cal_rng.uniform(0.2, 0.8));
        let temp = cal_rng.uniform(CALIBRATION_TEMP_RANGE_C.0, CALIBRATION_TEMP_RANGE_C.1);
        let row = sample_row(&mut cal_rng, &unit, vwc, temp);
        calibration.push(row);
    }
    let mut hold_rng = Sampler::new(seed, STREAM_HOLDOUT);
    let mut holdout = empty_table();
    for _ in 0..HOLDOUT_SAMPLES {
        let vwc = hold_rng.uniform(VWC_RANGE.0, VWC_RANGE.1);
        let temp = hold_rng.uniform(TEMP_RANGE_C.0, TEMP_RANGE_C.1);
        let row = sample_row(&mut hold_rng, &unit, vwc, temp);
        holdout.push(row);
    }
    (calibration, holdout)
}

#[cfg(test)]
mod tests {
    use super::super::DEMO_SEED;
    use super::*;

    /// Dry mineral soil has a bulk relative permittivity of roughly 3 to 4 (from memory;
    /// mineral grains are about 4–5 and air 1). Topp's cubic should give nearly no water there.
    #[test]
    fn topp_dry_soil_is_nearly_dry() {
        for eps in [3.0, 3.5, 4.0] {
            let vwc = topp_vwc(eps);
            assert!((0.02..0.06).contains(&vwc), "eps {eps}: vwc {vwc}");
        }
    }

    /// Liquid water has a relative permittivity near 80 at room temperature (80.1 at 20 °C,
    /// from memory). Though the fit was made on soils, it should land near θ = 1 there.
    #[test]
    fn topp_pure_water_is_nearly_saturated() {
        let vwc = topp_vwc(80.1);
        assert!((0.9..1.0).contains(&vwc), "vwc {vwc}");
    }

    #[test]
    fn topp_is_increasing_and_inverts() {
        // Derivative discriminant b^2 - 4ac < 0 means the derivative never changes sign.
        let (a, b, c) = (3.0 * 4.3e-6, -2.0 * 5.5e-4, 2.92e-2);
        assert!(b * b - 4.0 * a * c < 0.0);
        let mut prev = topp_vwc(PERMITTIVITY_SEARCH.0);
        let mut eps = PERMITTIVITY_SEARCH.0 + 0.25;
        while eps <= PERMITTIVITY_SEARCH.1 {
            let v = topp_vwc(eps);
            assert!(v > prev);
            prev = v;
            eps += 0.25;
        }
        let mut vwc = VWC_RANGE.0;
        while vwc <= VWC_RANGE.1 {
            let e = topp_permittivity(vwc).expect("in range");
            assert!((topp_vwc(e) - vwc).abs() < 1e-12);
            vwc += 0.01;
        }
        assert_eq!(topp_permittivity(-0.5), None);
        assert_eq!(topp_permittivity(1.5), None);
    }

    #[test]
    fn counts_fall_as_soil_gets_wetter_and_stay_on_scale() {
        for unit in factory_units(DEMO_SEED).iter().chain([&NEW_UNIT]) {
            for temp in [TEMP_RANGE_C.0, REFERENCE_TEMP_C, TEMP_RANGE_C.1] {
                let mut prev = f64::INFINITY;
                let mut vwc = VWC_RANGE.0;
                while vwc <= VWC_RANGE.1 {
                    let eps = topp_permittivity(vwc).expect("in range");
                    let c = ideal_counts(unit, eps, temp);
                    assert!(c < prev);
                    assert!(c > 200.0 && c < ADC_MAX - 200.0, "counts {c}");
                    prev = c;
                    vwc += 0.02;
                }
            }
        }
    }

    #[test]
    fn factory_table_shape_and_ranges() {
        let t = soil_factory(DEMO_SEED);
        assert_eq!(t.header, COLUMNS);
        assert_eq!(t.len(), FACTORY_UNITS * SAMPLES_PER_FACTORY_UNIT);
        let units = t.column("unit").expect("unit column");
        for id in 1..=FACTORY_UNITS {
            let n = units.iter().filter(|&&u| u == id as f64).count();
            assert_eq!(n, SAMPLES_PER_FACTORY_UNIT);
        }
        for row in &t.rows {
            assert!((0.0..=ADC_MAX).contains(&row[1]) && row[1].fract() == 0.0);
            assert!((TEMP_RANGE_C.0..TEMP_RANGE_C.1).contains(&row[2]));
            assert!((VWC_RANGE.0..VWC_RANGE.1).contains(&row[3]));
        }
        let (cal, hold) = soil_unit(DEMO_SEED);
        assert_eq!(cal.len(), CALIBRATION_SAMPLES);
        assert_eq!(hold.len(), HOLDOUT_SAMPLES);
        for t in [&cal, &hold] {
            assert!(t.rows.iter().all(|r| r[0] == NEW_UNIT.id as f64));
        }
        // Calibration θ values are ascending and one per slice of the range.
        let vwc = cal.column("vwc").expect("vwc column");
        assert!(vwc.windows(2).all(|w| w[0] < w[1]));
    }

    #[test]
    fn generators_are_deterministic() {
        assert_eq!(soil_factory(9), soil_factory(9));
        assert_eq!(soil_unit(9), soil_unit(9));
        assert_ne!(soil_factory(9), soil_factory(10));
    }

    /// The new unit's gain and offset lie outside the whole factory population, for several
    /// seeds (the factory draws are bounded at FACTORY_SPREAD_LIMIT_SD by construction).
    #[test]
    fn new_unit_drift_is_outside_factory_spread() {
        for seed in [DEMO_SEED, 1, 2, 3] {
            let units = factory_units(seed);
            let min_gain = units.iter().map(|u| u.gain).fold(f64::MAX, f64::min);
            let min_offset = units
                .iter()
                .map(|u| u.offset_counts)
                .fold(f64::MAX, f64::min);
            assert!(NEW_UNIT.gain < min_gain, "seed {seed}: min gain {min_gain}");
            assert!(
                NEW_UNIT.offset_counts < min_offset,
                "seed {seed}: min offset {min_offset}"
            );
        }
    }

    /// Solves the least-squares problem `x · w ≈ y` by the normal equations and Gaussian
    /// elimination with partial pivoting.
    fn least_squares(x: &[Vec<f64>], y: &[f64]) -> Vec<f64> {
        let p = x[0].len();
        // Augmented normal equations [XᵀX | Xᵀy].
        let mut a = vec![vec![0.0; p + 1]; p];
        for (row, &target) in x.iter().zip(y) {
            for (ai, &ri) in a.iter_mut().zip(row) {
                for (aij, &rj) in ai.iter_mut().zip(row) {
                    *aij += ri * rj;
                }
                ai[p] += ri * target;
            }
        }
        // Gauss–Jordan elimination with partial pivoting.
        for col in 0..p {
            let pivot = (col..p)
                .max_by(|&r, &s| a[r][col].abs().total_cmp(&a[s][col].abs()))
                .expect("non-empty");
            a.swap(col, pivot);
            let pivot_row = a[col].clone();
            for (r, row) in a.iter_mut().enumerate() {
                if r != col {
                    let f = row[col] / pivot_row[col];
                    for (v, &pv) in row.iter_mut().zip(&pivot_row).skip(col) {
                        *v -= f * pv;
                    }
                }
            }
        }
        a.iter()
            .enumerate()
            .map(|(i, row)| row[p] / row[i])
            .collect()
    }

    fn features(row: &[f64]) -> Vec<f64> {
        let c = row[1] / ADC_MAX;
        let t = (row[2] - 20.0) / 15.0;
        vec![1.0, c, c * c, c * c * c, t, c * t]
    }

    fn predict(w: &[f64], row: &[f64]) -> f64 {
        features(row).iter().zip(w).map(|(f, w)| f * w).sum()
    }

    fn rmse(w: &[f64], t: &Table, correct: impl Fn(f64) -> f64) -> f64 {
        let se: f64 = t
            .rows
            .iter()
            .map(|r| (correct(predict(w, r)) - r[3]).powi(2))
            .sum();
        (se / t.len() as f64).sqrt()
    }

    /// The scenario does what the demo needs: a model fitted on the factory table does much
    /// worse on the drifted new unit, and a straight-line correction fitted on the ten
    /// calibration samples recovers most of the loss.
    #[test]
    fn calibration_matters_for_the_new_unit() {
        let factory = soil_factory(DEMO_SEED);
        let (cal, hold) = soil_unit(DEMO_SEED);
        let x: Vec<Vec<f64>> = factory.rows.iter().map(|r| features(r)).collect();
        let y = factory.column("vwc").expect("vwc column");
        let w = least_squares(&x, &y);
        let factory_rmse = rmse(&w, &factory, |p| p);
        let drifted_rmse = rmse(&w, &hold, |p| p);
        assert!(
            drifted_rmse > 3.0 * factory_rmse,
            "factory {factory_rmse:.4}, new unit {drifted_rmse:.4}"
        );
        let cx: Vec<Vec<f64>> = cal.rows.iter().map(|r| vec![1.0, predict(&w, r)]).collect();
        let cy = cal.column("vwc").expect("vwc column");
        let ab = least_squares(&cx, &cy);
        let corrected_rmse = rmse(&w, &hold, |p| ab[0] + ab[1] * p);
        assert!(
            corrected_rmse < 0.3 * drifted_rmse,
            "new unit {drifted_rmse:.4}, corrected {corrected_rmse:.4}"
        );
    }
}
