//! `[log]` and `[tags."…"]`.

use super::*;

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
fn log_options() {
    let text =
        format!("{MINIMAL}\n[log]\nformat = \"long\"\ntime = \"epoch\"\nmax_age = \"90 s\"\n");
    let p = ok(&text);
    assert_eq!(
        (p.log.format, p.log.time, p.log.max_age_ms),
        (LogFormat::Long, TimeFormat::Epoch, 90_000)
    );
    // time_column now names the long format's time column too.
    let text = format!("{MINIMAL}\n[log]\nformat = \"long\"\ntime_column = \"t\"\n");
    assert_eq!(ok(&text).log.time_column.as_deref(), Some("t"));
    let text = format!("{MINIMAL}\n[log]\nformat = \"wide\"\ntag_column = \"name\"\n");
    let e = err(&text);
    check(&e, &text, "tag_column", "[log] tag_column", &["\"long\""]);
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
fn time_zone_pattern_and_dialect_keys() {
    use crate::plant::{Decimal, Delimiter};
    use crate::zone::Zone;
    let text = format!(
        "{MINIMAL}\n[log]\ntimezone = \"Europe/Vienna\"\ntime_format = \"%d.%m.%Y %H:%M:%S\"\n\
         delimiter = \";\"\ndecimal = \"comma\"\ntag_column = \"point\"\nvalue_column = \"v\"\n\
         quality_column = \"q\"\n"
    );
    let p = ok(&text);
    let vienna = Zone::from_name("Europe/Vienna").unwrap();
    assert_eq!(p.log.timezone, Some(vienna));
    // Reports default to the log's zone.
    assert_eq!(p.log.output_zone, vienna);
    assert_eq!(p.log.time, TimeFormat::Pattern);
    assert_eq!(p.log.time_pattern.as_deref(), Some("%d.%m.%Y %H:%M:%S"));
    assert_eq!(p.log.delimiter, Delimiter::Byte(b';'));
    assert_eq!(p.log.decimal, Decimal::Comma);
    assert_eq!(
        (
            p.log.tag_column.as_deref(),
            p.log.value_column.as_deref(),
            p.log.quality_column.as_deref()
        ),
        (Some("point"), Some("v"), Some("q"))
    );
    let text = format!(
        "{MINIMAL}\n[log]\ntimezone = \"America/Chicago\"\nreport_times = \"utc\"\ntime = \"epoch_ms\"\n"
    );
    let p = ok(&text);
    assert_eq!(
        (p.log.output_zone, p.log.time),
        (Zone::Utc, TimeFormat::EpochMs)
    );
    assert_eq!(ok(MINIMAL).log.output_zone, Zone::Utc);

    // A misspelt zone: the key and close names.
    let text = format!("{MINIMAL}\n[log]\ntimezone = \"Europe/Viena\"\n");
    let e = err(&text);
    check(
        &e,
        &text,
        "timezone",
        "[log] timezone",
        &["did you mean \"Europe/Vienna\""],
    );
    // A pattern that cannot read a date-time back.
    let text = format!("{MINIMAL}\n[log]\ntimezone = \"UTC\"\ntime_format = \"%H:%M\"\n");
    let e = err(&text);
    check(
        &e,
        &text,
        "time_format",
        "[log] time_format",
        &["cannot read a date-time back"],
    );
    let text = format!("{MINIMAL}\n[log]\ntimezone = \"UTC\"\ntime_format = \"%Y-%Q\"\n");
    let e = err(&text);
    check(
        &e,
        &text,
        "time_format",
        "[log] time_format",
        &["not a valid pattern"],
    );
    // A naive pattern needs the zone; one with an offset does not.
    let text = format!("{MINIMAL}\n[log]\ntime_format = \"%m/%d/%Y %I:%M:%S %p\"\n");
    let e = err(&text);
    check(
        &e,
        &text,
        "time_format",
        "[log] time_format",
        &["set `timezone`"],
    );
    let text = format!("{MINIMAL}\n[log]\ntime_format = \"%d.%m.%Y %H:%M %z\"\n");
    assert_eq!(ok(&text).log.time, TimeFormat::Pattern);
    let text = format!("{MINIMAL}\n[log]\ntime = \"epoch\"\ntime_format = \"%d.%m.%Y %H:%M %z\"\n");
    let e = err(&text);
    check(
        &e,
        &text,
        "time_format",
        "[log] time_format",
        &["remove `time`"],
    );
    let text = format!("{MINIMAL}\n[log]\ndelimiter = \",\"\ndecimal = \"comma\"\n");
    let e = err(&text);
    check(
        &e,
        &text,
        "decimal",
        "[log] decimal",
        &["delimiter other than"],
    );
    let text = format!("{MINIMAL}\n[log]\ndelimiter = \":\"\n");
    let e = err(&text);
    check(&e, &text, ":", "[log] delimiter", &["\"tab\""]);
}

#[test]
fn every_log_key_is_documented() {
    // Each key of [log] appears in the doc's example block (as `key =`,
    // commented or not) and in its prose (as `key`).
    let path = Path::new(env!("CARGO_MANIFEST_DIR")).join("../docs/config.md");
    let doc = std::fs::read_to_string(&path).unwrap_or_else(|e| panic!("{}: {e}", path.display()));
    let block: String = doc
        .lines()
        .skip_while(|l| !l.starts_with("[log]"))
        .take_while(|l| !l.starts_with("[tags."))
        .collect::<Vec<_>>()
        .join("\n");
    let prose: String = doc
        .lines()
        .skip_while(|l| !l.starts_with("## Reading the log"))
        .take_while(|l| !l.starts_with("## Input conditioning"))
        .collect::<Vec<_>>()
        .join("\n");
    for key in crate::config::log::LOG_KEYS {
        assert!(
            block.contains(&format!("{key} =")),
            "[log] {key} not in the example"
        );
        if *key != "format" && *key != "max_age" {
            assert!(
                prose.contains(&format!("`{key}")),
                "[log] {key} not in \"Reading the log\""
            );
        }
    }
}
