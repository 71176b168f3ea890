//! `[[reaction]]`: stoichiometry and rate laws (forward and optional
//! reverse), with rate constants in any unit of the right total order.

use super::quantity::{Conv, Qty};
use super::table::{array_section, list, number_of, unique_name, Tbl, R};
use super::ConfigError;
use crate::plant::{limits, Kinetics, Reaction, Species};
use crate::units::{self, Kind};

const REACTION_KEYS: &[&str] = &[
    "name",
    "stoichiometry",
    "orders",
    "rate_constant",
    "activation_energy",
    "reference_temperature",
    "reverse",
];
const REVERSE_KEYS: &[&str] = &["rate_constant", "activation_energy", "orders"];
const RATE_CONSTANT_KEYS: &[&str] = &["value", "unit"];

/// Default reference temperature when no activation energy is given, K.
const DEFAULT_REFERENCE_TEMPERATURE: f64 = 298.15;
/// Largest reaction order the kernel supports.
const MAX_ORDER: f64 = 4.0;

/// Every `[[reaction]]` (there may be none), at most [`limits::REACTIONS`].
pub(super) fn read_all(root: &Tbl<'_>, species: &[Species]) -> R<Vec<Reaction>> {
    let mut reactions = Vec::new();
    let mut seen = Vec::new();
    for t in array_section(
        root,
        "reaction",
        limits::REACTIONS,
        "plant::limits::REACTIONS",
    )? {
        reactions.push(read_reaction(&t, species, &mut seen)?);
    }
    Ok(reactions)
}

/// A species-keyed table of numbers (stoichiometry, orders) as a vector by
/// species index; `check` refuses a value with a message.
fn species_numbers(
    t: &Tbl<'_>,
    species: &[Species],
    check: impl Fn(f64) -> Option<&'static str>,
) -> R<Vec<f64>> {
    let mut out = vec![0.0; species.len()];
    for (index, name, _, value) in t.species_map(species)? {
        let x = number_of(value.get_ref()).map_err(|m| t.err(value.span().start, name, m))?;
        if let Some(m) = check(x) {
            return Err(t.err(value.span().start, name, format!("{m}, got {x}")));
        }
        if let Some(slot) = out.get_mut(index) {
            *slot = x;
        }
    }
    Ok(out)
}

/// One direction of a rate law (keys `orders`, `rate_constant`,
/// `activation_energy` of `t`).
fn read_kinetics(t: &Tbl<'_>, species: &[Species]) -> R<(Kinetics, Option<Qty>)> {
    let order_check = |x: f64| {
        if (0.0..=MAX_ORDER).contains(&x) {
            None
        } else {
            Some("reaction order must be between 0 and 4")
        }
    };
    let orders = match t.opt_child("orders", "a table of species = order")? {
        Some(o) => species_numbers(&o, species, order_check)?,
        None => vec![0.0; species.len()],
    };
    let total: f64 = orders.iter().sum();
    let v = t.get("rate_constant").ok_or_else(|| {
        t.missing(
            "rate_constant",
            &format!("{{ value = ..., unit = \"...\" }} with a unit of total order {total}"),
        )
    })?;
    let k = t.child(
        "rate_constant",
        v,
        "a quantity { value = ..., unit = \"...\" }",
    )?;
    k.check_keys(RATE_CONSTANT_KEYS)?;
    let (unit, unit_at) = k.string("unit")?.ok_or_else(|| {
        k.missing(
            "unit",
            &format!(
                "valid for total order {total}: {}",
                list(&units::valid_rate_constant_units(total))
            ),
        )
    })?;
    let scale = units::rate_constant_to_si(unit, total)
        .map_err(|e| k.err(unit_at, "unit", e.to_string()))?;
    let (raw, raw_at) = k.number("value")?.ok_or_else(|| k.missing("value", ""))?;
    let rate_constant = raw * scale;
    if !(rate_constant >= 0.0 && rate_constant.is_finite()) {
        return Err(ctx_err(
            t,
            raw_at,
            k.own_name(),
            format!("must not be negative, got {raw} {unit}"),
        ));
    }
    let ea = match t.quantity("activation_energy", Conv::Kind(Kind::MolarEnergy))? {
        Some(q) => Some(q.non_negative(t.ctx)?),
        None => None,
    };
    Ok((
        Kinetics {
            rate_constant,
            activation_energy: ea.as_ref().map_or(0.0, |q| q.si),
            orders,
        },
        ea,
    ))
}

fn ctx_err(t: &Tbl<'_>, at: usize, key: String, message: String) -> ConfigError {
    t.ctx.error(Some(at), key, message)
}

/// One `[[reaction]]`.
fn read_reaction(t: &Tbl<'_>, species: &[Species], seen: &mut Vec<(String, usize)>) -> R<Reaction> {
    t.check_keys(REACTION_KEYS)?;
    let (name, at) = t.name_string("name", "a name for reports")?;
    unique_name(t, name, at, seen, "reaction")?;
    let st = t
        .opt_child("stoichiometry", "a table of species = coefficient")?
        .ok_or_else(|| t.missing("stoichiometry", "e.g. { A = -1, B = 1 }"))?;
    let stoichiometry = species_numbers(&st, species, |_| None)?;
    if !stoichiometry.iter().any(|&nu| nu < 0.0) {
        return Err(t.err(
            st.at,
            "stoichiometry",
            "needs at least one reactant (a negative coefficient)",
        ));
    }
    let (forward, forward_ea) = read_kinetics(t, species)?;
    let reverse = match t.opt_child(
        "reverse",
        "a table { rate_constant, activation_energy, orders }",
    )? {
        None => None,
        Some(r) => {
            r.check_keys(REVERSE_KEYS)?;
            if !stoichiometry.iter().any(|&nu| nu > 0.0) {
                return Err(t.err(
                    r.at,
                    "reverse",
                    "a reverse rate law needs a product (a positive coefficient in stoichiometry)",
                ));
            }
            Some(read_kinetics(&r, species)?)
        }
    };
    let needs_reference = forward.activation_energy > 0.0
        || reverse
            .as_ref()
            .is_some_and(|(k, _)| k.activation_energy > 0.0);
    let reference_temperature = match t
        .quantity("reference_temperature", Conv::Kind(Kind::Temperature))?
    {
        Some(q) => q.kelvin(t.ctx)?.si,
        None if needs_reference => {
            let at = forward_ea
                .as_ref()
                .filter(|q| q.si > 0.0)
                .map_or(t.at, |q| q.at);
            return Err(t.err(
                at,
                "reference_temperature",
                "missing; required when an activation energy is above 0, e.g. { value = 25, unit = \"degC\" }",
            ));
        }
        None => DEFAULT_REFERENCE_TEMPERATURE,
    };
    Ok(Reaction {
        name: name.to_string(),
        stoichiometry,
        forward,
        reverse: reverse.map(|(k, _)| k),
        reference_temperature,
    })
}
