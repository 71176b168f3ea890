//! `[estimator]`.

use super::*;

/// The `[estimator]` example of `docs/config.md`, appended to `EXAMPLE`.
const ESTIMATOR: &str = r#"
[estimator]                                      # optional; needs [level]
level_sigma = { value = 3, unit = "mm" }         # required: level transmitter noise, 1σ
holdup_drift = { value = 10, unit = "L" }        # 1σ unexplained holdup change per hour
concentration_drift = { value = 0.5, unit = "mol/m3" }   # 1σ per hour, all species, or per
                                                 # species: { NaOH = { value = 0.5, unit = "mol/m3" } }
initial_volume_sigma = { value = 20, unit = "L" }
initial_concentration_sigma = { NaOH = { value = 2, unit = "mol/m3" } }   # or one value for all
bias_meters = ["caustic pump"]                   # inlets or measured outlets read from the log, at most 4
bias_sigma = 0.05                                # initial 1σ of the relative meter bias
bias_drift = 0.001                               # relative 1σ per hour
gate = 9.0                                       # innovation gate, chi-square with 1 degree of freedom
lab_sigma = 0.02                                 # relative 1σ of a lab analysis
lab_max_age = "8 h"                              # a sample without a result after this is dropped
flow_sigma = 0.01                                # relative 1σ of the flow meters' noise
closure_window = "30 min"                        # balance-closure residual window, at least 2 ticks
cusum_k = 0.5                                    # CUSUM reference value, in σ of the residual
cusum_h = 5.0                                    # CUSUM decision interval, in σ (above cusum_k)
"#;

/// `EXAMPLE` with `[estimator]` holding only `lines`.
fn with_estimator(lines: &str) -> String {
    format!("{EXAMPLE}\n[estimator]\nlevel_sigma = {{ value = 3, unit = \"mm\" }}\n{lines}")
}

fn estimator(text: &str) -> Estimator {
    ok(text)
        .estimator
        .unwrap_or_else(|| panic!("no estimator:\n{text}"))
}

fn all_close(a: &[f64], b: &[f64]) -> bool {
    a.len() == b.len() && a.iter().zip(b).all(|(x, y)| close(*x, *y))
}

#[test]
fn estimator_is_absent_without_the_section() {
    assert_eq!(ok(EXAMPLE).estimator, None);
    assert_eq!(ok(MINIMAL).estimator, None);
}

#[test]
fn estimator_docs_example_parses_into_si() {
    let text = format!("{EXAMPLE}{ESTIMATOR}");
    let e = estimator(&text);
    assert!(close(e.level_sigma, 0.003));
    assert!(close(e.holdup_drift, 0.01));
    assert_eq!(e.concentration_drift, [0.5; 4]);
    assert!(close(e.initial_volume_sigma, 0.02));
    // NaOH given; the others keep the default max(10 % of 0, 0.1).
    assert_eq!(e.initial_concentration_sigma, [2.0, 0.1, 0.1, 0.1]);
    assert_eq!(
        e.bias_meters,
        [BiasMeter {
            name: "caustic pump".into(),
            outlet: false,
            index: 0
        }]
    );
    assert_eq!((e.bias_sigma, e.bias_drift), (0.05, 0.001));
    assert_eq!((e.gate, e.lab_sigma, e.flow_sigma), (9.0, 0.02, 0.01));
    assert_eq!(
        (e.lab_max_age_ms, e.closure_window_ms),
        (28_800_000, 1_800_000)
    );
    assert_eq!((e.cusum_k, e.cusum_h), (0.5, 5.0));
}

#[test]
fn estimator_full_section_in_other_units() {
    let text = with_estimator(
        "holdup_drift = { value = 2, unit = \"US gal\" }\n\
             concentration_drift = { value = 0.5, unit = \"mmol/L\" }\n\
             initial_volume_sigma = { value = 1, unit = \"ft3\" }\n\
             initial_concentration_sigma = { value = 0.002, unit = \"kmol/m3\" }\n\
             bias_meters = [\"product\", \"caustic pump\"]\n\
             bias_sigma = 0.1\n\
             bias_drift = 0.002\n\
             gate = 6.63\n\
             lab_sigma = 0.03\n\
             lab_max_age = \"6 h\"\n\
             flow_sigma = 0.015\n\
             closure_window = \"20 min\"\n\
             cusum_k = 1\n\
             cusum_h = 4\n",
    )
    .replace(
        "level_sigma = { value = 3, unit = \"mm\" }",
        "level_sigma = { value = 0.25, unit = \"in\" }",
    );
    let e = estimator(&text);
    // 0.25 in = 6.35 mm; 2 US gal = 7.570823568 L; 1 ft³ = 28.316846592 L.
    assert!(close(e.level_sigma, 0.00635));
    assert!(close(e.holdup_drift, 0.007_570_823_568));
    assert!(all_close(&e.concentration_drift, &[0.5; 4]));
    assert!(close(e.initial_volume_sigma, 0.028_316_846_592));
    assert!(all_close(&e.initial_concentration_sigma, &[2.0; 4]));
    // In the order written: the measured outlet, then the inlet.
    assert_eq!(
        e.bias_meters,
        [
            BiasMeter {
                name: "product".into(),
                outlet: true,
                index: 0
            },
            BiasMeter {
                name: "caustic pump".into(),
                outlet: false,
                index: 0
            }
        ]
    );
    assert_eq!((e.bias_sigma, e.bias_drift), (0.1, 0.002));
    assert_eq!((e.gate, e.lab_sigma, e.flow_sigma), (6.63, 0.03, 0.015));
    assert_eq!(
        (e.lab_max_age_ms, e.closure_window_ms),
        (21_600_000, 1_200_000)
    );
    assert_eq!((e.cusum_k, e.cusum_h), (1.0, 4.0));
}

#[test]
fn estimator_defaults_with_only_level_sigma() {
    let e = estimator(&with_estimator(""));
    assert!(close(e.level_sigma, 0.003));
    // Largest known concentration: the caustic feed, 0.1 mol/L = 100
    // mol/m³ (the ester feed is a tag, the initial NaOH only 5): 1 %.
    assert!(all_close(&e.concentration_drift, &[1.0; 4]));
    // 10 % of 5 mol/m³ for NaOH; at least 0.1 mol/m³ for the others.
    assert!(all_close(
        &e.initial_concentration_sigma,
        &[0.5, 0.1, 0.1, 0.1]
    ));
    // 1 % of 2.5 m³.
    assert!(close(e.initial_volume_sigma, 0.025));
    assert!(e.bias_meters.is_empty());
    assert_eq!((e.bias_sigma, e.bias_drift), (0.05, 0.001));
    assert_eq!((e.gate, e.lab_sigma, e.flow_sigma), (9.0, 0.02, 0.01));
    assert_eq!(
        (e.lab_max_age_ms, e.closure_window_ms),
        (28_800_000, 1_800_000)
    );
    // h = 7: 0.41 false alarms per 30 days of 30-min windows (docs/status.md).
    assert_eq!((e.cusum_k, e.cusum_h), (0.5, 7.0));

    // A flat cylinder (capacity π·0.8²·2 m³) holding 50 L, nothing
    // dissolved, ticking once an hour.
    let text = format!(
            "{}\n[level]\ntag = \"LI-1\"\nunit = \"m\"\n\n[estimator]\nlevel_sigma = {{ value = 1, unit = \"cm\" }}\n",
            MINIMAL
                .replace("tick = \"500 ms\"", "tick = \"1 h\"")
                .replace(
                    "volume = { value = 1, unit = \"m3\" }",
                    "volume = { value = 50, unit = \"L\" }"
                )
        );
    let e = estimator(&text);
    let capacity = core::f64::consts::PI * 0.64 * 2.0;
    assert!(close(e.holdup_drift, 0.001 * capacity));
    // 1 % of 50 L is below the 1 L floor.
    assert!(close(e.initial_volume_sigma, 0.001));
    assert_eq!(e.concentration_drift, [0.01, 0.01]);
    assert_eq!(e.initial_concentration_sigma, [0.1, 0.1]);
    // 30 min is shorter than 2 ticks of 1 h: the default is 2 ticks.
    assert_eq!(e.closure_window_ms, 7_200_000);
}

#[test]
fn estimator_scalar_and_per_species_concentrations() {
    // One value for all species, in any amount unit.
    let e = estimator(&with_estimator(
        "concentration_drift = { value = 0.002, unit = \"mol/L\" }\n",
    ));
    assert!(all_close(&e.concentration_drift, &[2.0; 4]));
    // Per species: the rest keep the default (1 mol/m³, see above); a
    // mass-based unit uses the species' molar mass: 0.881 g/L of EtOAc
    // (88.106 g/mol) = 10 mol/m³ (approximately: 0.881/0.088106).
    let e = estimator(&with_estimator(
            "concentration_drift = { NaOAc = { value = 3, unit = \"mol/m3\" }, EtOAc = { value = 0.881, unit = \"g/L\" } }\n",
        ));
    assert!(all_close(
        &e.concentration_drift,
        &[1.0, 0.881 / 0.088_106, 3.0, 1.0]
    ));
    // As a sub-table, and an empty table keeps every default.
    let e = estimator(&with_estimator(
        "[estimator.initial_concentration_sigma]\nEtOH = { value = 7, unit = \"mmol/L\" }\n",
    ));
    assert!(all_close(
        &e.initial_concentration_sigma,
        &[0.5, 0.1, 0.1, 7.0]
    ));
    let e = estimator(&with_estimator("initial_concentration_sigma = {}\n"));
    assert!(all_close(
        &e.initial_concentration_sigma,
        &[0.5, 0.1, 0.1, 0.1]
    ));
    // A species named like a quantity's key is still a species entry.
    let text = edit(EXAMPLE, "name = \"EtOH\"", "name = \"value\"")
        .replace("EtOH = 1 }", "value = 1 }")
        + "\n[estimator]\nlevel_sigma = { value = 3, unit = \"mm\" }\n\
               concentration_drift = { value = { value = 4, unit = \"mol/m3\" } }\n";
    assert!(all_close(
        &estimator(&text).concentration_drift,
        &[1.0, 1.0, 1.0, 4.0]
    ));

    // A mass-based unit cannot apply to all species at once.
    let text = with_estimator("concentration_drift = { value = 1, unit = \"g/L\" }\n");
    let e = err(&text);
    check(
        &e,
        &text,
        "concentration_drift",
        "[estimator] concentration_drift.unit",
        &[
            "\"g/L\" cannot be given for all species",
            "mol/m3, mol/L, mmol/L, kmol/m3",
            "concentration_drift = { NaOH = { value = ..., unit = \"g/L\" } }",
        ],
    );
    // A bare number for a species.
    let text = with_estimator("concentration_drift = { NaOH = 0.5 }\n");
    let e = err(&text);
    check(
        &e,
        &text,
        "concentration_drift",
        "[estimator] concentration_drift.NaOH",
        &["expected a concentration { value, unit }, got a float"],
    );
    // A bare number for all.
    let text = with_estimator("initial_concentration_sigma = 2\n");
    let e = err(&text);
    check(
        &e,
        &text,
        "initial_concentration_sigma",
        "[estimator] initial_concentration_sigma",
        &["or a table of species", "got an integer"],
    );
    // The scalar form's keys are those of a constant quantity.
    let text =
        with_estimator("concentration_drift = { value = 1, unit = \"mol/m3\", tag = \"AI-1\" }\n");
    let e = err(&text);
    check(
        &e,
        &text,
        "concentration_drift",
        "[estimator] concentration_drift.tag",
        &["valid keys: value, unit", "cannot be read from the log"],
    );
    let text = with_estimator("concentration_drift = { value = 1, unit = \"mol/kg\" }\n");
    let e = err(&text);
    check(
        &e,
        &text,
        "concentration_drift",
        "[estimator] concentration_drift.unit",
        &["unknown concentration unit \"mol/kg\""],
    );
}

#[test]
fn estimator_unknown_species_in_a_table() {
    let text = with_estimator(
            "initial_concentration_sigma = {\n  NaOH = { value = 1, unit = \"mol/m3\" },\n  KOH = { value = 1, unit = \"mol/m3\" } }\n",
        );
    // A multi-line inline table is TOML 1.1; the reader's parser takes it.
    let e = err(&text);
    check(
        &e,
        &text,
        "KOH",
        "[estimator] initial_concentration_sigma.KOH",
        &["unknown species \"KOH\"; defined species: NaOH, EtOAc, NaOAc, EtOH"],
    );
    let text =
        with_estimator("concentration_drift = { Water = { value = 1, unit = \"mol/m3\" } }\n");
    let e = err(&text);
    check(
        &e,
        &text,
        "Water",
        "[estimator] concentration_drift.Water",
        &["defined species: NaOH, EtOAc, NaOAc, EtOH"],
    );
}

#[test]
fn estimator_unknown_key() {
    let text = with_estimator("gate = 9\nlab_max_agee = \"6 h\"\n");
    let e = err(&text);
    check(
        &e,
        &text,
        "lab_max_agee",
        "[estimator] lab_max_agee",
        &[
            "unknown key; valid keys: level_sigma, holdup_drift, concentration_drift, \
               initial_volume_sigma, initial_concentration_sigma, bias_meters, bias_sigma, \
               bias_drift, gate, lab_sigma, lab_max_age, flow_sigma, closure_window, cusum_k, \
               cusum_h",
        ],
    );
    // The top level lists the new section.
    let text = format!("{MINIMAL}\n[estimater]\n");
    let e = err(&text);
    check(&e, &text, "[estimater]", "estimater", &["tags, estimator"]);
}

#[test]
fn estimator_needs_level_and_level_sigma() {
    let text = format!("{MINIMAL}\n[estimator]\nlevel_sigma = {{ value = 3, unit = \"mm\" }}\n");
    let e = err(&text);
    check(
        &e,
        &text,
        "[estimator]",
        "[estimator]",
        &["no [level] section", "tag = \"...\""],
    );
    let text = format!("{EXAMPLE}\n[estimator]\ngate = 9\n");
    let e = err(&text);
    check(
        &e,
        &text,
        "[estimator]",
        "[estimator] level_sigma",
        &["missing (required)", "unit = \"mm\""],
    );
    // A section that is not a table.
    let text = format!("estimator = true\n{EXAMPLE}");
    let e = err(&text);
    check(
        &e,
        &text,
        "estimator = true",
        "estimator",
        &["expected a table [estimator], got a boolean"],
    );
}

#[test]
fn estimator_bias_meters() {
    // Unknown name: the inlets and measured outlets are listed.
    let text = with_estimator("bias_meters = [\"caustic pump\", \"caustic pmup\"]\n");
    let e = err(&text);
    check(
        &e,
        &text,
        "bias_meters",
        "[estimator] bias_meters[1]",
        &[
            "unknown inlet or measured outlet \"caustic pmup\"; inlets: caustic pump, \
               ester pump; measured outlets: product",
        ],
    );
    // A constant flow has no meter.
    let text = with_estimator("bias_meters = [\"ester pump\"]\n");
    let e = err(&text);
    check(
        &e,
        &text,
        "bias_meters",
        "[estimator] bias_meters[0]",
        &["inlet \"ester pump\" has a constant flow"],
    );
    let text = edit(
        &with_estimator("bias_meters = [\"product\"]\n"),
        "flow = { tag = \"FI-201\", unit = \"m3/h\" }",
        "flow = { value = 2, unit = \"m3/h\" }",
    );
    let e = err(&text);
    check(
        &e,
        &text,
        "bias_meters",
        "[estimator] bias_meters[0]",
        &["outlet \"product\" has a constant flow"],
    );
    // An orifice is not metered.
    let text = with_estimator("bias_meters = [\"drain\"]\n");
    let e = err(&text);
    check(
        &e,
        &text,
        "bias_meters",
        "[estimator] bias_meters[0]",
        &[
            "outlet \"drain\" is not metered",
            "measured outlets: product",
        ],
    );
    // Too many: at most 4, at the array.
    let text =
        with_estimator("bias_meters = [\n  \"a\",\n  \"b\",\n  \"c\",\n  \"d\",\n  \"e\",\n]\n");
    let e = err(&text);
    check(
        &e,
        &text,
        "bias_meters",
        "[estimator] bias_meters",
        &["too many bias meters: 5, at most 4"],
    );
    // Listed twice; on its own line in a multi-line array.
    let text =
        with_estimator("bias_meters = [\n  \"product\",\n  \"caustic pump\",\n  \"product\",\n]\n");
    let e = err(&text);
    assert_eq!(e.key, "[estimator] bias_meters[2]", "{e}");
    assert_eq!(e.line, Some(text.lines().count() - 1), "{e}");
    assert!(e.message.contains("\"product\" is listed twice"), "{e}");
    // Not an array, not a string.
    let text = with_estimator("bias_meters = \"product\"\n");
    let e = err(&text);
    check(
            &e,
            &text,
            "bias_meters",
            "[estimator] bias_meters",
            &["expected an array of inlet or measured-outlet names, e.g. [\"caustic pump\"], got a string"],
        );
    let text = with_estimator("bias_meters = [\"product\", 2]\n");
    let e = err(&text);
    check(
        &e,
        &text,
        "bias_meters",
        "[estimator] bias_meters[1]",
        &["got an integer"],
    );
    // An inlet and an outlet of the same name: ambiguous.
    let text = edit(
        &with_estimator("bias_meters = [\"product\"]\n"),
        "name = \"ester pump\"",
        "name = \"product\"",
    );
    let e = err(&text);
    check(
        &e,
        &text,
        "bias_meters",
        "[estimator] bias_meters[0]",
        &["names both an inlet and an outlet"],
    );
    // Four are fine; an empty list is no bias estimation.
    let text = edit(
            &with_estimator("bias_meters = [\"product\", \"caustic pump\", \"ester pump\", \"tank out\"]\n"),
            "flow = { value = 30, unit = \"L/min\" }",
            "flow = { tag = \"FI-102\", unit = \"L/min\" }",
        )
        .replace(
            "[temperature]",
            "[[outlet]]\nname = \"tank out\"\nkind = \"measured\"\nflow = { tag = \"FI-202\", unit = \"L/s\" }\n\n[temperature]",
        );
    let meters = estimator(&text).bias_meters;
    let got: Vec<(&str, bool, usize)> = meters
        .iter()
        .map(|m| (m.name.as_str(), m.outlet, m.index))
        .collect();
    assert_eq!(
        got,
        [
            ("product", true, 0),
            ("caustic pump", false, 0),
            ("ester pump", false, 1),
            ("tank out", true, 2)
        ]
    );
    assert!(estimator(&with_estimator("bias_meters = []\n"))
        .bias_meters
        .is_empty());
}

#[test]
fn estimator_sigmas_must_not_be_negative() {
    for (line, key, part) in [
        (
            "holdup_drift = { value = -1, unit = \"L\" }",
            "[estimator] holdup_drift",
            "must not be negative, got -1 L (= -0.001 m3)",
        ),
        (
            "initial_volume_sigma = { value = -0.5, unit = \"m3\" }",
            "[estimator] initial_volume_sigma",
            "must not be negative, got -0.5 m3",
        ),
        (
            "concentration_drift = { value = -1, unit = \"mol/m3\" }",
            "[estimator] concentration_drift",
            "must not be negative",
        ),
        (
            "initial_concentration_sigma = { EtOAc = { value = -1, unit = \"mol/m3\" } }",
            "[estimator] initial_concentration_sigma.EtOAc",
            "must not be negative",
        ),
        (
            "bias_sigma = -0.05",
            "[estimator] bias_sigma",
            "must not be negative, got -0.05",
        ),
        (
            "bias_drift = -1e-3",
            "[estimator] bias_drift",
            "must not be negative, got -0.001",
        ),
        (
            "flow_sigma = -0.01",
            "[estimator] flow_sigma",
            "must not be negative",
        ),
        ("bias_sigma = nan", "[estimator] bias_sigma", "finite"),
        (
            "flow_sigma = \"1 %\"",
            "[estimator] flow_sigma",
            "expected a number, got a string",
        ),
    ] {
        let text = with_estimator(&format!("{line}\n"));
        let e = err(&text);
        let needle = line.split(' ').next().unwrap_or(line);
        check(&e, &text, needle, key, &[part]);
    }
    // Zero is allowed for these (no drift, exact start, noiseless meters).
    let e = estimator(&with_estimator(
            "holdup_drift = { value = 0, unit = \"L\" }\nbias_sigma = 0\nbias_drift = 0\nflow_sigma = 0\n",
        ));
    assert_eq!(
        (e.holdup_drift, e.bias_sigma, e.bias_drift, e.flow_sigma),
        (0.0, 0.0, 0.0, 0.0)
    );
    // The level noise must be positive.
    for bad in ["-3", "0"] {
        let text = edit(
            &with_estimator(""),
            "level_sigma = { value = 3,",
            &format!("level_sigma = {{ value = {bad},"),
        );
        let e = err(&text);
        check(
            &e,
            &text,
            "level_sigma",
            "[estimator] level_sigma",
            &["must be positive", "mm (= "],
        );
    }
}

#[test]
fn estimator_positive_numbers_and_cusum_order() {
    for (line, key) in [
        ("gate = 0", "[estimator] gate"),
        ("gate = -9.0", "[estimator] gate"),
        ("lab_sigma = 0.0", "[estimator] lab_sigma"),
        ("cusum_k = 0", "[estimator] cusum_k"),
        ("cusum_h = -5", "[estimator] cusum_h"),
    ] {
        let text = with_estimator(&format!("{line}\n"));
        let e = err(&text);
        let needle = line.split(' ').next().unwrap_or(line);
        check(&e, &text, needle, key, &["must be positive, got "]);
    }
    // Both given: the error is at cusum_h.
    let text = with_estimator("cusum_k = 2\ncusum_h = 2\n");
    let e = err(&text);
    check(
        &e,
        &text,
        "cusum_h",
        "[estimator] cusum_h",
        &["must be greater than cusum_k (2), got 2"],
    );
    let text = with_estimator("cusum_h = 1.5\ncusum_k = 3\n");
    let e = err(&text);
    check(
        &e,
        &text,
        "cusum_h",
        "[estimator] cusum_h",
        &["must be greater than cusum_k (3), got 1.5"],
    );
    // Only one given: it is compared with the other's default.
    let text = with_estimator("cusum_h = 0.4\n");
    let e = err(&text);
    check(
        &e,
        &text,
        "cusum_h",
        "[estimator] cusum_h",
        &["must be greater than cusum_k (default 0.5), got 0.4"],
    );
    let text = with_estimator("cusum_k = 8\n");
    let e = err(&text);
    check(
        &e,
        &text,
        "cusum_k",
        "[estimator] cusum_k",
        &["must be less than cusum_h (default 7), got 8"],
    );
    let e = estimator(&with_estimator("cusum_k = 0.25\ncusum_h = 0.3\n"));
    assert_eq!((e.cusum_k, e.cusum_h), (0.25, 0.3));
}

#[test]
fn estimator_durations() {
    for (line, key, part) in [
        (
            "lab_max_age = \"6 hours\"",
            "[estimator] lab_max_age",
            "invalid duration \"6 hours\": unknown unit; write a number and one of ms, s, min, h",
        ),
        (
            "closure_window = \"30\"",
            "[estimator] closure_window",
            "no unit",
        ),
        (
            "lab_max_age = 6",
            "[estimator] lab_max_age",
            "expected a string, got an integer",
        ),
        (
            "lab_max_age = \"0 h\"",
            "[estimator] lab_max_age",
            "must be longer than 0 ms",
        ),
        // The EXAMPLE ticks once a second.
        (
            "closure_window = \"1999 ms\"",
            "[estimator] closure_window",
            "must be at least 2 ticks (2000 ms with tick 1000 ms), got 1999 ms",
        ),
    ] {
        let text = with_estimator(&format!("{line}\n"));
        let e = err(&text);
        let needle = line.split(' ').next().unwrap_or(line);
        check(&e, &text, needle, key, &[part]);
    }
    let e = estimator(&with_estimator(
        "closure_window = \"2 s\"\nlab_max_age = \"90 min\"\n",
    ));
    assert_eq!((e.closure_window_ms, e.lab_max_age_ms), (2_000, 5_400_000));
}

#[test]
fn no_panic_on_a_mangled_estimator_section() {
    // Every prefix of the section after the example, and the section
    // with each line dropped: an error or a plant, never a panic.
    let full = format!("{EXAMPLE}{ESTIMATOR}");
    for (i, _) in full.char_indices().filter(|(i, _)| *i >= EXAMPLE.len()) {
        let _ = parse(&full[..i], path());
    }
    let lines: Vec<&str> = ESTIMATOR.lines().collect();
    for skip in 0..lines.len() {
        let kept: Vec<&str> = lines
            .iter()
            .enumerate()
            .filter(|(i, _)| *i != skip)
            .map(|(_, l)| *l)
            .collect();
        let text = format!("{EXAMPLE}{}\n", kept.join("\n"));
        if let Err(e) = parse(&text, path()) {
            assert!(!e.message.is_empty());
        }
    }
}
