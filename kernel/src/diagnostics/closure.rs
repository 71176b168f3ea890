//! Balance closure: the CUSUM and the window residual of level against flows.

use crate::{Compensated, Error, Scalar};

// ---------------------------------------------------------------------------
// CUSUM
// ---------------------------------------------------------------------------

/// Which side of a two-sided CUSUM is in alarm.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum CusumSide {
    /// The upper statistic `S⁺` exceeds the decision interval: the mean has
    /// shifted up.
    Upper,
    /// The lower statistic `S⁻` exceeds the decision interval: the mean has
    /// shifted down.
    Lower,
}

/// Two-sided tabular CUSUM of standardised observations (Page, *Continuous
/// inspection schemes*, Biometrika 41, 1954).
///
/// ```text
/// S⁺ ← max(0, S⁺ + x − k)      S⁻ ← max(0, S⁻ − x − k)
/// ```
///
/// starting from zero; the alarm is raised while `S⁺ > h` or `S⁻ > h`. `k`
/// and `h` are in units of the observations' standard deviation (commonly
/// `k = 0.5`, half the shift to detect, and `h = 4` or `5`).
///
/// Both statistics are limited to `2h`: this does not change when an alarm is
/// first raised, and it lets the alarm clear by itself about `h/k`
/// observations after the shift has gone, instead of after as many as it
/// lasted. When a side's alarm clears (its statistic falls back to `h`),
/// that side restarts from zero, so that the next in-control run is as long
/// as the tables say (without the restart, a statistic left just below `h`
/// alarms again within a few observations: in a simulated clean year with
/// `h = 7` that tripled the alarm count). [`Cusum::reset`] clears it at
/// once (acknowledge). A non-finite observation is skipped.
#[cfg_attr(feature = "serde", derive(serde::Serialize, serde::Deserialize))]
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Cusum<S> {
    k: S,
    h: S,
    upper: S,
    lower: S,
}

impl<S: Scalar> Cusum<S> {
    /// A CUSUM with reference value `k ≥ 0` and decision interval `h > 0`.
    ///
    /// # Errors
    /// [`Error::ConfigNonFinite`] if either is NaN or infinite,
    /// [`Error::ConfigNonPositive`] if `k < 0` or `h ≤ 0`.
    pub fn new(k: S, h: S) -> Result<Self, Error> {
        if !k.is_finite() || !h.is_finite() {
            return Err(Error::ConfigNonFinite);
        }
        if k < S::ZERO || !(h > S::ZERO) {
            return Err(Error::ConfigNonPositive);
        }
        Ok(Self {
            k,
            h,
            upper: S::ZERO,
            lower: S::ZERO,
        })
    }

    /// Add one standardised observation; returns the alarm state after it.
    pub fn update(&mut self, x: S) -> Option<CusumSide> {
        if x.is_finite() {
            let cap = self.h + self.h;
            let h = self.h;
            // A side whose alarm ends (its statistic falls back to h)
            // restarts from zero: each alarm episode is then followed by
            // a fresh in-control run, as the ARL tables assume, instead of
            // a statistic left just below h that alarms again at once.
            let next = |s: S, d: S| {
                let n = (s + d).max(S::ZERO).min(cap);
                if s > h && n <= h {
                    S::ZERO
                } else {
                    n
                }
            };
            self.upper = next(self.upper, x - self.k);
            self.lower = next(self.lower, -x - self.k);
        }
        self.alarm()
    }

    /// The alarm state: the side whose statistic exceeds `h` (the larger one
    /// if both do).
    pub fn alarm(&self) -> Option<CusumSide> {
        let up = self.upper > self.h;
        let down = self.lower > self.h;
        match (up, down) {
            (true, true) if self.lower > self.upper => Some(CusumSide::Lower),
            (true, _) => Some(CusumSide::Upper),
            (false, true) => Some(CusumSide::Lower),
            (false, false) => None,
        }
    }

    /// The upper statistic `S⁺`.
    pub fn upper(&self) -> S {
        self.upper
    }

    /// The lower statistic `S⁻`.
    pub fn lower(&self) -> S {
        self.lower
    }

    /// The reference value `k`.
    pub fn k(&self) -> S {
        self.k
    }

    /// The decision interval `h`.
    pub fn h(&self) -> S {
        self.h
    }

    /// Set both statistics to zero (clears the alarm).
    pub fn reset(&mut self) {
        self.upper = S::ZERO;
        self.lower = S::ZERO;
    }
}

// ---------------------------------------------------------------------------
// Balance closure
// ---------------------------------------------------------------------------

/// The sign of a balance that does not close.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum ClosureAlarm {
    /// The level says more left (or less came in) than the flow meters say:
    /// a leak or unmetered outlet, an outlet meter reading low, an inlet meter
    /// reading high, or the level transmitter drifting down.
    MoreOutThanIn,
    /// The level says more came in (or less left) than the flow meters say:
    /// an unmetered inlet, an inlet meter reading low, an outlet meter
    /// reading high, or the level transmitter drifting up.
    MoreInThanOut,
}

impl ClosureAlarm {
    /// The closure alarm for a CUSUM side (upper: residual positive, more in
    /// than out).
    pub const fn from_side(side: CusumSide) -> Self {
        match side {
            CusumSide::Upper => ClosureAlarm::MoreInThanOut,
            CusumSide::Lower => ClosureAlarm::MoreOutThanIn,
        }
    }

    /// A fixed description for reports.
    pub const fn message(self) -> &'static str {
        match self {
            ClosureAlarm::MoreOutThanIn => "balance does not close: more out than in",
            ClosureAlarm::MoreInThanOut => "balance does not close: more in than out",
        }
    }
}

/// Configuration of a [`ClosureMonitor`].
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct ClosureConfig<S> {
    /// Ticks of flow in one window, `n ≥ 1` (a window takes `n + 1` ticks:
    /// one for its start reading).
    pub window_ticks: u32,
    /// Tick length, ms (≥ 1).
    pub tick_ms: u32,
    /// Standard deviation of one holdup reading from the level, m³
    /// (`A·σ_z`; ≥ 0).
    pub holdup_noise: S,
    /// Standard deviation of the net flow `Σq_in − Σq_out` as read in one
    /// tick, m³/s (≥ 0; white noise assumed).
    pub net_flow_noise: S,
    /// CUSUM reference value, in standard deviations of the window residual
    /// (≥ 0; 0.5 detects a shift of one standard deviation best).
    pub k: S,
    /// CUSUM decision interval, in standard deviations of the window
    /// residual (> 0).
    pub h: S,
}

impl<S: Scalar> ClosureConfig<S> {
    /// Standard deviation of one window residual while the balance closes,
    /// m³: `√(2·σ_V² + n·(σ_q·h)²)`.
    pub fn residual_sigma(&self) -> S {
        let tick = crate::units::seconds::<S>(self.tick_ms);
        let flow = self.net_flow_noise * tick;
        let n = S::of(f64::from(self.window_ticks));
        (S::TWO * self.holdup_noise * self.holdup_noise + n * flow * flow).sqrt()
    }
}

/// One closed window's residual.
#[cfg_attr(feature = "serde", derive(serde::Serialize, serde::Deserialize))]
#[derive(Clone, Copy, Debug, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct WindowResidual<S> {
    /// `ΔV_level − Σ(q_in − q_out)·h` over the window, m³ (negative: more
    /// out than in).
    pub volume: S,
    /// The residual divided by its standard deviation while the balance
    /// closes.
    pub normalised: S,
}

/// What one tick of the [`ClosureMonitor`] reports.
#[derive(Clone, Copy, Debug, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct ClosureReport<S> {
    /// The residual of the window that closed at this tick, if one did.
    pub window: Option<WindowResidual<S>>,
    /// The closure alarm after this tick.
    pub alarm: Option<ClosureAlarm>,
}

/// Balance-closure monitor: disjoint windows of level-derived holdup change
/// minus integrated net flow, normalised, into a two-sided [`Cusum`].
///
/// Fed once per tick by [`ClosureMonitor::update`] with the holdup read from
/// the level at the end of the tick and the in-minus-out volume the flow
/// meters say passed during it. A window starts at the first good holdup
/// reading, sums the net flow of the next `n` ticks, and closes with the
/// reading at the end of the `n`-th; if that reading is missing the window is
/// lost (counted) and the next good reading starts a new one. A non-finite
/// net flow loses the window too. Work per tick is constant.
#[cfg_attr(feature = "serde", derive(serde::Serialize, serde::Deserialize))]
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct ClosureMonitor<S> {
    window_ticks: u32,
    sigma: S,
    cusum: Cusum<S>,
    start: Option<S>,
    flow: Compensated<S>,
    ticks: u32,
    last: Option<WindowResidual<S>>,
    windows: u32,
    lost: u32,
}

impl<S: Scalar> ClosureMonitor<S> {
    #[cfg(feature = "serde")]
    /// The configuration part of the monitor (window, σ of the residual,
    /// `k`, `h`), for checkpoint fingerprints.
    pub(crate) fn config_key(&self) -> (u32, S, S, S) {
        (self.window_ticks, self.sigma, self.cusum.k, self.cusum.h)
    }

    #[cfg(feature = "serde")]
    /// True when `state` (a decoded checkpoint) has this monitor's
    /// configuration and a possible state: finite, sums non-negative, the
    /// open window shorter than the window length.
    pub(crate) fn accepts(&self, state: &Self) -> bool {
        let same = |a: S, b: S| a.to_f64().to_bits() == b.to_f64().to_bits();
        let (w, sg, k, h) = self.config_key();
        let (w2, sg2, k2, h2) = state.config_key();
        let fin = |x: S| x.is_finite();
        w == w2
            && same(sg, sg2)
            && same(k, k2)
            && same(h, h2)
            && fin(state.cusum.upper)
            && fin(state.cusum.lower)
            && state.cusum.upper >= S::ZERO
            && state.cusum.lower >= S::ZERO
            && state.start.is_none_or(fin)
            && fin(state.flow.value())
            && state.ticks <= state.window_ticks
            && state
                .last
                .is_none_or(|r| fin(r.volume) && fin(r.normalised))
    }

    /// A monitor with no window open and the CUSUM at zero.
    ///
    /// # Errors
    /// [`Error::ConfigZeroTick`] for a zero tick; [`Error::ConfigNonFinite`]
    /// for a NaN or infinite noise level, `k` or `h`;
    /// [`Error::ConfigNonPositive`] for zero window ticks, a negative noise
    /// level, both noise levels zero, `k < 0` or `h ≤ 0`.
    pub fn new(config: &ClosureConfig<S>) -> Result<Self, Error> {
        if config.tick_ms == 0 {
            return Err(Error::ConfigZeroTick);
        }
        if !config.holdup_noise.is_finite() || !config.net_flow_noise.is_finite() {
            return Err(Error::ConfigNonFinite);
        }
        if config.window_ticks == 0
            || config.holdup_noise < S::ZERO
            || config.net_flow_noise < S::ZERO
        {
            return Err(Error::ConfigNonPositive);
        }
        let cusum = Cusum::new(config.k, config.h)?;
        let sigma = config.residual_sigma();
        if !sigma.is_finite() {
            return Err(Error::ConfigNonFinite);
        }
        if !(sigma > S::ZERO) {
            return Err(Error::ConfigNonPositive);
        }
        Ok(Self {
            window_ticks: config.window_ticks,
            sigma,
            cusum,
            start: None,
            flow: Compensated::new(S::ZERO),
            ticks: 0,
            last: None,
            windows: 0,
            lost: 0,
        })
    }

    /// One tick: `holdup` is the holdup read from the level at the end of the
    /// tick, m³ (`None`, NaN or infinite when the reading is bad or the level
    /// is outside the transmitter's range); `net_inflow` is
    /// `Σ(q_in − q_out)·h` for the tick from the flow meters, m³.
    pub fn update(&mut self, holdup: Option<S>, net_inflow: S) -> ClosureReport<S> {
        let reading = holdup.filter(|v| v.is_finite());
        let mut closed = None;
        match self.start {
            None => self.begin(reading),
            Some(v0) => {
                if !net_inflow.is_finite() {
                    self.lost = self.lost.saturating_add(1);
                    self.begin(reading);
                } else {
                    self.flow.add(net_inflow);
                    self.ticks = self.ticks.saturating_add(1);
                    if self.ticks >= self.window_ticks {
                        self.start = None;
                        match reading {
                            Some(v1) => {
                                let volume = (v1 - v0) - self.flow.value();
                                let normalised = volume / self.sigma;
                                self.cusum.update(normalised);
                                let w = WindowResidual { volume, normalised };
                                self.last = Some(w);
                                self.windows = self.windows.saturating_add(1);
                                closed = Some(w);
                            }
                            None => self.lost = self.lost.saturating_add(1),
                        }
                    }
                }
            }
        }
        ClosureReport {
            window: closed,
            alarm: self.alarm(),
        }
    }

    fn begin(&mut self, reading: Option<S>) {
        self.start = reading;
        self.flow.set(S::ZERO);
        self.ticks = 0;
    }

    /// The closure alarm: the sign of a balance that does not close.
    pub fn alarm(&self) -> Option<ClosureAlarm> {
        self.cusum.alarm().map(ClosureAlarm::from_side)
    }

    /// The residual of the last closed window.
    pub fn last_window(&self) -> Option<WindowResidual<S>> {
        self.last
    }

    /// The CUSUM the window residuals feed.
    pub fn cusum(&self) -> &Cusum<S> {
        &self.cusum
    }

    /// Standard deviation of a window residual while the balance closes, m³.
    pub fn residual_sigma(&self) -> S {
        self.sigma
    }

    /// Windows closed and evaluated since construction (saturating).
    pub fn windows_evaluated(&self) -> u32 {
        self.windows
    }

    /// Windows lost to a missing end reading or a non-finite flow
    /// (saturating).
    pub fn windows_lost(&self) -> u32 {
        self.lost
    }

    /// Clear the CUSUM (acknowledge the alarm) and drop the open window.
    pub fn reset(&mut self) {
        self.cusum.reset();
        self.begin(None);
    }
}
