//! Summaries of a distribution of per-unit figures.

use serde::Serialize;

/// The `p`-quantile (0 ≤ p ≤ 1) of `sorted` (ascending, finite values only), by linear
/// interpolation between order statistics: definition 7 of Hyndman and Fan, "Sample quantiles
/// in statistical packages", The American Statistician 50(4), 1996 (the default of R and of
/// NumPy). NaN for an empty slice.
pub fn quantile(sorted: &[f64], p: f64) -> f64 {
    match sorted.len() {
        0 => f64::NAN,
        1 => sorted[0],
        n => {
            let h = (n - 1) as f64 * p.clamp(0.0, 1.0);
            let lo = h.floor() as usize;
            let hi = (lo + 1).min(n - 1);
            sorted[lo] + (h - lo as f64) * (sorted[hi] - sorted[lo])
        }
    }
}

/// Median, 90th and 99th percentile and mean of a per-unit figure.
#[derive(Clone, Copy, Debug, Default, PartialEq, Serialize)]
pub struct Spread {
    /// Median.
    pub median: f64,
    /// 90th percentile.
    pub p90: f64,
    /// 99th percentile.
    pub p99: f64,
    /// Mean.
    pub mean: f64,
    /// Units whose figure is not a finite number (their training diverged); left out of the
    /// other fields, and counted as outside the spec.
    pub not_finite: usize,
}

impl Spread {
    /// The summary of `values`.
    pub fn of(values: &[f64]) -> Spread {
        let mut v: Vec<f64> = values.iter().copied().filter(|x| x.is_finite()).collect();
        v.sort_by(f64::total_cmp);
        let mean = if v.is_empty() {
            f64::NAN
        } else {
            v.iter().sum::<f64>() / v.len() as f64
        };
        Spread {
            median: quantile(&v, 0.5),
            p90: quantile(&v, 0.9),
            p99: quantile(&v, 0.99),
            mean,
            not_finite: values.len() - v.len(),
        }
    }
}

/// The share of `values` at most `limit`, in %; a value that is not finite is outside.
pub fn share_within(values: &[f64], limit: f64) -> f64 {
    if values.is_empty() {
        return f64::NAN;
    }
    let n = values
        .iter()
        .filter(|&&v| v.is_finite() && v <= limit)
        .count();
    100.0 * n as f64 / values.len() as f64
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn quantiles_interpolate_between_order_statistics() {
        // R's quantile(1:5, c(0, .5, .9, 1)) gives 1, 3, 4.6, 5 (type 7, from memory; the
        // definition gives 1 + 0.9·4 = 4.6 directly).
        let v = [1.0, 2.0, 3.0, 4.0, 5.0];
        assert_eq!(quantile(&v, 0.0), 1.0);
        assert_eq!(quantile(&v, 0.5), 3.0);
        assert!((quantile(&v, 0.9) - 4.6).abs() < 1e-12);
        assert_eq!(quantile(&v, 1.0), 5.0);
        assert_eq!(quantile(&[7.0], 0.3), 7.0);
        assert!(quantile(&[], 0.5).is_nan());
    }

    #[test]
    fn spread_leaves_out_and_counts_values_that_are_not_finite() {
        let s = Spread::of(&[3.0, f64::NAN, 1.0, 2.0, f64::INFINITY]);
        assert_eq!((s.median, s.mean, s.not_finite), (2.0, 2.0, 2));
        assert_eq!(share_within(&[0.1, 0.2, f64::NAN, 0.3], 0.2), 50.0);
        assert_eq!(share_within(&[0.1, 0.2, 0.3, 0.4], 0.25), 50.0);
    }
}
