//! Tests of the configuration reader, through [`super::parse`] as a user's
//! file would be read: here the shared example files and helpers and the
//! tests of the file as a whole; those of one section in the module named
//! after it; [`docs`]: the example of `docs/config.md`.

mod docs;
mod estimator;
mod initial;
mod log;
mod measured;
mod plant_units;
mod plc;
mod reaction;
mod streams;
mod vessel;

use super::*;
use crate::plant::{
    BiasMeter, EmptyCells, Estimator, Interpolation, LogFormat, LogOptions, OutletKind, ScalarKind,
    Signal, TimeFormat,
};
use holdup_kernel::units::GAS_CONSTANT;
use holdup_kernel::{Bottom, Method, Shape};

/// The full example of `docs/config.md`, with the species that its
/// reaction names (EtOAc, NaOAc, EtOH) defined. An invented plant.
const EXAMPLE: &str = r#"# Line 2 of an invented demo plant.
[plant]
name = "Line 2 saponification reactor"
tick = "1 s"
scalar = "f32"
method = "auto"
min_holdup = { value = 50, unit = "L" }

[vessel]
shape = "vertical-cylinder"
diameter = { value = 1.6, unit = "m" }
height = { value = 2.0, unit = "m" }
bottom = "dished"
bottom_depth = { value = 0.25, unit = "m" }

[[species]]
name = "NaOH"
molar_mass = { value = 39.997, unit = "g/mol" }

[[species]]
name = "EtOAc"
molar_mass = { value = 88.106, unit = "g/mol" }

[[species]]
name = "NaOAc"

[[species]]
name = "EtOH"

[[inlet]]
name = "caustic pump"
flow = { tag = "FI-101", unit = "m3/h" }
feed = { NaOH = { value = 0.1, unit = "mol/L" } }

[[inlet]]
name = "ester pump"
flow = { value = 30, unit = "L/min" }
feed = { EtOAc = { tag = "AI-102", unit = "g/L" } }

[[outlet]]
name = "product"
kind = "measured"
flow = { tag = "FI-201", unit = "m3/h" }

[[outlet]]
name = "drain"
kind = "orifice"
discharge_coefficient = 0.61
diameter = { value = 50, unit = "mm" }
elevation = { value = 10, unit = "cm" }

[temperature]
tag = "TI-301"
unit = "degC"

[level]
tag = "LI-301"
unit = "m"

[[reaction]]
name = "saponification"
stoichiometry = { NaOH = -1, EtOAc = -1, NaOAc = 1, EtOH = 1 }
orders = { NaOH = 1, EtOAc = 1 }
rate_constant = { value = 0.11, unit = "L/(mol*s)" }
activation_energy = { value = 41, unit = "kJ/mol" }
reference_temperature = { value = 25, unit = "degC" }
reverse = { rate_constant = { value = 0.6, unit = "1/h" }, orders = { NaOAc = 1 } }

[initial]
volume = { value = 2.5, unit = "m3" }
concentrations = { NaOH = { value = 5, unit = "mol/m3" } }
temperature = { value = 77, unit = "degF" }

[log]
format = "auto"
time = "auto"
time_column = "time"
max_age = "10 min"

[tags."FI-101"]
interpolation = "hold"
max_age = "30 min"
"#;

/// The smallest valid configuration: only what is required.
const MINIMAL: &str = r#"[plant]
name = "Test tank"
tick = "500 ms"

[vessel]
shape = "vertical-cylinder"
diameter = { value = 1.6, unit = "m" }
height = { value = 2.0, unit = "m" }

[[species]]
name = "A"

[[species]]
name = "B"

[[inlet]]
name = "feed"
flow = { value = 1, unit = "m3/h" }

[temperature]
value = 20
unit = "degC"

[initial]
volume = { value = 1, unit = "m3" }
"#;

fn path() -> &'static Path {
    Path::new("plant.toml")
}

fn ok(text: &str) -> Plant {
    parse(text, path()).unwrap_or_else(|e| panic!("{e}\n{text}"))
}

fn err(text: &str) -> ConfigError {
    match parse(text, path()) {
        Ok(_) => panic!("accepted:\n{text}"),
        Err(e) => e,
    }
}

/// 1-based line of the first line containing `needle` (the expected line
/// of an error, found independently of the reader).
fn line_of(text: &str, needle: &str) -> usize {
    text.lines()
        .position(|l| l.contains(needle))
        .unwrap_or_else(|| panic!("{needle:?} not in text"))
        + 1
}

/// `text` with `from` replaced (which must occur).
fn edit(text: &str, from: &str, to: &str) -> String {
    assert!(text.contains(from), "{from:?} not in text");
    text.replacen(from, to, 1)
}

/// Error at the line of `needle`, with key `key`, message containing
/// every one of `parts`.
fn check(e: &ConfigError, text: &str, needle: &str, key: &str, parts: &[&str]) {
    assert_eq!(e.path, PathBuf::from("plant.toml"));
    assert_eq!(e.line, Some(line_of(text, needle)), "{e}");
    assert_eq!(e.key, key, "{e}");
    for p in parts {
        assert!(e.message.contains(p), "{p:?} not in: {e}");
    }
}

fn close(a: f64, b: f64) -> bool {
    (a - b).abs() <= 1e-12 * b.abs().max(1e-300)
}

#[test]
fn full_example_parses_into_si() {
    let p = ok(EXAMPLE);
    assert_eq!(p.path, PathBuf::from("plant.toml"));
    assert_eq!(p.name, "Line 2 saponification reactor");
    assert_eq!(p.tick_ms, 1000);
    assert_eq!(p.scalar, ScalarKind::F32);
    assert_eq!(p.method, Method::Auto);
    // 50 L = 0.05 m³.
    assert!(close(p.min_holdup, 0.05));
    assert_eq!(
        p.shape,
        Shape::VerticalCylinder {
            diameter: 1.6,
            height: 2.0,
            bottom: Bottom::Dished { depth: 0.25 }
        }
    );
    let names: Vec<&str> = p.species.iter().map(|s| s.name.as_str()).collect();
    assert_eq!(names, ["NaOH", "EtOAc", "NaOAc", "EtOH"]);
    assert!(close(p.species[0].molar_mass.unwrap(), 0.039_997));
    assert_eq!(p.species[2].molar_mass, None);

    // Inlet 1: tag in m³/h (1/3600), feed 0.1 mol/L = 100 mol/m³.
    let caustic = &p.inlets[0];
    assert_eq!(caustic.name, "caustic pump");
    match &caustic.flow {
        Signal::Tag {
            tag,
            scale,
            offset,
            unit,
            density: None,
        } => {
            assert_eq!(tag, "FI-101");
            assert!(close(*scale, 1.0 / 3600.0));
            assert_eq!(*offset, 0.0);
            assert_eq!(unit, "m3/h");
        }
        other => panic!("{other:?}"),
    }
    assert_eq!(caustic.feed.len(), 4);
    assert!(close(caustic.feed[0].to_si(0.0), 100.0));
    assert_eq!(caustic.feed[1], Signal::Constant(0.0));
    // Inlet 2: 30 L/min = 5e-4 m³/s; EtOAc in g/L with M = 88.106 g/mol:
    // 1 g/L = 1 kg/m³ = 1/0.088106 mol/m³ = 11.3499648…
    let ester = &p.inlets[1];
    assert!(close(ester.flow.to_si(0.0), 5e-4));
    assert_eq!(ester.feed[1].tag(), Some("AI-102"));
    assert!((ester.feed[1].to_si(1.0) - 11.349_964_815_108).abs() < 1e-9);

    assert_eq!(p.outlets.len(), 2);
    assert_eq!(
        p.outlets[0].kind.clone(),
        match &p.outlets[0].kind {
            OutletKind::Measured(s) if s.tag() == Some("FI-201") => p.outlets[0].kind.clone(),
            other => panic!("{other:?}"),
        }
    );
    match p.outlets[1].kind {
        OutletKind::Orifice {
            discharge_coefficient,
            area,
            elevation,
        } => {
            assert_eq!(discharge_coefficient, 0.61);
            // π·(0.05 m)²/4 = 1.9634954…e-3 m².
            assert!(close(area, 1.963_495_408_493_62e-3));
            assert!(close(elevation, 0.1));
        }
        ref other => panic!("{other:?}"),
    }

    // 25 °C read as raw 25 → 298.15 K.
    assert!(close(p.temperature.to_si(25.0), 298.15));
    assert_eq!(p.level.as_ref().and_then(Signal::tag), Some("LI-301"));

    let r = &p.reactions[0];
    assert_eq!(r.name, "saponification");
    assert_eq!(r.stoichiometry, [-1.0, -1.0, 1.0, 1.0]);
    assert_eq!(r.forward.orders, [1.0, 1.0, 0.0, 0.0]);
    // 0.11 L/(mol·s) = 1.1e-4 m³/(mol·s); 41 kJ/mol; 25 °C.
    assert!(close(r.forward.rate_constant, 1.1e-4));
    assert!(close(r.forward.activation_energy, 41_000.0));
    assert!(close(r.reference_temperature, 298.15));
    let rev = r.reverse.as_ref().unwrap();
    // 0.6 1/h = 1/6000 1/s.
    assert!(close(rev.rate_constant, 0.6 / 3600.0));
    assert_eq!(rev.activation_energy, 0.0);
    assert_eq!(rev.orders, [0.0, 0.0, 1.0, 0.0]);

    assert!(close(p.initial.volume, 2.5));
    assert_eq!(p.initial.concentrations, [5.0, 0.0, 0.0, 0.0]);
    // 77 °F = 25 °C = 298.15 K.
    assert!(close(p.initial.temperature.unwrap(), 298.15));

    assert_eq!(p.log.format, LogFormat::Auto);
    assert_eq!(p.log.time, TimeFormat::Auto);
    assert_eq!(p.log.time_column.as_deref(), Some("time"));
    assert_eq!(p.log.max_age_ms, 600_000);

    // One entry per tag, in the order of first use in the file.
    let tags: Vec<(&str, Interpolation, u64, bool)> = p
        .tags
        .iter()
        .map(|t| (t.tag.as_str(), t.interpolation, t.max_age_ms, t.flow))
        .collect();
    assert_eq!(
        tags,
        [
            ("FI-101", Interpolation::Hold, 1_800_000, true),
            ("AI-102", Interpolation::Linear, 600_000, false),
            ("FI-201", Interpolation::Linear, 600_000, true),
            ("TI-301", Interpolation::Linear, 600_000, false),
            ("LI-301", Interpolation::Linear, 600_000, false),
        ]
    );
    // The Arrhenius factor the replay will build stays finite at the
    // reference temperature: exp(−Ea/R·(1/T − 1/Tref)) = 1.
    let f = (-r.forward.activation_energy / GAS_CONSTANT
        * (1.0 / 298.15 - 1.0 / r.reference_temperature))
        .exp();
    assert!(close(f, 1.0));
}

#[test]
fn minimal_config_gets_the_defaults() {
    let p = ok(MINIMAL);
    assert_eq!(p.tick_ms, 500);
    assert_eq!(p.scalar, ScalarKind::F32);
    assert_eq!(p.method, Method::Auto);
    // Flat cylinder: capacity π·0.8²·2 m³; default min holdup 1 %.
    let capacity = core::f64::consts::PI * 0.64 * 2.0;
    assert!(close(p.min_holdup, 0.01 * capacity));
    assert_eq!(
        p.shape,
        Shape::VerticalCylinder {
            diameter: 1.6,
            height: 2.0,
            bottom: Bottom::Flat
        }
    );
    assert!(close(p.inlets[0].flow.to_si(0.0), 1.0 / 3600.0));
    assert_eq!(
        p.inlets[0].feed,
        [Signal::Constant(0.0), Signal::Constant(0.0)]
    );
    assert!(p.outlets.is_empty() && p.reactions.is_empty() && p.tags.is_empty());
    assert_eq!(p.temperature, Signal::Constant(293.15));
    assert_eq!(p.level, None);
    assert_eq!(p.initial.temperature, None);
    assert_eq!(p.initial.concentrations, [0.0, 0.0]);
    assert_eq!(
        p.log,
        LogOptions {
            format: LogFormat::Auto,
            time: TimeFormat::Auto,
            time_column: None,
            max_age_ms: 600_000,
            empty_cells: EmptyCells::Skip,
            ..LogOptions::default()
        }
    );
}

#[test]
fn plant_options_and_defaults() {
    let text = edit(
        MINIMAL,
        "tick = \"500 ms\"",
        "tick = \"2 min\"\nscalar = \"f64\"\nmethod = \"rk4-reference\"",
    );
    let p = ok(&text);
    assert_eq!(
        (p.tick_ms, p.scalar, p.method),
        (120_000, ScalarKind::F64, Method::ReferenceRk4)
    );
    for (name, method) in [
        ("exact", Method::Exact),
        ("mprk22", Method::Mprk22),
        ("euler-reference", Method::ReferenceEuler),
    ] {
        let text = edit(
            MINIMAL,
            "tick = \"500 ms\"",
            &format!("tick = \"1 h\"\nmethod = \"{name}\""),
        );
        assert_eq!(ok(&text).method, method);
    }
    let text = edit(
        MINIMAL,
        "tick = \"500 ms\"",
        "tick = \"1 s\"\nmethod = \"rk4\"",
    );
    let e = err(&text);
    check(
        &e,
        &text,
        "method",
        "[plant] method",
        &["\"rk4\"", "\"rk4-reference\"", "\"mprk22\""],
    );
    for bad in ["0 s", "61 min", "0.5 ms", "1 day"] {
        let text = edit(MINIMAL, "500 ms", bad);
        let e = err(&text);
        check(&e, &text, "tick", "[plant] tick", &[]);
    }
}

#[test]
fn unknown_key_at_the_top_level() {
    let text = format!("{MINIMAL}\n[vesel]\nshape = \"sphere\"\n");
    let e = err(&text);
    check(
        &e,
        &text,
        "[vesel]",
        "vesel",
        &["unknown section", "plant, vessel, species"],
    );
}

#[test]
fn unknown_key_in_a_section() {
    let text = edit(MINIMAL, "height = {", "hieght = {");
    let e = err(&text);
    check(
            &e,
            &text,
            "hieght",
            "[vessel] hieght",
            &["unknown key; valid keys: shape, diameter, height, length, width, bottom, bottom_depth, strapping"],
        );
}

#[test]
fn unknown_key_in_an_inline_table() {
    let text = edit(
        MINIMAL,
        "flow = { value = 1, unit = \"m3/h\" }",
        "flow = { value = 1, unit = \"m3/h\", tga = \"FI-1\" }",
    );
    let e = err(&text);
    check(
        &e,
        &text,
        "tga",
        "[[inlet]] flow.tga",
        &["valid keys: value, tag, unit"],
    );
    // A constant-only quantity says why a tag is not a valid key.
    let text = edit(
        MINIMAL,
        "{ value = 1, unit = \"m3\" }",
        "{ tag = \"LI-1\", unit = \"m3\" }",
    );
    let e = err(&text);
    check(
        &e,
        &text,
        "LI-1",
        "[initial] volume.tag",
        &["valid keys: value, unit", "cannot be read from the log"],
    );
}

#[test]
fn unknown_unit_lists_the_valid_units() {
    let text = edit(MINIMAL, "unit = \"m3/h\"", "unit = \"m3/hr\"");
    let e = err(&text);
    check(&e, &text, "m3/hr", "[[inlet]] flow.unit", &[]);
    assert_eq!(
        e.to_string(),
        format!(
            "plant.toml:{}: [[inlet]] flow.unit: unknown flow unit \"m3/hr\"; volumetric: m3/s, \
                 m3/h, m3/min, L/s, L/min, L/h, US gal/min, ft3/min, ft3/h; mass, with a density: \
                 kg/s, kg/min, kg/h, t/h, t/d, lb/min, lb/h",
            line_of(&text, "m3/hr")
        )
    );
    let text = edit(MINIMAL, "unit = \"degC\"", "unit = \"celsius\"");
    let e = err(&text);
    check(&e, &text, "celsius", "[temperature] unit", &["degC", "°F"]);
}

#[test]
fn a_number_where_a_quantity_is_expected() {
    let text = edit(
        MINIMAL,
        "diameter = { value = 1.6, unit = \"m\" }",
        "diameter = 1.6",
    );
    let e = err(&text);
    check(
        &e,
        &text,
        "diameter",
        "[vessel] diameter",
        &["unit = \"m\"", "got a float", "m, cm, mm, ft, in"],
    );
    let text = edit(MINIMAL, "value = 1.6", "value = \"1.6\"");
    let e = err(&text);
    check(
        &e,
        &text,
        "diameter",
        "[vessel] diameter.value",
        &["expected a number, got a string"],
    );
}

#[test]
fn unknown_species_lists_the_defined_ones() {
    let text = edit(EXAMPLE, "feed = { NaOH = {", "feed = { NaOh = {");
    let e = err(&text);
    check(
        &e,
        &text,
        "NaOh",
        "[[inlet]] feed.NaOh",
        &["unknown species \"NaOh\"; defined species: NaOH, EtOAc, NaOAc, EtOH"],
    );
    let text = edit(EXAMPLE, "NaOAc = 1, EtOH = 1 }", "NaOAc = 1, Ethanol = 1 }");
    let e = err(&text);
    check(
        &e,
        &text,
        "Ethanol",
        "[[reaction]] stoichiometry.Ethanol",
        &["defined species"],
    );
    let text = edit(EXAMPLE, "orders = { NaOAc = 1 }", "orders = { NaAc = 1 }");
    let e = err(&text);
    check(
        &e,
        &text,
        "NaAc",
        "[[reaction]] reverse.orders.NaAc",
        &["unknown species"],
    );
    let text = edit(EXAMPLE, "concentrations = { NaOH", "concentrations = { KOH");
    let e = err(&text);
    check(
        &e,
        &text,
        "KOH",
        "[initial] concentrations.KOH",
        &["unknown species"],
    );
}

#[test]
fn too_many_species() {
    let mut text = MINIMAL.to_string();
    for i in 0..7 {
        text.push_str(&format!("\n[[species]]\nname = \"S{i}\"\n"));
    }
    // 2 + 7 = 9 species: the ninth is refused at its header.
    let e = err(&text);
    assert_eq!(e.key, "[[species]]");
    assert_eq!(e.line, Some(line_of(&text, "name = \"S6\"") - 1));
    assert!(
        e.message.contains("at most 8 (plant::limits::SPECIES)"),
        "{e}"
    );
    // Eight are fine.
    let eight = text.replace("\n[[species]]\nname = \"S6\"\n", "");
    assert_eq!(ok(&eight).species.len(), 8);
}

#[test]
fn at_least_one_species_and_inlet() {
    let text = MINIMAL.replace(
        "[[species]]\nname = \"A\"\n\n[[species]]\nname = \"B\"\n",
        "",
    );
    let e = err(&text);
    assert_eq!((e.line, e.key.as_str()), (None, "[[species]]"));
    assert!(e.message.contains("at least 1 species"), "{e}");
    let text = edit(
        MINIMAL,
        "[[inlet]]\nname = \"feed\"\nflow = { value = 1, unit = \"m3/h\" }\n",
        "",
    );
    let e = err(&text);
    assert_eq!((e.line, e.key.as_str()), (None, "[[inlet]]"));
    assert!(e.message.contains("at least 1 inlet"), "{e}");
    let text = edit(MINIMAL, "[temperature]\nvalue = 20\nunit = \"degC\"\n", "");
    let e = err(&text);
    assert_eq!(e.to_string(), "plant.toml: [temperature]: missing section (required); the vessel temperature: tag = \"...\", unit = \"degC\" (or value = ..., unit = ...)");
}

#[test]
fn duplicate_names() {
    let text = edit(MINIMAL, "name = \"B\"", "name = \"A\"");
    let e = err(&text);
    assert_eq!(e.key, "[[species]] name");
    assert_eq!(e.line, Some(line_of(&text, "name = \"A\"") + 3));
    assert!(
        e.message.contains(&format!(
            "duplicate species name \"A\" (first defined at line {})",
            line_of(&text, "name = \"A\"")
        )),
        "{e}"
    );
    let text = format!(
        "{EXAMPLE}\n[[inlet]]\nname = \"ester pump\"\nflow = {{ value = 1, unit = \"L/s\" }}\n"
    );
    let e = err(&text);
    assert_eq!(
        (e.key.as_str(), e.line),
        ("[[inlet]] name", Some(text.lines().count() - 1))
    );
}

#[test]
fn constants_must_be_in_range() {
    let text = edit(
        MINIMAL,
        "value = 1, unit = \"m3/h\"",
        "value = -1, unit = \"m3/h\"",
    );
    let e = err(&text);
    check(
        &e,
        &text,
        "flow",
        "[[inlet]] flow",
        &["must not be negative, got -1 m3/h (= -0.000277777777778 m3/s)"],
    );
    let text = edit(MINIMAL, "value = 20", "value = -300");
    let e = err(&text);
    check(&e, &text, "-300", "[temperature]", &["above absolute zero"]);
    let text = edit(
        EXAMPLE,
        "value = 5, unit = \"mol/m3\"",
        "value = -5, unit = \"mol/m3\"",
    );
    let e = err(&text);
    check(
        &e,
        &text,
        "concentrations",
        "[initial] concentrations.NaOH",
        &["must not be negative"],
    );
    let text = edit(
        EXAMPLE,
        "min_holdup = { value = 50, unit = \"L\" }",
        "min_holdup = { value = 5, unit = \"m3\" }",
    );
    let e = err(&text);
    check(
        &e,
        &text,
        "min_holdup",
        "[plant] min_holdup",
        &["below the vessel capacity"],
    );
}

#[test]
fn non_finite_numbers_are_refused() {
    for bad in ["nan", "inf", "-inf", "1e400"] {
        let text = edit(MINIMAL, "value = 1.6", &format!("value = {bad}"));
        let e = err(&text);
        check(
            &e,
            &text,
            "diameter",
            "[vessel] diameter.value",
            &["finite"],
        );
    }
    let text = edit(
        MINIMAL,
        "value = 1, unit = \"m3/h\"",
        "value = 99999999999999999999, unit = \"m3/h\"",
    );
    let e = err(&text);
    check(&e, &text, "flow", "[[inlet]] flow.value", &["out of range"]);
    // Hex integers and underscores are numbers like any other.
    let text = edit(
        MINIMAL,
        "value = 1, unit = \"m3/h\"",
        "value = 0x24, unit = \"m3/h\"",
    );
    assert!(close(ok(&text).inlets[0].flow.to_si(0.0), 0.01));
    let text = edit(
        MINIMAL,
        "value = 1, unit = \"m3/h\"",
        "value = 3_6.0, unit = \"m3/h\"",
    );
    assert!(close(ok(&text).inlets[0].flow.to_si(0.0), 0.01));
}

#[test]
fn tag_and_value_together() {
    let text = edit(MINIMAL, "value = 20\n", "value = 20\ntag = \"TI-1\"\n");
    let e = err(&text);
    check(
        &e,
        &text,
        "TI-1",
        "[temperature] tag",
        &["either value or tag, not both"],
    );
}

#[test]
fn malformed_toml_names_the_line() {
    let text = edit(
        MINIMAL,
        "height = { value = 2.0, unit = \"m\" }",
        "height = { value = 2.0 unit = \"m\" }",
    );
    let e = err(&text);
    assert_eq!(e.key, "TOML syntax");
    assert_eq!(e.line, Some(line_of(&text, "height")), "{e}");
    let text = edit(
        MINIMAL,
        "tick = \"500 ms\"",
        "tick = \"500 ms\"\nname = \"again\"",
    );
    let e = err(&text);
    check(&e, &text, "again", "TOML syntax", &["duplicate key"]);
    let text = format!("{MINIMAL}x = \n");
    let e = err(&text);
    assert_eq!(e.line, Some(text.lines().count()), "{e}");
}

#[test]
fn wrong_table_shapes() {
    let text = format!("vessel = 3\n{MINIMAL}");
    let text = text.replace("[vessel]\nshape", "[vessel_]\nshape");
    let e = err(&text);
    check(&e, &text, "vessel_", "vessel_", &["unknown section"]);
    let text = edit(MINIMAL, "[[inlet]]", "[inlet]");
    let e = err(&text);
    check(
        &e,
        &text,
        "[inlet]",
        "inlet",
        &["write [[inlet]] before each entry"],
    );
    let text = format!(
        "temperature = 20\n{}",
        MINIMAL.replace("[temperature]\nvalue = 20\nunit = \"degC\"", "")
    );
    let e = err(&text);
    check(
        &e,
        &text,
        "temperature = 20",
        "temperature",
        &["expected a table [temperature]"],
    );
}

#[test]
fn load_reads_a_file_and_names_it() {
    let dir = std::env::temp_dir().join(format!("holdup-config-test-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    let good = dir.join("plant.toml");
    std::fs::write(&good, EXAMPLE).unwrap();
    let p = load(&good).unwrap();
    assert_eq!(p.path, good);
    let bad = dir.join("bad.toml");
    std::fs::write(&bad, edit(EXAMPLE, "value = 1.6", "value = -1.6")).unwrap();
    let e = load(&bad).unwrap_err();
    assert_eq!(e.path, bad);
    assert!(
        e.to_string()
            .starts_with(&format!("{}:11: [vessel] diameter:", bad.display())),
        "{e}"
    );
    let missing = dir.join("missing.toml");
    let e = load(&missing).unwrap_err();
    assert_eq!((e.line, e.key.as_str()), (None, ""));
    assert!(
        e.to_string()
            .starts_with(&format!("{}: cannot read", missing.display())),
        "{e}"
    );
    std::fs::remove_dir_all(&dir).unwrap();
}

#[test]
fn no_panic_on_truncated_or_mangled_input() {
    // Every prefix of the example (most are invalid in some way) and the
    // example with each line dropped: an error or a plant, never a panic.
    let mut n = 0;
    for (i, _) in EXAMPLE.char_indices() {
        let _ = parse(&EXAMPLE[..i], path());
        n += 1;
    }
    let lines: Vec<&str> = EXAMPLE.lines().collect();
    for skip in 0..lines.len() {
        let text: Vec<&str> = lines
            .iter()
            .enumerate()
            .filter(|(i, _)| *i != skip)
            .map(|(_, l)| *l)
            .collect();
        if let Err(e) = parse(&text.join("\n"), path()) {
            assert!(!e.message.is_empty());
        }
        n += 1;
    }
    assert!(n > 1000);
}

#[test]
fn meter_bias_divides_the_reading_and_level_offset_adds() {
    let text = edit(
        MINIMAL,
        "flow = { value = 1, unit = \"m3/h\" }",
        "flow = { tag = \"FI-1\", unit = \"m3/h\", bias = 0.03 }",
    )
        + "\n[level]\ntag = \"LI-1\"\nunit = \"m\"\noffset = { value = 25, unit = \"mm\" }\n";
    let p = ok(&text);
    // 1.03 m³/h read by a meter 3 % high is 1 m³/h.
    let q = p.inlets[0].flow.to_si(1.03);
    assert!((q - 1.0 / 3600.0).abs() < 1e-15, "{q}");
    let z = p.level.as_ref().expect("level").to_si(1.0);
    assert!((z - 1.025).abs() < 1e-15, "{z}");

    let bad = edit(
        MINIMAL,
        "flow = { value = 1, unit = \"m3/h\" }",
        "flow = { value = 1, unit = \"m3/h\", bias = 0.03 }",
    );
    check(
        &err(&bad),
        &bad,
        "bias = 0.03",
        "[[inlet]] flow.bias",
        &["belongs to a meter"],
    );
    let bad = edit(
        MINIMAL,
        "flow = { value = 1, unit = \"m3/h\" }",
        "flow = { tag = \"FI-1\", unit = \"m3/h\", bias = 0.7 }",
    );
    check(
        &err(&bad),
        &bad,
        "bias = 0.7",
        "[[inlet]] flow.bias",
        &["between -0.5 and 0.5"],
    );
}

#[test]
fn unknowns_are_held_at_their_guess_and_named() {
    let text = edit(
        MINIMAL,
        "volume = { value = 1, unit = \"m3\" }",
        "volume = { guess = 1.5, unit = \"m3\", min = 0.5 }",
    ) + "\n[fit]\nhold_out = 0\n";
    let p = ok(&text);
    assert_eq!(p.initial.volume, 1.5);
    assert_eq!(p.unknowns, ["initial.volume"]);
    assert_eq!(p.fit.hold_out, 0.0);
    let bad = text.replace("hold_out = 0", "hold_out = 0.9");
    check(
        &err(&bad),
        &bad,
        "hold_out = 0.9",
        "[fit] hold_out",
        &["0 (none) to 0.75"],
    );
}
