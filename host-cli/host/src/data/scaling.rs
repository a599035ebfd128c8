//! Per-channel scaling of the inputs: fitting it on the factory data, applying it, and the split
//! into training and holdout rows.

use super::*;

/// A channel whose values do not vary in the data, so its standard deviation is zero. It gets
/// gain 1 (the scaled values are then all zero); the model learns nothing from it.
#[derive(Clone, Debug, PartialEq)]
pub struct ConstantChannel {
    /// Channel index.
    pub channel: usize,
    /// The channel's columns: one name, or `first … last` for a window.
    pub columns: String,
    /// Its value (the mean; all values are within about 1e-9 of it, relative).
    pub value: f64,
}

impl fmt::Display for ConstantChannel {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(
            f,
            "channel {} ({}) is constant at {}; it was given gain 1 and carries no information, \
             so check the sensor or drop the column",
            self.channel, self.columns, self.value
        )
    }
}

/// Input scaling fitted on a dataset: one [`ChannelScale`] per input channel, and the
/// channels that could not be standardized.
///
/// Standardizing means `offset = mean` and `gain = 1 / std` (population standard deviation,
/// dividing by the number of values), so the scaled training data of each channel have mean
/// 0 and standard deviation 1, and fit an input format such as Q3.12 (range ±8) with room
/// for outliers up to 8 standard deviations. Statistics are computed in `f64`; the stored
/// offset and gain are `f32`, as the device uses them.
#[derive(Clone, Debug, PartialEq)]
pub struct Scaling {
    /// One entry per channel.
    pub scales: Vec<ChannelScale>,
    /// Channels with zero spread (see [`ConstantChannel`]).
    pub constant: Vec<ConstantChannel>,
}

impl Scaling {
    /// Standardizes each feature column on its own: one channel per feature (tabular data,
    /// `channels = features, length = 1`).
    ///
    /// # Errors
    /// As [`Scaling::fit_per_channel`].
    pub fn fit_standardize(data: &Dataset) -> Result<Scaling, DataError> {
        fit(data, data.features.len().max(1))
    }

    /// Standardizes per channel for inputs with several samples per channel. The features are
    /// read channel-major (`[c][t]`): channel `c` is the contiguous run of
    /// `len = features / channels` columns starting at column `c · len`, and all of its values
    /// over all rows share one offset and one gain. For a single-channel window of 64 samples
    /// (`s0 … s63`), `channels = 1` gives one offset and gain for the whole window, which keeps
    /// the relative amplitude of the samples intact.
    ///
    /// # Errors
    /// [`DataError::Request`] if `channels` is zero or does not divide the feature count;
    /// [`DataError::Unscalable`] if a channel's mean or spread cannot be stored as the
    /// device's `f32` offset and gain (values near the ends of the `f64` range).
    pub fn fit_per_channel(data: &Dataset, channels: usize) -> Result<Scaling, DataError> {
        check_channels(data, channels)?;
        fit(data, channels)
    }

    /// Applies this scaling to `data` in place; see [`apply`].
    ///
    /// # Errors
    /// As [`apply`].
    pub fn apply(&self, data: &mut Dataset) -> Result<(), DataError> {
        apply(&self.scales, data)
    }
}

pub(super) fn check_channels(data: &Dataset, channels: usize) -> Result<(), DataError> {
    let n = data.features.len();
    if channels == 0 || !n.is_multiple_of(channels) {
        return Err(DataError::Request {
            path: data.source.clone(),
            message: format!(
                "{n} feature columns cannot be split into {channels} channels of equal length; \
                 the model's input must have channels × length = {n}"
            ),
        });
    }
    Ok(())
}

/// Mean and population standard deviation of the values in columns `cols` of every row,
/// computed so that no intermediate overflows: the values are first multiplied by a power of
/// two that brings the largest magnitude below 1, which is exact, so the result equals the
/// direct computation (same order of summation) whenever that one does not overflow. `None`
/// for no values.
pub(super) fn mean_std(rows: &Rows, cols: &std::ops::Range<usize>) -> Option<(f64, f64)> {
    let count = rows.len() * cols.len();
    if count == 0 {
        return None;
    }
    let max = rows
        .iter()
        .flat_map(|r| r[cols.clone()].iter())
        .fold(0f64, |m, v| m.max(v.abs()));
    // 2^exp > max, so sums of `count` scaled values, or of their squared deviations, stay far
    // from overflow. The exponent is bounded so the factor itself stays a normal number.
    let exp = if max > 0.0 {
        (max.log2().floor() as i32 + 1).clamp(-1000, 1000)
    } else {
        0
    };
    let down = 2f64.powi(-exp);
    let n = count as f64;
    let mean_s = rows
        .iter()
        .map(|r| r[cols.clone()].iter().map(|v| v * down).sum::<f64>())
        .sum::<f64>()
        / n;
    let var_s = rows
        .iter()
        .map(|r| {
            r[cols.clone()]
                .iter()
                .map(|v| (v * down - mean_s) * (v * down - mean_s))
                .sum::<f64>()
        })
        .sum::<f64>()
        / n;
    let up = 2f64.powi(exp);
    Some((mean_s * up, var_s.sqrt() * up))
}

/// The columns of channel `c` as one label: one name, or `first … last` for a window.
pub(super) fn channel_columns(data: &Dataset, cols: &std::ops::Range<usize>) -> String {
    if cols.len() == 1 {
        data.features[cols.start].clone()
    } else {
        format!(
            "{} … {}",
            data.features[cols.start],
            data.features[cols.end - 1]
        )
    }
}

/// Fits `channels` channels; the caller has checked that `channels` divides the features.
pub(super) fn fit(data: &Dataset, channels: usize) -> Result<Scaling, DataError> {
    let len = data.features.len() / channels;
    let mut scales = Vec::with_capacity(channels);
    let mut constant = Vec::new();
    for c in 0..channels {
        let cols = c * len..(c + 1) * len;
        let (mean, std) = mean_std(&data.x, &cols).unwrap_or((0.0, 0.0));
        let offset = mean as f32;
        let unscalable = |why: &str| DataError::Unscalable {
            path: data.source.clone(),
            channel: c,
            columns: channel_columns(data, &cols),
            mean,
            std,
            why: why.to_owned(),
        };
        if !offset.is_finite() {
            return Err(unscalable(
                "the mean is beyond the f32 range of the stored offset",
            ));
        }
        if std <= 1e-9 * mean.abs().max(1.0) {
            constant.push(ConstantChannel {
                channel: c,
                columns: channel_columns(data, &cols),
                value: mean,
            });
            scales.push(ChannelScale { offset, gain: 1.0 });
            continue;
        }
        let gain = (1.0 / std) as f32;
        if !gain.is_normal() {
            return Err(unscalable(
                "1 / standard deviation is beyond the f32 range of the stored gain",
            ));
        }
        scales.push(ChannelScale { offset, gain });
    }
    Ok(Scaling { scales, constant })
}

/// Applies per-channel scaling in place: each feature value `v` of channel `c` becomes
/// `(v − offset_c) · gain_c`, computed in `f64` from the `f32` offset and gain, exactly as
/// stored for the device. With `n` scales and `F` features, each channel is a contiguous run of
/// `F / n` columns (channel-major), as in [`Scaling::fit_per_channel`].
///
/// No scales leave the data as they are.
///
/// # Errors
/// [`DataError::Request`] if the number of scales does not divide the feature count.
pub fn apply(scales: &[ChannelScale], data: &mut Dataset) -> Result<(), DataError> {
    // No scales: the inputs are used as they are (`standardize = false`).
    if scales.is_empty() {
        return Ok(());
    }
    check_channels(data, scales.len())?;
    let len = data.features.len() / scales.len();
    for r in 0..data.x.len() {
        let row = &mut data.x[r];
        for (c, s) in scales.iter().enumerate() {
            let (offset, gain) = (f64::from(s.offset), f64::from(s.gain));
            for v in &mut row[c * len..(c + 1) * len] {
                *v = (*v - offset) * gain;
            }
        }
    }
    Ok(())
}

/// Splits a dataset into a training part and a hold-out part, deterministically for a seed.
///
/// Rows are grouped into strata: one per class for classification (so each class keeps its
/// share in both parts), a single one for regression. From each stratum of `n` rows,
/// `round(n · holdout_fraction)` rows go to the hold-out, but never all of them: every stratum
/// keeps at least one row for training. Which rows go is decided by a Fisher–Yates shuffle of
/// the stratum with the core's [`Rng`] seeded with `seed`. Both parts keep the file order of
/// their rows.
///
/// # Errors
/// [`DataError::Request`] if `holdout_fraction` is not in `[0, 1)`.
pub fn split(
    data: &Dataset,
    holdout_fraction: f64,
    seed: u64,
) -> Result<(Dataset, Dataset), DataError> {
    if !(0.0..1.0).contains(&holdout_fraction) {
        return Err(DataError::Request {
            path: data.source.clone(),
            message: format!(
                "hold-out fraction {holdout_fraction} is outside [0, 1); use for example 0.2 \
                 to keep a fifth of the rows for evaluation"
            ),
        });
    }
    let strata: Vec<Vec<usize>> = match &data.target {
        Targets::Values { .. } => vec![(0..data.len()).collect()],
        Targets::Classes { names, labels } => {
            let mut s = vec![Vec::new(); names.len()];
            for (row, &l) in labels.iter().enumerate() {
                s[l as usize].push(row);
            }
            s
        }
    };
    let mut rng = Rng::new(seed);
    let mut held = vec![false; data.len()];
    for mut rows in strata {
        let n = rows.len();
        if n == 0 {
            continue;
        }
        let k = ((n as f64 * holdout_fraction).round() as usize).min(n - 1);
        // Fisher–Yates from the back: after the loop, the last `k` positions hold a uniformly
        // chosen subset.
        for i in (n - k..n).rev() {
            let j = rng.below(i as u64 + 1) as usize;
            rows.swap(i, j);
        }
        for &r in &rows[n - k..] {
            held[r] = true;
        }
    }
    let train: Vec<usize> = (0..data.len()).filter(|&r| !held[r]).collect();
    let hold: Vec<usize> = (0..data.len()).filter(|&r| held[r]).collect();
    Ok((data.select(&train), data.select(&hold)))
}
