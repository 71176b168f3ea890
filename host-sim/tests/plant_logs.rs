//! Logs as plants export them, and the checks of a plant against its log,
//! end to end through `holdup replay`, on the fixtures in
//! `fixtures/plant-logs/` (generated below; `fixtures_are_current` fails if
//! the committed files differ; `HOLDUP_WRITE_FIXTURES=1` rewrites them).
//!
//! The plant (invented): tank F-5, a 1.2 m vertical cylinder holding 2 m³,
//! fed by a mass-flow meter (t/h) with a density transmitter, drained by a
//! volumetric meter, its level in % of the transmitter's span. Feed grade
//! of A steps 80 → 120 → 100 mol/m³ every 20 min; first-order decay of A,
//! k = 3e-4 1/s. Inflow = outflow = 2.4 m³/h, so the holdup is constant
//! and c_A has a closed form on every piece of constant feed (below), the
//! reference for every layout of the same data.

mod common;
use common::{out_dir, root};
use std::path::{Path, PathBuf};
use std::process::{Command, Output};

fn fixture(name: &str) -> PathBuf {
    root().join("fixtures/plant-logs").join(name)
}

/// 2026-03-01T05:00:00Z in epoch seconds (20513 days after 1970-01-01 plus
/// 5 h, by hand).
const T0: i64 = 1_772_341_200;
/// One hour every 10 s.
const ROWS: i64 = 361;
const V: f64 = 2.0;
const Q: f64 = 2.4 / 3600.0;
const K: f64 = 3e-4;
/// Density of the feed, kg/m³: 2.4 m³/h is 2.88 t/h.
const RHO: f64 = 1200.0;
const GRADES: [f64; 3] = [80.0, 120.0, 100.0];

fn grade(k: i64) -> f64 {
    GRADES[((k * 10) / 1200) as usize % 3]
}

/// The feed as the analyser reads it: the grade, with a 0.6 mol/m³ blip
/// for 10 s one minute into each grade (a reading the exception-stored
/// log keeps).
fn feed(k: i64) -> f64 {
    grade(k) + if (k * 10) % 1200 == 60 { 0.6 } else { 0.0 }
}

/// c_A at row `k`: on each 10 s piece the feed is constant, and
/// `dc/dt = (q/V)(c_f − c) − k c` has the solution
/// `c_ss + (c − c_ss) e^{−(q/V + k) Δt}`, `c_ss = (q/V) c_f / (q/V + k)`,
/// chained from c = 0 (derived by hand: a linear ODE with constant
/// coefficients).
fn exact(k_row: i64) -> f64 {
    let lam = Q / V + K;
    let mut c = 0.0;
    for k in 0..k_row {
        let css = (Q / V) * feed(k) / lam;
        c = css + (c - css) * (-lam * 10.0).exp();
    }
    c
}

/// Level for 2 m³ in the 1.2 m cylinder, as % of the span 0.1 m – 2.1 m.
fn level_percent() -> f64 {
    let z = V / (std::f64::consts::PI * 0.36);
    (z - 0.1) / 2.0 * 100.0
}

fn config(tick: &str, diameter_m: f64, interpolation: &str) -> String {
    format!(
        r#"# Fixture: tank F-5 as plants log it (see host-sim/tests/plant_logs.rs).
[plant]
name = "Fixture tank F-5 (as exported)"
tick = "{tick}"
scalar = "f64"
method = "exact"

[vessel]
shape = "vertical-cylinder"
diameter = {{ value = {diameter_m}, unit = "m" }}
height = {{ value = 2.5, unit = "m" }}

[[species]]
name = "A"

[[inlet]]
name = "feed"
flow = {{ tag = "FT-5", unit = "t/h", density = {{ tag = "DT-5", unit = "kg/m3" }} }}
feed = {{ A = {{ tag = "AI-5", unit = "mol/m3" }} }}

[[outlet]]
name = "drain"
kind = "measured"
flow = {{ tag = "FI-6", unit = "m3/h" }}

[temperature]
tag = "TI-5"
unit = "degC"

[level]
tag = "LT-5"
unit = "%"
lower = {{ value = 0.1, unit = "m" }}
upper = {{ value = 2.1, unit = "m" }}

[[reaction]]
name = "decay"
stoichiometry = {{ A = -1 }}
orders = {{ A = 1 }}
rate_constant = {{ value = 3e-4, unit = "1/s" }}

[initial]
volume = {{ value = 2.0, unit = "m3" }}
concentrations = {{ A = {{ value = 0, unit = "mol/m3" }} }}

[tags."AI-5"]
interpolation = "{interpolation}"
"#
    )
}

const TAGS: [&str; 6] = ["FT-5", "DT-5", "AI-5", "FI-6", "TI-5", "LT-5"];

/// The six values of row `k`, as logged.
fn values(k: i64) -> [String; 6] {
    [
        format!("{:.3}", Q * 3600.0 * RHO / 1000.0),
        format!("{RHO:.1}"),
        format!("{:.1}", feed(k)),
        "2.4".to_string(),
        format!("{:.2}", 20.0 + (k as f64 / 60.0).sin()),
        format!("{:.4}", level_percent()),
    ]
}

fn wide_row(k: i64, cells: &[String]) -> String {
    format!("{},{}\n", T0 + 10 * k, cells.join(","))
}

fn newest_first() -> String {
    let mut s = format!("time,{}\n", TAGS.join(","));
    for k in (0..ROWS).rev() {
        s.push_str(&wide_row(k, &values(k)));
    }
    s
}

fn by_tag() -> String {
    let mut s = String::from("time,tag,value\n");
    for (j, tag) in TAGS.iter().enumerate() {
        for k in 0..ROWS {
            s.push_str(&format!("{},{tag},{}\n", T0 + 10 * k, values(k)[j]));
        }
    }
    s
}

/// Long, in time order, every tag every 10 s except AI-5, stored only when
/// it changes (exception storage).
fn exception_stored() -> String {
    let mut s = String::from("time,tag,value\n");
    let mut last: Option<String> = None;
    for k in 0..ROWS {
        let v = values(k);
        for (j, tag) in TAGS.iter().enumerate() {
            if *tag == "AI-5" {
                if last.as_deref() == Some(v[j].as_str()) && k + 1 < ROWS {
                    continue;
                }
                last = Some(v[j].clone());
            }
            s.push_str(&format!("{},{tag},{}\n", T0 + 10 * k, v[j]));
        }
    }
    s
}

/// TI-5 written as text the whole way (an export of a digital state).
fn non_numeric() -> String {
    let mut s = format!("time,{}\n", TAGS.join(","));
    for k in 0..ROWS {
        let mut v = values(k);
        v[4] = "n/a".to_string();
        s.push_str(&wide_row(k, &v));
    }
    s
}

/// FI-6 logged only for the first 10 minutes.
fn sparse() -> String {
    let mut s = format!("time,{}\n", TAGS.join(","));
    for k in 0..ROWS {
        let mut v = values(k);
        if k > 60 {
            v[3] = String::new();
        }
        s.push_str(&wide_row(k, &v));
    }
    s
}

fn fixture_files() -> Vec<(PathBuf, String)> {
    vec![
        (fixture("plant.toml"), config("10 s", 1.2, "linear")),
        (fixture("plant-hold.toml"), config("10 s", 1.2, "hold")),
        (
            fixture("plant-coarse-tick.toml"),
            config("10 min", 1.2, "hold"),
        ),
        // The diameter typed in mm as if in m: 1000× too wide.
        (
            fixture("plant-too-wide.toml"),
            config("10 s", 1200.0, "hold"),
        ),
        (fixture("newest-first.csv"), newest_first()),
        (fixture("by-tag.csv"), by_tag()),
        (fixture("exception-stored.csv"), exception_stored()),
        (fixture("non-numeric.csv"), non_numeric()),
        (fixture("sparse.csv"), sparse()),
    ]
}

#[test]
fn fixtures_are_current() {
    common::check_fixtures(fixture_files());
}

fn replay(config: &str, log: &str, out: &Path) -> Output {
    Command::new(env!("CARGO_BIN_EXE_holdup"))
        .arg("replay")
        .arg("--config")
        .arg(fixture(config))
        .arg("--log")
        .arg(fixture(log))
        .arg("--out")
        .arg(out)
        .args(["--every", "tick", "--quiet"])
        .output()
        .expect("run holdup")
}

fn text(o: &Output) -> String {
    format!(
        "{}{}",
        String::from_utf8_lossy(&o.stdout),
        String::from_utf8_lossy(&o.stderr)
    )
}

/// Largest relative error of c_A in `estimates.csv` against [`exact`],
/// over the rows after the first minute (c_A is near 0 before).
fn worst_error(out: &Path) -> f64 {
    let csv = std::fs::read_to_string(out.join("estimates.csv")).expect("estimates.csv");
    let mut lines = csv.lines();
    let header: Vec<&str> = lines.next().expect("header").split(',').collect();
    let col = |name: &str| header.iter().position(|h| *h == name).expect(name);
    let (h, c) = (col("elapsed_h"), col("A_mol_m3"));
    let mut worst: f64 = 0.0;
    let mut n = 0;
    for line in lines {
        let f: Vec<&str> = line.split(',').collect();
        let k = (f[h].parse::<f64>().expect("elapsed_h") * 360.0).round() as i64;
        if k < 6 {
            continue;
        }
        let got: f64 = f[c].parse().expect("c_A");
        worst = worst.max((got - exact(k)).abs() / exact(k));
        n += 1;
    }
    assert!(n > 300, "only {n} rows compared");
    worst
}

#[test]
fn newest_first_and_tag_grouped_logs_replay_to_the_closed_form() {
    for log in ["newest-first.csv", "by-tag.csv"] {
        let out = out_dir(&format!("plant-logs-{log}"));
        let o = replay("plant-hold.toml", log, &out);
        let said = text(&o);
        assert!(o.status.success(), "{log}: {said}");
        assert!(said.contains("sorted by time on disk"), "{log}: {said}");
        // The mass flow over the logged density, the level in % of span
        // and the sorted rows give the closed form to f64 rounding of the
        // logged digits (2.880 t/h at 1200.0 kg/m³ is 2.4 m³/h exactly).
        let e = worst_error(&out);
        assert!(e < 1e-9, "{log}: worst relative error {e:e}");
        assert!(!said.contains("Warnings"), "{log}: {said}");
    }
}

#[test]
fn an_exception_stored_tag_is_named_and_hold_reads_it_exactly() {
    let out = out_dir("plant-logs-exception-linear");
    let o = replay("plant.toml", "exception-stored.csv", &out);
    let said = text(&o);
    assert!(o.status.success(), "{said}");
    assert!(
        said.contains("AI-5: looks exception-stored") && said.contains("interpolation = \"hold\""),
        "{said}"
    );
    let linear = worst_error(&out);
    let out = out_dir("plant-logs-exception-hold");
    let o = replay("plant-hold.toml", "exception-stored.csv", &out);
    let said = text(&o);
    assert!(o.status.success(), "{said}");
    assert!(!said.contains("looks exception-stored"), "{said}");
    let hold = worst_error(&out);
    // Read as stored (hold), the steps are steps: the closed form to f64
    // rounding. Read linearly, each step is a ramp over the ~18 min flat
    // stretch before it (measured: 3.1e-3 relative, against ~1e-15 held).
    assert!(hold < 1e-9, "hold: {hold:e}");
    assert!(linear > 1e-3, "linear: {linear:e}");
    eprintln!("exception-stored AI-5: worst relative error linear {linear:.2e}, hold {hold:.2e}");
}

#[test]
fn a_tick_much_coarser_than_the_log_is_warned_about() {
    let out = out_dir("plant-logs-coarse");
    let o = replay("plant-coarse-tick.toml", "newest-first.csv", &out);
    let said = text(&o);
    assert!(o.status.success(), "{said}");
    assert!(said.contains("the tick (600000 ms) is"), "{said}");
    let s: serde_json::Value = serde_json::from_str(
        &std::fs::read_to_string(out.join("summary.json")).expect("summary.json"),
    )
    .expect("json");
    assert!(
        s["warnings"][0]
            .as_str()
            .unwrap_or("")
            .contains("median interval"),
        "{s}"
    );
}

#[test]
fn a_vessel_typed_a_thousand_times_too_wide_stops_with_exit_2() {
    let out = out_dir("plant-logs-too-wide");
    let o = replay("plant-too-wide.toml", "newest-first.csv", &out);
    let said = text(&o);
    assert_eq!(o.status.code(), Some(2), "{said}");
    assert!(
        said.contains("plant-too-wide.toml") && said.contains("[initial] gives 2 m3"),
        "{said}"
    );
    assert!(said.contains("first level reading (LT-5"), "{said}");
}

#[test]
fn a_tag_without_any_number_stops_with_exit_2_naming_its_first_line() {
    let out = out_dir("plant-logs-non-numeric");
    let o = replay("plant-hold.toml", "non-numeric.csv", &out);
    let said = text(&o);
    assert_eq!(o.status.code(), Some(2), "{said}");
    assert!(
        said.contains(
            "tag TI-5 has no numeric value in the whole log: none of its 361 cells is a number \
             (the first, line 2: not a number 'n/a')"
        ),
        "{said}"
    );
    // Found by the pass over the log before the replay: nothing written.
    assert!(!out.join("estimates.csv").exists());
}

#[test]
fn too_little_usable_data_does_not_exit_0() {
    let out = out_dir("plant-logs-sparse");
    let o = replay("plant-hold.toml", "sparse.csv", &out);
    let said = text(&o);
    assert_eq!(o.status.code(), Some(3), "{said}");
    assert!(
        said.contains("tag FI-6 has a fresh value at only"),
        "{said}"
    );
    assert!(out.join("summary.json").exists());
}
