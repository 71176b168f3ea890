//! `[[inlet]]` and `[[outlet]]`: what flows in (with its composition) and
//! what flows out (metered, or through an orifice or over a weir).

use super::flow::flow_signal;
use super::quantity::{Conv, TagMode};
use super::source::{non_negative_source, source_of, TagUses};
use super::table::{array_section, list, unique_name, Tbl, R};
use crate::plant::{limits, Inlet, Outlet, OutletKind, Signal, Species};
use crate::units::Kind;

const INLET_KEYS: &[&str] = &["name", "flow", "feed"];
const OUTLET_KEYS: &[&str] = &[
    "name",
    "kind",
    "flow",
    "discharge_coefficient",
    "area",
    "diameter",
    "elevation",
    "width",
    "crest",
];

/// Every `[[inlet]]`: at least one, at most [`limits::INLETS`].
pub(super) fn read_inlets(
    root: &Tbl<'_>,
    species: &[Species],
    tags: &mut TagUses,
) -> R<Vec<Inlet>> {
    let mut inlets = Vec::new();
    let mut seen = Vec::new();
    for t in array_section(root, "inlet", limits::INLETS, "plant::limits::INLETS")? {
        t.check_keys(INLET_KEYS)?;
        let (name, at) = t.name_string("name", "a name for reports")?;
        unique_name(&t, name, at, &mut seen, "inlet")?;
        let flow = flow_signal(&t, "flow", tags)?.ok_or_else(|| {
            t.missing(
                "flow",
                "{ tag = \"...\", unit = \"m3/h\" } or { value, unit }",
            )
        })?;
        let feed = read_feed(&t, species, tags)?;
        inlets.push(Inlet {
            name: name.to_string(),
            flow,
            feed,
        });
    }
    if inlets.is_empty() {
        return Err(root.ctx.error(
            None,
            "[[inlet]]",
            format!(
                "missing: at least 1 inlet is required (at most {})",
                limits::INLETS
            ),
        ));
    }
    Ok(inlets)
}

/// An inlet's `feed`: a concentration per species (0 for those not listed).
fn read_feed(t: &Tbl<'_>, species: &[Species], tags: &mut TagUses) -> R<Vec<Signal>> {
    let mut feed = vec![Signal::Constant(0.0); species.len()];
    if let Some(f) = t.opt_child("feed", "a table of species = concentration")? {
        for (index, sname, _, value) in f.species_map(species)? {
            let molar_mass = species.get(index).and_then(|s| s.molar_mass);
            let src = source_of(
                &f.child(
                    sname,
                    value,
                    "a concentration { value, unit } or { tag, unit }",
                )?,
                Conv::Concentration(molar_mass),
                TagMode::Allowed,
            )?;
            let src = non_negative_source(t.ctx, src)?;
            if let Some(slot) = feed.get_mut(index) {
                *slot = tags.signal(src, false);
            }
        }
    }
    Ok(feed)
}

/// Every `[[outlet]]` (there may be none), at most [`limits::OUTLETS`];
/// `top` is the vessel's top level, m.
pub(super) fn read_outlets(root: &Tbl<'_>, top: f64, tags: &mut TagUses) -> R<Vec<Outlet>> {
    let mut outlets = Vec::new();
    let mut seen = Vec::new();
    for t in array_section(root, "outlet", limits::OUTLETS, "plant::limits::OUTLETS")? {
        t.check_keys(OUTLET_KEYS)?;
        let (name, at) = t.name_string("name", "a name for reports")?;
        unique_name(&t, name, at, &mut seen, "outlet")?;
        let kind = read_outlet(&t, top, tags)?;
        outlets.push(Outlet {
            name: name.to_string(),
            kind,
        });
    }
    Ok(outlets)
}

/// One `[[outlet]]`'s kind and parameters.
fn read_outlet(t: &Tbl<'_>, top: f64, tags: &mut TagUses) -> R<OutletKind> {
    let (kind, _) = t
        .choice(
            "kind",
            &[("measured", 0u8), ("orifice", 1u8), ("weir", 2u8)],
        )?
        .ok_or_else(|| t.missing("kind", "valid: \"measured\", \"orifice\", \"weir\""))?;
    let (kind_name, used): (&str, &[&str]) = match kind {
        0 => ("measured", &["name", "kind", "flow"]),
        1 => (
            "orifice",
            &[
                "name",
                "kind",
                "discharge_coefficient",
                "area",
                "diameter",
                "elevation",
            ],
        ),
        _ => (
            "weir",
            &["name", "kind", "discharge_coefficient", "width", "crest"],
        ),
    };
    t.check_unused(used, &format!("outlet kind {kind_name}"))?;
    let hint = format!(
        "outlet kind {kind_name} needs {}",
        list(used.get(2..).unwrap_or(&[]))
    );
    if kind == 0 {
        let flow = flow_signal(t, "flow", tags)?.ok_or_else(|| t.missing("flow", &hint))?;
        return Ok(OutletKind::Measured(flow));
    }
    let cd = discharge_coefficient(t)?;
    if kind == 1 {
        read_orifice(t, cd, top)
    } else {
        read_weir(t, cd, top, &hint)
    }
}

/// An orifice's or weir's `discharge_coefficient`, in (0, 1].
fn discharge_coefficient(t: &Tbl<'_>) -> R<f64> {
    let (cd, cd_at) = t.number("discharge_coefficient")?.ok_or_else(|| {
        t.missing(
            "discharge_coefficient",
            "e.g. 0.61 (sharp-edged orifice) or 0.62 (sharp-crested weir)",
        )
    })?;
    if !(cd > 0.0 && cd <= 1.0) {
        return Err(t.err(
            cd_at,
            "discharge_coefficient",
            format!("must be above 0 and at most 1, got {cd}"),
        ));
    }
    Ok(cd)
}

/// An orifice: `area` or `diameter`, and `elevation` within the vessel.
fn read_orifice(t: &Tbl<'_>, cd: f64, top: f64) -> R<OutletKind> {
    let ctx = t.ctx;
    let area = t.quantity("area", Conv::Kind(Kind::Area))?;
    let diameter = t.quantity("diameter", Conv::Kind(Kind::Length))?;
    let area = match (area, diameter) {
        (Some(_), Some(_)) => {
            let at = t.key_at("area").max(t.key_at("diameter"));
            let key = if at == t.key_at("area") {
                "area"
            } else {
                "diameter"
            };
            return Err(t.err(at, key, "give either area or diameter, not both"));
        }
        (None, None) => {
            return Err(t.missing(
                "area",
                "give area = { value, unit } or diameter = { value, unit }",
            ))
        }
        (Some(a), None) => a.positive(ctx)?.si,
        (None, Some(d)) => {
            let d = d.positive(ctx)?.si;
            core::f64::consts::PI * d * d / 4.0
        }
    };
    let elevation = t
        .req_quantity(
            "elevation",
            Conv::Kind(Kind::Length),
            "height of the orifice centre above the vessel bottom",
        )?
        .within(ctx, top, "the vessel's top level")?
        .si;
    Ok(OutletKind::Orifice {
        discharge_coefficient: cd,
        area,
        elevation,
    })
}

/// A weir: `width` and `crest` within the vessel.
fn read_weir(t: &Tbl<'_>, cd: f64, top: f64, hint: &str) -> R<OutletKind> {
    let ctx = t.ctx;
    let width = t
        .req_quantity("width", Conv::Kind(Kind::Length), hint)?
        .positive(ctx)?
        .si;
    let crest = t
        .req_quantity(
            "crest",
            Conv::Kind(Kind::Length),
            "height of the crest above the vessel bottom",
        )?
        .within(ctx, top, "the vessel's top level")?
        .si;
    Ok(OutletKind::Weir {
        discharge_coefficient: cd,
        width,
        crest,
    })
}
