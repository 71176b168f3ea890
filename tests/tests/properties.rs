//! Stability properties of the vessel tick under arbitrary bounded inputs
//! (proptest).
//!
//! Outside sources of the properties checked:
//! * positivity, finiteness and the capacity bound: the balance of a real
//!   tank (amounts and holdup are non-negative, the holdup cannot exceed the
//!   vessel), and the kernel's own contract (kernel/src/vessel.rs, status.rs);
//! * the bound on a non-reacting species: with no reaction, the concentration
//!   of a species is a running mixture of the initial content and the feeds,
//!   so it stays between their minimum and maximum (maximum principle of the
//!   linear mixing balance `dc/dt = Σ q_in,s (c_in,s − c)/V`, derived from the
//!   component and volume balances; e.g. Levenspiel, *Chemical Reaction
//!   Engineering*, ch. 11 on tracer response — from memory);
//! * conservation: every linear invariant `w` with `w·ν_j = 0` of the
//!   stoichiometry is constant in a closed vessel (Aris, *Elementary Chemical
//!   Reactor Analysis*, ch. 1 — from memory), and MPRK22 keeps them to
//!   rounding (Burchard, Deleersnijder & Meister, Appl. Numer. Math. 47
//!   (2003) — from memory);
//! * explicit Euler's one-step factor `1 − λh` on `y' = −λy` (any
//!   numerical-analysis text; hand arithmetic): negative for `λh > 1`.
//!
//! Two kernel defects were found by these properties and fixed; each keeps a
//! deterministic regression test below the property that found it:
//! * the inert-species bound: the unsplit MPRK22 treated the feed as an
//!   explicit source and the outflow as a Patankar-weighted sink, so one tick
//!   from `c = 0` gave `c_f·x/(1 + x/2)` with `x = h·q/V`, above the feed for
//!   `x > 2`, and a tank held at the feed concentration drifted while
//!   filling. Fixed by splitting transport (exact) from reactions (MPRK22).
//! * conservation at large k·h: the stage solve was written for the
//!   increment, whose right-hand side at large k·h is `~(k·h)²/2` times the
//!   amounts, so the product's increment lost `ε·(k·h)²/2` relative (f64
//!   3.5e-8 at k·h = 2.6e4; f32 lost all of the product at k·h = 1e4). Fixed
//!   by solving stiff stages for the new amounts directly.

use holdup_kernel::{
    Geometry, Inputs, Kinetics, Method, MethodUsed, Outlet, ReactionSpec, Scalar, StatusFlags,
    Vessel,
};
use holdup_sim::verify::{cylinder, reaction, vessel};
use proptest::prelude::*;
use proptest::test_runner::Config as ProptestConfig;

/// Species: A, B, C react; D is inert.
const N: usize = 4;
const R: usize = 2;
const O: usize = 2;
const I: usize = 2;
const INERT: usize = 3;
const DIAMETER: f64 = 1.0;
const HEIGHT: f64 = 2.0;

fn config(cases: u32) -> ProptestConfig {
    ProptestConfig {
        // Tests may only write their own sources: no regression files.
        failure_persistence: None,
        ..ProptestConfig::with_cases(cases)
    }
}

fn geometry<S: Scalar>() -> Geometry<S> {
    cylinder(DIAMETER, HEIGHT)
}

fn capacity<S: Scalar>() -> f64 {
    geometry::<S>().max_volume().to_f64()
}

/// One vessel configuration.
#[derive(Clone, Debug)]
struct Setup {
    tick_ms: u32,
    method: Method,
    /// Initial holdup as a fraction of the capacity.
    fill: f64,
    conc: [f64; N],
    /// Second outlet: measured (None) or an orifice `(area m², elevation m)`.
    orifice: Option<(f64, f64)>,
    /// Rate constants: A + B → C forward, C ⇌ A forward and reverse.
    k: [f64; 3],
    /// Activation energies, J/mol.
    ea: [f64; 3],
    /// Order of A in A + B → C.
    order_a: f64,
}

/// A bad value injected into one input of one tick.
#[derive(Clone, Copy, Debug)]
enum Bad {
    Nothing,
    InletFlow(usize, f64),
    Feed(usize, usize, f64),
    /// Outlet 0 (always measured).
    OutletFlow(f64),
    Temperature(f64),
}

/// Inputs of one tick.
#[derive(Clone, Debug)]
struct Tick {
    q_in: [f64; I],
    feed: [[f64; N]; I],
    q_out: [f64; O],
    temperature: f64,
    bad: Bad,
}

fn flow() -> impl Strategy<Value = f64> {
    prop_oneof![
        1 => Just(0.0),
        1 => Just(0.05),
        4 => 0.0..0.05f64,
    ]
}

fn log_uniform(lo: f64, hi: f64) -> impl Strategy<Value = f64> {
    (lo.log10()..hi.log10()).prop_map(|e| 10f64.powf(e))
}

fn setup() -> impl Strategy<Value = Setup> {
    (
        100u32..=60_000,
        prop_oneof![Just(Method::Auto), Just(Method::Mprk22)],
        prop_oneof![Just(0.0), Just(1e-7), Just(1.0), 0.0..1.0f64],
        prop::array::uniform4(0.0..1000.0f64),
        prop::option::of((1e-3..1e-2f64, 0.0..1.0f64)),
        prop::array::uniform3(log_uniform(1e-8, 1e3)),
        prop::array::uniform3(0.0..60e3f64),
        prop_oneof![Just(1.0), Just(2.0), 0.5..3.0f64],
    )
        .prop_map(
            |(tick_ms, method, fill, conc, orifice, k, ea, order_a)| Setup {
                tick_ms,
                method,
                fill,
                conc,
                orifice,
                k,
                ea,
                order_a,
            },
        )
}

fn bad_value() -> impl Strategy<Value = f64> {
    prop_oneof![
        Just(f64::NAN),
        Just(f64::INFINITY),
        Just(f64::NEG_INFINITY),
        -1e3..-1e-12f64,
    ]
}

fn bad() -> impl Strategy<Value = Bad> {
    prop_oneof![
        12 => Just(Bad::Nothing),
        1 => (0..I, bad_value()).prop_map(|(i, x)| Bad::InletFlow(i, x)),
        1 => (0..I, 0..N, bad_value()).prop_map(|(i, j, x)| Bad::Feed(i, j, x)),
        1 => bad_value().prop_map(Bad::OutletFlow),
        1 => prop_oneof![bad_value(), Just(0.0)].prop_map(Bad::Temperature),
    ]
}

fn tick(with_bad: bool) -> impl Strategy<Value = Tick> {
    let bad = if with_bad {
        bad().boxed()
    } else {
        Just(Bad::Nothing).boxed()
    };
    (
        prop::array::uniform2(flow()),
        prop::array::uniform2(prop::array::uniform4(prop_oneof![
            1 => Just(0.0),
            4 => 0.0..1000.0f64,
        ])),
        prop::array::uniform2(flow()),
        273.0..373.0f64,
        bad,
    )
        .prop_map(|(q_in, feed, q_out, temperature, bad)| Tick {
            q_in,
            feed,
            q_out,
            temperature,
            bad,
        })
}

fn build<S: Scalar>(s: &Setup) -> Vessel<S, N, R, O> {
    let arrhenius = |k: f64, ea: f64, orders: [f64; N]| Kinetics {
        rate_constant: S::of(k),
        activation_energy: S::of(ea),
        orders: orders.map(S::of),
    };
    // k[0] is the pseudo-first-order constant at 1000 mol/m³ of A and B,
    // so that k·h spans the same 1e-8…6e7 range for every order.
    let k0 = s.k[0] / 1000f64.powf(s.order_a);
    let mut r0 = reaction::<S, N>([-1.0, -1.0, 1.0, 0.0], [s.order_a, 1.0, 0.0, 0.0], k0);
    r0.forward = arrhenius(k0, s.ea[0], [s.order_a, 1.0, 0.0, 0.0]);
    let r1 = ReactionSpec {
        stoichiometry: [1.0, 0.0, -1.0, 0.0].map(S::of),
        forward: arrhenius(s.k[1], s.ea[1], [0.0, 0.0, 1.0, 0.0]),
        reverse: Some(arrhenius(s.k[2], s.ea[2], [1.0, 0.0, 0.0, 0.0])),
        reference_temperature: S::of(298.15),
    };
    let second = match s.orifice {
        None => Outlet::Measured,
        Some((area, elevation)) => Outlet::Orifice {
            discharge_coefficient: S::of(0.61),
            area: S::of(area),
            elevation: S::of(elevation),
        },
    };
    vessel(
        geometry(),
        [Outlet::Measured, second],
        &[r0, r1],
        s.tick_ms,
        s.method,
        s.fill * capacity::<S>(),
        s.conc,
    )
}

/// The kernel inputs of a tick, with its bad value injected, and the flags
/// the bad value must raise.
fn inputs<S: Scalar>(t: &Tick) -> (Inputs<S, N, I, O>, StatusFlags) {
    let mut q_in = t.q_in;
    let mut feed = t.feed;
    let mut q_out = t.q_out;
    let mut temperature = t.temperature;
    let flag_of = |x: f64| {
        if x.is_finite() {
            StatusFlags::INPUT_NEGATIVE
        } else {
            StatusFlags::INPUT_NOT_FINITE
        }
    };
    let mut expected = StatusFlags::NONE;
    match t.bad {
        Bad::Nothing => {}
        Bad::InletFlow(i, x) => {
            q_in[i] = x;
            expected = flag_of(x);
        }
        Bad::Feed(i, j, x) => {
            feed[i][j] = x;
            // A feed composition is read only while its inlet flows
            // (kernel/src/vessel.rs, step 1).
            if q_in[i] > 0.0 {
                expected = flag_of(x);
            }
        }
        Bad::OutletFlow(x) => {
            q_out[0] = x;
            expected = flag_of(x);
        }
        Bad::Temperature(x) => {
            temperature = x;
            expected = flag_of(x);
        }
    }
    (
        Inputs {
            inlet_flows: q_in.map(S::of),
            feed: feed.map(|f| f.map(S::of)),
            outlet_flows: q_out.map(S::of),
            temperature: S::of(temperature),
        },
        expected,
    )
}

/// Property 1 for one scalar type: every tick leaves a physical state.
fn stays_physical<S: Scalar>(s: &Setup, ticks: &[Tick]) -> Result<(), TestCaseError> {
    let mut ves = build::<S>(s);
    let cap = capacity::<S>();
    let h = f64::from(s.tick_ms) * 1e-3;
    let good = |x: S| {
        let x = x.to_f64();
        if x.is_finite() && x > 0.0 {
            x
        } else {
            0.0
        }
    };
    for (n, t) in ticks.iter().enumerate() {
        let (u, expected) = inputs::<S>(t);
        // The holdup balance by hand (measured outlets): V₁ = V₀ + h·(q_in − q_out).
        let v0 = ves.volume().to_f64();
        let q_in: f64 = u.inlet_flows.iter().map(|&q| good(q)).sum();
        let q_meas = good(u.outlet_flows[0])
            + if s.orifice.is_none() {
                good(u.outlet_flows[1])
            } else {
                0.0
            };
        let available = v0 + h * q_in;
        let rep = ves.step(&u);
        let v = ves.volume().to_f64();
        // Decisions more than 1e-5 relative away from their threshold.
        let margin = 1e-5 * (available + h * q_meas) + 1e-12;
        if h * q_meas > available + margin {
            prop_assert!(
                rep.flags.contains(StatusFlags::OUTLET_LIMITED),
                "tick {n}: over-draw not flagged"
            );
        } else if h * q_meas < available - margin {
            prop_assert!(
                !rep.flags.contains(StatusFlags::OUTLET_LIMITED),
                "tick {n}: spurious OUTLET_LIMITED"
            );
        }
        if s.orifice.is_none() {
            let v1 = available - h * q_meas;
            if v1 > cap + margin {
                prop_assert!(
                    rep.flags.contains(StatusFlags::OVERFLOW),
                    "tick {n}: overflow not flagged"
                );
                prop_assert_eq!(v, cap);
            } else if v1 < cap - margin {
                prop_assert!(
                    !rep.flags.contains(StatusFlags::OVERFLOW),
                    "tick {n}: spurious OVERFLOW"
                );
            }
            if v1 < -margin {
                prop_assert!(
                    rep.flags.contains(StatusFlags::EMPTY),
                    "tick {n}: emptying not flagged"
                );
                prop_assert_eq!(v, 0.0);
            }
        }
        prop_assert!(v.is_finite() && v >= 0.0, "tick {n}: holdup {v}");
        prop_assert!(v <= cap, "tick {n}: holdup {v} above capacity {cap}");
        for (i, a) in ves.amounts().iter().enumerate() {
            let a = a.to_f64();
            prop_assert!(a.is_finite() && a >= 0.0, "tick {n}: amount {i} = {a}");
        }
        for (i, c) in ves.concentrations().iter().enumerate() {
            let c = c.to_f64();
            prop_assert!(
                c.is_finite() && c >= 0.0,
                "tick {n}: concentration {i} = {c}"
            );
        }
        prop_assert!(
            rep.flags.contains(expected),
            "tick {n}: flags {:?} lack {:?} for {:?}",
            rep.flags,
            expected,
            t.bad
        );
        prop_assert!(
            !rep.flags.contains(StatusFlags::NUMERIC_FAULT),
            "tick {n}: numeric fault"
        );
        prop_assert!(rep.outflow_volume.to_f64() >= 0.0);
    }
    Ok(())
}

proptest! {
    #![proptest_config(config(128))]

    /// 1. Amounts and holdup never negative or NaN, holdup ≤ capacity,
    /// concentrations finite; bad inputs, over-draw, overflow and emptying
    /// raise their flags (and nothing raises NUMERIC_FAULT).
    #[test]
    fn state_stays_physical_f64(s in setup(), ticks in prop::collection::vec(tick(true), 20..=50)) {
        stays_physical::<f64>(&s, &ticks)?;
    }

    #[test]
    fn state_stays_physical_f32(s in setup(), ticks in prop::collection::vec(tick(true), 20..=50)) {
        stays_physical::<f32>(&s, &ticks)?;
    }
}

/// Property 2: the inert species D stays within the range of its initial
/// concentration and of every feed concentration that entered so far
/// (relative rounding tolerance 1e-9, f64). Returns the first violation.
fn inert_stays_bounded(s: &Setup, ticks: &[Tick]) -> Result<(), TestCaseError> {
    let mut ves = build::<f64>(s);
    let (mut lo, mut hi) = (s.conc[INERT], s.conc[INERT]);
    for (n, t) in ticks.iter().enumerate() {
        for (q, f) in t.q_in.iter().zip(t.feed.iter()) {
            if *q > 0.0 {
                lo = lo.min(f[INERT]);
                hi = hi.max(f[INERT]);
            }
        }
        let (u, _) = inputs::<f64>(t);
        let rep = ves.step(&u);
        let c = ves.concentrations()[INERT];
        prop_assert!(
            c >= lo * (1.0 - 1e-9) && c <= hi * (1.0 + 1e-9),
            "tick {n}: inert concentration {c} outside [{lo}, {hi}] (flags {:?}, method {:?}, holdup {})",
            rep.flags,
            rep.method,
            ves.volume()
        );
    }
    Ok(())
}

/// Constant-volume ticks (inflow = measured outflow, no orifice) whose
/// dilution `h·q/V` stays at or below 2.
fn constant_volume_ticks(s: &Setup) -> impl Strategy<Value = Vec<Tick>> {
    let v = s.fill * capacity::<f64>();
    let h = f64::from(s.tick_ms) * 1e-3;
    prop::collection::vec((tick(false), 0.0..=2.0f64), 20..=50).prop_map(move |ts| {
        ts.into_iter()
            .map(|(mut t, x)| {
                let q = (x * v / h).min(0.05);
                t.q_in = [q, 0.0];
                t.q_out = [q, 0.0];
                t
            })
            .collect()
    })
}

fn constant_volume_setup() -> impl Strategy<Value = Setup> {
    (setup(), 0.05..=1.0f64).prop_map(|(mut s, fill)| {
        s.fill = fill;
        s.orifice = None;
        s
    })
}

proptest! {
    #![proptest_config(config(128))]

    /// 2a. At constant volume with at most two vessel volumes through per
    /// tick, the inert species stays within its bounds while A, B, C react.
    #[test]
    fn inert_species_bounded_at_constant_volume(
        (s, ticks) in constant_volume_setup().prop_flat_map(|s| {
            let t = constant_volume_ticks(&s);
            (Just(s), t)
        })
    ) {
        inert_stays_bounded(&s, &ticks)?;
    }

    /// 2b. The same bound under arbitrary inputs: filling, draining,
    /// over-draw, overflow, orifice outflow, any tick.
    #[test]
    fn inert_species_bounded_under_any_inputs(
        s in setup(),
        ticks in prop::collection::vec(tick(false), 20..=50),
    ) {
        inert_stays_bounded(&s, &ticks)?;
    }
}

/// Regression test of the inert-species defect, case 1: a tracer-free tank
/// flushed 3 times per tick with feed at 100 mol/m³ (A → B reacting;
/// MPRK22 asked for, since `Auto` steps this first-order network exactly). The tracer cannot
/// exceed its only source, 100 mol/m³ (maximum principle, see the module
/// documentation); the exact value after one tick is `100·(1 − e^{−3})`
/// = 95.02 mol/m³ (constant-volume mixing, Levenspiel ch. 11, from memory).
#[test]
fn inert_tracer_never_exceeds_its_feed_concentration() {
    let (v, q, h_ms) = (0.2, 0.01, 60_000);
    let mut ves: Vessel<f64, 3, 1, 1> = vessel(
        cylinder(1.0, 2.0),
        [Outlet::Measured],
        &[reaction([-1.0, 1.0, 0.0], [1.0, 0.0, 0.0], 1e-3)],
        h_ms,
        Method::Mprk22,
        v,
        [10.0, 0.0, 0.0],
    );
    let u = Inputs {
        inlet_flows: [q],
        feed: [[0.0, 0.0, 100.0]],
        outlet_flows: [q],
        temperature: 298.15,
    };
    let rep = ves.step(&u);
    assert_eq!(rep.method, MethodUsed::Mprk22);
    let c = ves.concentrations()[2];
    let exact = 100.0 * (1.0 - (-3.0f64).exp());
    assert!(
        c <= 100.0 * (1.0 + 1e-9),
        "tracer at {c} mol/m³ after one tick, above its feed 100 (exact {exact:.4})"
    );
}

/// Regression test of the inert-species defect, case 2: a tank holding the
/// tracer at its feed concentration (100 mol/m³) is filled with more of the
/// same feed (q_in = 2·q_out). Every drop in the tank is at 100 mol/m³, so
/// the concentration stays 100 exactly (the mixing balance has `dc/dt = 0`).
#[test]
fn inert_tracer_at_feed_concentration_stays_there_while_filling() {
    let mut ves: Vessel<f64, 3, 1, 1> = vessel(
        cylinder(1.0, 2.0),
        [Outlet::Measured],
        &[reaction([-1.0, 1.0, 0.0], [1.0, 0.0, 0.0], 1e-3)],
        10_000,
        Method::Mprk22,
        0.2,
        [10.0, 0.0, 100.0],
    );
    let u = Inputs {
        inlet_flows: [0.02],
        feed: [[0.0, 0.0, 100.0]],
        outlet_flows: [0.01],
        temperature: 298.15,
    };
    let rep = ves.step(&u);
    assert_eq!(rep.method, MethodUsed::Mprk22);
    let c = ves.concentrations()[2];
    assert!(
        (c - 100.0).abs() <= 1e-9 * 100.0,
        "tracer at {c} mol/m³ after filling 0.2 → 0.3 m³ with feed at 100"
    );
}

/// A closed two-species vessel for the conservation property.
#[derive(Clone, Debug)]
struct Closed {
    tick_ms: u32,
    method: Method,
    fill: f64,
    conc: [f64; 2],
    k: f64,
    k_rev: f64,
    ea: f64,
    temperatures: Vec<f64>,
}

fn closed() -> impl Strategy<Value = Closed> {
    (
        100u32..=60_000,
        prop_oneof![Just(Method::Auto), Just(Method::Mprk22)],
        1e-4..=1.0f64,
        prop::array::uniform2(prop_oneof![1 => Just(0.0), 4 => 0.0..1000.0f64]),
        log_uniform(1e-8, 1e3),
        log_uniform(1e-8, 1e3),
        0.0..60e3f64,
        prop::collection::vec(273.0..373.0f64, 20..=40),
    )
        .prop_map(
            |(tick_ms, method, fill, conc, k, k_rev, ea, temperatures)| Closed {
                tick_ms,
                method,
                fill,
                conc,
                k,
                k_rev,
                ea,
                temperatures,
            },
        )
}

/// Property 3: the invariant `w·n` of a closed vessel balances to 1e-9
/// relative over every tick.
fn conserves(c: &Closed, spec: ReactionSpec<f64, 2>, w: [f64; 2]) -> Result<(), TestCaseError> {
    let mut ves: Vessel<f64, 2, 1, 1> = vessel(
        geometry(),
        [Outlet::Measured],
        &[spec],
        c.tick_ms,
        c.method,
        c.fill * capacity::<f64>(),
        c.conc,
    );
    let invariant = |n: [f64; 2]| w[0] * n[0] + w[1] * n[1];
    for (n, &t) in c.temperatures.iter().enumerate() {
        let before = invariant(ves.amounts());
        let rep = ves.step(&Inputs::<f64, 2, 1, 1>::quiescent(t));
        let after = invariant(ves.amounts());
        prop_assert!(
            (after - before).abs() <= 1e-9 * before,
            "tick {n}: invariant {before} → {after} (rel {:.3e}), flags {:?}",
            (after - before).abs() / before,
            rep.flags
        );
        prop_assert!(ves.amounts().iter().all(|&x| x >= 0.0));
    }
    Ok(())
}

fn kinetics(k: f64, ea: f64, orders: [f64; 2]) -> Kinetics<f64, 2> {
    Kinetics {
        rate_constant: k,
        activation_energy: ea,
        orders,
    }
}

proptest! {
    #![proptest_config(config(256))]

    /// 3a. A → B: A + B constant.
    #[test]
    fn closed_vessel_conserves_a_to_b(c in closed()) {
        let mut r = reaction([-1.0, 1.0], [1.0, 0.0], c.k);
        r.forward.activation_energy = c.ea;
        conserves(&c, r, [1.0, 1.0])?;
    }

    /// 3b. A ⇌ B: A + B constant.
    #[test]
    fn closed_vessel_conserves_a_reversible_b(c in closed()) {
        let mut r = reaction([-1.0, 1.0], [1.0, 0.0], c.k);
        r.forward.activation_energy = c.ea;
        r.reverse = Some(kinetics(c.k_rev, c.ea * 0.5, [0.0, 1.0]));
        conserves(&c, r, [1.0, 1.0])?;
    }

    /// 3c. 2A → B, second order: A + 2B constant.
    #[test]
    fn closed_vessel_conserves_dimerisation(c in closed()) {
        let mut r = reaction([-2.0, 1.0], [2.0, 0.0], c.k);
        r.forward.activation_energy = c.ea;
        conserves(&c, r, [1.0, 2.0])?;
    }
}

/// Everything observable after each tick, as bits.
fn trace(s: &Setup, ticks: &[Tick]) -> Vec<u64> {
    let mut ves = build::<f64>(s);
    let mut out = Vec::new();
    for t in ticks {
        let (u, _) = inputs::<f64>(t);
        let rep = ves.step(&u);
        out.push(u64::from(rep.flags.bits()));
        out.push(rep.outflow_volume.to_bits());
        out.push(rep.spilled_volume.to_bits());
        out.push(ves.volume().to_bits());
        out.push(ves.time_ms());
        out.extend(ves.amounts().iter().map(|x| x.to_bits()));
        out.extend(ves.concentrations().iter().map(|x| x.to_bits()));
    }
    out
}

proptest! {
    #![proptest_config(config(64))]

    /// 4. Determinism: the same inputs give bit-identical results.
    #[test]
    fn repeat_runs_are_bit_identical(s in setup(), ticks in prop::collection::vec(tick(true), 20..=50)) {
        let first = trace(&s, &ticks);
        let second = trace(&s, &ticks);
        prop_assert_eq!(first.len(), ticks.len() * (5 + 2 * N));
        prop_assert!(first == second, "runs differ");
    }
}

proptest! {
    #![proptest_config(config(256))]

    /// Reference Euler at λh > 1 would go negative (factor 1 − λh); the
    /// vessel clamps the amount to zero and raises AMOUNT_CLAMPED. Below
    /// λh = 1 the factor is positive and nothing is flagged.
    #[test]
    fn reference_euler_is_clamped_and_flagged_beyond_lambda_h_one(
        tick_ms in 100u32..=60_000,
        kh in prop_oneof![1.001..=1e4f64, 1e-6..0.999f64],
        c0 in 1e-3..1000.0f64,
        fill in 1e-3..=1.0f64,
    ) {
        let h = f64::from(tick_ms) * 1e-3;
        let k = kh / h;
        let mut ves: Vessel<f64, 2, 1, 1> = vessel(
            geometry(),
            [Outlet::Measured],
            &[reaction([-1.0, 1.0], [1.0, 0.0], k)],
            tick_ms,
            Method::ReferenceEuler,
            fill * capacity::<f64>(),
            [c0, 0.0],
        );
        let before = ves.amounts()[0];
        let rep = ves.step(&Inputs::<f64, 2, 1, 1>::quiescent(298.15));
        prop_assert_eq!(rep.method, MethodUsed::ReferenceEuler);
        let a = ves.amounts();
        prop_assert!(a.iter().all(|&x| x.is_finite() && x >= 0.0), "amounts {:?}", a);
        if kh > 1.0 {
            prop_assert!(rep.flags.contains(StatusFlags::AMOUNT_CLAMPED), "flags {:?}", rep.flags);
            prop_assert_eq!(a[0], 0.0);
        } else {
            prop_assert!(!rep.flags.contains(StatusFlags::AMOUNT_CLAMPED), "flags {:?}", rep.flags);
            // One Euler step: n_A·(1 − kh).
            let want = before * (1.0 - kh);
            prop_assert!((a[0] - want).abs() <= 1e-12 * before, "A {} vs {}", a[0], want);
        }
    }
}

/// One tick of A → B (first order) in a closed 1 m³ vessel holding
/// `c0` mol/m³; returns the amounts before and after, and the report flags.
fn closed_tick<S: Scalar>(
    k_ref: f64,
    ea: f64,
    temperature: f64,
    tick_ms: u32,
    c0: [f64; 2],
) -> ([f64; 2], [f64; 2], StatusFlags) {
    let mut r = reaction::<S, 2>([-1.0, 1.0], [1.0, 0.0], k_ref);
    r.forward.activation_energy = S::of(ea);
    let mut ves: Vessel<S, 2, 1, 1> = vessel(
        geometry(),
        [Outlet::Measured],
        &[r],
        tick_ms,
        Method::Mprk22,
        1.0,
        c0,
    );
    let before = ves.amounts().map(|x| x.to_f64());
    let rep = ves.step(&Inputs::<S, 2, 1, 1>::quiescent(S::of(temperature)));
    assert_eq!(rep.method, MethodUsed::Mprk22);
    (before, ves.amounts().map(|x| x.to_f64()), rep.flags)
}

/// Regression test of the conservation defect in f32, the firmware
/// type: A → B at k = 1e3 1/s with a 10 s tick (k·h = 1e4, within the stated
/// range). A + B must stay 100 mol (invariant of ν = (−1, 1); f32 rounding
/// allows ~1e-6 relative).
#[test]
fn mprk22_conserves_a_plus_b_at_k_h_1e4_in_f32() {
    let (before, after, flags) = closed_tick::<f32>(1e3, 0.0, 298.15, 10_000, [100.0, 0.0]);
    let (t0, t1) = (before[0] + before[1], after[0] + after[1]);
    assert!(
        (t1 - t0).abs() <= 1e-5 * t0,
        "A + B: {t0} mol → {t1} mol (amounts {after:?}, flags {flags:?})"
    );
}

/// Regression test of the conservation defect in f64: A → B with
/// k_ref = 1e3 1/s at 298.15 K, E_a = 40 kJ/mol, run at 373 K (k ≈ 2.6e4
/// 1/s) with a 1 s tick. A + B must stay 100 mol to 1e-9 relative.
#[test]
fn mprk22_conserves_a_plus_b_hot_and_fast_in_f64() {
    let (before, after, flags) = closed_tick::<f64>(1e3, 40e3, 373.0, 1_000, [100.0, 0.0]);
    let (t0, t1) = (before[0] + before[1], after[0] + after[1]);
    assert!(
        (t1 - t0).abs() <= 1e-9 * t0,
        "A + B: {t0} mol → {t1} mol (rel {:.3e}; amounts {after:?}, flags {flags:?})",
        (t1 - t0).abs() / t0
    );
}
