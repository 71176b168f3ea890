//! The example plant of `docs/config.md` (the TOML block under
//! "## Sections"), read from the doc itself by the reader.
//!
//! The example is not a complete file as written: its `[vessel]` lists the
//! keys of every shape, each commented with the shapes it is for, while its
//! `shape` is a vertical cylinder. The test assembles the file the way the
//! doc says, keeping only the vertical cylinder's keys (dropping `length`,
//! for horizontal cylinders and rectangular vessels, and `width`, for
//! rectangular ones), and checks that each dropped line is one the reader
//! refuses for this shape.

use super::*;

/// `docs/config.md`, read when the test runs.
fn doc() -> String {
    let path = Path::new(env!("CARGO_MANIFEST_DIR")).join("../docs/config.md");
    std::fs::read_to_string(&path).unwrap_or_else(|e| panic!("{}: {e}", path.display()))
}

/// The first ```toml block after the heading `heading`.
fn toml_block_after(doc: &str, heading: &str) -> String {
    let mut lines = doc.lines().skip_while(|l| l.trim() != heading);
    assert!(
        lines.next().is_some(),
        "no heading {heading:?} in docs/config.md"
    );
    let mut lines = lines.skip_while(|l| l.trim() != "```toml");
    assert!(lines.next().is_some(), "no ```toml block after {heading:?}");
    let mut block = String::new();
    for line in lines.by_ref() {
        if line.trim() == "```" {
            return block;
        }
        block.push_str(line);
        block.push('\n');
    }
    panic!("the ```toml block after {heading:?} is not closed");
}

/// Keys of the example's `[vessel]` used only by other shapes than its
/// vertical cylinder.
const OTHER_SHAPES_KEYS: [&str; 2] = ["length", "width"];

/// The example as a file: `block` without the lines of `[vessel]` that set
/// one of [`OTHER_SHAPES_KEYS`]; with the lines dropped.
fn assemble(block: &str) -> (String, Vec<String>) {
    let mut file = String::new();
    let mut dropped = Vec::new();
    let mut table = "";
    for line in block.lines() {
        let trimmed = line.trim_start();
        if trimmed.starts_with('[') {
            table = trimmed.split('#').next().unwrap_or("").trim();
        }
        let key = trimmed.split('=').next().unwrap_or("").trim();
        if table == "[vessel]" && trimmed.contains('=') && OTHER_SHAPES_KEYS.contains(&key) {
            dropped.push(line.to_string());
        } else {
            file.push_str(line);
            file.push('\n');
        }
    }
    (file, dropped)
}

#[test]
fn dropped_vessel_keys_are_the_ones_the_shape_refuses() {
    let (file, dropped) = assemble(&toml_block_after(&doc(), "## Sections"));
    let shape_line = "shape = \"vertical-cylinder\"";
    assert!(file.contains(shape_line), "the example's shape changed");
    for line in &dropped {
        let key = line.split('=').next().unwrap_or("").trim();
        let text = file.replacen(
            "[vessel]\n",
            &format!("[vessel]\n{}\n", line.split('#').next().unwrap_or("")),
            1,
        );
        let e = err(&text);
        assert_eq!(e.key, format!("[vessel] {key}"), "{e}");
        assert!(
            e.message.contains("not used by shape vertical-cylinder"),
            "{e}"
        );
    }
}

#[test]
fn docs_example_parses_into_si() {
    let (file, _) = assemble(&toml_block_after(&doc(), "## Sections"));
    let p = ok(&file);
    assert_eq!(p.name, "Line 2 saponification reactor");
    assert_eq!(p.tick_ms, 1000);
    assert_eq!(p.scalar, ScalarKind::F32);
    assert_eq!(p.method, Method::Auto);
    // 50 L.
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
    assert_eq!(names, ["NaOH", "EtOAc", "NaOAc"]);
    // 39.997 g/mol.
    assert!(close(p.species[0].molar_mass.unwrap(), 0.039_997));

    // A flow tag in m³/h: 1/3600 to m³/s; the feed 0.1 mol/L = 100 mol/m³.
    let caustic = &p.inlets[0];
    assert_eq!(caustic.flow.tag(), Some("FI-101"));
    assert!(close(caustic.flow.to_si(3600.0), 1.0));
    assert!(close(caustic.feed[0].to_si(0.0), 100.0));
    assert_eq!(caustic.feed[1], Signal::Constant(0.0));
    match &p.outlets[0].kind {
        OutletKind::Measured(s) => assert_eq!(s.tag(), Some("FI-201")),
        other => panic!("{other:?}"),
    }
    // 25 °C read from TI-301 is 298.15 K.
    assert_eq!(p.temperature.tag(), Some("TI-301"));
    assert!(close(p.temperature.to_si(25.0), 298.15));
    assert_eq!(p.level.as_ref().and_then(Signal::tag), Some("LI-301"));

    // The analyser: 0.004 mol/L = 4 mol/m³, one reading per 5 min.
    let a = &p.analysers[0];
    assert_eq!(a.species, 0);
    assert_eq!(a.reading.tag(), Some("AI-201"));
    assert!(close(a.reading.to_si(0.1), 100.0));
    assert!(close(a.sigma, 4.0));
    assert_eq!(a.cycle_ms, 300_000);

    // 0.11 L/(mol·s) = 1.1e-4 m³/(mol·s); 41 kJ/mol; 25 °C.
    let r = &p.reactions[0];
    assert_eq!(r.stoichiometry, [-1.0, -1.0, 1.0]);
    assert_eq!(r.forward.orders, [1.0, 1.0, 0.0]);
    assert!(close(r.forward.rate_constant, 1.1e-4));
    assert!(close(r.forward.activation_energy, 41_000.0));
    assert!(close(r.reference_temperature, 298.15));
    assert_eq!(r.reverse, None);

    assert!(close(p.initial.volume, 2.5));
    assert_eq!(p.initial.concentrations, [5.0, 0.0, 0.0]);
    assert!(close(p.initial.temperature.unwrap(), 298.15));

    assert_eq!(p.log.time_column.as_deref(), Some("time"));
    assert_eq!(p.log.max_age_ms, 600_000);
    let fi101 = p.tags.iter().find(|t| t.tag == "FI-101").unwrap();
    assert_eq!(fi101.interpolation, Interpolation::Linear);
    assert_eq!(fi101.max_age_ms, 1_800_000);
    assert!(fi101.flow);
    // Conditioning limits stay in the tag's own unit (m³/h here).
    let c = &fi101.conditioning;
    assert_eq!((c.min, c.max), (Some(-0.05), Some(4.0)));
    assert_eq!(c.max_rate_per_s, Some(0.5));
    assert_eq!(c.stuck_ms, Some(7_200_000));
    assert_eq!(c.stuck_tolerance, 0.0);
    assert_eq!(c.hold_ms, 600_000);

    // 3 mm, 10 L, 0.5 mol/m³ for every species, 20 L, NaOH 2 mol/m³ (the
    // others their default, 10 % of 0 but at least 0.1 mol/m³).
    let e = p.estimator.as_ref().unwrap();
    assert!(close(e.level_sigma, 0.003));
    assert!(close(e.holdup_drift, 0.01));
    assert_eq!(e.concentration_drift, [0.5; 3]);
    assert!(close(e.initial_volume_sigma, 0.02));
    assert_eq!(e.initial_concentration_sigma, [2.0, 0.1, 0.1]);
    assert_eq!(
        e.bias_meters,
        [BiasMeter {
            name: "caustic pump".to_string(),
            outlet: false,
            index: 0,
        }]
    );
    assert_eq!(e.lab_max_age_ms, 28_800_000);
    assert_eq!(e.closure_window_ms, 1_800_000);
    assert_eq!((e.cusum_k, e.cusum_h), (0.5, 7.0));
}
