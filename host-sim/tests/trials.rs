//! Recovery from bad data: three 48 h trials of an invented reactor, logged
//! every second, replayed with `holdup replay`, and the estimates checked
//! against the true plant.
//!
//! The true plant is integrated here, independently of the kernel: the
//! textbook balances of a stirred tank (total volume, amount of A, amount of
//! B) with a fixed-step classical Runge–Kutta method in `f64` at 0.25 s. Its
//! flows follow setpoint steps every 3 h through a first-order lag, so the
//! level and the composition move. The meters read the true plant with
//! white noise; the feed meter also reads 3 % high. The trials:
//!
//! - clean: the log as the meters read it;
//! - spike: one feed-flow value replaced by 1e30 m³/s at 20 h;
//! - dropout: the outlet flow reported as −0.05 m³/s for 10 minutes from 31 h;
//! - stuck at zero: the outlet meter reads 0 for 10 minutes from 38 h. Zero
//!   is a valid flow, so the conditioning passes it and the balance goes
//!   wrong; the estimator must notice (a run of gated level readings),
//!   re-seed from the level and be right again within 15 minutes.
//!
//! The configuration is committed in `fixtures/trials/plant.toml` and checked
//! current (run with `HOLDUP_WRITE_FIXTURES=1` to rewrite it); the logs (about 9 MB
//! each), the lab file and the truth are generated into `CARGO_TARGET_TMPDIR`.

mod common;
use common::root;
use std::fmt::Write as _;
use std::path::{Path, PathBuf};
use std::process::{Command, Output};
use std::sync::OnceLock;

// ------------------------------------------------------------------ plant

/// Vertical cylinder, flat bottom: diameter and straight height, m.
const DIAMETER_M: f64 = 2.6;
const HEIGHT_M: f64 = 3.0;
/// Feed concentration of A, mol/m³ (constant; no B in the feed).
const FEED_A: f64 = 500.0;
/// First-order rate constant of A → B, 1/s. With 11 m³ at 1.8 m³/h the
/// residence time is 22 000 s, so k·τ ≈ 1: about half of A is converted.
const K_PER_S: f64 = 4.5e-5;
/// Initial state, known exactly (the configuration starts from it).
const V0_M3: f64 = 11.0;
const CA0: f64 = 250.0;
const CB0: f64 = 250.0;
/// Reactor temperature, °C (no activation energy: the rate does not depend on it).
const TEMP_C: f64 = 60.0;

/// Setpoint of the feed and outlet flows in each 3 h segment, m³/h.
const SEGMENT_S: f64 = 3.0 * 3600.0;
const SP_IN: [f64; 16] = [
    1.8, 1.8, 1.6, 1.6, 2.0, 2.0, 1.7, 1.9, 1.9, 1.5, 1.7, 1.7, 2.0, 1.6, 1.8, 1.8,
];
const SP_OUT: [f64; 16] = [
    1.8, 1.5, 1.6, 2.0, 2.0, 1.7, 1.9, 1.9, 2.1, 1.5, 1.5, 1.7, 1.8, 1.9, 1.8, 1.6,
];
/// Time constant of the flows' response to a setpoint step, s.
const LAG_S: f64 = 120.0;

// ------------------------------------------------------------------- log

/// Length of the trials, s (48 h at 1 s: 172 801 rows with both ends).
const SECONDS: usize = 48 * 3600;
/// Fixed RK4 step of the true plant, s.
const RK4_STEP_S: f64 = 0.25;
/// Relative 1σ white noise of the flow meters.
const FLOW_NOISE: f64 = 0.01;
/// The feed meter reads this much high (relative).
const FEED_METER_BIAS: f64 = 0.03;
/// 1σ noise of the level transmitter, m (also the configured `level_sigma`).
const LEVEL_NOISE_M: f64 = 0.003;
/// 1σ noise of the temperature transmitter, K.
const TEMP_NOISE: f64 = 0.05;
/// Relative 1σ of a lab analysis (the estimator's default `lab_sigma`).
const LAB_NOISE: f64 = 0.02;
/// Lab samples: the first at 2 h, then every 4 h.
const LAB_FIRST_S: usize = 2 * 3600;
const LAB_EVERY_S: usize = 4 * 3600;
/// Start of the logs: 2026-04-06T00:00:00Z (invented).
const DATES: [&str; 3] = ["2026-04-06", "2026-04-07", "2026-04-08"];

/// The spike: the feed meter's value at 20 h replaced by 1e30 m³/s, which
/// is 1e30 × 3600 = 3.6e33 in the log's m³/h.
const SPIKE_AT_S: usize = 20 * 3600;
const SPIKE_CELL: &str = "3.6e33";
/// The dropout: the outlet meter reports −0.05 m³/s (−0.05 × 3600 = −180
/// m³/h) for 10 minutes from 31 h.
const DROPOUT_AT_S: usize = 31 * 3600;
const DROPOUT_S: usize = 600;
const DROPOUT_CELL: &str = "-180";
/// The stuck meter: the outlet reads 0 m³/h for 10 minutes from 38 h.
const STUCK_AT_S: usize = 38 * 3600;
const STUCK_S: usize = 600;
const STUCK_CELL: &str = "0";

// ---------------------------------------------------------------- targets

/// Start-up excluded from the clean checks, s.
const STARTUP_S: usize = 3600;
/// After a fault, time allowed to recover, s.
const SETTLE_S: usize = 15 * 60;
/// Estimates within this relative error of the truth.
const REL_TOL: f64 = 0.01;
/// The truth within ±3σ for at least this share of ticks.
const COVERAGE: f64 = 0.99;
/// The spike run's estimates within this relative difference of the clean
/// run's at every tick. A replay that drops the bad value, or holds or
/// interpolates its neighbours, changes at most one second of feed: 2 m³/h
/// × 1 s = 5.6e-4 m³ of 10.4 m³ or more (5e-5 relative in the holdup, and
/// in the concentrations one second of dilution, of the same order); 1e-3
/// leaves room for any such replacement and is ten times tighter than the
/// 1 % target.
const SPIKE_TOL: f64 = 1e-3;

fn area_m2() -> f64 {
    std::f64::consts::PI * DIAMETER_M * DIAMETER_M / 4.0
}

// ----------------------------------------------------------- the fixture

fn trial_config() -> String {
    format!(
        r#"# Trials of recovery from bad data (generated by host-sim/tests/trials.rs;
# see fixtures/trials/README.md). An invented plant.
[plant]
name = "Trial reactor TR-4 (bad-data trials)"
tick = "1 s"
scalar = "f64"

[vessel]
shape = "vertical-cylinder"
diameter = {{ value = {DIAMETER_M}, unit = "m" }}
height = {{ value = {HEIGHT_M}, unit = "m" }}

[[species]]
name = "A"

[[species]]
name = "B"

[[inlet]]
name = "dosing pump P-41"
flow = {{ tag = "FI-401", unit = "m3/h" }}
feed = {{ A = {{ value = {FEED_A}, unit = "mol/m3" }} }}

[[outlet]]
name = "product"
kind = "measured"
flow = {{ tag = "FI-402", unit = "m3/h" }}

[temperature]
tag = "TI-401"
unit = "degC"

[level]
tag = "LI-401"
unit = "m"

[[reaction]]
name = "conversion"
stoichiometry = {{ A = -1, B = 1 }}
orders = {{ A = 1 }}
rate_constant = {{ value = {K_PER_S:e}, unit = "1/s" }}

[initial]
volume = {{ value = {V0_M3}, unit = "m3" }}
concentrations = {{ A = {{ value = {CA0}, unit = "mol/m3" }}, B = {{ value = {CB0}, unit = "mol/m3" }} }}

# The reaction and the feed are known; the vessel starts from an analysed
# state (1 %). The dosing pump's meter may read off: its bias is estimated.
[estimator]
level_sigma = {{ value = {level_mm}, unit = "mm" }}
holdup_drift = {{ value = 10, unit = "L" }}
concentration_drift = {{ value = 0.5, unit = "mol/m3" }}
initial_concentration_sigma = {{ value = 2.5, unit = "mol/m3" }}
bias_meters = ["dosing pump P-41"]
flow_sigma = {flow_sigma}
"#,
        level_mm = LEVEL_NOISE_M * 1000.0,
        flow_sigma = FLOW_NOISE,
    )
}

fn fixture_files() -> Vec<(PathBuf, String)> {
    vec![(root().join("fixtures/trials/plant.toml"), trial_config())]
}

#[test]
fn fixtures_are_current() {
    common::check_fixtures(fixture_files());
}

// ------------------------------------------------------------ randomness

/// xorshift64* (Vigna, "An experimental exploration of Marsaglia's
/// xorshift generators, scrambled", 2016): shifts 12, 25, 27 and the
/// multiplier 2685821657736338717.
struct Rng(u64);

impl Rng {
    fn next_u64(&mut self) -> u64 {
        let mut x = self.0;
        x ^= x >> 12;
        x ^= x << 25;
        x ^= x >> 27;
        self.0 = x;
        x.wrapping_mul(2_685_821_657_736_338_717)
    }

    /// Uniform in (0, 1): the top 53 bits, centred in their interval.
    fn uniform(&mut self) -> f64 {
        ((self.next_u64() >> 11) as f64 + 0.5) / (1u64 << 53) as f64
    }

    /// Standard normal by the Box–Muller transform (one of the pair).
    fn normal(&mut self) -> f64 {
        let (u1, u2) = (self.uniform(), self.uniform());
        (-2.0 * u1.ln()).sqrt() * (2.0 * std::f64::consts::PI * u2).cos()
    }
}

// -------------------------------------------------------- the true plant

/// The true flows (m³/s) at `t` s: each setpoint held for a 3 h segment,
/// the flow following it through a first-order lag from a steady start.
struct Schedule {
    /// Flows at the start of each segment, m³/h.
    start_in: [f64; 16],
    start_out: [f64; 16],
}

impl Schedule {
    fn new() -> Self {
        let decay = (-SEGMENT_S / LAG_S).exp();
        let (mut start_in, mut start_out) = ([SP_IN[0]; 16], [SP_OUT[0]; 16]);
        for j in 1..16 {
            start_in[j] = SP_IN[j - 1] + (start_in[j - 1] - SP_IN[j - 1]) * decay;
            start_out[j] = SP_OUT[j - 1] + (start_out[j - 1] - SP_OUT[j - 1]) * decay;
        }
        Self {
            start_in,
            start_out,
        }
    }

    fn flows(&self, t: f64) -> (f64, f64) {
        let j = ((t / SEGMENT_S) as usize).min(15);
        let e = (-(t - j as f64 * SEGMENT_S) / LAG_S).exp();
        let q_in = SP_IN[j] + (self.start_in[j] - SP_IN[j]) * e;
        let q_out = SP_OUT[j] + (self.start_out[j] - SP_OUT[j]) * e;
        (q_in / 3600.0, q_out / 3600.0)
    }
}

/// State of the true plant: volume (m³), amounts of A and B (mol).
type State = [f64; 3];

/// The balances of a stirred tank with a constant feed of A and A → B of
/// first order: dV/dt = q_in − q_out, dn_A/dt = q_in·c_f − q_out·n_A/V −
/// k·n_A, dn_B/dt = −q_out·n_B/V + k·n_A.
fn derivative(x: &State, q_in: f64, q_out: f64) -> State {
    let [v, na, nb] = *x;
    [
        q_in - q_out,
        q_in * FEED_A - q_out * na / v - K_PER_S * na,
        -q_out * nb / v + K_PER_S * na,
    ]
}

/// Classical fourth-order Runge–Kutta at `RK4_STEP_S` from `x0` at t = 0
/// to `seconds`, with the flows (m³/s) given by `flows(t)`; the state at
/// every whole second.
fn integrate(flows: &dyn Fn(f64) -> (f64, f64), x0: State, seconds: usize) -> Vec<State> {
    let h = RK4_STEP_S;
    let per_second = (1.0 / h).round() as usize;
    let axpy = |x: &State, a: f64, k: &State| [x[0] + a * k[0], x[1] + a * k[1], x[2] + a * k[2]];
    let f = |t: f64, x: &State| {
        let (qi, qo) = flows(t);
        derivative(x, qi, qo)
    };
    let mut out = Vec::with_capacity(seconds + 1);
    let mut x = x0;
    out.push(x);
    for s in 0..seconds {
        for m in 0..per_second {
            let t = s as f64 + m as f64 * h;
            let k1 = f(t, &x);
            let k2 = f(t + h / 2.0, &axpy(&x, h / 2.0, &k1));
            let k3 = f(t + h / 2.0, &axpy(&x, h / 2.0, &k2));
            let k4 = f(t + h, &axpy(&x, h, &k3));
            for i in 0..3 {
                x[i] += h / 6.0 * (k1[i] + 2.0 * k2[i] + 2.0 * k3[i] + k4[i]);
            }
        }
        out.push(x);
    }
    out
}

#[test]
fn truth_integrator_matches_closed_forms() {
    // Equal flows (constant V): dc_A/dt = (q/V)(c_f − c_A) − k·c_A, so
    // c_A(t) = c_ss + (c_A0 − c_ss)·e^{−(q/V + k)t}, c_ss = c_f/(1 + kτ);
    // and c_A + c_B relaxes to c_f with rate q/V (the component balance of
    // a CSTR solved by hand; the same closed form as cli.rs's step test).
    let q = 1.8 / 3600.0;
    let x0 = [V0_M3, 100.0 * V0_M3, 50.0 * V0_M3];
    let xs = integrate(&|_| (q, q), x0, 6 * 3600);
    let tau = V0_M3 / q;
    let css = FEED_A / (1.0 + K_PER_S * tau);
    let mut worst: f64 = 0.0;
    for (s, x) in xs.iter().enumerate().step_by(60) {
        let t = s as f64;
        let ca = css + (100.0 - css) * (-(1.0 / tau + K_PER_S) * t).exp();
        let total = FEED_A + (150.0 - FEED_A) * (-t / tau).exp();
        worst = worst
            .max((x[1] / x[0] - ca).abs() / ca)
            .max((x[1] / x[0] + x[2] / x[0] - total).abs() / total)
            .max((x[0] - V0_M3).abs() / V0_M3);
    }
    // RK4's error at h = 0.25 s against time constants of hours is far
    // below 1e-10 (fourth order: (h/τ)^4 per unit time).
    eprintln!("truth integrator, constant V: max relative error {worst:e}");
    assert!(worst < 1e-10, "{worst:e}");

    // Unequal constant flows: V(t) = V0 + (q_in − q_out)·t exactly. With
    // no outflow the total amount S = n_A + n_B (the reaction conserves it)
    // obeys dS/dt = q_in·c_f, so S(t) = S0 + q_in·c_f·t (integrated by
    // hand).
    let (qi, qo) = (2.0 / 3600.0, 1.5 / 3600.0);
    let xs = integrate(&|_| (qi, qo), x0, 3 * 3600);
    let v_end = xs[3 * 3600][0];
    let v_exact = V0_M3 + (qi - qo) * 3.0 * 3600.0;
    assert!(
        (v_end - v_exact).abs() < 1e-10 * v_exact,
        "{v_end} vs {v_exact}"
    );
    let xs = integrate(&|_| (qi, 0.0), x0, 3 * 3600);
    let s_end = xs[3 * 3600][1] + xs[3 * 3600][2];
    let s_exact = x0[1] + x0[2] + qi * FEED_A * 3.0 * 3600.0;
    assert!(
        (s_end - s_exact).abs() < 1e-10 * s_exact,
        "{s_end} vs {s_exact}"
    );
}

// ------------------------------------------------------------ generation

/// The true plant and the generated files.
struct Data {
    /// True V (m³), c_A, c_B (mol/m³) at every second.
    truth: Vec<[f64; 3]>,
    clean: PathBuf,
    spike: PathBuf,
    dropout: PathBuf,
    stuck: PathBuf,
    lab: PathBuf,
}

/// `s` seconds after the start as ISO 8601 UTC.
fn iso(s: usize) -> String {
    let (d, r) = (s / 86_400, s % 86_400);
    format!(
        "{}T{:02}:{:02}:{:02}Z",
        DATES[d],
        r / 3600,
        r % 3600 / 60,
        r % 60
    )
}

fn tmp() -> PathBuf {
    Path::new(env!("CARGO_TARGET_TMPDIR")).join("trials")
}

fn data() -> &'static Data {
    static DATA: OnceLock<Data> = OnceLock::new();
    DATA.get_or_init(generate)
}

fn generate() -> Data {
    let started = std::time::Instant::now();
    let sched = Schedule::new();
    let states = integrate(
        &|t| sched.flows(t),
        [V0_M3, CA0 * V0_M3, CB0 * V0_M3],
        SECONDS,
    );
    let truth: Vec<[f64; 3]> = states
        .iter()
        .map(|x| [x[0], x[1] / x[0], x[2] / x[0]])
        .collect();
    let integrated = started.elapsed().as_secs_f64();

    // Meter readings at every second, in the log's units.
    let mut rng = Rng(0x5EED_7A15_0000_0004);
    let area = area_m2();
    let mut rows: Vec<[f64; 4]> = Vec::with_capacity(SECONDS + 1);
    for (s, x) in truth.iter().enumerate() {
        let (q_in, q_out) = sched.flows(s as f64);
        rows.push([
            q_in * 3600.0 * (1.0 + FEED_METER_BIAS) * (1.0 + FLOW_NOISE * rng.normal()),
            q_out * 3600.0 * (1.0 + FLOW_NOISE * rng.normal()),
            TEMP_C + TEMP_NOISE * rng.normal(),
            x[0] / area + LEVEL_NOISE_M * rng.normal(),
        ]);
    }
    let dir = tmp();
    std::fs::create_dir_all(&dir).expect("mkdir trials");
    let write_log = |name: &str,
                     feed: &dyn Fn(usize) -> Option<&'static str>,
                     out: &dyn Fn(usize) -> Option<&'static str>| {
        let mut text = String::with_capacity(60 * (SECONDS + 1));
        text.push_str("time,FI-401,FI-402,TI-401,LI-401\n");
        for (s, r) in rows.iter().enumerate() {
            text.push_str(&iso(s));
            match feed(s) {
                Some(c) => write!(text, ",{c}"),
                None => write!(text, ",{:.5}", r[0]),
            }
            .expect("format");
            match out(s) {
                Some(c) => write!(text, ",{c}"),
                None => write!(text, ",{:.5}", r[1]),
            }
            .expect("format");
            writeln!(text, ",{:.2},{:.4}", r[2], r[3]).expect("format");
        }
        let p = dir.join(name);
        std::fs::write(&p, text).expect("write log");
        p
    };
    let none = |_: usize| None;
    let clean = write_log("clean.csv", &none, &none);
    let spike = write_log(
        "spike.csv",
        &|s| (s == SPIKE_AT_S).then_some(SPIKE_CELL),
        &none,
    );
    let dropout = write_log("dropout.csv", &none, &|s| {
        (DROPOUT_AT_S..DROPOUT_AT_S + DROPOUT_S)
            .contains(&s)
            .then_some(DROPOUT_CELL)
    });
    let stuck = write_log("stuck.csv", &none, &|s| {
        (STUCK_AT_S..STUCK_AT_S + STUCK_S)
            .contains(&s)
            .then_some(STUCK_CELL)
    });

    // Lab: A and B from one grab sample every 4 h, analysed with 2 %
    // noise, the result known 30 to 60 minutes (whole minutes) later.
    let mut lab = String::from("sample_time,species,value,unit,result_time\n");
    for s in (LAB_FIRST_S..SECONDS).step_by(LAB_EVERY_S) {
        let delay = 60 * (30 + (rng.uniform() * 31.0) as usize);
        for (name, c) in [("A", truth[s][1]), ("B", truth[s][2])] {
            let value = c * (1.0 + LAB_NOISE * rng.normal());
            writeln!(
                lab,
                "{},{name},{value:.2},mol/m3,{}",
                iso(s),
                iso(s + delay)
            )
            .expect("format");
        }
    }
    let lab_path = dir.join("lab.csv");
    std::fs::write(&lab_path, lab).expect("write lab");

    // The truth beside the logs, for plots and inspection.
    let mut t = String::from("time,elapsed_s,volume_m3,A_mol_m3,B_mol_m3,in_m3_h,out_m3_h\n");
    for (s, x) in truth.iter().enumerate() {
        let (qi, qo) = sched.flows(s as f64);
        writeln!(
            t,
            "{},{s},{},{},{},{},{}",
            iso(s),
            x[0],
            x[1],
            x[2],
            qi * 3600.0,
            qo * 3600.0
        )
        .expect("format");
    }
    std::fs::write(dir.join("truth.csv"), t).expect("write truth");
    eprintln!(
        "generated 48 h of truth ({integrated:.2} s to integrate) and three logs in {:.2} s: {}",
        started.elapsed().as_secs_f64(),
        dir.display()
    );
    Data {
        truth,
        clean,
        spike,
        dropout,
        stuck,
        lab: lab_path,
    }
}

// ------------------------------------------------------------------- runs

#[derive(Clone, Copy, Debug, PartialEq, Eq)]
enum Trial {
    Clean,
    Spike,
    Dropout,
    Stuck,
}

/// One replay: the process's output and the estimates.
struct Run {
    out: PathBuf,
    output: Output,
    seconds: f64,
    est: Option<Estimates>,
}

/// The columns of estimates.csv the checks use, by header name.
struct Estimates {
    elapsed_h: Vec<f64>,
    holdup: Vec<f64>,
    holdup_sigma: Vec<f64>,
    conc: [Vec<f64>; 2],
    conc_sigma: [Vec<f64>; 2],
    bias: Vec<f64>,
}

fn run(trial: Trial) -> &'static Run {
    static RUNS: [OnceLock<Run>; 4] = [
        OnceLock::new(),
        OnceLock::new(),
        OnceLock::new(),
        OnceLock::new(),
    ];
    let (slot, name) = match trial {
        Trial::Clean => (&RUNS[0], "clean"),
        Trial::Spike => (&RUNS[1], "spike"),
        Trial::Dropout => (&RUNS[2], "dropout"),
        Trial::Stuck => (&RUNS[3], "stuck"),
    };
    slot.get_or_init(|| {
        let d = data();
        let log = match trial {
            Trial::Clean => &d.clean,
            Trial::Spike => &d.spike,
            Trial::Dropout => &d.dropout,
            Trial::Stuck => &d.stuck,
        };
        let out = tmp().join(format!("out-{name}"));
        let _ = std::fs::remove_dir_all(&out);
        let started = std::time::Instant::now();
        // The committed configuration (checked current by `fixtures_are_current`).
        let config = root().join("fixtures/trials/plant.toml");
        let output = Command::new(env!("CARGO_BIN_EXE_holdup"))
            .args(["replay", "--config"])
            .arg(&config)
            .arg("--log")
            .arg(log)
            .arg("--lab")
            .arg(&d.lab)
            .arg("--out")
            .arg(&out)
            // Every tick: the checks follow the estimate second by second.
            .args(["--every", "tick"])
            .arg("--quiet")
            .output()
            .expect("run holdup");
        let seconds = started.elapsed().as_secs_f64();
        let est = output.status.success().then(|| estimates(&out));
        eprintln!(
            "{name}: holdup replay exited {:?} after {seconds:.1} s",
            output.status.code()
        );
        Run {
            out,
            output,
            seconds,
            est,
        }
    })
}

fn estimates(out: &Path) -> Estimates {
    let text = std::fs::read_to_string(out.join("estimates.csv")).expect("estimates.csv");
    let mut lines = text.lines();
    let header: Vec<&str> = lines.next().expect("header").split(',').collect();
    let col = |name: &str| {
        header
            .iter()
            .position(|h| *h == name)
            .unwrap_or_else(|| panic!("no column {name} in {header:?}"))
    };
    let bias_col = header
        .iter()
        .position(|h| h.starts_with("bias_") && !h.ends_with("_sigma"))
        .unwrap_or_else(|| panic!("no bias column in {header:?}"));
    let cols = [
        col("elapsed_h"),
        col("holdup_m3"),
        col("holdup_sigma_m3"),
        col("A_mol_m3"),
        col("A_sigma_mol_m3"),
        col("B_mol_m3"),
        col("B_sigma_mol_m3"),
        bias_col,
    ];
    let mut v: [Vec<f64>; 8] = Default::default();
    for line in lines {
        let fields: Vec<&str> = line.split(',').collect();
        for (c, out) in cols.iter().zip(v.iter_mut()) {
            out.push(
                fields
                    .get(*c)
                    .and_then(|f| f.parse().ok())
                    .unwrap_or(f64::NAN),
            );
        }
    }
    let [elapsed_h, holdup, holdup_sigma, a, a_sigma, b, b_sigma, bias] = v;
    Estimates {
        elapsed_h,
        holdup,
        holdup_sigma,
        conc: [a, b],
        conc_sigma: [a_sigma, b_sigma],
        bias,
    }
}

/// The run's estimates, after checking it exited 0 and wrote one row per
/// second of the log.
fn checked(trial: Trial) -> &'static Estimates {
    let r = run(trial);
    assert!(
        r.output.status.success(),
        "{trial:?}: holdup replay exited {:?}: {}\n{}",
        r.output.status.code(),
        String::from_utf8_lossy(&r.output.stderr),
        String::from_utf8_lossy(&r.output.stdout)
    );
    let e = r.est.as_ref().expect("estimates read");
    assert_eq!(e.holdup.len(), SECONDS + 1, "{trial:?}: one row per tick");
    for (s, h) in e.elapsed_h.iter().enumerate().step_by(3600) {
        assert!(
            (h * 3600.0 - s as f64).abs() < 0.01,
            "{trial:?}: row {s} at {h} h"
        );
    }
    e
}

fn summary(trial: Trial) -> serde_json::Value {
    let p = run(trial).out.join("summary.json");
    serde_json::from_str(&std::fs::read_to_string(p).expect("summary.json")).expect("JSON")
}

// ---------------------------------------------------------------- figures

const NAMES: [&str; 3] = ["holdup", "A", "B"];

/// Estimate and 1σ of quantity `q` (0 holdup, 1 A, 2 B) at every tick.
fn series(e: &Estimates, q: usize) -> (&[f64], &[f64]) {
    match q {
        0 => (&e.holdup, &e.holdup_sigma),
        _ => (&e.conc[q - 1], &e.conc_sigma[q - 1]),
    }
}

/// |a − b| / |b|, infinite when either is not finite (a NaN estimate is
/// as wrong as can be).
fn rel(a: f64, b: f64) -> f64 {
    let r = ((a - b) / b).abs();
    if r.is_finite() {
        r
    } else {
        f64::INFINITY
    }
}

/// Measured figures of one quantity over the ticks `from..` (max relative
/// error and where, the share of `counted` ticks with the truth inside
/// ±3σ, the first tick from which the error stays within `REL_TOL`).
struct Figures {
    max_rel: f64,
    worst_s: usize,
    coverage: f64,
    counted: usize,
    back_s: Option<usize>,
}

fn figures(e: &Estimates, q: usize, from: usize, counted: &dyn Fn(usize) -> bool) -> Figures {
    let truth = &data().truth;
    let (x, sd) = series(e, q);
    let (mut max_rel, mut worst_s, mut inside, mut n) = (0.0f64, from, 0usize, 0usize);
    let mut last_bad = None;
    for s in from..=SECONDS {
        let r = rel(x[s], truth[s][q]);
        if r > max_rel {
            (max_rel, worst_s) = (r, s);
        }
        if r > REL_TOL {
            last_bad = Some(s);
        }
        if counted(s) {
            n += 1;
            // A NaN σ or estimate counts as outside.
            if (x[s] - truth[s][q]).abs() <= 3.0 * sd[s] {
                inside += 1;
            }
        }
    }
    let back_s = match last_bad {
        None => Some(from),
        Some(s) if s < SECONDS => Some(s + 1),
        Some(_) => None,
    };
    Figures {
        max_rel,
        worst_s,
        coverage: inside as f64 / n.max(1) as f64,
        counted: n,
        back_s,
    }
}

fn hms(s: usize) -> String {
    format!("{:02}:{:02}:{:02}", s / 3600, s % 3600 / 60, s % 60)
}

/// A relative error in per cent, in scientific notation when huge.
fn pct(x: f64) -> String {
    if 100.0 * x < 1e4 {
        format!("{:.4}%", 100.0 * x)
    } else {
        format!("{:.3e}%", 100.0 * x)
    }
}

fn table(title: &str, from: usize, rows: &[(&str, &Figures)]) {
    eprintln!(
        "\n{title} (errors against the true plant from {})",
        hms(from)
    );
    eprintln!(
        "  {:<8} {:>12} {:>10} {:>12} {:>10} {:>22}",
        "quantity", "max rel err", "at", "±3σ cover", "of ticks", "within 1 % from"
    );
    for (name, f) in rows {
        eprintln!(
            "  {:<8} {:>12} {:>10} {:>11.3}% {:>10} {:>22}",
            name,
            pct(f.max_rel),
            hms(f.worst_s),
            100.0 * f.coverage,
            f.counted,
            f.back_s.map(hms).unwrap_or_else(|| "never".to_string())
        );
    }
}

/// What the replay's summary says about the run (printed, not checked).
fn print_run(trial: Trial) {
    let r = run(trial);
    let s = summary(trial);
    let e = &s["estimator"];
    eprintln!(
        "{trial:?}: replay {:.1} s; final feed-meter bias {:+.3} % (true {:+.1} %); \
         level fused {} rejected {}, re-seeds {}; lab fused {} rejected {}; \
         kernel flags {}; inputs {}; status {}; closure alarms {}",
        r.seconds,
        100.0 * r.est.as_ref().map_or(f64::NAN, |e| e.bias[SECONDS]),
        100.0 * FEED_METER_BIAS,
        e["level_accepted"],
        e["level_rejected"],
        e["reseeds"],
        e["lab"]["fused"],
        e["lab"]["rejected_by_gate"],
        s["kernel_flags_ticks"],
        s["inputs"],
        s["status_ticks"],
        s["closure"]["alarms"]
    );
}

// ------------------------------------------------------------------ trials

/// The targets missed, reported together so that one run shows every
/// miss with its measured figure.
#[derive(Default)]
struct Misses(Vec<String>);

impl Misses {
    fn check(&mut self, ok: bool, what: impl FnOnce() -> String) {
        if !ok {
            self.0.push(what());
        }
    }

    fn assert_none(self, trial: &str) {
        assert!(
            self.0.is_empty(),
            "{trial}: {} target(s) missed:\n  {}",
            self.0.len(),
            self.0.join("\n  ")
        );
    }
}

#[test]
fn clean_trial_tracks_the_true_plant() {
    let e = checked(Trial::Clean);
    print_run(Trial::Clean);
    let mut misses = Misses::default();
    let figs: Vec<Figures> = (0..3)
        .map(|q| figures(e, q, STARTUP_S, &|_| true))
        .collect();
    let rows: Vec<(&str, &Figures)> = NAMES.iter().copied().zip(figs.iter()).collect();
    table("clean trial", STARTUP_S, &rows);
    let from_start: Vec<Figures> = (0..3).map(|q| figures(e, q, 0, &|_| true)).collect();
    let rows0: Vec<(&str, &Figures)> = NAMES.iter().copied().zip(from_start.iter()).collect();
    table("clean trial, whole run", 0, &rows0);
    for (name, f) in rows {
        // Against the independent RK4 integration of the true plant (above).
        misses.check(f.max_rel <= REL_TOL, || {
            format!(
                "{name}: max relative error {:.4} % at {} after start-up (target 1 %)",
                100.0 * f.max_rel,
                hms(f.worst_s)
            )
        });
        // The truth inside ±3σ: for a Gaussian error 99.73 % (normal
        // distribution table); the issue asks for 99 %.
        misses.check(f.coverage >= COVERAGE, || {
            format!(
                "{name}: truth inside ±3σ at {:.3} % of ticks (target 99 %)",
                100.0 * f.coverage
            )
        });
    }
    misses.assert_none("clean");
}

#[test]
fn spike_leaves_the_estimates_where_they_were() {
    let spike = checked(Trial::Spike);
    let clean = checked(Trial::Clean);
    print_run(Trial::Spike);
    let mut misses = Misses::default();
    // The bad cell is 1e30 m³/s in the log's m³/h (1 h = 3600 s).
    let cell: f64 = SPIKE_CELL.parse().expect("a number");
    assert!((cell / 3600.0 / 1e30 - 1.0).abs() < 1e-12, "{cell}");
    eprintln!(
        "\nspike trial: feed meter reads {SPIKE_CELL} m³/h (1e30 m³/s) at {}; \
         difference from the clean run (tolerance {SPIKE_TOL:e} relative)",
        hms(SPIKE_AT_S)
    );
    eprintln!(
        "  {:<8} {:>14} {:>10} {:>14} {:>22}",
        "quantity", "max rel diff", "at", "ticks over", "within tol from"
    );
    let mut worst = Vec::new();
    for (q, name) in NAMES.iter().enumerate() {
        let (a, _) = series(spike, q);
        let (b, _) = series(clean, q);
        let (mut max, mut at, mut over, mut last_over) = (0.0f64, 0usize, 0usize, None);
        for s in 0..=SECONDS {
            let r = rel(a[s], b[s]);
            if r > max {
                (max, at) = (r, s);
            }
            if r > SPIKE_TOL {
                over += 1;
                last_over = Some(s);
            }
        }
        let back = match last_over {
            None => "always".to_string(),
            Some(s) if s < SECONDS => hms(s + 1),
            Some(_) => "never".to_string(),
        };
        eprintln!(
            "  {:<8} {:>14.3e} {:>10} {:>14} {:>22}",
            name,
            max,
            hms(at),
            over,
            back
        );
        worst.push((name, max, at));
    }
    let after: Vec<Figures> = (0..3)
        .map(|q| figures(spike, q, SPIKE_AT_S, &|s| s >= STARTUP_S))
        .collect();
    let rows: Vec<(&str, &Figures)> = NAMES.iter().copied().zip(after.iter()).collect();
    table("spike trial", SPIKE_AT_S, &rows);
    // The run exits 0 (checked in `checked`), and the estimates match the
    // clean run's, which the clean trial checks against the true plant.
    for (name, max, at) in worst {
        misses.check(max <= SPIKE_TOL, || {
            format!(
                "{name}: the spike moved the estimate by {max:.3e} (relative) at {}",
                hms(at)
            )
        });
    }
    misses.assert_none("spike");
    // The summary reports the one rejected value on FI-401, with its time.
    let feed = input_events(Trial::Spike, "FI-401");
    assert_eq!(feed["flag_ticks"]["out_of_range"], 1, "{feed}");
    assert_eq!(feed["windows"], 1, "{feed}");
    assert_eq!(
        feed["first_windows"][0]["start"],
        format!("{}.000Z", iso(SPIKE_AT_S).trim_end_matches('Z')),
        "{feed}"
    );
}

/// The summary's conditioning events of the input read from `tag`.
fn input_events(trial: Trial, tag: &str) -> serde_json::Value {
    let s = summary(trial);
    s["inputs"]
        .as_array()
        .and_then(|a| {
            a.iter()
                .find(|i| i["input"].as_str().is_some_and(|n| n.starts_with(tag)))
        })
        .cloned()
        .unwrap_or_else(|| panic!("no conditioning events for {tag}: {}", s["inputs"]))
}

/// The meter bias is identified and named, and with the flows corrected by
/// it the balance closes: no closure alarm in the clean run. (The true
/// bias is +3 %, set in the generator above.)
#[test]
fn identified_bias_is_named_not_alarmed() {
    let s = summary(Trial::Clean);
    let m = &s["meters"][0];
    let bias = m["bias"].as_f64().expect("bias");
    let sigma = m["sigma"].as_f64().expect("sigma");
    eprintln!(
        "meter {}: {bias:+.4} ± {sigma:.4}; closure {}",
        m["meter"], s["closure"]
    );
    assert_eq!(m["recalibrate"], true, "{m}");
    assert!((bias - FEED_METER_BIAS).abs() < 3.0 * sigma + 0.002, "{m}");
    assert_eq!(
        s["closure"]["alarms"],
        serde_json::json!([]),
        "{}",
        s["closure"]
    );
    assert!(s["closure"]["windows_evaluated"].as_u64().unwrap_or(0) > 90);
    assert!(
        s["inputs"].as_array().is_some_and(|a| a.is_empty()),
        "{}",
        s["inputs"]
    );
}

/// The recovery checks of a fault of `len` s from `at` s: the errors
/// against the true plant from 15 minutes after its end (within 1 %), and
/// the ±3σ coverage outside the fault window (the fault and the 15 minutes
/// after it) and the start-up (99 %). Prints the tables; returns the misses.
fn recovery_misses(trial: Trial, name: &str, at: usize, len: usize) -> Misses {
    let e = checked(trial);
    print_run(trial);
    let mut misses = Misses::default();
    let end = at + len;
    let fault = at..end + SETTLE_S;
    let outside = |s: usize| s >= STARTUP_S && !fault.contains(&s);
    // Recovery, measured from the end of the fault.
    let figs: Vec<Figures> = (0..3).map(|q| figures(e, q, end, &outside)).collect();
    let rows: Vec<(&str, &Figures)> = NAMES.iter().copied().zip(figs.iter()).collect();
    table(
        &format!("{name} trial, from the end of the fault"),
        end,
        &rows,
    );
    let after: Vec<Figures> = (0..3).map(|q| figures(e, q, fault.end, &outside)).collect();
    let cover: Vec<Figures> = (0..3).map(|q| figures(e, q, 0, &outside)).collect();
    let rows: Vec<(&str, &Figures)> = NAMES.iter().copied().zip(after.iter()).collect();
    table(
        &format!("{name} trial, after the fault window"),
        fault.end,
        &rows,
    );
    eprintln!(
        "  ±3σ coverage outside the fault window {}..{} and the first hour: {}",
        hms(fault.start),
        hms(fault.end),
        NAMES
            .iter()
            .zip(cover.iter())
            .map(|(n, f)| format!("{n} {:.3} % of {}", 100.0 * f.coverage, f.counted))
            .collect::<Vec<_>>()
            .join(", ")
    );
    for ((name, f), c) in NAMES.iter().zip(after.iter()).zip(cover.iter()) {
        // Against the independent RK4 integration of the true plant (above).
        misses.check(f.max_rel <= REL_TOL, || {
            format!(
                "{name}: max relative error {:.4} % at {} after the fault window (target 1 %)",
                100.0 * f.max_rel,
                hms(f.worst_s)
            )
        });
        // ±3σ holds 99.73 % of a Gaussian error (normal distribution
        // table); the issue asks for 99 % of the ticks outside the fault.
        misses.check(c.coverage >= COVERAGE, || {
            format!(
                "{name}: truth inside ±3σ at {:.3} % of ticks outside the fault \
                 window (target 99 %)",
                100.0 * c.coverage
            )
        });
    }
    misses
}

#[test]
fn dropout_recovers_within_fifteen_minutes() {
    // The bad cell is −0.05 m³/s in the log's m³/h (1 h = 3600 s).
    let cell: f64 = DROPOUT_CELL.parse().expect("a number");
    assert!((cell / 3600.0 + 0.05).abs() < 1e-15, "{cell}");
    let misses = recovery_misses(Trial::Dropout, "dropout", DROPOUT_AT_S, DROPOUT_S);
    misses.assert_none("dropout");
    // The summary reports the 600 rejected values on FI-402 as one window.
    let out = input_events(Trial::Dropout, "FI-402");
    assert_eq!(out["flag_ticks"]["out_of_range"], DROPOUT_S as u64, "{out}");
    assert_eq!(out["windows"], 1, "{out}");
}

/// A meter stuck at a valid value (zero) is not caught by the conditioning:
/// the balance loses 10 minutes of outflow, the filter's holdup is off and
/// the gate rejects every level reading that would correct it. The run of
/// rejections is detected, the holdup re-seeded from the level, and the
/// estimates are back within 1 % of the true plant 15 minutes after the
/// fault, with the truth inside ±3σ for 99 % of the ticks outside it.
#[test]
fn stuck_meter_is_recovered_by_reseeding() {
    let misses = recovery_misses(Trial::Stuck, "stuck", STUCK_AT_S, STUCK_S);
    misses.assert_none("stuck");
    let s = summary(Trial::Stuck);
    let reseeds = s["estimator"]["reseeds"].as_u64().unwrap_or(0);
    assert!(
        reseeds >= 1,
        "the lock-out was not detected: {}",
        s["estimator"]
    );
    // Every re-seed falls in the fault window (none on clean data).
    let clean = summary(Trial::Clean);
    assert_eq!(clean["estimator"]["reseeds"], 0, "{}", clean["estimator"]);
}
