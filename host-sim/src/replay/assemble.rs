//! From a checked [`Plant`] to the kernel [`Sensor`] the replay drives: the
//! conditioning of every tagged input, the observer and the closure test.
//!
//! Default conditioning, where `[tags."…"]` sets no limit (SI; the tag's
//! own limits are converted with its unit):
//!
//! | role | valid range | negatives |
//! |---|---|---|
//! | flow | `−1 %` of the top to `3·capacity / 1 h` (three times the flow that fills the vessel in an hour) | clamped to 0 and reported (`input_negative`) |
//! | feed concentration | 0 to 10⁵ mol/m³ (about twice the molarity of pure water) | outside the range |
//! | temperature | 173.15 K to 773.15 K (−100 °C to 500 °C) | — |
//! | level | `−5 %` to `105 %` of the vessel height | — |
//!
//! A value outside its range (or changing faster than `max_rate`) never
//! reaches the balance: the last good value stands in for `hold` (default
//! 10 min) with quality uncertain, then bad. No rate or stuck check unless
//! configured.

use heapless::Vec as HVec;
use holdup_kernel::observer::MAX_BIASES;
use holdup_kernel::sensor::ClosureSpec;
use holdup_kernel::signal::{Signal, SignalKind, SignalSpec, StuckSpec};
use holdup_kernel::{
    BiasTarget, ChannelSpecs, Error, Geometry, Observer, ObserverSpec, Scalar, Sensor, SensorSpec,
};

use super::ReplayError;
use crate::plant::{OutletKind, Plant, Signal as Source, TagOptions};
use crate::to_kernel::{self, I, O, R};

/// Pending lab samples the replay's observer can hold.
pub const LAB_SLOTS: usize = 8;

/// The sensor the replay drives.
pub type HostSensor<S, const N: usize, const D: usize> = Sensor<S, N, R, O, I, D, LAB_SLOTS>;

/// Highest flow accepted by default, in vessel capacities per hour.
pub const DEFAULT_FLOW_CAPACITIES_PER_HOUR: f64 = 3.0;
/// Highest feed concentration accepted by default, mol/m³.
pub const DEFAULT_MAX_FEED: f64 = 1e5;
/// Default valid temperature range, K.
pub const DEFAULT_TEMPERATURE_RANGE: (f64, f64) = (173.15, 773.15);
/// Level transmitter margin outside the vessel height, relative.
pub const LEVEL_MARGIN: f64 = 0.05;
/// Probability of the NIS bounds (a consistent filter's window is flagged
/// one time in a thousand).
pub const NIS_PROBABILITY: f64 = 0.999;
/// Level readings rejected in a row before the holdup is re-seeded.
pub const RESEED_AFTER: u16 = 10;

/// What a signal measures (its default range).
#[derive(Clone, Copy, Debug, PartialEq)]
enum Role {
    Flow,
    Feed,
    Temperature,
    Level,
}

fn options<'a>(plant: &'a Plant, tag: &str) -> Option<&'a TagOptions> {
    plant.tags.iter().find(|t| t.tag == tag)
}

/// The conditioning of one signal; `None` for a constant.
fn channel<S: Scalar>(plant: &Plant, signal: &Source, role: Role) -> Option<SignalSpec<S>> {
    let tag = signal.tag()?;
    let c = options(plant, tag)
        .map(|o| o.conditioning.clone())
        .unwrap_or_default();
    let scale = signal.to_si(1.0) - signal.to_si(0.0);
    let (capacity, height) = Geometry::<f64>::new(plant.shape.clone())
        .map(|g| (g.max_volume(), g.max_level()))
        .unwrap_or((f64::INFINITY, f64::INFINITY));
    let (lo, hi) = match role {
        Role::Flow => {
            let top = DEFAULT_FLOW_CAPACITIES_PER_HOUR * capacity / 3600.0;
            (-0.01 * top, top)
        }
        Role::Feed => (0.0, DEFAULT_MAX_FEED),
        Role::Temperature => DEFAULT_TEMPERATURE_RANGE,
        Role::Level => (-LEVEL_MARGIN * height, (1.0 + LEVEL_MARGIN) * height),
    };
    let min = c.min.map_or(lo, |x| signal.to_si(x));
    let max = c.max.map_or(hi, |x| signal.to_si(x));
    Some(SignalSpec {
        kind: SignalKind::Engineering,
        min: S::of(min),
        max: S::of(max),
        max_rate_per_s: c.max_rate_per_s.map(|r| S::of(r * scale)),
        stuck: c.stuck_ms.map(|ms| StuckSpec {
            max_flat_ms: ms,
            tolerance: S::of(c.stuck_tolerance * scale),
        }),
        hold_max_ms: c.hold_ms,
        clamp_negative: role == Role::Flow && max >= 0.0,
    })
}

/// Every tagged signal of `plant` with its role.
fn tagged(plant: &Plant) -> Vec<(&Source, Role)> {
    let mut out = Vec::new();
    for inlet in &plant.inlets {
        out.push((&inlet.flow, Role::Flow));
        out.extend(inlet.feed.iter().map(|f| (f, Role::Feed)));
    }
    for outlet in &plant.outlets {
        if let OutletKind::Measured(s) = &outlet.kind {
            out.push((s, Role::Flow));
        }
    }
    out.push((&plant.temperature, Role::Temperature));
    out.extend(plant.level.iter().map(|l| (l, Role::Level)));
    out.retain(|(s, _)| s.tag().is_some());
    out
}

/// Check every tag's conditioning as it will be built (its own limits with
/// its role's defaults for the rest): the first refused one, named by its
/// tag, with the range in SI.
pub fn check_channels(plant: &Plant) -> Result<(), ReplayError> {
    for (signal, role) in tagged(plant) {
        let Some(spec) = channel::<f64>(plant, signal, role) else {
            continue;
        };
        if let Err(e) = Signal::new(spec) {
            return Err(ReplayError::Conditioning {
                path: plant.path.clone(),
                tag: signal.tag().unwrap_or_default().to_string(),
                message: format!(
                    "{} (valid range with the role's defaults: {} to {} in SI units; set both min and max)",
                    e.message(),
                    spec.min,
                    spec.max
                ),
            });
        }
    }
    Ok(())
}

/// The conditioning of every input of `plant`.
pub fn channels<S: Scalar, const N: usize>(plant: &Plant) -> ChannelSpecs<S, N, I, O> {
    let mut ch = ChannelSpecs::<S, N, I, O>::unconditioned();
    for (k, inlet) in plant.inlets.iter().enumerate().take(I) {
        ch.inlet_flows[k] = channel(plant, &inlet.flow, Role::Flow);
        for (i, f) in inlet.feed.iter().enumerate().take(N) {
            ch.feed[k][i] = channel(plant, f, Role::Feed);
        }
    }
    for (k, outlet) in plant.outlets.iter().enumerate().take(O) {
        if let OutletKind::Measured(s) = &outlet.kind {
            ch.outlet_flows[k] = channel(plant, s, Role::Flow);
        }
    }
    ch.temperature = channel(plant, &plant.temperature, Role::Temperature);
    ch.level = plant
        .level
        .as_ref()
        .and_then(|l| channel(plant, l, Role::Level));
    ch
}

/// The observer for `plant`'s `[estimator]`, around its vessel at
/// `temperature` K.
fn observer<S: Scalar, const N: usize, const D: usize>(
    plant: &Plant,
    est: &crate::plant::Estimator,
    temperature: f64,
) -> Result<Observer<S, N, R, O, D, LAB_SLOTS>, Error> {
    let ves = to_kernel::vessel::<S, N>(plant, temperature)?;
    let v0 = plant.initial.volume.max(plant.min_holdup);
    let per_hour = |x: f64| x * x / 3600.0;
    let mut amount_noise = [S::ZERO; N];
    let mut amount_sigma = [S::ZERO; N];
    for i in 0..N {
        let drift = est.concentration_drift.get(i).copied().unwrap_or(0.0);
        amount_noise[i] = S::of(per_hour(drift * v0));
        let sd = est
            .initial_concentration_sigma
            .get(i)
            .copied()
            .unwrap_or(0.0);
        amount_sigma[i] = S::of(sd * v0);
    }
    let mut biases: HVec<BiasTarget, MAX_BIASES> = HVec::new();
    for m in est.bias_meters.iter().take(MAX_BIASES) {
        let idx = u8::try_from(m.index).unwrap_or(u8::MAX);
        let _ = biases.push(if m.outlet {
            BiasTarget::Outlet(idx)
        } else {
            BiasTarget::Inlet(idx)
        });
    }
    while biases.len() < D - 1 - N {
        let _ = biases.push(BiasTarget::Unused);
    }
    Observer::new(
        ves,
        ObserverSpec {
            level_sigma: S::of(est.level_sigma),
            volume_noise: S::of(per_hour(est.holdup_drift)),
            amount_noise,
            bias_noise: S::of(per_hour(est.bias_drift)),
            initial_volume_sigma: S::of(est.initial_volume_sigma),
            initial_amount_sigma: amount_sigma,
            initial_bias_sigma: S::of(est.bias_sigma),
            gate: S::of(est.gate),
            lab_max_age_ms: est.lab_max_age_ms,
            biases,
        },
    )
}

/// The replay's sensors: the one whose estimates are reported (corrected
/// when the plant has an `[estimator]`, else open loop) and, beside a
/// corrected one, the open-loop balance on the same conditioned inputs.
pub struct Sensors<S, const N: usize, const D: usize> {
    /// The reported sensor.
    pub main: HostSensor<S, N, D>,
    /// The open-loop balance beside a corrected sensor.
    pub open: Option<HostSensor<S, N, D>>,
}

/// Build the sensors for `plant`, starting at `temperature` K.
///
/// Errors: the kernel's, for a configuration it refuses.
pub fn sensors<S: Scalar, const N: usize, const D: usize>(
    plant: &Plant,
    temperature: f64,
) -> Result<Sensors<S, N, D>, Error> {
    let mut spec = SensorSpec::<S, N, I, O>::plain();
    spec.channels = channels(plant);
    spec.nis_probability = S::of(NIS_PROBABILITY);
    spec.reseed_after = RESEED_AFTER;
    let open_spec = spec;
    let Some(est) = &plant.estimator else {
        let ves = to_kernel::vessel::<S, N>(plant, temperature)?;
        return Ok(Sensors {
            main: Sensor::open_loop(ves, open_spec)?,
            open: None,
        });
    };
    // Balance closure: the level, and every outlet metered (an orifice or
    // weir flow is not a measurement).
    let all_metered = plant
        .outlets
        .iter()
        .all(|o| matches!(o.kind, OutletKind::Measured(_)));
    if spec.channels.level.is_some() && all_metered {
        spec.closure = Some(ClosureSpec {
            window_ticks: u32::try_from(est.closure_window_ms / u64::from(plant.tick_ms))
                .unwrap_or(u32::MAX)
                .max(1),
            level_sigma: S::of(est.level_sigma),
            flow_sigma: S::of(est.flow_sigma),
            k: S::of(est.cusum_k),
            h: S::of(est.cusum_h),
        });
    }
    let main = Sensor::observed(observer(plant, est, temperature)?, spec)?;
    let open = Sensor::open_loop(to_kernel::vessel::<S, N>(plant, temperature)?, open_spec)?;
    Ok(Sensors {
        main,
        open: Some(open),
    })
}
