//! A stream's `flow`: a volumetric flow, or a mass flow with the density
//! that turns it into one (`density` a constant or a tag of the log).
//!
//! The balances are volumetric (holdup in m³), so a mass flow `ṁ` enters
//! as `ṁ / ρ`. With a constant density that is a constant factor on the
//! tag; with a density tag it is read at every tick, and a density that is
//! not a positive number is no reading (the sensor holds the last good
//! flow).
//!
//! A metered flow may carry the meter's relative `bias` (0.03: the meter
//! reads 3 % high), known from a calibration or fitted by `holdup fit`:
//! the flow is then the reading divided by `1 + bias`.

use toml::de::DeValue;

use super::quantity::{Conv, TagMode};
use super::source::{non_negative_source, source_of, source_with, Source, TagUses};
use super::table::{list, Tbl, R};
use crate::plant::{DensityTag, Signal};
use crate::units::{self, Kind, ToSi};

/// Largest meter bias accepted, relative (either sign).
const MAX_BIAS: f64 = 0.5;

/// The flow at `key` of a stream table, `None` if absent.
pub(super) fn flow_signal(t: &Tbl<'_>, key: &str, tags: &mut TagUses) -> R<Option<Signal>> {
    let Some(signal) = unbiased(t, key, tags)? else {
        return Ok(None);
    };
    let Some(v) = t.get(key) else {
        return Ok(Some(signal));
    };
    let DeValue::Table(_) = v.get_ref() else {
        return Ok(Some(signal));
    };
    let c = t.child(key, v, "a flow")?;
    let Some((b, at)) = c.number("bias")? else {
        return Ok(Some(signal));
    };
    if b.abs() >= MAX_BIAS || !b.is_finite() {
        return Err(c.err(
            at,
            "bias",
            format!(
                "the meter's relative bias, between -{MAX_BIAS} and {MAX_BIAS} (0.03: reads 3 % high), got {b}"
            ),
        ));
    }
    match signal {
        Signal::Tag {
            tag,
            scale,
            offset,
            unit,
            density,
        } => Ok(Some(Signal::Tag {
            tag,
            scale: scale / (1.0 + b),
            offset: offset / (1.0 + b),
            unit,
            density,
        })),
        Signal::Constant(_) => Err(c.err(
            at,
            "bias",
            "a bias belongs to a meter: give the flow's tag, not a constant value",
        )),
    }
}

/// The flow at `key` as the meter reads it (any `bias` left to the caller).
fn unbiased(t: &Tbl<'_>, key: &str, tags: &mut TagUses) -> R<Option<Signal>> {
    let Some(v) = t.get(key) else {
        return Ok(None);
    };
    let unit = match v.get_ref() {
        DeValue::Table(_) => {
            let c = t.child(key, v, "a flow")?;
            c.string("unit")?
        }
        _ => None,
    };
    let Some((unit, unit_at)) = unit else {
        // No unit (or not a table): the volumetric reader says what is wrong.
        return volumetric(t, key, tags);
    };
    let c = t.child(key, v, "a flow")?;
    if units::to_si(Kind::MassFlow, unit).is_err() {
        if units::to_si(Kind::Flow, unit).is_err() {
            return Err(c.err(
                unit_at,
                "unit",
                format!(
                    "unknown flow unit \"{unit}\"; volumetric: {}; mass, with a density: {}",
                    list(units::valid_units(Kind::Flow)),
                    list(units::valid_units(Kind::MassFlow))
                ),
            ));
        }
        if c.get("density").is_some() {
            return Err(c.err(
                c.key_at("density"),
                "density",
                format!(
                    "only used with a mass-flow unit ({}); \"{unit}\" is a volumetric flow",
                    list(units::valid_units(Kind::MassFlow))
                ),
            ));
        }
        return volumetric(t, key, tags);
    }
    let mass = non_negative_source(
        c.ctx,
        source_with(
            &c,
            Conv::Kind(Kind::MassFlow),
            TagMode::Allowed,
            &["density", "bias"],
        )?,
    )?;
    let Some(dv) = c.get("density") else {
        return Err(c.missing(
            "density",
            &format!(
                "a mass flow in {unit} needs the density that makes it a volumetric flow: \
                 density = {{ value = 1040, unit = \"kg/m3\" }} or {{ tag = \"...\", unit = \
                 \"kg/m3\" }}; valid units: {}",
                list(units::valid_units(Kind::Density))
            ),
        ));
    };
    let d = c.child("density", dv, "a density")?;
    let density = source_of(&d, Conv::Kind(Kind::Density), TagMode::Allowed)?;
    Ok(Some(match (mass, density) {
        (Source::Const(mut m), Source::Const(rho)) => {
            let rho = rho.positive(c.ctx)?;
            m.si /= rho.si;
            tags.signal(Source::Const(m), true)
        }
        (Source::Tag(mut m), Source::Const(rho)) => {
            let rho = rho.positive(c.ctx)?;
            m.conv = ToSi::scale(m.conv.scale / rho.si);
            tags.signal(Source::Tag(m), true)
        }
        (Source::Tag(m), Source::Tag(rho)) => {
            tags.record(rho.at, &rho.tag, false);
            match tags.signal(Source::Tag(m), true) {
                Signal::Tag {
                    tag,
                    scale,
                    offset,
                    unit,
                    ..
                } => Signal::Tag {
                    tag,
                    scale,
                    offset,
                    unit,
                    density: Some(DensityTag {
                        tag: rho.tag,
                        scale: rho.conv.scale,
                        unit: rho.unit,
                    }),
                },
                constant => constant,
            }
        }
        (Source::Const(_), Source::Tag(rho)) => {
            return Err(d.err(
                rho.at,
                "tag",
                "a constant mass flow needs a constant density (give value, not tag)",
            ))
        }
    }))
}

/// A volumetric flow, constant or tag.
fn volumetric(t: &Tbl<'_>, key: &str, tags: &mut TagUses) -> R<Option<Signal>> {
    let flow = match t.get(key) {
        None => return Ok(None),
        Some(v) if matches!(v.get_ref(), DeValue::Table(_)) => {
            let c = t.child(key, v, "a flow")?;
            source_with(&c, Conv::Kind(Kind::Flow), TagMode::Allowed, &["bias"])?
        }
        // Not a table: the quantity reader says what is wrong.
        Some(_) => match t.signal(key, Conv::Kind(Kind::Flow), TagMode::Allowed)? {
            Some(s) => s,
            None => return Ok(None),
        },
    };
    let flow = non_negative_source(t.ctx, flow)?;
    Ok(Some(tags.signal(flow, true)))
}
