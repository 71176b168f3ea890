//! Outside checks of `holdup fit` (issue 15): its sensitivities against a
//! closed form, and the coverage of its 95 % intervals against a truth
//! integrated here, independently of the kernel.
//!
//! The plant (invented): decay tank K-7, a 1.2 m vertical cylinder holding
//! 2 m³ at constant volume (inflow = outflow = q, both logged), constant
//! feed c_f of species A, first-order consumption A → products with the
//! Arrhenius form of the kernel, k(T) = k_ref·exp(−Ea/R·(1/T − 1/T_ref)).
//! The balance is `dc/dt = (q/V)(c_f − c) − k(T)·c`; with q and T constant
//! it has the closed form (a linear ODE with constant coefficients, common
//! practice)
//!
//! ```text
//! c(t) = c_ss + (c0 − c_ss)·e^{−λt},  λ = q/V + k,  c_ss = (q/V)·c_f/λ.
//! ```
//!
//! **`sensitivities_match_the_closed_form`**: at constant q and T the
//! derivatives of c(t) in k_ref, Ea and c_f are written by hand (below,
//! `closed_form`) and compared with the fit's finite differences of the
//! residuals `r = (ĉ − c_lab)/σ`, `∂r/∂θ = (∂ĉ/∂θ)/σ`: the central
//! differences of the statistics (`solve::jacobian`, step `SE_STEP`) and a
//! forward difference with the search's step (`FD_STEP` in the search's
//! variable u, converted to the θ step it makes). The model's predictions
//! themselves must equal the closed form first.
//!
//! **`intervals_cover_the_truth`**: 100 seeded trials of the same tank with
//! the temperature in steps between 40 and 65 °C and the flow in steps,
//! logged every 10 min for 48 h; the truth is integrated with classical
//! fourth-order Runge–Kutta (600 substeps per tick, the inputs of each log
//! row held over the following tick as the kernel holds them), itself
//! checked against the closed form on a constant stretch. Twelve lab
//! results per trial carry 2 % relative Gaussian noise. Each trial is
//! fitted with `holdup_sim::fit::fit` (k_ref and Ea unknown, guesses far
//! from the truth) and the truth must lie inside the 95 % interval
//! `θ ± t₀.₉₇₅·SE` in at least 90 of the 100 trials, for each parameter.
//! If the intervals had exactly 95 % coverage, the count X of one parameter
//! would be Binomial(100, 0.95) and P(X ≤ 89) = 0.0115 (summed here in
//! Python from the binomial formula), so with random seeds this check would
//! fail by chance about 1.1 % of the time per parameter, at most 2.3 % for
//! either of the two (union bound). The seeds are fixed, so the run is
//! deterministic: it passes or fails the same way every time. (The 95 % of
//! the linearised intervals is itself only asymptotic in a nonlinear
//! model; the measured counts are printed with `--nocapture`.)
//!
//! The random numbers are written here: SplitMix64 (Steele, Lea and Flood,
//! "Fast splittable pseudorandom number generators", OOPSLA 2014; the
//! constants of Vigna's public-domain `splitmix64.c`, from memory) and the
//! Box–Muller transform (Box and Muller, Ann. Math. Statist. 29, 1958,
//! 610–611; from memory).

use std::path::{Path, PathBuf};
use std::time::Instant;

use holdup_sim::config::{self, Template};
use holdup_sim::fit::data::Data;
use holdup_sim::fit::solve::{self, Param, Residuals};
use holdup_sim::fit::Model;

// ------------------------------------------------------------ constants

/// Molar gas constant, J/(mol·K): CODATA 2018 (exact since the 2019 SI
/// redefinition).
const R: f64 = 8.314462618;
/// 0 °C in K (the definition of the Celsius scale).
const ZERO_CELSIUS: f64 = 273.15;
/// Liquid volume, m³ (constant: inflow = outflow).
const V: f64 = 2.0;
/// Feed concentration of A, mol/m³.
const FEED: f64 = 200.0;
/// Initial concentration of A, mol/m³.
const C0: f64 = 120.0;
/// True rate constant at the reference temperature, 1/s.
const K_REF: f64 = 3e-4;
/// True activation energy, kJ/mol.
const EA_KJ: f64 = 55.0;
/// Reference temperature, °C.
const T_REF_C: f64 = 50.0;
/// Relative 1σ of a lab result (also `[fit] lab_sigma`).
const LAB_SIGMA: f64 = 0.02;
/// First log row, epoch seconds (an arbitrary instant).
const T0: i64 = 1_777_852_800;

/// `k(T)` in 1/s, T in °C, Ea in kJ/mol (the kernel's Arrhenius form as
/// docs/config.md writes it: k_ref at the reference temperature).
fn arrhenius(k_ref: f64, ea_kj: f64, t_c: f64) -> f64 {
    let (t, t_ref) = (t_c + ZERO_CELSIUS, T_REF_C + ZERO_CELSIUS);
    k_ref * (-ea_kj * 1e3 / R * (1.0 / t - 1.0 / t_ref)).exp()
}

// ----------------------------------------------------------- the files

/// One log row: flow in and out, m³/h, and the temperature, °C.
#[derive(Clone, Copy, Debug)]
struct Row {
    q_m3h: f64,
    t_c: f64,
}

/// plant.toml of tank K-7; `rate_constant`, `activation_energy` and the
/// feed of A are given as written (a value or an unknown).
fn plant_toml(what: &str, tick_s: u32, k: &str, ea: &str, feed: &str) -> String {
    format!(
        r#"# Invented decay tank K-7 for host-sim/tests/fit_checks.rs ({what}).
[plant]
name = "Invented decay tank K-7 ({what})"
tick = "{tick_s} s"
scalar = "f64"
method = "exact"

[vessel]
shape = "vertical-cylinder"
diameter = {{ value = 1.2, unit = "m" }}
height = {{ value = 2.5, unit = "m" }}

[[species]]
name = "A"

[[inlet]]
name = "feed"
flow = {{ tag = "FI-1", unit = "m3/h" }}
feed = {{ A = {feed} }}

[[outlet]]
name = "product"
kind = "measured"
flow = {{ tag = "FI-2", unit = "m3/h" }}

[temperature]
tag = "TI-1"
unit = "degC"

[[reaction]]
name = "decay"
stoichiometry = {{ A = -1 }}
orders = {{ A = 1 }}
rate_constant = {k}
activation_energy = {ea}
reference_temperature = {{ value = {T_REF_C:?}, unit = "degC" }}

[initial]
volume = {{ value = {V:?}, unit = "m3" }}
concentrations = {{ A = {{ value = {C0:?}, unit = "mol/m3" }} }}

[log]
format = "wide"
time = "epoch_s"

[fit]
lab_sigma = {LAB_SIGMA:?}
hold_out = 0
"#
    )
}

/// log.csv: one row per tick from `T0`, the same flow in and out.
fn log_csv(rows: &[Row], tick_s: u32) -> String {
    let mut s = String::from("time,FI-1,FI-2,TI-1\n");
    for (j, r) in rows.iter().enumerate() {
        let t = T0 + j as i64 * i64::from(tick_s);
        s.push_str(&format!("{t},{:?},{:?},{:?}\n", r.q_m3h, r.q_m3h, r.t_c));
    }
    s
}

/// lab.csv: `(row, value)` pairs, sampled at the row's time.
fn lab_csv(labs: &[(usize, f64)], tick_s: u32) -> String {
    let mut s = String::from("sample_time,species,value,unit\n");
    for &(j, v) in labs {
        let t = T0 + j as i64 * i64::from(tick_s);
        s.push_str(&format!("{t},A,{v:?},mol/m3\n"));
    }
    s
}

/// Write the three files into `dir`; their paths.
fn write_files(dir: &Path, plant: &str, log: &str, lab: &str) -> (PathBuf, PathBuf, PathBuf) {
    let p = (
        dir.join("plant.toml"),
        dir.join("log.csv"),
        dir.join("lab.csv"),
    );
    std::fs::write(&p.0, plant).expect("write plant.toml");
    std::fs::write(&p.1, log).expect("write log.csv");
    std::fs::write(&p.2, lab).expect("write lab.csv");
    p
}

// ------------------------------------------------ closed form and truth

/// c(t) at constant q and T, and its derivatives in k_ref (per 1/s), Ea
/// (per kJ/mol) and c_f (per mol/m³), by hand:
///
/// - `∂c/∂k = −(c_ss/λ)(1 − e^{−λt}) − (c0 − c_ss)·t·e^{−λt}` (from
///   `∂c_ss/∂k = −c_ss/λ` and `∂λ/∂k = 1`);
/// - `∂k/∂k_ref = k/k_ref`, `∂k/∂Ea = −k·(1/T − 1/T_ref)·10³/R` (Ea in
///   kJ/mol);
/// - `∂c/∂c_f = (q/V)/λ·(1 − e^{−λt})`.
fn closed_form(q_m3h: f64, t_c: f64, t: f64) -> (f64, [f64; 3]) {
    let a = q_m3h / 3600.0 / V;
    let k = arrhenius(K_REF, EA_KJ, t_c);
    let lam = a + k;
    let css = a * FEED / lam;
    let e = (-lam * t).exp();
    let c = css + (C0 - css) * e;
    let dc_dk = -css / lam * (1.0 - e) - (C0 - css) * t * e;
    let dk_dkref = k / K_REF;
    let dk_dea = -k * (1.0 / (t_c + ZERO_CELSIUS) - 1.0 / (T_REF_C + ZERO_CELSIUS)) * 1e3 / R;
    let dc_dcf = a / lam * (1.0 - e);
    (c, [dc_dk * dk_dkref, dc_dk * dk_dea, dc_dcf])
}

/// Classical fourth-order Runge–Kutta (common practice) of
/// `dc/dt = a(c_f − c) − k·c` over `h` seconds in `n` equal substeps.
fn rk4(mut c: f64, a: f64, k: f64, h: f64, n: u32) -> f64 {
    let f = |c: f64| a * (FEED - c) - k * c;
    let dt = h / f64::from(n);
    for _ in 0..n {
        let k1 = f(c);
        let k2 = f(c + 0.5 * dt * k1);
        let k3 = f(c + 0.5 * dt * k2);
        let k4 = f(c + dt * k3);
        c += dt / 6.0 * (k1 + 2.0 * k2 + 2.0 * k3 + k4);
    }
    c
}

/// Substeps of the truth per tick.
const SUBSTEPS: u32 = 600;

/// The true c at every row: c[0] = C0, and c[j+1] from c[j] with row j's
/// flow and temperature held over the tick.
fn truth(rows: &[Row], tick_s: u32) -> Vec<f64> {
    let mut c = Vec::with_capacity(rows.len());
    c.push(C0);
    for r in &rows[..rows.len() - 1] {
        let a = r.q_m3h / 3600.0 / V;
        let k = arrhenius(K_REF, EA_KJ, r.t_c);
        let last = *c.last().expect("c[0] is there");
        c.push(rk4(last, a, k, f64::from(tick_s), SUBSTEPS));
    }
    c
}

// ---------------------------------------------------------- random numbers

/// SplitMix64 (see the top of the file).
struct SplitMix64(u64);

impl SplitMix64 {
    fn next_u64(&mut self) -> u64 {
        self.0 = self.0.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut z = self.0;
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        z ^ (z >> 31)
    }

    /// Uniform in (0, 1]: the top 53 bits.
    fn uniform(&mut self) -> f64 {
        ((self.next_u64() >> 11) + 1) as f64 * (1.0 / (1u64 << 53) as f64)
    }

    /// Uniform integer in `lo..=hi` (the modulo bias, below 1e-17 here,
    /// does not matter).
    fn int(&mut self, lo: u64, hi: u64) -> u64 {
        lo + self.next_u64() % (hi - lo + 1)
    }

    /// Standard normal by Box–Muller (one of the pair).
    fn normal(&mut self) -> f64 {
        let (u1, u2) = (self.uniform(), self.uniform());
        (-2.0 * u1.ln()).sqrt() * (2.0 * std::f64::consts::PI * u2).cos()
    }
}

// ------------------------------------------------------ 1. sensitivities

/// Largest `|a − b|` over the column, relative to the largest `|b|`.
fn column_error(a: &[f64], b: &[f64]) -> f64 {
    let scale = b.iter().fold(0.0f64, |m, x| m.max(x.abs()));
    let diff = a
        .iter()
        .zip(b)
        .fold(0.0f64, |m, (x, y)| m.max((x - y).abs()));
    diff / scale
}

#[test]
fn sensitivities_match_the_closed_form() {
    // 12 h at a 60 s tick, q = 3.6 m³/h (residence time 2000 s), 60 °C.
    let (tick_s, rows_n, q, t_c) = (60u32, 721usize, 3.6, 60.0);
    let rows = vec![Row { q_m3h: q, t_c }; rows_n];
    // Lab samples (row = minute), spread over the transient and the
    // steady state, off the model by ±1 % so the residuals are not zero.
    let at = [5usize, 10, 20, 30, 45, 60, 90, 120, 180, 300, 480, 720];
    let labs: Vec<(usize, f64)> = at
        .iter()
        .enumerate()
        .map(|(i, &j)| {
            let c = closed_form(q, t_c, j as f64 * f64::from(tick_s)).0;
            (j, c * if i % 2 == 0 { 1.01 } else { 0.99 })
        })
        .collect();
    let plant = plant_toml(
        "sensitivity check",
        tick_s,
        &format!(r#"{{ guess = {K_REF:?}, unit = "1/s", min = 1e-7, max = 0.1 }}"#),
        &format!(r#"{{ guess = {EA_KJ:?}, unit = "kJ/mol", min = 0, max = 200 }}"#),
        &format!(r#"{{ guess = {FEED:?}, unit = "mol/m3", min = 0 }}"#),
    );
    let dir = tempfile::tempdir().expect("temporary folder");
    let (plant_path, log_path, lab_path) = write_files(
        dir.path(),
        &plant,
        &log_csv(&rows, tick_s),
        &lab_csv(&labs, tick_s),
    );

    let template = Template::parse(&plant, &plant_path).expect("template");
    let names: Vec<&str> = template.unknowns.iter().map(|u| u.name.as_str()).collect();
    assert_eq!(
        names,
        [
            "feed.feed.A",
            "decay.rate_constant",
            "decay.activation_energy"
        ],
        "the unknowns in file order"
    );
    // The test's order: k_ref, Ea, c_f; the file's: c_f, k_ref, Ea.
    let col_of = [1usize, 2, 0];
    let params: Vec<Param> = template.unknowns.iter().map(Param::of).collect();
    let at_plant = config::parse(&plant, &plant_path).expect("plant at its guesses");
    let data = Data::load(&at_plant, &log_path, Some(&lab_path)).expect("data");
    assert_eq!(data.ticks, rows_n);
    assert_eq!(data.observations.len(), labs.len());
    let model = Model::new(&template, &plant_path, &data, data.ticks);
    let theta: Vec<f64> = params.iter().map(|p| p.guess).collect();

    // The model at the truth is the closed form.
    let pred = model.predictions(&theta).expect("model runs");
    let mut worst_pred = 0.0f64;
    for (&(j, _), p) in labs.iter().zip(&pred) {
        let c = closed_form(q, t_c, j as f64 * f64::from(tick_s)).0;
        worst_pred = worst_pred.max(((p - c) / c).abs());
    }

    // Analytic ∂r/∂θ, σ = lab_sigma·|c_lab| as docs/config.md states.
    let analytic: Vec<Vec<f64>> = (0..3)
        .map(|n| {
            labs.iter()
                .map(|&(j, lab)| {
                    let d = closed_form(q, t_c, j as f64 * f64::from(tick_s)).1[n];
                    d / (LAB_SIGMA * lab.abs())
                })
                .collect()
        })
        .collect();

    // Central differences of the statistics.
    let (jac, _, _) = solve::jacobian(&model, &params, &theta).expect("jacobian");
    // Forward differences with the search's step: u → u + FD_STEP·max(|u|, 1),
    // divided by the θ step that makes.
    let r0 = model.residuals(&theta).expect("residuals");
    let mut forward = vec![Vec::new(); 3];
    let mut rel_step = [0.0; 3];
    for (n, &c) in col_of.iter().enumerate() {
        let p = &params[c];
        let u = p.u(theta[c]);
        let mut t = theta.clone();
        t[c] = p.theta(u + solve::FD_STEP * u.abs().max(1.0));
        let h = t[c] - theta[c];
        rel_step[n] = h / theta[c];
        let r = model.residuals(&t).expect("residuals");
        forward[n] = r.iter().zip(&r0).map(|(a, b)| (a - b) / h).collect();
    }

    let labels = ["k_ref [1/s]", "Ea [kJ/mol]", "c_f [mol/m3]"];
    println!("sensitivities of r = (c - lab)/sigma against the closed form (12 labs, 60 degC):");
    println!("  model vs closed form at the truth: max rel. diff {worst_pred:.1e}");
    println!(
        "  {:14} {:>22} {:>30}",
        "parameter", "central, SE_STEP", "forward, FD_STEP (in u)"
    );
    let mut errs = [[0.0; 2]; 3];
    for (n, &c) in col_of.iter().enumerate() {
        let central: Vec<f64> = jac.column(c).iter().copied().collect();
        errs[n] = [
            column_error(&central, &analytic[n]),
            column_error(&forward[n], &analytic[n]),
        ];
        println!(
            "  {:14} {:>22.2e} {:>18.2e} (step {:.1e})",
            labels[n], errs[n][0], errs[n][1], rel_step[n]
        );
    }

    // Measured (x86-64, debug build): the model 1.5e-16 off the closed
    // form; central differences 1e-11 to 5e-11; forward differences 3.0e-7
    // (k_ref), 9.6e-9 (Ea), 2.5e-10 (c_f). The forward error of k_ref is
    // the step's truncation: at steady state c = (q/V)c_f/λ, so
    // c''/c' = −2/λ in k and the relative error (h/2)|c''/c'| = Δk/λ =
    // 5.8e-7 · 5.55e-4/1.055e-3 = 3.05e-7, as measured (by hand).
    assert!(worst_pred < 1e-13, "model vs closed form: {worst_pred:e}");
    for (n, e) in errs.iter().enumerate() {
        assert!(
            e[0] < 1e-9,
            "{}: central differences off by {:e}",
            labels[n],
            e[0]
        );
        assert!(
            e[1] < 1e-6,
            "{}: forward differences off by {:e}",
            labels[n],
            e[1]
        );
    }
}

// ---------------------------------------------------------- 2. coverage

/// Log tick of the coverage trials, s, and rows (48 h).
const TICK_S: u32 = 600;
const ROWS: usize = 48 * 6 + 1;
const TRIALS: u64 = 100;
const LABS: usize = 12;

/// One trial's log rows, lab rows and noisy lab values, from its seed:
/// temperature steps every 2–5 h (in half hours) to levels on a 0.5 °C
/// grid in [40, 65] °C at least 5 °C apart; flow steps every 3–8 h among
/// 2.4–4.8 m³/h; lab i drawn at a tick in [4i + 0.5 h, 4i + 3.5 h].
fn trial(seed: u64) -> (Vec<Row>, Vec<(usize, f64)>, Vec<f64>) {
    let mut rng = SplitMix64(seed);
    let half_hour = 3;
    let mut temps = Vec::with_capacity(ROWS);
    let mut prev: Option<f64> = None;
    while temps.len() < ROWS {
        let len = rng.int(4, 10) as usize * half_hour;
        let level = loop {
            let l = 40.0 + 0.5 * rng.int(0, 50) as f64;
            if prev.is_none_or(|p| (l - p).abs() >= 5.0) {
                break l;
            }
        };
        prev = Some(level);
        temps.extend(std::iter::repeat_n(level, len));
    }
    let mut flows = Vec::with_capacity(ROWS);
    while flows.len() < ROWS {
        let len = rng.int(6, 16) as usize * half_hour;
        let q = [2.4, 3.0, 3.6, 4.2, 4.8][rng.int(0, 4) as usize];
        flows.extend(std::iter::repeat_n(q, len));
    }
    let rows: Vec<Row> = (0..ROWS)
        .map(|j| Row {
            q_m3h: flows[j],
            t_c: temps[j],
        })
        .collect();
    let c = truth(&rows, TICK_S);
    let labs = (0..LABS)
        .map(|i| {
            let lo = (4 * i as u64) * 6 + half_hour as u64;
            let j = rng.int(lo, lo + 18) as usize;
            (j, c[j] * (1.0 + LAB_SIGMA * rng.normal()))
        })
        .collect();
    (rows, labs, c)
}

#[test]
fn intervals_cover_the_truth() {
    let started = Instant::now();
    // The truth integrator against the closed form: 3 h at 60 °C and
    // 3.6 m³/h from C0.
    let stretch = vec![
        Row {
            q_m3h: 3.6,
            t_c: 60.0,
        };
        19
    ];
    let c = truth(&stretch, TICK_S);
    let rk4_err = c
        .iter()
        .enumerate()
        .map(|(j, x)| {
            let exact = closed_form(3.6, 60.0, j as f64 * f64::from(TICK_S)).0;
            ((x - exact) / exact).abs()
        })
        .fold(0.0f64, f64::max);
    println!("truth (RK4, {SUBSTEPS} substeps per tick) vs closed form, 3 h: {rk4_err:.1e}");
    assert!(rk4_err < 1e-12, "RK4 vs closed form: {rk4_err:e}");

    let plant = plant_toml(
        "coverage trial",
        TICK_S,
        r#"{ guess = 1e-4, unit = "1/s", min = 1e-7, max = 0.1 }"#,
        r#"{ guess = 40, unit = "kJ/mol", min = 0, max = 200 }"#,
        &format!(r#"{{ value = {FEED:?}, unit = "mol/m3" }}"#),
    );
    let truth_theta = [K_REF, EA_KJ];
    let mut covered = [0usize; 2];
    let mut unconverged = Vec::new();
    let mut worst_model = 0.0f64;
    let mut z_sum = [0.0f64; 2];
    let mut s2_sum = 0.0;
    let dir = tempfile::tempdir().expect("temporary folder");
    for n in 0..TRIALS {
        let seed = 0x4B37_0000 + n;
        let (rows, labs, c) = trial(seed);
        let (plant_path, log_path, lab_path) = write_files(
            dir.path(),
            &plant,
            &log_csv(&rows, TICK_S),
            &lab_csv(&labs, TICK_S),
        );
        let fit = holdup_sim::fit::fit(&plant_path, &log_path, Some(&lab_path))
            .unwrap_or_else(|e| panic!("seed {seed:#x}: {e}"));
        assert_eq!(fit.data.observations.len(), LABS, "seed {seed:#x}");
        // The model at the truth against the RK4 truth, at the lab rows.
        let model = Model::new(&fit.template, &plant_path, &fit.data, fit.data.ticks);
        let pred = model.predictions(&truth_theta).expect("model at the truth");
        for (p, &(j, _)) in pred.iter().zip(&labs) {
            worst_model = worst_model.max(((p - c[j]) / c[j]).abs());
        }
        if !fit.solution.converged {
            unconverged.push((seed, fit.solution.termination.clone()));
        }
        let (theta, se, t) = (&fit.solution.theta, &fit.stats.se, fit.stats.t975);
        for i in 0..2 {
            let z = (theta[i] - truth_theta[i]) / se[i];
            z_sum[i] += z * z;
            if (theta[i] - truth_theta[i]).abs() <= t * se[i] {
                covered[i] += 1;
            }
        }
        s2_sum += fit.stats.s2;
    }
    let secs = started.elapsed().as_secs_f64();
    println!("model at the truth vs the RK4 truth, all lab rows: max rel. diff {worst_model:.1e}");
    println!(
        "95 % intervals containing the truth in {TRIALS} trials: k_ref {}, Ea {} \
         (mean ((value - truth)/SE)^2: {:.2}, {:.2}; mean s^2 {:.2}); {} not converged; {secs:.1} s",
        covered[0],
        covered[1],
        z_sum[0] / TRIALS as f64,
        z_sum[1] / TRIALS as f64,
        s2_sum / TRIALS as f64,
        unconverged.len()
    );
    // Measured: RK4 vs the model 5.7e-15; k_ref 93 and Ea 94 of 100 (with
    // eight other seed bases, tried once: 91-96 each, 845 of 900 for both).
    assert!(worst_model < 1e-12, "model vs RK4 truth: {worst_model:e}");
    assert!(unconverged.is_empty(), "not converged: {unconverged:?}");
    assert!(
        covered[0] >= 90,
        "k_ref covered in {} of {TRIALS}",
        covered[0]
    );
    assert!(covered[1] >= 90, "Ea covered in {} of {TRIALS}", covered[1]);
}
