//! Unknowns of the plant file: a quantity written with `guess` instead of
//! `value` (`rate_constant = { guess = 1e-4, unit = "1/s", min = 1e-7,
//! max = 0.1 }`, or `bias = { guess = 0 }` for a dimensionless one) is a
//! parameter for `holdup fit` to estimate.
//!
//! The file is read as text with spans, and each unknown's inline table
//! is a hole in a [`Template`]: filling the holes with numbers gives an
//! ordinary plant file (`{ value = …, unit = "…" }`), which the normal
//! reader checks. So every place a fitted number goes is checked by the
//! same code as a written one, a fit can evaluate any set of values by
//! re-reading the filled text (a fraction of a millisecond), and the
//! fitted file keeps the user's layout and comments.

use std::fmt;
use std::ops::Range;
use std::path::Path;

use toml::de::{DeTable, DeValue};

use super::table::{number_of, type_name, Ctx, Value};
use super::ConfigError;
use crate::plant::Plant;

/// What an unknown is, for the plain-words checks of a fit.
#[derive(Clone, Debug, PartialEq, Eq)]
pub enum UnknownKind {
    /// A rate constant of reaction `index` (`reverse`: of its reverse).
    RateConstant {
        /// Reaction index in the file.
        index: usize,
        /// The reverse reaction's.
        reverse: bool,
    },
    /// An activation energy of reaction `index`.
    ActivationEnergy {
        /// Reaction index in the file.
        index: usize,
        /// The reverse reaction's.
        reverse: bool,
    },
    /// A constant feed concentration of an inlet.
    Feed,
    /// The relative bias of a stream's flow meter.
    MeterBias,
    /// The level transmitter's offset.
    LevelOffset,
    /// The initial holdup (volume or level).
    InitialHoldup,
    /// An initial concentration.
    InitialConcentration,
}

/// One unknown, as written.
#[derive(Clone, Debug, PartialEq)]
pub struct Unknown {
    /// Short name, unique in the file: `saponification.rate_constant`,
    /// `caustic pump P-11.bias`, `initial.NaOH`, `level.offset`.
    pub name: String,
    /// What it is.
    pub kind: UnknownKind,
    /// 1-based line of its table.
    pub line: usize,
    /// Byte range of its inline table in the file.
    pub span: Range<usize>,
    /// The unit as written (`None`: dimensionless, a meter bias).
    pub unit: Option<String>,
    /// First guess, in `unit`.
    pub guess: f64,
    /// Lower bound, in `unit`.
    pub min: Option<f64>,
    /// Upper bound, in `unit`.
    pub max: Option<f64>,
}

/// A plant file with holes where its unknowns are.
#[derive(Clone, Debug)]
pub struct Template {
    text: String,
    /// The unknowns in file order.
    pub unknowns: Vec<Unknown>,
}

/// Where a table sits in the file, for naming.
#[derive(Clone, Debug)]
enum Seg {
    Key(String),
    Index(usize),
}

impl fmt::Display for Seg {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Seg::Key(k) => write!(f, "{k}"),
            Seg::Index(i) => write!(f, "{}", i + 1),
        }
    }
}

const GUESS_KEYS: &[&str] = &["guess", "unit", "min", "max"];

/// What can be fitted, for the message when something else is marked.
const FITTABLE: &str = "[[reaction]] rate_constant and activation_energy (also under reverse), \
     [[inlet]] feed.<species>, [[inlet]]/[[outlet]] flow.bias, [level] offset, \
     [initial] volume, level and concentrations.<species>";

impl Template {
    /// Read the unknowns of `text` (`path` for messages). A file without
    /// any is a template without holes.
    pub fn parse(text: &str, path: &Path) -> Result<Self, ConfigError> {
        let ctx = Ctx { path, text };
        let doc = DeTable::parse(text).map_err(|e| {
            let at = e.span().map_or(0, |s| s.start);
            ctx.error(Some(at), "TOML syntax", e.message().to_string())
        })?;
        let mut unknowns = Vec::new();
        walk(
            &ctx,
            doc.get_ref(),
            doc.get_ref(),
            &mut Vec::new(),
            &mut unknowns,
        )?;
        unknowns.sort_by_key(|u| u.span.start);
        for (i, u) in unknowns.iter().enumerate() {
            if let Some(first) = unknowns[..i].iter().find(|v| v.name == u.name) {
                return Err(ConfigError {
                    path: path.to_path_buf(),
                    line: Some(u.line),
                    key: u.name.clone(),
                    message: format!(
                        "a second unknown with this name (first at line {}); give the streams \
                         or reactions distinct names",
                        first.line
                    ),
                });
            }
        }
        Ok(Self {
            text: text.to_string(),
            unknowns,
        })
    }

    /// The plant with the unknowns at `values` (in their units, file
    /// order; the guesses where `values` is shorter), checked by the
    /// normal reader and named in [`Plant::unknowns`].
    pub fn plant(&self, values: &[f64], path: &Path) -> Result<Plant, ConfigError> {
        let mut plant = super::parse_filled(&self.filled(values), path)?;
        plant.unknowns = self.unknowns.iter().map(|u| u.name.clone()).collect();
        Ok(plant)
    }

    /// The file with each unknown's table replaced by its value in
    /// `values` (in its unit, file order); the guesses if `values` is
    /// shorter.
    pub fn filled(&self, values: &[f64]) -> String {
        self.fill(values, |_| String::new())
    }

    /// As [`Template::filled`], with `note(i)` written as a comment at
    /// the end of unknown `i`'s line (nothing if empty).
    pub fn fill(&self, values: &[f64], note: impl Fn(usize) -> String) -> String {
        let mut out = String::with_capacity(self.text.len() + 64 * self.unknowns.len());
        let mut at = 0;
        let mut pending: Option<String> = None;
        for (i, u) in self.unknowns.iter().enumerate() {
            let piece = self.text.get(at..u.span.start).unwrap_or("");
            push_with_note(&mut out, piece, &mut pending);
            let v = values.get(i).copied().unwrap_or(u.guess);
            match &u.unit {
                Some(unit) => out.push_str(&format!(
                    "{{ value = {}, unit = {} }}",
                    number(v),
                    quoted(unit)
                )),
                None => out.push_str(&number(v)),
            }
            let n = note(i);
            if !n.is_empty() {
                pending = Some(match pending.take() {
                    Some(p) => format!("{p}; {n}"),
                    None => n,
                });
            }
            at = u.span.end;
        }
        let rest = self.text.get(at..).unwrap_or("");
        push_with_note(&mut out, rest, &mut pending);
        if let Some(n) = pending {
            out.push_str(&format!("  # {n}"));
        }
        out
    }
}

/// Append `piece`, putting a pending note before its first line end.
fn push_with_note(out: &mut String, piece: &str, pending: &mut Option<String>) {
    match (pending.as_ref(), piece.find('\n')) {
        (Some(n), Some(nl)) => {
            out.push_str(&piece[..nl]);
            out.push_str(&format!("  # {n}"));
            out.push_str(&piece[nl..]);
            *pending = None;
        }
        _ => out.push_str(piece),
    }
}

/// A TOML float that reads back to the same `f64`.
fn number(v: f64) -> String {
    // `{:?}` is the shortest round-trip form and always has a `.` or an
    // exponent, which TOML needs for a float.
    format!("{v:?}")
}

fn quoted(s: &str) -> String {
    let mut out = String::from("\"");
    for c in s.chars() {
        match c {
            '"' => out.push_str("\\\""),
            '\\' => out.push_str("\\\\"),
            c => out.push(c),
        }
    }
    out.push('"');
    out
}

fn walk<'a>(
    ctx: &Ctx<'_>,
    root: &'a DeTable<'a>,
    table: &'a DeTable<'a>,
    path: &mut Vec<Seg>,
    out: &mut Vec<Unknown>,
) -> Result<(), ConfigError> {
    for (k, v) in table.iter() {
        path.push(Seg::Key(k.get_ref().to_string()));
        match v.get_ref() {
            DeValue::Table(t) if t.contains_key("guess") => {
                out.push(unknown(ctx, root, path, v, t)?);
            }
            DeValue::Table(t) => walk(ctx, root, t, path, out)?,
            DeValue::Array(items) => {
                for (i, item) in items.iter().enumerate() {
                    if let DeValue::Table(t) = item.get_ref() {
                        path.push(Seg::Index(i));
                        walk(ctx, root, t, path, out)?;
                        path.pop();
                    }
                }
            }
            _ => {}
        }
        path.pop();
    }
    Ok(())
}

/// The `name` of entry `index` of the array of tables `section`.
fn entry_name(root: &DeTable<'_>, section: &str, index: usize) -> String {
    let name = root
        .get(section)
        .and_then(|v| match v.get_ref() {
            DeValue::Array(items) => items.get(index),
            _ => None,
        })
        .and_then(|item| match item.get_ref() {
            DeValue::Table(t) => t.get("name"),
            _ => None,
        })
        .and_then(|n| match n.get_ref() {
            DeValue::String(s) => Some(s.to_string()),
            _ => None,
        });
    name.unwrap_or_else(|| format!("{section} {}", index + 1))
}

fn unknown(
    ctx: &Ctx<'_>,
    root: &DeTable<'_>,
    path: &[Seg],
    v: &Value<'_>,
    t: &DeTable<'_>,
) -> Result<Unknown, ConfigError> {
    let key: Vec<String> = path.iter().map(ToString::to_string).collect();
    let key = key.join(".");
    let at = v.span().start;
    let err = |at: usize, m: String| ctx.error(Some(at), key.clone(), m);
    let segs: Vec<&Seg> = path.iter().collect();
    fn k(s: &Seg) -> Option<&str> {
        match s {
            Seg::Key(k) => Some(k.as_str()),
            Seg::Index(_) => None,
        }
    }
    let i = |s: &Seg| match s {
        Seg::Index(i) => Some(*i),
        Seg::Key(_) => None,
    };
    let strs: Vec<Option<&str>> = segs.iter().map(|s| k(s)).collect();
    let (name, kind, dimensionless) = match strs.as_slice() {
        [Some("reaction"), None, Some(q @ ("rate_constant" | "activation_energy"))] => {
            let index = i(segs[1]).unwrap_or(0);
            (
                format!("{}.{q}", entry_name(root, "reaction", index)),
                reaction_kind(q, index, false),
                false,
            )
        }
        [Some("reaction"), None, Some("reverse"), Some(q @ ("rate_constant" | "activation_energy"))] =>
        {
            let index = i(segs[1]).unwrap_or(0);
            (
                format!("{}.reverse.{q}", entry_name(root, "reaction", index)),
                reaction_kind(q, index, true),
                false,
            )
        }
        [Some("inlet"), None, Some("feed"), Some(sp)] => (
            format!(
                "{}.feed.{sp}",
                entry_name(root, "inlet", i(segs[1]).unwrap_or(0))
            ),
            UnknownKind::Feed,
            false,
        ),
        [Some(s @ ("inlet" | "outlet")), None, Some("flow"), Some("bias")] => (
            format!("{}.bias", entry_name(root, s, i(segs[1]).unwrap_or(0))),
            UnknownKind::MeterBias,
            true,
        ),
        [Some("level"), Some("offset")] => {
            ("level.offset".to_string(), UnknownKind::LevelOffset, false)
        }
        [Some("initial"), Some(q @ ("volume" | "level"))] => {
            (format!("initial.{q}"), UnknownKind::InitialHoldup, false)
        }
        [Some("initial"), Some("concentrations"), Some(sp)] => (
            format!("initial.{sp}"),
            UnknownKind::InitialConcentration,
            false,
        ),
        _ => {
            return Err(err(
                at,
                format!("cannot be fitted (only a number can be); these can: {FITTABLE}"),
            ))
        }
    };
    let inline = ctx.text.as_bytes().get(v.span().start) == Some(&b'{');
    if !inline {
        return Err(err(
            at,
            "write an unknown as an inline table on one line, { guess = …, unit = \"…\" }"
                .to_string(),
        ));
    }
    for (key, val) in t.iter() {
        if !GUESS_KEYS.contains(&key.get_ref().as_ref()) {
            return Err(err(
                key.span().start,
                format!(
                    "unknown key \"{}\" in an unknown; valid keys: guess, unit, min, max",
                    key.get_ref()
                ),
            ));
        }
        if key.get_ref() == "unit" && !matches!(val.get_ref(), DeValue::String(_)) {
            return Err(err(
                val.span().start,
                format!("unit: expected a string, got {}", type_name(val.get_ref())),
            ));
        }
    }
    let num = |name: &str| -> Result<Option<f64>, ConfigError> {
        t.get(name)
            .map(|x| {
                number_of(x.get_ref()).map_err(|m| err(x.span().start, format!("{name}: {m}")))
            })
            .transpose()
    };
    let guess = num("guess")?.unwrap_or(0.0);
    let (min, max) = (num("min")?, num("max")?);
    let unit = t.get("unit").and_then(|u| match u.get_ref() {
        DeValue::String(s) => Some(s.to_string()),
        _ => None,
    });
    match (&unit, dimensionless) {
        (Some(_), true) => {
            return Err(err(
                at,
                "a meter bias is relative (0.03 = reads 3 % high) and has no unit".to_string(),
            ))
        }
        (None, false) => {
            return Err(err(
                at,
                "missing unit (required): { guess = …, unit = \"…\" }".to_string(),
            ))
        }
        _ => {}
    }
    if let (Some(lo), Some(hi)) = (min, max) {
        if lo >= hi {
            return Err(err(at, format!("min ({lo}) must be below max ({hi})")));
        }
    }
    if min.is_some_and(|lo| guess <= lo) || max.is_some_and(|hi| guess >= hi) {
        return Err(err(
            at,
            format!(
                "the guess {guess} must lie strictly inside the bounds [{}, {}]",
                min.map_or("-inf".into(), |x| x.to_string()),
                max.map_or("inf".into(), |x| x.to_string())
            ),
        ));
    }
    Ok(Unknown {
        name,
        kind,
        line: ctx.line(at),
        span: v.span(),
        unit,
        guess,
        min,
        max,
    })
}

fn reaction_kind(q: &str, index: usize, reverse: bool) -> UnknownKind {
    if q == "rate_constant" {
        UnknownKind::RateConstant { index, reverse }
    } else {
        UnknownKind::ActivationEnergy { index, reverse }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    const PLANT: &str = r#"
[[reaction]]
name = "decay"
rate_constant = { guess = 2e-4, unit = "1/s", min = 1e-7, max = 0.1 }   # from the pilot plant
activation_energy = { value = 50, unit = "kJ/mol" }

[[inlet]]
name = "feed"
flow = { tag = "FI-1", unit = "m3/h", bias = { guess = 0.0 } }
"#;

    #[test]
    fn finds_names_and_fills_holes_keeping_comments() {
        let t = Template::parse(PLANT, Path::new("p.toml")).unwrap();
        let names: Vec<&str> = t.unknowns.iter().map(|u| u.name.as_str()).collect();
        assert_eq!(names, ["decay.rate_constant", "feed.bias"]);
        assert_eq!(t.unknowns[0].line, 4);
        assert_eq!(t.unknowns[0].min, Some(1e-7));
        let text = t.fill(&[3.1e-4, 0.025], |i| format!("fitted {i}"));
        assert!(text.contains(
            "rate_constant = { value = 0.00031, unit = \"1/s\" }   # from the pilot plant  # fitted 0"
        ));
        assert!(text.contains("bias = 0.025 }  # fitted 1"));
        // The guesses when no values are given.
        assert!(t.filled(&[]).contains("{ value = 0.0002, unit = \"1/s\" }"));
    }

    #[test]
    fn refuses_unfittable_places_and_bad_bounds_with_line() {
        let e = Template::parse(
            "[vessel]\ndiameter = { guess = 1.2, unit = \"m\" }\n",
            Path::new("p.toml"),
        )
        .unwrap_err();
        assert_eq!(e.line, Some(2));
        assert!(e.message.contains("cannot be fitted"), "{e}");
        let e = Template::parse(
            "[[reaction]]\nrate_constant = { guess = 1, unit = \"1/s\", min = 2 }\n",
            Path::new("p.toml"),
        )
        .unwrap_err();
        assert!(e.message.contains("strictly inside"), "{e}");
        let e = Template::parse(
            "[[inlet]]\nflow = { tag = \"F\", unit = \"m3/h\", bias = { guess = 0, unit = \"%\" } }\n",
            Path::new("p.toml"),
        )
        .unwrap_err();
        assert!(e.message.contains("no unit"), "{e}");
    }
}
