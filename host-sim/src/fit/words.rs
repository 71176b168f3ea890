//! What the statistics of a fit mean, in plain words: parameters the data
//! cannot separate, directions the data do not see, values at a bound,
//! a search that did not converge, intervals wider than the value.

use super::solve::FLAT_COMPONENT;
use super::Fit;
use crate::config::UnknownKind;

/// Correlation above which two parameters are reported as inseparable.
pub const CORRELATION_LIMIT: f64 = 0.95;

/// Temperature span (K) below which a warning about an activation energy
/// names it: over a few kelvin the Arrhenius factor is nearly linear and
/// trades against the rate constant.
const NARROW_TEMPERATURE_K: f64 = 5.0;

/// The warnings of `fit`.
pub fn warnings(fit: &Fit) -> Vec<String> {
    let mut out = Vec::new();
    let ps = &fit.params;
    let st = &fit.stats;
    if !fit.solution.converged {
        out.push(format!(
            "the search did not converge ({}): the values are the best found, not an optimum; \
             check the guesses and bounds, or raise [fit] max_evaluations",
            fit.solution.termination
        ));
    }
    let span_k = fit.data.temperature_range.map(|(lo, hi)| hi - lo);
    for a in 0..ps.len() {
        for b in a + 1..ps.len() {
            let r = st.correlation[a][b];
            if r.is_nan() || r.abs() <= CORRELATION_LIMIT {
                continue;
            }
            let (pa, pb) = (&ps[a], &ps[b]);
            let why = match (&pa.kind, &pb.kind, span_k) {
                (
                    UnknownKind::RateConstant { index: i, .. },
                    UnknownKind::ActivationEnergy { index: j, .. },
                    Some(span),
                )
                | (
                    UnknownKind::ActivationEnergy { index: i, .. },
                    UnknownKind::RateConstant { index: j, .. },
                    Some(span),
                ) if i == j => format!(
                    "the temperature varied by only {span:.1} K over the log, so a faster \
                     reaction and a stronger temperature dependence look alike; hold the \
                     activation energy at a literature value, or fit on a log that spans a \
                     wider temperature range"
                ),
                _ => "they move the predicted concentrations in nearly the same way; fix one \
                      of them at a known value, or add data where they act differently"
                    .to_string(),
            };
            out.push(format!(
                "{} and {} cannot be separated (correlation {r:+.3}): {why}",
                pa.name, pb.name
            ));
        }
    }
    for (v, rel) in &st.flat {
        let involved: Vec<&str> = v
            .iter()
            .zip(ps)
            .filter(|(x, _)| x.abs() > FLAT_COMPONENT)
            .map(|(_, p)| p.name.as_str())
            .collect();
        let what = if involved.len() == 1 {
            format!(
                "the data do not depend on {} (for example no lab result of a species it acts \
                 on, or a meter that never ran)",
                involved[0]
            )
        } else {
            format!(
                "the data do not constrain a combination of {}: only its other directions \
                 are determined",
                involved.join(", ")
            )
        };
        out.push(format!(
            "no curvature in one direction (relative eigenvalue {rel:.1e}): {what}; its \
             standard error is not given"
        ));
    }
    for (i, p) in ps.iter().enumerate() {
        let v = fit.solution.theta[i];
        if let Some(b) = p.at_bound(v) {
            out.push(format!(
                "{} ended at its bound {b}: the best value may lie beyond it; widen the bound \
                 if it is not physical, or check the model",
                p.name
            ));
        }
        let se = st.se[i];
        if se.is_finite() && se > v.abs() && v != 0.0 {
            out.push(format!(
                "{} is poorly determined: its standard error ({se:.3e}) exceeds its value",
                p.name
            ));
        }
        if matches!(p.kind, UnknownKind::ActivationEnergy { .. })
            && span_k.is_some_and(|s| s < NARROW_TEMPERATURE_K)
            && !out
                .iter()
                .any(|w| w.contains(&p.name) && w.contains("varied by only"))
        {
            out.push(format!(
                "{}: the temperature varied by only {:.1} K, too little to measure an \
                 activation energy well",
                p.name,
                span_k.unwrap_or(0.0)
            ));
        }
    }
    if st.s2 > 4.0 {
        out.push(format!(
            "the residuals are {:.1} times larger than the lab σ says (χ²/(m − p) = {:.1}): \
             the model misses something the data show, or lab_sigma is too small; the \
             intervals are widened by that factor",
            st.s2.sqrt(),
            st.s2
        ));
    }
    if fit.data.labs_outside > 0 {
        out.push(format!(
            "{} lab row(s) lie outside the log's span and were not used",
            fit.data.labs_outside
        ));
    }
    out
}
