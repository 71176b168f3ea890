//! `[[inlet]]` and `[[outlet]]`.

use super::*;

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
