//! Where a signal comes from: a constant or a tag of the log
//! (`{ value, unit }` / `{ tag, unit }`), and the record of every tag the
//! plant reads ([`TagUses`]), from which `[tags."…"]` is checked.

use super::quantity::{Conv, Qty, TagMode};
use super::table::{list, Ctx, Tbl, R};
use crate::plant::Signal;
use crate::units::ToSi;

/// A log tag with its conversion.
#[derive(Clone, Debug)]
pub(super) struct TagRef {
    pub(super) tag: String,
    pub(super) unit: String,
    pub(super) conv: ToSi,
    pub(super) at: usize,
}

/// A quantity that is a constant or read from the log.
#[derive(Clone, Debug)]
pub(super) enum Source {
    Const(Qty),
    Tag(TagRef),
}

/// Read `{ value, unit }` / `{ tag, unit }` from table `t`.
pub(super) fn source_of(t: &Tbl<'_>, conv: Conv, mode: TagMode) -> R<Source> {
    source_with(t, conv, mode, &[])
}

/// As [`source_of`], leaving the keys `extra` to the caller.
pub(super) fn source_with(t: &Tbl<'_>, conv: Conv, mode: TagMode, extra: &[&str]) -> R<Source> {
    let base: &[&str] = match mode {
        TagMode::Never => &["value", "unit"],
        TagMode::Allowed => &["value", "tag", "unit"],
        TagMode::Only => &["tag", "unit"],
    };
    let allowed: Vec<&str> = base.iter().chain(extra).copied().collect();
    let allowed = allowed.as_slice();
    if let Some((k, _)) = t
        .entries()
        .into_iter()
        .find(|(k, _)| !allowed.contains(&k.get_ref().as_ref()))
    {
        let key: &str = k.get_ref();
        let note = match (mode, key) {
            (TagMode::Never, "tag") => {
                "; this quantity is a constant, it cannot be read from the log"
            }
            (TagMode::Only, "value") => "; this quantity is read from the log, give its tag",
            _ => "",
        };
        return Err(t.err(
            k.span().start,
            key,
            format!("unknown key; valid keys: {}{note}", list(allowed)),
        ));
    }
    let valid_units = || format!("valid units: {}", list(conv.valid()));
    let (unit, unit_at) = t
        .string("unit")?
        .ok_or_else(|| t.missing("unit", &valid_units()))?;
    let to_si = conv
        .to_si(unit)
        .map_err(|e| t.err(unit_at, "unit", e.to_string()))?;
    let value = t.number("value")?;
    let tag = t.string("tag")?;
    match (value, tag) {
        (Some(_), Some((_, at))) => Err(t.err(at, "tag", "give either value or tag, not both")),
        (None, None) => Err(t.err_here(match mode {
            TagMode::Never => "missing value (required)",
            TagMode::Allowed => "missing value or tag (one is required)",
            TagMode::Only => "missing tag (required)",
        })),
        (Some((raw, at)), None) => {
            let si = to_si.apply(raw);
            let q = Qty {
                key: t.own_name(),
                at,
                raw,
                unit: unit.to_string(),
                si_unit: conv.kind().si_unit(),
                si,
            };
            if si.is_finite() {
                Ok(Source::Const(q))
            } else {
                Err(q.fail(t.ctx, "is out of range in SI"))
            }
        }
        (None, Some((tag, at))) => {
            if tag.trim().is_empty() {
                return Err(t.err(at, "tag", "must not be empty"));
            }
            Ok(Source::Tag(TagRef {
                tag: tag.to_string(),
                unit: unit.to_string(),
                conv: to_si,
                at,
            }))
        }
    }
}

/// Every use of a tag, in file order after sorting.
#[derive(Default)]
pub(super) struct TagUses {
    uses: Vec<(usize, String, bool)>,
}

impl TagUses {
    /// Turn a source into a signal, recording a tag use.
    pub(super) fn signal(&mut self, source: Source, flow: bool) -> Signal {
        match source {
            Source::Const(q) => Signal::Constant(q.si),
            Source::Tag(t) => {
                self.uses.push((t.at, t.tag.clone(), flow));
                Signal::Tag {
                    tag: t.tag,
                    scale: t.conv.scale,
                    offset: t.conv.offset,
                    unit: t.unit,
                    density: None,
                }
            }
        }
    }

    /// Record a use of `tag` at `at` that [`TagUses::signal`] does not
    /// make (a mass flow's density).
    pub(super) fn record(&mut self, at: usize, tag: &str, flow: bool) {
        self.uses.push((at, tag.to_string(), flow));
    }

    /// Distinct tags in first-use order, with whether any use is a flow.
    pub(super) fn distinct(mut self) -> Vec<(String, bool)> {
        self.uses.sort_by_key(|(at, _, _)| *at);
        let mut out: Vec<(String, bool)> = Vec::new();
        for (_, tag, flow) in self.uses {
            match out.iter_mut().find(|(t, _)| *t == tag) {
                Some(entry) => entry.1 |= flow,
                None => out.push((tag, flow)),
            }
        }
        out
    }
}

/// A constant must not be negative (flows, concentrations).
pub(super) fn non_negative_source(ctx: &Ctx<'_>, s: Source) -> R<Source> {
    match s {
        Source::Const(q) => Ok(Source::Const(q.non_negative(ctx)?)),
        tag => Ok(tag),
    }
}
