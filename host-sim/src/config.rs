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
//!
//! One module per concern, each section's valid keys beside its reader:
//! `table` (the TOML tree, typed getters, top-level sections), `quantity`
//! (values with units) and `source` (constant or tag, and every tag use);
//! then the sections in the order they are read: `settings` (`[plant]`),
//! `vessel`, `species`, `streams` (`[[inlet]]`, `[[outlet]]`), `measured`
//! (`[temperature]`, `[level]`, `[[analyser]]`), `reaction`, `initial`,
//! `log` (`[log]`, `[tags."…"]`), `estimator`, `plc` (`[plc]`, the
//! `plc` table of `[tags."…"]`, for a live run) and `fit` (`[fit]`);
//! `unknowns` finds the quantities written with `guess` for `holdup fit`.

mod estimator;
mod fit;
mod flow;
mod initial;
mod log;
mod measured;
mod plc;
mod quantity;
mod reaction;
mod settings;
mod source;
mod species;
mod streams;
mod table;
#[cfg(test)]
mod tests;
mod unknowns;
mod vessel;

pub use self::fit::{DEFAULT_HOLD_OUT, DEFAULT_LAB_SIGMA, DEFAULT_MAX_EVALUATIONS};
pub use self::unknowns::{Template, Unknown, UnknownKind};

use std::fmt;
use std::path::{Path, PathBuf};

use self::estimator::EstimatorContext;
use self::source::TagUses;
use self::table::{required_section, section, Ctx, Tbl, R};
use crate::plant::Plant;

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
/// the result. Unknowns (quantities written with `guess`) are held at
/// their guess and named in [`Plant::unknowns`].
pub fn parse(text: &str, path: &Path) -> Result<Plant, ConfigError> {
    if !text.contains("guess") {
        return parse_filled(text, path);
    }
    Template::parse(text, path)?.plant(&[], path)
}

/// [`parse`] of a file without unknowns (a filled [`Template`]).
pub fn parse_filled(text: &str, path: &Path) -> Result<Plant, ConfigError> {
    let ctx = Ctx { path, text };
    let doc = toml::de::DeTable::parse(text).map_err(|e| {
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

/// The sections of the file, each read by the module named after it.
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
    "plc",
    "fit",
];

/// The whole file, section by section in the order each needs the ones
/// before it (species before the streams that name them, the vessel before
/// what is checked against its size, every tag use before `[tags."…"]`).
fn read_plant(root: &Tbl<'_>) -> R<Plant> {
    let ctx = root.ctx;
    root.check_keys(TOP_KEYS)?;
    let p = required_section(root, "plant", "it holds name and tick")?;
    let settings = settings::read(&p)?;
    let v = required_section(root, "vessel", "it holds the shape and size")?;
    let (shape, geometry) = vessel::read(&v)?;
    let capacity = geometry.max_volume();
    let min_holdup = settings.min_holdup(ctx, capacity)?;
    let species = species::read(root)?;

    let mut tags = TagUses::default();
    let inlets = streams::read_inlets(root, &species, &mut tags)?;
    let outlets = streams::read_outlets(root, geometry.max_level(), &mut tags)?;
    let temperature = measured::read_temperature(root, &mut tags)?;
    let level = measured::read_level(root, &mut tags)?;
    let tick_ms = u64::from(settings.tick_ms);
    let analysers = measured::read_analysers(root, &species, tick_ms, &mut tags)?;
    let reactions = reaction::read_all(root, &species)?;
    let i = required_section(root, "initial", "the initial volume or level")?;
    let initial = initial::read(&i, &geometry, &species)?;
    let log = log::read_log(root)?;
    let tag_options = log::read_tags(root, &tags.distinct(), &log)?;
    let used: Vec<String> = tag_options.iter().map(|t| t.tag.clone()).collect();
    let plc = plc::read(root, &used, tick_ms)?;

    let fit_section = section(root, "fit")?;
    let estimator = match section(root, "estimator")? {
        None => None,
        Some(e) => Some(estimator::read(
            &e,
            &EstimatorContext {
                tick_ms,
                capacity,
                has_level: level.is_some(),
                species: &species,
                inlets: &inlets,
                outlets: &outlets,
                initial: &initial,
            },
        )?),
    };

    let fit = fit::read(
        fit_section.as_ref(),
        estimator.as_ref().map(|e| e.lab_sigma),
    )?;

    Ok(Plant {
        path: ctx.path.to_path_buf(),
        name: settings.name.to_string(),
        tick_ms: settings.tick_ms,
        scalar: settings.scalar,
        method: settings.method,
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
        plc,
        fit,
        unknowns: Vec::new(),
    })
}
