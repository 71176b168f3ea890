//! Quantities: a number with its unit (`{ value, unit }`), converted to SI
//! as it is read, or a tag of the log (`{ tag, unit }`) where that is
//! allowed; [`Qty`] keeps what was written for messages.

use toml::de::DeValue;

use super::source::{source_of, Source};
use super::table::{list, type_name, Ctx, Tbl, R};
use super::ConfigError;
use crate::units::{self, Kind, ToSi, UnitError};

impl<'a> Tbl<'a> {
    /// An optional constant quantity `{ value, unit }`.
    pub(super) fn quantity(&self, key: &str, conv: Conv) -> R<Option<Qty>> {
        match self.signal(key, conv, TagMode::Never)? {
            None => Ok(None),
            Some(Source::Const(q)) => Ok(Some(q)),
            // `TagMode::Never` refuses a tag.
            Some(Source::Tag(t)) => Err(self.err(t.at, key, "cannot be read from the log")),
        }
    }

    pub(super) fn req_quantity(&self, key: &str, conv: Conv, hint: &str) -> R<Qty> {
        self.quantity(key, conv)?
            .ok_or_else(|| self.missing(key, hint))
    }

    /// An optional quantity or tag at `key`.
    pub(super) fn signal(&self, key: &str, conv: Conv, mode: TagMode) -> R<Option<Source>> {
        let Some(v) = self.get(key) else {
            return Ok(None);
        };
        if !matches!(v.get_ref(), DeValue::Table(_)) {
            let example = match mode {
                TagMode::Never => format!("{{ value = ..., unit = \"{}\" }}", conv.example()),
                TagMode::Allowed => format!(
                    "{{ value = ..., unit = \"{u}\" }} or {{ tag = \"...\", unit = \"{u}\" }}",
                    u = conv.example()
                ),
                TagMode::Only => format!("{{ tag = \"...\", unit = \"{}\" }}", conv.example()),
            };
            return Err(self.err(
                v.span().start,
                key,
                format!(
                    "expected a quantity with its unit, {example}, got {}; valid units: {}",
                    type_name(v.get_ref()),
                    list(conv.valid())
                ),
            ));
        }
        let t = self.child(key, v, "a quantity")?;
        source_of(&t, conv, mode).map(Some)
    }
}

/// How a quantity's unit converts to SI.
#[derive(Clone, Copy)]
pub(super) enum Conv {
    /// A unit of this kind.
    Kind(Kind),
    /// A concentration of a species with this molar mass (kg/mol), if known.
    Concentration(Option<f64>),
}

impl Conv {
    pub(super) fn to_si(self, unit: &str) -> Result<ToSi, UnitError> {
        match self {
            Conv::Kind(k) => units::to_si(k, unit),
            Conv::Concentration(m) => units::concentration_to_si(unit, m),
        }
    }

    pub(super) fn kind(self) -> Kind {
        match self {
            Conv::Kind(k) => k,
            Conv::Concentration(_) => Kind::Concentration,
        }
    }

    pub(super) fn valid(self) -> &'static [&'static str] {
        units::valid_units(self.kind())
    }

    pub(super) fn example(self) -> &'static str {
        self.valid().first().copied().unwrap_or("")
    }
}

/// Whether a quantity may come from the log.
#[derive(Clone, Copy, PartialEq, Eq)]
pub(super) enum TagMode {
    /// A constant only.
    Never,
    /// A constant or a tag.
    Allowed,
    /// A tag only.
    Only,
}

/// A constant quantity as written and in SI.
#[derive(Clone, Debug)]
pub(super) struct Qty {
    /// Reported key (`[vessel] diameter`).
    pub(super) key: String,
    /// Offset of its value.
    pub(super) at: usize,
    /// The number as written.
    pub(super) raw: f64,
    /// The unit as written.
    pub(super) unit: String,
    /// SI unit name (for messages).
    pub(super) si_unit: &'static str,
    /// Value in SI.
    pub(super) si: f64,
}

impl Qty {
    /// `-1.6 m`, or `3 ft (= 0.9144 m)` when not in SI.
    pub(super) fn shown(&self) -> String {
        if self.unit == self.si_unit {
            format!("{} {}", self.raw, self.unit)
        } else {
            format!(
                "{} {} (= {} {})",
                self.raw,
                self.unit,
                short(self.si),
                self.si_unit
            )
        }
    }

    pub(super) fn fail(&self, ctx: &Ctx<'_>, requirement: &str) -> ConfigError {
        ctx.error(
            Some(self.at),
            self.key.clone(),
            format!("{requirement}, got {}", self.shown()),
        )
    }

    pub(super) fn positive(self, ctx: &Ctx<'_>) -> R<Self> {
        if self.si > 0.0 {
            Ok(self)
        } else {
            Err(self.fail(ctx, "must be positive"))
        }
    }

    pub(super) fn non_negative(self, ctx: &Ctx<'_>) -> R<Self> {
        if self.si >= 0.0 {
            Ok(self)
        } else {
            Err(self.fail(ctx, "must not be negative"))
        }
    }

    /// Within `[0, top]` (SI), `what` naming the top.
    pub(super) fn within(self, ctx: &Ctx<'_>, top: f64, what: &str) -> R<Self> {
        if self.si >= 0.0 && self.si <= top {
            Ok(self)
        } else {
            Err(self.fail(
                ctx,
                &format!(
                    "must be between 0 and {what} {} {}",
                    short(top),
                    self.si_unit
                ),
            ))
        }
    }

    /// A temperature above absolute zero.
    pub(super) fn kelvin(self, ctx: &Ctx<'_>) -> R<Self> {
        if self.si > 0.0 {
            Ok(self)
        } else {
            Err(self.fail(ctx, "must be above absolute zero"))
        }
    }
}

/// `x` rounded to 12 significant digits for messages (`0.9144`, not
/// `0.9144000000000001`).
pub(super) fn short(x: f64) -> String {
    format!("{:.11e}", x)
        .parse::<f64>()
        .map_or_else(|_| x.to_string(), |r| r.to_string())
}
