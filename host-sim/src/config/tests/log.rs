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
