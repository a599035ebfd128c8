//! Pump vibration condition: the second (classification) demo. **All data are invented.**
//!
//! # Signal model (invented for this demo)
//! One accelerometer axis on the bearing housing of a pump running at [`RUNNING_SPEED_HZ`]
//! (1500 rpm), sampled at [`SAMPLE_RATE_HZ`]; a window is [`WINDOW_LEN`] samples (40 ms, one
//! revolution). The physical acceleration (m/s²) is a sum of tones plus broadband noise:
//!
//! - 1× running speed (unbalance), 2× (misalignment) and 3×;
//! - bearing-defect tones at [`BPFO_ORDER`]× and [`BPFI_ORDER`]× running speed (outer- and
//!   inner-race passing orders of an invented bearing), stronger on machines in worse zones;
//! - white noise of [`MECHANICAL_NOISE`] m/s².
//!
//! Each window first picks a target zone and a target RMS velocity inside it; the tones'
//! velocity amplitudes are scaled so their combined RMS velocity, by the closed form
//! `sqrt(Σ V_k² / 2)`, equals that target, and each acceleration amplitude is
//! `A_k = 2π f_k V_k`. Phases are random.
//!
//! The sensor then records `gain · a + noise` ([`SENSOR_NOISE`] m/s²). Factory sensors have
//! gains near 1 ([`FACTORY_GAIN_SD`]); the new unit's sensor reads [`NEW_SENSOR_GAIN`] of the
//! true acceleration, far outside the factory spread, so a model trained on factory data
//! misjudges it until calibrated.
//!
//! # Label
//! The label is the condition zone of the *physical* window: its RMS velocity
//! ([`velocity_rms_mm_s`], integrated in the frequency domain) against the ISO 10816-3 zone
//! limits for group 2 machines (15–300 kW) on rigid foundations, [`ZONE_LIMITS_MM_S`] =
//! 1.4 / 2.8 / 4.5 mm/s between zones A/B, B/C and C/D. These limits are quoted from memory.
//! Zones are numbered 0 = A (good), 1 = B (acceptable), 2 = C (unsatisfactory), 3 = D
//! (unacceptable).
//!
//! # Tables
//! Columns `s0..s63` (sensor output, m/s²) then `zone`.
//! - [`vibration_factory`]: [`FACTORY_SENSORS`] sensors × [`WINDOWS_PER_FACTORY_SENSOR`]
//!   windows, target zone drawn uniformly.
//! - [`vibration_unit`]: the new sensor's [`CALIBRATION_WINDOWS`] calibration windows and
//!   [`HOLDOUT_WINDOWS`] hold-out windows, target zones cycling A, B, C, D.

use super::prng::{sin_cos_turns, sin_turns, Sampler};
use super::Table;

/// Samples per window.
pub const WINDOW_LEN: usize = 64;
/// Sampling rate, Hz. With [`WINDOW_LEN`] samples the DFT bins are 25 Hz apart.
pub const SAMPLE_RATE_HZ: f64 = 1600.0;
/// Shaft speed, Hz (1500 rpm, a four-pole motor on a 50 Hz grid).
pub const RUNNING_SPEED_HZ: f64 = 25.0;
/// Outer-race defect order of the invented bearing (multiple of running speed).
pub const BPFO_ORDER: f64 = 3.58;
/// Inner-race defect order of the invented bearing (multiple of running speed).
pub const BPFI_ORDER: f64 = 5.42;
/// ISO 10816-3 zone boundaries A/B, B/C, C/D for group 2 machines on rigid foundations,
/// RMS velocity in mm/s (from memory).
pub const ZONE_LIMITS_MM_S: [f64; 3] = [1.4, 2.8, 4.5];
/// Letters of zones 0..=3.
pub const ZONE_LETTERS: [char; 4] = ['A', 'B', 'C', 'D'];
/// Target RMS velocity drawn for each target zone, mm/s (invented; D is capped at 8 mm/s).
pub const TARGET_VELOCITY_MM_S: [(f64, f64); 4] = [(0.4, 1.4), (1.4, 2.8), (2.8, 4.5), (4.5, 8.0)];
/// Standard deviation of the broadband mechanical noise, m/s² (invented).
pub const MECHANICAL_NOISE: f64 = 0.05;
/// Standard deviation of the sensor's own noise, m/s² (invented).
pub const SENSOR_NOISE: f64 = 0.01;
/// Standard deviation of factory sensor gains around 1 (invented); draws beyond three
/// deviations are redrawn.
pub const FACTORY_GAIN_SD: f64 = 0.02;
/// Gain of the new unit's sensor (invented): reads 70 % of the true acceleration.
pub const NEW_SENSOR_GAIN: f64 = 0.70;
/// Sensors in the factory table.
pub const FACTORY_SENSORS: usize = 20;
/// Windows per factory sensor.
pub const WINDOWS_PER_FACTORY_SENSOR: usize = 30;
/// Calibration windows of the new unit (three per zone).
pub const CALIBRATION_WINDOWS: usize = 12;
/// Hold-out windows of the new unit (fifteen per zone).
pub const HOLDOUT_WINDOWS: usize = 60;
/// Decimals of the sample columns in the CSV.
const SAMPLE_DECIMALS: usize = 4;

const STREAM_GAINS: u64 = 10;
const STREAM_FACTORY: u64 = 11;
const STREAM_CALIBRATION: u64 = 12;
const STREAM_HOLDOUT: u64 = 13;

/// Root mean square of `x` (0 for an empty slice).
pub fn rms(x: &[f64]) -> f64 {
    if x.is_empty() {
        return 0.0;
    }
    (x.iter().map(|v| v * v).sum::<f64>() / x.len() as f64).sqrt()
}

/// RMS velocity in mm/s of an acceleration window in m/s² sampled at `sample_rate_hz`.
///
/// The window is treated as one period of a periodic signal. Its discrete Fourier transform
/// `A_k` is integrated bin by bin, `V_k = A_k / (j 2π f_k)` with `f_k` the bin's frequency
/// (`min(k, N − k) · fs / N`), the mean (bin 0) is dropped, and Parseval's relation gives
/// `v_rms² = Σ_{k≠0} |V_k|² / N²`. For a tone on a bin centre, `A sin(2π f t)`, this is exactly
/// `A / (2π f √2)`. The result covers `fs/N` up to `fs/2` (25–800 Hz here), inside the
/// 10–1000 Hz band ISO 10816-3 measures in (from memory).
pub fn velocity_rms_mm_s(accel: &[f64], sample_rate_hz: f64) -> f64 {
    let n = accel.len();
    if n < 2 {
        return 0.0;
    }
    let twiddles: Vec<(f64, f64)> = (0..n).map(|j| sin_cos_turns(j as f64 / n as f64)).collect();
    let mut sum = 0.0;
    for k in 1..n {
        let (mut re, mut im) = (0.0, 0.0);
        for (i, &a) in accel.iter().enumerate() {
            let (s, c) = twiddles[(k * i) % n];
            re += a * c;
            im -= a * s;
        }
        let f = k.min(n - k) as f64 * sample_rate_hz / n as f64;
        let w = std::f64::consts::TAU * f;
        sum += (re * re + im * im) / (w * w);
    }
    (sum / (n * n) as f64).sqrt() * 1000.0
}

/// Condition zone 0..=3 (A..D) of an RMS velocity in mm/s: the number of
/// [`ZONE_LIMITS_MM_S`] it reaches or exceeds.
pub fn zone_of(velocity_mm_s: f64) -> u8 {
    ZONE_LIMITS_MM_S
        .iter()
        .filter(|&&limit| velocity_mm_s >= limit)
        .count() as u8
}

/// The factory sensors' gains for `seed`.
pub fn factory_sensor_gains(seed: u64) -> Vec<f64> {
    let mut rng = Sampler::new(seed, STREAM_GAINS);
    (0..FACTORY_SENSORS)
        .map(|_| loop {
            let z = rng.standard_normal();
            if z.abs() <= 3.0 {
                break 1.0 + FACTORY_GAIN_SD * z;
            }
        })
        .collect()
}

/// One physical acceleration window (m/s²) aimed at `target_zone`.
pub fn physical_window(rng: &mut Sampler, target_zone: usize) -> [f64; WINDOW_LEN] {
    let (lo, hi) = TARGET_VELOCITY_MM_S[target_zone];
    let target_mm_s = rng.uniform(lo, hi);
    let severity = target_zone as f64 / 3.0;
    // (order, relative velocity weight); bearing tones grow with the zone.
    let tones = [
        (1.0, rng.uniform(0.5, 1.0)),
        (2.0, rng.uniform(0.1, 0.6)),
        (3.0, rng.uniform(0.0, 0.15)),
        (BPFO_ORDER, rng.uniform(0.0, 0.1 + 0.5 * severity)),
        (BPFI_ORDER, rng.uniform(0.0, 0.05 + 0.3 * severity)),
    ];
    // Scale the weights (velocity amplitudes) so their RMS, sqrt(Σ V²/2), hits the target.
    let weight_rms = (tones.iter().map(|(_, v)| v * v).sum::<f64>() / 2.0).sqrt();
    let scale = target_mm_s / 1000.0 / weight_rms;
    let mut out = [0.0; WINDOW_LEN];
    for &(order, weight) in &tones {
        let f = order * RUNNING_SPEED_HZ;
        let accel_amp = std::f64::consts::TAU * f * weight * scale;
        let phase = rng.unit();
        for (i, a) in out.iter_mut().enumerate() {
            *a += accel_amp * sin_turns(f * i as f64 / SAMPLE_RATE_HZ + phase);
        }
    }
    for a in &mut out {
        *a += MECHANICAL_NOISE * rng.standard_normal();
    }
    out
}

/// One table row: the sensor's view of a window aimed at `target_zone`, then the true zone.
fn window_row(rng: &mut Sampler, gain: f64, target_zone: usize) -> Vec<f64> {
    let physical = physical_window(rng, target_zone);
    let zone = zone_of(velocity_rms_mm_s(&physical, SAMPLE_RATE_HZ));
    let mut row: Vec<f64> = physical
        .iter()
        .map(|a| gain * a + SENSOR_NOISE * rng.standard_normal())
        .collect();
    row.push(zone as f64);
    row
}

/// Column names: `s0`..`s63`, then `zone`.
pub fn columns() -> Vec<String> {
    (0..WINDOW_LEN)
        .map(|i| format!("s{i}"))
        .chain(std::iter::once("zone".to_string()))
        .collect()
}

fn empty_table() -> Table {
    let names = columns();
    let cols: Vec<(&str, usize)> = names
        .iter()
        .enumerate()
        .map(|(i, n)| (n.as_str(), if i < WINDOW_LEN { SAMPLE_DECIMALS } else { 0 }))
        .collect();
    Table::new(&cols)
}

/// The factory table for `seed`: [`WINDOWS_PER_FACTORY_SENSOR`] windows from each factory
/// sensor, target zones drawn uniformly.
pub fn vibration_factory(seed: u64) -> Table {
    let mut rng = Sampler::new(seed, STREAM_FACTORY);
    let mut table = empty_table();
    for gain in factory_sensor_gains(seed) {
        for _ in 0..WINDOWS_PER_FACTORY_SENSOR {
            let target = rng.below(4) as usize;
            let row = window_row(&mut rng, gain, target);
            table.push(row);
        }
    }
    table
}

/// The new unit's `(calibration, holdout)` tables for `seed`, target zones cycling A..D.
pub fn vibration_unit(seed: u64) -> (Table, Table) {
    let build = |stream: u64, count: usize| {
        let mut rng = Sampler::new(seed, stream);
        let mut table = empty_table();
        for i in 0..count {
            let row = window_row(&mut rng, NEW_SENSOR_GAIN, i % 4);
            table.push(row);
        }
        table
    };
    (
        build(STREAM_CALIBRATION, CALIBRATION_WINDOWS),
        build(STREAM_HOLDOUT, HOLDOUT_WINDOWS),
    )
}

#[cfg(test)]
mod tests {
    use super::super::DEMO_SEED;
    use super::*;

    fn sine(amplitude: f64, freq_hz: f64, phase_turns: f64) -> Vec<f64> {
        (0..WINDOW_LEN)
            .map(|i| {
                let t = i as f64 / SAMPLE_RATE_HZ;
                amplitude * (std::f64::consts::TAU * (freq_hz * t + phase_turns)).sin()
            })
            .collect()
    }

    /// Closed form: a sine of amplitude A over whole periods has RMS A/√2.
    #[test]
    fn rms_of_pure_sine_is_amplitude_over_root_two() {
        for (amp, bin) in [(1.0, 1.0), (2.5, 3.0), (0.7, 7.0)] {
            let x = sine(amp, bin * 25.0, 0.3);
            let want = amp / std::f64::consts::SQRT_2;
            assert!((rms(&x) - want).abs() < 1e-12, "{} vs {want}", rms(&x));
        }
        assert_eq!(rms(&[]), 0.0);
        assert_eq!(rms(&[3.0, -3.0]), 3.0);
    }

    /// Closed form: integrating A sin(2π f t) gives a velocity amplitude A/(2π f), so its RMS
    /// is A/(2π f √2), for tones on bin centres.
    #[test]
    fn velocity_rms_of_pure_tone_matches_closed_form() {
        for (amp, f) in [(1.0, 25.0), (3.0, 75.0), (0.4, 200.0), (2.0, 775.0)] {
            let x = sine(amp, f, 0.1);
            let want = amp / (std::f64::consts::TAU * f * std::f64::consts::SQRT_2) * 1000.0;
            let got = velocity_rms_mm_s(&x, SAMPLE_RATE_HZ);
            assert!(
                (got - want).abs() < 1e-9 * want.max(1.0),
                "{f} Hz: {got} vs {want}"
            );
        }
    }

    /// Tones on distinct bins are orthogonal, so RMS velocities add in quadrature; a constant
    /// offset (gravity on a tilted axis, say) contributes nothing.
    #[test]
    fn velocity_rms_adds_in_quadrature_and_ignores_offset() {
        let a = sine(1.0, 25.0, 0.0);
        let b = sine(2.0, 100.0, 0.4);
        let sum: Vec<f64> = a.iter().zip(&b).map(|(x, y)| x + y + 9.81).collect();
        let va = velocity_rms_mm_s(&a, SAMPLE_RATE_HZ);
        let vb = velocity_rms_mm_s(&b, SAMPLE_RATE_HZ);
        let vs = velocity_rms_mm_s(&sum, SAMPLE_RATE_HZ);
        assert!((vs - (va * va + vb * vb).sqrt()).abs() < 1e-9);
        assert!(velocity_rms_mm_s(&[9.81; WINDOW_LEN], SAMPLE_RATE_HZ) < 1e-9);
    }

    #[test]
    fn zone_boundaries() {
        assert_eq!(zone_of(0.0), 0);
        assert_eq!(zone_of(1.39), 0);
        assert_eq!(zone_of(1.4), 1);
        assert_eq!(zone_of(2.79), 1);
        assert_eq!(zone_of(2.8), 2);
        assert_eq!(zone_of(4.49), 2);
        assert_eq!(zone_of(4.5), 3);
        assert_eq!(zone_of(50.0), 3);
    }

    fn zone_counts(t: &Table) -> [usize; 4] {
        let mut counts = [0; 4];
        for z in t.column("zone").expect("zone column") {
            counts[z as usize] += 1;
        }
        counts
    }

    #[test]
    fn tables_have_expected_shape_and_every_zone() {
        let factory = vibration_factory(DEMO_SEED);
        let (cal, hold) = vibration_unit(DEMO_SEED);
        assert_eq!(factory.len(), FACTORY_SENSORS * WINDOWS_PER_FACTORY_SENSOR);
        assert_eq!(cal.len(), CALIBRATION_WINDOWS);
        assert_eq!(hold.len(), HOLDOUT_WINDOWS);
        for t in [&factory, &cal, &hold] {
            assert_eq!(t.header.len(), WINDOW_LEN + 1);
            assert_eq!(t.header[0], "s0");
            assert_eq!(t.header[WINDOW_LEN], "zone");
            let counts = zone_counts(t);
            assert!(counts.iter().all(|&c| c > 0), "zone counts {counts:?}");
        }
        // In the factory data every zone holds a fair share (at least 15 % of windows).
        let counts = zone_counts(&factory);
        assert!(
            counts.iter().all(|&c| c * 100 >= 15 * factory.len()),
            "{counts:?}"
        );
    }

    #[test]
    fn physical_window_hits_its_target_zone_mostly() {
        // Tones off bin centres leak, so the DFT-based velocity differs a little from the
        // closed-form target; most windows should still land in the zone they aimed at.
        let mut rng = Sampler::new(DEMO_SEED, 99);
        let mut hits = 0;
        let n = 400;
        for i in 0..n {
            let w = physical_window(&mut rng, i % 4);
            if zone_of(velocity_rms_mm_s(&w, SAMPLE_RATE_HZ)) as usize == i % 4 {
                hits += 1;
            }
        }
        assert!(hits * 10 >= n * 7, "{hits} of {n} on target");
    }

    #[test]
    fn generators_are_deterministic() {
        assert_eq!(vibration_factory(5), vibration_factory(5));
        assert_eq!(vibration_unit(5), vibration_unit(5));
        assert_ne!(vibration_unit(5), vibration_unit(6));
    }

    #[test]
    fn new_sensor_gain_is_outside_factory_spread() {
        for seed in [DEMO_SEED, 1, 2, 3] {
            let gains = factory_sensor_gains(seed);
            let min = gains.iter().copied().fold(f64::MAX, f64::min);
            assert!(NEW_SENSOR_GAIN < min, "seed {seed}: min factory gain {min}");
        }
    }

    /// Fraction of windows whose zone, judged from the sensor output scaled by `scale`,
    /// matches the label.
    fn rule_accuracy(t: &Table, scale: f64) -> f64 {
        let ok = t
            .rows
            .iter()
            .filter(|r| {
                let v = velocity_rms_mm_s(&r[..WINDOW_LEN], SAMPLE_RATE_HZ) * scale;
                zone_of(v) as f64 == r[WINDOW_LEN]
            })
            .count();
        ok as f64 / t.len() as f64
    }

    /// The scenario does what the demo needs: the ISO rule applied to the recorded windows is
    /// right on the factory data but wrong often on the new unit, and a gain correction picked
    /// on its twelve calibration windows repairs most of that.
    #[test]
    fn calibration_matters_for_the_new_unit() {
        let factory = vibration_factory(DEMO_SEED);
        let (cal, hold) = vibration_unit(DEMO_SEED);
        let factory_acc = rule_accuracy(&factory, 1.0);
        let drifted_acc = rule_accuracy(&hold, 1.0);
        assert!(factory_acc >= 0.9, "factory accuracy {factory_acc}");
        assert!(
            drifted_acc <= factory_acc - 0.2,
            "new unit accuracy {drifted_acc}"
        );
        // Pick the correction factor (0.50..2.00 in steps of 0.01) that best fits calibration.
        let best = (50..=200)
            .map(|s| s as f64 / 100.0)
            .max_by(|&a, &b| rule_accuracy(&cal, a).total_cmp(&rule_accuracy(&cal, b)))
            .expect("non-empty range");
        let corrected_acc = rule_accuracy(&hold, best);
        assert!(
            corrected_acc >= drifted_acc + 0.15,
            "scale {best}: {drifted_acc} -> {corrected_acc}"
        );
    }
}
