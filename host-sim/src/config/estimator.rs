//! `[estimator]`: how the balances are corrected with the measured level,
//! the analysers and the lab, with defaults derived from the plant.

use toml::de::DeValue;

use super::quantity::{Conv, TagMode};
use super::source::{source_of, Source};
use super::table::{list, type_name, Tbl, R};
use crate::plant::{BiasMeter, Estimator, Initial, Inlet, Outlet, OutletKind, Signal, Species};
use crate::units::{self, Kind, UnitError};

const ESTIMATOR_KEYS: &[&str] = &[
    "level_sigma",
    "holdup_drift",
    "concentration_drift",
    "initial_volume_sigma",
    "initial_concentration_sigma",
    "bias_meters",
    "bias_sigma",
    "bias_drift",
    "gate",
    "lab_sigma",
    "lab_max_age",
    "flow_sigma",
    "closure_window",
    "cusum_k",
    "cusum_h",
];

/// Most meters whose bias the estimator tracks.
const MAX_BIAS_METERS: usize = 4;
/// Default `[estimator] holdup_drift`: this fraction of the capacity.
const DEFAULT_HOLDUP_DRIFT_OF_CAPACITY: f64 = 0.001;
/// Default `[estimator] concentration_drift`: this fraction of the largest
/// initial or constant feed concentration, …
const DEFAULT_CONCENTRATION_DRIFT_OF_LARGEST: f64 = 0.01;
/// … but at least this, mol/m³.
const MIN_CONCENTRATION_DRIFT: f64 = 0.01;
/// Default `[estimator] initial_volume_sigma`: this fraction of the initial
/// volume, …
const DEFAULT_INITIAL_VOLUME_SIGMA_OF_VOLUME: f64 = 0.01;
/// … but at least this (1 L), m³.
const MIN_INITIAL_VOLUME_SIGMA: f64 = 0.001;
/// Default `[estimator] initial_concentration_sigma`: this fraction of each
/// initial concentration, …
const DEFAULT_INITIAL_CONCENTRATION_SIGMA_OF_VALUE: f64 = 0.1;
/// … but at least this, mol/m³.
const MIN_INITIAL_CONCENTRATION_SIGMA: f64 = 0.1;
/// Default `[estimator] bias_sigma` (relative).
const DEFAULT_BIAS_SIGMA: f64 = 0.05;
/// Default `[estimator] bias_drift` (relative, per hour).
const DEFAULT_BIAS_DRIFT: f64 = 0.001;
/// Default `[estimator] gate` (χ², 1 degree of freedom: ≈ 99.7 %).
const DEFAULT_GATE: f64 = 9.0;
/// Default `[estimator] lab_sigma` (relative).
const DEFAULT_LAB_SIGMA: f64 = 0.02;
/// Default `[estimator] lab_max_age`: 8 h.
const DEFAULT_LAB_MAX_AGE_MS: u64 = 28_800_000;
/// Default `[estimator] flow_sigma` (relative).
const DEFAULT_FLOW_SIGMA: f64 = 0.01;
/// Default `[estimator] closure_window`: 30 min (or 2 ticks if longer).
const DEFAULT_CLOSURE_WINDOW_MS: u64 = 1_800_000;
/// Shortest closure window, in ticks.
const MIN_CLOSURE_WINDOW_TICKS: u64 = 2;
/// Default `[estimator] cusum_k`, σ.
const DEFAULT_CUSUM_K: f64 = 0.5;
/// Default `[estimator] cusum_h`, σ.
const DEFAULT_CUSUM_H: f64 = 7.0;

/// What `[estimator]` is checked against and its defaults derived from.
pub(super) struct EstimatorContext<'a> {
    pub(super) tick_ms: u64,
    /// Vessel capacity, m³.
    pub(super) capacity: f64,
    /// Whether `[level]` is configured.
    pub(super) has_level: bool,
    pub(super) species: &'a [Species],
    pub(super) inlets: &'a [Inlet],
    pub(super) outlets: &'a [Outlet],
    pub(super) initial: &'a Initial,
}

/// `[estimator]`.
pub(super) fn read(t: &Tbl<'_>, env: &EstimatorContext<'_>) -> R<Estimator> {
    let ctx = t.ctx;
    t.check_keys(ESTIMATOR_KEYS)?;
    if !env.has_level {
        return Err(t.err_here(
            "the estimator corrects the balances with the measured level, but there is no \
             [level] section; add one with the level transmitter's tag \
             ([level] tag = \"...\", unit = \"m\") or remove [estimator]",
        ));
    }
    let level_sigma = t
        .req_quantity(
            "level_sigma",
            Conv::Kind(Kind::Length),
            "the level transmitter's noise, 1σ, e.g. { value = 3, unit = \"mm\" }",
        )?
        .positive(ctx)?
        .si;
    let sigma = |key: &str, kind: Kind, default: f64| -> R<f64> {
        match t.quantity(key, Conv::Kind(kind))? {
            Some(q) => Ok(q.non_negative(ctx)?.si),
            None => Ok(default),
        }
    };
    let holdup_drift = sigma(
        "holdup_drift",
        Kind::Volume,
        DEFAULT_HOLDUP_DRIFT_OF_CAPACITY * env.capacity,
    )?;
    let initial_volume_sigma = sigma(
        "initial_volume_sigma",
        Kind::Volume,
        (DEFAULT_INITIAL_VOLUME_SIGMA_OF_VOLUME * env.initial.volume).max(MIN_INITIAL_VOLUME_SIGMA),
    )?;

    let (concentration_drift, initial_concentration_sigma) = read_concentration_sigmas(t, env)?;

    let bias_meters = read_bias_meters(t, env.inlets, env.outlets)?;
    let bias_sigma = plain_number(t, "bias_sigma", DEFAULT_BIAS_SIGMA, false)?.0;
    let bias_drift = plain_number(t, "bias_drift", DEFAULT_BIAS_DRIFT, false)?.0;
    let gate = plain_number(t, "gate", DEFAULT_GATE, true)?.0;
    let lab_sigma = plain_number(t, "lab_sigma", DEFAULT_LAB_SIGMA, true)?.0;
    let flow_sigma = plain_number(t, "flow_sigma", DEFAULT_FLOW_SIGMA, false)?.0;

    let lab_max_age_ms = match t.duration("lab_max_age")? {
        None => DEFAULT_LAB_MAX_AGE_MS,
        Some((0, at)) => return Err(t.err(at, "lab_max_age", "must be longer than 0 ms")),
        Some((ms, _)) => ms,
    };
    let closure_window_ms = read_closure_window(t, env.tick_ms)?;

    let (cusum_k, cusum_h) = read_cusum(t)?;

    Ok(Estimator {
        level_sigma,
        holdup_drift,
        concentration_drift,
        initial_volume_sigma,
        initial_concentration_sigma,
        bias_meters,
        bias_sigma,
        bias_drift,
        gate,
        lab_sigma,
        lab_max_age_ms,
        flow_sigma,
        closure_window_ms,
        cusum_k,
        cusum_h,
    })
}

/// `concentration_drift` and `initial_concentration_sigma`, mol/m³ per
/// species, with their defaults from what is known before the replay.
fn read_concentration_sigmas(t: &Tbl<'_>, env: &EstimatorContext<'_>) -> R<(Vec<f64>, Vec<f64>)> {
    // Only what is known now: the initial state and the constant feeds.
    let largest = env
        .initial
        .concentrations
        .iter()
        .chain(
            env.inlets
                .iter()
                .flat_map(|i| i.feed.iter())
                .filter_map(|s| match s {
                    Signal::Constant(c) => Some(c),
                    Signal::Tag { .. } => None,
                }),
        )
        .fold(0.0_f64, |a, &c| a.max(c));
    let drift = (DEFAULT_CONCENTRATION_DRIFT_OF_LARGEST * largest).max(MIN_CONCENTRATION_DRIFT);
    let concentration_drift = species_sigmas(
        t,
        "concentration_drift",
        env.species,
        vec![drift; env.species.len()],
    )?;
    let initial_concentration_sigma = species_sigmas(
        t,
        "initial_concentration_sigma",
        env.species,
        env.initial
            .concentrations
            .iter()
            .map(|c| {
                (DEFAULT_INITIAL_CONCENTRATION_SIGMA_OF_VALUE * c)
                    .max(MIN_INITIAL_CONCENTRATION_SIGMA)
            })
            .collect(),
    )?;
    Ok((concentration_drift, initial_concentration_sigma))
}

/// `closure_window`, ms: at least [`MIN_CLOSURE_WINDOW_TICKS`] ticks.
fn read_closure_window(t: &Tbl<'_>, tick_ms: u64) -> R<u64> {
    let shortest_window = tick_ms.saturating_mul(MIN_CLOSURE_WINDOW_TICKS);
    Ok(match t.duration("closure_window")? {
        None => DEFAULT_CLOSURE_WINDOW_MS.max(shortest_window),
        Some((ms, at)) if ms < shortest_window => {
            return Err(t.err(
                at,
                "closure_window",
                format!(
                    "must be at least {MIN_CLOSURE_WINDOW_TICKS} ticks ({shortest_window} ms \
                     with tick {} ms), got {ms} ms",
                    tick_ms
                ),
            ))
        }
        Some((ms, _)) => ms,
    })
}

/// `cusum_k` and `cusum_h` (in σ), with `cusum_h` above `cusum_k`.
fn read_cusum(t: &Tbl<'_>) -> R<(f64, f64)> {
    let (cusum_k, k_at) = plain_number(t, "cusum_k", DEFAULT_CUSUM_K, true)?;
    let (cusum_h, h_at) = plain_number(t, "cusum_h", DEFAULT_CUSUM_H, true)?;
    if cusum_h <= cusum_k {
        // Name the key that is written (cusum_h if both are).
        return Err(match (h_at, k_at) {
            (Some(at), Some(_)) => t.err(
                at,
                "cusum_h",
                format!("must be greater than cusum_k ({cusum_k}), got {cusum_h}"),
            ),
            (Some(at), None) => t.err(
                at,
                "cusum_h",
                format!("must be greater than cusum_k (default {DEFAULT_CUSUM_K}), got {cusum_h}"),
            ),
            (None, Some(at)) => t.err(
                at,
                "cusum_k",
                format!("must be less than cusum_h (default {DEFAULT_CUSUM_H}), got {cusum_k}"),
            ),
            // The defaults are in order; kept for completeness.
            (None, None) => t.err_here(format!(
                "cusum_h ({cusum_h}) must be greater than cusum_k ({cusum_k})"
            )),
        });
    }
    Ok((cusum_k, cusum_h))
}

/// An optional plain number (relative, or in σ): positive if `positive`,
/// else not negative; `default` when absent. With the offset of the value
/// if given.
fn plain_number(t: &Tbl<'_>, key: &str, default: f64, positive: bool) -> R<(f64, Option<usize>)> {
    match t.number(key)? {
        None => Ok((default, None)),
        Some((x, at)) if positive && x <= 0.0 => {
            Err(t.err(at, key, format!("must be positive, got {x}")))
        }
        Some((x, at)) if x < 0.0 => Err(t.err(at, key, format!("must not be negative, got {x}"))),
        Some((x, at)) => Ok((x, Some(at))),
    }
}

/// A concentration σ of `[estimator]`: one `{ value, unit }` for every
/// species, or a table of species = `{ value, unit }` where species not
/// listed keep their `default`. Not negative.
fn species_sigmas(t: &Tbl<'_>, key: &str, species: &[Species], default: Vec<f64>) -> R<Vec<f64>> {
    let Some(v) = t.get(key) else {
        return Ok(default);
    };
    let c = t.child(
        key,
        v,
        "a concentration { value = ..., unit = \"mol/m3\" } or a table of species = { value, unit }",
    )?;
    // A quantity has a plain `value`, `unit` (or a stray `tag`); a species
    // entry is always a table, even for a species named "value".
    let one_for_all = c.entries().iter().any(|(k, v)| {
        matches!(k.get_ref().as_ref(), "value" | "unit" | "tag")
            && !matches!(v.get_ref(), DeValue::Table(_))
    });
    let constant = |q: &Tbl<'_>, conv: Conv| -> R<f64> {
        match source_of(q, conv, TagMode::Never)? {
            Source::Const(q) => Ok(q.non_negative(t.ctx)?.si),
            // `TagMode::Never` refuses a tag.
            Source::Tag(tag) => Err(q.err(tag.at, "tag", "must be a constant")),
        }
    };
    if one_for_all {
        // A mass-based unit converts with each species' molar mass: not
        // one value for all species.
        if let Some((unit, at)) = c.string("unit")? {
            if let Err(UnitError::NeedsMolarMass { .. }) = units::concentration_to_si(unit, None) {
                let amount: Vec<&str> = units::valid_units(Kind::Concentration)
                    .iter()
                    .copied()
                    .filter(|u| units::concentration_to_si(u, None).is_ok())
                    .collect();
                let example = species.first().map_or("A", |s| s.name.as_str());
                return Err(c.err(
                    at,
                    "unit",
                    format!(
                        "mass-based unit \"{unit}\" cannot be given for all species at once; \
                         use one of {} or give it per species: \
                         {key} = {{ {example} = {{ value = ..., unit = \"{unit}\" }} }}",
                        list(&amount)
                    ),
                ));
            }
        }
        let x = constant(&c, Conv::Concentration(None))?;
        return Ok(vec![x; species.len()]);
    }
    let mut out = default;
    for (index, name, _, value) in c.species_map(species)? {
        let molar_mass = species.get(index).and_then(|s| s.molar_mass);
        let q = c.child(name, value, "a concentration { value, unit }")?;
        let x = constant(&q, Conv::Concentration(molar_mass))?;
        if let Some(slot) = out.get_mut(index) {
            *slot = x;
        }
    }
    Ok(out)
}

/// `[estimator] bias_meters`: names of inlets or measured outlets whose
/// flow is read from the log.
fn read_bias_meters(t: &Tbl<'_>, inlets: &[Inlet], outlets: &[Outlet]) -> R<Vec<BiasMeter>> {
    let key = "bias_meters";
    let Some(v) = t.get(key) else {
        return Ok(Vec::new());
    };
    let DeValue::Array(items) = v.get_ref() else {
        return Err(t.err(
            v.span().start,
            key,
            format!(
                "expected an array of inlet or measured-outlet names, e.g. [\"{}\"], got {}",
                inlets.first().map_or("...", |i| i.name.as_str()),
                type_name(v.get_ref())
            ),
        ));
    };
    if items.len() > MAX_BIAS_METERS {
        return Err(t.err(
            v.span().start,
            key,
            format!(
                "too many bias meters: {}, at most {MAX_BIAS_METERS}",
                items.len()
            ),
        ));
    }
    let names_of = |names: Vec<&str>| {
        if names.is_empty() {
            "none".to_string()
        } else {
            list(&names)
        }
    };
    let valid = || {
        let measured: Vec<&str> = outlets
            .iter()
            .filter(|o| matches!(o.kind, OutletKind::Measured(_)))
            .map(|o| o.name.as_str())
            .collect();
        format!(
            "inlets: {}; measured outlets: {}",
            names_of(inlets.iter().map(|i| i.name.as_str()).collect()),
            names_of(measured)
        )
    };
    let mut out: Vec<BiasMeter> = Vec::new();
    for (i, item) in items.iter().enumerate() {
        let item_key = format!("{key}[{i}]");
        let at = item.span().start;
        let bad = |m: String| t.err(at, &item_key, m);
        let DeValue::String(name) = item.get_ref() else {
            return Err(bad(format!(
                "expected an inlet or measured-outlet name (a string), got {}",
                type_name(item.get_ref())
            )));
        };
        let name: &str = name.as_ref();
        let inlet = inlets.iter().position(|x| x.name == name);
        let outlet = outlets.iter().position(|x| x.name == name);
        let (is_outlet, index, flow) = match (inlet, outlet) {
            (Some(_), Some(_)) => {
                return Err(bad(format!(
                    "\"{name}\" names both an inlet and an outlet; rename one of them \
                     to estimate its meter's bias"
                )))
            }
            (None, None) => {
                return Err(bad(format!(
                    "unknown inlet or measured outlet \"{name}\"; {}",
                    valid()
                )))
            }
            (Some(index), None) => (false, index, inlets.get(index).map(|x| &x.flow)),
            (None, Some(index)) => match outlets.get(index).map(|x| &x.kind) {
                Some(OutletKind::Measured(flow)) => (true, index, Some(flow)),
                Some(OutletKind::Orifice { .. }) | Some(OutletKind::Weir { .. }) | None => {
                    return Err(bad(format!(
                        "outlet \"{name}\" is not metered (its flow is computed from the \
                         level), so it has no meter bias; {}",
                        valid()
                    )))
                }
            },
        };
        if !matches!(flow, Some(Signal::Tag { .. })) {
            let what = if is_outlet { "outlet" } else { "inlet" };
            return Err(bad(format!(
                "{what} \"{name}\" has a constant flow, not a meter read from the log; \
                 only a flow given as {{ tag, unit }} can have a bias"
            )));
        }
        if out
            .iter()
            .any(|m| m.outlet == is_outlet && m.index == index)
        {
            return Err(bad(format!("\"{name}\" is listed twice")));
        }
        out.push(BiasMeter {
            name: name.to_string(),
            outlet: is_outlet,
            index,
        });
    }
    Ok(out)
}
