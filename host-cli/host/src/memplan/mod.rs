//! "Will it fit?": the memory plan of a model against a chip's RAM and flash.
//!
//! Every figure comes from the core's const memory plan ([`Plan::of`]): the buffers the
//! trainer needs in RAM (its arena) and the factory parameters in flash. To those the report
//! adds what the caller states:
//!
//! - a **reserve**: RAM and flash the rest of the firmware already takes;
//! - the **engine overhead**: the engine's code size, the trainer object's size and its stack
//!   peak. They depend on the target and the compiler and are measured on the QEMU boards
//!   ([`MEASURED_OVERHEADS`]). [`engine_overhead`] gives the measured row of a chip's core, or,
//!   for a core without one, an estimate: the largest figure of each kind over the measured
//!   cores ([`estimated_overhead`]), marked as such. [`plan_report`] takes the overhead as
//!   given, prints its source beside it, and counts nothing in its place when none is given.
//!
//! The advice lists concrete alternatives (freeze a layer, train only its bias, narrower
//! words, no master copies, no momentum, fewer hidden units, another batch size). Each one is
//! a modified model description planned again by the core, never an estimate; its saving is
//! the difference of the two plans.

use std::fmt::Write as _;

use hone_core::model::{LayerDesc, LayerKind, ModelDesc, TrainMode};
use hone_core::num::{QFormat, QScalar, Word};
use hone_core::plan::{Plan, Slot};
use serde::Serialize;

use crate::chips::{Chip, CoreKind, Fpu};

mod advice;
mod compute;
mod measured;
mod render;
mod report;

pub use advice::*;
pub use compute::*;
pub use measured::*;
pub use render::*;
pub use report::*;

/// Why a plan report could not be made.
#[derive(Debug, thiserror::Error)]
pub enum MemplanError {
    /// The core rejected the model description.
    #[error("the model does not plan: {0}")]
    Plan(hone_core::Error),
}

/// Why a size such as `20k` was not understood.
#[derive(Clone, Debug, PartialEq, Eq, thiserror::Error)]
pub enum SizeError {
    /// Nothing was given.
    #[error("empty size: give bytes as a number with an optional unit, such as 20480, 20k or 1M")]
    Empty,
    /// The number part is not a decimal number.
    #[error("size `{input}`: `{number}` is not a decimal number (write 20480, 20k or 1.5M)")]
    NotANumber {
        /// The whole text given.
        input: String,
        /// The part read as the number.
        number: String,
    },
    /// The unit is not one of B, k, KB, KiB, M, MB, MiB.
    #[error(
        "size `{input}`: unknown unit `{unit}`; use B, k/KB/KiB (1024 B) or M/MB/MiB (1024 KiB)"
    )]
    UnknownUnit {
        /// The whole text given.
        input: String,
        /// The unit found.
        unit: String,
    },
    /// The size is not a whole number of bytes (for example `1.3k`).
    #[error("size `{input}` is not a whole number of bytes")]
    Fractional {
        /// The whole text given.
        input: String,
    },
    /// The size does not fit 32 bits.
    #[error("size `{input}` is more than 4 GiB − 1 B, the largest size the planner counts")]
    TooLarge {
        /// The whole text given.
        input: String,
    },
}

/// Parses a memory size: a decimal number with an optional unit. `k`, `K`, `KB` and `KiB`
/// mean 1024 bytes, `M`, `MB` and `MiB` mean 1024 × 1024 bytes (as vendors mean KB and MB for
/// memory sizes); `B` or no unit means bytes. Units are case-insensitive, `_` may group
/// digits, and a fraction is allowed when the result is a whole number of bytes (`0.5k`).
///
/// # Errors
/// A [`SizeError`] naming the text and what is wrong with it.
pub fn parse_size(text: &str) -> Result<u32, SizeError> {
    let input = text.trim();
    if input.is_empty() {
        return Err(SizeError::Empty);
    }
    let split = input
        .find(|c: char| !(c.is_ascii_digit() || c == '.' || c == '_'))
        .unwrap_or(input.len());
    let (number, unit) = input.split_at(split);
    let unit = unit.trim();
    let not_a_number = || SizeError::NotANumber {
        input: input.to_owned(),
        number: number.to_owned(),
    };
    let digits: String = number.chars().filter(|&c| c != '_').collect();
    let (int_part, frac_part) = match digits.split_once('.') {
        Some((i, f)) => (i, f),
        None => (digits.as_str(), ""),
    };
    let all_digits = |s: &str| s.chars().all(|c| c.is_ascii_digit());
    if (int_part.is_empty() && frac_part.is_empty())
        || !all_digits(int_part)
        || !all_digits(frac_part)
        || number.starts_with('_')
        || number.ends_with('_')
    {
        return Err(not_a_number());
    }
    let multiplier: u128 = match unit.to_ascii_lowercase().as_str() {
        "" | "b" => 1,
        "k" | "kb" | "kib" => 1024,
        "m" | "mb" | "mib" => 1024 * 1024,
        _ => {
            return Err(SizeError::UnknownUnit {
                input: input.to_owned(),
                unit: unit.to_owned(),
            })
        }
    };
    let too_large = || SizeError::TooLarge {
        input: input.to_owned(),
    };
    let int_digits = int_part.trim_start_matches('0');
    let frac_digits = frac_part.trim_end_matches('0');
    // 20 integer digits already exceed 2^32 by far; 18 fraction digits keep 10^d in u128.
    // The arithmetic below is checked as well: 20 + 18 digits times a MiB can pass u128.
    if int_digits.len() > 20 {
        return Err(too_large());
    }
    if frac_digits.len() > 18 {
        return Err(SizeError::Fractional {
            input: input.to_owned(),
        });
    }
    let scale = 10u128.pow(frac_digits.len() as u32);
    let int_value: u128 = if int_digits.is_empty() {
        0
    } else {
        int_digits.parse().map_err(|_| not_a_number())?
    };
    let frac_value: u128 = if frac_digits.is_empty() {
        0
    } else {
        frac_digits.parse().map_err(|_| not_a_number())?
    };
    let scaled = int_value
        .checked_mul(scale)
        .and_then(|v| v.checked_add(frac_value))
        .and_then(|v| v.checked_mul(multiplier))
        .ok_or_else(too_large)?;
    if !scaled.is_multiple_of(scale) {
        return Err(SizeError::Fractional {
            input: input.to_owned(),
        });
    }
    u32::try_from(scaled / scale).map_err(|_| too_large())
}

#[cfg(test)]
mod tests;
