//! NAMUR NE107 device status and the quality of each output.

use super::{ClosureAlarm, NisState};
use crate::signal::Quality;
use crate::StatusFlags;

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
            .zip(RULE_NAMES)
            .filter(move |(r, _)| self.contains(r.reason))
            .map(|(_, name)| name)
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
    /// The balance-closure alarm ([`ClosureMonitor::alarm`](super::ClosureMonitor::alarm)).
    pub closure: Option<ClosureAlarm>,
    /// The model-mismatch state ([`NisMonitor::state`](super::NisMonitor::state)).
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
pub(super) struct Rule {
    pub(super) reason: Reasons,
    status: DeviceStatus,
    holdup: Quality,
    concentrations: Quality,
    /// The concentration effect applies to the offending species only.
    per_species: bool,
}

const fn rule(
    reason: Reasons,
    status: DeviceStatus,
    holdup: Quality,
    concentrations: Quality,
) -> Rule {
    Rule {
        reason,
        status,
        holdup,
        concentrations,
        per_species: false,
    }
}

const fn species_rule(reason: Reasons, status: DeviceStatus, concentrations: Quality) -> Rule {
    Rule {
        reason,
        status,
        holdup: Quality::Good,
        concentrations,
        per_species: true,
    }
}

use DeviceStatus::{Failure, FunctionCheck, MaintenanceRequired, OutOfSpecification};
use Quality::{Bad, Good, Uncertain};

/// The table of [`diagnose`], in bit order (keep in step with its docs).
pub(super) const RULES: [Rule; 19] = [
    rule(Reasons::NUMERIC_FAULT, Failure, Good, Bad),
    rule(Reasons::FLOW_BAD, Failure, Uncertain, Bad),
    rule(Reasons::NO_HOLDUP_SOURCE, Failure, Bad, Bad),
    species_rule(Reasons::FEED_BAD, Failure, Bad),
    rule(Reasons::FUNCTION_CHECK, FunctionCheck, Uncertain, Uncertain),
    rule(Reasons::LOW_HOLDUP, OutOfSpecification, Good, Uncertain),
    rule(Reasons::OVERFLOW, OutOfSpecification, Uncertain, Uncertain),
    rule(
        Reasons::OUTLET_LIMITED,
        OutOfSpecification,
        Uncertain,
        Uncertain,
    ),
    rule(Reasons::CLOSURE, OutOfSpecification, Uncertain, Uncertain),
    rule(
        Reasons::NIS_OVERCONFIDENT,
        OutOfSpecification,
        Uncertain,
        Uncertain,
    ),
    rule(
        Reasons::INPUT_NOT_FINITE,
        OutOfSpecification,
        Good,
        Uncertain,
    ),
    rule(
        Reasons::TEMPERATURE_BAD,
        OutOfSpecification,
        Good,
        Uncertain,
    ),
    rule(Reasons::LEVEL_BAD, MaintenanceRequired, Uncertain, Good),
    rule(
        Reasons::FLOW_UNCERTAIN,
        MaintenanceRequired,
        Uncertain,
        Uncertain,
    ),
    rule(
        Reasons::LEVEL_UNCERTAIN,
        MaintenanceRequired,
        Uncertain,
        Good,
    ),
    rule(
        Reasons::TEMPERATURE_UNCERTAIN,
        MaintenanceRequired,
        Good,
        Uncertain,
    ),
    species_rule(Reasons::FEED_UNCERTAIN, MaintenanceRequired, Uncertain),
    rule(Reasons::NIS_TOO_CAUTIOUS, MaintenanceRequired, Good, Good),
    rule(Reasons::INPUT_NEGATIVE, MaintenanceRequired, Good, Good),
];

/// The rules' names, in the table's (bit) order: [`Reasons::names`]. Apart
/// from [`RULES`] so that an image that never prints them (a gateway
/// reporting the bits) carries neither these strings nor their pointers.
pub(super) const RULE_NAMES: [&str; 19] = [
    "numeric_fault",
    "flow_bad",
    "no_holdup_source",
    "feed_bad",
    "function_check",
    "low_holdup",
    "overflow",
    "outlet_limited",
    "closure",
    "nis_overconfident",
    "input_not_finite",
    "temperature_bad",
    "level_bad",
    "flow_uncertain",
    "level_uncertain",
    "temperature_uncertain",
    "feed_uncertain",
    "nis_too_cautious",
    "input_negative",
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
    let (mut feed_bad, mut feed_uncertain) = (false, false);
    for q in inputs.feed.iter() {
        feed_bad |= *q == Bad;
        feed_uncertain |= *q == Uncertain;
    }
    // The conditions as a set of bits, in the table's (bit) order; most
    // ticks fire nothing and then no rule is looked at.
    let conditions = [
        f.contains(StatusFlags::NUMERIC_FAULT),
        inputs.flow == Bad,
        inputs.flow == Bad && inputs.level != Good,
        feed_bad,
        inputs.function_check,
        f.intersects(StatusFlags::EMPTY | StatusFlags::NEAR_EMPTY),
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
        feed_uncertain,
        inputs.nis == NisState::TooCautious,
        f.contains(StatusFlags::INPUT_NEGATIVE),
    ];
    let mut fired = 0u32;
    for (bit, &c) in conditions.iter().enumerate() {
        fired |= u32::from(c) << bit;
    }
    let mut out = Diagnosis {
        status: DeviceStatus::Good,
        holdup: Good,
        concentrations: [Good; N],
        reasons: Reasons::NONE,
    };
    // What the rules that are not per species set every concentration to.
    let mut all = Good;
    let mut rest = fired;
    while rest != 0 {
        let bit = rest.trailing_zeros();
        rest &= rest - 1;
        let Some(rule) = RULES.get(bit as usize) else {
            break;
        };
        out.reasons.insert(rule.reason);
        out.status = out.status.max(rule.status);
        out.holdup = Quality::worst(out.holdup, rule.holdup);
        if !rule.per_species {
            all = Quality::worst(all, rule.concentrations);
        }
    }
    // Species rules: each species' feed quality lowers its own
    // concentration (Bad → Bad, Uncertain → Uncertain).
    for (c, &q) in out.concentrations.iter_mut().zip(inputs.feed.iter()) {
        *c = Quality::worst(all, q);
    }
    out
}
