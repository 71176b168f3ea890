//! `[initial]`: the initial volume, given directly or as a level.

use super::*;

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
