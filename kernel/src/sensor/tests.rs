use super::*;
use crate::diagnostics::{DeviceStatus, Reasons};
use crate::model::{Method, Outlet, VesselSpec};
use crate::observer::ObserverSpec;
use crate::signal::{SignalKind, SignalSpec};
use crate::vessel::InitialState;
use crate::{Bottom, Geometry, Model, Shape};
use heapless::Vec as HVec;

/// A 2 m × 5 m vertical cylinder (cross-section π m²), one species, no
/// reaction, one inlet, one measured outlet: its holdup and concentration
/// have closed forms (constant flows: `V = V₀ + (q_in − q_out)·t`; equal
/// flows: `c = c_f + (c₀ − c_f)·e^{−q t/V}`).
type Tank = Sensor<f64, 1, 0, 1, 1, 3, 2>;
const AREA: f64 = core::f64::consts::PI;
const Q: f64 = 1e-3;
const V0: f64 = 10.0;
const LEVEL_SIGMA: f64 = 0.003;

pub(crate) fn vessel<S: Scalar>(c0: f64) -> Vessel<S, 1, 0, 1> {
    let mut outlets = HVec::new();
    outlets.push(Outlet::Measured).unwrap();
    let model = Model::new(VesselSpec {
        geometry: Geometry::new(Shape::VerticalCylinder {
            diameter: S::of(2.0),
            height: S::of(5.0),
            bottom: Bottom::Flat,
        })
        .unwrap(),
        outlets,
        reactions: HVec::new(),
        min_holdup: S::of(0.01),
        tick_ms: 1000,
        method: Method::Auto,
    })
    .unwrap();
    Vessel::new(
        model,
        &InitialState {
            volume: S::of(V0),
            concentrations: [S::of(c0)],
            temperature: S::of(293.15),
        },
    )
    .unwrap()
}

pub(crate) fn observer<S: Scalar>(c0: f64) -> Observer<S, 1, 0, 1, 3, 2> {
    let mut biases = HVec::new();
    biases.push(BiasTarget::Inlet(0)).unwrap();
    Observer::new(
        vessel(c0),
        ObserverSpec {
            level_sigma: S::of(LEVEL_SIGMA),
            volume_noise: S::of(1e-8),
            amount_noise: [S::of(1e-4)],
            bias_noise: S::of(1e-12),
            initial_volume_sigma: S::of(0.01),
            initial_amount_sigma: [S::of(2.0)],
            initial_bias_sigma: S::of(0.05),
            gate: S::of(9.0),
            lab_max_age_ms: 3 * 3600 * 1000,
            biases,
        },
    )
    .unwrap()
}

fn engineering<S: Scalar>(
    min: f64,
    max: f64,
    hold_max_ms: u64,
    clamp_negative: bool,
) -> SignalSpec<S> {
    SignalSpec {
        kind: SignalKind::Engineering,
        min: S::of(min),
        max: S::of(max),
        max_rate_per_s: None,
        stuck: None,
        hold_max_ms,
        clamp_negative,
    }
}

fn flow_signal<S: Scalar>() -> SignalSpec<S> {
    engineering(-1e-4, 0.01, 600_000, true)
}

/// Flow meters on the inlet and the outlet, a level transmitter, and the
/// closure test when `closure`.
pub(crate) fn spec<S: Scalar>(closure: bool) -> SensorSpec<S, 1, 1, 1> {
    let mut s = SensorSpec::plain();
    s.channels.inlet_flows = [Some(flow_signal())];
    s.channels.outlet_flows = [Some(flow_signal())];
    s.channels.level = Some(engineering(0.0, 5.0, 60_000, false));
    if closure {
        s.closure = Some(ClosureSpec {
            window_ticks: 1800,
            level_sigma: S::of(LEVEL_SIGMA),
            flow_sigma: S::of(0.01),
            k: S::of(0.5),
            h: S::of(5.0),
        });
    }
    s
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
        libm::sqrt(-2.0 * libm::log(u1)) * libm::cos(2.0 * core::f64::consts::PI * u2)
    }
}

fn readings(q_in: f64, q_out: f64, level: f64) -> Readings<f64, 1, 1, 1> {
    Readings {
        inlet_flows: [q_in],
        feed: [[100.0]],
        outlet_flows: [q_out],
        temperature: 293.15,
        level,
    }
}

/// A corrupt `1e30` m³/s sample (outside the inlet's range) is replaced by
/// the last good value: the run is bit for bit the run in which that sample
/// repeated the previous one. (The policy of the signal layer, range then
/// hold; no outside reference needed: the property is identity.)
#[test]
fn a_corrupt_sample_never_reaches_the_balance() {
    let run = |spike: f64| {
        let mut s = Tank::observed(observer(100.0), spec(true)).unwrap();
        let mut rng = Rng(7);
        let mut out = Vec::new();
        let mut prev = Q;
        for n in 0..3600u64 {
            let q = Q * (1.0 + 0.01 * rng.normal());
            let z = V0 / AREA + LEVEL_SIGMA * rng.normal();
            let q_in = if n == 1800 { spike } else { q };
            let r = s.tick(
                n * 1000,
                &readings(if q_in.is_nan() { prev } else { q_in }, Q, z),
            );
            prev = q;
            if n == 1800 && spike > 1.0 {
                assert!(r.signal_flags.contains(SignalFlags::OUT_OF_RANGE));
                assert!(r.signal_flags.contains(SignalFlags::HELD));
                assert_eq!(r.inputs.flow, Quality::Uncertain);
                assert_eq!(r.diagnosis.status, DeviceStatus::MaintenanceRequired);
            }
            let e = s.estimate();
            out.push((e.volume, e.concentrations[0], e.volume_sigma));
        }
        out
    };
    // NaN at 1800 means "repeat the previous reading" in the helper above.
    assert_eq!(run(1e30), run(f64::NAN));
}

/// The filter locks itself out when its holdup is wrong: an outlet meter
/// reading zero (inside its range, so conditioning passes it) for 10 min
/// while 1 L/s flows out. Without recovery the holdup stays off after the
/// meter is back; with it the holdup returns to the truth. The truth is
/// the closed form `V = V₀ + (q_in − q_out)·t` (equal flows: `V₀`).
#[test]
fn a_run_of_gated_level_readings_reseeds_the_holdup() {
    let run = |reseed_after: u16| {
        let mut sp = spec(false);
        sp.reseed_after = reseed_after;
        let mut s = Tank::observed(observer(100.0), sp).unwrap();
        let mut rng = Rng(11);
        let mut worst_after = 0.0f64;
        let mut reseeds = 0;
        for n in 0..7200u64 {
            let dropout = (1800..2400).contains(&n);
            let z = V0 / AREA + LEVEL_SIGMA * rng.normal();
            let r = s.tick(n * 1000, &readings(Q, if dropout { 0.0 } else { Q }, z));
            reseeds += u32::from(r.reseeded);
            // 15 min after the fault's end.
            if n >= 2400 + 900 {
                let e = (s.estimate().volume - V0).abs() / V0;
                worst_after = worst_after.max(e);
            }
        }
        (worst_after, reseeds, s.counters())
    };
    let (locked, none, _) = run(0);
    let (recovered, reseeds, counters) = run(10);
    std::println!("holdup error 15 min after the fault: {locked:.3e} without recovery, {recovered:.3e} with ({reseeds} re-seeds)");
    assert_eq!(none, 0);
    assert!(
        locked > 0.02,
        "without recovery the holdup stays off: {locked}"
    );
    assert!(reseeds >= 1 && counters.reseeds == reseeds);
    assert!(recovered < 0.01, "recovered within 1 %: {recovered}");
}

/// An inlet meter reading 3 % high: the open-loop sensor's closure alarm
/// goes up and stays (the books really are out); the observer estimates
/// the bias, and with the flows corrected by it the alarm ends and stays
/// off. The truth is constant (equal true flows).
#[test]
fn closure_alarm_ends_once_the_bias_is_identified() {
    let hours = 24u64;
    let mut open = Sensor::<f64, 1, 0, 1, 1, 3, 2>::open_loop(vessel(100.0), spec(true)).unwrap();
    let mut obs = Tank::observed(observer(100.0), spec(true)).unwrap();
    let mut rng = Rng(3);
    let (mut open_alarm_ticks, mut obs_alarm_late) = (0u64, 0u64);
    for n in 0..hours * 3600 {
        let q_in = 1.03 * Q * (1.0 + 0.01 * rng.normal());
        let q_out = Q * (1.0 + 0.01 * rng.normal());
        let z = V0 / AREA + LEVEL_SIGMA * rng.normal();
        let r = readings(q_in, q_out, z);
        let a = open.tick(n * 1000, &r);
        let b = obs.tick(n * 1000, &r);
        if n > 6 * 3600 {
            open_alarm_ticks += u64::from(a.closure.is_some());
            obs_alarm_late += u64::from(b.closure.is_some());
        }
        if n == hours * 3600 - 1 {
            assert_eq!(a.closure, Some(ClosureAlarm::MoreOutThanIn));
            assert!(a.diagnosis.reasons.contains(Reasons::CLOSURE));
        }
    }
    let (beta, sigma) = obs.biases();
    std::println!(
        "bias {:.4} ± {:.4}; closure alarm after 6 h: open loop {open_alarm_ticks} ticks, corrected {obs_alarm_late}",
        beta[0], sigma[0]
    );
    assert!(
        (beta[0] - 0.03).abs() < 3.0 * sigma[0] + 1e-3,
        "{} ± {}",
        beta[0],
        sigma[0]
    );
    assert!(
        open_alarm_ticks > 17 * 3600,
        "open loop: alarm on {open_alarm_ticks} ticks"
    );
    assert_eq!(obs_alarm_late, 0, "corrected: no closure alarm after 6 h");
}

/// The whole sensor survives a checkpoint: a fresh sensor restored from
/// the state goes on bit for bit like the original.
#[cfg(feature = "serde")]
#[test]
fn state_round_trip_continues_bit_for_bit() {
    let mut a = Tank::observed(observer(50.0), spec(true)).unwrap();
    let mut rng = Rng(5);
    let mut r = |n: u64| {
        readings(
            Q * (1.0 + 0.01 * rng.normal()),
            Q,
            V0 / AREA + 0.003 * ((n % 7) as f64 - 3.0) / 3.0,
        )
    };
    for n in 0..5000 {
        let _ = a.tick(n * 1000, &r(n));
    }
    a.lab_drawn(1, 0, 1.0).unwrap();
    let state = a.state();
    let mut b = Tank::observed(observer(50.0), spec(true)).unwrap();
    b.restore_state(&state).unwrap();
    for n in 5000..6000 {
        let x = r(n);
        assert_eq!(a.tick(n * 1000, &x), b.tick(n * 1000, &x));
    }
    assert_eq!(a.lab_result(1, 60.0), b.lab_result(1, 60.0));
    assert_eq!(a.estimate(), b.estimate());
    // Another configuration does not accept it.
    let mut other = spec(true);
    other.reseed_after = 3;
    other.channels.level = None;
    other.closure = None;
    let c = Tank::observed(observer(50.0), other).unwrap();
    assert_eq!(c.check_state(&state), Err(Error::CheckpointInvalidState));
    let open = Sensor::<f64, 1, 0, 1, 1, 3, 2>::open_loop(vessel(50.0), spec(true)).unwrap();
    assert_eq!(open.check_state(&state), Err(Error::CheckpointInvalidState));
}

/// A sensor built with NIS bounds made elsewhere (the quantiles of the
/// host's `ChiSquareBounds::new`, as a firmware compiles them in) runs bit
/// for bit like one that computes them, through five closed NIS windows;
/// bounds for another probability are refused.
#[test]
fn given_nis_bounds_give_the_same_sensor() {
    let b = ChiSquareBounds::<f64>::new(0.999).unwrap();
    let (p, z, lo, hi) = b.quantiles();
    let given = ChiSquareBounds::from_quantiles(p, z, lo, hi).unwrap();
    let mut a = Tank::observed(observer(50.0), spec(true)).unwrap();
    let mut c = Tank::observed_with_bounds(observer(50.0), spec(true), given).unwrap();
    let mut rng = Rng(9);
    for n in 0..600u64 {
        let r = readings(
            Q * (1.0 + 0.01 * rng.normal()),
            Q,
            V0 / AREA + LEVEL_SIGMA * rng.normal(),
        );
        assert_eq!(a.tick(n * 1000, &r), c.tick(n * 1000, &r));
    }
    assert_eq!(a.nis().report(), c.nis().report());
    assert_eq!(a.nis().report().dof, NIS_WINDOW as u32);
    let other = ChiSquareBounds::new(0.99).unwrap();
    assert_eq!(
        Tank::observed_with_bounds(observer(50.0), spec(true), other).err(),
        Some(Error::ConfigProbability)
    );
    assert_eq!(
        Sensor::<f64, 1, 0, 1, 1, 3, 2>::open_loop_with_bounds(vessel(50.0), spec(true), other)
            .err(),
        Some(Error::ConfigProbability)
    );
    assert!(Sensor::<f64, 1, 0, 1, 1, 3, 2>::open_loop_with_bounds(
        vessel(50.0),
        spec(true),
        given
    )
    .is_ok());
}

#[test]
fn configuration_errors_are_values() {
    let mut no_level = spec(true);
    no_level.channels.level = None;
    assert_eq!(
        Tank::observed(observer(0.0), no_level).err(),
        Some(Error::SensorClosure)
    );
    let mut p = spec(false);
    p.nis_probability = 1.0;
    assert_eq!(
        Tank::observed(observer(0.0), p).err(),
        Some(Error::ConfigProbability)
    );
    let mut bad = spec(false);
    bad.channels.inlet_flows[0] = Some(SignalSpec {
        max: -1.0,
        ..flow_signal()
    });
    assert_eq!(
        Tank::observed(observer(0.0), bad).err(),
        Some(Error::SignalRange)
    );
    let mut open = Sensor::<f64, 1, 0, 1, 1, 3, 2>::open_loop(vessel(0.0), spec(false)).unwrap();
    assert_eq!(open.lab_drawn(1, 0, 1.0), Err(Error::SensorNotObserved));
    assert_eq!(open.analyser(0, 1.0, 1.0), Err(Error::SensorNotObserved));
}

/// A small negative flow within the meter's range is clamped to zero by the
/// conditioning and reported as `input_negative` (maintenance: check the
/// meter's zero), not passed to the balance.
#[test]
fn a_clamped_negative_flow_is_reported() {
    let mut s = Tank::observed(observer(0.0), spec(false)).unwrap();
    let r = s.tick(0, &readings(Q, -5e-5, V0 / AREA));
    assert!(r.step.flags.contains(StatusFlags::INPUT_NEGATIVE));
    assert!(r.diagnosis.reasons.contains(Reasons::INPUT_NEGATIVE));
    assert_eq!(r.diagnosis.status, DeviceStatus::MaintenanceRequired);
    // The balance saw zero outflow: V rose by q_in·h = 1 L exactly.
    let v = s.observer().unwrap().vessel().volume();
    let r2 = s.tick(1000, &readings(Q, 0.0, f64::NAN));
    assert!(r2.level_update.is_none());
    assert!((s.observer().unwrap().vessel().volume() - v - Q).abs() < 1e-12);
}
