//! Model mismatch: chi-square bounds and the windowed NIS test.

use crate::observer::Update;
use crate::{Compensated, Error, Scalar};

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

    /// Bounds from numbers computed elsewhere, for a target without double
    /// precision: [`ChiSquareBounds::new`] run on a host (a firmware's build
    /// script) and its [`ChiSquareBounds::quantiles`] compiled in. Nothing is
    /// computed, so the target's image carries no `f64` arithmetic and no
    /// `erfc` for this; the bounds are bit for bit the host's.
    ///
    /// # Errors
    /// [`Error::ConfigProbability`] unless `0 < probability < 1`;
    /// [`Error::ConfigNonFinite`] for a NaN or infinite quantile;
    /// [`Error::ConfigNonPositive`] unless `z > 0` and
    /// `0 ≤ lower[ν] < upper[ν]` for every `ν`.
    pub fn from_quantiles(
        probability: S,
        z: S,
        lower: [S; EXACT_DOF],
        upper: [S; EXACT_DOF],
    ) -> Result<Self, Error> {
        if !(probability > S::ZERO && probability < S::ONE) {
            return Err(Error::ConfigProbability);
        }
        let all_finite = z.is_finite()
            && lower.iter().all(|x| x.is_finite())
            && upper.iter().all(|x| x.is_finite());
        if !all_finite {
            return Err(Error::ConfigNonFinite);
        }
        let ordered = lower
            .iter()
            .zip(upper.iter())
            .all(|(lo, hi)| *lo >= S::ZERO && lo < hi);
        if !(z > S::ZERO) || !ordered {
            return Err(Error::ConfigNonPositive);
        }
        Ok(Self {
            probability,
            z,
            lower,
            upper,
        })
    }

    /// The numbers that define the bounds, as [`ChiSquareBounds::from_quantiles`]
    /// takes them: the probability, the upper normal quantile `z` (used by
    /// Wilson–Hilferty above [`EXACT_DOF`]), and the lower and upper bounds
    /// for `ν = 1 …` [`EXACT_DOF`].
    #[allow(clippy::type_complexity)]
    pub fn quantiles(&self) -> (S, S, [S; EXACT_DOF], [S; EXACT_DOF]) {
        (self.probability, self.z, self.lower, self.upper)
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

/// The consistency of an observer's innovations over the last closed window.
#[cfg_attr(feature = "serde", derive(serde::Serialize, serde::Deserialize))]
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Hash)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum NisState {
    /// No window has closed yet (since construction or [`NisMonitor::reset`]).
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

/// Model-mismatch monitor: the sum of `W` consecutive normalised innovation
/// squared values against two-sided chi-square bounds, over **disjoint**
/// windows.
///
/// Each window of `W` accepted samples is tested once, when it closes, and
/// its result stands until the next window closes. Disjoint windows are
/// independent when the filter is consistent, so each test wrongly flags
/// with probability exactly `1 − P`: the expected share of flagged time is
/// `1 − P` (a sliding window tested at every sample flags about as often,
/// but in long runs, and costs `O(W)` per sample). Work per update is
/// `O(1)`: a compensated running sum. A NaN, infinite or negative NIS, or a
/// sample with zero degrees of freedom, is rejected (counted) and leaves the
/// window as it was.
#[cfg_attr(feature = "serde", derive(serde::Serialize, serde::Deserialize))]
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct NisMonitor<S, const W: usize> {
    bounds: ChiSquareBounds<S>,
    /// Sum of the open window's values.
    sum: Compensated<S>,
    /// Degrees of freedom in the open window.
    dof: u32,
    /// Samples in the open window.
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
    /// and a possible open window: a finite non-negative sum, at least one
    /// degree of freedom per sample, fewer samples than the window.
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
        let sum = state.sum.value();
        let filled = u32::try_from(state.filled).unwrap_or(u32::MAX);
        same_bounds
            && state.filled < W.max(1)
            && sum.is_finite()
            && sum >= S::ZERO
            && state.dof >= filled
            && state.dof <= filled.saturating_mul(u32::from(u8::MAX))
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
            sum: Compensated::new(S::ZERO),
            dof: 0,
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
    /// innovation's dimension); when this closes the window, test it.
    /// Returns the result of the last closed window.
    pub fn update(&mut self, nis: S, dof: u8) -> NisReport<S> {
        if !nis.is_finite() || nis < S::ZERO || dof == 0 {
            self.rejected = self.rejected.saturating_add(1);
            return self.last;
        }
        self.sum.add(nis);
        self.dof = self.dof.saturating_add(u32::from(dof));
        self.filled += 1;
        if self.filled < W {
            return self.last;
        }
        let sum = self.sum.value();
        let total = self.dof;
        let lower = self.bounds.lower(total);
        let upper = self.bounds.upper(total);
        let state = if sum > upper {
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
        self.sum.set(S::ZERO);
        self.dof = 0;
        self.filled = 0;
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
        self.sum.set(S::ZERO);
        self.dof = 0;
        self.filled = 0;
        self.last.state = NisState::Filling;
        self.last.sum = S::ZERO;
        self.last.dof = 0;
        self.last.lower = S::ZERO;
        self.last.upper = S::ZERO;
    }
}
