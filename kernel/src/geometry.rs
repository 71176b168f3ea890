//! Vessel geometry: liquid level ↔ holdup volume, and the free-surface area.
//!
//! A [`Geometry`] is a validated [`Shape`] plus the constants derived from it
//! once (radius, bottom-head volume, half and full volume, …). It answers three
//! questions, all total functions that never fail and never panic:
//!
//! * [`Geometry::volume_at`] — holdup volume at a liquid level;
//! * [`Geometry::level_at`] — the level at which the vessel holds a volume;
//! * [`Geometry::area_at`] — the free-surface cross-section at a level, which
//!   is `dV/dlevel` (the observer's level sensitivity is `1/area`).
//!
//! # Conventions
//!
//! * Lengths in m, areas in m², volumes in m³.
//! * The level is measured from the **lowest point of the vessel**: the apex
//!   of a cone bottom, the bottom of a dished head, the bottom of a sphere or
//!   of a horizontal cylinder's shell, the first point of a strapping table.
//! * Inputs outside the vessel are clamped: a level is clamped into
//!   `[0, max_level]`, a volume into `[0, max_volume]`; NaN counts as 0 and
//!   ±∞ as the nearer end. Results are therefore always finite.
//! * A strapping table may start with a heel (volume > 0 at level 0): below
//!   its first point the volume is the first volume, above its last point the
//!   last volume; any volume at or below the heel maps to level 0.
//!
//! # Formulas (all from plane and solid geometry)
//!
//! With `R` the radius, `h` the level:
//!
//! * **Horizontal cylinder** of length `L` (flat ends): `V = L·A_seg(h)` with
//!   the circular-segment area
//!   `A_seg(h) = R²·acos((R−h)/R) − (R−h)·√(h·(2R−h))`
//!   (plane geometry; the partial-volume tables for horizontal tanks in
//!   Perry's Chemical Engineers' Handbook follow it — from memory).
//!   `2Rh − h²` is computed as `h·(2R−h)`, and the formula is evaluated only
//!   on the lower half; the upper half uses the symmetry
//!   `V(h) = V_full − V(2R−h)`, so that the full and half volumes are exact
//!   multiples of each other. Near the bottom (`h ≤ 0.2·R`) the two terms
//!   above cancel (their difference is `≈ (4/3)·√(2R)·h^{3/2}`, much smaller
//!   than either, and `acos` near 1 is ill-conditioned), so there the
//!   segment area is the series obtained by integrating the surface width
//!   term by term: with `x = h/(2R)`,
//!   `A_seg = 8R²·x^{3/2}·Σ_k c_k·x^k/(k + 3/2)`, where `c_k` are the binomial
//!   coefficients of `√(1−x)` (`1, −1/2, −1/8, −1/16, …`); at `x ≤ 0.1` twenty
//!   terms are far below `f64` rounding. Surface area: `2L·√(h·(2R−h))`.
//! * **Sphere**: cap volume `V = π·h²·(3R − h)/3` (solid geometry) on the
//!   lower half, symmetry on the upper half; area `π·h·(2R − h)`.
//! * **Vertical cylinder** (shell height `H` above the bottom head), section
//!   `A = π·R²`:
//!   * flat bottom: `V = A·h`;
//!   * cone bottom of height `c` (apex down): `V = (A·c/3)·(h/c)³` below the
//!     cone top (cone volume `π·R²·c/3`), area `A·(h/c)²`; `A·(h − c)` more
//!     above;
//!   * dished bottom of depth `d ≤ R`: a spherical segment of the sphere of
//!     radius `ρ = (R² + d²)/(2d)` (the sphere through the rim circle and the
//!     bottom point; intersecting-chords theorem), cap volume
//!     `π·h²·(3ρ − h)/3` and area `π·h·(2ρ − h)` below `d`; `A·(h − d)` more
//!     above.
//! * **Rectangular**: `V = L·W·h`, area `L·W`.
//! * **Strapping table**: linear interpolation between points; the area is
//!   the slope of the segment (at a breakpoint the segment above, at the top
//!   the last segment).
//!
//! # Inverse (`level_at`) and its bound
//!
//! Closed forms where they are exact and cheap: flat vertical cylinder and
//! rectangle (`V/A`), cone (`c·∛(V/V_cone)`), the straight shell above any
//! head, and the strapping table (a scan of at most [`STRAPPING_CAPACITY`]
//! points).
//!
//! The horizontal cylinder, the sphere and the dished head are inverted by a
//! safeguarded Newton iteration on the part of the curve where the surface
//! area rises, i.e. `[0, R]` (`[0, d]` for the head); a volume above half of a
//! horizontal cylinder or sphere is turned into its ullage and solved on the
//! lower half by symmetry, so the iteration always starts from the end where
//! the area vanishes and never works at the far end. On that interval the volume is convex and the area `a(h)` is
//! non-negative, increasing and **concave**. Hence:
//!
//! * the tangent from any point lies below the curve, so a Newton step from a
//!   point left of the root lands right of it;
//! * from a point `x` right of the root `r`, the step is `(V(x)−V(r))/a(x)`,
//!   and by concavity `V(x) − V(r) ≥ (x−r)·(a(r)+a(x))/2 ≥ (x−r)·a(x)/2`:
//!   each step **at least halves** the distance to the root, and never passes
//!   it. Near the root convergence is quadratic.
//!
//! The iteration keeps a bracket `[lo, hi]` around the root and the values at
//! `hi`. From a point left of the root whose tangent leaves the bracket, it
//! steps from `hi` instead; if rounding still puts the step outside the
//! bracket (or the area is zero), it bisects. It stops when a step is below
//! `8·ε` relative, the bracket is that narrow, or the volume matches exactly.
//!
//! **Bound: at most 64 iterations** (`MAX_ITERATIONS`). After the first
//! iteration every step is taken from the right of the root, so in exact
//! arithmetic the error after `k` iterations is at most `upper·2^(1−k)`
//! (`upper = R` or `d`): after 64 it is below `2^−62·upper`, beneath one ulp
//! of the top level in both `f32` (`2^−23`) and `f64` (`2^−52`), so the cap
//! can only end an iteration that has already converged to rounding level.
//! In practice far fewer are used: the start point is the leading term of the
//! small-level expansion (`∛((V/(L·(4/3)·√(2R)))²)` for the horizontal
//! cylinder, `√(V/(π·R))` for the sphere and the head), which is provably
//! within 19 % of the root on the lower half, and Newton converges
//! quadratically from there — the tests check that no volume needs more than
//! 8 iterations in either precision (6 in `f64`, 5 in `f32` observed).
//!
//! # Accuracy
//!
//! `volume_at` is accurate to a small multiple of `ε` relative to the volume
//! at that level, including near the bottom (no cancellation). `level_at`
//! is accurate to a small multiple of `ε` relative to the level (the tests
//! hold it to 64·ε near the bottom), except where the surface area tends to
//! zero at the top of a sphere or horizontal cylinder: there the volume,
//! one number near `max_volume`, cannot pin the level better than about
//! `ε·max_volume/area(h)`. For a sphere that is worst at a distance
//! `R·√(4ε/3)` below the top and about as large: `4·10⁻⁴·R` in `f32`,
//! `2·10⁻⁸·R` in `f64` — a property of the number format, not of the solver;
//! `level_at` then returns a level whose volume matches to a few ulps.
//!
//! # Example
//!
//! ```
//! use holdup_kernel::geometry::{Bottom, Geometry, Shape};
//!
//! // A 2 m diameter tank, 5 m of shell above a 1 m deep conical bottom.
//! let tank = Geometry::new(Shape::VerticalCylinder {
//!     diameter: 2.0_f64,
//!     height: 5.0,
//!     bottom: Bottom::Cone { height: 1.0 },
//! })?;
//! assert_eq!(tank.max_level(), 6.0);
//! let v = tank.volume_at(3.0); // cone (π/3) + 2 m of shell (2π)
//! assert!((v - 7.0 * core::f64::consts::PI / 3.0).abs() < 1e-12);
//! assert!((tank.level_at(v) - 3.0).abs() < 1e-12);
//!
//! // A horizontal drum, inverted by the safeguarded Newton iteration.
//! let drum = Geometry::new(Shape::HorizontalCylinder { diameter: 2.0_f32, length: 6.0 })?;
//! let h = drum.level_at(drum.volume_at(0.3));
//! assert!((h - 0.3).abs() < 1e-5);
//! # Ok::<(), holdup_kernel::Error>(())
//! ```

use crate::scalar::Scalar;
use crate::Error;

/// Fixed capacity of a strapping table.
pub const STRAPPING_CAPACITY: usize = 32;

/// Iteration cap of the safeguarded Newton inverse (see the module docs for
/// why 64 suffices in `f32` and `f64`).
const MAX_ITERATIONS: u32 = 64;

/// Number of series terms for the segment area near the bottom. At
/// `x = h/(2R) ≤ SERIES_LIMIT = 0.1` the first omitted term,
/// `|c_20|·x^20/21.5` with `|c_20| < 0.004`, is below `1e-23` relative to the
/// sum: far below `f64` rounding.
const SERIES_TERMS: u32 = 20;

/// Largest `x = h/(2R)` at which the bottom series is used (`h ≤ 0.2·R`).
const SERIES_LIMIT: f64 = 0.1;

/// The bottom head of a vertical cylinder.
#[derive(Clone, Copy, Debug, PartialEq)]
#[cfg_attr(feature = "serde", derive(serde::Serialize, serde::Deserialize))]
pub enum Bottom<S> {
    /// Flat bottom: the shell starts at level 0.
    Flat,
    /// Conical bottom, apex down, of the given height (m); its top circle is
    /// the shell's diameter.
    Cone {
        /// Height of the cone from apex to shell (m), finite and > 0.
        height: S,
    },
    /// Dished bottom: a spherical-segment head of the given depth (m). The
    /// sphere passes through the shell's rim circle and the bottom point, so
    /// its radius is `(R² + depth²)/(2·depth)`; `depth = R` is a hemisphere.
    Dished {
        /// Depth of the head from its lowest point to the shell (m), finite,
        /// positive and at most the shell radius.
        depth: S,
    },
}

/// A vessel's shape, as configured; [`Geometry::new`] validates it.
#[derive(Clone, Debug, PartialEq)]
#[cfg_attr(feature = "serde", derive(serde::Serialize, serde::Deserialize))]
pub enum Shape<S> {
    /// Upright cylinder on a bottom head; `max_level` is head plus shell.
    VerticalCylinder {
        /// Inner diameter of the shell (m).
        diameter: S,
        /// Straight shell height above the bottom head (m).
        height: S,
        /// The bottom head.
        bottom: Bottom<S>,
    },
    /// Cylinder lying on its side, with flat ends; `max_level` is the
    /// diameter.
    HorizontalCylinder {
        /// Inner diameter (m).
        diameter: S,
        /// Length between the flat ends (m).
        length: S,
    },
    /// Rectangular box; `max_level` is the height.
    Rectangular {
        /// Inner length (m).
        length: S,
        /// Inner width (m).
        width: S,
        /// Inner height (m).
        height: S,
    },
    /// Sphere; `max_level` is the diameter.
    Sphere {
        /// Inner diameter (m).
        diameter: S,
    },
    /// Strapping table: `(level m, volume m³)` points, interpolated linearly.
    /// Levels start at exactly 0 and rise strictly; volumes start at 0 or
    /// above (a heel) and rise strictly.
    Strapping(heapless::Vec<(S, S), STRAPPING_CAPACITY>),
}

/// Constants derived once from a validated shape. Fields a shape does not use
/// are zero.
#[derive(Clone, Copy, Debug, Default)]
struct Derived<S> {
    /// Radius `D/2` (cylinders, sphere).
    radius: S,
    /// Height of the bottom head (vertical cylinder; 0 if flat).
    head_height: S,
    /// Volume of the bottom head (vertical cylinder; 0 if flat).
    head_volume: S,
    /// Horizontal cross-section of a prismatic part (vertical shell,
    /// rectangle).
    section: S,
    /// Radius of the dished head's sphere.
    sphere_radius: S,
    /// Volume of the lower half (horizontal cylinder, sphere).
    half_volume: S,
    /// Horizontal cylinder: `L·(4/3)·√(2R)`, the coefficient of the leading
    /// term `h^{3/2}` of the volume at small levels (Newton start point).
    start_coeff: S,
    /// Highest level.
    max_level: S,
    /// Volume at the highest level.
    max_volume: S,
}

/// A validated vessel geometry with its derived constants.
///
/// With the `serde` feature it is encoded as its [`Shape`] and validated
/// again ([`Geometry::new`]) when decoded, so a decoded geometry is as valid
/// as a constructed one.
#[derive(Clone, Debug)]
#[cfg_attr(
    feature = "serde",
    derive(serde::Serialize, serde::Deserialize),
    serde(
        into = "Shape<S>",
        try_from = "Shape<S>",
        bound(
            serialize = "S: Scalar + serde::Serialize",
            deserialize = "S: Scalar + serde::Deserialize<'de>"
        )
    )
)]
pub struct Geometry<S> {
    shape: Shape<S>,
    derived: Derived<S>,
}

/// `x` if it is finite and > 0, else [`Error::GeometryNonPositive`].
/// Out of line: configuration checks call it two dozen times, and inlined
/// copies cost 1.6 KB of a gateway image for no speed that matters.
#[inline(never)]
fn positive<S: Scalar>(x: S) -> Result<S, Error> {
    if x.is_finite() && x > S::ZERO {
        Ok(x)
    } else {
        Err(Error::GeometryNonPositive)
    }
}

/// The constant 3.
fn three<S: Scalar>() -> S {
    S::of(3.0)
}

/// Volume of a spherical cap of depth `h` cut from a sphere of radius `rho`
/// (solid geometry): `π·h²·(3ρ − h)/3`. For `0 ≤ h ≤ 2ρ`.
fn cap_volume<S: Scalar>(h: S, rho: S) -> S {
    S::PI * h * h * (three::<S>() * rho - h) / three::<S>()
}

/// Surface area of a spherical cap of depth `h` on a sphere of radius `rho`:
/// `π·h·(2ρ − h)`.
fn cap_area<S: Scalar>(h: S, rho: S) -> S {
    S::PI * h * (S::TWO * rho - h)
}

/// Circular-segment area by the series of the width integral, for
/// `x = h/(2R)` small (see the module docs). `r2` is `R²`.
fn segment_area_series<S: Scalar>(x: S, r2: S) -> S {
    let mut sum = S::ZERO;
    let mut coeff = S::ONE; // c_k, binomial coefficients of √(1−x)
    let mut power = S::ONE; // x^k
    let three_halves = S::of(1.5);
    for k in 0..SERIES_TERMS {
        let kf = S::of(f64::from(k));
        sum += coeff * power / (kf + three_halves);
        coeff = coeff * (kf - S::HALF) / (kf + S::ONE);
        power *= x;
    }
    S::of(8.0) * r2 * x * x.sqrt() * sum
}

/// Circular-segment area by the closed form
/// `R²·acos((R−h)/R) − (R−h)·√(h·(2R−h))`.
fn segment_area_closed<S: Scalar>(h: S, r: S) -> S {
    let d = r - h;
    r * r * (d / r).acos() - d * (h * (S::TWO * r - h)).sqrt()
}

/// Area of the circular segment of depth `h ∈ [0, R]` of a circle of radius
/// `r`: the series near the bottom, the closed form above.
fn segment_area<S: Scalar>(h: S, r: S) -> S {
    let x = h / (S::TWO * r);
    if x <= S::of(SERIES_LIMIT) {
        segment_area_series(x, r * r)
    } else {
        segment_area_closed(h, r)
    }
}

/// Safeguarded Newton inverse of a volume curve on `[0, upper]` on which the
/// area is non-negative, increasing and concave (see the module docs).
///
/// `eval(h)` returns `(volume, area)`; `upper_volume`, `upper_area` are its
/// values at `upper`; `start` is the first guess. Returns the level and the
/// number of iterations used (at most [`MAX_ITERATIONS`]). The result always
/// lies in `[0, upper]`.
fn solve_rising<S: Scalar, F: Fn(S) -> (S, S)>(
    target: S,
    upper: S,
    upper_volume: S,
    upper_area: S,
    start: S,
    eval: F,
) -> (S, u32) {
    if target <= S::ZERO || !target.is_finite() {
        return (S::ZERO, 0);
    }
    if target >= upper_volume {
        return (upper, 0);
    }
    let tol = S::of(8.0) * S::EPSILON;
    let mut lo = S::ZERO;
    let mut hi = upper;
    let mut f_hi = upper_volume - target;
    let mut a_hi = upper_area;
    let mut x = start.clamp_to(lo, hi);
    for k in 1..=MAX_ITERATIONS {
        let (v, a) = eval(x);
        let f = v - target;
        if f > S::ZERO {
            hi = x;
            f_hi = f;
            a_hi = a;
        } else if f < S::ZERO {
            lo = x;
        } else {
            // Exact hit (or a NaN, which cannot arise on a validated shape;
            // `x` is finite and in range either way).
            return (x, k);
        }
        if hi - lo <= tol * hi {
            return (lo + (hi - lo) * S::HALF, k);
        }
        // Newton from `x`. A step below the tolerance means `x` is a root to
        // rounding level, whether or not rounding put the step outside the
        // bracket.
        let mut next = x - f / a;
        if (next - x).abs() <= tol * x {
            return (next.clamp_to(lo, hi), k);
        }
        // From the left, if that tangent leaves the bracket, step from `hi`
        // instead (its tangent lands in `[root, hi)`).
        if f < S::ZERO && !(next > lo && next < hi) {
            next = hi - f_hi / a_hi;
            if (next - hi).abs() <= tol * hi {
                return (next.clamp_to(lo, hi), k);
            }
        }
        x = if next > lo && next < hi {
            next
        } else {
            // Rounding (or a zero area) put the step outside: bisect.
            lo + (hi - lo) * S::HALF
        };
    }
    (x, MAX_ITERATIONS)
}

/// Piecewise-linear lookup in a validated strapping table. With `swap` false
/// the key is the level and the value the volume; with `swap` true the
/// reverse. Keys at or below the first key give the first value, keys at or
/// above the last key give the last value; at a breakpoint the breakpoint's
/// own value is returned exactly.
/// `key` must not be NaN (the callers clamp it first).
fn table_lookup<S: Scalar>(points: &[(S, S)], key: S, swap: bool) -> S {
    let mut prev: Option<(S, S)> = None;
    for &(l, v) in points {
        let (k1, v1) = if swap { (v, l) } else { (l, v) };
        match prev {
            None => {
                if key <= k1 {
                    return v1;
                }
            }
            Some((k0, v0)) => {
                if key < k1 {
                    let t = (key - k0) / (k1 - k0);
                    return (v0 + t * (v1 - v0)).min(v1);
                }
            }
        }
        prev = Some((k1, v1));
    }
    prev.map_or(S::ZERO, |(_, v)| v)
}

/// Slope `dV/dlevel` of the strapping segment that contains `level` (the one
/// above at a breakpoint, the last one at or above the top).
fn table_slope<S: Scalar>(points: &[(S, S)], level: S) -> S {
    let mut prev: Option<(S, S)> = None;
    let mut slope = S::ZERO;
    for &(l, v) in points {
        if let Some((l0, v0)) = prev {
            slope = (v - v0) / (l - l0);
            if level < l {
                return slope;
            }
        }
        prev = Some((l, v));
    }
    slope
}

/// Validate a strapping table; see [`Shape::Strapping`].
fn validate_table<S: Scalar>(points: &[(S, S)]) -> Result<(), Error> {
    if points.len() < 2 {
        return Err(Error::StrappingTooShort);
    }
    let mut prev: Option<(S, S)> = None;
    for (i, &(l, v)) in points.iter().enumerate() {
        // `i < STRAPPING_CAPACITY = 32`, so the conversion cannot saturate.
        let index = u8::try_from(i).unwrap_or(u8::MAX);
        if !(l.is_finite() && v.is_finite()) {
            return Err(Error::StrappingNonFinite(index));
        }
        match prev {
            None => {
                if l != S::ZERO || v < S::ZERO {
                    return Err(Error::StrappingNotMonotone(index));
                }
            }
            Some((l0, v0)) => {
                if l <= l0 || v <= v0 {
                    return Err(Error::StrappingNotMonotone(index));
                }
                // Two levels too close for their volume step: the slope (the
                // segment's area) would overflow.
                if !((v - v0) / (l - l0)).is_finite() {
                    return Err(Error::StrappingNonFinite(index));
                }
            }
        }
        prev = Some((l, v));
    }
    Ok(())
}

impl<S> From<Geometry<S>> for Shape<S> {
    fn from(g: Geometry<S>) -> Self {
        g.shape
    }
}

impl<S: Scalar> TryFrom<Shape<S>> for Geometry<S> {
    type Error = Error;

    fn try_from(shape: Shape<S>) -> Result<Self, Error> {
        Self::new(shape)
    }
}

impl<S: Scalar> Geometry<S> {
    /// Validate a shape and derive its constants.
    ///
    /// Every dimension (and a cone height or dish depth) must be finite and
    /// positive, else [`Error::GeometryNonPositive`]; a dish deeper than the shell
    /// radius is [`Error::GeometryDishTooDeep`]. A shape whose derived
    /// quantities (area, volume, total height) overflow or underflow to zero
    /// is also [`Error::GeometryNonPositive`].
    ///
    /// A strapping table needs at least two points
    /// ([`Error::StrappingTooShort`]), all finite
    /// ([`Error::StrappingNonFinite`] with the point's index), the first level
    /// exactly 0 and first volume ≥ 0, then levels and volumes strictly rising
    /// ([`Error::StrappingNotMonotone`] with the index of the first offending
    /// point). A segment whose slope overflows is reported as
    /// [`Error::StrappingNonFinite`] at its upper point.
    pub fn new(shape: Shape<S>) -> Result<Self, Error> {
        let derived = match &shape {
            Shape::VerticalCylinder {
                diameter,
                height,
                bottom,
            } => Self::derive_vertical(*diameter, *height, *bottom)?,
            Shape::HorizontalCylinder { diameter, length } => {
                let length = positive(*length)?;
                let r = positive(positive(*diameter)? * S::HALF)?;
                let half_volume = positive(length * segment_area(r, r))?;
                let start_coeff = positive(length * S::of(4.0 / 3.0) * (S::TWO * r).sqrt())?;
                Derived {
                    radius: r,
                    half_volume,
                    start_coeff,
                    max_level: positive(S::TWO * r)?,
                    max_volume: positive(S::TWO * half_volume)?,
                    ..Derived::default()
                }
            }
            Shape::Rectangular {
                length,
                width,
                height,
            } => {
                let (length, width, height) =
                    (positive(*length)?, positive(*width)?, positive(*height)?);
                let section = positive(length * width)?;
                Derived {
                    section,
                    max_level: height,
                    max_volume: positive(section * height)?,
                    ..Derived::default()
                }
            }
            Shape::Sphere { diameter } => {
                let r = positive(positive(*diameter)? * S::HALF)?;
                let half_volume = positive(cap_volume(r, r))?;
                Derived {
                    radius: r,
                    half_volume,
                    max_level: positive(S::TWO * r)?,
                    max_volume: positive(S::TWO * half_volume)?,
                    ..Derived::default()
                }
            }
            Shape::Strapping(points) => {
                validate_table(points)?;
                let (max_level, max_volume) = points.last().copied().unwrap_or_default();
                Derived {
                    max_level,
                    max_volume,
                    ..Derived::default()
                }
            }
        };
        Ok(Self { shape, derived })
    }

    /// Derived constants of a vertical cylinder (validating its dimensions).
    fn derive_vertical(diameter: S, height: S, bottom: Bottom<S>) -> Result<Derived<S>, Error> {
        let r = positive(positive(diameter)? * S::HALF)?;
        let height = positive(height)?;
        let section = positive(S::PI * r * r)?;
        let (head_height, head_volume, sphere_radius) = match bottom {
            Bottom::Flat => (S::ZERO, S::ZERO, S::ZERO),
            Bottom::Cone { height: c } => {
                let c = positive(c)?;
                (c, positive(section * c / three::<S>())?, S::ZERO)
            }
            Bottom::Dished { depth } => {
                let d = positive(depth)?;
                if d > r {
                    return Err(Error::GeometryDishTooDeep);
                }
                let rho = positive((r * r + d * d) / (S::TWO * d))?;
                (d, positive(cap_volume(d, rho))?, rho)
            }
        };
        let max_level = positive(head_height + height)?;
        // The same expression as `volume_at(max_level)`, so the two agree
        // exactly.
        let max_volume = positive(head_volume + section * (max_level - head_height))?;
        Ok(Derived {
            radius: r,
            head_height,
            head_volume,
            section,
            sphere_radius,
            max_level,
            max_volume,
            ..Derived::default()
        })
    }

    /// Build a strapping-table geometry from a slice of `(level, volume)`
    /// points; [`Error::StrappingFull`] if it has more than
    /// [`STRAPPING_CAPACITY`] points, otherwise as [`Geometry::new`].
    pub fn strapping(points: &[(S, S)]) -> Result<Self, Error> {
        let table = heapless::Vec::from_slice(points).map_err(|_| Error::StrappingFull)?;
        Self::new(Shape::Strapping(table))
    }

    /// The validated shape.
    pub fn shape(&self) -> &Shape<S> {
        &self.shape
    }

    /// Highest level (m): the total height (for a vertical cylinder, bottom
    /// head plus shell; for a strapping table, the last level).
    pub fn max_level(&self) -> S {
        self.derived.max_level
    }

    /// Volume at the highest level (m³).
    pub fn max_volume(&self) -> S {
        self.derived.max_volume
    }

    /// Holdup volume (m³) at a level (m). The level is clamped into
    /// `[0, max_level]`; NaN counts as 0.
    pub fn volume_at(&self, level: S) -> S {
        let g = &self.derived;
        let h = level.clamp_to(S::ZERO, g.max_level);
        match &self.shape {
            Shape::VerticalCylinder { bottom, .. } => {
                let c = g.head_height;
                match bottom {
                    Bottom::Flat => g.section * h,
                    Bottom::Cone { .. } if h < c => {
                        let t = h / c;
                        g.head_volume * t * t * t
                    }
                    Bottom::Dished { .. } if h < c => cap_volume(h, g.sphere_radius),
                    Bottom::Cone { .. } | Bottom::Dished { .. } => {
                        g.head_volume + g.section * (h - c)
                    }
                }
            }
            Shape::HorizontalCylinder { length, .. } => {
                let r = g.radius;
                if h <= r {
                    *length * segment_area(h, r)
                } else {
                    g.max_volume - *length * segment_area(S::TWO * r - h, r)
                }
            }
            Shape::Rectangular { .. } => g.section * h,
            Shape::Sphere { .. } => {
                let r = g.radius;
                if h <= r {
                    cap_volume(h, r)
                } else {
                    g.max_volume - cap_volume(S::TWO * r - h, r)
                }
            }
            Shape::Strapping(points) => table_lookup(points, h, false),
        }
    }

    /// Level (m) at which the vessel holds a volume (m³): the inverse of
    /// [`Geometry::volume_at`]. The volume is clamped into
    /// `[0, max_volume]`; NaN counts as 0. For a strapping table with a heel,
    /// any volume up to the heel gives level 0.
    ///
    /// Work is bounded: a closed form, a scan of at most
    /// [`STRAPPING_CAPACITY`] points, or at most 64 Newton/bisection
    /// iterations (module docs).
    pub fn level_at(&self, volume: S) -> S {
        self.level_and_iterations(volume).0
    }

    /// [`Geometry::level_at`] with the number of solver iterations used
    /// (0 for closed forms).
    fn level_and_iterations(&self, volume: S) -> (S, u32) {
        let g = &self.derived;
        let v = volume.clamp_to(S::ZERO, g.max_volume);
        if v >= g.max_volume {
            return (g.max_level, 0);
        }
        let (level, iterations) = match &self.shape {
            Shape::VerticalCylinder { bottom, .. } => {
                let c = g.head_height;
                match bottom {
                    Bottom::Flat => (v / g.section, 0),
                    Bottom::Cone { .. } if v < g.head_volume => (c * (v / g.head_volume).cbrt(), 0),
                    Bottom::Dished { .. } if v < g.head_volume => {
                        let rho = g.sphere_radius;
                        solve_rising(
                            v,
                            c,
                            g.head_volume,
                            cap_area(c, rho),
                            (v / (S::PI * rho)).sqrt(),
                            |h| (cap_volume(h, rho), cap_area(h, rho)),
                        )
                    }
                    Bottom::Cone { .. } | Bottom::Dished { .. } => {
                        (c + (v - g.head_volume) / g.section, 0)
                    }
                }
            }
            Shape::HorizontalCylinder { length, .. } => {
                let (r, l) = (g.radius, *length);
                let solve = |target: S| {
                    let t = (target / g.start_coeff).cbrt();
                    solve_rising(target, r, g.half_volume, S::TWO * l * r, t * t, |h| {
                        let width = S::TWO * (h * (S::TWO * r - h)).sqrt();
                        (l * segment_area(h, r), l * width)
                    })
                };
                if v <= g.half_volume {
                    solve(v)
                } else {
                    let (ullage, k) = solve(g.max_volume - v);
                    (S::TWO * r - ullage, k)
                }
            }
            Shape::Rectangular { .. } => (v / g.section, 0),
            Shape::Sphere { .. } => {
                let r = g.radius;
                let solve = |target: S| {
                    solve_rising(
                        target,
                        r,
                        g.half_volume,
                        S::PI * r * r,
                        (target / (S::PI * r)).sqrt(),
                        |h| (cap_volume(h, r), cap_area(h, r)),
                    )
                };
                if v <= g.half_volume {
                    solve(v)
                } else {
                    let (ullage, k) = solve(g.max_volume - v);
                    (S::TWO * r - ullage, k)
                }
            }
            Shape::Strapping(points) => (table_lookup(points, v, true), 0),
        };
        (level.clamp_to(S::ZERO, g.max_level), iterations)
    }

    /// Free-surface cross-section (m²) at a level (m), equal to
    /// `dV/dlevel`. The level is clamped into `[0, max_level]`; NaN counts as
    /// 0. Zero at the bottom and top of a sphere or horizontal cylinder and at
    /// a cone's apex. For a strapping table, the slope of the segment (the
    /// segment above at a breakpoint, the last segment at the top).
    pub fn area_at(&self, level: S) -> S {
        let g = &self.derived;
        let h = level.clamp_to(S::ZERO, g.max_level);
        match &self.shape {
            Shape::VerticalCylinder { bottom, .. } => {
                let c = g.head_height;
                match bottom {
                    Bottom::Cone { .. } if h < c => {
                        let t = h / c;
                        g.section * t * t
                    }
                    Bottom::Dished { .. } if h < c => cap_area(h, g.sphere_radius),
                    Bottom::Flat | Bottom::Cone { .. } | Bottom::Dished { .. } => g.section,
                }
            }
            Shape::HorizontalCylinder { length, .. } => {
                S::TWO * *length * (h * (S::TWO * g.radius - h)).sqrt()
            }
            Shape::Rectangular { .. } => g.section,
            Shape::Sphere { .. } => cap_area(h, g.radius),
            Shape::Strapping(points) => table_slope(points, h),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// True for the `f64` instantiation.
    fn is_f64<S: Scalar>() -> bool {
        S::EPSILON.to_f64() < 1e-10
    }

    fn s<S: Scalar>(x: f64) -> S {
        S::of(x)
    }

    fn geo<S: Scalar>(shape: Shape<S>) -> Geometry<S> {
        match Geometry::new(shape) {
            Ok(g) => g,
            Err(e) => panic!("valid test shape rejected: {e:?}"),
        }
    }

    fn table<S: Scalar>(points: &[(f64, f64)]) -> heapless::Vec<(S, S), STRAPPING_CAPACITY> {
        let mut t = heapless::Vec::new();
        for &(l, v) in points {
            assert!(t.push((s::<S>(l), s::<S>(v))).is_ok());
        }
        t
    }

    /// One of every shape (and every bottom), with their names.
    fn all_shapes<S: Scalar>() -> Vec<(&'static str, Geometry<S>)> {
        vec![
            (
                "vertical flat",
                geo(Shape::VerticalCylinder {
                    diameter: s(2.4),
                    height: s(6.0),
                    bottom: Bottom::Flat,
                }),
            ),
            (
                "vertical cone",
                geo(Shape::VerticalCylinder {
                    diameter: s(3.0),
                    height: s(4.0),
                    bottom: Bottom::Cone { height: s(1.2) },
                }),
            ),
            (
                "vertical dished",
                geo(Shape::VerticalCylinder {
                    diameter: s(2.0),
                    height: s(3.0),
                    bottom: Bottom::Dished { depth: s(0.35) },
                }),
            ),
            (
                "vertical hemisphere",
                geo(Shape::VerticalCylinder {
                    diameter: s(2.0),
                    height: s(3.0),
                    bottom: Bottom::Dished { depth: s(1.0) },
                }),
            ),
            (
                "horizontal",
                geo(Shape::HorizontalCylinder {
                    diameter: s(2.6),
                    length: s(8.0),
                }),
            ),
            (
                "rectangular",
                geo(Shape::Rectangular {
                    length: s(3.0),
                    width: s(2.0),
                    height: s(2.5),
                }),
            ),
            ("sphere", geo(Shape::Sphere { diameter: s(5.0) })),
            (
                "strapping",
                geo(Shape::Strapping(table(&[
                    (0.0, 0.2),
                    (0.5, 1.0),
                    (1.0, 2.5),
                    (2.0, 6.0),
                    (3.0, 9.0),
                ]))),
            ),
        ]
    }

    /// Reference circular-segment area in f64, written independently from
    /// the textbook form (plane geometry: segment area = sector − triangle,
    /// `R²·acos((R−h)/R) − (R−h)·√(2Rh − h²)`).
    fn segment_reference(h: f64, r: f64) -> f64 {
        r * r * ((r - h) / r).acos() - (r - h) * (2.0 * r * h - h * h).sqrt()
    }

    fn rel_close(a: f64, b: f64, rel: f64, what: &str) {
        let scale = a.abs().max(b.abs()).max(f64::MIN_POSITIVE);
        assert!(
            (a - b).abs() <= rel * scale,
            "{what}: {a} vs {b} (rel {:.3e} > {rel:.1e})",
            (a - b).abs() / scale
        );
    }

    // ---------------------------------------------------------------
    // Horizontal cylinder
    // ---------------------------------------------------------------

    fn horizontal_cylinder_matches_segment_formula<S: Scalar>() {
        // Source: plane geometry, circular segment area; Perry's Chemical
        // Engineers' Handbook partial-volume tables for horizontal tanks
        // follow it (from memory).
        let (d, len) = (3.0, 4.0);
        let r = d / 2.0;
        let g = geo(Shape::HorizontalCylinder {
            diameter: s::<S>(d),
            length: s(len),
        });
        let full = core::f64::consts::PI * r * r * len;
        // Tolerance relative to the full volume: f64 1e-13, f32 1e-6.
        let tol = if is_f64::<S>() { 1e-13 } else { 1e-6 };
        for i in 0..=300 {
            let h = d * f64::from(i) / 300.0;
            let reference = len * segment_reference(h, r);
            let got = g.volume_at(s(h)).to_f64();
            assert!(
                (got - reference).abs() <= tol * full,
                "h = {h}: {got} vs {reference}"
            );
        }
        // Half full is exactly half of the full volume (symmetry, by
        // construction).
        assert_eq!(g.volume_at(s(r)), g.max_volume() * S::HALF);
        // Full = π R² L (solid geometry), to a few ulps.
        rel_close(
            g.max_volume().to_f64(),
            full,
            4.0 * S::EPSILON.to_f64(),
            "full",
        );
        assert_eq!(g.volume_at(g.max_level()), g.max_volume());
        assert_eq!(g.volume_at(S::ZERO), S::ZERO);
        // Tank-table value (from memory): at h/D = 0.25 the filled fraction
        // of a horizontal cylinder is 0.1955 (1/3 − √3/(4π) = 0.19550).
        let frac = g.volume_at(s(0.25 * d)).to_f64() / g.max_volume().to_f64();
        assert!(
            (frac - 0.1955).abs() < 5e-5,
            "fraction at h/D = 0.25: {frac}"
        );
    }

    #[test]
    fn horizontal_cylinder_matches_segment_formula_f64() {
        horizontal_cylinder_matches_segment_formula::<f64>();
    }

    #[test]
    fn horizontal_cylinder_matches_segment_formula_f32() {
        horizontal_cylinder_matches_segment_formula::<f32>();
    }

    fn horizontal_cylinder_near_bottom<S: Scalar>() {
        // Small-level asymptotics of the segment area, derived by expanding
        // √(1 − t) in the width integral 8R²∫₀ˣ√(t(1−t))dt, x = h/(2R)
        // (calculus; written here, not looked up):
        // A ≈ (4/3)·√(2R)·h^{3/2}·(1 − 3x/10 − 3x²/56); the next relative
        // term is −x³/48 < 3e-15 at h = 1e-4·R.
        let r = 1.3;
        let g = geo(Shape::HorizontalCylinder {
            diameter: s::<S>(2.0 * r),
            length: s(1.0),
        });
        let tol = if is_f64::<S>() { 1e-12 } else { 2e-6 };
        for &frac in &[1e-10, 1e-7, 1e-5, 1e-4] {
            let h = s::<S>(frac * r);
            let hf = h.to_f64(); // the level actually represented in S
            let x = hf / (2.0 * r);
            let expected =
                4.0 / 3.0 * (2.0 * r).sqrt() * hf.powf(1.5) * (1.0 - 0.3 * x - 3.0 / 56.0 * x * x);
            rel_close(g.volume_at(h).to_f64(), expected, tol, "near-bottom volume");
        }
        // The series and the closed form agree where they meet (h = 0.2 R),
        // and the closed form is accurate there (amplification ≈ 4 ulp).
        let h = s::<S>(0.2 * r);
        let x = h / (S::TWO * s(r));
        let series = segment_area_series(x, s::<S>(r) * s::<S>(r)).to_f64();
        let closed = segment_area_closed(h, s::<S>(r)).to_f64();
        let reference = segment_reference(h.to_f64(), r);
        let tol = 16.0 * S::EPSILON.to_f64();
        rel_close(series, reference, tol, "series at switch");
        rel_close(closed, reference, tol, "closed form at switch");
    }

    #[test]
    fn horizontal_cylinder_near_bottom_f64() {
        horizontal_cylinder_near_bottom::<f64>();
    }

    #[test]
    fn horizontal_cylinder_near_bottom_f32() {
        horizontal_cylinder_near_bottom::<f32>();
    }

    // ---------------------------------------------------------------
    // Sphere
    // ---------------------------------------------------------------

    fn sphere_cap<S: Scalar>() {
        // Source: solid geometry, spherical cap V = π h² (3R − h)/3 (valid
        // for 0 ≤ h ≤ 2R); half sphere 2/3 π R³, full 4/3 π R³.
        let r = 1.7;
        let g = geo(Shape::Sphere {
            diameter: s::<S>(2.0 * r),
        });
        let pi = core::f64::consts::PI;
        let full = 4.0 / 3.0 * pi * r * r * r;
        let tol = if is_f64::<S>() { 1e-14 } else { 1e-6 };
        for i in 0..=200 {
            let h = 2.0 * r * f64::from(i) / 200.0;
            let expected = pi * h * h * (3.0 * r - h) / 3.0;
            let got = g.volume_at(s(h)).to_f64();
            assert!(
                (got - expected).abs() <= tol * full,
                "h = {h}: {got} vs {expected}"
            );
        }
        assert_eq!(g.volume_at(s(r)), g.max_volume() * S::HALF);
        let eps4 = 4.0 * S::EPSILON.to_f64();
        rel_close(
            g.volume_at(s(r)).to_f64(),
            2.0 / 3.0 * pi * r * r * r,
            eps4,
            "half",
        );
        rel_close(g.max_volume().to_f64(), full, eps4, "full");
        assert_eq!(g.volume_at(g.max_level()), g.max_volume());
    }

    #[test]
    fn sphere_cap_f64() {
        sphere_cap::<f64>();
    }

    #[test]
    fn sphere_cap_f32() {
        sphere_cap::<f32>();
    }

    // ---------------------------------------------------------------
    // Vertical cylinder
    // ---------------------------------------------------------------

    fn vertical_cylinder<S: Scalar>() {
        let pi = core::f64::consts::PI;
        let tol = 8.0 * S::EPSILON.to_f64();
        let (d, shell) = (2.2, 5.0);
        let r = d / 2.0;
        let a = pi * r * r;

        // Flat bottom: V = π R² h (solid geometry).
        let flat = geo(Shape::VerticalCylinder {
            diameter: s::<S>(d),
            height: s(shell),
            bottom: Bottom::Flat,
        });
        assert_eq!(flat.max_level(), s(shell));
        for &h in &[0.1, 1.0, 2.5, 4.9, 5.0] {
            rel_close(flat.volume_at(s(h)).to_f64(), a * h, tol, "flat");
        }

        // Cone bottom: cone volume π R² H / 3 at the cone top (solid
        // geometry); similar cones below it scale with (h/H)³; the shell
        // adds π R² (h − H).
        let hc = 0.9;
        let cone = geo(Shape::VerticalCylinder {
            diameter: s::<S>(d),
            height: s(shell),
            bottom: Bottom::Cone { height: s(hc) },
        });
        rel_close(cone.max_level().to_f64(), hc + shell, tol, "cone max level");
        let vc = a * hc / 3.0;
        rel_close(cone.volume_at(s(hc)).to_f64(), vc, tol, "cone top");
        rel_close(
            cone.volume_at(s(0.3 * hc)).to_f64(),
            vc * 0.027,
            tol,
            "cone 30%",
        );
        rel_close(
            cone.volume_at(s(hc + 2.0)).to_f64(),
            vc + 2.0 * a,
            tol,
            "cone + shell",
        );
        rel_close(cone.max_volume().to_f64(), vc + a * shell, tol, "cone full");

        // Dished bottom: spherical cap of depth dd of the sphere of radius
        // ρ = (R² + dd²)/(2 dd) (intersecting chords), V = π dd² (3ρ − dd)/3
        // (solid geometry), equivalently π dd (3R² + dd²)/6.
        let dd = 0.4;
        let dish = geo(Shape::VerticalCylinder {
            diameter: s::<S>(d),
            height: s(shell),
            bottom: Bottom::Dished { depth: s(dd) },
        });
        let rho = (r * r + dd * dd) / (2.0 * dd);
        let vd = pi * dd * dd * (3.0 * rho - dd) / 3.0;
        rel_close(
            vd,
            pi * dd * (3.0 * r * r + dd * dd) / 6.0,
            1e-14,
            "cap identity",
        );
        rel_close(dish.volume_at(s(dd)).to_f64(), vd, tol, "dish top");
        let h = 0.15;
        rel_close(
            dish.volume_at(s(h)).to_f64(),
            pi * h * h * (3.0 * rho - h) / 3.0,
            tol,
            "dish partial",
        );
        rel_close(
            dish.volume_at(s(dd + 1.0)).to_f64(),
            vd + a,
            tol,
            "dish + shell",
        );
        // Area at the rim equals the shell section (ρ geometry).
        rel_close(
            dish.area_at(s(dd * (1.0 - 1e-7))).to_f64(),
            a,
            1e-5,
            "dish rim area",
        );

        // Hemispherical head (dd = R): 2/3 π R³.
        let hemi = geo(Shape::VerticalCylinder {
            diameter: s::<S>(d),
            height: s(shell),
            bottom: Bottom::Dished { depth: s(r) },
        });
        rel_close(
            hemi.volume_at(s(r)).to_f64(),
            2.0 / 3.0 * pi * r * r * r,
            tol,
            "hemisphere",
        );
    }

    #[test]
    fn vertical_cylinder_f64() {
        vertical_cylinder::<f64>();
    }

    #[test]
    fn vertical_cylinder_f32() {
        vertical_cylinder::<f32>();
    }

    fn rectangular<S: Scalar>() {
        // V = L·W·h (solid geometry).
        let g = geo(Shape::Rectangular {
            length: s::<S>(3.5),
            width: s(1.25),
            height: s(2.0),
        });
        let tol = 4.0 * S::EPSILON.to_f64();
        for &h in &[0.0, 0.01, 0.7, 1.999, 2.0] {
            let got = g.volume_at(s(h)).to_f64();
            assert!(
                (got - 3.5 * 1.25 * h).abs() <= tol * 3.5 * 1.25 * h,
                "h = {h}"
            );
        }
        rel_close(g.area_at(s(1.0)).to_f64(), 3.5 * 1.25, tol, "area");
        assert_eq!(g.max_level(), s(2.0));
    }

    #[test]
    fn rectangular_f64() {
        rectangular::<f64>();
    }

    #[test]
    fn rectangular_f32() {
        rectangular::<f32>();
    }

    // ---------------------------------------------------------------
    // Properties over every shape
    // ---------------------------------------------------------------

    fn area_is_derivative<S: Scalar>() {
        // Central finite difference (V(h+δ) − V(h−δ))/(2δ), δ = 1e-5·H (f64)
        // or 2e-3·H (f32). Error terms: truncation δ²·V'''/6 and rounding
        // ≈ ε·V_max/δ. Tolerance: 1e-6 (f64) or 2e-3 (f32) of the largest
        // area, plus, at kinks of the area (cone/dish rim, table
        // breakpoints) where the difference straddles two slopes, the
        // spread of area over [h−δ, h+δ].
        let (dfrac, tol) = if is_f64::<S>() {
            (1e-5, 1e-6)
        } else {
            (2e-3, 2e-3)
        };
        for (name, g) in all_shapes::<S>() {
            let top = g.max_level().to_f64();
            let delta = dfrac * top;
            let mut max_area = 0.0f64;
            for i in 0..=1000 {
                max_area = max_area.max(g.area_at(s(top * f64::from(i) / 1000.0)).to_f64());
            }
            for i in 1..200 {
                let h = 2.0 * delta + (top - 4.0 * delta) * f64::from(i) / 200.0;
                let (lo, hi) = (s::<S>(h - delta), s::<S>(h + delta));
                let fd = (g.volume_at(hi) - g.volume_at(lo)).to_f64() / (hi - lo).to_f64();
                let area = g.area_at(s(h)).to_f64();
                let spread = (g.area_at(hi).to_f64() - g.area_at(lo).to_f64()).abs();
                assert!(
                    (fd - area).abs() <= tol * max_area + spread,
                    "{name} at h = {h}: finite difference {fd} vs area {area}"
                );
            }
        }
    }

    #[test]
    fn area_is_derivative_f64() {
        area_is_derivative::<f64>();
    }

    #[test]
    fn area_is_derivative_f32() {
        area_is_derivative::<f32>();
    }

    fn round_trip<S: Scalar>() {
        // level_at(volume_at(h)) ≈ h. Tolerance: 1e-10·H (f64) or 1e-5·H
        // (f32), plus the conditioning floor 8·ε·V_max/area(h): where the
        // free surface shrinks to nothing (top of a sphere or horizontal
        // cylinder) the volume, one number near V_max, cannot carry the
        // level more precisely than that. Backward error is checked
        // everywhere: |V(level_at(V)) − V| ≤ 8·ε·V_max.
        let (rt, eps) = (
            if is_f64::<S>() { 1e-10 } else { 1e-5 },
            S::EPSILON.to_f64(),
        );
        for (name, g) in all_shapes::<S>() {
            let top = g.max_level().to_f64();
            let vmax = g.max_volume().to_f64();
            let mut levels: Vec<f64> = (0..=400).map(|i| top * f64::from(i) / 400.0).collect();
            for &f in &[1e-12, 1e-9, 1e-6, 1e-4, 1e-3, 0.0999, 0.1001] {
                levels.push(f * top);
                levels.push(top * (1.0 - f));
            }
            for h in levels {
                let hs = s::<S>(h);
                let v = g.volume_at(hs);
                let back = g.level_at(v);
                let area = g.area_at(hs).to_f64();
                let floor = if area > 0.0 {
                    8.0 * eps * vmax / area
                } else {
                    f64::INFINITY
                };
                let err = (back - hs).abs().to_f64();
                assert!(
                    err <= rt * top + floor,
                    "{name}: h = {h}, level_at(volume_at(h)) = {back:?}, error {err:e}"
                );
                let verr = (g.volume_at(back) - v).abs().to_f64();
                assert!(
                    verr <= 8.0 * eps * vmax,
                    "{name}: h = {h}, volume error {verr:e}"
                );
            }
            // Ends are exact.
            assert_eq!(g.level_at(g.max_volume()), g.max_level(), "{name} top");
            assert_eq!(g.level_at(S::ZERO), S::ZERO, "{name} bottom");
        }
    }

    #[test]
    fn round_trip_f64() {
        round_trip::<f64>();
    }

    #[test]
    fn round_trip_f32() {
        round_trip::<f32>();
    }

    fn inverse_relative_accuracy_near_bottom<S: Scalar>() {
        // Near the bottom the level is recovered to a relative accuracy of a
        // few ε (stated tolerance: 64·ε relative), far below the absolute
        // round-trip tolerance, for every shape whose area vanishes there.
        let tol = 64.0 * S::EPSILON.to_f64();
        for (name, g) in all_shapes::<S>() {
            if matches!(g.shape(), Shape::Strapping(_)) {
                continue;
            }
            for &f in &[1e-8, 1e-6, 1e-3, 0.05] {
                let h = s::<S>(f * g.max_level().to_f64());
                let back = g.level_at(g.volume_at(h));
                rel_close(back.to_f64(), h.to_f64(), tol, name);
            }
        }
    }

    #[test]
    fn inverse_relative_accuracy_near_bottom_f64() {
        inverse_relative_accuracy_near_bottom::<f64>();
    }

    #[test]
    fn inverse_relative_accuracy_near_bottom_f32() {
        inverse_relative_accuracy_near_bottom::<f32>();
    }

    fn iterations_stay_few<S: Scalar>() {
        // The cap is 64 (proof in the module docs); the start guess keeps
        // the actual count small. Regression guard: at most 8 iterations
        // over a dense sweep of volumes for every shape, and over seeded
        // random spheres, horizontal cylinders and dished heads spanning six
        // decades of size, with volumes spread log-uniformly towards the
        // bottom and the top. The same sweep checks the backward error near
        // the bottom: |V(level_at(V)) − V| ≤ 32·ε·V (relative, so the
        // smallest holdups are inverted as accurately as the largest).
        let mut worst = 0;
        let mut volumes_at = |g: &Geometry<S>, vols: &mut dyn Iterator<Item = f64>| {
            let vmax = g.max_volume().to_f64();
            for v in vols {
                let vs = s::<S>(v);
                let (h, k) = g.level_and_iterations(vs);
                worst = worst.max(k);
                if vs > g.volume_at(S::ZERO) && v < 0.4 * vmax {
                    let back = g.volume_at(h).to_f64();
                    rel_close(back, vs.to_f64(), 32.0 * S::EPSILON.to_f64(), "backward");
                }
            }
        };
        for (_, g) in all_shapes::<S>() {
            let vmax = g.max_volume().to_f64();
            let mut vols: Vec<f64> = (0..=5000).map(|i| vmax * f64::from(i) / 5000.0).collect();
            for &f in &[1e-30, 1e-20, 1e-12, 1e-7] {
                vols.push(f * vmax);
                vols.push(vmax * (1.0 - f));
            }
            volumes_at(&g, &mut vols.into_iter());
        }
        // Seeded linear congruential generator (Knuth's MMIX constants).
        let mut seed = 0x2545_f491_4f6c_dd1du64;
        let mut uniform = move || {
            seed = seed
                .wrapping_mul(6_364_136_223_846_793_005)
                .wrapping_add(1_442_695_040_888_963_407);
            (seed >> 11) as f64 / (1u64 << 53) as f64
        };
        for _ in 0..40 {
            let d = 10f64.powf(6.0 * uniform() - 3.0);
            let depth = 0.5 * d * uniform().max(1e-6);
            let shapes = [
                Shape::Sphere {
                    diameter: s::<S>(d),
                },
                Shape::HorizontalCylinder {
                    diameter: s(d),
                    length: s(3.0 * d),
                },
                Shape::VerticalCylinder {
                    diameter: s(d),
                    height: s(d),
                    bottom: Bottom::Dished { depth: s(depth) },
                },
            ];
            for shape in shapes {
                let g = geo(shape);
                let vmax = g.max_volume().to_f64();
                let mut vols: Vec<f64> = Vec::new();
                for j in 0..300 {
                    let u = uniform();
                    vols.push(match j % 3 {
                        0 => vmax * 10f64.powf(-20.0 * u),
                        1 => vmax * (1.0 - 10f64.powf(-15.0 * u)),
                        _ => vmax * u,
                    });
                }
                volumes_at(&g, &mut vols.into_iter());
            }
        }
        assert!(worst <= 8, "worst iteration count {worst}");
        assert!(worst >= 3, "solver apparently unused ({worst})");
    }

    #[test]
    fn iterations_stay_few_f64() {
        iterations_stay_few::<f64>();
    }

    #[test]
    fn iterations_stay_few_f32() {
        iterations_stay_few::<f32>();
    }

    fn monotone<S: Scalar>() {
        // Volume never decreases with level, and level never with volume,
        // across branch switches (series/closed form, head/shell, halves).
        for (name, g) in all_shapes::<S>() {
            let top = g.max_level().to_f64();
            let vmax = g.max_volume().to_f64();
            let (mut pv, mut pl) = (S::ZERO, S::ZERO);
            for i in 0..=20_000 {
                let v = g.volume_at(s(top * f64::from(i) / 20_000.0));
                let l = g.level_at(s(vmax * f64::from(i) / 20_000.0));
                assert!(v >= pv, "{name}: volume decreases at step {i}");
                assert!(l >= pl, "{name}: level decreases at step {i}");
                pv = v;
                pl = l;
            }
        }
    }

    #[test]
    fn monotone_f64() {
        monotone::<f64>();
    }

    #[test]
    fn monotone_f32() {
        monotone::<f32>();
    }

    fn bad_inputs_clamp<S: Scalar>() {
        let inf = s::<S>(f64::INFINITY);
        let nan = s::<S>(f64::NAN);
        for (name, g) in all_shapes::<S>() {
            let heel = g.volume_at(S::ZERO);
            for x in [nan, -inf, inf, s(-1.0), s(-1e-30), S::MAX, -S::MAX] {
                let v = g.volume_at(x);
                let l = g.level_at(x);
                let a = g.area_at(x);
                assert!(
                    v.is_finite() && l.is_finite() && a.is_finite(),
                    "{name} {x:?}"
                );
                assert!(v >= S::ZERO && v <= g.max_volume(), "{name} {x:?}");
                assert!(l >= S::ZERO && l <= g.max_level(), "{name} {x:?}");
            }
            assert_eq!(g.volume_at(nan), heel, "{name}: NaN level counts as 0");
            assert_eq!(g.volume_at(s(-3.0)), heel, "{name}");
            assert_eq!(g.volume_at(inf), g.max_volume(), "{name}");
            assert_eq!(g.level_at(nan), S::ZERO, "{name}: NaN volume counts as 0");
            assert_eq!(g.level_at(s(-3.0)), S::ZERO, "{name}");
            assert_eq!(g.level_at(inf), g.max_level(), "{name}");
            assert_eq!(g.level_at(g.max_volume() * S::TWO), g.max_level(), "{name}");
        }
    }

    #[test]
    fn bad_inputs_clamp_f64() {
        bad_inputs_clamp::<f64>();
    }

    #[test]
    fn bad_inputs_clamp_f32() {
        bad_inputs_clamp::<f32>();
    }

    // ---------------------------------------------------------------
    // Strapping tables
    // ---------------------------------------------------------------

    fn strapping_edges<S: Scalar>() {
        // Piecewise-linear interpolation (definition of a strapping table).
        let g = geo(Shape::Strapping(table::<S>(&[
            (0.0, 0.5),
            (1.0, 2.5),
            (2.0, 3.5),
            (4.0, 9.5),
        ])));
        assert_eq!(g.max_level(), s(4.0));
        assert_eq!(g.max_volume(), s(9.5));
        // Heel: level 0 (and below) gives the first volume; volumes up to
        // the heel give level 0.
        assert_eq!(g.volume_at(S::ZERO), s(0.5));
        assert_eq!(g.volume_at(s(-1.0)), s(0.5));
        assert_eq!(g.level_at(s(0.25)), S::ZERO);
        assert_eq!(g.level_at(s(0.5)), S::ZERO);
        // Exactly at breakpoints, both ways.
        for &(l, v) in &[(1.0, 2.5), (2.0, 3.5), (4.0, 9.5)] {
            assert_eq!(g.volume_at(s(l)), s(v), "volume at breakpoint {l}");
            assert_eq!(g.level_at(s(v)), s(l), "level at breakpoint {v}");
        }
        // Inside segments.
        let tol = 4.0 * S::EPSILON.to_f64();
        rel_close(g.volume_at(s(0.5)).to_f64(), 1.5, tol, "mid first");
        rel_close(g.volume_at(s(3.0)).to_f64(), 6.5, tol, "mid last");
        rel_close(g.level_at(s(6.5)).to_f64(), 3.0, tol, "inverse mid last");
        // Above the last point.
        assert_eq!(g.volume_at(s(7.0)), s(9.5));
        assert_eq!(g.level_at(s(20.0)), s(4.0));
        // Area: slope of the segment; the segment above at a breakpoint; the
        // last segment at and above the top.
        assert_eq!(g.area_at(S::ZERO), s(2.0));
        assert_eq!(g.area_at(s(0.99)), s(2.0));
        assert_eq!(g.area_at(s(1.0)), s(1.0));
        assert_eq!(g.area_at(s(2.0)), s(3.0));
        assert_eq!(g.area_at(s(4.0)), s(3.0));
        assert_eq!(g.area_at(s(9.0)), s(3.0));
        // The convenience constructor builds the same table.
        let pts = [
            (S::ZERO, s(0.5)),
            (s(1.0), s(2.5)),
            (s(2.0), s(3.5)),
            (s(4.0), s(9.5)),
        ];
        match Geometry::strapping(&pts) {
            Ok(h) => assert_eq!(h.shape(), g.shape()),
            Err(e) => panic!("{e:?}"),
        }
    }

    #[test]
    fn strapping_edges_f64() {
        strapping_edges::<f64>();
    }

    #[test]
    fn strapping_edges_f32() {
        strapping_edges::<f32>();
    }

    fn strapping_errors<S: Scalar>() {
        let err = |pts: &[(f64, f64)]| {
            let p: Vec<(S, S)> = pts.iter().map(|&(l, v)| (s::<S>(l), s::<S>(v))).collect();
            Geometry::strapping(&p).err()
        };
        assert_eq!(err(&[]), Some(Error::StrappingTooShort));
        assert_eq!(err(&[(0.0, 1.0)]), Some(Error::StrappingTooShort));
        // First level must be exactly 0.
        assert_eq!(
            err(&[(0.1, 0.0), (1.0, 1.0)]),
            Some(Error::StrappingNotMonotone(0))
        );
        // First volume must be >= 0.
        assert_eq!(
            err(&[(0.0, -0.1), (1.0, 1.0)]),
            Some(Error::StrappingNotMonotone(0))
        );
        // Level not rising (equal, then falling).
        assert_eq!(
            err(&[(0.0, 0.0), (1.0, 1.0), (1.0, 2.0)]),
            Some(Error::StrappingNotMonotone(2))
        );
        assert_eq!(
            err(&[(0.0, 0.0), (1.0, 1.0), (2.0, 2.0), (1.5, 3.0)]),
            Some(Error::StrappingNotMonotone(3))
        );
        // Volume not rising.
        assert_eq!(
            err(&[(0.0, 0.0), (1.0, 1.0), (2.0, 0.5)]),
            Some(Error::StrappingNotMonotone(2))
        );
        assert_eq!(
            err(&[(0.0, 0.0), (1.0, 0.0)]),
            Some(Error::StrappingNotMonotone(1))
        );
        // Non-finite values, with the point's index.
        assert_eq!(
            err(&[(0.0, 0.0), (1.0, 1.0), (f64::NAN, 2.0)]),
            Some(Error::StrappingNonFinite(2))
        );
        assert_eq!(
            err(&[(0.0, 0.0), (1.0, f64::INFINITY)]),
            Some(Error::StrappingNonFinite(1))
        );
        assert_eq!(
            err(&[(f64::NAN, 0.0), (1.0, 1.0)]),
            Some(Error::StrappingNonFinite(0))
        );
        // A bad point before a NaN is reported first (first offending point).
        assert_eq!(
            err(&[(0.0, 0.0), (1.0, 1.0), (0.5, 2.0), (f64::NAN, 3.0)]),
            Some(Error::StrappingNotMonotone(2))
        );
        // Over capacity.
        let many: Vec<(f64, f64)> = (0..=STRAPPING_CAPACITY)
            .map(|i| (i as f64, i as f64))
            .collect();
        assert_eq!(err(&many), Some(Error::StrappingFull));
        // Exactly at capacity is fine.
        assert_eq!(err(&many[..STRAPPING_CAPACITY]), None);
        // Through `new` as well.
        let short = Shape::Strapping(table::<S>(&[(0.0, 0.0)]));
        assert_eq!(Geometry::new(short).err(), Some(Error::StrappingTooShort));
    }

    #[test]
    fn strapping_errors_f64() {
        strapping_errors::<f64>();
    }

    #[test]
    fn strapping_errors_f32() {
        strapping_errors::<f32>();
    }

    #[test]
    fn strapping_slope_overflow_is_rejected() {
        // Levels 1e-300 apart with a volume step of 1e10: slope 1e310.
        let p = [(0.0f64, 0.0), (1e-300, 1e10), (1.0, 2e10)];
        assert_eq!(
            Geometry::strapping(&p).err(),
            Some(Error::StrappingNonFinite(1))
        );
    }

    fn shape_errors<S: Scalar>() {
        let inf = s::<S>(f64::INFINITY);
        let nan = s::<S>(f64::NAN);
        for bad in [S::ZERO, s(-1.0), nan, inf] {
            let shapes = [
                Shape::VerticalCylinder {
                    diameter: bad,
                    height: s(1.0),
                    bottom: Bottom::Flat,
                },
                Shape::VerticalCylinder {
                    diameter: s(1.0),
                    height: bad,
                    bottom: Bottom::Flat,
                },
                Shape::VerticalCylinder {
                    diameter: s(1.0),
                    height: s(1.0),
                    bottom: Bottom::Cone { height: bad },
                },
                Shape::VerticalCylinder {
                    diameter: s(1.0),
                    height: s(1.0),
                    bottom: Bottom::Dished { depth: bad },
                },
                Shape::HorizontalCylinder {
                    diameter: bad,
                    length: s(1.0),
                },
                Shape::HorizontalCylinder {
                    diameter: s(1.0),
                    length: bad,
                },
                Shape::Rectangular {
                    length: bad,
                    width: s(1.0),
                    height: s(1.0),
                },
                Shape::Rectangular {
                    length: s(1.0),
                    width: bad,
                    height: s(1.0),
                },
                Shape::Rectangular {
                    length: s(1.0),
                    width: s(1.0),
                    height: bad,
                },
                Shape::Sphere { diameter: bad },
            ];
            for shape in shapes {
                assert_eq!(
                    Geometry::new(shape.clone()).err(),
                    Some(Error::GeometryNonPositive),
                    "{shape:?}"
                );
            }
        }
        // Dish deeper than the radius.
        let deep = Shape::VerticalCylinder {
            diameter: s::<S>(2.0),
            height: s(1.0),
            bottom: Bottom::Dished { depth: s(1.01) },
        };
        assert_eq!(Geometry::new(deep).err(), Some(Error::GeometryDishTooDeep));
        // Finite dimensions whose volume overflows.
        let huge = Shape::Sphere {
            diameter: S::MAX * S::HALF,
        };
        assert_eq!(Geometry::new(huge).err(), Some(Error::GeometryNonPositive));
    }

    #[test]
    fn shape_errors_f64() {
        shape_errors::<f64>();
    }

    #[test]
    fn shape_errors_f32() {
        shape_errors::<f32>();
    }
}
