//! `[log]` (how the historian log is read) and `[tags."…"]` (per-tag
//! interpolation, staleness and conditioning of the tags the plant uses).

use toml::de::DeValue;

use super::table::{list, section, type_name, Tbl, R};
use crate::plant::{
    Conditioning, EmptyCells, Interpolation, LogFormat, LogOptions, TagOptions, TimeFormat,
};

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
    "plc",
];

/// Default `[log] max_age`: 10 min.
const DEFAULT_MAX_AGE_MS: u64 = 600_000;

/// `[log]`, or its defaults when absent.
pub(super) fn read_log(root: &Tbl<'_>) -> R<LogOptions> {
    match section(root, "log")? {
        None => Ok(LogOptions {
            format: LogFormat::Auto,
            time: TimeFormat::Auto,
            time_column: None,
            max_age_ms: DEFAULT_MAX_AGE_MS,
            empty_cells: EmptyCells::Skip,
        }),
        Some(l) => read_options(&l),
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
        empty_cells: EmptyCells::Skip,
    })
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
