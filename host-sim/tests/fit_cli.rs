//! `holdup fit` from the command line, on the invented demo reactor.
//!
//! The demo's true plant is the kernel's reference vessel in `f64`
//! (`holdup_kernel::reference`): saponification rate constant 0.11
//! L/(mol·s) at 25 °C and activation energy 41 kJ/mol, the values the
//! demo's `plant.toml` states. `holdup demo --fit` marks those two unknown
//! (guesses 0.05 and 30) and fits them to the demo's noisy 12 h log and
//! its 18 lab results (2 % noise); the 95 % intervals should hold the
//! truth. Also: the fitted plant file replays; the errors a user can make
//! name the file and line; a log with too narrow a temperature range gets
//! the plain-words warning that k and Eₐ cannot be separated.

mod common;

use std::path::Path;
use std::process::{Command, Output};

use common::out_dir;

fn holdup(args: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_holdup"))
        .args(args)
        .output()
        .expect("run holdup")
}

fn json(path: &Path) -> serde_json::Value {
    let text = std::fs::read_to_string(path).expect("read json");
    serde_json::from_str(&text).expect("parse json")
}

fn param<'a>(fit: &'a serde_json::Value, name: &str) -> &'a serde_json::Value {
    fit["parameters"]
        .as_array()
        .and_then(|ps| ps.iter().find(|p| p["name"] == name))
        .unwrap_or_else(|| panic!("no parameter {name} in {fit}"))
}

fn f(v: &serde_json::Value) -> f64 {
    v.as_f64().expect("a number")
}

#[test]
fn demo_fit_recovers_the_saponification_constants_and_replays() {
    let dir = out_dir("fit-demo");
    let d = dir.to_str().expect("utf-8 path");
    let out = holdup(&["demo", "--fit", "--quiet", "--out", d]);
    let stdout = String::from_utf8_lossy(&out.stdout);
    assert!(
        out.status.success(),
        "{stdout}\n{}",
        String::from_utf8_lossy(&out.stderr)
    );
    assert!(stdout.contains("Fitted parameters hold within the range of the data"));
    let fit = json(&dir.join("fit/fit.json"));
    for (name, truth) in [
        ("saponification.rate_constant", 0.11),
        ("saponification.activation_energy", 41.0),
    ] {
        let p = param(&fit, name);
        let (lo, hi) = (f(&p["ci95"][0]), f(&p["ci95"][1]));
        assert!(
            lo < truth && truth < hi,
            "{name}: 95 % interval [{lo}, {hi}] misses {truth}"
        );
        assert!(f(&p["se"]) > 0.0);
    }
    assert_eq!(fit["converged"], true);
    assert_eq!(fit["residuals"], 18);
    // The log reader's findings come with the fit: the demo's log has no
    // rejected row, and the caustic meter's NaN run is counted.
    let findings = fit["log_findings"].to_string();
    assert!(
        findings.contains("0 rejected") && findings.contains("FI-101: 120 missing values"),
        "{findings}"
    );
    // The held-out check: the fit to the first 9 h predicts the last 3 h
    // far better than the guesses do.
    let h = &fit["held_out"];
    assert!(
        f(&h["rms_relative_at_fit"]) < 0.2 * f(&h["rms_relative_at_guess"]),
        "{h}"
    );
    // The data's range is stated beside the values.
    let t = &fit["data_range"]["temperature_c"];
    assert!(f(&t[0]) < 25.0 && f(&t[1]) > 35.0, "{t}");
    // The fitted plant file: no unknown left, the values written, and it
    // replays.
    let fitted = std::fs::read_to_string(dir.join("fit/plant.fitted.toml")).expect("fitted");
    assert!(!fitted.contains("{ guess ="), "{fitted}");
    assert!(fitted.contains("# fitted by holdup fit:"), "{fitted}");
    let k = f(&param(&fit, "saponification.rate_constant")["value"]);
    assert!(
        fitted.contains(&format!(
            "rate_constant = {{ value = {k:?}, unit = \"L/(mol*s)\" }}"
        )),
        "{fitted}"
    );
    let replay = holdup(&[
        "replay",
        "--config",
        dir.join("fit/plant.fitted.toml").to_str().expect("utf-8"),
        "--log",
        dir.join("log.csv").to_str().expect("utf-8"),
        "--lab",
        dir.join("lab.csv").to_str().expect("utf-8"),
        "--out",
        dir.join("fitted-replay").to_str().expect("utf-8"),
        "--quiet",
    ]);
    assert!(
        replay.status.success(),
        "{}",
        String::from_utf8_lossy(&replay.stderr)
    );
    for file in ["predictions.csv", "fit.svg", "residuals.svg", "parity.svg"] {
        let text = std::fs::read_to_string(dir.join("fit").join(file)).expect(file);
        assert!(text.len() > 200, "{file}");
    }
}

/// The demo's files with `plant.toml` edited by `edit`; returns the
/// folder.
fn demo_with(name: &str, edit: impl Fn(&str) -> String) -> std::path::PathBuf {
    let dir = out_dir(name);
    holdup_sim::demo::generate(&dir).expect("demo files");
    let text = holdup_sim::demo::PLANT_TOML;
    std::fs::write(dir.join("plant.toml"), edit(text)).expect("write plant");
    dir
}

fn fit_in(dir: &Path, lab: bool) -> Output {
    let mut args = vec![
        "fit".to_string(),
        "--config".into(),
        dir.join("plant.toml").display().to_string(),
        "--log".into(),
        dir.join("log.csv").display().to_string(),
        "--out".into(),
        dir.join("fit").display().to_string(),
    ];
    if lab {
        args.push("--lab".into());
        args.push(dir.join("lab.csv").display().to_string());
    }
    let refs: Vec<&str> = args.iter().map(String::as_str).collect();
    holdup(&refs)
}

#[test]
fn mistakes_exit_2_naming_file_line_and_what_to_do() {
    // Nothing marked unknown.
    let dir = demo_with("fit-none", str::to_string);
    let out = fit_in(&dir, true);
    let err = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(2), "{err}");
    assert!(
        err.contains("plant.toml: nothing to fit") && err.contains("guess"),
        "{err}"
    );

    // A quantity that cannot be fitted: the line is named.
    let dir = demo_with("fit-diameter", |t| {
        t.replace(
            "diameter = { value = 1.6, unit = \"m\" }",
            "diameter = { guess = 1.6, unit = \"m\" }",
        )
    });
    let out = fit_in(&dir, true);
    let err = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(2), "{err}");
    assert!(
        err.contains("plant.toml:11: vessel.diameter: cannot be fitted"),
        "{err}"
    );

    // Unknowns but nothing to fit them to (no lab file, no analyser).
    let dir = demo_with("fit-no-lab", |t| {
        t.replace(
            "rate_constant = { value = 0.11, unit = \"L/(mol*s)\" }",
            "rate_constant = { guess = 0.05, unit = \"L/(mol*s)\" }",
        )
    });
    let out = fit_in(&dir, false);
    let err = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(2), "{err}");
    assert!(
        err.contains("0 observation(s)") && err.contains("more observations than unknowns"),
        "{err}"
    );
}

#[test]
fn a_narrow_temperature_range_is_named_when_k_and_ea_trade() {
    let dir = demo_with("fit-narrow", |t| {
        t.replace(
            "rate_constant = { value = 0.11, unit = \"L/(mol*s)\" }",
            "rate_constant = { guess = 0.05, unit = \"L/(mol*s)\", min = 0.001, max = 10 }",
        )
        .replace(
            "activation_energy = { value = 41, unit = \"kJ/mol\" }",
            "activation_energy = { guess = 30, unit = \"kJ/mol\", min = 0, max = 150 }",
        )
        .replace(
            "reference_temperature = { value = 25, unit = \"degC\" }",
            "reference_temperature = { value = 60, unit = \"degC\" }",
        )
    });
    // The jacket held at 25 °C ± 0.1 K: the temperature column rewritten.
    let log = std::fs::read_to_string(dir.join("log.csv")).expect("log");
    let mut out = String::new();
    for (i, line) in log.lines().enumerate() {
        let mut cells: Vec<String> = line.split(',').map(str::to_string).collect();
        if i > 0 {
            cells[4] = if i % 2 == 0 { "24.95" } else { "25.05" }.to_string();
        }
        out.push_str(&cells.join(","));
        out.push('\n');
    }
    std::fs::write(dir.join("log.csv"), out).expect("write log");
    let run = fit_in(&dir, true);
    let stdout = String::from_utf8_lossy(&run.stdout);
    assert!(
        matches!(run.status.code(), Some(0 | 3)),
        "{stdout}\n{}",
        String::from_utf8_lossy(&run.stderr)
    );
    assert!(
        stdout.contains(
            "saponification.rate_constant and saponification.activation_energy cannot be separated"
        ) && stdout.contains("the temperature varied by only 0.1 K"),
        "{stdout}"
    );
}
