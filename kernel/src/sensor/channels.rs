//! The sensor's inputs: one [`Signal`] per measured channel, and what a
//! tick's conditioning gives the balance and the diagnostics.

use crate::model::Inputs;
use crate::signal::{Quality, Reading, Signal, SignalFlags, SignalSpec};
use crate::units::Millis;
use crate::{Error, Scalar};

/// One input of the sensor.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum Channel {
    /// The flow of inlet `k`.
    InletFlow(u8),
    /// The feed concentration of species `i` in inlet `k`: `(k, i)`.
    Feed(u8, u8),
    /// The flow of outlet `k` (measured outlets only).
    OutletFlow(u8),
    /// The vessel temperature.
    Temperature,
    /// The level transmitter.
    Level,
}

/// The conditioning of every input, as configured: `None` for a value that
/// is not a measurement (a configured constant, an orifice's or weir's
/// computed outflow, no level transmitter); it is passed on as given.
#[derive(Clone, Copy, Debug, PartialEq)]
#[cfg_attr(
    feature = "serde",
    derive(serde::Serialize, serde::Deserialize),
    serde(bound(
        serialize = "S: serde::Serialize",
        deserialize = "S: serde::Deserialize<'de> + Copy + Default"
    ))
)]
pub struct ChannelSpecs<S, const N: usize, const I: usize, const O: usize> {
    /// Each inlet's flow meter, m³/s after scaling.
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_arrays"))]
    pub inlet_flows: [Option<SignalSpec<S>>; I],
    /// Each inlet's feed concentration of each species, mol/m³ after scaling.
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_arrays::matrix"))]
    pub feed: [[Option<SignalSpec<S>>; N]; I],
    /// Each outlet's flow meter (`None` for orifices and weirs), m³/s.
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_arrays"))]
    pub outlet_flows: [Option<SignalSpec<S>>; O],
    /// The temperature transmitter, K.
    pub temperature: Option<SignalSpec<S>>,
    /// The level transmitter, m from the vessel bottom.
    pub level: Option<SignalSpec<S>>,
}

impl<S: Copy, const N: usize, const I: usize, const O: usize> ChannelSpecs<S, N, I, O> {
    /// Nothing conditioned: every input passed on as given, no level.
    pub const fn unconditioned() -> Self {
        Self {
            inlet_flows: [None; I],
            feed: [[None; N]; I],
            outlet_flows: [None; O],
            temperature: None,
            level: None,
        }
    }
}

/// The readings of one tick, as the instruments give them (a loop current
/// in mA, ADC counts or an engineering value, per each channel's
/// [`SignalSpec::kind`]; unconditioned inputs in SI units). NaN where
/// there is no reading.
#[derive(Clone, Copy, Debug, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Readings<S, const N: usize, const I: usize, const O: usize> {
    /// Inlet flows.
    pub inlet_flows: [S; I],
    /// Feed concentrations, `[inlet][species]`.
    pub feed: [[S; N]; I],
    /// Outlet flows (ignored for orifices and weirs).
    pub outlet_flows: [S; O],
    /// Temperature.
    pub temperature: S,
    /// Level (ignored without a level channel).
    pub level: S,
}

impl<S: Scalar, const N: usize, const I: usize, const O: usize> Readings<S, N, I, O> {
    /// Engineering-unit readings of the kernel inputs `u` and a level `z`.
    pub fn of_inputs(u: &Inputs<S, N, I, O>, level: S) -> Self {
        Self {
            inlet_flows: u.inlet_flows,
            feed: u.feed,
            outlet_flows: u.outlet_flows,
            temperature: u.temperature,
            level,
        }
    }
}

/// The quality of each kind of input after conditioning (what
/// [`crate::diagnostics::diagnose`] looks at).
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct InputQuality<const N: usize> {
    /// Worst of the inlet and outlet flow readings.
    pub flow: Quality,
    /// The level reading (`Good` without a level channel).
    pub level: Quality,
    /// The temperature reading.
    pub temperature: Quality,
    /// Each species' feed concentration, worst over the inlets.
    pub feed: [Quality; N],
}

impl<const N: usize> InputQuality<N> {
    /// Every input good.
    pub const fn good() -> Self {
        Self {
            flow: Quality::Good,
            level: Quality::Good,
            temperature: Quality::Good,
            feed: [Quality::Good; N],
        }
    }

    /// The worst of all of them.
    pub fn worst(&self) -> Quality {
        let q = Quality::worst(Quality::worst(self.flow, self.level), self.temperature);
        self.feed.iter().fold(q, |a, b| Quality::worst(a, *b))
    }
}

/// What conditioning gave for one tick.
#[derive(Clone, Copy, Debug)]
pub(crate) struct Conditioned<S, const N: usize, const I: usize, const O: usize> {
    /// The inputs held over the tick, SI.
    pub inputs: Inputs<S, N, I, O>,
    /// The level reading, if there is a level channel.
    pub level: Option<Reading<S>>,
    /// Quality per kind of input.
    pub quality: InputQuality<N>,
    /// Union of every channel's flags.
    pub flags: SignalFlags,
    /// Channels whose reading was not `Good`.
    pub not_good: u16,
}

/// The conditioned channels.
#[derive(Clone, Copy, Debug, PartialEq)]
#[cfg_attr(
    feature = "serde",
    derive(serde::Serialize, serde::Deserialize),
    serde(bound(
        serialize = "S: serde::Serialize",
        deserialize = "S: serde::Deserialize<'de> + Copy + Default"
    ))
)]
pub(crate) struct Channels<S, const N: usize, const I: usize, const O: usize> {
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_arrays"))]
    inlet_flows: [Option<Signal<S>>; I],
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_arrays::matrix"))]
    feed: [[Option<Signal<S>>; N]; I],
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_arrays"))]
    outlet_flows: [Option<Signal<S>>; O],
    temperature: Option<Signal<S>>,
    level: Option<Signal<S>>,
}

/// Build one channel's signal into its slot. Out of line and in place: a
/// signal is ~180 bytes, and eleven inlined builds that return one by value
/// and move it into the array cost a gateway image ~2 KB of copies.
#[inline(never)]
fn build<S: Scalar>(
    slot: &mut Option<Signal<S>>,
    spec: &Option<SignalSpec<S>>,
) -> Result<(), Error> {
    *slot = match spec {
        None => None,
        Some(s) => Some(Signal::new(*s)?),
    };
    Ok(())
}

/// Condition one input: through its signal if it has one. Accumulates the
/// flags and the count of readings that were not `Good`; returns the value
/// and its quality.
#[inline]
fn one<S: Scalar>(
    signal: &mut Option<Signal<S>>,
    raw: S,
    now: Millis,
    flags: &mut SignalFlags,
    not_good: &mut u16,
) -> (S, Quality) {
    match signal {
        None => (raw, Quality::Good),
        Some(sig) => {
            let r = sig.update(raw, now);
            *flags |= r.flags;
            if r.quality != Quality::Good {
                *not_good = not_good.saturating_add(1);
            }
            (r.value, r.quality)
        }
    }
}

impl<S: Scalar, const N: usize, const I: usize, const O: usize> Channels<S, N, I, O> {
    /// Check every specification and build the signals.
    ///
    /// Errors: those of [`Signal::new`].
    pub fn new(spec: &ChannelSpecs<S, N, I, O>) -> Result<Self, Error> {
        let mut c = Self {
            inlet_flows: [None; I],
            feed: [[None; N]; I],
            outlet_flows: [None; O],
            temperature: None,
            level: None,
        };
        for (s, sp) in c.inlet_flows.iter_mut().zip(spec.inlet_flows.iter()) {
            build(s, sp)?;
        }
        for (row, sp_row) in c.feed.iter_mut().zip(spec.feed.iter()) {
            for (s, sp) in row.iter_mut().zip(sp_row.iter()) {
                build(s, sp)?;
            }
        }
        for (s, sp) in c.outlet_flows.iter_mut().zip(spec.outlet_flows.iter()) {
            build(s, sp)?;
        }
        build(&mut c.temperature, &spec.temperature)?;
        build(&mut c.level, &spec.level)?;
        Ok(c)
    }

    /// True if there is a level channel.
    pub fn has_level(&self) -> bool {
        self.level.is_some()
    }

    /// The signal of a channel, if it is conditioned.
    pub fn signal(&self, ch: Channel) -> Option<&Signal<S>> {
        match ch {
            Channel::InletFlow(k) => self.inlet_flows.get(usize::from(k))?.as_ref(),
            Channel::Feed(k, i) => self.feed.get(usize::from(k))?.get(usize::from(i))?.as_ref(),
            Channel::OutletFlow(k) => self.outlet_flows.get(usize::from(k))?.as_ref(),
            Channel::Temperature => self.temperature.as_ref(),
            Channel::Level => self.level.as_ref(),
        }
    }

    /// Condition every reading taken at `now`. Fixed work: one
    /// [`Signal::update`] per conditioned channel.
    pub fn condition(
        &mut self,
        raw: &Readings<S, N, I, O>,
        now: Millis,
    ) -> Conditioned<S, N, I, O> {
        let mut flags = SignalFlags::NONE;
        let mut not_good = 0u16;
        let mut quality = InputQuality::<N>::good();
        let mut inputs = Inputs {
            inlet_flows: [S::ZERO; I],
            feed: [[S::ZERO; N]; I],
            outlet_flows: [S::ZERO; O],
            temperature: S::ZERO,
        };
        for k in 0..I {
            let (v, q) = one(
                &mut self.inlet_flows[k],
                raw.inlet_flows[k],
                now,
                &mut flags,
                &mut not_good,
            );
            inputs.inlet_flows[k] = v;
            quality.flow = Quality::worst(quality.flow, q);
            for i in 0..N {
                let (v, q) = one(
                    &mut self.feed[k][i],
                    raw.feed[k][i],
                    now,
                    &mut flags,
                    &mut not_good,
                );
                inputs.feed[k][i] = v;
                quality.feed[i] = Quality::worst(quality.feed[i], q);
            }
        }
        for k in 0..O {
            let (v, q) = one(
                &mut self.outlet_flows[k],
                raw.outlet_flows[k],
                now,
                &mut flags,
                &mut not_good,
            );
            inputs.outlet_flows[k] = v;
            quality.flow = Quality::worst(quality.flow, q);
        }
        let (t, q) = one(
            &mut self.temperature,
            raw.temperature,
            now,
            &mut flags,
            &mut not_good,
        );
        inputs.temperature = t;
        quality.temperature = q;
        let level = match self.level.as_mut() {
            None => None,
            Some(sig) => {
                let r = sig.update(raw.level, now);
                flags |= r.flags;
                if r.quality != Quality::Good {
                    not_good = not_good.saturating_add(1);
                }
                quality.level = r.quality;
                Some(r)
            }
        };
        Conditioned {
            inputs,
            level,
            quality,
            flags,
            not_good,
        }
    }

    /// True when `other` (a decoded checkpoint) has the same specifications
    /// channel by channel.
    #[cfg(feature = "serde")]
    pub fn same_specs(&self, other: &Self) -> bool {
        fn eq<S: Scalar>(a: &Option<Signal<S>>, b: &Option<Signal<S>>) -> bool {
            match (a, b) {
                (None, None) => true,
                (Some(a), Some(b)) => a.spec() == b.spec() && b.state_ok(),
                _ => false,
            }
        }
        self.inlet_flows
            .iter()
            .zip(other.inlet_flows.iter())
            .all(|(a, b)| eq(a, b))
            && self
                .feed
                .iter()
                .flatten()
                .zip(other.feed.iter().flatten())
                .all(|(a, b)| eq(a, b))
            && self
                .outlet_flows
                .iter()
                .zip(other.outlet_flows.iter())
                .all(|(a, b)| eq(a, b))
            && eq(&self.temperature, &other.temperature)
            && eq(&self.level, &other.level)
    }
}
