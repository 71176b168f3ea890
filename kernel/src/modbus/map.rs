//! The register map: which register holds what, for a plant of given sizes.
//!
//! Defined once here and used by the gateway firmware, the host server, the
//! host's PLC client (for writing estimates back) and the generator of
//! `docs/registers.md`. Addresses are the protocol's (0-based); the
//! conventional 1-based numbers (`4xxxx` holding, `3xxxx` input, `0xxxx`
//! coil) are the address plus one plus the table's offset.
//!
//! | table | block | contents |
//! |---|---|---|
//! | holding (PLC writes) | 0–9 | input sequence, lab draw and result sequences, lab species, sample id, value, σ |
//! | holding | 10– | each inlet flow, each inlet's feed of each species, each outlet flow, temperature, level (`f32`) |
//! | input (PLC reads) | 0–12 | map version, word order, tick count, heartbeat, sequence applied, NE107 status, holdup quality, kernel flags, link flags, lab outcome, NE107 reasons |
//! | input | 13– | each species' quality, then holdup, its σ, level, each concentration and σ, each meter bias and σ (`f32`) |
//! | coil | 0–3 | reset from lab result, save checkpoint, acknowledge alarm, function check |

use crate::Error;

/// Version of the map's layout, in input register 0. Raised whenever an
/// address or a meaning changes.
pub const MAP_VERSION: u16 = 1;

/// Registers in one table, at most (an input table that fits in one read
/// of 125 registers is read by a PLC in one request).
pub const MAX_REGISTERS: usize = 128;

/// Holding registers before the first analog input.
const HOLDING_HEADER: u16 = 10;
/// Input registers before the species' qualities.
const INPUT_HEADER: u16 = 13;
/// Coils.
const COILS: u16 = 4;

/// How a 32-bit value is split across two registers. Both orders are
/// common practice; the PLC's documentation says which it uses.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Default)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum WordOrder {
    /// The high 16 bits in the lower address ("big-endian words", `ABCD`).
    #[default]
    HighFirst,
    /// The low 16 bits in the lower address ("word-swapped", `CDAB`).
    LowFirst,
}

impl WordOrder {
    /// The code in input register 1: 0 high word first, 1 low word first.
    pub const fn code(self) -> u16 {
        match self {
            WordOrder::HighFirst => 0,
            WordOrder::LowFirst => 1,
        }
    }

    /// The two registers of `x`, lower address first.
    pub const fn split(self, x: u32) -> [u16; 2] {
        let hi = (x >> 16) as u16;
        let lo = (x & 0xFFFF) as u16;
        match self {
            WordOrder::HighFirst => [hi, lo],
            WordOrder::LowFirst => [lo, hi],
        }
    }

    /// The value of two registers, lower address first.
    pub const fn join(self, r: [u16; 2]) -> u32 {
        let (hi, lo) = match self {
            WordOrder::HighFirst => (r[0], r[1]),
            WordOrder::LowFirst => (r[1], r[0]),
        };
        ((hi as u32) << 16) | lo as u32
    }
}

/// The three tables of the map.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum Table {
    /// Holding registers (function 03 reads, 06 and 16 write): written by
    /// the PLC.
    Holding,
    /// Input registers (function 04): read by the PLC.
    Input,
    /// Coils (function 01 reads, 05 and 15 write): commands.
    Coil,
}

/// The type of one entry.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum Kind {
    /// One register, unsigned.
    U16,
    /// Two registers, unsigned, in the configured word order.
    U32,
    /// Two registers, IEEE 754 single precision, in the configured word
    /// order.
    F32,
    /// One coil.
    Bit,
}

impl Kind {
    /// Registers (or coils) the entry takes.
    pub const fn width(self) -> u16 {
        match self {
            Kind::U16 | Kind::Bit => 1,
            Kind::U32 | Kind::F32 => 2,
        }
    }
}

/// What an entry holds. Stream and species indices are the plant's order
/// (the order of the configuration).
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum Item {
    /// Holding: the PLC raises it (by any amount, wrapping) after writing a
    /// tick's inputs. In sequence-clocked mode each change runs one tick;
    /// in either mode it feeds the watchdog.
    InputSequence,
    /// Holding: raised when a lab sample is drawn (of [`Item::LabSpecies`],
    /// id [`Item::LabSampleId`], 1σ [`Item::LabSigma`]), applied at the
    /// start of the next tick.
    LabDrawSequence,
    /// Holding: raised when a lab result ([`Item::LabValue`] for sample
    /// [`Item::LabSampleId`]) is ready, applied at the start of the next
    /// tick.
    LabResultSequence,
    /// Holding: the species the lab sample is of (0-based).
    LabSpecies,
    /// Holding: the sample's id, unique among pending samples; its draw
    /// time in seconds (of the day, or since any epoch) is a good choice.
    LabSampleId,
    /// Holding: the lab result, mol/m³.
    LabValue,
    /// Holding: the lab analysis' 1σ, mol/m³.
    LabSigma,
    /// Holding: the flow reading of an inlet, in its channel's raw unit
    /// (mA for a 4–20 mA loop, m³/s for an engineering value).
    InletFlow(u8),
    /// Holding: the feed concentration reading of `(inlet, species)`.
    Feed(u8, u8),
    /// Holding: the flow reading of an outlet.
    OutletFlow(u8),
    /// Holding: the temperature reading.
    Temperature,
    /// Holding: the level reading.
    Level,
    /// Input: [`MAP_VERSION`].
    MapVersion,
    /// Input: [`WordOrder::code`] of the link.
    WordOrderCode,
    /// Input: ticks run since start.
    TickCount,
    /// Input: raised by one every tick (wrapping): a PLC that sees it stop
    /// knows the sensor stopped.
    Heartbeat,
    /// Input: the input sequence the last tick ran on.
    SequenceApplied,
    /// Input: NE107 status code (0 good, 1 maintenance required `M`, 2 out
    /// of specification `S`, 3 function check `C`, 4 failure `F`).
    DeviceStatus,
    /// Input: quality of the holdup and level (0 good, 1 uncertain, 2 bad).
    HoldupQuality,
    /// Input: the kernel's status flags of the last tick.
    KernelFlags,
    /// Input: the link's flags ([`super::LinkFlags`]).
    LinkFlags,
    /// Input: the outcome of the last lab event ([`super::LabOutcome`]).
    LabOutcome,
    /// Input: the NE107 rules that fired (bit set of the kernel's reasons).
    Reasons,
    /// Input: quality of a species' concentration.
    ConcentrationQuality(u8),
    /// Input: holdup, m³.
    Holdup,
    /// Input: its 1σ, m³ (0 for an open-loop sensor).
    HoldupSigma,
    /// Input: the level of the estimated holdup, m.
    LevelEstimate,
    /// Input: a species' concentration, mol/m³.
    Concentration(u8),
    /// Input: its 1σ, mol/m³ (0 for an open-loop sensor).
    ConcentrationSigma(u8),
    /// Input: a meter's estimated relative bias (the observer's bias
    /// states, in their configured order).
    Bias(u8),
    /// Input: its 1σ.
    BiasSigma(u8),
    /// Coil: reset the concentration of [`Item::LabSpecies`] to
    /// [`Item::LabValue`] with 1σ [`Item::LabSigma`] at the next tick.
    ResetFromLab,
    /// Coil: save a checkpoint at the next tick.
    SaveCheckpoint,
    /// Coil: acknowledge the balance-closure alarm (its test restarts).
    AcknowledgeAlarm,
    /// Coil: function check (NE107 `C`: maintenance, calibration or
    /// simulation under way); stays as written.
    FunctionCheck,
}

/// One entry of the map.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Entry {
    /// Its table.
    pub table: Table,
    /// Its first address (0-based, as on the wire).
    pub address: u16,
    /// What it holds.
    pub item: Item,
    /// Its type.
    pub kind: Kind,
}

impl Entry {
    const fn new(table: Table, address: u16, item: Item, kind: Kind) -> Self {
        Self {
            table,
            address,
            item,
            kind,
        }
    }
}

/// The plant's sizes that fix the map.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Dims {
    /// Species.
    pub species: u8,
    /// Inlets.
    pub inlets: u8,
    /// Outlets.
    pub outlets: u8,
    /// Meter-bias states of the observer (0 for an open loop).
    pub biases: u8,
}

/// The map of a plant: addresses of every entry.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct RegisterMap {
    dims: Dims,
}

impl RegisterMap {
    /// The map of a plant of sizes `dims`.
    ///
    /// Errors: [`Error::LinkMapTooLarge`] when a table would need more than
    /// [`MAX_REGISTERS`] registers.
    pub fn new(dims: Dims) -> Result<Self, Error> {
        let map = Self { dims };
        if usize::from(map.holding_len()) > MAX_REGISTERS
            || usize::from(map.input_len()) > MAX_REGISTERS
        {
            return Err(Error::LinkMapTooLarge);
        }
        Ok(map)
    }

    /// The plant's sizes.
    pub const fn dims(&self) -> Dims {
        self.dims
    }

    /// Holding registers in use.
    pub const fn holding_len(&self) -> u16 {
        self.level_address() + 2
    }

    /// Input registers in use.
    pub const fn input_len(&self) -> u16 {
        self.bias_address(self.dims.biases)
    }

    /// Coils in use.
    pub const fn coil_len(&self) -> u16 {
        COILS
    }

    const fn d(x: u8) -> u16 {
        x as u16
    }

    /// Holding address of inlet `k`'s flow.
    pub const fn inlet_flow_address(&self, k: u8) -> u16 {
        HOLDING_HEADER + 2 * Self::d(k)
    }

    /// Holding address of the feed of species `i` in inlet `k`.
    pub const fn feed_address(&self, k: u8, i: u8) -> u16 {
        self.inlet_flow_address(self.dims.inlets)
            + 2 * (Self::d(k) * Self::d(self.dims.species) + Self::d(i))
    }

    /// Holding address of outlet `k`'s flow.
    pub const fn outlet_flow_address(&self, k: u8) -> u16 {
        self.feed_address(self.dims.inlets, 0) + 2 * Self::d(k)
    }

    /// Holding address of the temperature.
    pub const fn temperature_address(&self) -> u16 {
        self.outlet_flow_address(self.dims.outlets)
    }

    /// Holding address of the level.
    pub const fn level_address(&self) -> u16 {
        self.temperature_address() + 2
    }

    /// Input address of species `i`'s quality.
    pub const fn quality_address(&self, i: u8) -> u16 {
        INPUT_HEADER + Self::d(i)
    }

    /// Input address of the holdup.
    pub const fn holdup_address(&self) -> u16 {
        self.quality_address(self.dims.species)
    }

    /// Input address of species `i`'s concentration (its σ follows).
    pub const fn concentration_address(&self, i: u8) -> u16 {
        self.holdup_address() + 6 + 4 * Self::d(i)
    }

    /// Input address of bias `b` (its σ follows).
    pub const fn bias_address(&self, b: u8) -> u16 {
        self.concentration_address(self.dims.species) + 4 * Self::d(b)
    }

    /// Every entry, table by table in address order.
    pub fn entries(&self) -> impl Iterator<Item = Entry> + '_ {
        self.holding_entries()
            .chain(self.input_entries())
            .chain(self.coil_entries())
    }

    fn holding_entries(&self) -> impl Iterator<Item = Entry> + '_ {
        let h = |address, item, kind| Entry::new(Table::Holding, address, item, kind);
        let n = self.dims.species;
        let header = [
            h(0, Item::InputSequence, Kind::U16),
            h(1, Item::LabDrawSequence, Kind::U16),
            h(2, Item::LabResultSequence, Kind::U16),
            h(3, Item::LabSpecies, Kind::U16),
            h(4, Item::LabSampleId, Kind::U32),
            h(6, Item::LabValue, Kind::F32),
            h(8, Item::LabSigma, Kind::F32),
        ];
        let inlets = (0..self.dims.inlets)
            .map(move |k| h(self.inlet_flow_address(k), Item::InletFlow(k), Kind::F32));
        let feeds = (0..self.dims.inlets).flat_map(move |k| {
            (0..n).map(move |i| h(self.feed_address(k, i), Item::Feed(k, i), Kind::F32))
        });
        let outlets = (0..self.dims.outlets)
            .map(move |k| h(self.outlet_flow_address(k), Item::OutletFlow(k), Kind::F32));
        let tail = [
            h(self.temperature_address(), Item::Temperature, Kind::F32),
            h(self.level_address(), Item::Level, Kind::F32),
        ];
        header
            .into_iter()
            .chain(inlets)
            .chain(feeds)
            .chain(outlets)
            .chain(tail)
    }

    fn input_entries(&self) -> impl Iterator<Item = Entry> + '_ {
        let r = |address, item, kind| Entry::new(Table::Input, address, item, kind);
        let header = [
            r(0, Item::MapVersion, Kind::U16),
            r(1, Item::WordOrderCode, Kind::U16),
            r(2, Item::TickCount, Kind::U32),
            r(4, Item::Heartbeat, Kind::U16),
            r(5, Item::SequenceApplied, Kind::U16),
            r(6, Item::DeviceStatus, Kind::U16),
            r(7, Item::HoldupQuality, Kind::U16),
            r(8, Item::KernelFlags, Kind::U16),
            r(9, Item::LinkFlags, Kind::U16),
            r(10, Item::LabOutcome, Kind::U16),
            r(11, Item::Reasons, Kind::U32),
        ];
        let qualities = (0..self.dims.species).map(move |i| {
            r(
                self.quality_address(i),
                Item::ConcentrationQuality(i),
                Kind::U16,
            )
        });
        let a = self.holdup_address();
        let holdup = [
            r(a, Item::Holdup, Kind::F32),
            r(a + 2, Item::HoldupSigma, Kind::F32),
            r(a + 4, Item::LevelEstimate, Kind::F32),
        ];
        let conc = (0..self.dims.species).flat_map(move |i| {
            let a = self.concentration_address(i);
            [
                r(a, Item::Concentration(i), Kind::F32),
                r(a + 2, Item::ConcentrationSigma(i), Kind::F32),
            ]
        });
        let bias = (0..self.dims.biases).flat_map(move |b| {
            let a = self.bias_address(b);
            [
                r(a, Item::Bias(b), Kind::F32),
                r(a + 2, Item::BiasSigma(b), Kind::F32),
            ]
        });
        header
            .into_iter()
            .chain(qualities)
            .chain(holdup)
            .chain(conc)
            .chain(bias)
    }

    fn coil_entries(&self) -> impl Iterator<Item = Entry> {
        let c = |address, item| Entry::new(Table::Coil, address, item, Kind::Bit);
        [
            c(0, Item::ResetFromLab),
            c(1, Item::SaveCheckpoint),
            c(2, Item::AcknowledgeAlarm),
            c(3, Item::FunctionCheck),
        ]
        .into_iter()
    }
}
