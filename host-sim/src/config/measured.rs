//! What is measured on the vessel itself: `[temperature]`, `[level]` and
//! the online analysers `[[analyser]]`.

use super::quantity::{Conv, TagMode};
use super::source::{source_of, source_with, Source, TagRef, TagUses};
use super::table::{array_section, list, required_section, section, Tbl, R};
use crate::plant::{limits, Analyser, Signal, Species};
use crate::units::{Kind, ToSi};

const ANALYSER_KEYS: &[&str] = &["species", "reading", "sigma", "cycle"];

/// `[temperature]`: a constant above absolute zero or a tag.
pub(super) fn read_temperature(root: &Tbl<'_>, tags: &mut TagUses) -> R<Signal> {
    let temp = required_section(
        root,
        "temperature",
        "the vessel temperature: tag = \"...\", unit = \"degC\" (or value = ..., unit = ...)",
    )?;
    let temperature = match source_of(&temp, Conv::Kind(Kind::Temperature), TagMode::Allowed)? {
        Source::Const(q) => Source::Const(q.kelvin(root.ctx)?),
        s => s,
    };
    Ok(tags.signal(temperature, false))
}

/// `[level]` (optional): a tag only, in a length unit or in `%` of the
/// transmitter's span (`lower` and `upper`: the levels at 0 % and 100 %,
/// from the same reference as the vessel's heights), with an optional
/// `offset` added to every reading (the transmitter's zero above the
/// vessel's bottom, known from a survey or fitted by `holdup fit`).
pub(super) fn read_level(root: &Tbl<'_>, tags: &mut TagUses) -> R<Option<Signal>> {
    let Some(l) = section(root, "level")? else {
        return Ok(None);
    };
    let offset = l.quantity("offset", Conv::Kind(Kind::Length))?;
    let signal = read_level_reading(&l, tags)?;
    Ok(match (signal, offset) {
        (
            Some(Signal::Tag {
                tag,
                scale,
                offset: zero,
                unit,
                density,
            }),
            Some(o),
        ) => Some(Signal::Tag {
            tag,
            scale,
            offset: zero + o.si,
            unit,
            density,
        }),
        (s, _) => s,
    })
}

/// `[level]` without its `offset`.
fn read_level_reading(l: &Tbl<'_>, tags: &mut TagUses) -> R<Option<Signal>> {
    if l.string("unit")?.map(|(u, _)| u) != Some("%") {
        if let Some(key) = ["lower", "upper"].into_iter().find(|k| l.get(k).is_some()) {
            return Err(l.err(
                l.key_at(key),
                key,
                "only used with unit = \"%\" (the levels at 0 % and 100 % of the span)",
            ));
        }
        return Ok(Some(tags.signal(
            source_with(l, Conv::Kind(Kind::Length), TagMode::Only, &["offset"])?,
            false,
        )));
    }
    l.check_keys(&["tag", "unit", "lower", "upper", "offset"])?;
    let length = Conv::Kind(Kind::Length);
    let lower = l.req_quantity(
        "lower",
        length,
        "the level at 0 % of the span, e.g. { value = 0.15, unit = \"m\" }",
    )?;
    let upper = l.req_quantity(
        "upper",
        length,
        "the level at 100 % of the span, e.g. { value = 3.2, unit = \"m\" }",
    )?;
    if upper.si <= lower.si {
        return Err(upper.fail(l.ctx, &format!("must be above lower ({})", lower.shown())));
    }
    let (tag, at) = l
        .string("tag")?
        .ok_or_else(|| l.missing("tag", "the level transmitter's tag"))?;
    if tag.trim().is_empty() {
        return Err(l.err(at, "tag", "must not be empty"));
    }
    // level = lower + (upper − lower) · percent / 100.
    Ok(Some(tags.signal(
        Source::Tag(TagRef {
            tag: tag.to_string(),
            unit: "%".to_string(),
            conv: ToSi {
                scale: (upper.si - lower.si) / 100.0,
                offset: lower.si,
            },
            at,
        }),
        false,
    )))
}

/// Every `[[analyser]]`, at most one per species.
pub(super) fn read_analysers(
    root: &Tbl<'_>,
    species: &[Species],
    tick_ms: u64,
    tags: &mut TagUses,
) -> R<Vec<Analyser>> {
    let mut analysers: Vec<Analyser> = Vec::new();
    for t in array_section(root, "analyser", limits::SPECIES, "plant::limits::SPECIES")? {
        let a = read_analyser(&t, species, tick_ms, tags)?;
        if analysers.iter().any(|b| b.species == a.species) {
            let (name, at) = t.string("species")?.unwrap_or(("", t.at));
            return Err(t.err(
                at,
                "species",
                format!("a second analyser for \"{name}\"; give each species at most one"),
            ));
        }
        analysers.push(a);
    }
    Ok(analysers)
}

/// `[[analyser]]`: an online analyser of one species.
fn read_analyser(
    t: &Tbl<'_>,
    species: &[Species],
    tick_ms: u64,
    tags: &mut TagUses,
) -> R<Analyser> {
    t.check_keys(ANALYSER_KEYS)?;
    let names: Vec<&str> = species.iter().map(|s| s.name.as_str()).collect();
    let (name, at) = t
        .string("species")?
        .ok_or_else(|| t.missing("species", &format!("one of {}", list(&names))))?;
    let index = species.iter().position(|s| s.name == name).ok_or_else(|| {
        t.err(
            at,
            "species",
            format!(
                "unknown species \"{name}\"; defined species: {}",
                list(&names)
            ),
        )
    })?;
    let conv = Conv::Concentration(species[index].molar_mass);
    let reading = t.signal("reading", conv, TagMode::Only)?.ok_or_else(|| {
        t.missing(
            "reading",
            "the analyser's tag and unit, e.g. { tag = \"AI-201\", unit = \"mol/L\" }",
        )
    })?;
    let sigma = t
        .req_quantity(
            "sigma",
            conv,
            "1σ of one reading, e.g. { value = 0.02, unit = \"mol/L\" }",
        )?
        .positive(t.ctx)?
        .si;
    let cycle_ms = match t.duration("cycle")? {
        None => tick_ms,
        Some((ms, _)) if ms >= tick_ms => ms,
        Some((_, at)) => {
            return Err(t.err(
                at,
                "cycle",
                format!("the analyser cycle must be at least the tick ({tick_ms} ms)"),
            ))
        }
    };
    Ok(Analyser {
        species: index,
        reading: tags.signal(reading, false),
        sigma,
        cycle_ms,
    })
}
