//! `[[species]]`: the species the balances track, in order.

use super::quantity::Conv;
use super::table::{array_section, unique_name, Tbl, R};
use crate::plant::{limits, Species};
use crate::units::Kind;

const SPECIES_KEYS: &[&str] = &["name", "molar_mass"];

/// Every `[[species]]`: at least one, at most [`limits::SPECIES`].
pub(super) fn read(root: &Tbl<'_>) -> R<Vec<Species>> {
    let ctx = root.ctx;
    let mut species: Vec<Species> = Vec::new();
    let mut seen = Vec::new();
    for s in array_section(root, "species", limits::SPECIES, "plant::limits::SPECIES")? {
        s.check_keys(SPECIES_KEYS)?;
        let (name, at) = s.name_string("name", "the species' name, as in the lab file")?;
        unique_name(&s, name, at, &mut seen, "species")?;
        let molar_mass = match s.quantity("molar_mass", Conv::Kind(Kind::MolarMass))? {
            Some(q) => Some(q.positive(ctx)?.si),
            None => None,
        };
        species.push(Species {
            name: name.to_string(),
            molar_mass,
        });
    }
    if species.is_empty() {
        return Err(ctx.error(
            None,
            "[[species]]",
            format!(
                "missing: at least 1 species is required (at most {})",
                limits::SPECIES
            ),
        ));
    }
    Ok(species)
}
