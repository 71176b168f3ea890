//! The plant configuration reader: `plant.toml` (format in `docs/config.md`)
//! → a checked [`Plant`] in SI units.
//!
//! The file is parsed into a TOML tree that keeps the byte span of every key
//! and value; the reader then walks it table by table. Every way the file can
//! be wrong is a [`ConfigError`] naming the file, the line, the key (written
//! `[section] key.subkey`) and what would be valid: a TOML syntax error, an
//! unknown key (anywhere: the valid keys of that table are listed), a missing
//! key, a value of the wrong type, an unknown unit or species, a value out of
//! range, a limit exceeded, or what the kernel's geometry check refuses.
//!
//! Nothing here panics on any input: numbers are checked to be finite, all
//! indexing is checked, and the vessel shape is validated by the kernel's own
//! [`holdup_kernel::Geometry::new`] before it is used.

use std::borrow::Cow;
use std::fmt;
use std::path::{Path, PathBuf};

use holdup_kernel::geometry::STRAPPING_CAPACITY;
use holdup_kernel::{Bottom, Geometry, Method, Shape};
use toml::de::{DeTable, DeValue};
use toml::Spanned;

use crate::plant::{
    limits, Analyser, BiasMeter, Conditioning, Estimator, Initial, Inlet, Interpolation, Kinetics,
    LogFormat, LogOptions, Outlet, OutletKind, Plant, Reaction, ScalarKind, Signal, Species,
    TagOptions, TimeFormat,
};
use crate::units::{self, Kind, ToSi, UnitError};

/// A configuration error: where (file, line, key) and what, with what would
/// be valid.
///
/// Displayed as `{path}:{line}: {key}: {message}`, e.g.
/// `plant.toml:14: [vessel] diameter: must be positive, got -1.6 m`. Keys are
/// written `[section] key` for tables and `[[section]] key` for arrays of
/// tables, with `.` into inline tables (`[[inlet]] flow.unit`). `line` is
/// `None` only when there is no line to point at (a file that cannot be
/// read, a required section that is missing).
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct ConfigError {
    /// The configuration file.
    pub path: PathBuf,
    /// 1-based line, if the error has a place in the file.
    pub line: Option<usize>,
    /// The key concerned (empty for an unreadable file).
    pub key: String,
    /// What is wrong and what would be valid.
    pub message: String,
}

impl fmt::Display for ConfigError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "{}", self.path.display())?;
        if let Some(line) = self.line {
            write!(f, ":{line}")?;
        }
        if !self.key.is_empty() {
            write!(f, ": {}", self.key)?;
        }
        write!(f, ": {}", self.message)
    }
}

impl std::error::Error for ConfigError {}

/// Read and check the configuration file at `path`.
pub fn load(path: &Path) -> Result<Plant, ConfigError> {
    let text = std::fs::read_to_string(path).map_err(|e| ConfigError {
        path: path.to_path_buf(),
        line: None,
        key: String::new(),
        message: format!("cannot read the configuration file: {e}"),
    })?;
    parse(&text, path)
}

/// Check the configuration `text`; `path` is named in errors and stored in
/// the result.
pub fn parse(text: &str, path: &Path) -> Result<Plant, ConfigError> {
    let ctx = Ctx { path, text };
    let doc = DeTable::parse(text).map_err(|e| {
        let at = e.span().map_or(0, |s| s.start);
        ctx.error(Some(at), "TOML syntax", e.message().to_string())
    })?;
    let root = Tbl {
        ctx: &ctx,
        table: doc.get_ref(),
        at: 0,
        section: String::new(),
        prefix: String::new(),
    };
    read_plant(&root)
}

// ---------------------------------------------------------------------------
// Key sets.

const TOP_KEYS: &[&str] = &[
    "plant",
    "vessel",
    "species",
    "inlet",
    "outlet",
    "temperature",
    "level",
    "analyser",
    "reaction",
    "initial",
    "log",
    "tags",
    "estimator",
];
const PLANT_KEYS: &[&str] = &["name", "tick", "scalar", "method", "min_holdup"];
const VESSEL_KEYS: &[&str] = &[
    "shape",
    "diameter",
    "height",
    "length",
    "width",
    "bottom",
    "bottom_depth",
    "strapping",
];
const STRAPPING_KEYS: &[&str] = &["level_unit", "volume_unit", "points"];
const SPECIES_KEYS: &[&str] = &["name", "molar_mass"];
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
const REACTION_KEYS: &[&str] = &[
    "name",
    "stoichiometry",
    "orders",
    "rate_constant",
    "activation_energy",
    "reference_temperature",
    "reverse",
];
const ANALYSER_KEYS: &[&str] = &["species", "reading", "sigma", "cycle"];
const REVERSE_KEYS: &[&str] = &["rate_constant", "activation_energy", "orders"];
const INITIAL_KEYS: &[&str] = &["volume", "level", "concentrations", "temperature"];
const LOG_KEYS: &[&str] = &["format", "time", "time_column", "max_age"];
const TAG_KEYS: &[&str] = &[
    "interpolation",
    "max_age",
    "min",
    "max",
    "max_rate",
    "stuck",
    "stuck_tolerance",
    "hold",
];
const RATE_CONSTANT_KEYS: &[&str] = &["value", "unit"];
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

/// Shortest and longest tick, ms.
const TICK_RANGE_MS: (u64, u64) = (1, 3_600_000);
/// Default `[log] max_age`: 10 min.
const DEFAULT_MAX_AGE_MS: u64 = 600_000;
/// Default reference temperature when no activation energy is given, K.
const DEFAULT_REFERENCE_TEMPERATURE: f64 = 298.15;
/// Largest reaction order the kernel supports.
const MAX_ORDER: f64 = 4.0;

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
const DEFAULT_CUSUM_H: f64 = 5.0;

// ---------------------------------------------------------------------------
// Context, tables and values.

type R<T> = Result<T, ConfigError>;
type Value<'a> = Spanned<DeValue<'a>>;
type Key<'a> = Spanned<Cow<'a, str>>;

/// The file being read: its path and text (for line numbers).
struct Ctx<'a> {
    path: &'a Path,
    text: &'a str,
}

impl Ctx<'_> {
    /// 1-based line of a byte offset.
    fn line(&self, offset: usize) -> usize {
        let bytes = self.text.as_bytes();
        let end = offset.min(bytes.len());
        bytes
            .get(..end)
            .map_or(0, |b| b.iter().filter(|&&c| c == b'\n').count())
            + 1
    }

    fn error(
        &self,
        at: Option<usize>,
        key: impl Into<String>,
        message: impl Into<String>,
    ) -> ConfigError {
        ConfigError {
            path: self.path.to_path_buf(),
            line: at.map(|a| self.line(a)),
            key: key.into(),
            message: message.into(),
        }
    }
}

/// A table of the file with the name it is reported under.
#[derive(Clone)]
struct Tbl<'a> {
    ctx: &'a Ctx<'a>,
    table: &'a DeTable<'a>,
    /// Byte offset of the table (its header, or its inline `{`).
    at: usize,
    /// `[vessel]`, `[[inlet]]`, `[tags."FI-101"]`, or empty at the top.
    section: String,
    /// Dotted path inside the section (`flow`, `feed.NaOH`), or empty.
    prefix: String,
}

/// Comma-separated list.
fn list<S: AsRef<str>>(items: &[S]) -> String {
    let v: Vec<&str> = items.iter().map(AsRef::as_ref).collect();
    v.join(", ")
}

/// What the TOML value is, for "expected …, got …" messages.
fn type_name(v: &DeValue<'_>) -> &'static str {
    match v {
        DeValue::String(_) => "a string",
        DeValue::Integer(_) => "an integer",
        DeValue::Float(_) => "a float",
        DeValue::Boolean(_) => "a boolean",
        DeValue::Datetime(_) => "a date-time",
        DeValue::Array(_) => "an array",
        DeValue::Table(_) => "a table",
    }
}

/// A TOML number as a finite `f64`.
fn number_of(v: &DeValue<'_>) -> Result<f64, String> {
    let x = match v {
        DeValue::Integer(i) => i64::from_str_radix(i.as_str(), i.radix())
            .map(|n| n as f64)
            .map_err(|_| format!("integer {i} is out of range"))?,
        DeValue::Float(f) => f
            .as_str()
            .parse::<f64>()
            .map_err(|_| format!("cannot read the number {f}"))?,
        other => return Err(format!("expected a number, got {}", type_name(other))),
    };
    if x.is_finite() {
        Ok(x)
    } else {
        Err(format!("must be a finite number, got {x}"))
    }
}

impl<'a> Tbl<'a> {
    /// Reported name of `key` in this table.
    fn name(&self, key: &str) -> String {
        match (self.section.is_empty(), self.prefix.is_empty()) {
            (true, true) => key.to_string(),
            (true, false) => format!("{}.{key}", self.prefix),
            (false, true) => format!("{} {key}", self.section),
            (false, false) => format!("{} {}.{key}", self.section, self.prefix),
        }
    }

    /// Reported name of this table itself.
    fn own_name(&self) -> String {
        match (self.section.is_empty(), self.prefix.is_empty()) {
            (_, true) => self.section.clone(),
            (true, false) => self.prefix.clone(),
            (false, false) => format!("{} {}", self.section, self.prefix),
        }
    }

    /// Entries in the order they appear in the file.
    fn entries(&self) -> Vec<(&'a Key<'a>, &'a Value<'a>)> {
        let mut v: Vec<_> = self.table.iter().collect();
        v.sort_by_key(|(k, _)| k.span().start);
        v
    }

    fn get(&self, key: &str) -> Option<&'a Value<'a>> {
        self.table.get(key)
    }

    /// Byte offset of a key of this table (of the table if absent).
    fn key_at(&self, key: &str) -> usize {
        self.table
            .get_key_value(key)
            .map_or(self.at, |(k, _)| k.span().start)
    }

    /// Error about `key`, at byte offset `at`.
    fn err(&self, at: usize, key: &str, message: impl Into<String>) -> ConfigError {
        self.ctx.error(Some(at), self.name(key), message)
    }

    /// Error about this table as a whole, at its header.
    fn err_here(&self, message: impl Into<String>) -> ConfigError {
        self.ctx.error(Some(self.at), self.own_name(), message)
    }

    /// A required key is missing.
    fn missing(&self, key: &str, hint: &str) -> ConfigError {
        let message = if hint.is_empty() {
            "missing (required)".to_string()
        } else {
            format!("missing (required); {hint}")
        };
        self.err(self.at, key, message)
    }

    /// Refuse any key not in `allowed` (the first one in file order).
    fn check_keys(&self, allowed: &[&str]) -> R<()> {
        for (k, _) in self.entries() {
            let key: &str = k.get_ref();
            if !allowed.contains(&key) {
                let what = if self.section.is_empty() && self.prefix.is_empty() {
                    "unknown section or key; valid at the top level"
                } else {
                    "unknown key; valid keys"
                };
                return Err(self.err(k.span().start, key, format!("{what}: {}", list(allowed))));
            }
        }
        Ok(())
    }

    /// Refuse the keys present that `used` does not contain (keys that are
    /// valid in general but not with this shape, kind, …).
    fn check_unused(&self, used: &[&str], why: &str) -> R<()> {
        for (k, _) in self.entries() {
            let key: &str = k.get_ref();
            if !used.contains(&key) {
                return Err(self.err(
                    k.span().start,
                    key,
                    format!("not used by {why}; keys of {why}: {}", list(used)),
                ));
            }
        }
        Ok(())
    }

    /// The sub-table at `key` (an inline table or a `[a.b]` table).
    fn child(&self, key: &str, v: &'a Value<'a>, what: &str) -> R<Tbl<'a>> {
        match v.get_ref() {
            DeValue::Table(t) => Ok(Tbl {
                ctx: self.ctx,
                table: t,
                at: v.span().start,
                section: self.section.clone(),
                prefix: if self.prefix.is_empty() {
                    key.to_string()
                } else {
                    format!("{}.{key}", self.prefix)
                },
            }),
            other => Err(self.err(
                v.span().start,
                key,
                format!("expected {what}, got {}", type_name(other)),
            )),
        }
    }

    fn opt_child(&self, key: &str, what: &str) -> R<Option<Tbl<'a>>> {
        self.get(key).map(|v| self.child(key, v, what)).transpose()
    }

    /// An optional string, with its offset.
    fn string(&self, key: &str) -> R<Option<(&'a str, usize)>> {
        match self.get(key) {
            None => Ok(None),
            Some(v) => match v.get_ref() {
                DeValue::String(s) => Ok(Some((s.as_ref(), v.span().start))),
                other => Err(self.err(
                    v.span().start,
                    key,
                    format!("expected a string, got {}", type_name(other)),
                )),
            },
        }
    }

    /// A required, non-empty string.
    fn name_string(&self, key: &str, hint: &str) -> R<(&'a str, usize)> {
        let (s, at) = self.string(key)?.ok_or_else(|| self.missing(key, hint))?;
        if s.trim().is_empty() {
            return Err(self.err(at, key, "must not be empty"));
        }
        Ok((s, at))
    }

    /// An optional finite number, with its offset.
    fn number(&self, key: &str) -> R<Option<(f64, usize)>> {
        match self.get(key) {
            None => Ok(None),
            Some(v) => number_of(v.get_ref())
                .map(|x| Some((x, v.span().start)))
                .map_err(|m| self.err(v.span().start, key, m)),
        }
    }

    /// An optional string that must be one of `options`.
    fn choice<T: Copy>(&self, key: &str, options: &[(&str, T)]) -> R<Option<(T, usize)>> {
        let Some((s, at)) = self.string(key)? else {
            return Ok(None);
        };
        match options.iter().find(|(name, _)| *name == s) {
            Some(&(_, t)) => Ok(Some((t, at))),
            None => {
                let names: Vec<String> = options.iter().map(|(n, _)| format!("\"{n}\"")).collect();
                Err(self.err(
                    at,
                    key,
                    format!("unknown value \"{s}\"; valid: {}", list(&names)),
                ))
            }
        }
    }

    /// An optional duration string, ms.
    fn duration(&self, key: &str) -> R<Option<(u64, usize)>> {
        let Some((s, at)) = self.string(key)? else {
            return Ok(None);
        };
        units::parse_duration_ms(s)
            .map(|ms| Some((ms, at)))
            .map_err(|e| self.err(at, key, e.to_string()))
    }

    /// An optional constant quantity `{ value, unit }`.
    fn quantity(&self, key: &str, conv: Conv) -> R<Option<Qty>> {
        match self.signal(key, conv, TagMode::Never)? {
            None => Ok(None),
            Some(Source::Const(q)) => Ok(Some(q)),
            // `TagMode::Never` refuses a tag.
            Some(Source::Tag(t)) => Err(self.err(t.at, key, "cannot be read from the log")),
        }
    }

    fn req_quantity(&self, key: &str, conv: Conv, hint: &str) -> R<Qty> {
        self.quantity(key, conv)?
            .ok_or_else(|| self.missing(key, hint))
    }

    /// An optional quantity or tag at `key`.
    fn signal(&self, key: &str, conv: Conv, mode: TagMode) -> R<Option<Source>> {
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

    /// A table keyed by species name: `(species index, key offset, value)`
    /// in file order.
    fn species_map(&self, species: &[Species]) -> R<Vec<(usize, &'a str, usize, &'a Value<'a>)>> {
        let mut out = Vec::new();
        for (k, v) in self.entries() {
            let name: &str = k.get_ref();
            let index = species.iter().position(|s| s.name == name).ok_or_else(|| {
                let names: Vec<&str> = species.iter().map(|s| s.name.as_str()).collect();
                self.err(
                    k.span().start,
                    name,
                    format!(
                        "unknown species \"{name}\"; defined species: {}",
                        list(&names)
                    ),
                )
            })?;
            out.push((index, name, k.span().start, v));
        }
        Ok(out)
    }
}

/// How a quantity's unit converts to SI.
#[derive(Clone, Copy)]
enum Conv {
    /// A unit of this kind.
    Kind(Kind),
    /// A concentration of a species with this molar mass (kg/mol), if known.
    Concentration(Option<f64>),
}

impl Conv {
    fn to_si(self, unit: &str) -> Result<ToSi, UnitError> {
        match self {
            Conv::Kind(k) => units::to_si(k, unit),
            Conv::Concentration(m) => units::concentration_to_si(unit, m),
        }
    }

    fn kind(self) -> Kind {
        match self {
            Conv::Kind(k) => k,
            Conv::Concentration(_) => Kind::Concentration,
        }
    }

    fn valid(self) -> &'static [&'static str] {
        units::valid_units(self.kind())
    }

    fn example(self) -> &'static str {
        self.valid().first().copied().unwrap_or("")
    }
}

/// Whether a quantity may come from the log.
#[derive(Clone, Copy, PartialEq, Eq)]
enum TagMode {
    /// A constant only.
    Never,
    /// A constant or a tag.
    Allowed,
    /// A tag only.
    Only,
}

/// A constant quantity as written and in SI.
#[derive(Clone, Debug)]
struct Qty {
    /// Reported key (`[vessel] diameter`).
    key: String,
    /// Offset of its value.
    at: usize,
    /// The number as written.
    raw: f64,
    /// The unit as written.
    unit: String,
    /// SI unit name (for messages).
    si_unit: &'static str,
    /// Value in SI.
    si: f64,
}

impl Qty {
    /// `-1.6 m`, or `3 ft (= 0.9144 m)` when not in SI.
    fn shown(&self) -> String {
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

    fn fail(&self, ctx: &Ctx<'_>, requirement: &str) -> ConfigError {
        ctx.error(
            Some(self.at),
            self.key.clone(),
            format!("{requirement}, got {}", self.shown()),
        )
    }

    fn positive(self, ctx: &Ctx<'_>) -> R<Self> {
        if self.si > 0.0 {
            Ok(self)
        } else {
            Err(self.fail(ctx, "must be positive"))
        }
    }

    fn non_negative(self, ctx: &Ctx<'_>) -> R<Self> {
        if self.si >= 0.0 {
            Ok(self)
        } else {
            Err(self.fail(ctx, "must not be negative"))
        }
    }

    /// Within `[0, top]` (SI), `what` naming the top.
    fn within(self, ctx: &Ctx<'_>, top: f64, what: &str) -> R<Self> {
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
    fn kelvin(self, ctx: &Ctx<'_>) -> R<Self> {
        if self.si > 0.0 {
            Ok(self)
        } else {
            Err(self.fail(ctx, "must be above absolute zero"))
        }
    }
}

/// `x` rounded to 12 significant digits for messages (`0.9144`, not
/// `0.9144000000000001`).
fn short(x: f64) -> String {
    format!("{:.11e}", x)
        .parse::<f64>()
        .map_or_else(|_| x.to_string(), |r| r.to_string())
}

/// A log tag with its conversion.
#[derive(Clone, Debug)]
struct TagRef {
    tag: String,
    unit: String,
    conv: ToSi,
    at: usize,
}

/// A quantity that is a constant or read from the log.
#[derive(Clone, Debug)]
enum Source {
    Const(Qty),
    Tag(TagRef),
}

/// Read `{ value, unit }` / `{ tag, unit }` from table `t`.
fn source_of(t: &Tbl<'_>, conv: Conv, mode: TagMode) -> R<Source> {
    let allowed: &[&str] = match mode {
        TagMode::Never => &["value", "unit"],
        TagMode::Allowed => &["value", "tag", "unit"],
        TagMode::Only => &["tag", "unit"],
    };
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
struct TagUses {
    uses: Vec<(usize, String, bool)>,
}

impl TagUses {
    /// Turn a source into a signal, recording a tag use.
    fn signal(&mut self, source: Source, flow: bool) -> Signal {
        match source {
            Source::Const(q) => Signal::Constant(q.si),
            Source::Tag(t) => {
                self.uses.push((t.at, t.tag.clone(), flow));
                Signal::Tag {
                    tag: t.tag,
                    scale: t.conv.scale,
                    offset: t.conv.offset,
                    unit: t.unit,
                }
            }
        }
    }

    /// Distinct tags in first-use order, with whether any use is a flow.
    fn distinct(mut self) -> Vec<(String, bool)> {
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

// ---------------------------------------------------------------------------
// Sections.

/// The top-level table named `key`, if present.
fn section<'a>(root: &Tbl<'a>, key: &str) -> R<Option<Tbl<'a>>> {
    let Some(v) = root.get(key) else {
        return Ok(None);
    };
    match v.get_ref() {
        DeValue::Table(t) => Ok(Some(Tbl {
            ctx: root.ctx,
            table: t,
            at: v.span().start,
            section: format!("[{key}]"),
            prefix: String::new(),
        })),
        other => Err(root.err(
            v.span().start,
            key,
            format!("expected a table [{key}], got {}", type_name(other)),
        )),
    }
}

fn required_section<'a>(root: &Tbl<'a>, key: &str, hint: &str) -> R<Tbl<'a>> {
    section(root, key)?.ok_or_else(|| {
        root.ctx.error(
            None,
            format!("[{key}]"),
            format!("missing section (required); {hint}"),
        )
    })
}

/// The array of tables `[[key]]` (empty if absent), at most `limit` long.
fn array_section<'a>(root: &Tbl<'a>, key: &str, limit: usize, limit_name: &str) -> R<Vec<Tbl<'a>>> {
    let Some(v) = root.get(key) else {
        return Ok(Vec::new());
    };
    let label = format!("[[{key}]]");
    let DeValue::Array(items) = v.get_ref() else {
        return Err(root.err(
            v.span().start,
            key,
            format!(
                "expected an array of tables: write {label} before each entry, got {}",
                type_name(v.get_ref())
            ),
        ));
    };
    let mut out = Vec::new();
    for (i, item) in items.iter().enumerate() {
        let DeValue::Table(t) = item.get_ref() else {
            return Err(root.ctx.error(
                Some(item.span().start),
                label,
                format!("expected a table, got {}", type_name(item.get_ref())),
            ));
        };
        if i >= limit {
            return Err(root.ctx.error(
                Some(item.span().start),
                label,
                format!("too many entries: at most {limit} ({limit_name})"),
            ));
        }
        out.push(Tbl {
            ctx: root.ctx,
            table: t,
            at: item.span().start,
            section: label.clone(),
            prefix: String::new(),
        });
    }
    Ok(out)
}

/// Refuse a name already used in the same list.
fn unique_name(
    t: &Tbl<'_>,
    name: &str,
    at: usize,
    seen: &mut Vec<(String, usize)>,
    what: &str,
) -> R<()> {
    if let Some((_, first)) = seen.iter().find(|(n, _)| n == name) {
        return Err(t.err(
            at,
            "name",
            format!(
                "duplicate {what} name \"{name}\" (first defined at line {})",
                t.ctx.line(*first)
            ),
        ));
    }
    seen.push((name.to_string(), at));
    Ok(())
}

fn read_plant(root: &Tbl<'_>) -> R<Plant> {
    let ctx = root.ctx;
    root.check_keys(TOP_KEYS)?;

    // [plant]
    let p = required_section(root, "plant", "it holds name and tick")?;
    p.check_keys(PLANT_KEYS)?;
    let (name, _) = p.name_string("name", "a free-text name for reports")?;
    let (tick, tick_at) = p
        .duration("tick")?
        .ok_or_else(|| p.missing("tick", "e.g. tick = \"1 s\" (1 ms .. 1 h)"))?;
    if tick < TICK_RANGE_MS.0 || tick > TICK_RANGE_MS.1 {
        return Err(p.err(
            tick_at,
            "tick",
            format!("must be between 1 ms and 1 h, got {tick} ms"),
        ));
    }
    // Within 1 ..= 3 600 000 it fits in u32.
    let tick_ms = u32::try_from(tick).map_err(|_| p.err(tick_at, "tick", "out of range"))?;
    let scalar = p
        .choice(
            "scalar",
            &[("f32", ScalarKind::F32), ("f64", ScalarKind::F64)],
        )?
        .map_or(ScalarKind::F32, |(s, _)| s);
    let method = p
        .choice(
            "method",
            &[
                ("auto", Method::Auto),
                ("exact", Method::Exact),
                ("mprk22", Method::Mprk22),
                ("rk4-reference", Method::ReferenceRk4),
                ("euler-reference", Method::ReferenceEuler),
            ],
        )?
        .map_or(Method::Auto, |(m, _)| m);
    let min_holdup = p.quantity("min_holdup", Conv::Kind(Kind::Volume))?;

    // [vessel]
    let v = required_section(root, "vessel", "it holds the shape and size")?;
    let (shape, geometry) = read_vessel(&v)?;
    let capacity = geometry.max_volume();
    let top = geometry.max_level();
    let min_holdup = match min_holdup {
        None => 0.01 * capacity,
        Some(q) => {
            if q.si >= 0.0 && q.si < capacity {
                q.si
            } else {
                return Err(q.fail(
                    ctx,
                    &format!(
                        "must be at least 0 and below the vessel capacity {} m3",
                        short(capacity)
                    ),
                ));
            }
        }
    };

    // [[species]]
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

    let mut tags = TagUses::default();

    // [[inlet]]
    let mut inlets = Vec::new();
    let mut seen = Vec::new();
    for t in array_section(root, "inlet", limits::INLETS, "plant::limits::INLETS")? {
        t.check_keys(INLET_KEYS)?;
        let (name, at) = t.name_string("name", "a name for reports")?;
        unique_name(&t, name, at, &mut seen, "inlet")?;
        let flow = t
            .signal("flow", Conv::Kind(Kind::Flow), TagMode::Allowed)?
            .ok_or_else(|| {
                t.missing(
                    "flow",
                    "{ tag = \"...\", unit = \"m3/h\" } or { value, unit }",
                )
            })?;
        let flow = non_negative_source(ctx, flow)?;
        let flow = tags.signal(flow, true);
        let mut feed = vec![Signal::Constant(0.0); species.len()];
        if let Some(f) = t.opt_child("feed", "a table of species = concentration")? {
            for (index, sname, _, value) in f.species_map(&species)? {
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
                let src = non_negative_source(ctx, src)?;
                if let Some(slot) = feed.get_mut(index) {
                    *slot = tags.signal(src, false);
                }
            }
        }
        inlets.push(Inlet {
            name: name.to_string(),
            flow,
            feed,
        });
    }
    if inlets.is_empty() {
        return Err(ctx.error(
            None,
            "[[inlet]]",
            format!(
                "missing: at least 1 inlet is required (at most {})",
                limits::INLETS
            ),
        ));
    }

    // [[outlet]]
    let mut outlets = Vec::new();
    let mut seen = Vec::new();
    for t in array_section(root, "outlet", limits::OUTLETS, "plant::limits::OUTLETS")? {
        t.check_keys(OUTLET_KEYS)?;
        let (name, at) = t.name_string("name", "a name for reports")?;
        unique_name(&t, name, at, &mut seen, "outlet")?;
        let kind = read_outlet(&t, top, &mut tags)?;
        outlets.push(Outlet {
            name: name.to_string(),
            kind,
        });
    }

    // [temperature]
    let temp = required_section(
        root,
        "temperature",
        "the vessel temperature: tag = \"...\", unit = \"degC\" (or value = ..., unit = ...)",
    )?;
    let temperature = match source_of(&temp, Conv::Kind(Kind::Temperature), TagMode::Allowed)? {
        Source::Const(q) => Source::Const(q.kelvin(ctx)?),
        s => s,
    };
    let temperature = tags.signal(temperature, false);

    // [level]
    let level = match section(root, "level")? {
        None => None,
        Some(l) => Some(tags.signal(
            source_of(&l, Conv::Kind(Kind::Length), TagMode::Only)?,
            false,
        )),
    };

    // [[analyser]]
    let mut analysers: Vec<Analyser> = Vec::new();
    for t in array_section(root, "analyser", limits::SPECIES, "plant::limits::SPECIES")? {
        let a = read_analyser(&t, &species, u64::from(tick_ms), &mut tags)?;
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

    // [[reaction]]
    let mut reactions = Vec::new();
    let mut seen = Vec::new();
    for t in array_section(
        root,
        "reaction",
        limits::REACTIONS,
        "plant::limits::REACTIONS",
    )? {
        reactions.push(read_reaction(&t, &species, &mut seen)?);
    }

    // [initial]
    let i = required_section(root, "initial", "the initial volume or level")?;
    let initial = read_initial(&i, &geometry, &species)?;

    // [log]
    let log = match section(root, "log")? {
        None => LogOptions {
            format: LogFormat::Auto,
            time: TimeFormat::Auto,
            time_column: None,
            max_age_ms: DEFAULT_MAX_AGE_MS,
        },
        Some(l) => read_log(&l)?,
    };

    // [tags."…"]
    let used = tags.distinct();
    let mut tag_options: Vec<TagOptions> = used
        .iter()
        .map(|(tag, flow)| TagOptions {
            tag: tag.clone(),
            interpolation: Interpolation::Linear,
            max_age_ms: log.max_age_ms,
            flow: *flow,
            conditioning: Conditioning::default(),
        })
        .collect();
    if let Some(ts) = section(root, "tags")? {
        for (k, value) in ts.entries() {
            let tag: &str = k.get_ref();
            let label = format!("[tags.\"{tag}\"]");
            let DeValue::Table(table) = value.get_ref() else {
                return Err(ctx.error(
                    Some(value.span().start),
                    label,
                    format!(
                        "expected a table of tag options ({}), got {}",
                        list(TAG_KEYS),
                        type_name(value.get_ref())
                    ),
                ));
            };
            let t = Tbl {
                ctx,
                table,
                at: value.span().start,
                section: label,
                prefix: String::new(),
            };
            let Some(options) = tag_options.iter_mut().find(|o| o.tag == tag) else {
                let names: Vec<&str> = used.iter().map(|(t, _)| t.as_str()).collect();
                return Err(t.err_here(format!(
                    "tag {tag} is configured but not used by any signal; used tags: {}",
                    if names.is_empty() {
                        "none".to_string()
                    } else {
                        list(&names)
                    }
                )));
            };
            t.check_keys(TAG_KEYS)?;
            if let Some((i, _)) = t.choice(
                "interpolation",
                &[
                    ("linear", Interpolation::Linear),
                    ("hold", Interpolation::Hold),
                ],
            )? {
                options.interpolation = i;
            }
            if let Some((ms, at)) = t.duration("max_age")? {
                if ms == 0 {
                    return Err(t.err(at, "max_age", "must be longer than 0 ms"));
                }
                options.max_age_ms = ms;
            }
            options.conditioning = read_conditioning(&t)?;
        }
    }

    // [estimator]
    let estimator = match section(root, "estimator")? {
        None => None,
        Some(e) => Some(read_estimator(
            &e,
            &EstimatorContext {
                tick_ms: u64::from(tick_ms),
                capacity,
                has_level: level.is_some(),
                species: &species,
                inlets: &inlets,
                outlets: &outlets,
                initial: &initial,
            },
        )?),
    };

    Ok(Plant {
        path: ctx.path.to_path_buf(),
        name: name.to_string(),
        tick_ms,
        scalar,
        method,
        min_holdup,
        shape,
        species,
        inlets,
        outlets,
        temperature,
        level,
        analysers,
        reactions,
        initial,
        tags: tag_options,
        log,
        estimator,
    })
}

/// The conditioning keys of `[tags."…"]`: numbers in the tag's own unit.
fn read_conditioning(t: &Tbl<'_>) -> R<Conditioning> {
    let mut c = Conditioning {
        min: t.number("min")?.map(|(x, _)| x),
        max: t.number("max")?.map(|(x, _)| x),
        ..Conditioning::default()
    };
    if let (Some(lo), Some(hi)) = (c.min, c.max) {
        if hi <= lo {
            return Err(t.err(
                t.key_at("max"),
                "max",
                format!("must be above min ({lo}), got {hi}"),
            ));
        }
    }
    if let Some((r, at)) = t.number("max_rate")? {
        if r <= 0.0 {
            return Err(t.err(at, "max_rate", format!("must be positive, got {r}")));
        }
        c.max_rate_per_s = Some(r);
    }
    if let Some((ms, at)) = t.duration("stuck")? {
        if ms == 0 {
            return Err(t.err(at, "stuck", "must be longer than 0 ms"));
        }
        c.stuck_ms = Some(ms);
    }
    if let Some((x, at)) = t.number("stuck_tolerance")? {
        if x < 0.0 {
            return Err(t.err(
                at,
                "stuck_tolerance",
                format!("must not be negative, got {x}"),
            ));
        }
        if c.stuck_ms.is_none() {
            return Err(t.err(at, "stuck_tolerance", "needs stuck (the flat duration)"));
        }
        c.stuck_tolerance = x;
    }
    if let Some((ms, _)) = t.duration("hold")? {
        c.hold_ms = ms;
    }
    Ok(c)
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

/// A constant must not be negative (flows, concentrations)./// A constant must not be negative (flows, concentrations).
fn non_negative_source(ctx: &Ctx<'_>, s: Source) -> R<Source> {
    match s {
        Source::Const(q) => Ok(Source::Const(q.non_negative(ctx)?)),
        tag => Ok(tag),
    }
}

/// `[vessel]` → shape (SI) and its validated geometry.
fn read_vessel(v: &Tbl<'_>) -> R<(Shape<f64>, Geometry<f64>)> {
    let ctx = v.ctx;
    v.check_keys(VESSEL_KEYS)?;
    #[derive(Clone, Copy, PartialEq)]
    enum S {
        Vertical,
        Horizontal,
        Rect,
        Sphere,
        Strap,
    }
    let shapes = [
        ("vertical-cylinder", S::Vertical),
        ("horizontal-cylinder", S::Horizontal),
        ("rectangular", S::Rect),
        ("sphere", S::Sphere),
        ("strapping", S::Strap),
    ];
    let (kind, _) = v.choice("shape", &shapes)?.ok_or_else(|| {
        v.missing(
            "shape",
            "valid: \"vertical-cylinder\", \"horizontal-cylinder\", \"rectangular\", \"sphere\", \"strapping\"",
        )
    })?;
    let shape_name = shapes
        .iter()
        .find(|(_, s)| *s == kind)
        .map_or("", |(n, _)| *n);
    let used: &[&str] = match kind {
        S::Vertical => &["shape", "diameter", "height", "bottom", "bottom_depth"],
        S::Horizontal => &["shape", "diameter", "length"],
        S::Rect => &["shape", "length", "width", "height"],
        S::Sphere => &["shape", "diameter"],
        S::Strap => &["shape", "strapping"],
    };
    v.check_unused(used, &format!("shape {shape_name}"))?;
    let hint = format!(
        "shape {shape_name} needs {}",
        list(used.get(1..).unwrap_or(&[]))
    );
    let dim = |key: &str| -> R<Qty> {
        v.req_quantity(key, Conv::Kind(Kind::Length), &hint)?
            .positive(ctx)
    };
    let mut depth_q: Option<Qty> = None;
    let mut points_spans: Vec<usize> = Vec::new();
    let mut points_at = v.at;
    let shape = match kind {
        S::Vertical => {
            let diameter = dim("diameter")?.si;
            let height = dim("height")?.si;
            let (bottom, at) = v
                .choice("bottom", &[("flat", 0u8), ("cone", 1u8), ("dished", 2u8)])?
                .unwrap_or((0, v.at));
            let bottom = match bottom {
                0 => {
                    if v.get("bottom_depth").is_some() {
                        return Err(v.err(
                            v.key_at("bottom_depth"),
                            "bottom_depth",
                            "not used by bottom \"flat\"; bottom_depth is for \"cone\" and \"dished\"",
                        ));
                    }
                    Bottom::Flat
                }
                b => {
                    let q = v
                        .req_quantity(
                            "bottom_depth",
                            Conv::Kind(Kind::Length),
                            "a cone or dished bottom needs its depth",
                        )
                        .map_err(|mut e| {
                            e.line = Some(ctx.line(at));
                            e
                        })?
                        .positive(ctx)?;
                    let depth = q.si;
                    depth_q = Some(q);
                    if b == 1 {
                        Bottom::Cone { height: depth }
                    } else {
                        Bottom::Dished { depth }
                    }
                }
            };
            Shape::VerticalCylinder {
                diameter,
                height,
                bottom,
            }
        }
        S::Horizontal => Shape::HorizontalCylinder {
            diameter: dim("diameter")?.si,
            length: dim("length")?.si,
        },
        S::Rect => Shape::Rectangular {
            length: dim("length")?.si,
            width: dim("width")?.si,
            height: dim("height")?.si,
        },
        S::Sphere => Shape::Sphere {
            diameter: dim("diameter")?.si,
        },
        S::Strap => {
            let s = v
                .opt_child("strapping", "a table { level_unit, volume_unit, points }")?
                .ok_or_else(|| {
                    v.missing(
                        "strapping",
                        "{ level_unit = \"m\", volume_unit = \"m3\", points = [[0.0, 0.0], ...] }",
                    )
                })?;
            s.check_keys(STRAPPING_KEYS)?;
            let unit = |key: &str, kind: Kind| -> R<ToSi> {
                let (u, at) = s.string(key)?.ok_or_else(|| {
                    s.missing(key, &format!("valid: {}", list(units::valid_units(kind))))
                })?;
                units::to_si(kind, u).map_err(|e| s.err(at, key, e.to_string()))
            };
            let level = unit("level_unit", Kind::Length)?;
            let volume = unit("volume_unit", Kind::Volume)?;
            let pts = s.get("points").ok_or_else(|| {
                s.missing("points", "[[level, volume], ...], from level 0 upwards")
            })?;
            points_at = pts.span().start;
            let DeValue::Array(items) = pts.get_ref() else {
                return Err(s.err(
                    points_at,
                    "points",
                    format!(
                        "expected an array of [level, volume] pairs, got {}",
                        type_name(pts.get_ref())
                    ),
                ));
            };
            if items.len() > STRAPPING_CAPACITY {
                return Err(s.err(
                    points_at,
                    "points",
                    format!(
                        "too many points: {}, at most {STRAPPING_CAPACITY} (kernel strapping capacity)",
                        items.len()
                    ),
                ));
            }
            let mut table: heapless::Vec<(f64, f64), STRAPPING_CAPACITY> = heapless::Vec::new();
            for (i, item) in items.iter().enumerate() {
                let key = format!("points[{i}]");
                let bad = |m: String| s.err(item.span().start, &key, m);
                let pair = match item.get_ref() {
                    DeValue::Array(p) if p.len() == 2 => p,
                    other => {
                        return Err(bad(format!(
                            "expected a [level, volume] pair, got {}",
                            type_name(other)
                        )))
                    }
                };
                let mut xy = [0.0; 2];
                for (slot, x) in xy.iter_mut().zip(pair.iter()) {
                    *slot = number_of(x.get_ref()).map_err(&bad)?;
                }
                let point = (level.apply(xy[0]), volume.apply(xy[1]));
                if !(point.0.is_finite() && point.1.is_finite()) {
                    return Err(bad("is out of range in SI".to_string()));
                }
                table
                    .push(point)
                    .map_err(|_| bad(format!("at most {STRAPPING_CAPACITY} points")))?;
                points_spans.push(item.span().start);
            }
            Shape::Strapping(table)
        }
    };
    let geometry = Geometry::new(shape.clone()).map_err(|e| {
        use holdup_kernel::Error as K;
        let message = e.message();
        match e {
            K::GeometryDishTooDeep => match &depth_q {
                Some(q) => ctx.error(
                    Some(q.at),
                    q.key.clone(),
                    format!(
                        "{message}: depth {} > radius {} m",
                        q.shown(),
                        match &shape {
                            Shape::VerticalCylinder { diameter, .. } => short(diameter / 2.0),
                            _ => String::new(),
                        }
                    ),
                ),
                None => v.err_here(message),
            },
            K::StrappingNotMonotone(i) | K::StrappingNonFinite(i) => {
                let i = usize::from(i);
                let at = points_spans.get(i).copied().unwrap_or(points_at);
                ctx.error(Some(at), format!("[vessel] strapping.points[{i}]"), message)
            }
            K::StrappingTooShort | K::StrappingFull => {
                ctx.error(Some(points_at), "[vessel] strapping.points", message)
            }
            _ => v.err_here(message),
        }
    })?;
    Ok((shape, geometry))
}

/// One `[[outlet]]`'s kind and parameters.
fn read_outlet(t: &Tbl<'_>, top: f64, tags: &mut TagUses) -> R<OutletKind> {
    let ctx = t.ctx;
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
        let flow = t
            .signal("flow", Conv::Kind(Kind::Flow), TagMode::Allowed)?
            .ok_or_else(|| t.missing("flow", &hint))?;
        let flow = non_negative_source(ctx, flow)?;
        return Ok(OutletKind::Measured(tags.signal(flow, true)));
    }
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
    if kind == 1 {
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
    } else {
        let width = t
            .req_quantity("width", Conv::Kind(Kind::Length), &hint)?
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

/// `[initial]`.
fn read_initial(t: &Tbl<'_>, geometry: &Geometry<f64>, species: &[Species]) -> R<Initial> {
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

/// `[log]`.
fn read_log(t: &Tbl<'_>) -> R<LogOptions> {
    t.check_keys(LOG_KEYS)?;
    let format = t
        .choice(
            "format",
            &[
                ("auto", LogFormat::Auto),
                ("wide", LogFormat::Wide),
                ("long", LogFormat::Long),
            ],
        )?
        .map_or(LogFormat::Auto, |(f, _)| f);
    let time = t
        .choice(
            "time",
            &[
                ("auto", TimeFormat::Auto),
                ("iso8601", TimeFormat::Iso8601),
                ("epoch", TimeFormat::Epoch),
            ],
        )?
        .map_or(TimeFormat::Auto, |(f, _)| f);
    let time_column = match t.string("time_column")? {
        None => None,
        Some((s, at)) => {
            if s.trim().is_empty() {
                return Err(t.err(at, "time_column", "must not be empty"));
            }
            if format == LogFormat::Long {
                return Err(t.err(
                    at,
                    "time_column",
                    "only used by format \"wide\" (or \"auto\" detecting a wide log)",
                ));
            }
            Some(s.to_string())
        }
    };
    let max_age_ms = match t.duration("max_age")? {
        None => DEFAULT_MAX_AGE_MS,
        Some((0, at)) => return Err(t.err(at, "max_age", "must be longer than 0 ms")),
        Some((ms, _)) => ms,
    };
    Ok(LogOptions {
        format,
        time,
        time_column,
        max_age_ms,
    })
}

/// What `[estimator]` is checked against and its defaults derived from.
struct EstimatorContext<'a> {
    tick_ms: u64,
    /// Vessel capacity, m³.
    capacity: f64,
    /// Whether `[level]` is configured.
    has_level: bool,
    species: &'a [Species],
    inlets: &'a [Inlet],
    outlets: &'a [Outlet],
    initial: &'a Initial,
}

/// `[estimator]`.
fn read_estimator(t: &Tbl<'_>, env: &EstimatorContext<'_>) -> R<Estimator> {
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
    let shortest_window = env.tick_ms.saturating_mul(MIN_CLOSURE_WINDOW_TICKS);
    let closure_window_ms = match t.duration("closure_window")? {
        None => DEFAULT_CLOSURE_WINDOW_MS.max(shortest_window),
        Some((ms, at)) if ms < shortest_window => {
            return Err(t.err(
                at,
                "closure_window",
                format!(
                    "must be at least {MIN_CLOSURE_WINDOW_TICKS} ticks ({shortest_window} ms \
                     with tick {} ms), got {ms} ms",
                    env.tick_ms
                ),
            ))
        }
        Some((ms, _)) => ms,
    };

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

#[cfg(test)]
mod tests {
    use super::*;
    use holdup_kernel::units::GAS_CONSTANT;

    /// The full example of `docs/config.md`, with the species that its
    /// reaction names (EtOAc, NaOAc, EtOH) defined. An invented plant.
    const EXAMPLE: &str = r#"# Line 2 of an invented demo plant.
[plant]
name = "Line 2 saponification reactor"
tick = "1 s"
scalar = "f32"
method = "auto"
min_holdup = { value = 50, unit = "L" }

[vessel]
shape = "vertical-cylinder"
diameter = { value = 1.6, unit = "m" }
height = { value = 2.0, unit = "m" }
bottom = "dished"
bottom_depth = { value = 0.25, unit = "m" }

[[species]]
name = "NaOH"
molar_mass = { value = 39.997, unit = "g/mol" }

[[species]]
name = "EtOAc"
molar_mass = { value = 88.106, unit = "g/mol" }

[[species]]
name = "NaOAc"

[[species]]
name = "EtOH"

[[inlet]]
name = "caustic pump"
flow = { tag = "FI-101", unit = "m3/h" }
feed = { NaOH = { value = 0.1, unit = "mol/L" } }

[[inlet]]
name = "ester pump"
flow = { value = 30, unit = "L/min" }
feed = { EtOAc = { tag = "AI-102", unit = "g/L" } }

[[outlet]]
name = "product"
kind = "measured"
flow = { tag = "FI-201", unit = "m3/h" }

[[outlet]]
name = "drain"
kind = "orifice"
discharge_coefficient = 0.61
diameter = { value = 50, unit = "mm" }
elevation = { value = 10, unit = "cm" }

[temperature]
tag = "TI-301"
unit = "degC"

[level]
tag = "LI-301"
unit = "m"

[[reaction]]
name = "saponification"
stoichiometry = { NaOH = -1, EtOAc = -1, NaOAc = 1, EtOH = 1 }
orders = { NaOH = 1, EtOAc = 1 }
rate_constant = { value = 0.11, unit = "L/(mol*s)" }
activation_energy = { value = 41, unit = "kJ/mol" }
reference_temperature = { value = 25, unit = "degC" }
reverse = { rate_constant = { value = 0.6, unit = "1/h" }, orders = { NaOAc = 1 } }

[initial]
volume = { value = 2.5, unit = "m3" }
concentrations = { NaOH = { value = 5, unit = "mol/m3" } }
temperature = { value = 77, unit = "degF" }

[log]
format = "auto"
time = "auto"
time_column = "time"
max_age = "10 min"

[tags."FI-101"]
interpolation = "hold"
max_age = "30 min"
"#;

    /// The smallest valid configuration: only what is required.
    const MINIMAL: &str = r#"[plant]
name = "Test tank"
tick = "500 ms"

[vessel]
shape = "vertical-cylinder"
diameter = { value = 1.6, unit = "m" }
height = { value = 2.0, unit = "m" }

[[species]]
name = "A"

[[species]]
name = "B"

[[inlet]]
name = "feed"
flow = { value = 1, unit = "m3/h" }

[temperature]
value = 20
unit = "degC"

[initial]
volume = { value = 1, unit = "m3" }
"#;

    fn path() -> &'static Path {
        Path::new("plant.toml")
    }

    fn ok(text: &str) -> Plant {
        parse(text, path()).unwrap_or_else(|e| panic!("{e}\n{text}"))
    }

    fn err(text: &str) -> ConfigError {
        match parse(text, path()) {
            Ok(_) => panic!("accepted:\n{text}"),
            Err(e) => e,
        }
    }

    /// 1-based line of the first line containing `needle` (the expected line
    /// of an error, found independently of the reader).
    fn line_of(text: &str, needle: &str) -> usize {
        text.lines()
            .position(|l| l.contains(needle))
            .unwrap_or_else(|| panic!("{needle:?} not in text"))
            + 1
    }

    /// `text` with `from` replaced (which must occur).
    fn edit(text: &str, from: &str, to: &str) -> String {
        assert!(text.contains(from), "{from:?} not in text");
        text.replacen(from, to, 1)
    }

    /// Error at the line of `needle`, with key `key`, message containing
    /// every one of `parts`.
    fn check(e: &ConfigError, text: &str, needle: &str, key: &str, parts: &[&str]) {
        assert_eq!(e.path, PathBuf::from("plant.toml"));
        assert_eq!(e.line, Some(line_of(text, needle)), "{e}");
        assert_eq!(e.key, key, "{e}");
        for p in parts {
            assert!(e.message.contains(p), "{p:?} not in: {e}");
        }
    }

    fn close(a: f64, b: f64) -> bool {
        (a - b).abs() <= 1e-12 * b.abs().max(1e-300)
    }

    /// `EXAMPLE` with `[[analyser]]` entries appended.
    fn with_analyser(entries: &str) -> String {
        format!("{EXAMPLE}\n{entries}")
    }

    #[test]
    fn analyser_reads_into_si_with_its_cycle() {
        let text = with_analyser(
            r#"[[analyser]]
species = "NaOH"
reading = { tag = "AI-201", unit = "mol/L" }
sigma = { value = 0.004, unit = "mol/L" }
cycle = "5 min"

[[analyser]]
species = "EtOAc"
reading = { tag = "AI-202", unit = "g/L" }
sigma = { value = 0.1, unit = "g/L" }
"#,
        );
        let p = ok(&text);
        assert_eq!(p.analysers.len(), 2);
        let a = &p.analysers[0];
        assert_eq!(a.species, 0);
        // mol/L → mol/m³: ×1000 (SI prefixes).
        assert_eq!(a.reading.tag(), Some("AI-201"));
        assert!(close(a.reading.to_si(0.1), 100.0));
        assert!(close(a.sigma, 4.0));
        assert_eq!(a.cycle_ms, 300_000);
        // g/L of ethyl acetate (88.106 g/mol): 1 g/L = 1000/88.106 mol/m³.
        let b = &p.analysers[1];
        assert_eq!(b.species, 1);
        assert!(close(b.reading.to_si(88.106), 1000.0));
        assert!(close(b.sigma, 100.0 / 88.106));
        // No cycle: the tick.
        assert_eq!(b.cycle_ms, 1000);
        // The analyser's tag is a log tag like any other.
        assert!(p.tags.iter().any(|t| t.tag == "AI-202"));
    }

    #[test]
    fn analyser_errors_name_line_and_key() {
        let good = r#"[[analyser]]
species = "NaOH"
reading = { tag = "AI-201", unit = "mol/L" }
sigma = { value = 0.004, unit = "mol/L" }
"#;
        let cases: [(&str, &str, &str, &str, &[&str]); 6] = [
            (
                "species = \"NaOH\"",
                "species = \"Soda\"",
                "species",
                "species = \"Soda\"",
                &["unknown species \"Soda\"", "NaOH", "EtOAc"],
            ),
            (
                "reading = { tag = \"AI-201\", unit = \"mol/L\" }",
                "reading = { value = 0.1, unit = \"mol/L\" }",
                "reading.value",
                "reading = { value",
                &["read from the log, give its tag"],
            ),
            (
                "reading = { tag = \"AI-201\", unit = \"mol/L\" }",
                "reading = { tag = \"AI-201\", unit = \"m3/h\" }",
                "reading.unit",
                "\"AI-201\", unit = \"m3/h\"",
                &["unknown concentration unit", "mol/L"],
            ),
            (
                "sigma = { value = 0.004, unit = \"mol/L\" }",
                "sigma = { value = 0, unit = \"mol/L\" }",
                "sigma",
                "sigma = { value = 0",
                &["must be positive"],
            ),
            (
                "sigma = { value = 0.004, unit = \"mol/L\" }",
                "sigma = { value = 0.004, unit = \"mol/L\" }\ncycle = \"100 ms\"",
                "cycle",
                "cycle = ",
                &["at least the tick"],
            ),
            (
                "sigma = { value = 0.004, unit = \"mol/L\" }",
                "sigma = { value = 0.004, unit = \"mol/L\" }\ndelay = \"1 min\"",
                "delay",
                "delay = ",
                &["unknown key", "cycle"],
            ),
        ];
        for (from, to, key, needle, parts) in cases {
            let text = with_analyser(&edit(good, from, to));
            let e = err(&text);
            check(&e, &text, needle, &format!("[[analyser]] {key}"), parts);
        }
        // Missing reading.
        let text = with_analyser(&edit(
            good,
            "reading = { tag = \"AI-201\", unit = \"mol/L\" }\n",
            "",
        ));
        let e = err(&text);
        assert_eq!(e.key, "[[analyser]] reading", "{e}");
        assert!(e.message.contains("tag"), "{e}");
        // Two analysers for one species.
        let text = with_analyser(&format!("{good}\n{}", edit(good, "AI-201", "AI-209")));
        let e = err(&text);
        assert_eq!(e.key, "[[analyser]] species", "{e}");
        assert!(e.message.contains("second analyser"), "{e}");
    }

    #[test]
    fn full_example_parses_into_si() {
        let p = ok(EXAMPLE);
        assert_eq!(p.path, PathBuf::from("plant.toml"));
        assert_eq!(p.name, "Line 2 saponification reactor");
        assert_eq!(p.tick_ms, 1000);
        assert_eq!(p.scalar, ScalarKind::F32);
        assert_eq!(p.method, Method::Auto);
        // 50 L = 0.05 m³.
        assert!(close(p.min_holdup, 0.05));
        assert_eq!(
            p.shape,
            Shape::VerticalCylinder {
                diameter: 1.6,
                height: 2.0,
                bottom: Bottom::Dished { depth: 0.25 }
            }
        );
        let names: Vec<&str> = p.species.iter().map(|s| s.name.as_str()).collect();
        assert_eq!(names, ["NaOH", "EtOAc", "NaOAc", "EtOH"]);
        assert!(close(p.species[0].molar_mass.unwrap(), 0.039_997));
        assert_eq!(p.species[2].molar_mass, None);

        // Inlet 1: tag in m³/h (1/3600), feed 0.1 mol/L = 100 mol/m³.
        let caustic = &p.inlets[0];
        assert_eq!(caustic.name, "caustic pump");
        match &caustic.flow {
            Signal::Tag {
                tag,
                scale,
                offset,
                unit,
            } => {
                assert_eq!(tag, "FI-101");
                assert!(close(*scale, 1.0 / 3600.0));
                assert_eq!(*offset, 0.0);
                assert_eq!(unit, "m3/h");
            }
            other => panic!("{other:?}"),
        }
        assert_eq!(caustic.feed.len(), 4);
        assert!(close(caustic.feed[0].to_si(0.0), 100.0));
        assert_eq!(caustic.feed[1], Signal::Constant(0.0));
        // Inlet 2: 30 L/min = 5e-4 m³/s; EtOAc in g/L with M = 88.106 g/mol:
        // 1 g/L = 1 kg/m³ = 1/0.088106 mol/m³ = 11.3499648…
        let ester = &p.inlets[1];
        assert!(close(ester.flow.to_si(0.0), 5e-4));
        assert_eq!(ester.feed[1].tag(), Some("AI-102"));
        assert!((ester.feed[1].to_si(1.0) - 11.349_964_815_108).abs() < 1e-9);

        assert_eq!(p.outlets.len(), 2);
        assert_eq!(
            p.outlets[0].kind.clone(),
            match &p.outlets[0].kind {
                OutletKind::Measured(s) if s.tag() == Some("FI-201") => p.outlets[0].kind.clone(),
                other => panic!("{other:?}"),
            }
        );
        match p.outlets[1].kind {
            OutletKind::Orifice {
                discharge_coefficient,
                area,
                elevation,
            } => {
                assert_eq!(discharge_coefficient, 0.61);
                // π·(0.05 m)²/4 = 1.9634954…e-3 m².
                assert!(close(area, 1.963_495_408_493_62e-3));
                assert!(close(elevation, 0.1));
            }
            ref other => panic!("{other:?}"),
        }

        // 25 °C read as raw 25 → 298.15 K.
        assert!(close(p.temperature.to_si(25.0), 298.15));
        assert_eq!(p.level.as_ref().and_then(Signal::tag), Some("LI-301"));

        let r = &p.reactions[0];
        assert_eq!(r.name, "saponification");
        assert_eq!(r.stoichiometry, [-1.0, -1.0, 1.0, 1.0]);
        assert_eq!(r.forward.orders, [1.0, 1.0, 0.0, 0.0]);
        // 0.11 L/(mol·s) = 1.1e-4 m³/(mol·s); 41 kJ/mol; 25 °C.
        assert!(close(r.forward.rate_constant, 1.1e-4));
        assert!(close(r.forward.activation_energy, 41_000.0));
        assert!(close(r.reference_temperature, 298.15));
        let rev = r.reverse.as_ref().unwrap();
        // 0.6 1/h = 1/6000 1/s.
        assert!(close(rev.rate_constant, 0.6 / 3600.0));
        assert_eq!(rev.activation_energy, 0.0);
        assert_eq!(rev.orders, [0.0, 0.0, 1.0, 0.0]);

        assert!(close(p.initial.volume, 2.5));
        assert_eq!(p.initial.concentrations, [5.0, 0.0, 0.0, 0.0]);
        // 77 °F = 25 °C = 298.15 K.
        assert!(close(p.initial.temperature.unwrap(), 298.15));

        assert_eq!(p.log.format, LogFormat::Auto);
        assert_eq!(p.log.time, TimeFormat::Auto);
        assert_eq!(p.log.time_column.as_deref(), Some("time"));
        assert_eq!(p.log.max_age_ms, 600_000);

        // One entry per tag, in the order of first use in the file.
        let tags: Vec<(&str, Interpolation, u64, bool)> = p
            .tags
            .iter()
            .map(|t| (t.tag.as_str(), t.interpolation, t.max_age_ms, t.flow))
            .collect();
        assert_eq!(
            tags,
            [
                ("FI-101", Interpolation::Hold, 1_800_000, true),
                ("AI-102", Interpolation::Linear, 600_000, false),
                ("FI-201", Interpolation::Linear, 600_000, true),
                ("TI-301", Interpolation::Linear, 600_000, false),
                ("LI-301", Interpolation::Linear, 600_000, false),
            ]
        );
        // The Arrhenius factor the replay will build stays finite at the
        // reference temperature: exp(−Ea/R·(1/T − 1/Tref)) = 1.
        let f = (-r.forward.activation_energy / GAS_CONSTANT
            * (1.0 / 298.15 - 1.0 / r.reference_temperature))
            .exp();
        assert!(close(f, 1.0));
    }

    #[test]
    fn minimal_config_gets_the_defaults() {
        let p = ok(MINIMAL);
        assert_eq!(p.tick_ms, 500);
        assert_eq!(p.scalar, ScalarKind::F32);
        assert_eq!(p.method, Method::Auto);
        // Flat cylinder: capacity π·0.8²·2 m³; default min holdup 1 %.
        let capacity = core::f64::consts::PI * 0.64 * 2.0;
        assert!(close(p.min_holdup, 0.01 * capacity));
        assert_eq!(
            p.shape,
            Shape::VerticalCylinder {
                diameter: 1.6,
                height: 2.0,
                bottom: Bottom::Flat
            }
        );
        assert!(close(p.inlets[0].flow.to_si(0.0), 1.0 / 3600.0));
        assert_eq!(
            p.inlets[0].feed,
            [Signal::Constant(0.0), Signal::Constant(0.0)]
        );
        assert!(p.outlets.is_empty() && p.reactions.is_empty() && p.tags.is_empty());
        assert_eq!(p.temperature, Signal::Constant(293.15));
        assert_eq!(p.level, None);
        assert_eq!(p.initial.temperature, None);
        assert_eq!(p.initial.concentrations, [0.0, 0.0]);
        assert_eq!(
            p.log,
            LogOptions {
                format: LogFormat::Auto,
                time: TimeFormat::Auto,
                time_column: None,
                max_age_ms: 600_000
            }
        );
    }

    #[test]
    fn plant_options_and_defaults() {
        let text = edit(
            MINIMAL,
            "tick = \"500 ms\"",
            "tick = \"2 min\"\nscalar = \"f64\"\nmethod = \"rk4-reference\"",
        );
        let p = ok(&text);
        assert_eq!(
            (p.tick_ms, p.scalar, p.method),
            (120_000, ScalarKind::F64, Method::ReferenceRk4)
        );
        for (name, method) in [
            ("exact", Method::Exact),
            ("mprk22", Method::Mprk22),
            ("euler-reference", Method::ReferenceEuler),
        ] {
            let text = edit(
                MINIMAL,
                "tick = \"500 ms\"",
                &format!("tick = \"1 h\"\nmethod = \"{name}\""),
            );
            assert_eq!(ok(&text).method, method);
        }
        let text = edit(
            MINIMAL,
            "tick = \"500 ms\"",
            "tick = \"1 s\"\nmethod = \"rk4\"",
        );
        let e = err(&text);
        check(
            &e,
            &text,
            "method",
            "[plant] method",
            &["\"rk4\"", "\"rk4-reference\"", "\"mprk22\""],
        );
        for bad in ["0 s", "61 min", "0.5 ms", "1 day"] {
            let text = edit(MINIMAL, "500 ms", bad);
            let e = err(&text);
            check(&e, &text, "tick", "[plant] tick", &[]);
        }
    }

    #[test]
    fn level_gives_the_initial_volume_through_the_geometry() {
        // Flat cylinder, D = 1.6 m: 1 m of level holds π·0.64 m³.
        let text = edit(
            MINIMAL,
            "volume = { value = 1, unit = \"m3\" }",
            "level = { value = 100, unit = \"cm\" }",
        );
        let p = ok(&text);
        assert!(close(p.initial.volume, core::f64::consts::PI * 0.64));
        // Above the top (2 m): refused, naming the top level.
        let text = edit(
            MINIMAL,
            "volume = { value = 1, unit = \"m3\" }",
            "level = { value = 7, unit = \"ft\" }",
        );
        let e = err(&text);
        check(
            &e,
            &text,
            "level =",
            "[initial] level",
            &[
                "between 0 and the vessel's top level 2 m",
                "7 ft (= 2.1336 m)",
            ],
        );
        // Volume above the capacity.
        let text = edit(
            MINIMAL,
            "value = 1, unit = \"m3\" }",
            "value = 5, unit = \"m3\" }",
        );
        let e = err(&text);
        check(
            &e,
            &text,
            "volume =",
            "[initial] volume",
            &["capacity", "got 5 m3"],
        );
    }

    #[test]
    fn unknown_key_at_the_top_level() {
        let text = format!("{MINIMAL}\n[vesel]\nshape = \"sphere\"\n");
        let e = err(&text);
        check(
            &e,
            &text,
            "[vesel]",
            "vesel",
            &["unknown section", "plant, vessel, species"],
        );
    }

    #[test]
    fn unknown_key_in_a_section() {
        let text = edit(MINIMAL, "height = {", "hieght = {");
        let e = err(&text);
        check(
            &e,
            &text,
            "hieght",
            "[vessel] hieght",
            &["unknown key; valid keys: shape, diameter, height, length, width, bottom, bottom_depth, strapping"],
        );
    }

    #[test]
    fn unknown_key_in_an_inline_table() {
        let text = edit(
            MINIMAL,
            "flow = { value = 1, unit = \"m3/h\" }",
            "flow = { value = 1, unit = \"m3/h\", tga = \"FI-1\" }",
        );
        let e = err(&text);
        check(
            &e,
            &text,
            "tga",
            "[[inlet]] flow.tga",
            &["valid keys: value, tag, unit"],
        );
        // A constant-only quantity says why a tag is not a valid key.
        let text = edit(
            MINIMAL,
            "{ value = 1, unit = \"m3\" }",
            "{ tag = \"LI-1\", unit = \"m3\" }",
        );
        let e = err(&text);
        check(
            &e,
            &text,
            "LI-1",
            "[initial] volume.tag",
            &["valid keys: value, unit", "cannot be read from the log"],
        );
    }

    #[test]
    fn unknown_unit_lists_the_valid_units() {
        let text = edit(MINIMAL, "unit = \"m3/h\"", "unit = \"m3/hr\"");
        let e = err(&text);
        check(&e, &text, "m3/hr", "[[inlet]] flow.unit", &[]);
        assert_eq!(
            e.to_string(),
            format!(
                "plant.toml:{}: [[inlet]] flow.unit: unknown flow unit \"m3/hr\"; valid: m3/s, m3/h, \
                 m3/min, L/s, L/min, L/h, US gal/min, ft3/min, ft3/h",
                line_of(&text, "m3/hr")
            )
        );
        let text = edit(MINIMAL, "unit = \"degC\"", "unit = \"celsius\"");
        let e = err(&text);
        check(&e, &text, "celsius", "[temperature] unit", &["degC", "°F"]);
    }

    #[test]
    fn a_number_where_a_quantity_is_expected() {
        let text = edit(
            MINIMAL,
            "diameter = { value = 1.6, unit = \"m\" }",
            "diameter = 1.6",
        );
        let e = err(&text);
        check(
            &e,
            &text,
            "diameter",
            "[vessel] diameter",
            &["unit = \"m\"", "got a float", "m, cm, mm, ft, in"],
        );
        let text = edit(MINIMAL, "value = 1.6", "value = \"1.6\"");
        let e = err(&text);
        check(
            &e,
            &text,
            "diameter",
            "[vessel] diameter.value",
            &["expected a number, got a string"],
        );
    }

    #[test]
    fn unknown_species_lists_the_defined_ones() {
        let text = edit(EXAMPLE, "feed = { NaOH = {", "feed = { NaOh = {");
        let e = err(&text);
        check(
            &e,
            &text,
            "NaOh",
            "[[inlet]] feed.NaOh",
            &["unknown species \"NaOh\"; defined species: NaOH, EtOAc, NaOAc, EtOH"],
        );
        let text = edit(EXAMPLE, "NaOAc = 1, EtOH = 1 }", "NaOAc = 1, Ethanol = 1 }");
        let e = err(&text);
        check(
            &e,
            &text,
            "Ethanol",
            "[[reaction]] stoichiometry.Ethanol",
            &["defined species"],
        );
        let text = edit(EXAMPLE, "orders = { NaOAc = 1 }", "orders = { NaAc = 1 }");
        let e = err(&text);
        check(
            &e,
            &text,
            "NaAc",
            "[[reaction]] reverse.orders.NaAc",
            &["unknown species"],
        );
        let text = edit(EXAMPLE, "concentrations = { NaOH", "concentrations = { KOH");
        let e = err(&text);
        check(
            &e,
            &text,
            "KOH",
            "[initial] concentrations.KOH",
            &["unknown species"],
        );
    }

    #[test]
    fn negative_and_zero_diameter() {
        let text = edit(MINIMAL, "value = 1.6", "value = -1.6");
        let e = err(&text);
        assert_eq!(
            e.to_string(),
            format!(
                "plant.toml:{}: [vessel] diameter: must be positive, got -1.6 m",
                line_of(&text, "-1.6")
            )
        );
        let text = edit(MINIMAL, "value = 1.6", "value = 0");
        let e = err(&text);
        check(
            &e,
            &text,
            "diameter",
            "[vessel] diameter",
            &["must be positive, got 0 m"],
        );
        // In other units the SI value is shown too.
        let text = edit(
            MINIMAL,
            "value = 2.0, unit = \"m\"",
            "value = -3, unit = \"ft\"",
        );
        let e = err(&text);
        check(
            &e,
            &text,
            "height",
            "[vessel] height",
            &["got -3 ft (= -0.9144 m)"],
        );
    }

    #[test]
    fn dish_deeper_than_the_radius_is_the_kernel_error() {
        let text = edit(
            EXAMPLE,
            "bottom_depth = { value = 0.25",
            "bottom_depth = { value = 0.9",
        );
        let e = err(&text);
        check(
            &e,
            &text,
            "bottom_depth",
            "[vessel] bottom_depth",
            &[
                holdup_kernel::Error::GeometryDishTooDeep.message(),
                "0.9 m",
                "radius 0.8 m",
            ],
        );
        // A cone may be deeper than the radius.
        let text = edit(EXAMPLE, "bottom = \"dished\"", "bottom = \"cone\"");
        let text = edit(
            &text,
            "bottom_depth = { value = 0.25",
            "bottom_depth = { value = 0.9",
        );
        assert_eq!(
            ok(&text).shape,
            Shape::VerticalCylinder {
                diameter: 1.6,
                height: 2.0,
                bottom: Bottom::Cone { height: 0.9 }
            }
        );
        // Flat bottom with a depth: refused at the depth.
        let text = edit(EXAMPLE, "bottom = \"dished\"", "bottom = \"flat\"");
        let e = err(&text);
        check(
            &e,
            &text,
            "bottom_depth",
            "[vessel] bottom_depth",
            &["not used by bottom \"flat\""],
        );
        // Dished without a depth: refused, naming the bottom line.
        let text = edit(
            EXAMPLE,
            "bottom_depth = { value = 0.25, unit = \"m\" }\n",
            "",
        );
        let e = err(&text);
        check(
            &e,
            &text,
            "bottom = ",
            "[vessel] bottom_depth",
            &["missing"],
        );
    }

    #[test]
    fn keys_not_used_by_the_shape() {
        let text = edit(
            MINIMAL,
            "shape = \"vertical-cylinder\"",
            "shape = \"sphere\"",
        );
        let e = err(&text);
        check(
            &e,
            &text,
            "height",
            "[vessel] height",
            &["not used by shape sphere; keys of shape sphere: shape, diameter"],
        );
        let text = edit(
            MINIMAL,
            "height = { value = 2.0, unit = \"m\" }",
            "length = { value = 3, unit = \"m\" }",
        );
        let text = edit(
            &text,
            "shape = \"vertical-cylinder\"",
            "shape = \"horizontal-cylinder\"",
        );
        let p = ok(&text);
        assert_eq!(
            p.shape,
            Shape::HorizontalCylinder {
                diameter: 1.6,
                length: 3.0
            }
        );
        let text = edit(
            MINIMAL,
            "shape = \"vertical-cylinder\"",
            "shape = \"cylinder\"",
        );
        let e = err(&text);
        check(&e, &text, "cylinder", "[vessel] shape", &["\"vertical-cylinder\", \"horizontal-cylinder\", \"rectangular\", \"sphere\", \"strapping\""]);
        let text = edit(
            MINIMAL,
            "shape = \"vertical-cylinder\"",
            "shape = \"rectangular\"",
        );
        let e = err(&text);
        check(
            &e,
            &text,
            "diameter",
            "[vessel] diameter",
            &["not used by shape rectangular"],
        );
    }

    #[test]
    fn strapping_table() {
        let vessel = "shape = \"strapping\"\nstrapping = { level_unit = \"cm\", volume_unit = \"L\", points = [[0, 20], [50, 1100], [200, 4600]] }\n";
        let text = edit(
            MINIMAL,
            "shape = \"vertical-cylinder\"\ndiameter = { value = 1.6, unit = \"m\" }\nheight = { value = 2.0, unit = \"m\" }\n",
            vessel,
        );
        let p = ok(&text);
        match &p.shape {
            Shape::Strapping(points) => {
                assert_eq!(points.len(), 3);
                assert!(close(points[1].0, 0.5) && close(points[1].1, 1.1));
                assert!(close(points[2].0, 2.0) && close(points[2].1, 4.6));
            }
            other => panic!("{other:?}"),
        }
        // A falling volume: the kernel names the point, the reader its line.
        let bad = text.replace("[50, 1100], [200, 4600]", "[50, 1100],\n  [200, 900]");
        let e = err(&bad);
        check(
            &e,
            &bad,
            "[200, 900]",
            "[vessel] strapping.points[2]",
            &["rise strictly"],
        );
        let bad = text.replace("[0, 20]", "[0, 20, 3]");
        let e = err(&bad);
        check(
            &e,
            &bad,
            "points",
            "[vessel] strapping.points[0]",
            &["[level, volume] pair"],
        );
        let many: Vec<String> = (0..40).map(|i| format!("[{i}, {i}]")).collect();
        let bad = text.replace(
            "[[0, 20], [50, 1100], [200, 4600]]",
            &format!("[{}]", many.join(", ")),
        );
        let e = err(&bad);
        check(
            &e,
            &bad,
            "points",
            "[vessel] strapping.points",
            &["at most 32"],
        );
    }

    #[test]
    fn volume_and_level_both_or_neither() {
        let text = edit(
            MINIMAL,
            "volume = { value = 1, unit = \"m3\" }",
            "volume = { value = 1, unit = \"m3\" }\nlevel = { value = 1, unit = \"m\" }",
        );
        let e = err(&text);
        check(
            &e,
            &text,
            "level =",
            "[initial] level",
            &["either volume or level, not both"],
        );
        let text = edit(MINIMAL, "volume = { value = 1, unit = \"m3\" }", "");
        let e = err(&text);
        check(
            &e,
            &text,
            "[initial]",
            "[initial] volume",
            &["volume = { value, unit } or level"],
        );
    }

    #[test]
    fn configured_tag_must_be_used() {
        let text = format!("{EXAMPLE}\n[tags.\"FI-999\"]\ninterpolation = \"hold\"\n");
        let e = err(&text);
        check(
            &e,
            &text,
            "[tags.\"FI-999\"]",
            "[tags.\"FI-999\"]",
            &["tag FI-999 is configured but not used by any signal; used tags: FI-101, AI-102, FI-201, TI-301, LI-301"],
        );
        let text = format!("{MINIMAL}\n[tags.\"X\"]\n");
        let e = err(&text);
        check(
            &e,
            &text,
            "[tags.\"X\"]",
            "[tags.\"X\"]",
            &["used tags: none"],
        );
        let text = edit(
            EXAMPLE,
            "interpolation = \"hold\"",
            "interpolate = \"hold\"",
        );
        let e = err(&text);
        check(
            &e,
            &text,
            "interpolate",
            "[tags.\"FI-101\"] interpolate",
            &["valid keys: interpolation, max_age"],
        );
        let text = edit(
            EXAMPLE,
            "interpolation = \"hold\"",
            "interpolation = \"step\"",
        );
        let e = err(&text);
        check(
            &e,
            &text,
            "step",
            "[tags.\"FI-101\"] interpolation",
            &["\"linear\", \"hold\""],
        );
    }

    #[test]
    fn too_many_species() {
        let mut text = MINIMAL.to_string();
        for i in 0..7 {
            text.push_str(&format!("\n[[species]]\nname = \"S{i}\"\n"));
        }
        // 2 + 7 = 9 species: the ninth is refused at its header.
        let e = err(&text);
        assert_eq!(e.key, "[[species]]");
        assert_eq!(e.line, Some(line_of(&text, "name = \"S6\"") - 1));
        assert!(
            e.message.contains("at most 8 (plant::limits::SPECIES)"),
            "{e}"
        );
        // Eight are fine.
        let eight = text.replace("\n[[species]]\nname = \"S6\"\n", "");
        assert_eq!(ok(&eight).species.len(), 8);
    }

    #[test]
    fn at_least_one_species_and_inlet() {
        let text = MINIMAL.replace(
            "[[species]]\nname = \"A\"\n\n[[species]]\nname = \"B\"\n",
            "",
        );
        let e = err(&text);
        assert_eq!((e.line, e.key.as_str()), (None, "[[species]]"));
        assert!(e.message.contains("at least 1 species"), "{e}");
        let text = edit(
            MINIMAL,
            "[[inlet]]\nname = \"feed\"\nflow = { value = 1, unit = \"m3/h\" }\n",
            "",
        );
        let e = err(&text);
        assert_eq!((e.line, e.key.as_str()), (None, "[[inlet]]"));
        assert!(e.message.contains("at least 1 inlet"), "{e}");
        let text = edit(MINIMAL, "[temperature]\nvalue = 20\nunit = \"degC\"\n", "");
        let e = err(&text);
        assert_eq!(e.to_string(), "plant.toml: [temperature]: missing section (required); the vessel temperature: tag = \"...\", unit = \"degC\" (or value = ..., unit = ...)");
    }

    #[test]
    fn rate_constant_order_must_match() {
        // Orders 1 + 1 = 2, but 1/s is first order.
        let text = edit(
            EXAMPLE,
            "value = 0.11, unit = \"L/(mol*s)\"",
            "value = 0.11, unit = \"1/s\"",
        );
        let e = err(&text);
        check(
            &e,
            &text,
            "unit = \"1/s\"",
            "[[reaction]] rate_constant.unit",
            &[
                "\"1/s\" is for total order 1",
                "orders sum to 2",
                "L/(mol*s)",
                "SI",
            ],
        );
        // The reverse law has its own orders (NaOAc = 1): a second-order unit fails.
        let text = edit(
            EXAMPLE,
            "value = 0.6, unit = \"1/h\"",
            "value = 0.6, unit = \"L/(mol*h)\"",
        );
        let e = err(&text);
        check(
            &e,
            &text,
            "reverse",
            "[[reaction]] reverse.rate_constant.unit",
            &["orders sum to 1"],
        );
        // Fractional orders: only SI.
        let text = edit(
            EXAMPLE,
            "orders = { NaOH = 1, EtOAc = 1 }",
            "orders = { NaOH = 1, EtOAc = 0.5 }",
        );
        let e = err(&text);
        check(
            &e,
            &text,
            "0.11",
            "[[reaction]] rate_constant.unit",
            &["valid for total order 1.5: SI"],
        );
        let text = text.replace(
            "value = 0.11, unit = \"L/(mol*s)\"",
            "value = 0.003, unit = \"SI\"",
        );
        assert!(close(ok(&text).reactions[0].forward.rate_constant, 0.003));
    }

    #[test]
    fn reaction_checks() {
        let text = edit(
            EXAMPLE,
            "orders = { NaOH = 1, EtOAc = 1 }",
            "orders = { NaOH = 1, EtOAc = 5 }",
        );
        let e = err(&text);
        check(
            &e,
            &text,
            "EtOAc = 5",
            "[[reaction]] orders.EtOAc",
            &["between 0 and 4, got 5"],
        );
        let text = edit(EXAMPLE, "NaOH = -1, EtOAc = -1,", "NaOH = 1, EtOAc = 1,");
        let e = err(&text);
        check(
            &e,
            &text,
            "stoichiometry",
            "[[reaction]] stoichiometry",
            &["negative coefficient"],
        );
        let text = edit(
            EXAMPLE,
            "reference_temperature = { value = 25, unit = \"degC\" }\n",
            "",
        );
        let e = err(&text);
        check(
            &e,
            &text,
            "activation_energy",
            "[[reaction]] reference_temperature",
            &["activation energy"],
        );
        let text = edit(
            EXAMPLE,
            "activation_energy = { value = 41, unit = \"kJ/mol\" }\n",
            "",
        );
        let text = edit(
            &text,
            "reference_temperature = { value = 25, unit = \"degC\" }\n",
            "",
        );
        assert_eq!(ok(&text).reactions[0].reference_temperature, 298.15);
        let text = edit(EXAMPLE, "value = 0.11,", "value = -0.11,");
        let e = err(&text);
        check(
            &e,
            &text,
            "-0.11",
            "[[reaction]] rate_constant",
            &["must not be negative"],
        );
        let text = edit(
            EXAMPLE,
            "value = 0.11, unit = \"L/(mol*s)\"",
            "value = 0.11",
        );
        let e = err(&text);
        check(
            &e,
            &text,
            "value = 0.11",
            "[[reaction]] rate_constant.unit",
            &["missing", "valid for total order 2: m3/(mol*s), L/(mol*s)"],
        );
        // Reverse law without a product.
        let text = edit(EXAMPLE, "NaOAc = 1, EtOH = 1 }", "NaOAc = 0, EtOH = 0 }");
        let e = err(&text);
        check(
            &e,
            &text,
            "reverse =",
            "[[reaction]] reverse",
            &["needs a product"],
        );
        let text = edit(
            EXAMPLE,
            "name = \"saponification\"",
            "name = \"saponification\"\nrate = 1",
        );
        let e = err(&text);
        check(
            &e,
            &text,
            "rate = 1",
            "[[reaction]] rate",
            &["valid keys: name, stoichiometry"],
        );
    }

    #[test]
    fn outlets() {
        let text = edit(
            EXAMPLE,
            "diameter = { value = 50, unit = \"mm\" }",
            "area = { value = 20, unit = \"cm2\" }",
        );
        match ok(&text).outlets[1].kind {
            OutletKind::Orifice { area, .. } => assert!(close(area, 2e-3)),
            ref other => panic!("{other:?}"),
        }
        let text = edit(
            EXAMPLE,
            "diameter = { value = 50, unit = \"mm\" }",
            "diameter = { value = 50, unit = \"mm\" }\narea = { value = 20, unit = \"cm2\" }",
        );
        let e = err(&text);
        check(
            &e,
            &text,
            "area =",
            "[[outlet]] area",
            &["either area or diameter"],
        );
        // Elevation above the top level (2.25 m with the 0.25 m dish).
        let text = edit(
            EXAMPLE,
            "elevation = { value = 10, unit = \"cm\" }",
            "elevation = { value = 3, unit = \"m\" }",
        );
        let e = err(&text);
        check(
            &e,
            &text,
            "elevation",
            "[[outlet]] elevation",
            &["between 0 and the vessel's top level 2.25 m, got 3 m"],
        );
        let text = edit(
            EXAMPLE,
            "discharge_coefficient = 0.61",
            "discharge_coefficient = 1.5",
        );
        let e = err(&text);
        check(
            &e,
            &text,
            "discharge_coefficient",
            "[[outlet]] discharge_coefficient",
            &["at most 1, got 1.5"],
        );
        let text = edit(EXAMPLE, "kind = \"orifice\"", "kind = \"weir\"");
        let e = err(&text);
        check(&e, &text, "diameter = { value = 50", "[[outlet]] diameter", &["not used by outlet kind weir; keys of outlet kind weir: name, kind, discharge_coefficient, width, crest"]);
        let text = edit(EXAMPLE, "kind = \"orifice\"\ndischarge_coefficient = 0.61\ndiameter = { value = 50, unit = \"mm\" }\nelevation = { value = 10, unit = \"cm\" }",
            "kind = \"weir\"\ndischarge_coefficient = 0.62\nwidth = { value = 0.3, unit = \"m\" }\ncrest = { value = 2, unit = \"m\" }");
        assert_eq!(
            ok(&text).outlets[1].kind,
            OutletKind::Weir {
                discharge_coefficient: 0.62,
                width: 0.3,
                crest: 2.0
            }
        );
        let text = edit(EXAMPLE, "name = \"drain\"", "name = \"product\"");
        let e = err(&text);
        assert_eq!(e.key, "[[outlet]] name");
        assert_eq!(e.line, Some(line_of(EXAMPLE, "name = \"drain\"")));
        assert!(
            e.message.contains(&format!(
                "duplicate outlet name \"product\" (first defined at line {})",
                line_of(EXAMPLE, "name = \"product\"")
            )),
            "{e}"
        );
    }

    #[test]
    fn duplicate_names() {
        let text = edit(MINIMAL, "name = \"B\"", "name = \"A\"");
        let e = err(&text);
        assert_eq!(e.key, "[[species]] name");
        assert_eq!(e.line, Some(line_of(&text, "name = \"A\"") + 3));
        assert!(
            e.message.contains(&format!(
                "duplicate species name \"A\" (first defined at line {})",
                line_of(&text, "name = \"A\"")
            )),
            "{e}"
        );
        let text = format!(
            "{EXAMPLE}\n[[inlet]]\nname = \"ester pump\"\nflow = {{ value = 1, unit = \"L/s\" }}\n"
        );
        let e = err(&text);
        assert_eq!(
            (e.key.as_str(), e.line),
            ("[[inlet]] name", Some(text.lines().count() - 1))
        );
    }

    #[test]
    fn constants_must_be_in_range() {
        let text = edit(
            MINIMAL,
            "value = 1, unit = \"m3/h\"",
            "value = -1, unit = \"m3/h\"",
        );
        let e = err(&text);
        check(
            &e,
            &text,
            "flow",
            "[[inlet]] flow",
            &["must not be negative, got -1 m3/h (= -0.000277777777778 m3/s)"],
        );
        let text = edit(MINIMAL, "value = 20", "value = -300");
        let e = err(&text);
        check(&e, &text, "-300", "[temperature]", &["above absolute zero"]);
        let text = edit(
            EXAMPLE,
            "value = 5, unit = \"mol/m3\"",
            "value = -5, unit = \"mol/m3\"",
        );
        let e = err(&text);
        check(
            &e,
            &text,
            "concentrations",
            "[initial] concentrations.NaOH",
            &["must not be negative"],
        );
        let text = edit(
            EXAMPLE,
            "min_holdup = { value = 50, unit = \"L\" }",
            "min_holdup = { value = 5, unit = \"m3\" }",
        );
        let e = err(&text);
        check(
            &e,
            &text,
            "min_holdup",
            "[plant] min_holdup",
            &["below the vessel capacity"],
        );
    }

    #[test]
    fn non_finite_numbers_are_refused() {
        for bad in ["nan", "inf", "-inf", "1e400"] {
            let text = edit(MINIMAL, "value = 1.6", &format!("value = {bad}"));
            let e = err(&text);
            check(
                &e,
                &text,
                "diameter",
                "[vessel] diameter.value",
                &["finite"],
            );
        }
        let text = edit(
            MINIMAL,
            "value = 1, unit = \"m3/h\"",
            "value = 99999999999999999999, unit = \"m3/h\"",
        );
        let e = err(&text);
        check(&e, &text, "flow", "[[inlet]] flow.value", &["out of range"]);
        // Hex integers and underscores are numbers like any other.
        let text = edit(
            MINIMAL,
            "value = 1, unit = \"m3/h\"",
            "value = 0x24, unit = \"m3/h\"",
        );
        assert!(close(ok(&text).inlets[0].flow.to_si(0.0), 0.01));
        let text = edit(
            MINIMAL,
            "value = 1, unit = \"m3/h\"",
            "value = 3_6.0, unit = \"m3/h\"",
        );
        assert!(close(ok(&text).inlets[0].flow.to_si(0.0), 0.01));
    }

    #[test]
    fn mass_based_feed_needs_the_molar_mass() {
        let text = edit(
            EXAMPLE,
            "name = \"EtOAc\"\nmolar_mass = { value = 88.106, unit = \"g/mol\" }",
            "name = \"EtOAc\"",
        );
        let e = err(&text);
        check(
            &e,
            &text,
            "AI-102",
            "[[inlet]] feed.EtOAc.unit",
            &["needs the species' molar_mass", "mol/L"],
        );
    }

    #[test]
    fn level_must_come_from_the_log() {
        let text = format!("{MINIMAL}\n[level]\nvalue = 1.25\nunit = \"m\"\n");
        let e = err(&text);
        check(
            &e,
            &text,
            "value = 1.25",
            "[level] value",
            &["valid keys: tag, unit", "give its tag"],
        );
        let text = format!("{MINIMAL}\n[level]\ntag = \"LI-1\"\nvalue = 1\nunit = \"m\"\n");
        assert_eq!(err(&text).line, Some(text.lines().count() - 1));
    }

    #[test]
    fn tag_and_value_together() {
        let text = edit(MINIMAL, "value = 20\n", "value = 20\ntag = \"TI-1\"\n");
        let e = err(&text);
        check(
            &e,
            &text,
            "TI-1",
            "[temperature] tag",
            &["either value or tag, not both"],
        );
    }

    #[test]
    fn log_options() {
        let text =
            format!("{MINIMAL}\n[log]\nformat = \"long\"\ntime = \"epoch\"\nmax_age = \"90 s\"\n");
        let p = ok(&text);
        assert_eq!(
            (p.log.format, p.log.time, p.log.max_age_ms),
            (LogFormat::Long, TimeFormat::Epoch, 90_000)
        );
        let text = format!("{MINIMAL}\n[log]\nformat = \"long\"\ntime_column = \"t\"\n");
        let e = err(&text);
        check(&e, &text, "time_column", "[log] time_column", &["\"wide\""]);
        let text = format!("{MINIMAL}\n[log]\nmax_age = \"10 minutes\"\n");
        let e = err(&text);
        check(&e, &text, "max_age", "[log] max_age", &["ms, s, min, h"]);
        let text = format!("{MINIMAL}\n[log]\ntime = \"unix\"\n");
        let e = err(&text);
        check(
            &e,
            &text,
            "unix",
            "[log] time",
            &["\"auto\", \"iso8601\", \"epoch\""],
        );
    }

    #[test]
    fn malformed_toml_names_the_line() {
        let text = edit(
            MINIMAL,
            "height = { value = 2.0, unit = \"m\" }",
            "height = { value = 2.0 unit = \"m\" }",
        );
        let e = err(&text);
        assert_eq!(e.key, "TOML syntax");
        assert_eq!(e.line, Some(line_of(&text, "height")), "{e}");
        let text = edit(
            MINIMAL,
            "tick = \"500 ms\"",
            "tick = \"500 ms\"\nname = \"again\"",
        );
        let e = err(&text);
        check(&e, &text, "again", "TOML syntax", &["duplicate key"]);
        let text = format!("{MINIMAL}x = \n");
        let e = err(&text);
        assert_eq!(e.line, Some(text.lines().count()), "{e}");
    }

    #[test]
    fn wrong_table_shapes() {
        let text = format!("vessel = 3\n{MINIMAL}");
        let text = text.replace("[vessel]\nshape", "[vessel_]\nshape");
        let e = err(&text);
        check(&e, &text, "vessel_", "vessel_", &["unknown section"]);
        let text = edit(MINIMAL, "[[inlet]]", "[inlet]");
        let e = err(&text);
        check(
            &e,
            &text,
            "[inlet]",
            "inlet",
            &["write [[inlet]] before each entry"],
        );
        let text = format!(
            "temperature = 20\n{}",
            MINIMAL.replace("[temperature]\nvalue = 20\nunit = \"degC\"", "")
        );
        let e = err(&text);
        check(
            &e,
            &text,
            "temperature = 20",
            "temperature",
            &["expected a table [temperature]"],
        );
    }

    #[test]
    fn load_reads_a_file_and_names_it() {
        let dir = std::env::temp_dir().join(format!("holdup-config-test-{}", std::process::id()));
        std::fs::create_dir_all(&dir).unwrap();
        let good = dir.join("plant.toml");
        std::fs::write(&good, EXAMPLE).unwrap();
        let p = load(&good).unwrap();
        assert_eq!(p.path, good);
        let bad = dir.join("bad.toml");
        std::fs::write(&bad, edit(EXAMPLE, "value = 1.6", "value = -1.6")).unwrap();
        let e = load(&bad).unwrap_err();
        assert_eq!(e.path, bad);
        assert!(
            e.to_string()
                .starts_with(&format!("{}:11: [vessel] diameter:", bad.display())),
            "{e}"
        );
        let missing = dir.join("missing.toml");
        let e = load(&missing).unwrap_err();
        assert_eq!((e.line, e.key.as_str()), (None, ""));
        assert!(
            e.to_string()
                .starts_with(&format!("{}: cannot read", missing.display())),
            "{e}"
        );
        std::fs::remove_dir_all(&dir).unwrap();
    }

    #[test]
    fn no_panic_on_truncated_or_mangled_input() {
        // Every prefix of the example (most are invalid in some way) and the
        // example with each line dropped: an error or a plant, never a panic.
        let mut n = 0;
        for (i, _) in EXAMPLE.char_indices() {
            let _ = parse(&EXAMPLE[..i], path());
            n += 1;
        }
        let lines: Vec<&str> = EXAMPLE.lines().collect();
        for skip in 0..lines.len() {
            let text: Vec<&str> = lines
                .iter()
                .enumerate()
                .filter(|(i, _)| *i != skip)
                .map(|(_, l)| *l)
                .collect();
            if let Err(e) = parse(&text.join("\n"), path()) {
                assert!(!e.message.is_empty());
            }
            n += 1;
        }
        assert!(n > 1000);
    }

    /// The `[estimator]` example of `docs/config.md`, appended to `EXAMPLE`.
    const ESTIMATOR: &str = r#"
[estimator]                                      # optional; needs [level]
level_sigma = { value = 3, unit = "mm" }         # required: level transmitter noise, 1σ
holdup_drift = { value = 10, unit = "L" }        # 1σ unexplained holdup change per hour
concentration_drift = { value = 0.5, unit = "mol/m3" }   # 1σ per hour, all species, or per
                                                 # species: { NaOH = { value = 0.5, unit = "mol/m3" } }
initial_volume_sigma = { value = 20, unit = "L" }
initial_concentration_sigma = { NaOH = { value = 2, unit = "mol/m3" } }   # or one value for all
bias_meters = ["caustic pump"]                   # inlets or measured outlets read from the log, at most 4
bias_sigma = 0.05                                # initial 1σ of the relative meter bias
bias_drift = 0.001                               # relative 1σ per hour
gate = 9.0                                       # innovation gate, chi-square with 1 degree of freedom
lab_sigma = 0.02                                 # relative 1σ of a lab analysis
lab_max_age = "8 h"                              # a sample without a result after this is dropped
flow_sigma = 0.01                                # relative 1σ of the flow meters' noise
closure_window = "30 min"                        # balance-closure residual window, at least 2 ticks
cusum_k = 0.5                                    # CUSUM reference value, in σ of the residual
cusum_h = 5.0                                    # CUSUM decision interval, in σ (above cusum_k)
"#;

    /// `EXAMPLE` with `[estimator]` holding only `lines`.
    fn with_estimator(lines: &str) -> String {
        format!("{EXAMPLE}\n[estimator]\nlevel_sigma = {{ value = 3, unit = \"mm\" }}\n{lines}")
    }

    fn estimator(text: &str) -> Estimator {
        ok(text)
            .estimator
            .unwrap_or_else(|| panic!("no estimator:\n{text}"))
    }

    fn all_close(a: &[f64], b: &[f64]) -> bool {
        a.len() == b.len() && a.iter().zip(b).all(|(x, y)| close(*x, *y))
    }

    #[test]
    fn estimator_is_absent_without_the_section() {
        assert_eq!(ok(EXAMPLE).estimator, None);
        assert_eq!(ok(MINIMAL).estimator, None);
    }

    #[test]
    fn estimator_docs_example_parses_into_si() {
        let text = format!("{EXAMPLE}{ESTIMATOR}");
        let e = estimator(&text);
        assert!(close(e.level_sigma, 0.003));
        assert!(close(e.holdup_drift, 0.01));
        assert_eq!(e.concentration_drift, [0.5; 4]);
        assert!(close(e.initial_volume_sigma, 0.02));
        // NaOH given; the others keep the default max(10 % of 0, 0.1).
        assert_eq!(e.initial_concentration_sigma, [2.0, 0.1, 0.1, 0.1]);
        assert_eq!(
            e.bias_meters,
            [BiasMeter {
                name: "caustic pump".into(),
                outlet: false,
                index: 0
            }]
        );
        assert_eq!((e.bias_sigma, e.bias_drift), (0.05, 0.001));
        assert_eq!((e.gate, e.lab_sigma, e.flow_sigma), (9.0, 0.02, 0.01));
        assert_eq!(
            (e.lab_max_age_ms, e.closure_window_ms),
            (28_800_000, 1_800_000)
        );
        assert_eq!((e.cusum_k, e.cusum_h), (0.5, 5.0));
    }

    #[test]
    fn estimator_full_section_in_other_units() {
        let text = with_estimator(
            "holdup_drift = { value = 2, unit = \"US gal\" }\n\
             concentration_drift = { value = 0.5, unit = \"mmol/L\" }\n\
             initial_volume_sigma = { value = 1, unit = \"ft3\" }\n\
             initial_concentration_sigma = { value = 0.002, unit = \"kmol/m3\" }\n\
             bias_meters = [\"product\", \"caustic pump\"]\n\
             bias_sigma = 0.1\n\
             bias_drift = 0.002\n\
             gate = 6.63\n\
             lab_sigma = 0.03\n\
             lab_max_age = \"6 h\"\n\
             flow_sigma = 0.015\n\
             closure_window = \"20 min\"\n\
             cusum_k = 1\n\
             cusum_h = 4\n",
        )
        .replace(
            "level_sigma = { value = 3, unit = \"mm\" }",
            "level_sigma = { value = 0.25, unit = \"in\" }",
        );
        let e = estimator(&text);
        // 0.25 in = 6.35 mm; 2 US gal = 7.570823568 L; 1 ft³ = 28.316846592 L.
        assert!(close(e.level_sigma, 0.00635));
        assert!(close(e.holdup_drift, 0.007_570_823_568));
        assert!(all_close(&e.concentration_drift, &[0.5; 4]));
        assert!(close(e.initial_volume_sigma, 0.028_316_846_592));
        assert!(all_close(&e.initial_concentration_sigma, &[2.0; 4]));
        // In the order written: the measured outlet, then the inlet.
        assert_eq!(
            e.bias_meters,
            [
                BiasMeter {
                    name: "product".into(),
                    outlet: true,
                    index: 0
                },
                BiasMeter {
                    name: "caustic pump".into(),
                    outlet: false,
                    index: 0
                }
            ]
        );
        assert_eq!((e.bias_sigma, e.bias_drift), (0.1, 0.002));
        assert_eq!((e.gate, e.lab_sigma, e.flow_sigma), (6.63, 0.03, 0.015));
        assert_eq!(
            (e.lab_max_age_ms, e.closure_window_ms),
            (21_600_000, 1_200_000)
        );
        assert_eq!((e.cusum_k, e.cusum_h), (1.0, 4.0));
    }

    #[test]
    fn estimator_defaults_with_only_level_sigma() {
        let e = estimator(&with_estimator(""));
        assert!(close(e.level_sigma, 0.003));
        // Largest known concentration: the caustic feed, 0.1 mol/L = 100
        // mol/m³ (the ester feed is a tag, the initial NaOH only 5): 1 %.
        assert!(all_close(&e.concentration_drift, &[1.0; 4]));
        // 10 % of 5 mol/m³ for NaOH; at least 0.1 mol/m³ for the others.
        assert!(all_close(
            &e.initial_concentration_sigma,
            &[0.5, 0.1, 0.1, 0.1]
        ));
        // 1 % of 2.5 m³.
        assert!(close(e.initial_volume_sigma, 0.025));
        assert!(e.bias_meters.is_empty());
        assert_eq!((e.bias_sigma, e.bias_drift), (0.05, 0.001));
        assert_eq!((e.gate, e.lab_sigma, e.flow_sigma), (9.0, 0.02, 0.01));
        assert_eq!(
            (e.lab_max_age_ms, e.closure_window_ms),
            (28_800_000, 1_800_000)
        );
        assert_eq!((e.cusum_k, e.cusum_h), (0.5, 5.0));

        // A flat cylinder (capacity π·0.8²·2 m³) holding 50 L, nothing
        // dissolved, ticking once an hour.
        let text = format!(
            "{}\n[level]\ntag = \"LI-1\"\nunit = \"m\"\n\n[estimator]\nlevel_sigma = {{ value = 1, unit = \"cm\" }}\n",
            MINIMAL
                .replace("tick = \"500 ms\"", "tick = \"1 h\"")
                .replace(
                    "volume = { value = 1, unit = \"m3\" }",
                    "volume = { value = 50, unit = \"L\" }"
                )
        );
        let e = estimator(&text);
        let capacity = core::f64::consts::PI * 0.64 * 2.0;
        assert!(close(e.holdup_drift, 0.001 * capacity));
        // 1 % of 50 L is below the 1 L floor.
        assert!(close(e.initial_volume_sigma, 0.001));
        assert_eq!(e.concentration_drift, [0.01, 0.01]);
        assert_eq!(e.initial_concentration_sigma, [0.1, 0.1]);
        // 30 min is shorter than 2 ticks of 1 h: the default is 2 ticks.
        assert_eq!(e.closure_window_ms, 7_200_000);
    }

    #[test]
    fn estimator_scalar_and_per_species_concentrations() {
        // One value for all species, in any amount unit.
        let e = estimator(&with_estimator(
            "concentration_drift = { value = 0.002, unit = \"mol/L\" }\n",
        ));
        assert!(all_close(&e.concentration_drift, &[2.0; 4]));
        // Per species: the rest keep the default (1 mol/m³, see above); a
        // mass-based unit uses the species' molar mass: 0.881 g/L of EtOAc
        // (88.106 g/mol) = 10 mol/m³ (approximately: 0.881/0.088106).
        let e = estimator(&with_estimator(
            "concentration_drift = { NaOAc = { value = 3, unit = \"mol/m3\" }, EtOAc = { value = 0.881, unit = \"g/L\" } }\n",
        ));
        assert!(all_close(
            &e.concentration_drift,
            &[1.0, 0.881 / 0.088_106, 3.0, 1.0]
        ));
        // As a sub-table, and an empty table keeps every default.
        let e = estimator(&with_estimator(
            "[estimator.initial_concentration_sigma]\nEtOH = { value = 7, unit = \"mmol/L\" }\n",
        ));
        assert!(all_close(
            &e.initial_concentration_sigma,
            &[0.5, 0.1, 0.1, 7.0]
        ));
        let e = estimator(&with_estimator("initial_concentration_sigma = {}\n"));
        assert!(all_close(
            &e.initial_concentration_sigma,
            &[0.5, 0.1, 0.1, 0.1]
        ));
        // A species named like a quantity's key is still a species entry.
        let text = edit(EXAMPLE, "name = \"EtOH\"", "name = \"value\"")
            .replace("EtOH = 1 }", "value = 1 }")
            + "\n[estimator]\nlevel_sigma = { value = 3, unit = \"mm\" }\n\
               concentration_drift = { value = { value = 4, unit = \"mol/m3\" } }\n";
        assert!(all_close(
            &estimator(&text).concentration_drift,
            &[1.0, 1.0, 1.0, 4.0]
        ));

        // A mass-based unit cannot apply to all species at once.
        let text = with_estimator("concentration_drift = { value = 1, unit = \"g/L\" }\n");
        let e = err(&text);
        check(
            &e,
            &text,
            "concentration_drift",
            "[estimator] concentration_drift.unit",
            &[
                "\"g/L\" cannot be given for all species",
                "mol/m3, mol/L, mmol/L, kmol/m3",
                "concentration_drift = { NaOH = { value = ..., unit = \"g/L\" } }",
            ],
        );
        // A bare number for a species.
        let text = with_estimator("concentration_drift = { NaOH = 0.5 }\n");
        let e = err(&text);
        check(
            &e,
            &text,
            "concentration_drift",
            "[estimator] concentration_drift.NaOH",
            &["expected a concentration { value, unit }, got a float"],
        );
        // A bare number for all.
        let text = with_estimator("initial_concentration_sigma = 2\n");
        let e = err(&text);
        check(
            &e,
            &text,
            "initial_concentration_sigma",
            "[estimator] initial_concentration_sigma",
            &["or a table of species", "got an integer"],
        );
        // The scalar form's keys are those of a constant quantity.
        let text = with_estimator(
            "concentration_drift = { value = 1, unit = \"mol/m3\", tag = \"AI-1\" }\n",
        );
        let e = err(&text);
        check(
            &e,
            &text,
            "concentration_drift",
            "[estimator] concentration_drift.tag",
            &["valid keys: value, unit", "cannot be read from the log"],
        );
        let text = with_estimator("concentration_drift = { value = 1, unit = \"mol/kg\" }\n");
        let e = err(&text);
        check(
            &e,
            &text,
            "concentration_drift",
            "[estimator] concentration_drift.unit",
            &["unknown concentration unit \"mol/kg\""],
        );
    }

    #[test]
    fn estimator_unknown_species_in_a_table() {
        let text = with_estimator(
            "initial_concentration_sigma = {\n  NaOH = { value = 1, unit = \"mol/m3\" },\n  KOH = { value = 1, unit = \"mol/m3\" } }\n",
        );
        // A multi-line inline table is TOML 1.1; the reader's parser takes it.
        let e = err(&text);
        check(
            &e,
            &text,
            "KOH",
            "[estimator] initial_concentration_sigma.KOH",
            &["unknown species \"KOH\"; defined species: NaOH, EtOAc, NaOAc, EtOH"],
        );
        let text =
            with_estimator("concentration_drift = { Water = { value = 1, unit = \"mol/m3\" } }\n");
        let e = err(&text);
        check(
            &e,
            &text,
            "Water",
            "[estimator] concentration_drift.Water",
            &["defined species: NaOH, EtOAc, NaOAc, EtOH"],
        );
    }

    #[test]
    fn estimator_unknown_key() {
        let text = with_estimator("gate = 9\nlab_max_agee = \"6 h\"\n");
        let e = err(&text);
        check(
            &e,
            &text,
            "lab_max_agee",
            "[estimator] lab_max_agee",
            &[
                "unknown key; valid keys: level_sigma, holdup_drift, concentration_drift, \
               initial_volume_sigma, initial_concentration_sigma, bias_meters, bias_sigma, \
               bias_drift, gate, lab_sigma, lab_max_age, flow_sigma, closure_window, cusum_k, \
               cusum_h",
            ],
        );
        // The top level lists the new section.
        let text = format!("{MINIMAL}\n[estimater]\n");
        let e = err(&text);
        check(&e, &text, "[estimater]", "estimater", &["tags, estimator"]);
    }

    #[test]
    fn estimator_needs_level_and_level_sigma() {
        let text =
            format!("{MINIMAL}\n[estimator]\nlevel_sigma = {{ value = 3, unit = \"mm\" }}\n");
        let e = err(&text);
        check(
            &e,
            &text,
            "[estimator]",
            "[estimator]",
            &["no [level] section", "tag = \"...\""],
        );
        let text = format!("{EXAMPLE}\n[estimator]\ngate = 9\n");
        let e = err(&text);
        check(
            &e,
            &text,
            "[estimator]",
            "[estimator] level_sigma",
            &["missing (required)", "unit = \"mm\""],
        );
        // A section that is not a table.
        let text = format!("estimator = true\n{EXAMPLE}");
        let e = err(&text);
        check(
            &e,
            &text,
            "estimator = true",
            "estimator",
            &["expected a table [estimator], got a boolean"],
        );
    }

    #[test]
    fn estimator_bias_meters() {
        // Unknown name: the inlets and measured outlets are listed.
        let text = with_estimator("bias_meters = [\"caustic pump\", \"caustic pmup\"]\n");
        let e = err(&text);
        check(
            &e,
            &text,
            "bias_meters",
            "[estimator] bias_meters[1]",
            &[
                "unknown inlet or measured outlet \"caustic pmup\"; inlets: caustic pump, \
               ester pump; measured outlets: product",
            ],
        );
        // A constant flow has no meter.
        let text = with_estimator("bias_meters = [\"ester pump\"]\n");
        let e = err(&text);
        check(
            &e,
            &text,
            "bias_meters",
            "[estimator] bias_meters[0]",
            &["inlet \"ester pump\" has a constant flow"],
        );
        let text = edit(
            &with_estimator("bias_meters = [\"product\"]\n"),
            "flow = { tag = \"FI-201\", unit = \"m3/h\" }",
            "flow = { value = 2, unit = \"m3/h\" }",
        );
        let e = err(&text);
        check(
            &e,
            &text,
            "bias_meters",
            "[estimator] bias_meters[0]",
            &["outlet \"product\" has a constant flow"],
        );
        // An orifice is not metered.
        let text = with_estimator("bias_meters = [\"drain\"]\n");
        let e = err(&text);
        check(
            &e,
            &text,
            "bias_meters",
            "[estimator] bias_meters[0]",
            &[
                "outlet \"drain\" is not metered",
                "measured outlets: product",
            ],
        );
        // Too many: at most 4, at the array.
        let text = with_estimator(
            "bias_meters = [\n  \"a\",\n  \"b\",\n  \"c\",\n  \"d\",\n  \"e\",\n]\n",
        );
        let e = err(&text);
        check(
            &e,
            &text,
            "bias_meters",
            "[estimator] bias_meters",
            &["too many bias meters: 5, at most 4"],
        );
        // Listed twice; on its own line in a multi-line array.
        let text = with_estimator(
            "bias_meters = [\n  \"product\",\n  \"caustic pump\",\n  \"product\",\n]\n",
        );
        let e = err(&text);
        assert_eq!(e.key, "[estimator] bias_meters[2]", "{e}");
        assert_eq!(e.line, Some(text.lines().count() - 1), "{e}");
        assert!(e.message.contains("\"product\" is listed twice"), "{e}");
        // Not an array, not a string.
        let text = with_estimator("bias_meters = \"product\"\n");
        let e = err(&text);
        check(
            &e,
            &text,
            "bias_meters",
            "[estimator] bias_meters",
            &["expected an array of inlet or measured-outlet names, e.g. [\"caustic pump\"], got a string"],
        );
        let text = with_estimator("bias_meters = [\"product\", 2]\n");
        let e = err(&text);
        check(
            &e,
            &text,
            "bias_meters",
            "[estimator] bias_meters[1]",
            &["got an integer"],
        );
        // An inlet and an outlet of the same name: ambiguous.
        let text = edit(
            &with_estimator("bias_meters = [\"product\"]\n"),
            "name = \"ester pump\"",
            "name = \"product\"",
        );
        let e = err(&text);
        check(
            &e,
            &text,
            "bias_meters",
            "[estimator] bias_meters[0]",
            &["names both an inlet and an outlet"],
        );
        // Four are fine; an empty list is no bias estimation.
        let text = edit(
            &with_estimator("bias_meters = [\"product\", \"caustic pump\", \"ester pump\", \"tank out\"]\n"),
            "flow = { value = 30, unit = \"L/min\" }",
            "flow = { tag = \"FI-102\", unit = \"L/min\" }",
        )
        .replace(
            "[temperature]",
            "[[outlet]]\nname = \"tank out\"\nkind = \"measured\"\nflow = { tag = \"FI-202\", unit = \"L/s\" }\n\n[temperature]",
        );
        let meters = estimator(&text).bias_meters;
        let got: Vec<(&str, bool, usize)> = meters
            .iter()
            .map(|m| (m.name.as_str(), m.outlet, m.index))
            .collect();
        assert_eq!(
            got,
            [
                ("product", true, 0),
                ("caustic pump", false, 0),
                ("ester pump", false, 1),
                ("tank out", true, 2)
            ]
        );
        assert!(estimator(&with_estimator("bias_meters = []\n"))
            .bias_meters
            .is_empty());
    }

    #[test]
    fn estimator_sigmas_must_not_be_negative() {
        for (line, key, part) in [
            (
                "holdup_drift = { value = -1, unit = \"L\" }",
                "[estimator] holdup_drift",
                "must not be negative, got -1 L (= -0.001 m3)",
            ),
            (
                "initial_volume_sigma = { value = -0.5, unit = \"m3\" }",
                "[estimator] initial_volume_sigma",
                "must not be negative, got -0.5 m3",
            ),
            (
                "concentration_drift = { value = -1, unit = \"mol/m3\" }",
                "[estimator] concentration_drift",
                "must not be negative",
            ),
            (
                "initial_concentration_sigma = { EtOAc = { value = -1, unit = \"mol/m3\" } }",
                "[estimator] initial_concentration_sigma.EtOAc",
                "must not be negative",
            ),
            (
                "bias_sigma = -0.05",
                "[estimator] bias_sigma",
                "must not be negative, got -0.05",
            ),
            (
                "bias_drift = -1e-3",
                "[estimator] bias_drift",
                "must not be negative, got -0.001",
            ),
            (
                "flow_sigma = -0.01",
                "[estimator] flow_sigma",
                "must not be negative",
            ),
            ("bias_sigma = nan", "[estimator] bias_sigma", "finite"),
            (
                "flow_sigma = \"1 %\"",
                "[estimator] flow_sigma",
                "expected a number, got a string",
            ),
        ] {
            let text = with_estimator(&format!("{line}\n"));
            let e = err(&text);
            let needle = line.split(' ').next().unwrap_or(line);
            check(&e, &text, needle, key, &[part]);
        }
        // Zero is allowed for these (no drift, exact start, noiseless meters).
        let e = estimator(&with_estimator(
            "holdup_drift = { value = 0, unit = \"L\" }\nbias_sigma = 0\nbias_drift = 0\nflow_sigma = 0\n",
        ));
        assert_eq!(
            (e.holdup_drift, e.bias_sigma, e.bias_drift, e.flow_sigma),
            (0.0, 0.0, 0.0, 0.0)
        );
        // The level noise must be positive.
        for bad in ["-3", "0"] {
            let text = edit(
                &with_estimator(""),
                "level_sigma = { value = 3,",
                &format!("level_sigma = {{ value = {bad},"),
            );
            let e = err(&text);
            check(
                &e,
                &text,
                "level_sigma",
                "[estimator] level_sigma",
                &["must be positive", "mm (= "],
            );
        }
    }

    #[test]
    fn estimator_positive_numbers_and_cusum_order() {
        for (line, key) in [
            ("gate = 0", "[estimator] gate"),
            ("gate = -9.0", "[estimator] gate"),
            ("lab_sigma = 0.0", "[estimator] lab_sigma"),
            ("cusum_k = 0", "[estimator] cusum_k"),
            ("cusum_h = -5", "[estimator] cusum_h"),
        ] {
            let text = with_estimator(&format!("{line}\n"));
            let e = err(&text);
            let needle = line.split(' ').next().unwrap_or(line);
            check(&e, &text, needle, key, &["must be positive, got "]);
        }
        // Both given: the error is at cusum_h.
        let text = with_estimator("cusum_k = 2\ncusum_h = 2\n");
        let e = err(&text);
        check(
            &e,
            &text,
            "cusum_h",
            "[estimator] cusum_h",
            &["must be greater than cusum_k (2), got 2"],
        );
        let text = with_estimator("cusum_h = 1.5\ncusum_k = 3\n");
        let e = err(&text);
        check(
            &e,
            &text,
            "cusum_h",
            "[estimator] cusum_h",
            &["must be greater than cusum_k (3), got 1.5"],
        );
        // Only one given: it is compared with the other's default.
        let text = with_estimator("cusum_h = 0.4\n");
        let e = err(&text);
        check(
            &e,
            &text,
            "cusum_h",
            "[estimator] cusum_h",
            &["must be greater than cusum_k (default 0.5), got 0.4"],
        );
        let text = with_estimator("cusum_k = 6\n");
        let e = err(&text);
        check(
            &e,
            &text,
            "cusum_k",
            "[estimator] cusum_k",
            &["must be less than cusum_h (default 5), got 6"],
        );
        let e = estimator(&with_estimator("cusum_k = 0.25\ncusum_h = 0.3\n"));
        assert_eq!((e.cusum_k, e.cusum_h), (0.25, 0.3));
    }

    #[test]
    fn estimator_durations() {
        for (line, key, part) in [
            (
                "lab_max_age = \"6 hours\"",
                "[estimator] lab_max_age",
                "invalid duration \"6 hours\": unknown unit; write a number and one of ms, s, min, h",
            ),
            (
                "closure_window = \"30\"",
                "[estimator] closure_window",
                "no unit",
            ),
            (
                "lab_max_age = 6",
                "[estimator] lab_max_age",
                "expected a string, got an integer",
            ),
            (
                "lab_max_age = \"0 h\"",
                "[estimator] lab_max_age",
                "must be longer than 0 ms",
            ),
            // The EXAMPLE ticks once a second.
            (
                "closure_window = \"1999 ms\"",
                "[estimator] closure_window",
                "must be at least 2 ticks (2000 ms with tick 1000 ms), got 1999 ms",
            ),
        ] {
            let text = with_estimator(&format!("{line}\n"));
            let e = err(&text);
            let needle = line.split(' ').next().unwrap_or(line);
            check(&e, &text, needle, key, &[part]);
        }
        let e = estimator(&with_estimator(
            "closure_window = \"2 s\"\nlab_max_age = \"90 min\"\n",
        ));
        assert_eq!((e.closure_window_ms, e.lab_max_age_ms), (2_000, 5_400_000));
    }

    #[test]
    fn no_panic_on_a_mangled_estimator_section() {
        // Every prefix of the section after the example, and the section
        // with each line dropped: an error or a plant, never a panic.
        let full = format!("{EXAMPLE}{ESTIMATOR}");
        for (i, _) in full.char_indices().filter(|(i, _)| *i >= EXAMPLE.len()) {
            let _ = parse(&full[..i], path());
        }
        let lines: Vec<&str> = ESTIMATOR.lines().collect();
        for skip in 0..lines.len() {
            let kept: Vec<&str> = lines
                .iter()
                .enumerate()
                .filter(|(i, _)| *i != skip)
                .map(|(_, l)| *l)
                .collect();
            let text = format!("{EXAMPLE}{}\n", kept.join("\n"));
            if let Err(e) = parse(&text, path()) {
                assert!(!e.message.is_empty());
            }
        }
    }
}
