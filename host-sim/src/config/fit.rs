//! `[fit]`: how `holdup fit` weighs the data and checks the result (the
//! unknowns themselves are marked where they are written, see
//! [`super::unknowns`]).

use super::table::{Tbl, R};
use crate::plant::FitOptions;

const FIT_KEYS: &[&str] = &["lab_sigma", "hold_out", "max_evaluations"];

/// Default relative 1σ of a lab analysis when neither `[fit]` nor
/// `[estimator]` gives one.
pub const DEFAULT_LAB_SIGMA: f64 = 0.02;
/// Default share of the log's span, at its end, held out of the fit.
pub const DEFAULT_HOLD_OUT: f64 = 0.25;
/// Default cap on model evaluations.
pub const DEFAULT_MAX_EVALUATIONS: u32 = 400;

/// `[fit]`; `estimator_lab_sigma` is `[estimator] lab_sigma`, if given.
pub(super) fn read(t: Option<&Tbl<'_>>, estimator_lab_sigma: Option<f64>) -> R<FitOptions> {
    let mut o = FitOptions {
        lab_sigma: estimator_lab_sigma.unwrap_or(DEFAULT_LAB_SIGMA),
        hold_out: DEFAULT_HOLD_OUT,
        max_evaluations: DEFAULT_MAX_EVALUATIONS,
    };
    let Some(t) = t else {
        return Ok(o);
    };
    t.check_keys(FIT_KEYS)?;
    if let Some((x, at)) = t.number("lab_sigma")? {
        if !(x > 0.0 && x < 1.0) {
            return Err(t.err(
                at,
                "lab_sigma",
                format!(
                    "the relative 1σ of a lab analysis, above 0 and below 1 (0.02 = 2 %), got {x}"
                ),
            ));
        }
        o.lab_sigma = x;
    }
    if let Some((x, at)) = t.number("hold_out")? {
        if !(0.0..=0.75).contains(&x) {
            return Err(t.err(
                at,
                "hold_out",
                format!(
                    "the share of the log's span, at its end, kept out of the fit to check \
                     its prediction: 0 (none) to 0.75, got {x}"
                ),
            ));
        }
        o.hold_out = x;
    }
    if let Some((x, at)) = t.number("max_evaluations")? {
        if !(10.0..=100_000.0).contains(&x) || x.fract() != 0.0 {
            return Err(t.err(
                at,
                "max_evaluations",
                format!("a whole number from 10 to 100000, got {x}"),
            ));
        }
        o.max_evaluations = x as u32;
    }
    Ok(o)
}
