//! Diagnostics: does the balance close, does the observer's model fit the
//! measurements, and what should the device say about itself.
//!
//! Three independent pieces and one pure function that combines them:
//!
//! | item | question | method |
//! |---|---|---|
//! | [`ClosureMonitor`] | does the level follow the flows? | window residual `ΔV_level − Σ(q_in − q_out)·h`, normalised, two-sided CUSUM ([`Cusum`], Page 1954) |
//! | [`NisMonitor`] | are the observer's innovations as large as it predicts? | windowed normalised innovation squared against two-sided chi-square bounds ([`ChiSquareBounds`]) |
//! | [`diagnose`] | what does the device report? | NAMUR NE107 category ([`DeviceStatus`]) and a [`Quality`] per output value, by the rules tabulated there |
//!
//! Everything is fixed-size and `Copy` (the NIS window is a const-generic
//! array), does bounded work per tick, allocates nothing, cannot panic and
//! never fails on the tick: a missing or non-finite reading is skipped and
//! counted. Configuration is checked once, by the constructors.
//!
//! ## Balance closure
//!
//! With constant density, the holdup seen by the level transmitter must
//! change by what the flow meters say came in minus what went out. Over a
//! window of `n` ticks of length `h` the residual
//!
//! ```text
//! r = (V_level,end − V_level,start) − Σ (q_in − q_out)·h
//! ```
//!
//! is zero up to measurement noise. With independent white noise on each
//! holdup reading (standard deviation `σ_V`, m³; for a level transmitter
//! `σ_V ≈ A·σ_z` with `A` the cross-section at the working level) and on the
//! net flow of each tick (`σ_q`, m³/s, the in and out meters combined as
//! `√(σ_in² + σ_out²)`), its standard deviation is
//!
//! ```text
//! σ_r = √(2·σ_V² + n·(σ_q·h)²)
//! ```
//!
//! and `x = r/σ_r` is a standard normal while the balance closes. Windows are
//! **disjoint** — the reading that ends one window does not start the next;
//! the tick after a window only supplies the next start reading, so one tick
//! in `n + 1` is not covered — and therefore the `x` of successive windows
//! are independent, which is what the CUSUM's average-run-length tables
//! assume. (Residuals formed every tick, or over sliding windows, are
//! strongly correlated: consecutive sliding windows share `n − 1` ticks, and
//! consecutive windows that share an end reading are negatively correlated
//! through it, so the sum of their residuals telescopes and the tabulated run
//! lengths would not hold. A tick-by-tick residual also has the worst
//! signal-to-noise ratio: the level term `√2·σ_V` does not shrink with the
//! window while a leak's effect grows with `n`.)
//!
//! Each window's `x` feeds a two-sided [`Cusum`] with reference value `k`
//! and decision interval `h` in units of `σ_r`. Its alarm carries the sign:
//!
//! | CUSUM side | residual | [`ClosureAlarm`] | typical causes |
//! |---|---|---|---|
//! | lower (`S⁻ > h`) | `r < 0`: the level rises slower / falls faster than the flows say | [`ClosureAlarm::MoreOutThanIn`] | a leak or an unmetered outlet (drain, overflow line, open valve); outlet meter reading low; inlet meter reading high; level transmitter drifting down |
//! | upper (`S⁺ > h`) | `r > 0`: the level rises faster / falls slower than the flows say | [`ClosureAlarm::MoreInThanOut`] | an unmetered inlet (passing valve, flush, condensate); inlet meter reading low; outlet meter reading high; level transmitter drifting up |
//!
//! The sign says which way the books are out, not which instrument is wrong:
//! a leak and an inlet meter reading high give the same alarm.
//!
//! Assumptions the normalisation rests on (each makes `σ_r` too small and
//! false alarms more frequent when violated): constant density (a
//! temperature swing changes the volume without any flow), white flow noise
//! (a damped transmitter's noise is correlated across ticks — configure a
//! larger `σ_q`), a level transmitter inside its range (give `None` for the
//! holdup while the vessel is empty or overflowing) and a cross-section
//! known to the accuracy of `σ_V`.
//!
//! ## Model mismatch
//!
//! An observer with innovation `ν` (dimension `m`) and predicted innovation
//! covariance `S` has `ε = νᵀ S⁻¹ ν` distributed as chi-square with `m`
//! degrees of freedom when its model and noise levels are right. Over a
//! window of `W` updates the sum of `ε` is chi-square with the sum of the
//! `m` as degrees of freedom (Bar-Shalom, Li and Kirubarajan, *Estimation
//! with Applications to Tracking and Navigation*, 2001, §5.4). [`NisMonitor`]
//! compares that sum with the two-sided bounds at a configured probability:
//! above the upper bound the filter is **overconfident** (its innovations are
//! larger than it thinks: model error, or process noise set too low); below
//! the lower bound it is **too cautious** (noise set too high).
//!
//! ## Device status (NAMUR NE107)
//!
//! [`diagnose`] maps the kernel's [`StatusFlags`], the closure alarm, the NIS
//! state, the qualities of the inputs and a function-check switch to one of
//! the NE107 categories and a [`Quality`] per output value. Its rules are
//! tabulated in its documentation. [`Quality`] is the signal layer's
//! ([`crate::signal::Quality`], re-exported here): input and output
//! qualities are one type, ordered `Good < Uncertain < Bad`.

use crate::observer::Update;
pub use crate::signal::Quality;
use crate::{Compensated, Error, Scalar, StatusFlags};

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
/// lasted. [`Cusum::reset`] clears it at once (acknowledge). A non-finite
/// observation is skipped.
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
            self.upper = (self.upper + x - self.k).max(S::ZERO).min(cap);
            self.lower = (self.lower - x - self.k).max(S::ZERO).min(cap);
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

// ---------------------------------------------------------------------------
// Chi-square bounds
// ---------------------------------------------------------------------------

/// Degrees of freedom up to which [`ChiSquareBounds`] holds exact quantiles
/// (computed at construction); above, Wilson–Hilferty.
pub const EXACT_DOF: usize = 32;

/// Two-sided chi-square bounds at a fixed probability, for any degrees of
/// freedom.
///
/// For probability `P` the bounds are the `(1 − P)/2` and `(1 + P)/2`
/// quantiles. For `ν ≤` [`EXACT_DOF`] they are computed once, at
/// construction, in `f64`, by bisecting the closed-form chi-square survival
/// function for integer `ν` (a finite sum with `exp` and, for odd `ν`,
/// `erfc`): exact to a few `f64` ulps before rounding to `S`. For larger `ν`
/// each call uses the Wilson–Hilferty approximation (Wilson and Hilferty,
/// 1931: `(χ²/ν)^{1/3}` is nearly normal with mean `1 − 2/(9ν)` and variance
/// `2/(9ν)`),
///
/// ```text
/// χ²_q(ν) ≈ ν·(1 − 2/(9ν) + z_q·√(2/(9ν)))³
/// ```
///
/// with the normal quantile `z_q` found at construction by bisecting
/// `erfc`. Its relative error against `statrs` over `33 ≤ ν ≤ 2000` is
/// largest at the lower bound and `ν = 33`: 0.012 %, 0.06 %, 0.26 % and
/// 0.73 % for `P` = 0.9, 0.95, 0.99 and 0.999, falling about as `ν^-1.7`
/// (see the tests). The upper bound is better still.
///
/// Construction does about 10⁴ evaluations of the survival function in
/// `f64` (64 bisections of at most 320 steps; bounded); do it at
/// configuration time. [`ChiSquareBounds::lower`] and
/// [`ChiSquareBounds::upper`] are constant-time.
#[cfg_attr(feature = "serde", derive(serde::Serialize, serde::Deserialize))]
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct ChiSquareBounds<S> {
    probability: S,
    z: S,
    lower: [S; EXACT_DOF],
    upper: [S; EXACT_DOF],
}

/// Survival function `Q(ν, x) = P(χ²_ν > x)` for integer `ν ≥ 1`, `x ≥ 0`
/// (closed forms: Abramowitz and Stegun 26.4.4–26.4.5).
fn chi2_sf(nu: u32, x: f64) -> f64 {
    if !(x > 0.0) {
        return 1.0;
    }
    let y = 0.5 * x;
    let e = libm::exp(-y);
    let half = nu / 2;
    if nu % 2 == 0 {
        // e^{−y} Σ_{j<ν/2} y^j / j!
        let mut term = 1.0;
        let mut sum = 1.0;
        for j in 1..half {
            term *= y / f64::from(j);
            sum += term;
        }
        e * sum
    } else {
        // erfc(√y) + e^{−y} Σ_{j=1}^{(ν−1)/2} y^{j−1/2} / Γ(j + 1/2)
        let r = libm::sqrt(y);
        let mut term = 2.0 * r / libm::sqrt(core::f64::consts::PI);
        let mut sum = 0.0;
        for j in 1..=half {
            sum += term;
            term *= y / (f64::from(j) + 0.5);
        }
        libm::erfc(r) + e * sum
    }
}

/// The `x` with `sf(x) = target` for a decreasing `sf` on `[0, ∞)` with
/// `sf(0) ≥ target`: bracket by doubling, then bisect (bounded loops).
fn solve_decreasing<F: Fn(f64) -> f64>(sf: F, target: f64) -> f64 {
    let mut lo = 0.0;
    let mut hi = 1.0;
    for _ in 0..64 {
        if sf(hi) < target {
            break;
        }
        lo = hi;
        hi *= 2.0;
    }
    for _ in 0..256 {
        let mid = 0.5 * (lo + hi);
        if !(mid > lo && mid < hi) {
            break;
        }
        if sf(mid) < target {
            hi = mid;
        } else {
            lo = mid;
        }
    }
    0.5 * (lo + hi)
}

impl<S: Scalar> ChiSquareBounds<S> {
    /// Bounds holding a chi-square variable with probability `probability`
    /// (e.g. 0.95: 2.5 % below the lower bound, 2.5 % above the upper).
    ///
    /// # Errors
    /// [`Error::ConfigProbability`] unless `0 < probability < 1`.
    pub fn new(probability: S) -> Result<Self, Error> {
        let p = probability.to_f64();
        if !(p > 0.0 && p < 1.0) {
            return Err(Error::ConfigProbability);
        }
        let tail = 0.5 * (1.0 - p);
        // Upper normal quantile: 0.5·erfc(z/√2) = tail.
        let z = solve_decreasing(
            |x| 0.5 * libm::erfc(x * core::f64::consts::FRAC_1_SQRT_2),
            tail,
        );
        let mut lower = [S::ZERO; EXACT_DOF];
        let mut upper = [S::ZERO; EXACT_DOF];
        for (i, (lo, hi)) in lower.iter_mut().zip(upper.iter_mut()).enumerate() {
            let nu = u32::try_from(i).unwrap_or(0).saturating_add(1);
            *lo = S::of(solve_decreasing(|x| chi2_sf(nu, x), 1.0 - tail));
            *hi = S::of(solve_decreasing(|x| chi2_sf(nu, x), tail));
        }
        Ok(Self {
            probability,
            z: S::of(z),
            lower,
            upper,
        })
    }

    /// The probability the bounds were built for.
    pub fn probability(&self) -> S {
        self.probability
    }

    /// The lower bound (the `(1 − P)/2` quantile) for `dof` degrees of
    /// freedom; 0 for `dof = 0`.
    pub fn lower(&self, dof: u32) -> S {
        self.bound(dof, &self.lower, -self.z)
    }

    /// The upper bound (the `(1 + P)/2` quantile) for `dof` degrees of
    /// freedom; 0 for `dof = 0`.
    pub fn upper(&self, dof: u32) -> S {
        self.bound(dof, &self.upper, self.z)
    }

    fn bound(&self, dof: u32, table: &[S; EXACT_DOF], z: S) -> S {
        let index = usize::try_from(dof).ok().and_then(|d| d.checked_sub(1));
        match index {
            None => S::ZERO,
            Some(i) => match table.get(i) {
                Some(&q) => q,
                None => {
                    let nu = S::of(f64::from(dof));
                    let c = S::TWO / (S::of(9.0) * nu);
                    let t = (S::ONE - c + z * c.sqrt()).max(S::ZERO);
                    nu * t * t * t
                }
            },
        }
    }
}

// ---------------------------------------------------------------------------
// NIS
// ---------------------------------------------------------------------------

/// The consistency of an observer's innovations over the window.
#[cfg_attr(feature = "serde", derive(serde::Serialize, serde::Deserialize))]
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Hash)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum NisState {
    /// Fewer samples than the window holds: not yet tested.
    #[default]
    Filling,
    /// Windowed NIS within the chi-square bounds.
    Consistent,
    /// Windowed NIS above the upper bound: innovations larger than the filter
    /// predicts (model mismatch, or process/measurement noise set too low).
    Overconfident,
    /// Windowed NIS below the lower bound: innovations smaller than the
    /// filter predicts (noise set too high).
    TooCautious,
}

/// What one [`NisMonitor::update`] reports.
#[cfg_attr(feature = "serde", derive(serde::Serialize, serde::Deserialize))]
#[derive(Clone, Copy, Debug, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct NisReport<S> {
    /// The test result after this update.
    pub state: NisState,
    /// Sum of the NIS values in the window.
    pub sum: S,
    /// Degrees of freedom of that sum (sum of the samples' dimensions).
    pub dof: u32,
    /// Lower chi-square bound for `dof`.
    pub lower: S,
    /// Upper chi-square bound for `dof`.
    pub upper: S,
}

/// Model-mismatch monitor: the sum of the last `W` normalised innovation
/// squared values against two-sided chi-square bounds.
///
/// Tested at every update once the window is full (a sliding window: each
/// test wrongly flags with probability `1 − P` when the filter is
/// consistent, but consecutive tests share `W − 1` samples, so flags come in
/// runs). Work per update is `O(W)` (the sum is recomputed, so rounding does
/// not accumulate). A NaN, infinite or negative NIS, or a sample with zero
/// degrees of freedom, is rejected (counted) and leaves the window as it was.
#[cfg_attr(
    feature = "serde",
    derive(serde::Serialize, serde::Deserialize),
    serde(bound(
        serialize = "S: serde::Serialize",
        deserialize = "S: serde::Deserialize<'de> + Copy + Default"
    ))
)]
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct NisMonitor<S, const W: usize> {
    bounds: ChiSquareBounds<S>,
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_arrays"))]
    values: [S; W],
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_arrays"))]
    dofs: [u8; W],
    next: usize,
    filled: usize,
    rejected: u32,
    last: NisReport<S>,
}

impl<S: Scalar, const W: usize> NisMonitor<S, W> {
    #[cfg(feature = "serde")]
    /// The test probability, for checkpoint fingerprints.
    pub(crate) fn config_key(&self) -> S {
        self.bounds.probability
    }

    #[cfg(feature = "serde")]
    /// True when `state` (a decoded checkpoint) has this monitor's bounds
    /// and a possible window: finite non-negative values, degrees of
    /// freedom at least 1 where filled, indices in range.
    pub(crate) fn accepts(&self, state: &Self) -> bool {
        let bits = |a: S| a.to_f64().to_bits();
        let same_bounds = bits(self.bounds.probability) == bits(state.bounds.probability)
            && bits(self.bounds.z) == bits(state.bounds.z)
            && self
                .bounds
                .lower
                .iter()
                .zip(state.bounds.lower.iter())
                .all(|(a, b)| bits(*a) == bits(*b))
            && self
                .bounds
                .upper
                .iter()
                .zip(state.bounds.upper.iter())
                .all(|(a, b)| bits(*a) == bits(*b));
        let filled = state.filled.min(W);
        same_bounds
            && state.next < W.max(1)
            && state.filled <= W
            && state.values.iter().all(|v| v.is_finite() && *v >= S::ZERO)
            && state.dofs.iter().take(filled).all(|d| *d >= 1)
            && state.last.sum.is_finite()
    }

    /// An empty window tested at probability `bounds.probability()`.
    ///
    /// # Errors
    /// [`Error::ConfigNonPositive`] for `W = 0`.
    pub fn new(bounds: ChiSquareBounds<S>) -> Result<Self, Error> {
        if W == 0 {
            return Err(Error::ConfigNonPositive);
        }
        Ok(Self {
            bounds,
            values: [S::ZERO; W],
            dofs: [0; W],
            next: 0,
            filled: 0,
            rejected: 0,
            last: NisReport {
                state: NisState::Filling,
                sum: S::ZERO,
                dof: 0,
                lower: S::ZERO,
                upper: S::ZERO,
            },
        })
    }

    /// Add one NIS value `νᵀS⁻¹ν` with its degrees of freedom (the
    /// innovation's dimension) and test the window.
    pub fn update(&mut self, nis: S, dof: u8) -> NisReport<S> {
        if !nis.is_finite() || nis < S::ZERO || dof == 0 {
            self.rejected = self.rejected.saturating_add(1);
            return self.last;
        }
        if let (Some(v), Some(d)) = (self.values.get_mut(self.next), self.dofs.get_mut(self.next)) {
            *v = nis;
            *d = dof;
        }
        self.next = if self.next + 1 >= W { 0 } else { self.next + 1 };
        if self.filled < W {
            self.filled += 1;
        }
        let mut sum = S::ZERO;
        let mut total: u32 = 0;
        for (v, d) in self.values.iter().zip(self.dofs.iter()).take(self.filled) {
            sum += *v;
            total = total.saturating_add(u32::from(*d));
        }
        let lower = self.bounds.lower(total);
        let upper = self.bounds.upper(total);
        let state = if self.filled < W {
            NisState::Filling
        } else if sum > upper {
            NisState::Overconfident
        } else if sum < lower {
            NisState::TooCautious
        } else {
            NisState::Consistent
        };
        self.last = NisReport {
            state,
            sum,
            dof: total,
            lower,
            upper,
        };
        self.last
    }

    /// Add the NIS of an observer measurement update (dimension 1: the
    /// observer's updates are scalar). Gate-rejected updates count too — the
    /// innovation happened, and leaving out the large ones would bias the
    /// test towards "consistent"; skipped updates add nothing.
    pub fn record(&mut self, update: &Update<S>) -> NisReport<S> {
        match *update {
            Update::Accepted { nis } | Update::Rejected { nis } => self.update(nis, 1),
            Update::Skipped => self.last,
        }
    }

    /// The result of the last accepted update.
    pub fn report(&self) -> NisReport<S> {
        self.last
    }

    /// The current test result.
    pub fn state(&self) -> NisState {
        self.last.state
    }

    /// Samples rejected as non-finite, negative or of zero dimension
    /// (saturating).
    pub fn rejected(&self) -> u32 {
        self.rejected
    }

    /// The bounds in use.
    pub fn bounds(&self) -> &ChiSquareBounds<S> {
        &self.bounds
    }

    /// Empty the window (state back to [`NisState::Filling`]).
    pub fn reset(&mut self) {
        self.next = 0;
        self.filled = 0;
        self.last.state = NisState::Filling;
        self.last.sum = S::ZERO;
        self.last.dof = 0;
        self.last.lower = S::ZERO;
        self.last.upper = S::ZERO;
    }
}

// ---------------------------------------------------------------------------
// NE107 status and quality
// ---------------------------------------------------------------------------

/// Device status in the NAMUR NE107 categories (plus no diagnostic).
///
/// Ordered by precedence: `Good < MaintenanceRequired < OutOfSpecification <
/// FunctionCheck < Failure`; when several apply, the highest is reported.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, PartialOrd, Ord, Hash)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum DeviceStatus {
    /// No diagnostic: outputs valid.
    #[default]
    Good,
    /// Maintenance required (M): outputs still valid, but an input or the
    /// observer's tuning needs attention.
    MaintenanceRequired,
    /// Out of specification (S): the process or a diagnostic is outside the
    /// conditions the outputs are specified for.
    OutOfSpecification,
    /// Function check (C): outputs temporarily not from normal operation
    /// (simulation, calibration, maintenance mode, estimator start-up), as
    /// declared by the caller.
    FunctionCheck,
    /// Failure (F): an output is invalid.
    Failure,
}

impl DeviceStatus {
    /// The NE107 letter (`F`, `C`, `S`, `M`; `-` for good).
    pub const fn letter(self) -> char {
        match self {
            DeviceStatus::Good => '-',
            DeviceStatus::MaintenanceRequired => 'M',
            DeviceStatus::OutOfSpecification => 'S',
            DeviceStatus::FunctionCheck => 'C',
            DeviceStatus::Failure => 'F',
        }
    }
}

/// The rules of [`diagnose`] that fired (a set of bits; see the table there).
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Hash)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Reasons(u32);

impl Reasons {
    /// No rule fired.
    pub const NONE: Self = Self(0);
    /// The kernel's stage solve failed ([`StatusFlags::NUMERIC_FAULT`]).
    pub const NUMERIC_FAULT: Self = Self(1 << 0);
    /// The flow inputs are bad.
    pub const FLOW_BAD: Self = Self(1 << 1);
    /// Flows bad and level not good: nothing left to tell the holdup.
    pub const NO_HOLDUP_SOURCE: Self = Self(1 << 2);
    /// A species' feed composition is bad.
    pub const FEED_BAD: Self = Self(1 << 3);
    /// The caller declared a function check.
    pub const FUNCTION_CHECK: Self = Self(1 << 4);
    /// The vessel is empty or below the minimum observable holdup
    /// ([`StatusFlags::EMPTY`], [`StatusFlags::NEAR_EMPTY`]).
    pub const LOW_HOLDUP: Self = Self(1 << 5);
    /// The vessel overflowed ([`StatusFlags::OVERFLOW`]).
    pub const OVERFLOW: Self = Self(1 << 6);
    /// The measured outflow was more than the vessel held
    /// ([`StatusFlags::OUTLET_LIMITED`]).
    pub const OUTLET_LIMITED: Self = Self(1 << 7);
    /// The balance does not close (either sign).
    pub const CLOSURE: Self = Self(1 << 8);
    /// The observer is overconfident ([`NisState::Overconfident`]).
    pub const NIS_OVERCONFIDENT: Self = Self(1 << 9);
    /// A non-finite input was replaced ([`StatusFlags::INPUT_NOT_FINITE`]).
    pub const INPUT_NOT_FINITE: Self = Self(1 << 10);
    /// The temperature input is bad.
    pub const TEMPERATURE_BAD: Self = Self(1 << 11);
    /// The level input is bad.
    pub const LEVEL_BAD: Self = Self(1 << 12);
    /// The flow inputs are uncertain.
    pub const FLOW_UNCERTAIN: Self = Self(1 << 13);
    /// The level input is uncertain.
    pub const LEVEL_UNCERTAIN: Self = Self(1 << 14);
    /// The temperature input is uncertain.
    pub const TEMPERATURE_UNCERTAIN: Self = Self(1 << 15);
    /// A species' feed composition is uncertain.
    pub const FEED_UNCERTAIN: Self = Self(1 << 16);
    /// The observer is too cautious ([`NisState::TooCautious`]).
    pub const NIS_TOO_CAUTIOUS: Self = Self(1 << 17);
    /// A negative input was replaced by zero
    /// ([`StatusFlags::INPUT_NEGATIVE`]).
    pub const INPUT_NEGATIVE: Self = Self(1 << 18);

    /// Names of the set reasons, in bit order (fixed strings, for reports).
    pub fn names(self) -> impl Iterator<Item = &'static str> {
        RULES
            .into_iter()
            .filter(move |r| self.contains(r.reason))
            .map(|r| r.name)
    }
}

crate::status::flag_set_ops!(Reasons, u32);

/// Everything [`diagnose`] looks at.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct DiagnosticInputs<const N: usize> {
    /// The kernel's flags for the period reported (one tick's, or several
    /// accumulated with `|`).
    pub flags: StatusFlags,
    /// Worst quality of the inlet and outlet flow readings.
    pub flow: Quality,
    /// Quality of the level reading.
    pub level: Quality,
    /// Quality of the temperature reading.
    pub temperature: Quality,
    /// Quality of each species' feed composition (worst over the inlets).
    pub feed: [Quality; N],
    /// The balance-closure alarm ([`ClosureMonitor::alarm`]).
    pub closure: Option<ClosureAlarm>,
    /// The model-mismatch state ([`NisMonitor::state`]).
    pub nis: NisState,
    /// The caller's function-check switch: simulation, calibration,
    /// maintenance mode or estimator start-up.
    pub function_check: bool,
}

impl<const N: usize> DiagnosticInputs<N> {
    /// Nothing wrong: no flags, every input good, no alarm, NIS consistent,
    /// no function check.
    pub const fn healthy() -> Self {
        Self {
            flags: StatusFlags::NONE,
            flow: Quality::Good,
            level: Quality::Good,
            temperature: Quality::Good,
            feed: [Quality::Good; N],
            closure: None,
            nis: NisState::Consistent,
            function_check: false,
        }
    }
}

/// The device status and the quality of each output value.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Diagnosis<const N: usize> {
    /// The NE107 category.
    pub status: DeviceStatus,
    /// Quality of the holdup (and the level computed from it).
    pub holdup: Quality,
    /// Quality of each species' concentration (and amount).
    pub concentrations: [Quality; N],
    /// The rules that fired.
    pub reasons: Reasons,
}

/// One row of the [`diagnose`] table.
#[derive(Clone, Copy)]
struct Rule {
    reason: Reasons,
    name: &'static str,
    status: DeviceStatus,
    holdup: Quality,
    concentrations: Quality,
    /// The concentration effect applies to the offending species only.
    per_species: bool,
}

const fn rule(
    reason: Reasons,
    name: &'static str,
    status: DeviceStatus,
    holdup: Quality,
    concentrations: Quality,
) -> Rule {
    Rule {
        reason,
        name,
        status,
        holdup,
        concentrations,
        per_species: false,
    }
}

const fn species_rule(
    reason: Reasons,
    name: &'static str,
    status: DeviceStatus,
    concentrations: Quality,
) -> Rule {
    Rule {
        reason,
        name,
        status,
        holdup: Quality::Good,
        concentrations,
        per_species: true,
    }
}

use DeviceStatus::{Failure, FunctionCheck, MaintenanceRequired, OutOfSpecification};
use Quality::{Bad, Good, Uncertain};

/// The table of [`diagnose`], in bit order (keep in step with its docs).
const RULES: [Rule; 19] = [
    rule(Reasons::NUMERIC_FAULT, "numeric_fault", Failure, Good, Bad),
    rule(Reasons::FLOW_BAD, "flow_bad", Failure, Uncertain, Bad),
    rule(
        Reasons::NO_HOLDUP_SOURCE,
        "no_holdup_source",
        Failure,
        Bad,
        Bad,
    ),
    species_rule(Reasons::FEED_BAD, "feed_bad", Failure, Bad),
    rule(
        Reasons::FUNCTION_CHECK,
        "function_check",
        FunctionCheck,
        Uncertain,
        Uncertain,
    ),
    rule(
        Reasons::LOW_HOLDUP,
        "low_holdup",
        OutOfSpecification,
        Good,
        Uncertain,
    ),
    rule(
        Reasons::OVERFLOW,
        "overflow",
        OutOfSpecification,
        Uncertain,
        Uncertain,
    ),
    rule(
        Reasons::OUTLET_LIMITED,
        "outlet_limited",
        OutOfSpecification,
        Uncertain,
        Uncertain,
    ),
    rule(
        Reasons::CLOSURE,
        "closure",
        OutOfSpecification,
        Uncertain,
        Uncertain,
    ),
    rule(
        Reasons::NIS_OVERCONFIDENT,
        "nis_overconfident",
        OutOfSpecification,
        Uncertain,
        Uncertain,
    ),
    rule(
        Reasons::INPUT_NOT_FINITE,
        "input_not_finite",
        OutOfSpecification,
        Good,
        Uncertain,
    ),
    rule(
        Reasons::TEMPERATURE_BAD,
        "temperature_bad",
        OutOfSpecification,
        Good,
        Uncertain,
    ),
    rule(
        Reasons::LEVEL_BAD,
        "level_bad",
        MaintenanceRequired,
        Uncertain,
        Good,
    ),
    rule(
        Reasons::FLOW_UNCERTAIN,
        "flow_uncertain",
        MaintenanceRequired,
        Uncertain,
        Uncertain,
    ),
    rule(
        Reasons::LEVEL_UNCERTAIN,
        "level_uncertain",
        MaintenanceRequired,
        Uncertain,
        Good,
    ),
    rule(
        Reasons::TEMPERATURE_UNCERTAIN,
        "temperature_uncertain",
        MaintenanceRequired,
        Good,
        Uncertain,
    ),
    species_rule(
        Reasons::FEED_UNCERTAIN,
        "feed_uncertain",
        MaintenanceRequired,
        Uncertain,
    ),
    rule(
        Reasons::NIS_TOO_CAUTIOUS,
        "nis_too_cautious",
        MaintenanceRequired,
        Good,
        Good,
    ),
    rule(
        Reasons::INPUT_NEGATIVE,
        "input_negative",
        MaintenanceRequired,
        Good,
        Good,
    ),
];

/// Map the diagnostic inputs to an NE107 status and output qualities.
///
/// Every rule whose condition holds fires; the status is the highest
/// category among them (precedence F > C > S > M > good), each output's
/// quality the worst any of them sets ("–": not affected; "species" rules
/// affect only the species whose feed is concerned). Nothing fired: status
/// good, every output good.
///
/// | bit | reason | condition | status | holdup | concentrations |
/// |---|---|---|---|---|---|
/// | 0 | `NUMERIC_FAULT` | flag `NUMERIC_FAULT` (amounts held) | Failure | – | Bad |
/// | 1 | `FLOW_BAD` | flow quality Bad (transport unknown) | Failure | Uncertain | Bad |
/// | 2 | `NO_HOLDUP_SOURCE` | flow Bad and level not Good | Failure | Bad | Bad |
/// | 3 | `FEED_BAD` | a species' feed quality Bad | Failure | – | Bad (species) |
/// | 4 | `FUNCTION_CHECK` | caller's function check | FunctionCheck | Uncertain | Uncertain |
/// | 5 | `LOW_HOLDUP` | flag `EMPTY` or `NEAR_EMPTY` (concentrations held) | OutOfSpecification | – | Uncertain |
/// | 6 | `OVERFLOW` | flag `OVERFLOW` (spill not metered) | OutOfSpecification | Uncertain | Uncertain |
/// | 7 | `OUTLET_LIMITED` | flag `OUTLET_LIMITED` (outflow exceeded holdup) | OutOfSpecification | Uncertain | Uncertain |
/// | 8 | `CLOSURE` | closure alarm, either sign (some volume reading is wrong) | OutOfSpecification | Uncertain | Uncertain |
/// | 9 | `NIS_OVERCONFIDENT` | NIS state Overconfident (model mismatch) | OutOfSpecification | Uncertain | Uncertain |
/// | 10 | `INPUT_NOT_FINITE` | flag `INPUT_NOT_FINITE` (an input replaced; which one is the caller's to mark) | OutOfSpecification | – | Uncertain |
/// | 11 | `TEMPERATURE_BAD` | temperature quality Bad (held at last good; rates stale) | OutOfSpecification | – | Uncertain |
/// | 12 | `LEVEL_BAD` | level quality Bad (holdup from flows alone, unchecked) | MaintenanceRequired | Uncertain | – |
/// | 13 | `FLOW_UNCERTAIN` | flow quality Uncertain | MaintenanceRequired | Uncertain | Uncertain |
/// | 14 | `LEVEL_UNCERTAIN` | level quality Uncertain | MaintenanceRequired | Uncertain | – |
/// | 15 | `TEMPERATURE_UNCERTAIN` | temperature quality Uncertain | MaintenanceRequired | – | Uncertain |
/// | 16 | `FEED_UNCERTAIN` | a species' feed quality Uncertain | MaintenanceRequired | – | Uncertain (species) |
/// | 17 | `NIS_TOO_CAUTIOUS` | NIS state TooCautious (noise set too high; estimates valid, stated uncertainty too large) | MaintenanceRequired | – | – |
/// | 18 | `INPUT_NEGATIVE` | flag `INPUT_NEGATIVE` (a reading below zero replaced by zero: check the meter's zero) | MaintenanceRequired | – | – |
///
/// Not rules: [`StatusFlags::AMOUNT_CLAMPED`] (rounding at zero when a
/// species is used up) and [`StatusFlags::METHOD_FALLBACK`] (by design) do
/// not lower anything; [`NisState::Filling`] is neither good nor bad news
/// (declare a function check during start-up if the outputs should say so).
pub fn diagnose<const N: usize>(inputs: &DiagnosticInputs<N>) -> Diagnosis<N> {
    let f = inputs.flags;
    let any_feed = |q: Quality| inputs.feed.contains(&q);
    let conditions = [
        f.contains(StatusFlags::NUMERIC_FAULT),
        inputs.flow == Bad,
        inputs.flow == Bad && inputs.level != Good,
        any_feed(Bad),
        inputs.function_check,
        f.contains(StatusFlags::EMPTY) || f.contains(StatusFlags::NEAR_EMPTY),
        f.contains(StatusFlags::OVERFLOW),
        f.contains(StatusFlags::OUTLET_LIMITED),
        inputs.closure.is_some(),
        inputs.nis == NisState::Overconfident,
        f.contains(StatusFlags::INPUT_NOT_FINITE),
        inputs.temperature == Bad,
        inputs.level == Bad,
        inputs.flow == Uncertain,
        inputs.level == Uncertain,
        inputs.temperature == Uncertain,
        any_feed(Uncertain),
        inputs.nis == NisState::TooCautious,
        f.contains(StatusFlags::INPUT_NEGATIVE),
    ];
    let mut out = Diagnosis {
        status: DeviceStatus::Good,
        holdup: Good,
        concentrations: [Good; N],
        reasons: Reasons::NONE,
    };
    for (rule, &fired) in RULES.iter().zip(conditions.iter()) {
        if !fired {
            continue;
        }
        out.reasons.insert(rule.reason);
        out.status = out.status.max(rule.status);
        out.holdup = Quality::worst(out.holdup, rule.holdup);
        if !rule.per_species {
            for c in out.concentrations.iter_mut() {
                *c = Quality::worst(*c, rule.concentrations);
            }
        }
    }
    // Species rules: each species' feed quality lowers its own
    // concentration (Bad → Bad, Uncertain → Uncertain).
    for (c, &q) in out.concentrations.iter_mut().zip(inputs.feed.iter()) {
        *c = Quality::worst(*c, q);
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;
    use statrs::distribution::{ChiSquared, ContinuousCDF};

    /// SplitMix64 (Steele, Lea and Flood, 2014) with Box–Muller normals:
    /// a fixed-seed, dependency-free generator for the Monte Carlo tests.
    struct Rng {
        state: u64,
        spare: Option<f64>,
    }

    impl Rng {
        fn new(seed: u64) -> Self {
            Self {
                state: seed,
                spare: None,
            }
        }

        fn next_u64(&mut self) -> u64 {
            self.state = self.state.wrapping_add(0x9E37_79B9_7F4A_7C15);
            let mut z = self.state;
            z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
            z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
            z ^ (z >> 31)
        }

        /// Uniform on (0, 1]: 53 random bits, never 0 (for the logarithm).
        fn uniform(&mut self) -> f64 {
            ((self.next_u64() >> 11) as f64 + 1.0) * (1.0 / (1u64 << 53) as f64)
        }

        fn normal(&mut self) -> f64 {
            if let Some(z) = self.spare.take() {
                return z;
            }
            let r = (-2.0 * self.uniform().ln()).sqrt();
            let t = 2.0 * core::f64::consts::PI * self.uniform();
            self.spare = Some(r * t.sin());
            r * t.cos()
        }
    }

    fn ok<T, E: core::fmt::Debug>(r: Result<T, E>) -> T {
        match r {
            Ok(v) => v,
            Err(e) => panic!("unexpected error: {e:?}"),
        }
    }

    // -- CUSUM ------------------------------------------------------------

    /// Mean and standard error of the run length to the first alarm of a
    /// two-sided CUSUM (k = 0.5, zero start) on N(shift, 1) observations.
    fn arl(h: f64, shift: f64, runs: u32, rng: &mut Rng) -> (f64, f64) {
        let mut cusum = ok(Cusum::new(0.5f64, h));
        let (mut sum, mut sum2) = (0.0f64, 0.0f64);
        for _ in 0..runs {
            cusum.reset();
            let mut n = 0u64;
            loop {
                n += 1;
                if cusum.update(shift + rng.normal()).is_some() {
                    break;
                }
            }
            let n = n as f64;
            sum += n;
            sum2 += n * n;
        }
        let runs = f64::from(runs);
        let mean = sum / runs;
        let var = (sum2 - runs * mean * mean) / (runs - 1.0);
        (mean, (var / runs).sqrt())
    }

    /// Average run lengths of the two-sided tabular CUSUM, k = 0.5σ,
    /// against the table in Montgomery, *Introduction to Statistical Quality
    /// Control* (CUSUM ARL table for k = 1/2, h = 4 and h = 5): 168 / 8.38
    /// and 465 / 10.4 in control / for a 1σ shift. The published values have
    /// three significant figures, so half a unit in the last place is added
    /// to three Monte Carlo standard errors.
    #[test]
    fn cusum_average_run_lengths_match_published_table() {
        let mut rng = Rng::new(0x5EED_C05A_0001);
        // (h, shift, published ARL, half a unit in its last place, runs)
        let cases = [
            (4.0, 0.0, 168.0, 0.5, 50_000),
            (4.0, 1.0, 8.38, 0.005, 200_000),
            (5.0, 0.0, 465.0, 0.5, 50_000),
            (5.0, 1.0, 10.4, 0.05, 200_000),
        ];
        for (h, shift, published, rounding, runs) in cases {
            let (mean, se) = arl(h, shift, runs, &mut rng);
            let tol = 3.0 * se + rounding;
            println!(
                "h = {h}, shift = {shift}σ: ARL {mean:.3} ± {se:.3} (MC s.e., {runs} runs), \
                 published {published}, |diff| {:.3} <= {tol:.3}",
                (mean - published).abs()
            );
            assert!(
                (mean - published).abs() <= tol,
                "h = {h}, shift {shift}: ARL {mean} vs published {published} (tol {tol})"
            );
        }
    }

    #[test]
    fn cusum_basics() {
        assert_eq!(Cusum::new(-0.1f64, 5.0), Err(Error::ConfigNonPositive));
        assert_eq!(Cusum::new(0.5f64, 0.0), Err(Error::ConfigNonPositive));
        assert_eq!(Cusum::new(f64::NAN, 5.0), Err(Error::ConfigNonFinite));
        let mut c = ok(Cusum::new(0.5f64, 4.0));
        // Exact arithmetic: S⁺ climbs by 1.5 per observation of 2.
        assert_eq!(c.update(2.0), None);
        assert_eq!(c.upper(), 1.5);
        assert_eq!(c.update(2.0), None);
        assert_eq!(c.update(2.0), Some(CusumSide::Upper)); // 4.5 > 4
        assert_eq!(c.upper(), 4.5);
        assert_eq!(c.alarm(), Some(CusumSide::Upper));
        // NaN is skipped.
        assert_eq!(c.update(f64::NAN), Some(CusumSide::Upper));
        assert_eq!(c.upper(), 4.5);
        // Limited at 2h = 8.
        for _ in 0..100 {
            c.update(10.0);
        }
        assert_eq!(c.upper(), 8.0);
        // Shift gone (x = 0): falls by k = 0.5 per observation and is no
        // longer above h = 4 after (8 − 4)/0.5 = 8 observations.
        for i in 0..7 {
            assert_eq!(c.update(0.0), Some(CusumSide::Upper), "obs {i}");
        }
        assert_eq!(c.update(0.0), None);
        // Lower side.
        c.reset();
        for _ in 0..3 {
            c.update(-2.0);
        }
        assert_eq!(c.alarm(), Some(CusumSide::Lower));
        assert_eq!(c.lower(), 4.5);
        assert_eq!(c.upper(), 0.0);
    }

    // -- Balance closure on a simulated tank --------------------------------

    #[derive(Clone, Copy, Debug, PartialEq)]
    enum Fault {
        None,
        /// An unmetered outflow of this fraction of the nominal throughput.
        Leak(f64),
        /// The inlet meter reads this factor times the true inflow.
        InletScale(f64),
        /// The outlet meter reads this factor times the true outflow.
        OutletScale(f64),
    }

    struct Outcome {
        /// Tick and sign of the first alarm.
        first_alarm: Option<(u64, ClosureAlarm)>,
        /// Normalised residuals of the windows before the fault's onset.
        clean: (f64, f64, usize),
        lost: u32,
    }

    const NOMINAL_FLOW: f64 = 1e-3; // m³/s (3.6 m³/h)
    const AREA: f64 = core::f64::consts::PI; // 2 m diameter, m²
    const LEVEL_NOISE: f64 = 2e-3; // m
    const METER_NOISE: f64 = 1e-5; // m³/s each meter (1 % of nominal)

    fn plant_config<S: Scalar>() -> ClosureConfig<S> {
        ClosureConfig {
            window_ticks: 600,
            tick_ms: 1000,
            holdup_noise: S::of(AREA * LEVEL_NOISE),
            net_flow_noise: S::of(METER_NOISE * core::f64::consts::SQRT_2),
            k: S::of(0.5),
            h: S::of(10.0),
        }
    }

    /// A vertical cylinder, 1 s ticks, inflow stepping every 2 h between
    /// 0.6 and 1.4 × nominal and outflow between 0.7 and 1.3 × nominal on a
    /// different cycle (the level wanders ±2 m), white noise on both meters
    /// and on the level, the level reading missing for 700 ticks in every
    /// 20,000 (so a window end is missed in each outage), and the fault
    /// switched on at `onset` (tick).
    fn run_tank<S: Scalar>(fault: Fault, onset: u64, ticks: u64, seed: u64) -> Outcome {
        let mut rng = Rng::new(seed);
        let mut monitor = ok(ClosureMonitor::<S>::new(&plant_config()));
        let mut volume = 15.0f64; // m³ (level 4.8 m)
        let mut first_alarm = None;
        let (mut sum, mut sum2, mut count) = (0.0, 0.0, 0usize);
        let inflow_cycle = [1.0, 1.4, 0.6, 1.2, 0.8, 1.0];
        let outflow_cycle = [1.0, 0.7, 1.3, 1.0, 1.1, 0.9, 1.0];
        for t in 0..ticks {
            let q_in = NOMINAL_FLOW * inflow_cycle[((t / 7200) % 6) as usize];
            let q_out = NOMINAL_FLOW * outflow_cycle[((t / 6000) % 7) as usize];
            let active = t >= onset;
            let leak = match fault {
                Fault::Leak(f) if active => f * NOMINAL_FLOW,
                _ => 0.0,
            };
            let (in_factor, out_factor) = match fault {
                Fault::InletScale(f) if active => (f, 1.0),
                Fault::OutletScale(f) if active => (1.0, f),
                _ => (1.0, 1.0),
            };
            volume += q_in - q_out - leak;
            let in_read = in_factor * q_in + METER_NOISE * rng.normal();
            let out_read = out_factor * q_out + METER_NOISE * rng.normal();
            let level = volume / AREA + LEVEL_NOISE * rng.normal();
            let holdup = if t % 20_000 < 700 {
                None
            } else {
                Some(S::of(AREA * level))
            };
            let report = monitor.update(holdup, S::of(in_read - out_read));
            if let Some(w) = report.window {
                if !active {
                    let x = w.normalised.to_f64();
                    sum += x;
                    sum2 += x * x;
                    count += 1;
                }
            }
            if first_alarm.is_none() {
                if let Some(a) = report.alarm {
                    first_alarm = Some((t, a));
                }
            }
        }
        assert!(
            volume > 1.0 && volume < 30.0,
            "simulated level out of range"
        );
        let n = count as f64;
        let mean = sum / n;
        let sd = ((sum2 - n * mean * mean) / (n - 1.0)).sqrt();
        Outcome {
            first_alarm,
            clean: (mean, sd, count),
            lost: monitor.windows_lost(),
        }
    }

    const DAY: u64 = 86_400;

    /// Three clean days (414 windows of 600 + 1 ticks evaluated, 12 lost to
    /// level outages) raise no alarm with
    /// k = 0.5, h = 10: the two-sided in-control ARL is about 7·10⁴ windows
    /// (Siegmund's approximation, `(e^{2Δb} − 2Δb − 1)/(2Δ²)` per side with
    /// Δ = 0.5, b = h + 1.166), so a false alarm in the period has
    /// probability ≈ 0.6 %. The normalised residuals are N(0, 1) within three
    /// standard errors (mean ±3/√n, standard deviation ±3/√(2n)), which checks
    /// the noise model `σ_r`.
    #[test]
    fn closure_no_false_alarm_over_three_clean_days() {
        for seed in [1u64, 2] {
            let out = run_tank::<f64>(Fault::None, u64::MAX, 3 * DAY, seed);
            let (mean, sd, n) = out.clean;
            println!(
                "seed {seed}: {n} windows, residual mean {mean:.3}, sd {sd:.3}, lost {}",
                out.lost
            );
            assert!(
                out.first_alarm.is_none(),
                "false alarm {:?}",
                out.first_alarm
            );
            let n = n as f64;
            assert!(n > 400.0);
            assert!(mean.abs() < 3.0 / n.sqrt(), "mean {mean}");
            assert!((sd - 1.0).abs() < 3.0 / (2.0 * n).sqrt(), "sd {sd}");
            // An outage (700 ticks, longer than a window) loses the window
            // open when it starts, if any: at most one per outage, and the
            // first outage is before any window opened, so at most 12.
            assert!(out.lost >= 6 && out.lost <= 12, "lost {}", out.lost);
        }
        // The same in f32.
        let out = run_tank::<f32>(Fault::None, u64::MAX, 3 * DAY, 3);
        assert!(out.first_alarm.is_none());
        assert!((out.clean.1 - 1.0).abs() < 0.15, "f32 sd {}", out.clean.1);
    }

    /// Faults of 3 % of the nominal throughput, switched on after a clean
    /// day: each window then shifts by about 1.2–2.8 σ_r (the level noise
    /// dominates σ_r ≈ 8.9 L; 3 % of 1 L/s over 600 s is 18 L), so the alarm
    /// comes within hours, never before the onset, and with the sign the
    /// documentation gives.
    #[test]
    fn closure_alarm_sign_for_leak_and_meter_errors() {
        let cases = [
            (Fault::Leak(0.03), ClosureAlarm::MoreOutThanIn),
            (Fault::InletScale(1.03), ClosureAlarm::MoreOutThanIn),
            (Fault::InletScale(0.97), ClosureAlarm::MoreInThanOut),
            (Fault::OutletScale(1.03), ClosureAlarm::MoreInThanOut),
            (Fault::OutletScale(0.97), ClosureAlarm::MoreOutThanIn),
        ];
        for (i, (fault, expected)) in cases.into_iter().enumerate() {
            for s in 0..2u64 {
                let seed = 100 + 10 * i as u64 + s;
                let out = run_tank::<f64>(fault, DAY, 2 * DAY, seed);
                let (t, alarm) = match out.first_alarm {
                    Some(a) => a,
                    None => panic!("{fault:?}: no alarm"),
                };
                let delay_h = (t - DAY) as f64 / 3600.0;
                println!("{fault:?} (seed {seed}): {alarm:?} after {delay_h:.2} h");
                assert!(t >= DAY, "{fault:?}: alarm before onset at {t}");
                assert_eq!(alarm, expected, "{fault:?}");
                assert!(delay_h < 6.0, "{fault:?}: alarm after {delay_h} h");
            }
        }
        // And in f32.
        let out = run_tank::<f32>(Fault::Leak(0.03), DAY, 2 * DAY, 7);
        assert!(matches!(out.first_alarm, Some((t, ClosureAlarm::MoreOutThanIn)) if t >= DAY));
    }

    #[test]
    fn closure_windows_exact_arithmetic() {
        let config = ClosureConfig {
            window_ticks: 4,
            tick_ms: 1000,
            holdup_noise: 0.5f64,
            net_flow_noise: 0.0,
            k: 0.5,
            h: 2.0,
        };
        let mut m = ok(ClosureMonitor::new(&config));
        assert_eq!(m.residual_sigma(), 0.5 * core::f64::consts::SQRT_2);
        // No start reading yet: flows ignored.
        assert_eq!(m.update(None, 1.0).window, None);
        // Start at 10; four ticks of +1 m³; end reading 13 → r = −1.
        assert_eq!(m.update(Some(10.0), 5.0).window, None);
        for _ in 0..3 {
            assert_eq!(m.update(Some(99.0), 1.0).window, None);
        }
        let w = m.update(Some(13.0), 1.0).window;
        assert_eq!(w.map(|w| w.volume), Some(-1.0));
        assert_eq!(m.windows_evaluated(), 1);
        // Next tick only gives the start reading (its flow is not counted).
        assert_eq!(m.update(Some(20.0), 1000.0).window, None);
        for _ in 0..3 {
            m.update(None, 0.5);
        }
        // Missing end reading: window lost.
        assert_eq!(m.update(None, 0.5).window, None);
        assert_eq!(m.windows_lost(), 1);
        // Non-finite flow loses the open window; this tick's reading starts
        // the next.
        m.update(Some(1.0), 0.0);
        m.update(Some(1.0), f64::NAN);
        assert_eq!(m.windows_lost(), 2);
        for _ in 0..3 {
            m.update(None, 0.0);
        }
        // r = 1 + 2 − 1 = 2 m³ → x = 2/0.707 = 2.83; S⁺ = 2.33 > h = 2.
        let r = m.update(Some(3.0), 0.0);
        assert_eq!(r.window.map(|w| w.volume), Some(2.0));
        assert_eq!(r.alarm, Some(ClosureAlarm::MoreInThanOut));
        m.reset();
        assert_eq!(m.alarm(), None);
    }

    #[test]
    fn closure_config_errors() {
        let good = ClosureConfig {
            window_ticks: 10,
            tick_ms: 1000,
            holdup_noise: 0.01f64,
            net_flow_noise: 1e-5,
            k: 0.5,
            h: 5.0,
        };
        assert!(ClosureMonitor::new(&good).is_ok());
        let bad = |c: ClosureConfig<f64>| ClosureMonitor::new(&c).err();
        assert_eq!(
            bad(ClosureConfig { tick_ms: 0, ..good }),
            Some(Error::ConfigZeroTick)
        );
        assert_eq!(
            bad(ClosureConfig {
                window_ticks: 0,
                ..good
            }),
            Some(Error::ConfigNonPositive)
        );
        assert_eq!(
            bad(ClosureConfig {
                holdup_noise: -1.0,
                ..good
            }),
            Some(Error::ConfigNonPositive)
        );
        assert_eq!(
            bad(ClosureConfig {
                holdup_noise: 0.0,
                net_flow_noise: 0.0,
                ..good
            }),
            Some(Error::ConfigNonPositive)
        );
        assert_eq!(
            bad(ClosureConfig {
                net_flow_noise: f64::INFINITY,
                ..good
            }),
            Some(Error::ConfigNonFinite)
        );
        assert_eq!(
            bad(ClosureConfig { h: 0.0, ..good }),
            Some(Error::ConfigNonPositive)
        );
        assert_eq!(
            bad(ClosureConfig {
                k: f64::NAN,
                ..good
            }),
            Some(Error::ConfigNonFinite)
        );
    }

    // -- Chi-square bounds and NIS -------------------------------------------

    /// Exact table (ν ≤ 32) against statrs' inverse CDF to 1e-9 relative
    /// (statrs inverts its CDF numerically; the table is bisected to full
    /// f64 precision); Wilson–Hilferty above against statrs, its worst
    /// relative error over 33 ≤ ν ≤ 2000 printed and held below 0.3 % for
    /// P ≤ 0.99 and 0.8 % for P = 0.999 (both at the lower bound, ν = 33).
    #[test]
    fn chi_square_bounds_against_statrs() {
        for (p, limit) in [(0.9f64, 3e-3), (0.95, 3e-3), (0.99, 3e-3), (0.999, 8e-3)] {
            let b = ok(ChiSquareBounds::new(p));
            let bf = ok(ChiSquareBounds::new(p as f32));
            let tail = 0.5 * (1.0 - p);
            let mut worst: (f64, u32, &str) = (0.0, 0, "");
            for nu in 1..=2000u32 {
                let d = ok(ChiSquared::new(f64::from(nu)));
                let lo = d.inverse_cdf(tail);
                let hi = d.inverse_cdf(1.0 - tail);
                let e_lo = (b.lower(nu) - lo).abs() / lo;
                let e_hi = (b.upper(nu) - hi).abs() / hi;
                if nu as usize <= EXACT_DOF {
                    assert!(
                        e_lo < 1e-9 && e_hi < 1e-9,
                        "p {p} ν {nu}: {e_lo:e} {e_hi:e}"
                    );
                    // The f32 table is for P rounded to f32.
                    let tf = 0.5 * (1.0 - f64::from(p as f32));
                    let (lo, hi) = (d.inverse_cdf(tf), d.inverse_cdf(1.0 - tf));
                    let f_lo = (f64::from(bf.lower(nu)) - lo).abs() / lo;
                    let f_hi = (f64::from(bf.upper(nu)) - hi).abs() / hi;
                    assert!(f_lo < 1e-6 && f_hi < 1e-6, "f32 p {p} ν {nu}");
                } else {
                    if e_lo > worst.0 {
                        worst = (e_lo, nu, "lower");
                    }
                    if e_hi > worst.0 {
                        worst = (e_hi, nu, "upper");
                    }
                }
            }
            println!(
                "P = {p}: Wilson–Hilferty worst relative error {:.2e} ({} bound, ν = {})",
                worst.0, worst.2, worst.1
            );
            assert!(worst.0 < limit, "P = {p}: {worst:?}");
        }
        assert_eq!(ChiSquareBounds::new(1.0f64), Err(Error::ConfigProbability));
        assert_eq!(ChiSquareBounds::new(0.0f64), Err(Error::ConfigProbability));
        assert_eq!(
            ChiSquareBounds::new(f64::NAN),
            Err(Error::ConfigProbability)
        );
        let b = ok(ChiSquareBounds::new(0.95f64));
        assert_eq!(b.lower(0), 0.0);
        assert_eq!(b.upper(0), 0.0);
        assert!(b.upper(u32::MAX).is_finite());
    }

    /// NIS of a consistent filter (sum of squares of two standard normals
    /// per update, W = 20, P = 0.95): each side flags in 2.5 % of the tests.
    /// Innovations √2 times too large: overconfident; √2 times too small: too
    /// cautious.
    #[test]
    fn nis_monitor_flags_mismatch() {
        let bounds = ok(ChiSquareBounds::new(0.95f64));
        let mut rng = Rng::new(42);
        for (scale, expect_over, expect_under) in
            [(1.0, 0.025, 0.025), (2.0, 0.8, 0.0), (0.5, 0.0, 0.75)]
        {
            let mut m = ok(NisMonitor::<f64, 20>::new(bounds));
            let (mut over, mut under, mut tests) = (0u32, 0u32, 0u32);
            for i in 0..200_000 {
                let a = rng.normal();
                let b = rng.normal();
                let r = m.update(scale * (a * a + b * b), 2);
                if i < 19 {
                    assert_eq!(r.state, NisState::Filling);
                    continue;
                }
                assert_eq!(r.dof, 40);
                tests += 1;
                match r.state {
                    NisState::Overconfident => over += 1,
                    NisState::TooCautious => under += 1,
                    NisState::Consistent => {}
                    NisState::Filling => panic!("still filling"),
                }
            }
            let fo = f64::from(over) / f64::from(tests);
            let fu = f64::from(under) / f64::from(tests);
            println!("NIS scale {scale}: overconfident {fo:.4}, too cautious {fu:.4}");
            if scale == 1.0 {
                // Sliding windows: ~10⁴ effectively independent tests, s.e.
                // of a 2.5 % fraction ≈ 0.0016 (doubled for overlap).
                assert!((fo - expect_over).abs() < 0.01, "{fo}");
                assert!((fu - expect_under).abs() < 0.01, "{fu}");
            } else if scale > 1.0 {
                assert!(fo > expect_over && fu < 1e-3, "{fo} {fu}");
            } else {
                assert!(fu > expect_under && fo < 1e-3, "{fo} {fu}");
            }
        }
    }

    #[test]
    fn nis_monitor_edges() {
        let bounds = ok(ChiSquareBounds::new(0.99f32));
        assert_eq!(
            NisMonitor::<f32, 0>::new(bounds).err(),
            Some(Error::ConfigNonPositive)
        );
        let mut m = ok(NisMonitor::<f32, 3>::new(bounds));
        assert_eq!(m.update(f32::NAN, 1).state, NisState::Filling);
        assert_eq!(m.update(-1.0, 1).state, NisState::Filling);
        assert_eq!(m.update(1.0, 0).state, NisState::Filling);
        assert_eq!(m.rejected(), 3);
        m.update(1.0, 1);
        m.update(1.0, 2);
        let r = m.update(1.0, 1);
        assert_eq!((r.state, r.sum, r.dof), (NisState::Consistent, 3.0, 4));
        // Exact ν = 4 bounds at P = 0.99: 0.2070 and 14.86 (statrs above).
        assert!((r.lower - 0.206_990_8).abs() < 1e-5 && (r.upper - 14.860_26).abs() < 1e-3);
        let r = m.update(100.0, 1); // window: 1 (2), 1 (1), 100 (1)
        assert_eq!((r.state, r.dof), (NisState::Overconfident, 4));
        m.reset();
        assert_eq!(m.state(), NisState::Filling);
        let r = m.update(0.0, 3);
        assert_eq!(r.dof, 3);
        // Observer updates: accepted and gate-rejected both enter (dof 1);
        // skipped ones do not.
        m.reset();
        m.record(&Update::Accepted { nis: 0.5 });
        m.record(&Update::Skipped);
        m.record(&Update::Rejected { nis: 30.0 });
        let r = m.record(&Update::Accepted { nis: 0.5 });
        assert_eq!((r.state, r.sum, r.dof), (NisState::Overconfident, 31.0, 3));
        assert_eq!(m.rejected(), 3); // a lifetime count: neither reset nor Skipped changes it
    }

    // -- NE107 mapping ---------------------------------------------------------

    fn healthy() -> DiagnosticInputs<2> {
        DiagnosticInputs::healthy()
    }

    #[test]
    fn ne107_each_rule_alone() {
        use DeviceStatus as D;
        type Case = (DiagnosticInputs<2>, Reasons, D, Quality, [Quality; 2]);
        let with = |f: &dyn Fn(&mut DiagnosticInputs<2>)| {
            let mut i = healthy();
            f(&mut i);
            i
        };
        let flags = |fl: StatusFlags| with(&|i| i.flags = fl);
        let cases: [Case; 22] = [
            (healthy(), Reasons::NONE, D::Good, Good, [Good, Good]),
            (
                flags(StatusFlags::NUMERIC_FAULT),
                Reasons::NUMERIC_FAULT,
                D::Failure,
                Good,
                [Bad, Bad],
            ),
            (
                with(&|i| i.flow = Bad),
                Reasons::FLOW_BAD,
                D::Failure,
                Uncertain,
                [Bad, Bad],
            ),
            (
                with(&|i| {
                    i.flow = Bad;
                    i.level = Uncertain;
                }),
                Reasons::FLOW_BAD | Reasons::NO_HOLDUP_SOURCE | Reasons::LEVEL_UNCERTAIN,
                D::Failure,
                Bad,
                [Bad, Bad],
            ),
            (
                with(&|i| i.feed = [Good, Bad]),
                Reasons::FEED_BAD,
                D::Failure,
                Good,
                [Good, Bad],
            ),
            (
                with(&|i| i.function_check = true),
                Reasons::FUNCTION_CHECK,
                D::FunctionCheck,
                Uncertain,
                [Uncertain, Uncertain],
            ),
            (
                flags(StatusFlags::EMPTY),
                Reasons::LOW_HOLDUP,
                D::OutOfSpecification,
                Good,
                [Uncertain; 2],
            ),
            (
                flags(StatusFlags::NEAR_EMPTY),
                Reasons::LOW_HOLDUP,
                D::OutOfSpecification,
                Good,
                [Uncertain; 2],
            ),
            (
                flags(StatusFlags::OVERFLOW),
                Reasons::OVERFLOW,
                D::OutOfSpecification,
                Uncertain,
                [Uncertain; 2],
            ),
            (
                flags(StatusFlags::OUTLET_LIMITED),
                Reasons::OUTLET_LIMITED,
                D::OutOfSpecification,
                Uncertain,
                [Uncertain; 2],
            ),
            (
                with(&|i| i.closure = Some(ClosureAlarm::MoreOutThanIn)),
                Reasons::CLOSURE,
                D::OutOfSpecification,
                Uncertain,
                [Uncertain; 2],
            ),
            (
                with(&|i| i.closure = Some(ClosureAlarm::MoreInThanOut)),
                Reasons::CLOSURE,
                D::OutOfSpecification,
                Uncertain,
                [Uncertain; 2],
            ),
            (
                with(&|i| i.nis = NisState::Overconfident),
                Reasons::NIS_OVERCONFIDENT,
                D::OutOfSpecification,
                Uncertain,
                [Uncertain; 2],
            ),
            (
                flags(StatusFlags::INPUT_NOT_FINITE),
                Reasons::INPUT_NOT_FINITE,
                D::OutOfSpecification,
                Good,
                [Uncertain; 2],
            ),
            (
                with(&|i| i.temperature = Bad),
                Reasons::TEMPERATURE_BAD,
                D::OutOfSpecification,
                Good,
                [Uncertain; 2],
            ),
            (
                with(&|i| i.level = Bad),
                Reasons::LEVEL_BAD,
                D::MaintenanceRequired,
                Uncertain,
                [Good; 2],
            ),
            (
                with(&|i| i.flow = Uncertain),
                Reasons::FLOW_UNCERTAIN,
                D::MaintenanceRequired,
                Uncertain,
                [Uncertain; 2],
            ),
            (
                with(&|i| i.level = Uncertain),
                Reasons::LEVEL_UNCERTAIN,
                D::MaintenanceRequired,
                Uncertain,
                [Good; 2],
            ),
            (
                with(&|i| i.temperature = Uncertain),
                Reasons::TEMPERATURE_UNCERTAIN,
                D::MaintenanceRequired,
                Good,
                [Uncertain; 2],
            ),
            (
                with(&|i| i.feed = [Uncertain, Good]),
                Reasons::FEED_UNCERTAIN,
                D::MaintenanceRequired,
                Good,
                [Uncertain, Good],
            ),
            (
                with(&|i| i.nis = NisState::TooCautious),
                Reasons::NIS_TOO_CAUTIOUS,
                D::MaintenanceRequired,
                Good,
                [Good; 2],
            ),
            (
                flags(StatusFlags::INPUT_NEGATIVE),
                Reasons::INPUT_NEGATIVE,
                D::MaintenanceRequired,
                Good,
                [Good; 2],
            ),
        ];
        for (i, (inputs, reasons, status, holdup, conc)) in cases.iter().enumerate() {
            let d = diagnose(inputs);
            assert_eq!(d.reasons, *reasons, "case {i}");
            assert_eq!(d.status, *status, "case {i}");
            assert_eq!(d.holdup, *holdup, "case {i}");
            assert_eq!(d.concentrations, *conc, "case {i}");
        }
        // Flags that lower nothing, and NIS still filling.
        let quiet = with(&|i| {
            i.flags = StatusFlags::AMOUNT_CLAMPED | StatusFlags::METHOD_FALLBACK;
            i.nis = NisState::Filling;
        });
        let d = diagnose(&quiet);
        assert_eq!(
            (d.status, d.holdup, d.reasons),
            (D::Good, Good, Reasons::NONE)
        );
    }

    #[test]
    fn ne107_precedence_and_worst_quality() {
        use DeviceStatus as D;
        // C over S and M; qualities the worst of all rules.
        let mut i = healthy();
        i.function_check = true;
        i.closure = Some(ClosureAlarm::MoreOutThanIn);
        i.nis = NisState::TooCautious;
        i.feed = [Good, Bad];
        let d = diagnose(&i);
        assert_eq!(d.status, D::Failure); // the bad feed outranks C
        assert_eq!(d.concentrations, [Uncertain, Bad]);
        i.feed = [Good, Good];
        let d = diagnose(&i);
        assert_eq!(d.status, D::FunctionCheck);
        assert_eq!((d.holdup, d.concentrations), (Uncertain, [Uncertain; 2]));
        assert_eq!(
            d.reasons.names().collect::<std::vec::Vec<_>>(),
            ["function_check", "closure", "nis_too_cautious"]
        );
        // S over M.
        let mut i = healthy();
        i.flags = StatusFlags::NEAR_EMPTY | StatusFlags::INPUT_NEGATIVE;
        i.level = Bad;
        let d = diagnose(&i);
        assert_eq!(d.status, D::OutOfSpecification);
        assert_eq!((d.holdup, d.concentrations), (Uncertain, [Uncertain; 2]));
        // Order of the categories and letters.
        assert!(D::Good < D::MaintenanceRequired);
        assert!(D::MaintenanceRequired < D::OutOfSpecification);
        assert!(D::OutOfSpecification < D::FunctionCheck);
        assert!(D::FunctionCheck < D::Failure);
        assert_eq!(
            [
                D::Failure,
                D::FunctionCheck,
                D::OutOfSpecification,
                D::MaintenanceRequired,
                D::Good
            ]
            .map(D::letter),
            ['F', 'C', 'S', 'M', '-']
        );
        // Rule table and bits stay in step.
        for (n, r) in RULES.iter().enumerate() {
            assert_eq!(r.reason.bits(), 1 << n, "rule {n} ({})", r.name);
        }
    }
}
