//! Engineering units of the plant configuration and their exact conversion
//! to the SI units the kernel computes in.
//!
//! Every conversion is affine, `si = raw · scale + offset`; only temperatures
//! have an offset. The SI targets: length m, area m², volume m³, flow m³/s,
//! temperature K, concentration mol/m³, molar mass kg/mol, molar energy
//! J/mol, duration s, rate constant (mol/m³)^(1−n)/s for total order `n`.
//!
//! # Sources of the factors
//!
//! All factors are exact by definition:
//!
//! * foot = 0.3048 m and inch = 0.0254 m (international yard and pound,
//!   1959; NIST SP 811, appendix B.8), hence ft² = 0.09290304 m²,
//!   in² = 6.4516·10⁻⁴ m², ft³ = 0.028316846592 m³ = 28.316846592 L;
//! * US liquid gallon = 231 in³ = 3.785411784 L (NIST SP 811, B.8);
//! * litre = 10⁻³ m³ (12th CGPM, 1964; SI Brochure);
//! * 0 °C = 273.15 K, and K = (°F − 32)·5/9 + 273.15 (NIST SP 811, B.9 and
//!   section 4.2.1.1);
//! * thermochemical calorie = 4.184 J, so kcal/mol = 4184 J/mol (NIST SP 811,
//!   B.8);
//! * minute = 60 s, hour = 3600 s (SI Brochure, non-SI units accepted for
//!   use with the SI).

use core::fmt;

/// A physical quantity kind with its own set of units.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Kind {
    /// Length or level, SI m.
    Length,
    /// Area, SI m².
    Area,
    /// Volume, SI m³.
    Volume,
    /// Volumetric flow, SI m³/s.
    Flow,
    /// Temperature, SI K (affine units °C, °F).
    Temperature,
    /// Amount concentration, SI mol/m³ (mass-based units need a molar mass,
    /// see [`concentration_to_si`]).
    Concentration,
    /// Molar mass, SI kg/mol.
    MolarMass,
    /// Energy per mole (activation energy), SI J/mol.
    MolarEnergy,
    /// Duration, SI s (see also [`parse_duration_ms`]).
    Duration,
    /// Mass flow, SI kg/s (a flow signal with a density, see
    /// `docs/config.md`).
    MassFlow,
    /// Density, SI kg/m³.
    Density,
}

impl Kind {
    /// Lower-case name of the kind, as used in error messages.
    pub fn name(self) -> &'static str {
        match self {
            Kind::Length => "length",
            Kind::Area => "area",
            Kind::Volume => "volume",
            Kind::Flow => "flow",
            Kind::Temperature => "temperature",
            Kind::Concentration => "concentration",
            Kind::MolarMass => "molar mass",
            Kind::MolarEnergy => "energy per mole",
            Kind::Duration => "duration",
            Kind::MassFlow => "mass flow",
            Kind::Density => "density",
        }
    }

    /// The SI unit the kind converts to, as written in messages.
    pub fn si_unit(self) -> &'static str {
        match self {
            Kind::Length => "m",
            Kind::Area => "m2",
            Kind::Volume => "m3",
            Kind::Flow => "m3/s",
            Kind::Temperature => "K",
            Kind::Concentration => "mol/m3",
            Kind::MolarMass => "kg/mol",
            Kind::MolarEnergy => "J/mol",
            Kind::Duration => "s",
            Kind::MassFlow => "kg/s",
            Kind::Density => "kg/m3",
        }
    }
}

/// Affine conversion to SI: `si = raw * scale + offset`.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct ToSi {
    /// Multiplier to SI.
    pub scale: f64,
    /// Offset added after scaling (non-zero for °C and °F only).
    pub offset: f64,
}

impl ToSi {
    /// A purely multiplicative conversion.
    pub const fn scale(scale: f64) -> Self {
        Self { scale, offset: 0.0 }
    }

    /// Convert a raw value to SI.
    pub fn apply(&self, raw: f64) -> f64 {
        raw * self.scale + self.offset
    }
}

/// Why a unit or a duration was refused. The message ([`fmt::Display`])
/// says what would be valid.
#[derive(Clone, Debug, PartialEq)]
pub enum UnitError {
    /// The unit is not one of the kind's units.
    Unknown {
        /// The kind that was expected.
        kind: Kind,
        /// The unit as written.
        unit: String,
    },
    /// A mass-based concentration unit for a species without a molar mass.
    NeedsMolarMass {
        /// The unit as written.
        unit: String,
    },
    /// The molar mass given for a mass-based concentration is not a finite
    /// positive number of kg/mol.
    BadMolarMass {
        /// The molar mass, kg/mol.
        molar_mass: f64,
    },
    /// Not a known rate-constant unit.
    UnknownRateConstant {
        /// The unit as written.
        unit: String,
        /// Total order of the rate law it was given for.
        order: f64,
    },
    /// A rate-constant unit whose order differs from the rate law's.
    OrderMismatch {
        /// The unit as written.
        unit: String,
        /// The order the unit belongs to.
        unit_order: u8,
        /// Total order of the rate law.
        order: f64,
    },
    /// A duration string that cannot be read.
    Duration {
        /// The text as written.
        text: String,
        /// What is wrong with it.
        reason: &'static str,
    },
}

/// Comma-separated list of units.
fn list(units: &[&str]) -> String {
    units.join(", ")
}

/// Units valid for a rate law of total order `order`, as a list for
/// messages.
fn rate_units_for(order: f64) -> String {
    list(&valid_rate_constant_units(order))
}

impl fmt::Display for UnitError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            UnitError::Unknown { kind, unit } => write!(
                f,
                "unknown {} unit \"{}\"; valid: {}",
                kind.name(),
                unit,
                list(valid_units(*kind))
            ),
            UnitError::NeedsMolarMass { unit } => write!(
                f,
                "mass-based concentration unit \"{unit}\" needs the species' molar_mass; \
                 give molar_mass in its [[species]] entry or use one of: {}",
                list(MOLAR_CONCENTRATION_UNITS)
            ),
            UnitError::BadMolarMass { molar_mass } => write!(
                f,
                "molar mass must be finite and positive, got {molar_mass} kg/mol"
            ),
            UnitError::UnknownRateConstant { unit, order } => write!(
                f,
                "unknown rate-constant unit \"{unit}\"; valid for total order {order}: {}",
                rate_units_for(*order)
            ),
            UnitError::OrderMismatch {
                unit,
                unit_order,
                order,
            } => write!(
                f,
                "rate-constant unit \"{unit}\" is for total order {unit_order}, but the \
                 orders sum to {order}; valid for total order {order}: {}",
                rate_units_for(*order)
            ),
            UnitError::Duration { text, reason } => write!(
                f,
                "invalid duration \"{text}\": {reason}; write a number and one of {} \
                 (e.g. \"1 s\", \"500 ms\", \"10 min\", \"2 h\")",
                list(valid_units(Kind::Duration))
            ),
        }
    }
}

impl std::error::Error for UnitError {}

/// One unit of a kind: name, scale, offset.
type Entry = (&'static str, f64, f64);

/// NIST SP 811 B.8: ft = 0.3048 m, in = 0.0254 m (exact).
const FOOT: f64 = 0.3048;
/// NIST SP 811 B.8: in = 0.0254 m (exact).
const INCH: f64 = 0.0254;
/// Litre = 10⁻³ m³ (exact, 12th CGPM).
const LITRE: f64 = 1e-3;
/// NIST SP 811 B.8: US liquid gallon = 3.785411784 L (exact).
const US_GALLON: f64 = 3.785_411_784e-3;
/// NIST SP 811 B.8: ft³ = 28.316846592 L (exact; = 0.3048³ m³).
const CUBIC_FOOT: f64 = 28.316_846_592e-3;
/// Minute in seconds.
const MINUTE: f64 = 60.0;
/// Hour in seconds.
const HOUR: f64 = 3600.0;
/// NIST SP 811 B.9: 0 °C = 273.15 K (exact).
const ZERO_CELSIUS: f64 = 273.15;
/// NIST SP 811 B.8: avoirdupois pound = 0.45359237 kg (exact).
const POUND: f64 = 0.453_592_37;
/// Tonne = 10³ kg (SI Brochure, non-SI unit accepted for use with the SI).
const TONNE: f64 = 1e3;
/// NIST SP 811 B.8: thermochemical calorie = 4.184 J, kcal = 4184 J (exact).
const KILOCALORIE: f64 = 4184.0;

const LENGTH: &[Entry] = &[
    ("m", 1.0, 0.0),
    ("cm", 1e-2, 0.0),
    ("mm", 1e-3, 0.0),
    ("ft", FOOT, 0.0),
    ("in", INCH, 0.0),
];
const LENGTH_UNITS: &[&str] = &["m", "cm", "mm", "ft", "in"];

const AREA: &[Entry] = &[
    ("m2", 1.0, 0.0),
    ("cm2", 1e-4, 0.0),
    ("mm2", 1e-6, 0.0),
    // 0.3048² = 0.09290304 exactly (written out so the constant is the
    // correctly rounded exact value, not a product of two rounded numbers).
    ("ft2", 0.092_903_04, 0.0),
    // 0.0254² = 0.00064516 exactly.
    ("in2", 6.4516e-4, 0.0),
];
const AREA_UNITS: &[&str] = &["m2", "cm2", "mm2", "ft2", "in2"];

const VOLUME: &[Entry] = &[
    ("m3", 1.0, 0.0),
    ("L", LITRE, 0.0),
    ("US gal", US_GALLON, 0.0),
    ("ft3", CUBIC_FOOT, 0.0),
];
const VOLUME_UNITS: &[&str] = &["m3", "L", "US gal", "ft3"];

const FLOW: &[Entry] = &[
    ("m3/s", 1.0, 0.0),
    ("m3/h", 1.0 / HOUR, 0.0),
    ("m3/min", 1.0 / MINUTE, 0.0),
    ("L/s", LITRE, 0.0),
    ("L/min", LITRE / MINUTE, 0.0),
    ("L/h", LITRE / HOUR, 0.0),
    ("US gal/min", US_GALLON / MINUTE, 0.0),
    ("ft3/min", CUBIC_FOOT / MINUTE, 0.0),
    ("ft3/h", CUBIC_FOOT / HOUR, 0.0),
];
const FLOW_UNITS: &[&str] = &[
    "m3/s",
    "m3/h",
    "m3/min",
    "L/s",
    "L/min",
    "L/h",
    "US gal/min",
    "ft3/min",
    "ft3/h",
];

const MASS_FLOW: &[Entry] = &[
    ("kg/s", 1.0, 0.0),
    ("kg/min", 1.0 / MINUTE, 0.0),
    ("kg/h", 1.0 / HOUR, 0.0),
    ("t/h", TONNE / HOUR, 0.0),
    ("t/d", TONNE / (24.0 * HOUR), 0.0),
    ("lb/min", POUND / MINUTE, 0.0),
    ("lb/h", POUND / HOUR, 0.0),
];
const MASS_FLOW_UNITS: &[&str] = &["kg/s", "kg/min", "kg/h", "t/h", "t/d", "lb/min", "lb/h"];

const DENSITY: &[Entry] = &[
    ("kg/m3", 1.0, 0.0),
    ("kg/L", 1.0 / LITRE, 0.0),
    ("g/cm3", 1e3, 0.0),
    ("g/mL", 1e3, 0.0),
    ("lb/ft3", POUND / CUBIC_FOOT, 0.0),
    ("lb/US gal", POUND / US_GALLON, 0.0),
];
const DENSITY_UNITS: &[&str] = &["kg/m3", "kg/L", "g/cm3", "g/mL", "lb/ft3", "lb/US gal"];

/// K = (°F − 32)·5/9 + 273.15 = °F·5/9 + (273.15 − 160/9).
const FAHRENHEIT_SCALE: f64 = 5.0 / 9.0;
const FAHRENHEIT_OFFSET: f64 = ZERO_CELSIUS - 32.0 * 5.0 / 9.0;

const TEMPERATURE: &[Entry] = &[
    ("K", 1.0, 0.0),
    ("degC", 1.0, ZERO_CELSIUS),
    ("°C", 1.0, ZERO_CELSIUS),
    ("C", 1.0, ZERO_CELSIUS),
    ("degF", FAHRENHEIT_SCALE, FAHRENHEIT_OFFSET),
    ("°F", FAHRENHEIT_SCALE, FAHRENHEIT_OFFSET),
    ("F", FAHRENHEIT_SCALE, FAHRENHEIT_OFFSET),
];
const TEMPERATURE_UNITS: &[&str] = &["K", "degC", "°C", "C", "degF", "°F", "F"];

/// Amount-based concentrations (no molar mass needed).
const MOLAR_CONCENTRATION: &[Entry] = &[
    ("mol/m3", 1.0, 0.0),
    ("mol/L", 1e3, 0.0),
    ("mmol/L", 1.0, 0.0),
    ("kmol/m3", 1e3, 0.0),
];
const MOLAR_CONCENTRATION_UNITS: &[&str] = &["mol/m3", "mol/L", "mmol/L", "kmol/m3"];

/// Mass-based concentrations: scale to kg/m³ (divided by the molar mass in
/// kg/mol to give mol/m³). g/L = kg/m³; mg/L = 10⁻³ kg/m³.
const MASS_CONCENTRATION: &[Entry] = &[("g/L", 1.0, 0.0), ("kg/m3", 1.0, 0.0), ("mg/L", 1e-3, 0.0)];

const CONCENTRATION_UNITS: &[&str] = &[
    "mol/m3", "mol/L", "mmol/L", "kmol/m3", "g/L", "kg/m3", "mg/L",
];

const MOLAR_MASS: &[Entry] = &[
    ("g/mol", 1e-3, 0.0),
    ("kg/mol", 1.0, 0.0),
    ("kg/kmol", 1e-3, 0.0),
];
const MOLAR_MASS_UNITS: &[&str] = &["g/mol", "kg/mol", "kg/kmol"];

const MOLAR_ENERGY: &[Entry] = &[
    ("J/mol", 1.0, 0.0),
    ("kJ/mol", 1e3, 0.0),
    ("kcal/mol", KILOCALORIE, 0.0),
];
const MOLAR_ENERGY_UNITS: &[&str] = &["J/mol", "kJ/mol", "kcal/mol"];

const DURATION: &[Entry] = &[
    ("ms", 1e-3, 0.0),
    ("s", 1.0, 0.0),
    ("min", MINUTE, 0.0),
    ("h", HOUR, 0.0),
];
const DURATION_UNITS: &[&str] = &["ms", "s", "min", "h"];
/// Milliseconds per duration unit (exact integers, for [`parse_duration_ms`]).
const DURATION_MS: &[(&str, u128)] = &[("ms", 1), ("s", 1000), ("min", 60_000), ("h", 3_600_000)];

/// Rate-constant units: name, total order, scale to SI
/// (mol/m³)^(1−n)/s. L/mol = 10⁻³ m³/mol; mol/L = 10³ mol/m³.
const RATE_CONSTANT: &[(&str, u8, f64)] = &[
    ("mol/(m3*s)", 0, 1.0),
    ("mol/(L*s)", 0, 1e3),
    ("mol/(L*min)", 0, 1e3 / MINUTE),
    ("mol/(L*h)", 0, 1e3 / HOUR),
    ("1/s", 1, 1.0),
    ("1/min", 1, 1.0 / MINUTE),
    ("1/h", 1, 1.0 / HOUR),
    ("m3/(mol*s)", 2, 1.0),
    ("L/(mol*s)", 2, LITRE),
    ("L/(mol*min)", 2, LITRE / MINUTE),
    ("L/(mol*h)", 2, LITRE / HOUR),
    ("m3/(mol*h)", 2, 1.0 / HOUR),
    ("m3/(kmol*s)", 2, 1e-3),
];

/// The rate-constant "unit" that means SI, (mol/m³)^(1−n)/s, for any total
/// order `n` (the only one accepted for orders other than 0, 1 and 2).
pub const SI_RATE_CONSTANT: &str = "SI";

/// Tolerance when comparing a sum of configured orders with a unit's order
/// (sums such as 0.3 + 0.7 may round).
const ORDER_TOLERANCE: f64 = 1e-9;

fn order_matches(unit_order: f64, order: f64) -> bool {
    (unit_order - order).abs() <= ORDER_TOLERANCE
}

fn table(kind: Kind) -> &'static [Entry] {
    match kind {
        Kind::Length => LENGTH,
        Kind::Area => AREA,
        Kind::Volume => VOLUME,
        Kind::Flow => FLOW,
        Kind::Temperature => TEMPERATURE,
        Kind::Concentration => MOLAR_CONCENTRATION,
        Kind::MolarMass => MOLAR_MASS,
        Kind::MolarEnergy => MOLAR_ENERGY,
        Kind::Duration => DURATION,
        Kind::MassFlow => MASS_FLOW,
        Kind::Density => DENSITY,
    }
}

fn lookup(entries: &[Entry], unit: &str) -> Option<ToSi> {
    entries
        .iter()
        .find(|(name, _, _)| *name == unit)
        .map(|&(_, scale, offset)| ToSi { scale, offset })
}

/// The units accepted for a kind, in the order the documentation lists
/// them (aliases included).
pub fn valid_units(kind: Kind) -> &'static [&'static str] {
    match kind {
        Kind::Length => LENGTH_UNITS,
        Kind::Area => AREA_UNITS,
        Kind::Volume => VOLUME_UNITS,
        Kind::Flow => FLOW_UNITS,
        Kind::Temperature => TEMPERATURE_UNITS,
        Kind::Concentration => CONCENTRATION_UNITS,
        Kind::MolarMass => MOLAR_MASS_UNITS,
        Kind::MolarEnergy => MOLAR_ENERGY_UNITS,
        Kind::Duration => DURATION_UNITS,
        Kind::MassFlow => MASS_FLOW_UNITS,
        Kind::Density => DENSITY_UNITS,
    }
}

/// The conversion of `unit` (of `kind`) to SI. Units are matched exactly
/// (case and spaces matter: `L`, `US gal/min`). A mass-based concentration
/// unit is refused here ([`UnitError::NeedsMolarMass`]): use
/// [`concentration_to_si`] with the species' molar mass.
pub fn to_si(kind: Kind, unit: &str) -> Result<ToSi, UnitError> {
    if kind == Kind::Concentration {
        return concentration_to_si(unit, None);
    }
    lookup(table(kind), unit).ok_or_else(|| UnitError::Unknown {
        kind,
        unit: unit.to_string(),
    })
}

/// The conversion of a concentration unit to mol/m³. Mass-based units
/// (`g/L`, `kg/m3`, `mg/L`) need the species' molar mass in kg/mol.
pub fn concentration_to_si(unit: &str, molar_mass: Option<f64>) -> Result<ToSi, UnitError> {
    if let Some(conv) = lookup(MOLAR_CONCENTRATION, unit) {
        return Ok(conv);
    }
    match lookup(MASS_CONCENTRATION, unit) {
        Some(mass) => match molar_mass {
            None => Err(UnitError::NeedsMolarMass {
                unit: unit.to_string(),
            }),
            Some(m) if !(m.is_finite() && m > 0.0) => {
                Err(UnitError::BadMolarMass { molar_mass: m })
            }
            // kg/m³ ÷ kg/mol = mol/m³.
            Some(m) => Ok(ToSi::scale(mass.scale / m)),
        },
        None => Err(UnitError::Unknown {
            kind: Kind::Concentration,
            unit: unit.to_string(),
        }),
    }
}

/// The factor that converts a rate constant written in `unit` to SI,
/// (mol/m³)^(1−n)/s, for a rate law of total order `order` (the sum of its
/// reaction orders). The unit's own order must match: `1/s`, `1/min`, `1/h`
/// are first order; `m3/(mol*s)`, `L/(mol*s)`, … second order;
/// `mol/(m3*s)`, `mol/(L*s)`, … zero order. `"SI"` is accepted for any
/// order (factor 1) and is the only choice for other orders.
pub fn rate_constant_to_si(unit: &str, order: f64) -> Result<f64, UnitError> {
    if unit == SI_RATE_CONSTANT {
        return Ok(1.0);
    }
    match RATE_CONSTANT.iter().find(|(name, _, _)| *name == unit) {
        Some(&(_, unit_order, scale)) => {
            if order_matches(f64::from(unit_order), order) {
                Ok(scale)
            } else {
                Err(UnitError::OrderMismatch {
                    unit: unit.to_string(),
                    unit_order,
                    order,
                })
            }
        }
        None => Err(UnitError::UnknownRateConstant {
            unit: unit.to_string(),
            order,
        }),
    }
}

/// Every rate-constant unit with its total order (`"SI"` not included).
pub fn rate_constant_units() -> impl Iterator<Item = (&'static str, u8)> {
    RATE_CONSTANT.iter().map(|&(u, o, _)| (u, o))
}

/// The rate-constant units valid for a rate law of total order `order`:
/// those of that order (for 0, 1 and 2), then `"SI"`.
pub fn valid_rate_constant_units(order: f64) -> Vec<&'static str> {
    let mut units: Vec<&str> = RATE_CONSTANT
        .iter()
        .filter(|(_, o, _)| order_matches(f64::from(*o), order))
        .map(|(u, _, _)| *u)
        .collect();
    units.push(SI_RATE_CONSTANT);
    units
}

/// Parse a duration such as `"1 s"`, `"500 ms"`, `"10 min"`, `"2 h"`,
/// `"1.5 s"` into whole milliseconds. The number is a plain decimal (digits,
/// at most one point; no sign, no exponent), the space before the unit is
/// optional. The conversion is exact (decimal arithmetic on integers); a
/// duration that is not a whole number of milliseconds (`"0.5 ms"`) or does
/// not fit in `u64` is refused.
pub fn parse_duration_ms(text: &str) -> Result<u64, UnitError> {
    let err = |reason: &'static str| UnitError::Duration {
        text: text.to_string(),
        reason,
    };
    let trimmed = text.trim();
    let split = trimmed
        .find(|c: char| !(c.is_ascii_digit() || c == '.'))
        .unwrap_or(trimmed.len());
    let (number, unit) = trimmed.split_at(split);
    let unit = unit.trim_start();
    if number.is_empty() {
        return Err(if unit.starts_with('-') {
            err("must not be negative")
        } else {
            err("no number")
        });
    }
    if unit.is_empty() {
        return Err(err("no unit"));
    }
    let per_unit = DURATION_MS
        .iter()
        .find(|(u, _)| *u == unit)
        .map(|&(_, ms)| ms)
        .ok_or_else(|| err("unknown unit"))?;
    let (int_part, frac_part) = match number.split_once('.') {
        Some((i, f)) => (i, f),
        None => (number, ""),
    };
    if frac_part.contains('.') {
        return Err(err("malformed number"));
    }
    if int_part.is_empty() && frac_part.is_empty() {
        return Err(err("no number"));
    }
    // Significant digits beyond 30 cannot be represented below in u128;
    // trailing zeros of the fraction are harmless and dropped first.
    let frac_part = frac_part.trim_end_matches('0');
    if int_part.len() + frac_part.len() > 30 {
        return Err(err("too long"));
    }
    let digits = |s: &str| -> u128 {
        s.bytes()
            .fold(0u128, |acc, b| acc * 10 + u128::from(b - b'0'))
    };
    let mut denominator: u128 = 1;
    for _ in 0..frac_part.len() {
        denominator *= 10;
    }
    // value = (int·10^f + frac) / 10^f units; times per_unit ms.
    let numerator = (digits(int_part) * denominator + digits(frac_part))
        .checked_mul(per_unit)
        .ok_or_else(|| err("too large"))?;
    if numerator % denominator != 0 {
        return Err(err("not a whole number of milliseconds"));
    }
    u64::try_from(numerator / denominator).map_err(|_| err("too large"))
}

#[cfg(test)]
mod tests {
    use super::*;

    /// |a − b| ≤ tol·|b| (relative), or exact when b = 0.
    fn close(a: f64, b: f64, tol: f64) -> bool {
        (a - b).abs() <= tol * b.abs()
    }

    fn si(kind: Kind, unit: &str, raw: f64) -> f64 {
        to_si(kind, unit).unwrap().apply(raw)
    }

    #[test]
    fn lengths_areas_volumes_by_hand() {
        // 5 ft = 5·0.3048 = 1.524 m; 12 in = 0.3048 m (one foot).
        assert!(close(si(Kind::Length, "ft", 5.0), 1.524, 1e-15));
        assert!(close(si(Kind::Length, "in", 12.0), 0.3048, 1e-15));
        assert!(close(si(Kind::Length, "cm", 160.0), 1.6, 1e-15));
        assert!(close(si(Kind::Length, "mm", 250.0), 0.25, 1e-15));
        // 1 ft² = 0.3048² = 0.09290304 m²; 144 in² = 1 ft².
        assert!(close(si(Kind::Area, "ft2", 1.0), 0.3048 * 0.3048, 1e-15));
        assert!(close(si(Kind::Area, "in2", 144.0), 0.092_903_04, 1e-15));
        assert!(close(si(Kind::Area, "cm2", 50.0), 5e-3, 1e-15));
        // 100 US gal = 378.5411784 L = 0.3785411784 m³.
        assert!(close(
            si(Kind::Volume, "US gal", 100.0),
            0.378_541_178_4,
            1e-15
        ));
        // 1 ft³ = 0.3048³ m³ = 0.028316846592 m³ (12³ in³ = 1728·16.387064 cm³).
        assert!(close(
            si(Kind::Volume, "ft3", 1.0),
            0.028_316_846_592,
            1e-15
        ));
        assert!(close(
            si(Kind::Volume, "ft3", 1.0),
            1728.0 * 16.387_064e-6,
            1e-15
        ));
        assert!(close(si(Kind::Volume, "L", 2500.0), 2.5, 1e-15));
    }

    #[test]
    fn flows_by_hand() {
        // 1 US gal/min = 3.785411784e-3 m³ / 60 s = 6.30901964e-5 m³/s.
        assert!(close(
            si(Kind::Flow, "US gal/min", 1.0),
            6.309_019_64e-5,
            1e-15
        ));
        // 36 m³/h = 0.01 m³/s.
        assert!(close(si(Kind::Flow, "m3/h", 36.0), 0.01, 1e-15));
        // 60 L/min = 1 L/s = 1e-3 m³/s.
        assert!(close(si(Kind::Flow, "L/min", 60.0), 1e-3, 1e-15));
        assert!(close(si(Kind::Flow, "L/h", 3600.0), 1e-3, 1e-15));
        assert!(close(si(Kind::Flow, "m3/min", 3.0), 0.05, 1e-15));
        // 100 ft³/min = 2.8316846592 m³/min = 0.04719474432 m³/s.
        assert!(close(
            si(Kind::Flow, "ft3/min", 100.0),
            0.047_194_744_32,
            1e-15
        ));
        // 3600 ft³/h = 1 ft³/s.
        assert!(close(
            si(Kind::Flow, "ft3/h", 3600.0),
            0.028_316_846_592,
            1e-15
        ));
    }

    #[test]
    fn mass_flows_and_densities_by_hand() {
        // 3.6 t/h = 3600 kg / 3600 s = 1 kg/s; 24 t/d = 1 t/h.
        assert!(close(si(Kind::MassFlow, "t/h", 3.6), 1.0, 1e-15));
        assert!(close(si(Kind::MassFlow, "t/d", 24.0), 1.0 / 3.6, 1e-15));
        assert!(close(si(Kind::MassFlow, "kg/h", 7200.0), 2.0, 1e-15));
        assert!(close(si(Kind::MassFlow, "kg/min", 30.0), 0.5, 1e-15));
        // 3600 lb/h = 1 lb/s = 0.45359237 kg/s (NIST SP 811 B.8).
        assert!(close(
            si(Kind::MassFlow, "lb/h", 3600.0),
            0.453_592_37,
            1e-15
        ));
        assert!(close(
            si(Kind::MassFlow, "lb/min", 60.0),
            0.453_592_37,
            1e-15
        ));
        // 1 g/cm³ = 1 g/mL = 1 kg/L = 1000 kg/m³.
        assert!(close(si(Kind::Density, "g/cm3", 1.0), 1000.0, 1e-15));
        assert!(close(si(Kind::Density, "g/mL", 0.8), 800.0, 1e-15));
        assert!(close(si(Kind::Density, "kg/L", 1.05), 1050.0, 1e-15));
        // 1 lb/ft³ = 0.45359237 / 0.028316846592 = 16.018463373960138 kg/m³
        // (quotient of the two exact factors, worked out by hand and with
        // Python's fractions module); 1 lb/US gal = 119.82642731689663 kg/m³.
        assert!(close(
            si(Kind::Density, "lb/ft3", 1.0),
            16.018_463_373_960_14,
            1e-14
        ));
        assert!(close(
            si(Kind::Density, "lb/US gal", 1.0),
            119.826_427_316_896_6,
            1e-14
        ));
    }

    #[test]
    fn temperatures_by_hand() {
        assert!(close(si(Kind::Temperature, "degC", 25.0), 298.15, 1e-15));
        assert!(close(si(Kind::Temperature, "°C", 0.0), 273.15, 1e-15));
        assert_eq!(si(Kind::Temperature, "C", -273.15), 0.0);
        // (77 − 32)·5/9 = 25 → 298.15 K; 32 °F = 273.15 K; −40 °F = −40 °C.
        assert!(close(si(Kind::Temperature, "degF", 77.0), 298.15, 1e-15));
        assert!(close(si(Kind::Temperature, "°F", 32.0), 273.15, 1e-15));
        assert!(close(si(Kind::Temperature, "F", -40.0), 233.15, 1e-15));
        // 212 °F = 100 °C.
        assert!(close(si(Kind::Temperature, "degF", 212.0), 373.15, 1e-15));
        assert_eq!(si(Kind::Temperature, "K", 300.0), 300.0);
    }

    #[test]
    fn concentrations_and_molar_quantities_by_hand() {
        assert!(close(si(Kind::Concentration, "mol/L", 0.1), 100.0, 1e-15));
        assert!(close(si(Kind::Concentration, "mmol/L", 7.0), 7.0, 1e-15));
        assert!(close(si(Kind::Concentration, "kmol/m3", 0.2), 200.0, 1e-15));
        // 2 g/L NaOH, M = 39.997 g/mol: 2 kg/m³ / 0.039997 kg/mol
        // = 50.00375028127109… mol/m³.
        let m = si(Kind::MolarMass, "g/mol", 39.997);
        assert!(close(m, 0.039_997, 1e-15));
        let c = concentration_to_si("g/L", Some(m)).unwrap().apply(2.0);
        assert!(close(c, 50.003_750_281_271_09, 1e-13), "{c}");
        // 500 mg/L = 0.5 kg/m³; at 0.05 kg/mol that is 10 mol/m³.
        let c = concentration_to_si("mg/L", Some(0.05))
            .unwrap()
            .apply(500.0);
        assert!(close(c, 10.0, 1e-15));
        let c = concentration_to_si("kg/m3", Some(0.1)).unwrap().apply(3.0);
        assert!(close(c, 30.0, 1e-15));
        assert!(close(
            si(Kind::MolarMass, "kg/kmol", 18.015),
            0.018_015,
            1e-15
        ));
        // 41 kJ/mol = 41000 J/mol; 10 kcal/mol = 41840 J/mol (thermochemical).
        assert!(close(
            si(Kind::MolarEnergy, "kJ/mol", 41.0),
            41_000.0,
            1e-15
        ));
        assert!(close(
            si(Kind::MolarEnergy, "kcal/mol", 10.0),
            41_840.0,
            1e-15
        ));
        assert!(close(si(Kind::Duration, "min", 10.0), 600.0, 1e-15));
    }

    #[test]
    fn mass_concentration_needs_a_valid_molar_mass() {
        assert_eq!(
            to_si(Kind::Concentration, "g/L"),
            Err(UnitError::NeedsMolarMass { unit: "g/L".into() })
        );
        let e = concentration_to_si("g/L", None).unwrap_err().to_string();
        assert!(e.contains("molar_mass") && e.contains("mol/L"), "{e}");
        assert!(matches!(
            concentration_to_si("mg/L", Some(0.0)),
            Err(UnitError::BadMolarMass { .. })
        ));
        assert!(matches!(
            concentration_to_si("mg/L", Some(f64::NAN)),
            Err(UnitError::BadMolarMass { .. })
        ));
        // Amount-based units ignore the molar mass.
        assert_eq!(concentration_to_si("mol/L", Some(0.04)).unwrap().scale, 1e3);
    }

    #[test]
    fn rate_constants_by_hand() {
        // 0.11 L/(mol·s) = 0.11·10⁻³ m³/(mol·s) = 1.1e-4.
        let k = 0.11 * rate_constant_to_si("L/(mol*s)", 2.0).unwrap();
        assert!(close(k, 1.1e-4, 1e-15));
        // 6 1/min = 0.1 1/s; 36 1/h = 0.01 1/s.
        assert!(close(
            6.0 * rate_constant_to_si("1/min", 1.0).unwrap(),
            0.1,
            1e-15
        ));
        assert!(close(
            36.0 * rate_constant_to_si("1/h", 1.0).unwrap(),
            0.01,
            1e-15
        ));
        // 0.5 order + 0.5 order is first order.
        assert_eq!(rate_constant_to_si("1/s", 0.5 + 0.5), Ok(1.0));
        assert!(rate_constant_to_si("1/s", 0.3 + 0.7).is_ok());
        // 60 L/(mol·min) = 1 L/(mol·s) = 1e-3 m³/(mol·s).
        assert!(close(
            60.0 * rate_constant_to_si("L/(mol*min)", 2.0).unwrap(),
            1e-3,
            1e-15
        ));
        assert!(close(
            3600.0 * rate_constant_to_si("m3/(mol*h)", 2.0).unwrap(),
            1.0,
            1e-15
        ));
        assert!(close(
            rate_constant_to_si("m3/(kmol*s)", 2.0).unwrap(),
            1e-3,
            1e-15
        ));
        // 0.06 mol/(L·min) = 60 mol/(m³·min) = 1 mol/(m³·s).
        assert!(close(
            0.06 * rate_constant_to_si("mol/(L*min)", 0.0).unwrap(),
            1.0,
            1e-15
        ));
        assert!(close(
            3.6 * rate_constant_to_si("mol/(L*h)", 0.0).unwrap(),
            1.0,
            1e-15
        ));
        assert_eq!(
            valid_rate_constant_units(1.0),
            ["1/s", "1/min", "1/h", "SI"]
        );
        assert_eq!(valid_rate_constant_units(2.5), ["SI"]);
        // SI for any order, including fractional ones.
        assert_eq!(rate_constant_to_si("SI", 1.5), Ok(1.0));
        assert_eq!(rate_constant_to_si("SI", 3.0), Ok(1.0));
    }

    #[test]
    fn rate_constant_order_mismatch_lists_matching_units() {
        let e = rate_constant_to_si("1/s", 2.0).unwrap_err();
        assert_eq!(
            e,
            UnitError::OrderMismatch {
                unit: "1/s".into(),
                unit_order: 1,
                order: 2.0
            }
        );
        let msg = e.to_string();
        assert!(msg.contains("total order 1"), "{msg}");
        assert!(msg.contains("L/(mol*s)") && msg.contains("SI"), "{msg}");
        assert!(!msg.contains("1/min"), "{msg}");
        // Fractional order: only SI.
        let msg = rate_constant_to_si("L/(mol*s)", 1.5)
            .unwrap_err()
            .to_string();
        assert!(msg.ends_with("valid for total order 1.5: SI"), "{msg}");
        let msg = rate_constant_to_si("l/(mol*s)", 2.0)
            .unwrap_err()
            .to_string();
        assert!(msg.starts_with("unknown rate-constant unit"), "{msg}");
    }

    #[test]
    fn every_listed_unit_parses() {
        let kinds = [
            Kind::Length,
            Kind::Area,
            Kind::Volume,
            Kind::Flow,
            Kind::Temperature,
            Kind::MolarMass,
            Kind::MolarEnergy,
            Kind::Duration,
            Kind::MassFlow,
            Kind::Density,
        ];
        for kind in kinds {
            assert!(!valid_units(kind).is_empty());
            for unit in valid_units(kind) {
                let c = to_si(kind, unit).unwrap_or_else(|e| panic!("{unit}: {e}"));
                assert!(c.scale.is_finite() && c.scale > 0.0 && c.offset.is_finite());
            }
            assert_eq!(valid_units(kind).len(), table(kind).len());
        }
        for unit in valid_units(Kind::Concentration) {
            let c = concentration_to_si(unit, Some(0.04)).unwrap();
            assert!(c.scale > 0.0 && c.offset == 0.0);
        }
        for (unit, order) in rate_constant_units() {
            assert!(rate_constant_to_si(unit, f64::from(order)).unwrap() > 0.0);
        }
        // Each kind's SI unit is in its own list with factor 1.
        for kind in kinds {
            assert_eq!(to_si(kind, kind.si_unit()), Ok(ToSi::scale(1.0)));
        }
    }

    #[test]
    fn unknown_unit_lists_the_valid_ones() {
        let e = to_si(Kind::Flow, "m3/hr").unwrap_err();
        assert_eq!(
            e.to_string(),
            "unknown flow unit \"m3/hr\"; valid: m3/s, m3/h, m3/min, L/s, L/min, L/h, \
             US gal/min, ft3/min, ft3/h"
        );
        let e = to_si(Kind::Volume, "gal").unwrap_err().to_string();
        assert!(e.contains("US gal") && e.contains("ft3"), "{e}");
        // Units are case-sensitive: lower-case l is not a litre here.
        assert!(to_si(Kind::Volume, "l").is_err());
        let e = to_si(Kind::Concentration, "ppm").unwrap_err().to_string();
        assert!(e.contains("mol/L") && e.contains("g/L"), "{e}");
    }

    #[test]
    fn durations() {
        assert_eq!(parse_duration_ms("1 s"), Ok(1000));
        assert_eq!(parse_duration_ms("500 ms"), Ok(500));
        assert_eq!(parse_duration_ms("10 min"), Ok(600_000));
        assert_eq!(parse_duration_ms("2 h"), Ok(7_200_000));
        assert_eq!(parse_duration_ms("1.5 s"), Ok(1500));
        // 1.1 s is exactly 1100 ms (no binary rounding).
        assert_eq!(parse_duration_ms("1.1 s"), Ok(1100));
        assert_eq!(parse_duration_ms("0.001 s"), Ok(1));
        assert_eq!(
            parse_duration_ms("2.50 ms"),
            Err(UnitError::Duration {
                text: "2.50 ms".into(),
                reason: "not a whole number of milliseconds"
            })
        );
        assert_eq!(parse_duration_ms("30s"), Ok(30_000));
        assert_eq!(parse_duration_ms(" .5 min "), Ok(30_000));
        assert_eq!(parse_duration_ms("0 s"), Ok(0));
        for bad in [
            "", "s", "1", "1 sec", "-1 s", "1..0 s", "1.2.3 s", ". s", "1e3 ms", "1 S",
        ] {
            let e = parse_duration_ms(bad).unwrap_err().to_string();
            assert!(e.contains("ms, s, min, h"), "{bad}: {e}");
        }
        assert!(parse_duration_ms("99999999999999999999 h").is_err());
        assert!(parse_duration_ms("1234567890123456789012345678901234567890 ms").is_err());
        assert_eq!(parse_duration_ms("18446744073709551615 ms"), Ok(u64::MAX));
        assert!(parse_duration_ms("18446744073709551616 ms").is_err());
    }
}
