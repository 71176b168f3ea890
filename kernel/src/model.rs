//! The balance model: vessel, outlets, reaction network, and its validation.
//!
//! A [`VesselSpec`] is the raw description (public fields, as read from a
//! configuration). [`Model::new`] checks it once and compiles it into a
//! [`Model`], which cannot be invalid; only a `Model` reaches the tick.
//!
//! # Equations
//!
//! Holdup `V` (m³) and component amounts `n_i` (mol), well mixed, constant
//! density:
//!
//! ```text
//! dV/dt   = Σ_s q_in,s − Σ_k q_out,k(V)
//! dn_i/dt = Σ_s q_in,s·c_in,s,i − (Σ_k q_out,k)·n_i/V + V·Σ_j ν_ij·r_j(c, T)
//! r_j     = k_f,j(T)·Π_i c_i^α_ij − k_b,j(T)·Π_i c_i^β_ij
//! k(T)    = k_ref·exp(−(E_a/R)·(1/T − 1/T_ref))          (Arrhenius)
//! ```
//!
//! Outlets are measured flows, or computed from the level `z(V)`:
//! gravity drain through an orifice or valve, `q = C_d·A_o·√(2 g (z − z_o))`
//! (Torricelli), or overflow over a rectangular sharp-crested weir,
//! `q = (2/3)·C_d·b·√(2 g)·(z − z_c)^{3/2}` (Poleni's weir formula).

use heapless::Vec;

use crate::geometry::Geometry;
use crate::integrate::linear::Pseudo;
use crate::units::{GAS_CONSTANT, STANDARD_GRAVITY};
use crate::{Error, Scalar};

/// How an outlet's flow is known.
#[derive(Clone, Copy, Debug, PartialEq)]
#[cfg_attr(feature = "serde", derive(serde::Serialize, serde::Deserialize))]
pub enum Outlet<S> {
    /// A flow meter: the flow is an input ([`Inputs::outlet_flows`]).
    Measured,
    /// Gravity drain through an orifice or a fixed valve opening whose centre
    /// is `elevation` m above the vessel bottom: `q = C_d·A·√(2 g (z − elevation))`.
    Orifice {
        /// Discharge coefficient `C_d` (sharp-edged orifice ≈ 0.61, common practice).
        discharge_coefficient: S,
        /// Orifice (or valve flow) area `A`, m².
        area: S,
        /// Height of the orifice centre above the vessel bottom, m.
        elevation: S,
    },
    /// Overflow over a rectangular sharp-crested weir:
    /// `q = (2/3)·C_d·b·√(2 g)·(z − crest)^{3/2}`.
    Weir {
        /// Discharge coefficient `C_d` (≈ 0.62 for a sharp crest, common practice).
        discharge_coefficient: S,
        /// Crest width `b`, m.
        width: S,
        /// Crest height above the vessel bottom, m.
        crest_level: S,
    },
}

/// One direction of a reaction's kinetics: `k(T)·Π c_i^order_i`.
#[derive(Clone, Copy, Debug, PartialEq)]
#[cfg_attr(feature = "serde", derive(serde::Serialize, serde::Deserialize))]
#[cfg_attr(
    feature = "serde",
    serde(bound(
        serialize = "S: serde::Serialize",
        deserialize = "S: serde::Deserialize<'de> + Copy + Default"
    ))
)]
pub struct Kinetics<S, const N: usize> {
    /// Rate constant at `reference_temperature`, in (mol/m³)^(1 − Σ orders)/s.
    pub rate_constant: S,
    /// Activation energy `E_a`, J/mol (0 for no temperature dependence).
    pub activation_energy: S,
    /// Reaction order on each species (0 where the rate does not depend on it).
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_arrays"))]
    pub orders: [S; N],
}

/// One reaction: stoichiometry and rate law.
#[derive(Clone, Copy, Debug, PartialEq)]
#[cfg_attr(feature = "serde", derive(serde::Serialize, serde::Deserialize))]
#[cfg_attr(
    feature = "serde",
    serde(bound(
        serialize = "S: serde::Serialize",
        deserialize = "S: serde::Deserialize<'de> + Copy + Default"
    ))
)]
pub struct ReactionSpec<S, const N: usize> {
    /// Stoichiometric coefficients `ν_i`: negative for reactants, positive for
    /// products, zero for species not taking part.
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_arrays"))]
    pub stoichiometry: [S; N],
    /// Forward rate law.
    pub forward: Kinetics<S, N>,
    /// Reverse rate law, for a reversible reaction (its orders are usually on
    /// the products).
    pub reverse: Option<Kinetics<S, N>>,
    /// Temperature at which the rate constants are given, K.
    pub reference_temperature: S,
}

/// Which integrator the component balances use.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[cfg_attr(feature = "serde", derive(serde::Serialize, serde::Deserialize))]
pub enum Method {
    /// The exact step where the network allows it (a first-order network,
    /// see [`Network`]), MPRK22 otherwise. The default.
    #[default]
    Auto,
    /// The exact step; the configuration is refused if the network is not a
    /// first-order network. A tick with changing holdup and a reaction is
    /// second order (the matrix exponential with the tick-mean dilution)
    /// and says so ([`crate::StatusFlags::METHOD_FALLBACK`]).
    Exact,
    /// The modified Patankar–Runge–Kutta scheme (MPRK22): positive and
    /// conservative at any tick, second order, a steady state a fixed
    /// point. A mild tick is stepped whole (feed, dilution and reactions
    /// together); a stiff one, or one longer than a fraction of the
    /// residence time, by error-controlled substeps of the quasi-linear
    /// exponential, at most [`crate::integrate::stiff::MAX_SUBSTEPS`]. See
    /// [`crate::integrate`].
    Mprk22,
    /// Reference only: classical RK4. Loses positivity at large `k·h`;
    /// negative amounts are clamped and flagged. Needs the kernel feature
    /// `reference-methods` (on by default).
    ReferenceRk4,
    /// Reference only: explicit Euler, what a PLC block usually does. Goes
    /// negative at `λh > 1`; negative amounts are clamped and flagged.
    /// Needs the kernel feature `reference-methods` (on by default).
    ReferenceEuler,
}

/// The class of a reaction network, found at configuration: it decides
/// which integrator [`Method::Auto`] uses.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[cfg_attr(feature = "serde", derive(serde::Serialize))]
pub enum Network {
    /// No reaction, or only irreversible first-order consumption
    /// (`ν = −1`, order 1) with no products: each species decays on its
    /// own; closed form per species.
    Uncoupled,
    /// Every reaction direction runs at `k·c_l`, `l` its only consumed
    /// species (order 1 in it, 0 in all others): A → B, A → B → C, parallel
    /// A → B and A → C, A ⇌ B, A → B + C. The balances are a linear system;
    /// stepped by its matrix exponential.
    FirstOrder,
    /// Anything else (a second-order or fractional rate, two reactants, a
    /// zero-order rate): MPRK22.
    General,
}

/// Raw description of one vessel with `N` species, up to `R` reactions,
/// up to `O` outlets.
#[derive(Clone, Debug)]
#[cfg_attr(feature = "serde", derive(serde::Serialize, serde::Deserialize))]
#[cfg_attr(
    feature = "serde",
    serde(bound(
        serialize = "S: serde::Serialize + Scalar",
        deserialize = "S: serde::Deserialize<'de> + Scalar"
    ))
)]
pub struct VesselSpec<S, const N: usize, const R: usize, const O: usize> {
    /// Shape and size (already validated).
    pub geometry: Geometry<S>,
    /// Outlets, in the order of [`Inputs::outlet_flows`].
    pub outlets: Vec<Outlet<S>, O>,
    /// Reaction network.
    pub reactions: Vec<ReactionSpec<S, N>, R>,
    /// Below this holdup (m³) concentrations are not resolved from the
    /// balance (see [`crate::StatusFlags::NEAR_EMPTY`]).
    pub min_holdup: S,
    /// Tick length, ms.
    pub tick_ms: u32,
    /// Integrator for the component balances.
    pub method: Method,
}

/// Inputs held constant over one tick (zero-order hold), SI units.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Inputs<S, const N: usize, const I: usize, const O: usize> {
    /// Flow of each inlet, m³/s.
    pub inlet_flows: [S; I],
    /// Composition of each inlet, mol/m³.
    pub feed: [[S; N]; I],
    /// Flow of each outlet, m³/s; read only for [`Outlet::Measured`] outlets.
    pub outlet_flows: [S; O],
    /// Vessel temperature, K.
    pub temperature: S,
}

impl<S: Scalar, const N: usize, const I: usize, const O: usize> Inputs<S, N, I, O> {
    /// All flows and feed concentrations zero, at temperature `temperature` K.
    pub fn quiescent(temperature: S) -> Self {
        Self {
            inlet_flows: [S::ZERO; I],
            feed: [[S::ZERO; N]; I],
            outlet_flows: [S::ZERO; O],
            temperature,
        }
    }
}

/// A compiled reaction order: the common cases avoid `powf`.
#[derive(Clone, Copy, Debug, PartialEq)]
#[cfg_attr(feature = "serde", derive(serde::Serialize))]
pub(crate) enum Order<S> {
    Zero,
    One,
    Two,
    Real(S),
}

impl<S: Scalar> Order<S> {
    fn of(a: S) -> Self {
        if a == S::ZERO {
            Order::Zero
        } else if a == S::ONE {
            Order::One
        } else if a == S::TWO {
            Order::Two
        } else {
            Order::Real(a)
        }
    }

    #[inline]
    fn apply(self, c: S) -> S {
        match self {
            Order::Zero => S::ONE,
            Order::One => c,
            Order::Two => c * c,
            Order::Real(a) => c.powf(a),
        }
    }

    /// Derivative of `c^order` with respect to `c`. For a real order below
    /// one the slope at `c → 0` is unbounded; it is taken at `c = ε` instead.
    #[inline]
    fn slope(self, c: S) -> S {
        match self {
            Order::Zero => S::ZERO,
            Order::One => S::ONE,
            Order::Two => S::TWO * c,
            Order::Real(a) => a * c.max(S::EPSILON).powf(a - S::ONE),
        }
    }
}

/// Compiled kinetics of one reaction direction.
#[derive(Clone, Copy, Debug, PartialEq)]
#[cfg_attr(feature = "serde", derive(serde::Serialize))]
pub(crate) struct Rate<S, const N: usize> {
    k_ref: S,
    /// `E_a/R`, K.
    ea_over_r: S,
    inv_t_ref: S,
    #[cfg_attr(
        feature = "serde",
        serde(serialize_with = "crate::serde_arrays::serialize")
    )]
    orders: [Order<S>; N],
}

impl<S: Scalar, const N: usize> Rate<S, N> {
    /// Rate constant at temperature `t` (K).
    #[inline]
    pub(crate) fn constant(&self, t: S) -> S {
        if self.ea_over_r == S::ZERO {
            self.k_ref
        } else {
            self.k_ref * (-(self.ea_over_r) * (S::ONE / t - self.inv_t_ref)).exp()
        }
    }

    /// The largest rate constant at any temperature: `k_ref·e^{E_a/(R·T_ref)}`
    /// (the limit `T → ∞`; infinite if that overflows).
    pub(crate) fn max_constant(&self) -> S {
        if self.ea_over_r == S::ZERO {
            self.k_ref
        } else {
            self.k_ref * (self.ea_over_r * self.inv_t_ref).exp()
        }
    }

    /// True when this direction runs at `k·c_l` with `l` its only consumed
    /// species: `sign·ν_l < 0` for exactly one `l`, order 1 in `l` and 0 in
    /// every other species (`sign` is +1 for a forward direction, −1 for a
    /// reverse one).
    pub(crate) fn first_order_in(&self, nu: &[S; N], sign: S) -> bool {
        let mut consumed = 0usize;
        for (&n, o) in nu.iter().zip(self.orders.iter()) {
            if sign * n < S::ZERO {
                consumed += 1;
                if *o != Order::One {
                    return false;
                }
            } else if *o != Order::Zero {
                return false;
            }
        }
        consumed == 1
    }

    /// Rate in mol/(m³·s) for rate constant `k` at concentrations `c`.
    #[inline]
    pub(crate) fn rate(&self, k: S, c: &[S; N]) -> S {
        let mut r = k;
        for (o, &ci) in self.orders.iter().zip(c.iter()) {
            r *= o.apply(ci);
        }
        r
    }

    /// Rate and its gradient `∂r/∂c_k` (`N²` multiplications).
    pub(crate) fn rate_and_gradient(&self, k: S, c: &[S; N], grad: &mut [S; N]) -> S {
        for kk in 0..N {
            let o = self.orders[kk];
            if o == Order::Zero {
                grad[kk] = S::ZERO;
                continue;
            }
            let mut p = k * o.slope(c[kk]);
            for m in 0..N {
                if m != kk {
                    p *= self.orders[m].apply(c[m]);
                }
            }
            grad[kk] = p;
        }
        self.rate(k, c)
    }
}

/// A compiled reaction: stoichiometry and one or two directions.
#[derive(Clone, Copy, Debug, PartialEq)]
#[cfg_attr(feature = "serde", derive(serde::Serialize))]
pub(crate) struct Reaction<S, const N: usize> {
    #[cfg_attr(
        feature = "serde",
        serde(serialize_with = "crate::serde_arrays::serialize")
    )]
    pub(crate) nu: [S; N],
    pub(crate) forward: Rate<S, N>,
    pub(crate) reverse: Option<Rate<S, N>>,
}

/// A validated vessel model. Built only by [`Model::new`].
///
/// With the `serde` feature it can be encoded (the checkpoint's
/// configuration fingerprint is the CRC of that encoding), but never
/// decoded: decode a [`VesselSpec`] and validate it with [`Model::new`].
#[derive(Clone, Debug)]
#[cfg_attr(
    feature = "serde",
    derive(serde::Serialize),
    serde(bound(serialize = "S: Scalar + serde::Serialize"))
)]
pub struct Model<S, const N: usize, const R: usize, const O: usize> {
    pub(crate) geometry: Geometry<S>,
    pub(crate) outlets: Vec<Outlet<S>, O>,
    pub(crate) reactions: Vec<Reaction<S, N>, R>,
    pub(crate) min_holdup: S,
    pub(crate) capacity: S,
    pub(crate) tick_ms: u32,
    /// The tick in seconds, converted once (the conversion goes through
    /// `f64`, which is software arithmetic on the Cortex-M4F).
    pub(crate) tick_s: S,
    pub(crate) method: Method,
    /// The class of the reaction network.
    pub(crate) network: Network,
    /// Bound on the doublings of the matrix exponential of a first-order
    /// network (see [`Model::max_squarings`]).
    pub(crate) max_squarings: u16,
    pub(crate) has_computed_outlets: bool,
}

// Out of line: configuration only, called for both directions (two inlined
// copies cost about 0.5 KB of a gateway image).
#[inline(never)]
fn compile_rate<S: Scalar, const N: usize>(
    k: &Kinetics<S, N>,
    t_ref: S,
    index: u8,
) -> Result<Rate<S, N>, Error> {
    if !Scalar::is_finite(k.rate_constant)
        || k.rate_constant < S::ZERO
        || !Scalar::is_finite(k.activation_energy)
        || k.activation_energy < S::ZERO
    {
        return Err(Error::ReactionRateConstant(index));
    }
    let mut orders = [Order::Zero; N];
    for (o, &a) in orders.iter_mut().zip(k.orders.iter()) {
        if !Scalar::is_finite(a) || a < S::ZERO || a > S::of(4.0) {
            return Err(Error::ReactionOrder(index));
        }
        *o = Order::of(a);
    }
    Ok(Rate {
        k_ref: k.rate_constant,
        ea_over_r: k.activation_energy / S::of(GAS_CONSTANT),
        inv_t_ref: S::ONE / t_ref,
        orders,
    })
}

impl<S: Scalar, const N: usize, const R: usize, const O: usize> Model<S, N, R, O> {
    /// Check a raw description and compile it.
    ///
    /// Errors: [`Error::ConfigZeroTick`], [`Error::ConfigMinHoldup`],
    /// [`Error::ConfigOutlet`], [`Error::ReactionNoReactant`],
    /// [`Error::ReactionOrder`], [`Error::ReactionRateConstant`],
    /// [`Error::ConfigExactNotApplicable`], [`Error::ConfigMethodUnavailable`].
    pub fn new(spec: VesselSpec<S, N, R, O>) -> Result<Self, Error> {
        if spec.tick_ms == 0 {
            return Err(Error::ConfigZeroTick);
        }
        let capacity = spec.geometry.max_volume();
        let top = spec.geometry.max_level();
        if !Scalar::is_finite(spec.min_holdup)
            || spec.min_holdup < S::ZERO
            || spec.min_holdup >= capacity
        {
            return Err(Error::ConfigMinHoldup);
        }
        let mut has_computed_outlets = false;
        for (k, o) in spec.outlets.iter().enumerate() {
            let ok = match *o {
                Outlet::Measured => true,
                Outlet::Orifice {
                    discharge_coefficient: c,
                    area: a,
                    elevation: z,
                }
                | Outlet::Weir {
                    discharge_coefficient: c,
                    width: a,
                    crest_level: z,
                } => {
                    has_computed_outlets = true;
                    Scalar::is_finite(c)
                        && Scalar::is_finite(a)
                        && Scalar::is_finite(z)
                        && c > S::ZERO
                        && a > S::ZERO
                        && z >= S::ZERO
                        && z <= top
                }
            };
            if !ok {
                return Err(Error::ConfigOutlet(k as u8));
            }
        }
        let mut reactions = Vec::new();
        let mut uncoupled = true;
        let mut first_order = true;
        // Bound on the one-norm of the network matrix at any temperature
        // (rate constants at T → ∞: k_ref·e^{E_a/(R·T_ref)}).
        let mut k_norm = S::ZERO;
        for (j, r) in spec.reactions.iter().enumerate() {
            let idx = j as u8;
            if !Scalar::is_finite(r.reference_temperature) || r.reference_temperature <= S::ZERO {
                return Err(Error::ReactionRateConstant(idx));
            }
            let mut reactants = 0usize;
            for &nu in r.stoichiometry.iter() {
                if !Scalar::is_finite(nu) {
                    return Err(Error::ConfigNonFinite);
                }
                if nu < S::ZERO {
                    reactants += 1;
                }
            }
            if reactants == 0 {
                return Err(Error::ReactionNoReactant(idx));
            }
            let forward = compile_rate(&r.forward, r.reference_temperature, idx)?;
            let reverse = match &r.reverse {
                Some(k) => {
                    if !r.stoichiometry.iter().any(|&nu| nu > S::ZERO) {
                        // A reverse direction needs something to consume.
                        return Err(Error::ReactionNoReactant(idx));
                    }
                    Some(compile_rate(k, r.reference_temperature, idx)?)
                }
                None => None,
            };
            // Uncoupled: irreversible, one reactant with ν = −1 and order 1,
            // no other order, no products.
            let single = reactants == 1
                && reverse.is_none()
                && r.stoichiometry.iter().all(|&nu| nu <= S::ZERO)
                && r.stoichiometry
                    .iter()
                    .zip(forward.orders.iter())
                    .all(|(&nu, o)| {
                        if nu < S::ZERO {
                            nu == -S::ONE && *o == Order::One
                        } else {
                            *o == Order::Zero
                        }
                    });
            uncoupled &= single;
            first_order &= forward.first_order_in(&r.stoichiometry, S::ONE);
            if let Some(rev) = &reverse {
                first_order &= rev.first_order_in(&r.stoichiometry, -S::ONE);
            }
            let weight: S = r
                .stoichiometry
                .iter()
                .map(|nu| nu.abs())
                .fold(S::ZERO, |a, b| a + b);
            k_norm += weight * forward.max_constant();
            if let Some(rev) = &reverse {
                k_norm += weight * rev.max_constant();
            }
            // Capacity of `reactions` equals that of `spec.reactions`.
            let _ = reactions.push(Reaction {
                nu: r.stoichiometry,
                forward,
                reverse,
            });
        }
        let network = if uncoupled {
            Network::Uncoupled
        } else if first_order {
            Network::FirstOrder
        } else {
            Network::General
        };
        if spec.method == Method::Exact && network == Network::General {
            return Err(Error::ConfigExactNotApplicable);
        }
        if cfg!(not(feature = "reference-methods"))
            && matches!(spec.method, Method::ReferenceRk4 | Method::ReferenceEuler)
        {
            return Err(Error::ConfigMethodUnavailable);
        }
        Ok(Self {
            geometry: spec.geometry,
            outlets: spec.outlets,
            reactions,
            min_holdup: spec.min_holdup,
            capacity,
            tick_ms: spec.tick_ms,
            tick_s: crate::units::seconds(spec.tick_ms),
            method: spec.method,
            network,
            max_squarings: crate::integrate::linear::squarings_bound(
                crate::units::seconds(spec.tick_ms),
                k_norm,
            ),
            has_computed_outlets,
        })
    }

    /// Vessel geometry.
    pub fn geometry(&self) -> &Geometry<S> {
        &self.geometry
    }

    /// Vessel capacity (volume at the top of the geometry), m³.
    pub fn capacity(&self) -> S {
        self.capacity
    }

    /// Minimum observable holdup, m³.
    pub fn min_holdup(&self) -> S {
        self.min_holdup
    }

    /// Tick length, ms.
    pub fn tick_ms(&self) -> u32 {
        self.tick_ms
    }

    /// Tick length, s.
    pub fn tick_s(&self) -> S {
        self.tick_s
    }

    /// Configured integrator.
    pub fn method(&self) -> Method {
        self.method
    }

    /// True when the network is a first-order network ([`Network::Uncoupled`]
    /// or [`Network::FirstOrder`]), so the exact step applies.
    pub fn is_exact_class(&self) -> bool {
        self.network != Network::General
    }

    /// The class of the reaction network.
    pub fn network(&self) -> Network {
        self.network
    }

    /// Worst-case doublings of the matrix exponential in one tick of a
    /// first-order network, fixed here at configuration:
    /// `⌈log₂((2h·‖K‖₁ + L)/θ)⌉` with `‖K‖₁` bounded by the rate constants
    /// at infinite temperature, `L = 2·ln(1/ε) + 2` and `θ = 1/2` (see
    /// [`crate::integrate::linear`]). Each doubling is two `N × N` matrix
    /// products.
    pub fn max_squarings(&self) -> u16 {
        self.max_squarings
    }

    /// Worst-case substeps of one stiff tick of a general network:
    /// [`crate::integrate::stiff::MAX_SUBSTEPS`], each one rate evaluation
    /// and two matrix exponentials of at most
    /// [`crate::integrate::stiff::STAGE_SQUARINGS`] doublings.
    pub fn max_substeps(&self) -> u16 {
        crate::integrate::stiff::MAX_SUBSTEPS
    }

    /// Number of reactions.
    pub fn reaction_count(&self) -> usize {
        self.reactions.len()
    }

    /// Total flow (m³/s) of the outlets computed from the state, at holdup `v`.
    pub fn computed_outflow(&self, v: S) -> S {
        if !self.has_computed_outlets {
            return S::ZERO;
        }
        self.computed_outflow_at_level(self.geometry.level_at(v)).0
    }

    /// Rate constants of every reaction direction at temperature `t` (K):
    /// `[forward, reverse]` per reaction (reverse 0 when irreversible).
    /// Out of line: the vessel's step and the observer's Jacobian each call
    /// it once a tick, and an inlined copy is ~0.5 KB of a gateway image
    /// (the call costs ~10 instructions).
    #[inline(never)]
    pub(crate) fn rate_constants(&self, t: S, out: &mut [[S; 2]; R]) {
        for (k, r) in out.iter_mut().zip(self.reactions.iter()) {
            k[0] = r.forward.constant(t);
            k[1] = match &r.reverse {
                Some(rev) => rev.constant(t),
                None => S::ZERO,
            };
        }
    }

    /// Molar rate (mol/s) of every reaction direction for amounts `n` in
    /// holdup `v`: `ρ = V·k·Π c^order`.
    pub(crate) fn molar_rates(&self, k: &[[S; 2]; R], n: &[S; N], v: S, out: &mut [[S; 2]; R]) {
        let mut c = [S::ZERO; N];
        let inv_v = S::ONE / v;
        for (ci, &ni) in c.iter_mut().zip(n.iter()) {
            *ci = ni * inv_v;
        }
        for ((o, kj), r) in out.iter_mut().zip(k.iter()).zip(self.reactions.iter()) {
            o[0] = v * r.forward.rate(kj[0], &c);
            o[1] = match &r.reverse {
                Some(rev) => v * rev.rate(kj[1], &c),
                None => S::ZERO,
            };
        }
    }

    /// Total computed outflow (m³/s) at holdup `v` and its slope with
    /// respect to the holdup (1/s): `dq/dV = (dq/dz)/A(z)`, with
    /// `dq/dz = q/(2·head)` for an orifice and `1.5·q/head` for a weir.
    pub(crate) fn computed_outflow_with_slope(&self, v: S) -> (S, S) {
        if !self.has_computed_outlets {
            return (S::ZERO, S::ZERO);
        }
        let z = self.geometry.level_at(v);
        let area = self.geometry.area_at(z);
        let (q, dqdz) = self.computed_outflow_at_level(z);
        let slope = if area > S::ZERO { dqdz / area } else { S::ZERO };
        (q, slope)
    }

    /// The outlet laws at level `z` (m): total computed flow (m³/s) and its
    /// slope with the level (m²/s). Orifice `q = C_d·A·√(2 g h)`, weir
    /// `q = (2/3)·C_d·b·√(2g)·h^{3/2}`, `h` the head above the orifice
    /// centre or the crest (common practice).
    fn computed_outflow_at_level(&self, z: S) -> (S, S) {
        let two_g = S::of(2.0 * STANDARD_GRAVITY);
        let (mut q, mut dqdz) = (S::ZERO, S::ZERO);
        for o in self.outlets.iter() {
            match *o {
                Outlet::Measured => {}
                Outlet::Orifice {
                    discharge_coefficient,
                    area: a,
                    elevation,
                } => {
                    let head = z - elevation;
                    if head > S::ZERO {
                        let qo = discharge_coefficient * a * (two_g * head).sqrt();
                        q += qo;
                        dqdz += qo / (S::TWO * head);
                    }
                }
                Outlet::Weir {
                    discharge_coefficient,
                    width,
                    crest_level,
                } => {
                    let head = z - crest_level;
                    if head > S::ZERO {
                        let qo = S::of(2.0 / 3.0)
                            * discharge_coefficient
                            * width
                            * two_g.sqrt()
                            * head
                            * head.sqrt();
                        q += qo;
                        dqdz += S::of(1.5) * qo / head;
                    }
                }
            }
        }
        (q, dqdz)
    }

    /// Jacobian of the reaction source `g_i = V·Σ_j ν_ij·r_j(n/V)` (mol/s)
    /// with respect to the amounts (`dg_dn`, 1/s) and the holdup (`dg_dv`,
    /// mol/(m³·s)), at rate constants `k`.
    pub(crate) fn reaction_jacobian(
        &self,
        k: &[[S; 2]; R],
        n: &[S; N],
        v: S,
        dg_dn: &mut [[S; N]; N],
        dg_dv: &mut [S; N],
    ) {
        *dg_dn = [[S::ZERO; N]; N];
        *dg_dv = [S::ZERO; N];
        if !(v > S::ZERO) {
            return;
        }
        let mut c = [S::ZERO; N];
        for (ci, &ni) in c.iter_mut().zip(n.iter()) {
            *ci = ni / v;
        }
        let mut grad = [S::ZERO; N];
        for (r, kj) in self.reactions.iter().zip(k.iter()) {
            for dir in 0..2 {
                let (rate, sign) = match (dir, &r.reverse) {
                    (0, _) => (&r.forward, S::ONE),
                    (_, Some(rev)) => (rev, -S::ONE),
                    (_, None) => continue,
                };
                let rj = rate.rate_and_gradient(kj[dir], &c, &mut grad);
                // Σ_k ∂r/∂c_k · c_k (the change of r when V changes at fixed n).
                let mut dc = S::ZERO;
                for (g, &ck) in grad.iter().zip(c.iter()) {
                    dc += *g * ck;
                }
                for i in 0..N {
                    let nu = sign * r.nu[i];
                    if nu == S::ZERO {
                        continue;
                    }
                    for kk in 0..N {
                        dg_dn[i][kk] += nu * grad[kk];
                    }
                    dg_dv[i] += nu * (rj - dc);
                }
            }
        }
    }

    /// A first-order network's directions as `(consumed species, rate
    /// constant)` at rate constants `k` (see
    /// [`crate::integrate::linear::Pseudo`]). Meaningful only for
    /// [`Network::FirstOrder`] and [`Network::Uncoupled`], where each
    /// direction consumes exactly one species at order 1.
    pub(crate) fn first_order_pseudo(&self, k: &[[S; 2]; R]) -> Pseudo<S, R> {
        let mut pseudo = [[(N, S::ZERO); 2]; R];
        for ((reaction, kj), ps) in self.reactions.iter().zip(k.iter()).zip(pseudo.iter_mut()) {
            if let Some(l) = reaction.nu.iter().position(|&x| x < S::ZERO) {
                ps[0] = (l, kj[0]);
            }
            if reaction.reverse.is_some() {
                if let Some(p) = reaction.nu.iter().position(|&x| x > S::ZERO) {
                    ps[1] = (p, kj[1]);
                }
            }
        }
        pseudo
    }

    /// First-order consumption constant of each species (1/s) at rate
    /// constants `k`; meaningful only for [`Network::Uncoupled`].
    pub(crate) fn first_order_constants(&self, k: &[[S; 2]; R]) -> [S; N] {
        let mut lam = [S::ZERO; N];
        for (r, kj) in self.reactions.iter().zip(k.iter()) {
            for (l, &nu) in lam.iter_mut().zip(r.nu.iter()) {
                if nu < S::ZERO {
                    *l += kj[0];
                }
            }
        }
        lam
    }
}
