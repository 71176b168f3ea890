//! What a tick reports: status flags and counters.
//!
//! A tick never fails. Every fault it meets is clamped to something safe and
//! raised here, so a caller (the observer, the register map, a log line) can
//! see it and lower the quality of what depends on it.

/// The operations every bit-set type of the kernel shares (status flags,
/// signal flags, diagnostic reasons): raw bits, tests, union. Each type keeps
/// its own constants and its own `names()` table.
macro_rules! flag_set_ops {
    ($ty:ident, $raw:ty) => {
        impl $ty {
            /// The raw bits (stable: documented with the constants, for
            /// registers and logs).
            pub const fn bits(self) -> $raw {
                self.0
            }

            /// From raw bits; unknown bits are kept.
            pub const fn from_bits(bits: $raw) -> Self {
                Self(bits)
            }

            /// True if every bit of `other` is set in `self`.
            pub const fn contains(self, other: Self) -> bool {
                self.0 & other.0 == other.0
            }

            /// True if any bit of `other` is set in `self`.
            pub const fn intersects(self, other: Self) -> bool {
                self.0 & other.0 != 0
            }

            /// True if no bit is set.
            pub const fn is_empty(self) -> bool {
                self.0 == 0
            }

            /// Set the bits of `other`.
            pub fn insert(&mut self, other: Self) {
                self.0 |= other.0;
            }
        }

        impl core::ops::BitOr for $ty {
            type Output = Self;
            fn bitor(self, rhs: Self) -> Self {
                Self(self.0 | rhs.0)
            }
        }

        impl core::ops::BitOrAssign for $ty {
            fn bitor_assign(&mut self, rhs: Self) {
                self.0 |= rhs.0;
            }
        }
    };
}
pub(crate) use flag_set_ops;

/// A set of status bits raised during one tick (or accumulated over several).
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Hash)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct StatusFlags(u16);

impl StatusFlags {
    /// Nothing to report.
    pub const NONE: Self = Self(0);
    /// The holdup reached zero: outlets delivered only what was there.
    pub const EMPTY: Self = Self(1 << 0);
    /// Holdup below the minimum observable holdup: the component balance is
    /// not resolved from concentrations; material leaves as mixed with the
    /// feed, reactions are not integrated, reported concentrations are held.
    pub const NEAR_EMPTY: Self = Self(1 << 1);
    /// Holdup would have exceeded the vessel capacity: clamped at the
    /// capacity, the excess left as overflow with the mixed composition.
    pub const OVERFLOW: Self = Self(1 << 2);
    /// The measured outflow was more than the vessel held: limited.
    pub const OUTLET_LIMITED: Self = Self(1 << 3);
    /// A negative flow or concentration was given: replaced by zero.
    pub const INPUT_NEGATIVE: Self = Self(1 << 4);
    /// A NaN or infinite input was given: flows and concentrations replaced
    /// by zero, temperature held at its last good value.
    pub const INPUT_NOT_FINITE: Self = Self(1 << 5);
    /// A component amount came out below zero by rounding (or, in a
    /// reference method, by the method itself) and was set to zero.
    pub const AMOUNT_CLAMPED: Self = Self(1 << 6);
    /// The exact method was requested but this tick could not be exact
    /// (the holdup changed while a reaction ran): the matrix exponential
    /// with the tick-mean dilution, second order in the tick, was used.
    pub const METHOD_FALLBACK: Self = Self(1 << 7);
    /// The stage solve met a singular or non-finite system: the component
    /// amounts were held at their previous values for this tick.
    pub const NUMERIC_FAULT: Self = Self(1 << 8);
    /// A stiff tick used its whole substep budget
    /// ([`crate::integrate::stiff::MAX_SUBSTEPS`]); the last substep took
    /// the rest of the tick without meeting the error tolerance. The
    /// amounts are still positive and conservative; the tick is less
    /// accurate than the others.
    pub const SUBSTEP_BUDGET: Self = Self(1 << 9);

    /// Names of the set flags, in bit order (fixed strings, for reports).
    pub fn names(self) -> impl Iterator<Item = &'static str> {
        const NAMES: [&str; 10] = [
            "empty",
            "near_empty",
            "overflow",
            "outlet_limited",
            "input_negative",
            "input_not_finite",
            "amount_clamped",
            "method_fallback",
            "numeric_fault",
            "substep_budget",
        ];
        NAMES
            .into_iter()
            .enumerate()
            .filter(move |(i, _)| self.0 & (1 << i) != 0)
            .map(|(_, n)| n)
    }
}

crate::status::flag_set_ops!(StatusFlags, u16);

/// Which integrator a tick actually used for the component balances.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum MethodUsed {
    /// Closed-form step (linear, uncoupled).
    #[default]
    Exact,
    /// Matrix exponential of a first-order network (exact at constant
    /// holdup, second order while it changes).
    Exponential,
    /// MPRK22 (modified Patankar–Runge–Kutta, second order): the whole tick
    /// when it is mild, error-controlled substeps of the quasi-linear
    /// exponential otherwise ([`StepReport::substeps`]).
    Mprk22,
    /// Reference: classical Runge–Kutta, fourth order (not positivity-preserving).
    ReferenceRk4,
    /// Reference: explicit Euler (not positivity-preserving).
    ReferenceEuler,
    /// Near-empty mixing step (no reaction, no division by the holdup).
    NearEmpty,
}

/// What one tick did.
#[derive(Clone, Copy, Debug, Default, PartialEq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct StepReport<S> {
    /// Faults met and clamps applied during the tick.
    pub flags: StatusFlags,
    /// The integrator used for the component balances.
    pub method: MethodUsed,
    /// Number of reaction-rate evaluations (each covers all reactions).
    pub rate_evaluations: u16,
    /// Substeps of a general network's tick, accepted and rejected (1 when
    /// the tick was stepped whole; 0 for the closed forms and the reference
    /// methods).
    pub substeps: u16,
    /// Number of clamps applied (inputs replaced, amounts set to zero,
    /// holdup limited).
    pub clamps: u8,
    /// Volume that left through all outlets and overflow during the tick, m³.
    pub outflow_volume: S,
    /// Volume that left by overflow above capacity during the tick, m³.
    pub spilled_volume: S,
}
