//! Stability of the observer under arbitrary bounded measurement sequences
//! (proptest): gaps, outliers, NaN, lab results out of order, unknown and
//! repeated ids. Whatever comes in, the covariance stays symmetric, positive
//! definite (it has a Cholesky factor) and finite, the estimates stay finite
//! and non-negative, and the pending-sample memory never exceeds its fixed
//! capacity. Source of the properties: the definition of a covariance
//! matrix and of the balance state (amounts and holdup are non-negative).

// Matrix loops read like the formulas (same choice as the kernel).
#![allow(clippy::needless_range_loop)]

use heapless::Vec as HVec;
use holdup_kernel::{BiasTarget, Inputs, Observer, ObserverSpec, Scalar};
use proptest::prelude::*;
use proptest::test_runner::Config;

const PENDING: usize = 3;

/// One tick of measurements.
#[derive(Clone, Debug)]
struct Tick {
    q_in: f64,
    q_out: f64,
    feed: f64,
    temperature: f64,
    level: Option<f64>,
    draw: Option<(u32, usize)>,
    result: Option<(u32, f64)>,
}

fn value() -> impl Strategy<Value = f64> {
    prop_oneof![
        8 => 0.0..1.0f64,
        1 => Just(f64::NAN),
        1 => Just(f64::INFINITY),
        1 => -1.0..0.0f64,
        1 => 10.0..1e6f64,
    ]
}

fn tick() -> impl Strategy<Value = Tick> {
    (
        (0.0..3e-3f64, 0.0..3e-3f64, value(), 280.0..340.0f64),
        prop::option::weighted(0.7, value()),
        prop::option::weighted(0.1, (0u32..6, 0usize..4)),
        prop::option::weighted(0.1, (0u32..8, value())),
    )
        .prop_map(
            |((q_in, q_out, feed, temperature), level, draw, result)| Tick {
                q_in,
                q_out,
                feed: feed * 200.0,
                temperature,
                level: level.map(|z| z * 2.5),
                draw,
                result: result.map(|(id, c)| (id, c * 150.0)),
            },
        )
}

fn check_covariance<S: Scalar, const D: usize>(p: &[[S; D]; D]) -> Result<(), TestCaseError> {
    for i in 0..D {
        for j in 0..D {
            prop_assert!(p[i][j].is_finite(), "P[{i}][{j}] not finite");
            prop_assert!(p[i][j] == p[j][i], "P not symmetric at {i},{j}");
        }
    }
    // Cholesky in f64 of the (widened) matrix.
    let mut l = [[0.0f64; D]; D];
    for j in 0..D {
        let mut d = p[j][j].to_f64();
        for k in 0..j {
            d -= l[j][k] * l[j][k];
        }
        prop_assert!(d > 0.0, "P not positive definite (pivot {j}: {d:e})");
        let dj = d.sqrt();
        l[j][j] = dj;
        for i in j + 1..D {
            let mut s = p[i][j].to_f64();
            for k in 0..j {
                s -= l[i][k] * l[j][k];
            }
            l[i][j] = s / dj;
        }
    }
    Ok(())
}

fn run<S: Scalar>(ticks: &[Tick]) -> Result<(), TestCaseError> {
    let ves = holdup_kernel::reference::vessel::<S>().expect("reference plant");
    let spec = ObserverSpec {
        level_sigma: S::of(0.003),
        volume_noise: S::of(1e-8),
        amount_noise: [S::of(1e-4); 3],
        bias_noise: S::of(1e-10),
        initial_volume_sigma: S::of(0.01),
        initial_amount_sigma: [S::of(2.0); 3],
        initial_bias_sigma: S::of(0.05),
        gate: S::of(9.0),
        lab_max_age_ms: 600_000,
        biases: HVec::from_slice(&[BiasTarget::Inlet(0)]).expect("fits"),
    };
    let mut obs: Observer<S, 3, 2, 1, 5, PENDING> = Observer::new(ves, spec).expect("valid");
    for t in ticks {
        let mut u: Inputs<S, 3, 2, 1> = holdup_kernel::reference::inputs_at(0);
        u.inlet_flows = [S::of(t.q_in), S::of(t.q_in)];
        u.feed[0][0] = S::of(t.feed);
        u.outlet_flows = [S::of(t.q_out)];
        u.temperature = S::of(t.temperature);
        obs.tick(&u);
        if let Some(z) = t.level {
            obs.update_level(S::of(z));
        }
        if let Some((id, sp)) = t.draw {
            // Out-of-range species and a full queue are errors, not panics.
            let _ = obs.lab_drawn(id, sp, S::of(0.5));
        }
        if let Some((id, c)) = t.result {
            let _ = obs.lab_result(id, S::of(c));
        }
        prop_assert!(obs.pending_lab_samples() <= PENDING);
        check_covariance(obs.covariance())?;
        let (v, sv) = obs.volume();
        prop_assert!(v.is_finite() && v >= S::ZERO && sv.is_finite());
        let (c, sc) = obs.concentrations();
        for i in 0..3 {
            prop_assert!(c[i].is_finite() && c[i] >= S::ZERO, "c[{i}] = {:?}", c[i]);
            prop_assert!(sc[i].is_finite() && sc[i] >= S::ZERO);
        }
        let (b, sb) = obs.biases();
        prop_assert!(b[0].is_finite() && sb[0].is_finite());
    }
    Ok(())
}

proptest! {
    #![proptest_config(Config { cases: 96, failure_persistence: None, ..Config::default() })]

    #[test]
    fn observer_stays_well_posed_f64(ticks in prop::collection::vec(tick(), 30..120)) {
        run::<f64>(&ticks)?;
    }

    #[test]
    fn observer_stays_well_posed_f32(ticks in prop::collection::vec(tick(), 30..120)) {
        run::<f32>(&ticks)?;
    }
}

#[test]
fn observer_memory_is_fixed() {
    // The whole filter, pending slots included, is one fixed-size value.
    let size = core::mem::size_of::<Observer<f32, 3, 2, 1, 5, PENDING>>();
    println!("Observer<f32, 3 species, 2 reactions, 1 outlet, 5 states, {PENDING} pending>: {size} bytes");
    assert!(size < 4096, "{size} bytes");
}
