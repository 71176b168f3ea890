//! Units as plants log them: a level in % of the transmitter's span and
//! mass flows with a constant or logged density. Expected values worked
//! out by hand.

use super::*;

fn with(extra: &str) -> String {
    format!("{MINIMAL}\n{extra}")
}

#[test]
fn a_level_in_percent_of_its_span_reads_in_metres() {
    let p = ok(&with(
        "[level]\ntag = \"LT-4\"\nunit = \"%\"\nlower = { value = 15, unit = \"cm\" }\nupper = { value = 1.95, unit = \"m\" }\n",
    ));
    let level = p.level.unwrap();
    // 0 % → 0.15 m, 100 % → 1.95 m, 50 % → 0.15 + 0.5·1.8 = 1.05 m.
    assert!(close(level.to_si(0.0), 0.15));
    assert!(close(level.to_si(100.0), 1.95));
    assert!(close(level.to_si(50.0), 1.05));
    assert_eq!(level.tag(), Some("LT-4"));
}

#[test]
fn a_level_span_is_checked() {
    let text = with(
        "[level]\ntag = \"LT-4\"\nunit = \"%\"\nlower = { value = 2, unit = \"m\" }\nupper = { value = 1, unit = \"m\" }\n",
    );
    let e = err(&text);
    assert_eq!(e.line, Some(line_of(&text, "upper =")));
    assert!(e.to_string().contains("must be above lower (2 m)"), "{e}");
    let text = with("[level]\ntag = \"LT-4\"\nunit = \"%\"\nupper = { value = 1, unit = \"m\" }\n");
    assert!(
        err(&text).to_string().contains("[level] lower: missing"),
        "{}",
        err(&text)
    );
    let text = with("[level]\ntag = \"LT-4\"\nunit = \"m\"\nupper = { value = 1, unit = \"m\" }\n");
    let e = err(&text).to_string();
    assert!(
        e.contains("[level] upper: only used with unit = \"%\""),
        "{e}"
    );
}

fn inlet_flow(flow: &str) -> String {
    MINIMAL.replace(
        "flow = { value = 1, unit = \"m3/h\" }",
        &format!("flow = {flow}"),
    )
}

#[test]
fn a_mass_flow_with_a_constant_density_is_a_volumetric_flow() {
    // 3.6 t/h = 1 kg/s; at 800 kg/m³ that is 1/800 m³/s = 1.25e-3 m³/s.
    let p = ok(&inlet_flow(
        "{ tag = \"FT-9\", unit = \"t/h\", density = { value = 0.8, unit = \"kg/L\" } }",
    ));
    assert!(close(p.inlets[0].flow.to_si(3.6), 1.25e-3));
    assert_eq!(p.tags.len(), 1);
    // A constant mass flow and density: 7200 kg/h at 1000 kg/m³ = 7.2 m³/h
    // = 2e-3 m³/s.
    let p = ok(&inlet_flow(
        "{ value = 7200, unit = \"kg/h\", density = { value = 1000, unit = \"kg/m3\" } }",
    ));
    assert!(close(p.inlets[0].flow.to_si(0.0), 2e-3));
}

#[test]
fn a_mass_flow_with_a_logged_density_divides_at_every_reading() {
    let p = ok(&inlet_flow(
        "{ tag = \"FT-9\", unit = \"kg/s\", density = { tag = \"DT-9\", unit = \"g/cm3\" } }",
    ));
    let f = &p.inlets[0].flow;
    assert_eq!(f.density().map(|d| d.tag.as_str()), Some("DT-9"));
    // 2 kg/s at 1.25 g/cm³ = 1250 kg/m³ → 1.6e-3 m³/s.
    assert!(close(f.to_si_with(2.0, 1.25), 1.6e-3));
    // A density that is no reading gives no flow reading.
    assert!(f.to_si_with(2.0, 0.0).is_nan());
    assert!(f.to_si_with(2.0, f64::NAN).is_nan());
    let tags: Vec<&str> = p.tags.iter().map(|t| t.tag.as_str()).collect();
    assert_eq!(tags, ["FT-9", "DT-9"]);
    assert!(p.tags[0].flow && !p.tags[1].flow);
}

#[test]
fn mass_flow_mistakes_name_the_key() {
    let text = inlet_flow("{ tag = \"FT-9\", unit = \"t/h\" }");
    let e = err(&text).to_string();
    assert!(
        e.contains("[[inlet]] flow.density: missing") && e.contains("kg/m3"),
        "{e}"
    );
    let text = inlet_flow(
        "{ tag = \"FT-9\", unit = \"m3/h\", density = { value = 1000, unit = \"kg/m3\" } }",
    );
    let e = err(&text).to_string();
    assert!(
        e.contains("flow.density: only used with a mass-flow unit"),
        "{e}"
    );
    let text = inlet_flow("{ tag = \"FT-9\", unit = \"tph\" }");
    let e = err(&text).to_string();
    assert!(
        e.contains("unknown flow unit \"tph\"") && e.contains("t/h"),
        "{e}"
    );
    let text =
        inlet_flow("{ value = 5, unit = \"t/h\", density = { tag = \"DT-9\", unit = \"kg/m3\" } }");
    let e = err(&text).to_string();
    assert!(
        e.contains("a constant mass flow needs a constant density"),
        "{e}"
    );
    let text =
        inlet_flow("{ tag = \"FT-9\", unit = \"t/h\", density = { value = 0, unit = \"kg/m3\" } }");
    assert!(
        err(&text).to_string().contains("must be positive"),
        "{}",
        err(&text)
    );
}
