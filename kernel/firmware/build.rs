//! Host side of the firmware build.
//!
//! 1. Puts `memory.x` on the linker's path and passes the linker scripts
//!    (`link.x` from cortex-m-rt; `defmt.x` when a defmt logger is on).
//! 2. Computes the expected values the firmware checks itself against, on
//!    the host, and writes them to `$OUT_DIR/expected.rs`:
//!    * the analytic scenario's closed form in `f64`;
//!    * the reference scenario run by the same kernel in `f64`;
//!    * the same run by the kernel in `f32` on the host (for information: the
//!      firmware reports how many ulps it is from it);
//!    * the floating-point work of one tick, counted by running the kernel
//!      on a scalar type that counts its operations;
//!    * for the observed scenario (`src/observed.rs`): the plant in `f64`
//!      with the true flows (its level every 10 min and its NaOH at the lab
//!      draws, which the target needs to make its readings; its NaOH at the
//!      checkpoints, the "truth" the target's estimate is checked against),
//!      the soft sensor replayed on the host in `f32` on the same raw
//!      readings through the same `step` (the target must match its
//!      estimates bit for bit, its counters and its tally of NE107 statuses
//!      and diagnosis rules exactly), and the open-loop sensor (the same
//!      conditioning, no observer) in `f32` fed the same readings (what the
//!      observer must beat).
//!
//! Everything here is deterministic: the same kernel source gives the same
//! file. `cargo build` prints its path with `-vv`; `measure.sh` shows it.

use std::env;
use std::fmt::Write as _;
use std::fs;
use std::path::PathBuf;

use holdup_kernel::diagnostics::{ChiSquareBounds, EXACT_DOF};
use holdup_kernel::reference;

#[path = "src/scenarios.rs"]
#[allow(dead_code)]
mod scenarios;

#[path = "src/observed.rs"]
#[allow(dead_code)]
mod observed;

#[path = "host/flops.rs"]
mod flops;

use observed::*;
use scenarios::*;

fn main() {
    let out = PathBuf::from(env::var_os("OUT_DIR").expect("cargo sets OUT_DIR"));
    fs::write(out.join("memory.x"), include_bytes!("memory.x")).expect("write memory.x");
    println!("cargo:rustc-link-search={}", out.display());
    println!("cargo:rerun-if-changed=memory.x");
    println!("cargo:rerun-if-changed=build.rs");
    println!("cargo:rerun-if-changed=src/scenarios.rs");
    println!("cargo:rerun-if-changed=src/observed.rs");
    println!("cargo:rerun-if-changed=host/flops.rs");
    let target = env::var("TARGET").unwrap_or_default();
    if target.starts_with("thumb") {
        println!("cargo:rustc-link-arg-bins=-Tlink.x");
        if env::var_os("CARGO_FEATURE_DEFMT").is_some() {
            println!("cargo:rustc-link-arg-bins=-Tdefmt.x");
        }
    }
    fs::write(out.join("expected.rs"), expected()).expect("write expected.rs");
}

/// Closed form of the analytic scenario at `t` seconds, each species: the
/// component balance `V dc/dt = q(c_f − c) − kVc` at constant `V`, solved
/// with an integrating factor (`k = 0` for the inert species 1 and 2).
fn exact_closed_form(t: f64) -> [f64; 3] {
    let d = EXACT_FLOW / EXACT_VOLUME;
    let k = [EXACT_K, 0.0, 0.0];
    std::array::from_fn(|i| {
        let lambda = d + k[i];
        let c_ss = EXACT_FEED[i] * d / lambda;
        c_ss + (EXACT_C0[i] - c_ss) * (-lambda * t).exp()
    })
}

/// `[V, c₀, c₁, c₂]` of `v` every `every` ticks over `ticks` ticks of the
/// reference inputs.
fn run_points<S: holdup_kernel::Scalar>(
    mut v: reference::ReferenceVessel<S>,
    ticks: u32,
    every: u32,
) -> Vec<[f64; 4]> {
    let mut points = Vec::new();
    for n in 1..=ticks {
        let u = reference::inputs_at::<S>(v.time_ms());
        v.step(&u);
        if n % every == 0 {
            let c = v.concentrations();
            points.push([
                v.volume().to_f64(),
                c[0].to_f64(),
                c[1].to_f64(),
                c[2].to_f64(),
            ]);
        }
    }
    points
}

/// The reference scenario in scalar `S`: `[V, c₀, c₁, c₂]` at every checkpoint.
fn reference_run<S: holdup_kernel::Scalar>() -> Vec<[f64; 4]> {
    run_points(
        reference::vessel::<S>().expect("reference vessel"),
        REF_TICKS,
        REF_EVERY,
    )
}

/// The stiff scenario in scalar `S`: `[V, c₀, c₁, c₂]` at every checkpoint.
fn stiff_run<S: holdup_kernel::Scalar>() -> Vec<[f64; 4]> {
    run_points(
        stiff_vessel::<S>().expect("stiff vessel"),
        STIFF_TICKS,
        STIFF_EVERY,
    )
}

/// The observed scenario's plant: the reference vessel in `f64` with the
/// true flows (no meter bias, no noise).
struct Plant {
    /// Level, m, at `0, LEVEL_KNOT_S, 2·LEVEL_KNOT_S, …` s.
    level_knots: Vec<f32>,
    /// Lab results (plant NaOH at the draw, rounded to f32, plus lab noise).
    lab_values: Vec<f32>,
    /// Plant NaOH at the checkpoints, mol/m³.
    naoh: Vec<f64>,
}

fn plant() -> Plant {
    let mut v = reference::vessel::<f64>().expect("reference vessel");
    let mut lab_noise = Noise::new(LAB_SEED);
    let mut p = Plant {
        level_knots: vec![v.level() as f32],
        lab_values: Vec::new(),
        naoh: Vec::new(),
    };
    for n in 0..OBS_TICKS {
        let u = reference::inputs_at::<f64>(v.time_ms());
        v.step(&u);
        // The state at `s` s, after tick `n`.
        let s = n + 1;
        if s % LEVEL_KNOT_S == 0 {
            p.level_knots.push(v.level() as f32);
        }
        if lab_draw_at(s).is_some() {
            let c = v.concentrations()[LAB_SPECIES] as f32;
            p.lab_values.push(c + LAB_SIGMA * lab_noise.normal());
        }
        if s % OBS_EVERY == 0 {
            p.naoh.push(v.concentrations()[LAB_SPECIES]);
        }
    }
    assert_eq!(p.level_knots.len(), LEVEL_KNOTS);
    assert_eq!(p.lab_values.len(), LAB_DRAWS);
    assert_eq!(p.naoh.len(), OBS_POINTS);
    p
}

/// The NIS bounds of the scenario's sensor, computed on the host in `f64`
/// and rounded to `f32` (`ChiSquareBounds::new`): written into
/// `expected.rs` for the target, which takes them as they are.
fn nis_bounds() -> ChiSquareBounds<f32> {
    ChiSquareBounds::new(NIS_PROBABILITY).expect("NIS probability")
}

/// The sensor on the host in `f32` on the scenario's readings, through the
/// firmware's own `step`: the estimates at every checkpoint, the final
/// counters and the tally of its reports.
fn sensor_host(p: &Plant) -> (Vec<[f32; 5]>, [u32; COUNTERS], Tally) {
    let mut t = Tracked::<f32>::new(nis_bounds()).expect("sensor");
    let mut inst = Instruments::new(&p.level_knots, &p.lab_values);
    let mut points = Vec::new();
    let mut tally = Tally::default();
    for n in 0..OBS_TICKS {
        let r = inst.readings(n);
        let report = step(&mut t, &r);
        tally.add(n, &report);
        if (n + 1) % OBS_EVERY == 0 {
            points.push(state5(&t.sensor));
        }
    }
    (points, counters(&t), tally)
}

/// The open-loop sensor in `f32` (the reference vessel with the same
/// conditioning and closure test, no observer) fed the same (biased,
/// noisy) readings: its NaOH at every checkpoint.
fn open_loop(p: &Plant) -> Vec<f32> {
    let mut s = RefSensor::<f32>::open_loop_with_bounds(
        reference::vessel::<f32>().expect("reference vessel"),
        sensor_spec(),
        nis_bounds(),
    )
    .expect("open-loop sensor");
    let mut inst = Instruments::new(&p.level_knots, &p.lab_values);
    let mut points = Vec::new();
    for n in 0..OBS_TICKS {
        let r = inst.readings(n);
        s.tick(r.now, &r.raw);
        if (n + 1) % OBS_EVERY == 0 {
            points.push(s.estimate().concentrations[LAB_SPECIES]);
        }
    }
    points
}

fn f32_list(name: &str, doc: &str, len: &str, xs: impl Iterator<Item = f64>) -> String {
    let mut s = format!("/// {doc}\npub const {name}: [f32; {len}] = [\n");
    for x in xs {
        let _ = writeln!(s, "    {},", f32_lit(x));
    }
    s.push_str("];\n\n");
    s
}

fn observed_expected(s: &mut String) -> Plant {
    let p = plant();
    let (_, z, lower, upper) = nis_bounds().quantiles();
    let _ = writeln!(
        s,
        "/// Observed scenario: the NIS bounds' normal quantile for NIS_PROBABILITY \
         (`ChiSquareBounds::new` on the host).\npub const NIS_Z: f32 = {};\n",
        f32_lit(f64::from(z))
    );
    assert_eq!(EXACT_DOF, 32);
    s.push_str(&f32_list(
        "NIS_LOWER",
        "Observed scenario: the NIS lower chi-square bounds for 1 … 32 degrees of freedom.",
        "32",
        lower.iter().map(|&x| f64::from(x)),
    ));
    s.push_str(&f32_list(
        "NIS_UPPER",
        "Observed scenario: the NIS upper chi-square bounds for 1 … 32 degrees of freedom.",
        "32",
        upper.iter().map(|&x| f64::from(x)),
    ));
    let (host, counts, tally) = sensor_host(&p);
    let open = open_loop(&p);
    s.push_str(&f32_list(
        "PLANT_LEVEL",
        "Observed scenario: the plant's level (m) every LEVEL_KNOT_S s, from t = 0 \
         (host f64, rounded to f32).",
        "LEVEL_KNOTS",
        p.level_knots.iter().map(|&x| f64::from(x)),
    ));
    s.push_str(&f32_list(
        "LAB_VALUES",
        "Observed scenario: the lab results in draw order (plant NaOH at the draw \
         plus lab noise), mol/m³.",
        "LAB_DRAWS",
        p.lab_values.iter().map(|&x| f64::from(x)),
    ));
    s.push_str(&f32_list(
        "PLANT_NAOH",
        "Observed scenario: the plant's NaOH (mol/m³) at every checkpoint (host f64, \
         true flows), rounded to f32.",
        "OBS_POINTS",
        p.naoh.iter().copied(),
    ));
    s.push_str(&f32_list(
        "OPEN_LOOP_NAOH",
        "Observed scenario: the open-loop kernel's NaOH (mol/m³) at every checkpoint, \
         host f32, fed the same biased readings.",
        "OBS_POINTS",
        open.iter().map(|&x| f64::from(x)),
    ));
    let _ = writeln!(
        s,
        "/// Observed scenario: the host f32 sensor's `[V, c₀, c₁, c₂, β]` at every \
         checkpoint (the target must match it).\npub const OBS_HOST_F32: [[f32; 5]; OBS_POINTS] = ["
    );
    for x in &host {
        let _ = writeln!(
            s,
            "    [{}, {}, {}, {}, {}],",
            f32_lit(f64::from(x[0])),
            f32_lit(f64::from(x[1])),
            f32_lit(f64::from(x[2])),
            f32_lit(f64::from(x[3])),
            f32_lit(f64::from(x[4]))
        );
    }
    s.push_str("];\n\n");
    let _ = writeln!(
        s,
        "/// Observed scenario: the host sensor's counters at the end (see \
         `observed::counters`).\npub const OBS_HOST_COUNTERS: [u32; COUNTERS] = {counts:?};\n"
    );
    let _ = writeln!(
        s,
        "/// Observed scenario: the host sensor's reports tallied over the shift (see \
         `observed::Tally`).\npub const OBS_HOST_TALLY: Tally = {tally:?};\n"
    );
    p
}

fn f32_lit(x: f64) -> String {
    // `{:?}` of an f32 is its shortest round-trip form: parsing it back gives
    // the same bits.
    let s = format!("{:?}", x as f32);
    if s.contains('.') || s.contains('e') || s.contains("inf") || s.contains("NaN") {
        s
    } else {
        format!("{s}.0")
    }
}

fn rows(name: &str, len: &str, doc: &str, points: &[[f64; 4]]) -> String {
    let mut s = format!("/// {doc}\npub const {name}: [[f32; 4]; {len}] = [\n");
    for p in points {
        let _ = writeln!(
            s,
            "    [{}, {}, {}, {}],",
            f32_lit(p[0]),
            f32_lit(p[1]),
            f32_lit(p[2]),
            f32_lit(p[3])
        );
    }
    s.push_str("];\n");
    s
}

fn expected() -> String {
    let mut s = String::from(
        "// Generated by kernel/firmware/build.rs on the host at build time; do not edit.\n\n",
    );
    s.push_str(
        "/// Analytic scenario: closed-form concentration of each species \
         (mol/m³) at ticks EXACT_EVERY, 2·EXACT_EVERY, …, computed in f64 and \
         rounded to f32.\n",
    );
    s.push_str("pub const EXACT_EXPECTED: [[f32; 3]; EXACT_POINTS] = [\n");
    for j in 1..=EXACT_POINTS as u32 {
        let c = exact_closed_form(f64::from(j * EXACT_EVERY));
        let _ = writeln!(
            s,
            "    [{}, {}, {}],",
            f32_lit(c[0]),
            f32_lit(c[1]),
            f32_lit(c[2])
        );
    }
    s.push_str("];\n\n");

    let f64_points = reference_run::<f64>();
    let f32_points = reference_run::<f32>();
    assert_eq!(f64_points.len(), REF_POINTS);
    s.push_str(&rows(
        "REF_EXPECTED",
        "REF_POINTS",
        "Reference scenario: `[V (m³), c₀, c₁, c₂ (mol/m³)]` every REF_EVERY \
         ticks, the host kernel in f64, rounded to f32.",
        &f64_points,
    ));
    s.push('\n');
    s.push_str(&rows(
        "REF_HOST_F32",
        "REF_POINTS",
        "Reference scenario: the same run by the host kernel in f32 (information only).",
        &f32_points,
    ));
    s.push('\n');

    let f64_points = stiff_run::<f64>();
    let f32_points = stiff_run::<f32>();
    assert_eq!(f64_points.len(), STIFF_POINTS);
    s.push_str(&rows(
        "STIFF_EXPECTED",
        "STIFF_POINTS",
        "Stiff scenario: `[V (m³), c₀, c₁, c₂ (mol/m³)]` every STIFF_EVERY \
         ticks, the host kernel in f64, rounded to f32.",
        &f64_points,
    ));
    s.push('\n');
    s.push_str(&rows(
        "STIFF_HOST_F32",
        "STIFF_POINTS",
        "Stiff scenario: the same run by the host kernel in f32 (the target must match it bit for bit).",
        &f32_points,
    ));
    s.push('\n');

    let p = observed_expected(&mut s);

    let exact = flops::exact_tick();
    let mprk = flops::reference_tick();
    s.push_str(&exact.to_rust("FLOPS_EXACT", "the analytic scenario's tick (exact step)"));
    s.push_str(&mprk.to_rust("FLOPS_REFERENCE", "the reference tick (whole MPRK22)"));
    let obs = flops::sensor_tick(&p.level_knots, &p.lab_values);
    s.push_str(&obs.to_rust(
        "FLOPS_SENSOR",
        "the sensor's pipeline tick (lab events, conditioning, level update, closure, \
         NIS, predict, diagnosis)",
    ));
    s
}
