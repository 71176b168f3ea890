//! A plant configuration after reading and checking: everything in SI units,
//! species referred to by index, signals either constant or a log tag with
//! its affine conversion to SI. Built by [`crate::config`]; consumed by the
//! replay. Nothing here can be invalid in a way the kernel would refuse,
//! except what only the kernel checks (it is asked, and its error named).

use std::path::PathBuf;

/// Which floating-point type the kernel runs in.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum ScalarKind {
    /// Single precision, as on the gateway (default).
    F32,
    /// Double precision.
    F64,
}

/// Where a value comes from.
#[derive(Clone, Debug, PartialEq)]
pub enum Signal {
    /// A constant, already in SI.
    Constant(f64),
    /// A tag of the log; SI value = `raw · scale + offset`.
    Tag {
        /// Tag (wide: column name; long: the tag column's value).
        tag: String,
        /// Multiplier to SI.
        scale: f64,
        /// Offset to SI (temperatures).
        offset: f64,
        /// Unit as written in the config (for reports).
        unit: String,
        /// A mass flow's density from the log: the SI value is then
        /// `(raw · scale + offset) / density` (m³/s from kg/s).
        density: Option<DensityTag>,
    },
}

/// A density read from the log, dividing a mass flow into a volumetric one.
#[derive(Clone, Debug, PartialEq)]
pub struct DensityTag {
    /// Tag of the density.
    pub tag: String,
    /// Multiplier to kg/m³.
    pub scale: f64,
    /// Unit as written in the config.
    pub unit: String,
}

impl Signal {
    /// The tag name, if the signal comes from the log.
    pub fn tag(&self) -> Option<&str> {
        match self {
            Signal::Tag { tag, .. } => Some(tag),
            Signal::Constant(_) => None,
        }
    }

    /// The density tag of a mass flow, if it has one.
    pub fn density(&self) -> Option<&DensityTag> {
        match self {
            Signal::Tag { density, .. } => density.as_ref(),
            Signal::Constant(_) => None,
        }
    }

    /// Convert a raw log value of this signal to SI (constants ignore `raw`;
    /// a mass flow with a density tag needs [`Signal::to_si_with`]).
    pub fn to_si(&self, raw: f64) -> f64 {
        self.to_si_with(raw, f64::NAN)
    }

    /// As [`Signal::to_si`], with the raw density of a mass flow whose
    /// density comes from the log: a density that is not a positive finite
    /// number gives NaN (no reading).
    pub fn to_si_with(&self, raw: f64, raw_density: f64) -> f64 {
        match self {
            Signal::Constant(v) => *v,
            Signal::Tag {
                scale,
                offset,
                density: None,
                ..
            } => raw * scale + offset,
            Signal::Tag {
                scale,
                offset,
                density: Some(d),
                ..
            } => {
                let rho = raw_density * d.scale;
                if rho.is_finite() && rho > 0.0 {
                    (raw * scale + offset) / rho
                } else {
                    f64::NAN
                }
            }
        }
    }
}

/// One species.
#[derive(Clone, Debug, PartialEq)]
pub struct Species {
    /// Name as in the config and the lab file.
    pub name: String,
    /// Molar mass, kg/mol, if given.
    pub molar_mass: Option<f64>,
}

/// One inlet stream.
#[derive(Clone, Debug, PartialEq)]
pub struct Inlet {
    /// Name for reports.
    pub name: String,
    /// Flow, m³/s.
    pub flow: Signal,
    /// Feed concentration of each species (index = species), mol/m³.
    pub feed: Vec<Signal>,
}

/// How an outlet's flow is known.
#[derive(Clone, Debug, PartialEq)]
pub enum OutletKind {
    /// Metered: flow in m³/s.
    Measured(Signal),
    /// Gravity drain through an orifice.
    Orifice {
        /// Discharge coefficient.
        discharge_coefficient: f64,
        /// Area, m².
        area: f64,
        /// Centre height above the vessel bottom, m.
        elevation: f64,
    },
    /// Overflow over a rectangular weir.
    Weir {
        /// Discharge coefficient.
        discharge_coefficient: f64,
        /// Crest width, m.
        width: f64,
        /// Crest height above the vessel bottom, m.
        crest: f64,
    },
}

/// One outlet.
#[derive(Clone, Debug, PartialEq)]
pub struct Outlet {
    /// Name for reports.
    pub name: String,
    /// How its flow is known.
    pub kind: OutletKind,
}

/// An online analyser: one species' concentration read from the log and
/// fused by the estimator.
#[derive(Clone, Debug, PartialEq)]
pub struct Analyser {
    /// Species index.
    pub species: usize,
    /// The reading, mol/m³ (a log tag).
    pub reading: Signal,
    /// 1σ of one reading, mol/m³.
    pub sigma: f64,
    /// Shortest time between fused readings, ms: the analyser's cycle. A
    /// historian that repeats one analysis every tick must not count it as
    /// many independent readings.
    pub cycle_ms: u64,
}

/// One direction of a rate law, SI.
#[derive(Clone, Debug, PartialEq)]
pub struct Kinetics {
    /// Rate constant at the reference temperature, (mol/m³)^(1−Σorders)/s.
    pub rate_constant: f64,
    /// Activation energy, J/mol.
    pub activation_energy: f64,
    /// Order per species (index = species).
    pub orders: Vec<f64>,
}

/// One reaction, SI.
#[derive(Clone, Debug, PartialEq)]
pub struct Reaction {
    /// Name for reports.
    pub name: String,
    /// Stoichiometric coefficient per species (index = species).
    pub stoichiometry: Vec<f64>,
    /// Forward rate law.
    pub forward: Kinetics,
    /// Reverse rate law, if reversible.
    pub reverse: Option<Kinetics>,
    /// Reference temperature, K.
    pub reference_temperature: f64,
}

/// Interpolation of a tag between stored points.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Interpolation {
    /// Linear between stored points (analog signals).
    Linear,
    /// Hold the last stored value (discrete signals).
    Hold,
}

/// Per-tag replay options.
#[derive(Clone, Debug, PartialEq)]
pub struct TagOptions {
    /// Tag name.
    pub tag: String,
    /// Interpolation.
    pub interpolation: Interpolation,
    /// Age after which a value with no newer point is stale, ms.
    pub max_age_ms: u64,
    /// True if some signal reading it is a flow.
    pub flow: bool,
    /// Range, rate, stuck and hold checks, in the tag's own unit.
    pub conditioning: Conditioning,
}

/// Which register table of a PLC holds a tag.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum PlcTable {
    /// Holding registers (function 03).
    Holding,
    /// Input registers (function 04).
    Input,
}

/// How a tag's value is stored in PLC registers.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum PlcType {
    /// One register, unsigned.
    U16,
    /// One register, two's complement.
    I16,
    /// Two registers, unsigned.
    U32,
    /// Two registers, two's complement.
    I32,
    /// Two registers, IEEE 754 single precision.
    F32,
}

impl PlcType {
    /// Registers the value takes.
    pub const fn width(self) -> u16 {
        match self {
            PlcType::U16 | PlcType::I16 => 1,
            PlcType::U32 | PlcType::I32 | PlcType::F32 => 2,
        }
    }
}

/// Where a PLC holds one tag, and how to read it: the value in the tag's
/// configured unit is `raw · scale + offset`.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct PlcPoint {
    /// Unit id (slave address) of the request.
    pub unit_id: u8,
    /// Register table.
    pub table: PlcTable,
    /// First register, 0-based protocol address (as on the wire).
    pub address: u16,
    /// Stored type.
    pub kind: PlcType,
    /// Word order of a two-register type.
    pub word_order: holdup_kernel::modbus::WordOrder,
    /// Multiplier from the raw value to the tag's unit.
    pub scale: f64,
    /// Offset added after `scale`, in the tag's unit.
    pub offset: f64,
}

/// The PLC a live run polls (`[plc]`).
#[derive(Clone, Debug, PartialEq)]
pub struct PlcSettings {
    /// `host:port` of its Modbus TCP server.
    pub address: String,
    /// Default unit id of the tags.
    pub unit_id: u8,
    /// Default word order of the tags' two-register values.
    pub word_order: holdup_kernel::modbus::WordOrder,
    /// How long a request (or a connection attempt) may take, ms.
    pub timeout_ms: u64,
    /// First wait before reconnecting after the connection is lost, ms.
    pub reconnect_ms: u64,
    /// Longest wait between reconnection attempts, ms (the wait doubles).
    pub reconnect_max_ms: u64,
    /// Holding address from which the output block is written back after
    /// each tick, if any (0-based protocol address).
    pub write_back: Option<u16>,
    /// Where the PLC holds each tag that has a `[tags."…"] plc` table, in
    /// the order of the plant's tags.
    pub points: Vec<(String, PlcPoint)>,
}

/// Default time the last good value of a tag stands in for rejected or
/// missing ones, ms.
pub const DEFAULT_HOLD_MS: u64 = 600_000;

/// A tag's conditioning (`[tags."…"]` `min`, `max`, `max_rate`, `stuck`,
/// `stuck_tolerance`, `hold`), numbers in the tag's own unit. Unset limits
/// take the defaults of the signal's role (see `replay::assemble`).
#[derive(Clone, Debug, PartialEq)]
pub struct Conditioning {
    /// Lowest valid value.
    pub min: Option<f64>,
    /// Highest valid value.
    pub max: Option<f64>,
    /// Largest plausible change per second.
    pub max_rate_per_s: Option<f64>,
    /// A value flat for longer than this is stuck, ms.
    pub stuck_ms: Option<u64>,
    /// Largest change still counted as flat.
    pub stuck_tolerance: f64,
    /// How long the last good value stands in, ms.
    pub hold_ms: u64,
}

impl Default for Conditioning {
    fn default() -> Self {
        Self {
            min: None,
            max: None,
            max_rate_per_s: None,
            stuck_ms: None,
            stuck_tolerance: 0.0,
            hold_ms: DEFAULT_HOLD_MS,
        }
    }
}

/// Log layout.
#[derive(Clone, Copy, Debug, PartialEq, Eq, serde::Serialize)]
#[serde(rename_all = "lowercase")]
pub enum LogFormat {
    /// Detect from the header.
    Auto,
    /// One timestamp column, one column per tag.
    Wide,
    /// Columns timestamp, tag, value, optional quality.
    Long,
}

/// Timestamp notation.
#[derive(Clone, Copy, Debug, PartialEq, Eq, serde::Serialize)]
#[serde(rename_all = "snake_case")]
pub enum TimeFormat {
    /// Detect from the first data row.
    Auto,
    /// ISO 8601 / RFC 3339 (`2026-03-01T06:00:00+01:00`, `…Z`; without an
    /// offset only with [`LogOptions::timezone`]).
    Iso8601,
    /// Seconds since 1970-01-01T00:00:00Z, decimals allowed.
    Epoch,
    /// Milliseconds since 1970-01-01T00:00:00Z.
    EpochMs,
    /// Microseconds since 1970-01-01T00:00:00Z.
    EpochUs,
    /// The strftime-like pattern [`LogOptions::time_pattern`].
    Pattern,
}

/// Field delimiter of the log's CSV.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Delimiter {
    /// Detected from the header and the first rows.
    Auto,
    /// This byte (`,` `;` tab `|`).
    Byte(u8),
}

/// Decimal separator of the log's numbers.
#[derive(Clone, Copy, Debug, PartialEq, Eq, serde::Serialize)]
#[serde(rename_all = "snake_case")]
pub enum Decimal {
    /// Detected from the first rows (a comma only with a delimiter other
    /// than `,`).
    Auto,
    /// `12.5`.
    Point,
    /// `12,5`.
    Comma,
}

/// Log options.
#[derive(Clone, Debug, PartialEq)]
pub struct LogOptions {
    /// Layout.
    pub format: LogFormat,
    /// Timestamp notation.
    pub time: TimeFormat,
    /// [`TimeFormat::Pattern`]: the strftime-like pattern (checked at load).
    pub time_pattern: Option<String>,
    /// Zone of naive (offset-less) timestamps; `None`: they are refused.
    pub timezone: Option<crate::zone::Zone>,
    /// Zone of report times: the log's zone ([`Self::timezone`], else UTC),
    /// or UTC on request.
    pub output_zone: crate::zone::Zone,
    /// Timestamp column name (`None`: found by name, else the first column
    /// of a wide log).
    pub time_column: Option<String>,
    /// Long format: tag column name (`None`: the default names).
    pub tag_column: Option<String>,
    /// Long format: value column name (`None`: the default names).
    pub value_column: Option<String>,
    /// Long format: quality column name (`None`: the default names).
    pub quality_column: Option<String>,
    /// Field delimiter.
    pub delimiter: Delimiter,
    /// Decimal separator.
    pub decimal: Decimal,
    /// Default maximum age, ms.
    pub max_age_ms: u64,
    /// What an empty (or NaN, or non-numeric) value cell means.
    pub empty_cells: EmptyCells,
}

impl Default for LogOptions {
    /// The options of a plant without `[log]`.
    fn default() -> Self {
        Self {
            format: LogFormat::Auto,
            time: TimeFormat::Auto,
            time_pattern: None,
            timezone: None,
            output_zone: crate::zone::Zone::Utc,
            time_column: None,
            tag_column: None,
            value_column: None,
            quality_column: None,
            delimiter: Delimiter::Auto,
            decimal: Decimal::Auto,
            max_age_ms: 600_000,
            empty_cells: EmptyCells::Skip,
        }
    }
}

/// What an empty value cell of a wide log means.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub enum EmptyCells {
    /// A historian export: nothing was stored at that time; the tag is
    /// interpolated across the cell or held (counted as missing).
    #[default]
    Skip,
    /// A recording of one row per tick (`holdup live`'s `inputs.csv`): the
    /// poll got no reading at that time, so the tag reads NaN there and
    /// nothing is held or interpolated across it (counted as missing).
    NoReading,
}

/// Initial state, SI.
#[derive(Clone, Debug, PartialEq)]
pub struct Initial {
    /// Holdup, m³.
    pub volume: f64,
    /// Concentration per species, mol/m³.
    pub concentrations: Vec<f64>,
    /// Temperature, K (`None`: first value of the temperature signal).
    pub temperature: Option<f64>,
}

/// A meter whose relative bias the estimator tracks.
#[derive(Clone, Debug, PartialEq)]
pub struct BiasMeter {
    /// Inlet or outlet name, as in the config.
    pub name: String,
    /// `true` for an outlet meter, `false` for an inlet meter.
    pub outlet: bool,
    /// Index into the plant's inlets or outlets.
    pub index: usize,
}

/// Estimator settings (`[estimator]`), SI.
#[derive(Clone, Debug, PartialEq)]
pub struct Estimator {
    /// Level transmitter noise, 1σ, m.
    pub level_sigma: f64,
    /// Unexplained holdup change over one hour, 1σ, m³ (random walk).
    pub holdup_drift: f64,
    /// Unexplained concentration change over one hour, 1σ, mol/m³, per species.
    pub concentration_drift: Vec<f64>,
    /// Initial holdup uncertainty, 1σ, m³.
    pub initial_volume_sigma: f64,
    /// Initial concentration uncertainty, 1σ, mol/m³, per species.
    pub initial_concentration_sigma: Vec<f64>,
    /// Meters whose relative bias is estimated (at most 4).
    pub bias_meters: Vec<BiasMeter>,
    /// Initial bias uncertainty, 1σ, relative.
    pub bias_sigma: f64,
    /// Bias drift over one hour, 1σ, relative (random walk).
    pub bias_drift: f64,
    /// Innovation gate, chi-square quantile for 1 degree of freedom.
    pub gate: f64,
    /// Relative 1σ of a lab analysis.
    pub lab_sigma: f64,
    /// A drawn sample whose result has not come within this age is dropped, ms.
    pub lab_max_age_ms: u64,
    /// Relative 1σ of the flow meters' noise (for the balance-closure check).
    pub flow_sigma: f64,
    /// Window of the balance-closure residual, ms.
    pub closure_window_ms: u64,
    /// CUSUM reference value k, in standard deviations of the residual.
    pub cusum_k: f64,
    /// CUSUM decision interval h, in standard deviations of the residual.
    pub cusum_h: f64,
}

/// A checked plant configuration.
#[derive(Clone, Debug, PartialEq)]
pub struct Plant {
    /// The file it came from.
    pub path: PathBuf,
    /// Free-text name.
    pub name: String,
    /// Tick, ms.
    pub tick_ms: u32,
    /// Kernel scalar type.
    pub scalar: ScalarKind,
    /// Kernel integrator.
    pub method: holdup_kernel::Method,
    /// Minimum observable holdup, m³.
    pub min_holdup: f64,
    /// Vessel shape, SI (validated by the kernel's `Geometry::new`).
    pub shape: holdup_kernel::Shape<f64>,
    /// Species, in order.
    pub species: Vec<Species>,
    /// Inlets.
    pub inlets: Vec<Inlet>,
    /// Outlets.
    pub outlets: Vec<Outlet>,
    /// Vessel temperature, K.
    pub temperature: Signal,
    /// Measured level, m (for comparison only).
    pub level: Option<Signal>,
    /// Online analysers (at most one per species).
    pub analysers: Vec<Analyser>,
    /// Reactions.
    pub reactions: Vec<Reaction>,
    /// Initial state.
    pub initial: Initial,
    /// Options of every tag the plant reads (one entry per distinct tag).
    pub tags: Vec<TagOptions>,
    /// Log options.
    pub log: LogOptions,
    /// Estimator settings; `None`: open loop only.
    pub estimator: Option<Estimator>,
    /// The PLC of a live run (`[plc]`), if configured.
    pub plc: Option<PlcSettings>,
    /// How `holdup fit` weighs the data (`[fit]`, defaults without it).
    pub fit: FitOptions,
    /// The names of the quantities written as unknowns (`guess`), which
    /// the plant holds at their first guess.
    pub unknowns: Vec<String>,
}

/// `[fit]`: how `holdup fit` weighs the data and checks its result.
#[derive(Clone, Debug, PartialEq)]
pub struct FitOptions {
    /// Relative 1σ of a lab analysis (0.02 = 2 %).
    pub lab_sigma: f64,
    /// Share of the log's span, at its end, kept out of the fit and used
    /// to check its prediction (0: none).
    pub hold_out: f64,
    /// Most model evaluations one fit may use.
    pub max_evaluations: u32,
}

/// Capacities the host replay is compiled for.
pub mod limits {
    /// Most species.
    pub const SPECIES: usize = 8;
    /// Most reactions.
    pub const REACTIONS: usize = 8;
    /// Most inlets.
    pub const INLETS: usize = 8;
    /// Most outlets.
    pub const OUTLETS: usize = 4;
}
