//! `[log]` (how the historian log is read) and `[tags."…"]` (per-tag
//! interpolation, staleness and conditioning of the tags the plant uses).

use toml::de::DeValue;

use super::table::{list, section, type_name, Tbl, R};
use crate::plant::{
    Conditioning, Decimal, Delimiter, EmptyCells, Interpolation, LogFormat, LogOptions, TagOptions,
    TimeFormat,
};
use crate::zone::Zone;

pub(super) const LOG_KEYS: &[&str] = &[
    "format",
    "time",
    "time_format",
    "timezone",
    "report_times",
    "time_column",
    "tag_column",
    "value_column",
    "quality_column",
    "delimiter",
    "decimal",
    "max_age",
];
const TAG_KEYS: &[&str] = &[
    "interpolation",
    "max_age",
    "min",
    "max",
    "max_rate",
    "stuck",
    "stuck_tolerance",
    "hold",
    "plc",
];

/// Default `[log] max_age`: 10 min.
const DEFAULT_MAX_AGE_MS: u64 = 600_000;

/// `[log]`, or its defaults when absent.
pub(super) fn read_log(root: &Tbl<'_>) -> R<LogOptions> {
    match section(root, "log")? {
        None => Ok(LogOptions {
            max_age_ms: DEFAULT_MAX_AGE_MS,
            ..LogOptions::default()
        }),
        Some(l) => read_options(&l),
    }
}

/// A column-name key: a non-empty string, or absent.
fn column_key(t: &Tbl<'_>, key: &str) -> R<Option<(String, usize)>> {
    match t.string(key)? {
        None => Ok(None),
        Some((s, at)) if s.trim().is_empty() => Err(t.err(at, key, "must not be empty")),
        Some((s, at)) => Ok(Some((s.trim().to_string(), at))),
    }
}

/// `[log]`.
fn read_options(t: &Tbl<'_>) -> R<LogOptions> {
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
    let mut time = t
        .choice(
            "time",
            &[
                ("auto", TimeFormat::Auto),
                ("iso8601", TimeFormat::Iso8601),
                ("epoch", TimeFormat::Epoch),
                ("epoch_s", TimeFormat::Epoch),
                ("epoch_ms", TimeFormat::EpochMs),
                ("epoch_us", TimeFormat::EpochUs),
            ],
        )?
        .map_or(TimeFormat::Auto, |(f, _)| f);
    let timezone = match t.string("timezone")? {
        None => None,
        Some((s, at)) => Some(Zone::from_name(s).map_err(|m| t.err(at, "timezone", m))?),
    };
    let time_pattern = match t.string("time_format")? {
        None => None,
        Some((s, at)) => {
            if time != TimeFormat::Auto {
                return Err(t.err(
                    at,
                    "time_format",
                    "a pattern replaces `time`; remove `time` (or set it to \"auto\")",
                ));
            }
            let with_offset = check_pattern(s).map_err(|m| t.err(at, "time_format", m))?;
            if !with_offset && timezone.is_none() {
                return Err(t.err(
                    at,
                    "time_format",
                    "the pattern has no offset (%z or %:z), so its times are local: \
                     set `timezone` too (an IANA name such as \"Europe/Vienna\")",
                ));
            }
            time = TimeFormat::Pattern;
            Some(s.to_string())
        }
    };
    let output_zone = match t.choice("report_times", &[("log", false), ("utc", true)])? {
        Some((true, _)) => Zone::Utc,
        _ => timezone.unwrap_or(Zone::Utc),
    };
    let time_column = column_key(t, "time_column")?.map(|(s, _)| s);
    let long_only = |key: &str| -> R<Option<String>> {
        match column_key(t, key)? {
            Some((_, at)) if format == LogFormat::Wide => Err(t.err(
                at,
                key,
                "only used by format \"long\" (or \"auto\" detecting a long log)",
            )),
            other => Ok(other.map(|(s, _)| s)),
        }
    };
    let tag_column = long_only("tag_column")?;
    let value_column = long_only("value_column")?;
    let quality_column = long_only("quality_column")?;
    let delimiter = t
        .choice(
            "delimiter",
            &[
                ("auto", Delimiter::Auto),
                (",", Delimiter::Byte(b',')),
                (";", Delimiter::Byte(b';')),
                ("tab", Delimiter::Byte(b'\t')),
                ("|", Delimiter::Byte(b'|')),
            ],
        )?
        .map_or(Delimiter::Auto, |(d, _)| d);
    let decimal = match t.choice(
        "decimal",
        &[
            ("auto", Decimal::Auto),
            ("point", Decimal::Point),
            ("comma", Decimal::Comma),
        ],
    )? {
        None => Decimal::Auto,
        Some((Decimal::Comma, at)) if delimiter == Delimiter::Byte(b',') => {
            return Err(t.err(
                at,
                "decimal",
                "a decimal comma needs a delimiter other than \",\" (set `delimiter`)",
            ))
        }
        Some((d, _)) => d,
    };
    let max_age_ms = match t.duration("max_age")? {
        None => DEFAULT_MAX_AGE_MS,
        Some((0, at)) => return Err(t.err(at, "max_age", "must be longer than 0 ms")),
        Some((ms, _)) => ms,
    };
    Ok(LogOptions {
        format,
        time,
        time_pattern,
        timezone,
        output_zone,
        time_column,
        tag_column,
        value_column,
        quality_column,
        delimiter,
        decimal,
        max_age_ms,
        empty_cells: EmptyCells::Skip,
    })
}

/// Check a `time_format` pattern: it must write a date-time that it reads
/// back (year, month, day, hour and minute at least). Returns whether it
/// carries an offset (`%z`, `%:z`, …).
fn check_pattern(pattern: &str) -> Result<bool, String> {
    use chrono::format::{Item, StrftimeItems};
    use std::fmt::Write;
    if StrftimeItems::new(pattern).any(|i| matches!(i, Item::Error)) {
        return Err(format!(
            "\"{pattern}\" is not a valid pattern (strftime-like: %Y %m %d %H %M %S %I %p %z …)"
        ));
    }
    // 2026-03-29T14:05:00+01:00: a sample written with the pattern.
    let sample = chrono::FixedOffset::east_opt(3600)
        .and_then(|o| {
            chrono::NaiveDate::from_ymd_opt(2026, 3, 29)
                .and_then(|d| d.and_hms_opt(14, 5, 0))
                .and_then(|n| n.and_local_timezone(o).single())
        })
        .ok_or("internal: sample date")?;
    let mut text = String::new();
    if write!(text, "{}", sample.format(pattern)).is_err() {
        return Err(format!("\"{pattern}\" cannot write a date-time"));
    }
    if chrono::DateTime::parse_from_str(&text, pattern).ok() == Some(sample) {
        return Ok(true);
    }
    if chrono::NaiveDateTime::parse_from_str(&text, pattern).ok() == Some(sample.naive_local()) {
        return Ok(false);
    }
    Err(format!(
        "\"{pattern}\" cannot read a date-time back (it wrote \"{text}\"); it needs the \
         year, month, day, hour and minute, e.g. \"%d.%m.%Y %H:%M:%S\""
    ))
}

/// The options of every tag in `used` (distinct tags in first-use order,
/// with whether any use is a flow): `log`'s defaults, overridden by
/// `[tags."…"]`, which may only name a used tag.
pub(super) fn read_tags(
    root: &Tbl<'_>,
    used: &[(String, bool)],
    log: &LogOptions,
) -> R<Vec<TagOptions>> {
    let ctx = root.ctx;
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
    let Some(ts) = section(root, "tags")? else {
        return Ok(tag_options);
    };
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
        read_tag(&t, options)?;
    }
    Ok(tag_options)
}

/// One `[tags."…"]` table into the tag's `options`.
fn read_tag(t: &Tbl<'_>, options: &mut TagOptions) -> R<()> {
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
    options.conditioning = read_conditioning(t)?;
    Ok(())
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
