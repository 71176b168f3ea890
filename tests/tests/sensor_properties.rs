//! Stability of the whole sensor (conditioning, observer, recovery) under
//! one fault, property-tested: for random plants, meter noise and any single
//! fault from {a spike of any size on a flow, a NaN run, a negative outlet
//! dropout up to 30 min, a meter stuck (at zero or at its last value) up to
//! 30 min, a dead level transmitter up to 30 min}, the corrected estimate is
//! finite and positive at every tick, and back near the truth after the
//! fault: from 15 minutes after its end, the truth lies within ±3σ of the
//! estimate for at least 90 % of the ticks of the following hour, and never
//! beyond 6σ.
//!
//! The truth is the closed form of a well-mixed tank at constant, equal in-
//! and outflow with first-order consumption (common practice; e.g. any
//! reaction-engineering text's CSTR start-up):
//! `V = V₀`, `c(t) = c_ss + (c₀ − c_ss)·e^{−(q/V + k)t}`,
//! `c_ss = q·c_f / (q + k·V)` — written here, independently of the kernel.
//!
//! Why 90 % and not 99.7 %: the estimation error is strongly correlated
//! from tick to tick (the filter's time constant is minutes), so an hour
//! holds only tens of independent samples and one honest excursion of a
//! few minutes already costs several per cent. The 6σ cap catches a filter
//! that has not recovered (a lock-out is hundreds of σ).

use heapless::Vec as HVec;
use holdup_kernel::sensor::{ChannelSpecs, SensorSpec};
use holdup_kernel::signal::{SignalKind, SignalSpec};
use holdup_kernel::{
    Bottom, Geometry, InitialState, Kinetics, Method, Model, Observer, ObserverSpec, Outlet,
    ReactionSpec, Readings, Sensor, Shape, Vessel, VesselSpec,
};
use proptest::prelude::*;
use proptest::test_runner::Config;

/// One species, one reaction, one outlet, one inlet, no bias state.
type Tank = Sensor<f64, 1, 1, 1, 1, 2, 2>;

const LEVEL_SIGMA: f64 = 0.003;
const FLOW_NOISE: f64 = 0.01;
const FAULT_AT_S: u64 = 2 * 3600;
const SETTLE_S: u64 = 15 * 60;
const CHECK_S: u64 = 3600;

#[derive(Clone, Debug)]
struct Plant {
    diameter: f64,
    height: f64,
    fill: f64,
    tau_h: f64,
    k: f64,
    feed: f64,
    c0: f64,
    seed: u64,
}

#[derive(Clone, Copy, Debug)]
enum Fault {
    /// One inlet reading of this many times the true flow (any sign).
    Spike(f64),
    /// NaN on the inlet, the outlet or the level for this many seconds.
    NanRun(u8, u64),
    /// The outlet reads −x m³/s for this many seconds.
    Dropout(f64, u64),
    /// The outlet reads 0 (`true`) or its last value for this many seconds.
    Stuck(bool, u64),
    /// The level reads NaN (`true`) or 0 m for this many seconds.
    DeadLevel(bool, u64),
}

impl Fault {
    fn seconds(self) -> u64 {
        match self {
            Fault::Spike(_) => 1,
            Fault::NanRun(_, s)
            | Fault::Dropout(_, s)
            | Fault::Stuck(_, s)
            | Fault::DeadLevel(_, s) => s,
        }
    }
}

fn plant() -> impl Strategy<Value = Plant> {
    (
        (1.0..4.0f64, 3.0..6.0f64, 0.3..0.8f64),
        (0.5..10.0f64, prop_oneof![Just(0.0), 1e-6..1e-3f64]),
        (10.0..1000.0f64, 0.0..1.0f64, any::<u64>()),
    )
        .prop_map(
            |((diameter, height, fill), (tau_h, k), (feed, c0, seed))| Plant {
                diameter,
                height,
                fill,
                tau_h,
                k,
                feed,
                c0: c0 * feed,
                seed,
            },
        )
}

fn fault() -> impl Strategy<Value = Fault> {
    let minutes = 1u64..=30;
    prop_oneof![
        (prop_oneof![-30.0..30.0f64, Just(0.0)], any::<bool>()).prop_map(|(e, neg)| {
            let x = 10f64.powf(e);
            Fault::Spike(if neg { -x } else { x })
        }),
        (0u8..3, minutes.clone()).prop_map(|(w, m)| Fault::NanRun(w, m * 60)),
        (-4.0..0.0f64, minutes.clone()).prop_map(|(e, m)| Fault::Dropout(10f64.powf(e), m * 60)),
        (any::<bool>(), minutes.clone()).prop_map(|(z, m)| Fault::Stuck(z, m * 60)),
        (any::<bool>(), minutes).prop_map(|(n, m)| Fault::DeadLevel(n, m * 60)),
    ]
}

impl Plant {
    fn area(&self) -> f64 {
        core::f64::consts::PI * self.diameter * self.diameter / 4.0
    }
    fn v0(&self) -> f64 {
        self.fill * self.area() * self.height
    }
    fn q(&self) -> f64 {
        self.v0() / (self.tau_h * 3600.0)
    }
    /// The closed form above.
    fn truth_c(&self, t: f64) -> f64 {
        let (q, v, k) = (self.q(), self.v0(), self.k);
        let css = q * self.feed / (q + k * v);
        css + (self.c0 - css) * (-(q / v + k) * t).exp()
    }

    fn sensor(&self) -> Tank {
        let mut outlets = HVec::new();
        outlets.push(Outlet::Measured).unwrap();
        let mut reactions = HVec::new();
        reactions
            .push(ReactionSpec {
                stoichiometry: [-1.0],
                forward: Kinetics {
                    rate_constant: self.k,
                    activation_energy: 0.0,
                    orders: [1.0],
                },
                reverse: None,
                reference_temperature: 298.15,
            })
            .unwrap();
        let model = Model::new(VesselSpec {
            geometry: Geometry::new(Shape::VerticalCylinder {
                diameter: self.diameter,
                height: self.height,
                bottom: Bottom::Flat,
            })
            .unwrap(),
            outlets,
            reactions,
            min_holdup: 0.01 * self.area() * self.height,
            tick_ms: 1000,
            method: Method::Auto,
        })
        .unwrap();
        let v0 = self.v0();
        let vessel = Vessel::new(
            model,
            &InitialState {
                volume: v0,
                concentrations: [self.c0],
                temperature: 298.15,
            },
        )
        .unwrap();
        let per_hour = |x: f64| x * x / 3600.0;
        let observer = Observer::new(
            vessel,
            ObserverSpec {
                level_sigma: LEVEL_SIGMA,
                // The config's defaults: 0.1 % of the capacity per hour, and
                // 1 % of the feed per hour.
                volume_noise: per_hour(1e-3 * self.area() * self.height),
                amount_noise: [per_hour(0.01 * self.feed * v0)],
                bias_noise: 0.0,
                initial_volume_sigma: 0.01 * v0,
                initial_amount_sigma: [0.1 * self.c0.max(1.0) * v0],
                initial_bias_sigma: 0.0,
                gate: 9.0,
                lab_max_age_ms: 8 * 3600 * 1000,
                biases: HVec::new(),
            },
        )
        .unwrap();
        let flow = SignalSpec {
            kind: SignalKind::Engineering,
            // The replay's default range: three capacities an hour.
            min: -0.03 * self.area() * self.height / 3600.0,
            max: 3.0 * self.area() * self.height / 3600.0,
            max_rate_per_s: None,
            stuck: None,
            hold_max_ms: 600_000,
            clamp_negative: true,
        };
        let mut channels = ChannelSpecs::unconditioned();
        channels.inlet_flows = [Some(flow)];
        channels.outlet_flows = [Some(flow)];
        channels.level = Some(SignalSpec {
            min: -0.05 * self.height,
            max: 1.05 * self.height,
            clamp_negative: false,
            ..flow
        });
        let mut spec = SensorSpec::plain();
        spec.channels = channels;
        Tank::observed(observer, spec).unwrap()
    }
}

/// SplitMix64 with Box–Muller normals (Steele, Lea and Flood, 2014).
struct Rng(u64);

impl Rng {
    fn uniform(&mut self) -> f64 {
        self.0 = self.0.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut z = self.0;
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        ((z ^ (z >> 31)) >> 11) as f64 / (1u64 << 53) as f64
    }
    fn normal(&mut self) -> f64 {
        let u1 = self.uniform().max(1e-300);
        let u2 = self.uniform();
        (-2.0 * u1.ln()).sqrt() * (2.0 * core::f64::consts::PI * u2).cos()
    }
}

/// What a run measured.
#[derive(Debug)]
struct Outcome {
    /// Share of checked ticks with the truth within ±3σ (holdup, c).
    inside: [f64; 2],
    /// Largest error in σ over the checked ticks (holdup, c).
    worst: [f64; 2],
    /// The first tick with a non-finite or non-positive estimate.
    broken: Option<u64>,
}

fn run(p: &Plant, fault: Fault) -> Outcome {
    let mut s = p.sensor();
    let mut rng = Rng(p.seed);
    let (q, v0, area) = (p.q(), p.v0(), p.area());
    let end = FAULT_AT_S + fault.seconds();
    let from = end + SETTLE_S;
    let (mut inside, mut worst, mut n) = ([0u64; 2], [0.0f64; 2], 0u64);
    let mut broken = None;
    let mut last_out = q;
    for t in 0..from + CHECK_S {
        let in_fault = (FAULT_AT_S..end).contains(&t);
        let mut q_in = q * (1.0 + FLOW_NOISE * rng.normal());
        let mut q_out = q * (1.0 + FLOW_NOISE * rng.normal());
        let mut z = v0 / area + LEVEL_SIGMA * rng.normal();
        if in_fault {
            match fault {
                Fault::Spike(x) => q_in = x * q,
                Fault::NanRun(0, _) => q_in = f64::NAN,
                Fault::NanRun(1, _) => q_out = f64::NAN,
                Fault::NanRun(_, _) => z = f64::NAN,
                Fault::Dropout(x, _) => q_out = -x,
                Fault::Stuck(true, _) => q_out = 0.0,
                Fault::Stuck(false, _) => q_out = last_out,
                Fault::DeadLevel(true, _) => z = f64::NAN,
                Fault::DeadLevel(false, _) => z = 0.0,
            }
        } else {
            last_out = q_out;
        }
        let r = Readings {
            inlet_flows: [q_in],
            feed: [[p.feed]],
            outlet_flows: [q_out],
            temperature: 298.15,
            level: z,
        };
        let _ = s.tick(t * 1000, &r);
        let e = s.estimate();
        let (v, c) = (e.volume, e.concentrations[0]);
        let (sv, sc) = (
            e.volume_sigma.unwrap_or(f64::NAN),
            e.concentration_sigma.map_or(f64::NAN, |x| x[0]),
        );
        let ok = v.is_finite() && v > 0.0 && c.is_finite() && c >= 0.0;
        if !ok && broken.is_none() {
            broken = Some(t);
        }
        if t + 1 >= from {
            // The estimate after tick t is at t + 1 s.
            let errs = [
                (v - v0).abs() / sv,
                (c - p.truth_c((t + 1) as f64)).abs() / sc,
            ];
            for (k, e) in errs.iter().enumerate() {
                let e = if e.is_finite() { *e } else { f64::INFINITY };
                worst[k] = worst[k].max(e);
                inside[k] += u64::from(e <= 3.0);
            }
            n += 1;
        }
    }
    Outcome {
        inside: inside.map(|k| k as f64 / n as f64),
        worst,
        broken,
    }
}

proptest! {
    #![proptest_config(Config { cases: 256, ..Config::default() })]

    #[test]
    fn one_fault_then_back_within_three_sigma(p in plant(), f in fault()) {
        let o = run(&p, f);
        prop_assert!(o.broken.is_none(), "{f:?} on {p:?}: estimate broke at {:?}", o.broken);
        for k in 0..2 {
            prop_assert!(
                o.inside[k] >= 0.9 && o.worst[k] <= 6.0,
                "{f:?} on {p:?}: {} within 3σ for {:.1} % of the hour from 15 min after the fault, worst {:.2}σ",
                ["holdup", "concentration"][k],
                100.0 * o.inside[k],
                o.worst[k]
            );
        }
    }
}

/// The worst plant-fault pairs of a fixed sweep, printed (`--nocapture`)
/// for the record, and the same bounds asserted.
#[test]
fn fault_sweep_table() {
    let p = Plant {
        diameter: 2.0,
        height: 4.0,
        fill: 0.5,
        tau_h: 2.0,
        k: 1e-4,
        feed: 200.0,
        c0: 50.0,
        seed: 7,
    };
    let faults = [
        Fault::Spike(1e30),
        Fault::Spike(-1e30),
        Fault::Spike(1e3),
        Fault::Spike(0.0),
        Fault::NanRun(0, 1800),
        Fault::NanRun(1, 1800),
        Fault::NanRun(2, 1800),
        Fault::Dropout(0.05, 1800),
        Fault::Dropout(1e-4, 1800),
        Fault::Stuck(true, 1800),
        Fault::Stuck(false, 1800),
        Fault::DeadLevel(true, 1800),
        Fault::DeadLevel(false, 1800),
    ];
    println!("fault (30 min where timed)      holdup: within 3σ  worst   conc.: within 3σ  worst");
    for f in faults {
        let o = run(&p, f);
        println!(
            "{:<32} {:>14.1} % {:>6.2}σ {:>14.1} % {:>6.2}σ",
            format!("{f:?}"),
            100.0 * o.inside[0],
            o.worst[0],
            100.0 * o.inside[1],
            o.worst[1]
        );
        assert!(o.broken.is_none(), "{f:?}");
        for k in 0..2 {
            assert!(o.inside[k] >= 0.9 && o.worst[k] <= 6.0, "{f:?}: {o:?}");
        }
    }
}

/// A case the property found on CI: the outlet reads 0 for 17 min on a small,
/// slow tank (τ = 3.1 h) filling with feed from clean water. The level
/// readings took the phantom volume out without its solute, and the
/// concentration stayed ~3.4σ high for hours (74 % of the hour within 3σ).
#[test]
fn outlet_stuck_at_zero_on_a_slow_small_tank() {
    let p = Plant {
        diameter: 1.0,
        height: 3.0,
        fill: 0.3,
        tau_h: 3.1041002260344865,
        k: 0.0,
        feed: 10.0,
        c0: 0.0,
        seed: 255334,
    };
    let o = run(&p, Fault::Stuck(true, 1020));
    assert!(o.broken.is_none());
    for k in 0..2 {
        assert!(o.inside[k] >= 0.9 && o.worst[k] <= 6.0, "{o:?}");
    }
}
