//! `[initial]`: the state the replay starts from.

use holdup_kernel::Geometry;

use super::quantity::{Conv, TagMode};
use super::source::{source_of, Source};
use super::table::{Tbl, R};
use crate::plant::{Initial, Species};
use crate::units::Kind;

const INITIAL_KEYS: &[&str] = &["volume", "level", "concentrations", "temperature"];

/// `[initial]`.
pub(super) fn read(t: &Tbl<'_>, geometry: &Geometry<f64>, species: &[Species]) -> R<Initial> {
    let ctx = t.ctx;
    t.check_keys(INITIAL_KEYS)?;
    let capacity = geometry.max_volume();
    let volume = t.quantity("volume", Conv::Kind(Kind::Volume))?;
    let level = t.quantity("level", Conv::Kind(Kind::Length))?;
    let volume = match (volume, level) {
        (Some(v), Some(l)) => {
            let later = if v.at > l.at { v } else { l };
            return Err(ctx.error(
                Some(later.at),
                later.key,
                "give either volume or level, not both",
            ));
        }
        (None, None) => {
            return Err(t.missing(
                "volume",
                "give volume = { value, unit } or level = { value, unit }",
            ))
        }
        (Some(v), None) => v.within(ctx, capacity, "the vessel capacity")?.si,
        (None, Some(l)) => {
            let l = l.within(ctx, geometry.max_level(), "the vessel's top level")?;
            geometry.volume_at(l.si)
        }
    };
    let mut concentrations = vec![0.0; species.len()];
    if let Some(c) = t.opt_child("concentrations", "a table of species = { value, unit }")? {
        for (index, name, _, value) in c.species_map(species)? {
            let molar_mass = species.get(index).and_then(|s| s.molar_mass);
            let q = c.child(name, value, "a concentration { value, unit }")?;
            let Source::Const(q) = source_of(&q, Conv::Concentration(molar_mass), TagMode::Never)?
            else {
                return Err(c.err(value.span().start, name, "must be a constant"));
            };
            let q = q.non_negative(ctx)?;
            if let Some(slot) = concentrations.get_mut(index) {
                *slot = q.si;
            }
        }
    }
    let temperature = match t.quantity("temperature", Conv::Kind(Kind::Temperature))? {
        Some(q) => Some(q.kelvin(ctx)?.si),
        None => None,
    };
    Ok(Initial {
        volume,
        concentrations,
        temperature,
    })
}
