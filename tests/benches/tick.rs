//! Cost of one tick of the reference configuration (1 vessel, 3 species,
//! 2 reactions: MPRK22) in `f32` and `f64`, next to the exact step of a
//! non-reacting tank and the reference RK4 on the same network.
//!
//! Run: `cargo bench -p holdup-tests --bench tick`. Criterion reports the
//! time per iteration, i.e. per tick.

use criterion::{criterion_group, criterion_main, Criterion};
use heapless::Vec as HVec;
use holdup_kernel::reference;
use holdup_kernel::{BiasTarget, Inputs, Method, Observer, ObserverSpec, Outlet, Scalar};
use holdup_sim::verify::{cylinder, vessel};
use std::hint::black_box;

fn reference_tick<S: Scalar>(c: &mut Criterion, name: &str) {
    let mut ves = reference::vessel::<S>().expect("reference configuration is valid");
    // Mid-shift inputs (after the temperature ramp has begun).
    let u = reference::inputs_at::<S>(5 * 3600 * 1000);
    c.bench_function(name, |b| b.iter(|| black_box(ves.step(black_box(&u)))));
}

/// The reference configuration with the observer: 5 states (holdup, 3
/// amounts, the caustic meter's bias), a level update every tick and one lab
/// sample pending (its transition product is carried every tick).
fn observer_tick<S: Scalar>(c: &mut Criterion, name: &str) {
    let ves = reference::vessel::<S>().expect("reference configuration is valid");
    let spec = ObserverSpec {
        level_sigma: S::of(0.003),
        volume_noise: S::of(1e-8),
        amount_noise: [S::of(1e-4); 3],
        bias_noise: S::of(1e-12),
        initial_volume_sigma: S::of(0.01),
        initial_amount_sigma: [S::of(2.0); 3],
        initial_bias_sigma: S::of(0.05),
        gate: S::of(9.0),
        lab_max_age_ms: u64::MAX,
        biases: HVec::from_slice(&[BiasTarget::Inlet(0)]).expect("fits"),
    };
    let mut obs: Observer<S, 3, 2, 1, 5, 2> = Observer::new(ves, spec).expect("valid");
    obs.lab_drawn(1, 0, S::of(0.1)).expect("slot");
    let u = reference::inputs_at::<S>(5 * 3600 * 1000);
    let z = obs.vessel().level();
    c.bench_function(name, |b| {
        b.iter(|| {
            black_box(obs.tick(black_box(&u)));
            black_box(obs.update_level(black_box(z)))
        })
    });
}

fn reference_tick_rk4(c: &mut Criterion) {
    let mut ves = vessel::<f32, 3, 2, 1>(
        cylinder(1.6, 2.0),
        [Outlet::Measured],
        &[
            holdup_sim::verify::reaction([-1.0, -1.0, 1.0], [1.0, 1.0, 0.0], 1.1e-4),
            holdup_sim::verify::reaction([-1.0, 0.0, 0.0], [1.0, 0.0, 0.0], 2e-6),
        ],
        1000,
        Method::ReferenceRk4,
        2.5,
        [5.0, 5.0, 40.0],
    );
    let u = reference::inputs_at::<f32>(0);
    c.bench_function("reference network, RK4 (reference method), f32", |b| {
        b.iter(|| black_box(ves.step(black_box(&u))))
    });
}

fn exact_tick<S: Scalar>(c: &mut Criterion, name: &str) {
    let mut ves = vessel::<S, 3, 1, 1>(
        cylinder(1.6, 2.0),
        [Outlet::Measured],
        &[],
        1000,
        Method::Auto,
        2.5,
        [5.0, 5.0, 40.0],
    );
    let q = S::of(1.2 / 3600.0);
    let u = Inputs {
        inlet_flows: [q],
        feed: [[S::of(100.0), S::of(10.0), S::ZERO]],
        outlet_flows: [q],
        temperature: S::of(298.15),
    };
    c.bench_function(name, |b| b.iter(|| black_box(ves.step(black_box(&u)))));
}

fn ticks(c: &mut Criterion) {
    reference_tick::<f32>(c, "reference tick (3 species, 2 reactions, MPRK22), f32");
    reference_tick::<f64>(c, "reference tick (3 species, 2 reactions, MPRK22), f64");
    exact_tick::<f32>(c, "3 species, no reaction (exact step), f32");
    exact_tick::<f64>(c, "3 species, no reaction (exact step), f64");
    reference_tick_rk4(c);
    observer_tick::<f32>(
        c,
        "reference tick + observer (level update, 1 lab pending), f32",
    );
    observer_tick::<f64>(
        c,
        "reference tick + observer (level update, 1 lab pending), f64",
    );
}

criterion_group!(benches, ticks);
criterion_main!(benches);
