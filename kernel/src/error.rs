//! One flat error enum for the whole kernel.
//!
//! Raw configuration is checked once, when the validated types are built;
//! every way it can be wrong is a distinct variant with a fixed message. The
//! tick itself never fails: faults met while stepping (a negative flow, an
//! empty vessel) are clamped and reported as [`crate::StatusFlags`].

use core::fmt;

/// Everything that can be wrong with what the kernel is given.
///
/// Variant names start with the phase or object they concern. Each carries a
/// fixed message ([`Error::message`]); where it concerns an indexed item (an
/// inlet, a reaction, a species), the index is carried so the host can name
/// the field in the user's file.
#[non_exhaustive]
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum Error {
    /// A vessel dimension is zero, negative, NaN or infinite.
    GeometryNonPositive,
    /// A dished bottom deeper than the vessel radius.
    GeometryDishTooDeep,
    /// A strapping table needs at least two points.
    StrappingTooShort,
    /// A strapping table has more points than its fixed capacity.
    StrappingFull,
    /// Strapping-table levels must start at 0 and rise strictly; volumes must
    /// start at 0 or above and rise strictly. Carries the first offending
    /// point's index.
    StrappingNotMonotone(u8),
    /// A strapping-table value is NaN or infinite (point index).
    StrappingNonFinite(u8),
    /// The tick length is zero.
    ConfigZeroTick,
    /// A configuration number is NaN or infinite.
    ConfigNonFinite,
    /// A coefficient that must be positive is zero or negative.
    ConfigNonPositive,
    /// The minimum observable holdup is negative or not below the capacity.
    ConfigMinHoldup,
    /// An outlet's coefficient, area or elevation is invalid (outlet index).
    ConfigOutlet(u8),
    /// A reaction has no reactant, or its stoichiometry is all zero
    /// (reaction index).
    ReactionNoReactant(u8),
    /// A reaction order is negative, NaN or above the supported maximum of 4
    /// (reaction index).
    ReactionOrder(u8),
    /// A rate constant, activation energy or reference temperature is
    /// negative, NaN or infinite (reaction index).
    ReactionRateConstant(u8),
    /// The exact integrator was requested for a network that is not a
    /// first-order network (every reaction direction must consume one
    /// species at order 1 and depend on no other; see
    /// [`crate::model::Network`]).
    ConfigExactNotApplicable,
    /// A reference integrator (`ReferenceRk4`, `ReferenceEuler`) was asked
    /// of a kernel built without the `reference-methods` feature.
    ConfigMethodUnavailable,
    /// The initial holdup is negative, NaN, or above the vessel's capacity.
    InitialVolume,
    /// An initial concentration is negative, NaN or infinite (species index).
    InitialConcentration(u8),
    /// The initial temperature is not a finite positive number of kelvin.
    InitialTemperature,
    /// An observer noise level, sigma or gate is NaN, negative (or zero where
    /// it must be positive), or the bias list does not match the state size.
    ObserverConfig,
    /// A lab sample was drawn while all pending-sample slots are in use; it
    /// is not recorded.
    LabQueueFull,
    /// A lab result names a sample that is not pending (never drawn, already
    /// fused, or dropped after the maximum age).
    LabSampleNotPending,
    /// A lab sample cannot be recorded: the vessel is near empty or the
    /// species does not exist.
    LabSampleNotObservable,
    /// The plant needs more registers than one table of the Modbus link
    /// holds (`modbus::MAX_REGISTERS`).
    LinkMapTooLarge,
    /// A signal specification number (scaling, range, rate, stuck
    /// tolerance) is NaN or infinite.
    SignalNonFinite,
    /// A signal's scaling span is empty, reversed or too wide to represent:
    /// `hi ≤ lo` or `raw_hi ≤ raw_lo`.
    SignalScaleSpan,
    /// A signal's valid range is empty or reversed (`max ≤ min`), or negative
    /// clamping is asked for with `max` below zero.
    SignalRange,
    /// A signal's maximum rate of change is zero or negative.
    SignalRate,
    /// A signal's stuck detection has a zero flat duration or a negative
    /// tolerance.
    SignalStuck,
    /// A probability is not strictly between 0 and 1.
    ConfigProbability,
    /// A sensor's balance-closure test needs a level channel and a flow
    /// meter on every outlet.
    SensorClosure,
    /// A lab result or analyser reading was given to a sensor without an
    /// observer (open loop): it cannot be fused.
    SensorNotObserved,
    /// Configuration bytes are not a valid postcard encoding of the
    /// specification (truncated, corrupted, or a list longer than its
    /// capacity).
    ConfigDecode,
    /// A configuration or state could not be encoded (the buffer is too
    /// small).
    ConfigEncode,
    /// A checkpoint slot is blank or holds something that is not a
    /// checkpoint (its magic number does not match).
    CheckpointEmpty,
    /// A checkpoint's header or payload CRC-32 does not match: a torn or
    /// corrupted write.
    CheckpointCrcMismatch,
    /// A checkpoint was written in another format version.
    CheckpointVersion,
    /// A checkpoint holds another kind of state (a vessel where an observer
    /// is restored, or the reverse).
    CheckpointKind,
    /// A checkpoint was written for another configuration or build (scalar
    /// type, sizes, model or observer settings): its fingerprint differs.
    CheckpointConfigMismatch,
    /// An encoded state does not fit the checkpoint slot or the scratch
    /// buffer.
    CheckpointTooLarge,
    /// A checkpoint payload passed its CRC but does not decode as the
    /// expected state.
    CheckpointDecode,
    /// A decoded checkpoint state is invalid: a non-finite or negative
    /// value, a holdup above the capacity, or a covariance that is not
    /// symmetric positive definite. It is never installed.
    CheckpointInvalidState,
    /// Neither checkpoint slot holds a valid checkpoint (and the two fail
    /// for different reasons; see `Checkpoints::check_slot`).
    CheckpointNoValidSlot,
    /// The checkpoint slots are smaller than a header, overlap the end of
    /// the storage, or their addresses overflow.
    CheckpointLayout,
    /// A storage read or write failed on the bus or in the device.
    StorageIo,
    /// A storage access reaches beyond the device's capacity.
    StorageOutOfRange,
    /// A storage device's configuration is invalid (its capacity does not
    /// fit the address width, or is zero).
    StorageConfig,
}

impl Error {
    /// A fixed, human-readable description.
    pub const fn message(&self) -> &'static str {
        match self {
            Error::GeometryNonPositive => "vessel dimension must be finite and positive",
            Error::GeometryDishTooDeep => "dished bottom depth must not exceed the vessel radius",
            Error::StrappingTooShort => "strapping table needs at least two points",
            Error::StrappingFull => "strapping table has more points than its capacity",
            Error::StrappingNotMonotone(_) => {
                "strapping table must start at level 0 and rise strictly in level and volume"
            }
            Error::StrappingNonFinite(_) => "strapping table value is not a finite number",
            Error::ConfigZeroTick => "tick length must be at least 1 ms",
            Error::ConfigNonFinite => "configuration value is not a finite number",
            Error::ConfigNonPositive => "configuration value must be positive",
            Error::ConfigMinHoldup => {
                "minimum observable holdup must be non-negative and below the capacity"
            }
            Error::ConfigOutlet(_) => {
                "outlet coefficient, area, width or elevation is invalid (must be finite; coefficient and area positive; elevation within the vessel)"
            }
            Error::ReactionNoReactant(_) => "reaction has no reactant (no negative stoichiometric coefficient)",
            Error::ReactionOrder(_) => "reaction order must be finite and within 0..=4",
            Error::ReactionRateConstant(_) => {
                "rate constant, activation energy and reference temperature must be finite and non-negative (temperature positive)"
            }
            Error::ConfigExactNotApplicable => {
                "exact integrator needs a first-order network (each reaction direction consumes one species, at order 1, and depends on no other)"
            }
            Error::ConfigMethodUnavailable => {
                "reference integrators are not in this build (kernel feature `reference-methods`)"
            }
            Error::InitialVolume => "initial holdup must be finite, non-negative and within the vessel capacity",
            Error::InitialConcentration(_) => "initial concentration must be finite and non-negative",
            Error::InitialTemperature => "initial temperature must be finite and positive (kelvin)",
            Error::ObserverConfig => {
                "observer noise levels and sigmas must be finite and non-negative, level sigma and gate positive, and one bias per extra state"
            }
            Error::LabQueueFull => "all pending lab-sample slots are in use; the sample was not recorded",
            Error::LabSampleNotPending => {
                "lab result for a sample that is not pending (never drawn, already fused, or older than the maximum age)"
            }
            Error::LabSampleNotObservable => {
                "lab sample cannot be recorded: vessel near empty or unknown species"
            }
            Error::LinkMapTooLarge => {
                "the plant needs more Modbus registers than one table of the link holds (too many streams or species)"
            }
            Error::SignalNonFinite => "signal configuration value is not a finite number",
            Error::SignalScaleSpan => {
                "signal scaling span must rise and be finite (hi > lo, raw_hi > raw_lo)"
            }
            Error::SignalRange => {
                "signal valid range must have max > min (and max >= 0 when negatives are clamped)"
            }
            Error::SignalRate => "signal maximum rate of change must be positive",
            Error::ConfigProbability => "probability must be strictly between 0 and 1",
            Error::SensorClosure => {
                "balance-closure test needs a level transmitter and a flow meter on every outlet"
            }
            Error::SensorNotObserved => {
                "the sensor has no estimator: lab results and analyser readings cannot be fused"
            }
            Error::ConfigDecode => {
                "configuration bytes are not a valid encoding of the specification (truncated, corrupted or over capacity)"
            }
            Error::ConfigEncode => "configuration or state does not fit the encoding buffer",
            Error::CheckpointEmpty => "checkpoint slot is blank or holds no checkpoint (magic mismatch)",
            Error::CheckpointCrcMismatch => {
                "checkpoint CRC-32 mismatch: torn or corrupted write"
            }
            Error::CheckpointVersion => "checkpoint was written in another format version",
            Error::CheckpointKind => "checkpoint holds another kind of state (vessel or observer)",
            Error::CheckpointConfigMismatch => {
                "checkpoint was written for another configuration or build (fingerprint differs)"
            }
            Error::CheckpointTooLarge => "checkpoint does not fit the slot or the scratch buffer",
            Error::CheckpointDecode => "checkpoint payload does not decode as the expected state",
            Error::CheckpointInvalidState => {
                "checkpoint state is invalid (non-finite, negative, over capacity, or covariance not symmetric positive definite)"
            }
            Error::CheckpointNoValidSlot => "no checkpoint slot holds a valid checkpoint",
            Error::CheckpointLayout => {
                "checkpoint slots must hold a header and lie within the storage"
            }
            Error::StorageIo => "storage read or write failed",
            Error::StorageOutOfRange => "storage access beyond the device capacity",
            Error::StorageConfig => {
                "storage capacity must be non-zero and addressable with the configured address width"
            }
            Error::SignalStuck => {
                "stuck detection needs a flat duration of at least 1 ms and a non-negative tolerance"
            }
        }
    }
}

impl fmt::Display for Error {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.message())
    }
}
