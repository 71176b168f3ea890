//! `holdup fit` speed: a two-parameter fit (rate constant and activation
//! energy) of an invented stirred tank on a 48 h log at 1 s with 12 lab
//! results, open loop and with the estimator's level corrections, and the
//! same with the default held-out check. Prints a table: the log read
//! once, the model runs (one run is 172,800 ticks), their mean time, and
//! the fit's wall time, on one core (the fit is single-threaded).
//!
//! `cargo bench -p holdup-sim --bench fit`
//!
//! The data: constant volume (in = out = 1.2 m³/h), feed 200 mol/m³, first
//! order consumption with Arrhenius temperature dependence, temperature
//! stepping between 40 and 65 °C every 4 h; truth by the exact per-tick
//! solution (common practice), lab results with 2 % relative noise (the
//! demo's seeded SplitMix64 generator).

use std::fmt::Write as _;
use std::path::Path;
use std::time::Instant;

use holdup_sim::config::{self, Template};
use holdup_sim::demo::Noise;
use holdup_sim::fit::{self, data::Data};

const TICKS: usize = 48 * 3600;
const LABS: usize = 12;
const K_REF: f64 = 3e-4;
const EA_J: f64 = 55e3;
/// Molar gas constant, J/(mol K) (CODATA 2018).
const R: f64 = 8.314_462_618;

fn plant(estimator: bool, hold_out: f64) -> String {
    let mut s = String::from(
        r#"# Invented stirred tank T-21 for the fit benchmark.
[plant]
name = "Bench tank T-21"
tick = "1 s"
scalar = "f64"
method = "auto"

[vessel]
shape = "vertical-cylinder"
diameter = { value = 1.2, unit = "m" }
height = { value = 2.5, unit = "m" }
bottom = "flat"

[[species]]
name = "A"

[[inlet]]
name = "feed"
flow = { tag = "FI-1", unit = "m3/h" }
feed = { A = { value = 200, unit = "mol/m3" } }

[[outlet]]
name = "product"
kind = "measured"
flow = { tag = "FI-2", unit = "m3/h" }

[temperature]
tag = "TI-1"
unit = "degC"

[level]
tag = "LI-1"
unit = "m"

[[reaction]]
name = "decay"
stoichiometry = { A = -1 }
orders = { A = 1 }
rate_constant = { guess = 1e-4, unit = "1/s", min = 1e-7, max = 0.1 }
activation_energy = { guess = 40, unit = "kJ/mol", min = 0, max = 200 }
reference_temperature = { value = 50, unit = "degC" }

[initial]
level = { value = 1.5, unit = "m" }
concentrations = { A = { value = 100, unit = "mol/m3" } }

[log]
format = "wide"
time = "epoch_s"
"#,
    );
    if estimator {
        s.push_str("\n[estimator]\nlevel_sigma = { value = 3, unit = \"mm\" }\n");
    }
    let _ = write!(s, "\n[fit]\nlab_sigma = 0.02\nhold_out = {hold_out:?}\n");
    s
}

/// Temperature of tick `k`, °C: steps every 4 h through a fixed cycle.
fn temperature_c(k: usize) -> f64 {
    [40.0, 55.0, 65.0, 48.0, 60.0, 44.0][(k / 14_400) % 6]
}

fn write_data(dir: &Path) {
    let t0: i64 = 1_780_000_000;
    let area = std::f64::consts::PI * 1.2 * 1.2 / 4.0;
    let v = area * 1.5;
    let q = 1.2 / 3600.0;
    let cf = 200.0;
    let mut c = 100.0;
    let mut log = String::with_capacity(TICKS * 40);
    log.push_str("time,FI-1,FI-2,TI-1,LI-1\n");
    let mut truth = Vec::with_capacity(TICKS + 1);
    for k in 0..=TICKS {
        truth.push(c);
        let tc = temperature_c(k);
        let _ = writeln!(log, "{},1.2,1.2,{tc},1.5", t0 + k as i64);
        let kk = K_REF * (-EA_J / R * (1.0 / (tc + 273.15) - 1.0 / 323.15)).exp();
        let d = q / v;
        let css = d * cf / (d + kk);
        c = css + (c - css) * (-(d + kk)).exp();
    }
    std::fs::write(dir.join("log.csv"), log).expect("write log");
    let mut rng = Noise::new(21);
    let mut lab = String::from("sample_time,species,value,unit\n");
    for i in 0..LABS {
        let k = (i + 1) * TICKS / (LABS + 1);
        let value = truth[k] * (1.0 + 0.02 * rng.normal());
        let _ = writeln!(lab, "{},A,{value},mol/m3", t0 + k as i64);
    }
    std::fs::write(dir.join("lab.csv"), lab).expect("write lab");
}

fn main() {
    let dir = tempfile::tempdir().expect("temp dir");
    write_data(dir.path());
    let (log, lab) = (dir.path().join("log.csv"), dir.path().join("lab.csv"));
    println!(
        "holdup fit: k and Ea of an invented tank, 48 h log at 1 s ({TICKS} ticks), {LABS} lab results; one core"
    );
    println!(
        "| case | log into memory | model runs | mean run | fit wall | k fitted (true 3e-4 1/s) | Ea fitted (true 55 kJ/mol) |"
    );
    println!("|---|---|---|---|---|---|---|");
    for (name, estimator, hold_out) in [
        ("open loop", false, 0.0),
        ("estimator (level corrections)", true, 0.0),
        ("open loop, held-out check 25 %", false, 0.25),
    ] {
        let cfg = dir.path().join(format!("plant-{}.toml", name.len()));
        std::fs::write(&cfg, plant(estimator, hold_out)).expect("write plant");
        let text = std::fs::read_to_string(&cfg).expect("read plant");
        let template = Template::parse(&text, &cfg).expect("template");
        let p = config::parse(&text, &cfg).expect("plant");
        let started = Instant::now();
        let data = Data::load(&p, &log, Some(&lab)).expect("data");
        let load_s = started.elapsed().as_secs_f64();
        let f = fit::fit_data(p, template, data).expect("fit");
        println!(
            "| {name} | {load_s:.2} s | {} | {:.1} ms | {:.2} s | {:.5e} ± {:.1e} | {:.3} ± {:.3} |",
            f.evaluations,
            1e3 * f.wall_s / f.evaluations as f64,
            f.wall_s,
            f.solution.theta[0],
            f.stats.se[0],
            f.solution.theta[1],
            f.stats.se[1],
        );
    }
}
