//! The TOML tree as the reader walks it: the file ([`Ctx`]) for line
//! numbers, tables ([`Tbl`]) with the name they are reported under, typed
//! getters that turn every wrong value into a [`ConfigError`], and the
//! top-level sections.

use std::borrow::Cow;
use std::path::Path;

use toml::de::{DeTable, DeValue};
use toml::Spanned;

use super::ConfigError;
use crate::plant::Species;
use crate::units;

pub(super) type R<T> = Result<T, ConfigError>;
pub(super) type Value<'a> = Spanned<DeValue<'a>>;
pub(super) type Key<'a> = Spanned<Cow<'a, str>>;

/// The file being read: its path and text (for line numbers).
pub(super) struct Ctx<'a> {
    pub(super) path: &'a Path,
    pub(super) text: &'a str,
}

impl Ctx<'_> {
    /// 1-based line of a byte offset.
    pub(super) fn line(&self, offset: usize) -> usize {
        let bytes = self.text.as_bytes();
        let end = offset.min(bytes.len());
        bytes
            .get(..end)
            .map_or(0, |b| b.iter().filter(|&&c| c == b'\n').count())
            + 1
    }

    pub(super) fn error(
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
pub(super) struct Tbl<'a> {
    pub(super) ctx: &'a Ctx<'a>,
    pub(super) table: &'a DeTable<'a>,
    /// Byte offset of the table (its header, or its inline `{`).
    pub(super) at: usize,
    /// `[vessel]`, `[[inlet]]`, `[tags."FI-101"]`, or empty at the top.
    pub(super) section: String,
    /// Dotted path inside the section (`flow`, `feed.NaOH`), or empty.
    pub(super) prefix: String,
}

/// Comma-separated list.
pub(super) fn list<S: AsRef<str>>(items: &[S]) -> String {
    let v: Vec<&str> = items.iter().map(AsRef::as_ref).collect();
    v.join(", ")
}

/// What the TOML value is, for "expected …, got …" messages.
pub(super) fn type_name(v: &DeValue<'_>) -> &'static str {
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
pub(super) fn number_of(v: &DeValue<'_>) -> Result<f64, String> {
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
    pub(super) fn name(&self, key: &str) -> String {
        match (self.section.is_empty(), self.prefix.is_empty()) {
            (true, true) => key.to_string(),
            (true, false) => format!("{}.{key}", self.prefix),
            (false, true) => format!("{} {key}", self.section),
            (false, false) => format!("{} {}.{key}", self.section, self.prefix),
        }
    }

    /// Reported name of this table itself.
    pub(super) fn own_name(&self) -> String {
        match (self.section.is_empty(), self.prefix.is_empty()) {
            (_, true) => self.section.clone(),
            (true, false) => self.prefix.clone(),
            (false, false) => format!("{} {}", self.section, self.prefix),
        }
    }

    /// Entries in the order they appear in the file.
    pub(super) fn entries(&self) -> Vec<(&'a Key<'a>, &'a Value<'a>)> {
        let mut v: Vec<_> = self.table.iter().collect();
        v.sort_by_key(|(k, _)| k.span().start);
        v
    }

    pub(super) fn get(&self, key: &str) -> Option<&'a Value<'a>> {
        self.table.get(key)
    }

    /// Byte offset of a key of this table (of the table if absent).
    pub(super) fn key_at(&self, key: &str) -> usize {
        self.table
            .get_key_value(key)
            .map_or(self.at, |(k, _)| k.span().start)
    }

    /// Error about `key`, at byte offset `at`.
    pub(super) fn err(&self, at: usize, key: &str, message: impl Into<String>) -> ConfigError {
        self.ctx.error(Some(at), self.name(key), message)
    }

    /// Error about this table as a whole, at its header.
    pub(super) fn err_here(&self, message: impl Into<String>) -> ConfigError {
        self.ctx.error(Some(self.at), self.own_name(), message)
    }

    /// A required key is missing.
    pub(super) fn missing(&self, key: &str, hint: &str) -> ConfigError {
        let message = if hint.is_empty() {
            "missing (required)".to_string()
        } else {
            format!("missing (required); {hint}")
        };
        self.err(self.at, key, message)
    }

    /// Refuse any key not in `allowed` (the first one in file order).
    pub(super) fn check_keys(&self, allowed: &[&str]) -> R<()> {
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
    pub(super) fn check_unused(&self, used: &[&str], why: &str) -> R<()> {
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
    pub(super) fn child(&self, key: &str, v: &'a Value<'a>, what: &str) -> R<Tbl<'a>> {
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

    pub(super) fn opt_child(&self, key: &str, what: &str) -> R<Option<Tbl<'a>>> {
        self.get(key).map(|v| self.child(key, v, what)).transpose()
    }

    /// An optional string, with its offset.
    pub(super) fn string(&self, key: &str) -> R<Option<(&'a str, usize)>> {
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
    pub(super) fn name_string(&self, key: &str, hint: &str) -> R<(&'a str, usize)> {
        let (s, at) = self.string(key)?.ok_or_else(|| self.missing(key, hint))?;
        if s.trim().is_empty() {
            return Err(self.err(at, key, "must not be empty"));
        }
        Ok((s, at))
    }

    /// An optional finite number, with its offset.
    pub(super) fn number(&self, key: &str) -> R<Option<(f64, usize)>> {
        match self.get(key) {
            None => Ok(None),
            Some(v) => number_of(v.get_ref())
                .map(|x| Some((x, v.span().start)))
                .map_err(|m| self.err(v.span().start, key, m)),
        }
    }

    /// An optional string that must be one of `options`.
    pub(super) fn choice<T: Copy>(
        &self,
        key: &str,
        options: &[(&str, T)],
    ) -> R<Option<(T, usize)>> {
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
    pub(super) fn duration(&self, key: &str) -> R<Option<(u64, usize)>> {
        let Some((s, at)) = self.string(key)? else {
            return Ok(None);
        };
        units::parse_duration_ms(s)
            .map(|ms| Some((ms, at)))
            .map_err(|e| self.err(at, key, e.to_string()))
    }
    /// A table keyed by species name: `(species index, key offset, value)`
    /// in file order.
    pub(super) fn species_map(
        &self,
        species: &[Species],
    ) -> R<Vec<(usize, &'a str, usize, &'a Value<'a>)>> {
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

/// The top-level table named `key`, if present.
pub(super) fn section<'a>(root: &Tbl<'a>, key: &str) -> R<Option<Tbl<'a>>> {
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

pub(super) fn required_section<'a>(root: &Tbl<'a>, key: &str, hint: &str) -> R<Tbl<'a>> {
    section(root, key)?.ok_or_else(|| {
        root.ctx.error(
            None,
            format!("[{key}]"),
            format!("missing section (required); {hint}"),
        )
    })
}

/// The array of tables `[[key]]` (empty if absent), at most `limit` long.
pub(super) fn array_section<'a>(
    root: &Tbl<'a>,
    key: &str,
    limit: usize,
    limit_name: &str,
) -> R<Vec<Tbl<'a>>> {
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
pub(super) fn unique_name(
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
