//! [`Link`]: a [`Sensor`] behind the register map, served over Modbus RTU
//! or TCP.
//!
//! The link owns the sensor and two register images: the holding registers
//! the PLC writes (inputs, lab events) and the input registers it reads
//! (estimates, statuses). [`Link::handle`] answers one request frame
//! (framing, CRC and exception responses by `rmodbus`; addresses and
//! meanings by [`RegisterMap`]) and never ticks the sensor;
//! [`Link::tick`] runs one tick on the inputs written so far and refreshes
//! the outputs. The driver (the gateway's main loop, the host server)
//! decides when to tick: at its fixed tick, or whenever
//! [`Link::sequence_pending`] says the PLC has written a new set of inputs.
//! Both are bounded: a request costs `O(registers)`, a tick the sensor's
//! tick plus `O(registers)`.

use heapless::Vec;
use rmodbus::consts::ModbusFunction;
use rmodbus::server::{ModbusFrame, Read, ReadBits, ReadWords, Write, WriteBits, WriteWords};
use rmodbus::{ErrorKind, ModbusProto};

use super::map::{Dims, RegisterMap, WordOrder, MAP_VERSION, MAX_REGISTERS};
use crate::diagnostics::{DeviceStatus, NisState};
use crate::sensor::{Readings, Sensor, SensorReport};
use crate::signal::Quality;
use crate::units::Millis;
use crate::{Error, Scalar, Update};

/// Longest frame the link reads or writes: an RTU frame is at most 256
/// bytes, a TCP frame 260.
pub const MAX_FRAME: usize = 260;

/// A response buffer.
pub type Response = Vec<u8, MAX_FRAME>;

/// How requests are framed.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum Framing {
    /// Modbus RTU: unit id, PDU, CRC-16/MODBUS (a serial line; also RTU
    /// over a TCP socket).
    Rtu,
    /// Modbus TCP: MBAP header, PDU.
    Tcp,
}

/// What starts a tick.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum Clock {
    /// The driver's own fixed tick (real time).
    Free,
    /// One tick each time the PLC changes the input sequence register (a
    /// PLC that clocks the sensor; tests).
    Sequence,
}

/// The link's configuration.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct LinkSpec {
    /// The unit id (slave address) the link answers to, 1–247.
    pub unit_id: u8,
    /// Word order of every 32-bit value.
    pub word_order: WordOrder,
    /// What starts a tick.
    pub clock: Clock,
    /// Watchdog: the inputs are stale when the input sequence has not
    /// changed for this long, ms (0: no watchdog).
    pub stale_after_ms: Millis,
    /// The driver can save checkpoints (the save coil is refused with
    /// exception 04 otherwise).
    pub checkpoints: bool,
}

macro_rules! flag_set {
    ($(#[$m:meta])* $name:ident { $($(#[$fm:meta])* $flag:ident = $bit:expr;)* }) => {
        $(#[$m])*
        #[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
        #[cfg_attr(feature = "defmt", derive(defmt::Format))]
        pub struct $name(u16);
        impl $name {
            $($(#[$fm])* pub const $flag: Self = Self(1 << $bit);)*
            /// Every flag with its name, in bit order.
            pub const ALL: &'static [(Self, &'static str)] = &[$((Self::$flag, stringify!($flag)),)*];
            /// The bits.
            pub const fn bits(self) -> u16 { self.0 }
            /// The flags of a register's bits.
            pub const fn from_bits(bits: u16) -> Self { Self(bits) }
            /// Whether every flag of `other` is set.
            pub const fn contains(self, other: Self) -> bool { self.0 & other.0 == other.0 }
            fn set(&mut self, other: Self, on: bool) {
                if on { self.0 |= other.0 } else { self.0 &= !other.0 }
            }
        }
    };
}

flag_set! {
    /// The link's flags (input register 9).
    LinkFlags {
        /// The watchdog fired: the PLC has not raised the input sequence
        /// for the configured time. The estimates go on from the last
        /// inputs (held, then bad), with growing σ; status `F`.
        STALE = 0;
        /// The balance-closure alarm is on.
        CLOSURE_ALARM = 1;
        /// The NIS test says the model or its tuning does not fit the data
        /// (innovations too large or too small for the filter's noise).
        NIS_ALARM = 2;
        /// The filter re-seeded its holdup from the level this tick.
        RESEEDED = 3;
        /// A reset from a lab result was applied this tick.
        RESET_APPLIED = 4;
        /// A reset from a lab result was refused this tick (species out of
        /// range, value or σ not valid, vessel near empty).
        RESET_REFUSED = 5;
        /// The last checkpoint was saved.
        CHECKPOINT_SAVED = 6;
        /// The last checkpoint could not be saved.
        CHECKPOINT_FAILED = 7;
        /// The function-check coil is on.
        FUNCTION_CHECK = 8;
    }
}

/// The outcome of the last lab event (input register 10).
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
#[repr(u16)]
pub enum LabOutcome {
    /// No lab event yet.
    #[default]
    None = 0,
    /// The sample was recorded as drawn.
    Drawn = 1,
    /// The draw was refused: all pending slots are in use.
    QueueFull = 2,
    /// The draw was refused: unknown species, σ not positive, or vessel
    /// near empty.
    NotObservable = 3,
    /// The result was fused.
    Accepted = 4,
    /// The result was rejected by the innovation gate (a bad sample, or an
    /// estimate far off: compare, and consider a reset from the lab result).
    Rejected = 5,
    /// The result was not a number, or the vessel was near empty.
    Skipped = 6,
    /// The result names no pending sample (never drawn, already fused, or
    /// dropped after the maximum age).
    NotPending = 7,
    /// The sensor has no observer: lab results cannot be fused.
    NotObserved = 8,
}

impl LabOutcome {
    /// Every outcome with its code, in code order.
    pub const ALL: [LabOutcome; 9] = [
        LabOutcome::None,
        LabOutcome::Drawn,
        LabOutcome::QueueFull,
        LabOutcome::NotObservable,
        LabOutcome::Accepted,
        LabOutcome::Rejected,
        LabOutcome::Skipped,
        LabOutcome::NotPending,
        LabOutcome::NotObserved,
    ];

    /// The code in the register.
    pub const fn code(self) -> u16 {
        self as u16
    }

    fn of_draw(r: Result<(), Error>) -> Self {
        match r {
            Ok(()) => LabOutcome::Drawn,
            Err(Error::LabQueueFull) => LabOutcome::QueueFull,
            Err(Error::SensorNotObserved) => LabOutcome::NotObserved,
            Err(_) => LabOutcome::NotObservable,
        }
    }

    fn of_result<S>(r: Result<Update<S>, Error>) -> Self {
        match r {
            Ok(Update::Accepted { .. }) => LabOutcome::Accepted,
            Ok(Update::Rejected { .. }) => LabOutcome::Rejected,
            Ok(Update::Skipped) => LabOutcome::Skipped,
            Err(Error::SensorNotObserved) => LabOutcome::NotObserved,
            Err(_) => LabOutcome::NotPending,
        }
    }
}

/// The NE107 status code of input register 6.
pub const fn status_code(s: DeviceStatus) -> u16 {
    match s {
        DeviceStatus::Good => 0,
        DeviceStatus::MaintenanceRequired => 1,
        DeviceStatus::OutOfSpecification => 2,
        DeviceStatus::FunctionCheck => 3,
        DeviceStatus::Failure => 4,
    }
}

/// The quality code of the quality registers.
pub const fn quality_code(q: Quality) -> u16 {
    match q {
        Quality::Good => 0,
        Quality::Uncertain => 1,
        Quality::Bad => 2,
    }
}

/// Why a request got no response.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum Silence {
    /// Addressed to another unit (normal on a shared RS-485 line).
    OtherUnit,
    /// A broadcast (unit 0): writes are applied, nothing is answered.
    Broadcast,
    /// The CRC does not match (a line error; the client retries).
    Crc,
    /// Too short, too long, or its lengths contradict each other.
    Broken,
}

/// What [`Link::handle`] did.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum Served {
    /// A normal response is in the buffer.
    Reply,
    /// An exception response with this code (01 illegal function, 02
    /// illegal data address, 03 illegal data value, 04 server device
    /// failure) is in the buffer.
    Exception(u8),
    /// Nothing to send.
    Silent(Silence),
}

/// Requests seen since start, by outcome.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct LinkCounters {
    /// Frames handed to [`Link::handle`].
    pub requests: u32,
    /// Normal responses.
    pub replies: u32,
    /// Exception responses (codes 01–04).
    pub exceptions: u32,
    /// Frames dropped for a CRC mismatch.
    pub crc_errors: u32,
    /// Frames dropped as malformed.
    pub broken: u32,
    /// Frames for another unit, and broadcasts.
    pub not_answered: u32,
    /// Ticks on stale inputs.
    pub stale_ticks: u32,
}

/// Coil bits.
const COIL_RESET: u8 = 1 << 0;
const COIL_SAVE: u8 = 1 << 1;
const COIL_ACK: u8 = 1 << 2;
const COIL_FUNCTION_CHECK: u8 = 1 << 3;

/// NaN as the two registers of an `f32`: what an analog input reads until
/// the PLC writes it.
const NAN_BITS: u32 = 0x7FC0_0000;

/// The sequence registers' last seen values.
#[derive(Clone, Copy, Debug, Default)]
struct Seen {
    input: u16,
    /// The lab sequences' baseline, taken at the first tick with inputs
    /// (so that a PLC rewriting its whole block after the link restarts
    /// does not replay an old lab event).
    lab: Option<(u16, u16)>,
}

/// What one [`Link::tick`] did.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct LinkTick<S, const N: usize> {
    /// The sensor's report.
    pub report: SensorReport<S, N>,
    /// The inputs were stale (watchdog).
    pub stale: bool,
    /// The PLC asked for a checkpoint: save the sensor's state and report
    /// the outcome with [`Link::checkpoint_saved`].
    pub save_checkpoint: bool,
    /// A lab event was applied before the tick.
    pub lab: Option<LabOutcome>,
}

/// A sensor behind the register map. Sizes as for [`Sensor`].
#[derive(Clone, Debug)]
pub struct Link<
    S,
    const N: usize,
    const R: usize,
    const O: usize,
    const I: usize,
    const D: usize,
    const L: usize,
> {
    sensor: Sensor<S, N, R, O, I, D, L>,
    map: RegisterMap,
    spec: LinkSpec,
    holding: [u16; MAX_REGISTERS],
    input: [u16; MAX_REGISTERS],
    coils: u8,
    seen: Seen,
    last_input_ms: Option<Millis>,
    flags: LinkFlags,
    lab: LabOutcome,
    heartbeat: u16,
    counters: LinkCounters,
}

impl<
        S: Scalar,
        const N: usize,
        const R: usize,
        const O: usize,
        const I: usize,
        const D: usize,
        const L: usize,
    > Link<S, N, R, O, I, D, L>
{
    /// The link around `sensor`, its map sized by the sensor's type (every
    /// bias state of an observer counted). The analog inputs read NaN (no
    /// reading) until the PLC writes them.
    ///
    /// Errors: see [`Link::with_dims`].
    pub fn new(sensor: Sensor<S, N, R, O, I, D, L>, spec: LinkSpec) -> Result<Self, Error> {
        let biases = if sensor.observer().is_some() {
            D.saturating_sub(1 + N)
        } else {
            0
        };
        let small = |x: usize| u8::try_from(x).map_err(|_| Error::LinkMapTooLarge);
        let dims = Dims {
            species: small(N)?,
            inlets: small(I)?,
            outlets: small(O)?,
            biases: small(biases)?,
        };
        Self::with_dims(sensor, spec, dims)
    }

    /// The link around a sensor whose type is sized for more streams or
    /// bias states than the plant has (a host build that serves any plant
    /// up to its capacities): the map has registers for the plant's
    /// `dims` only, and the inlets and outlets past them read zero flow.
    ///
    /// Errors: [`Error::LinkMapTooLarge`] for a plant whose map does not
    /// fit, or `dims` beyond the sensor's sizes (species other than `N`);
    /// [`Error::ConfigNonPositive`] for a unit id outside 1–247.
    pub fn with_dims(
        sensor: Sensor<S, N, R, O, I, D, L>,
        spec: LinkSpec,
        dims: Dims,
    ) -> Result<Self, Error> {
        let bias_slots = if sensor.observer().is_some() {
            D.saturating_sub(1 + N)
        } else {
            0
        };
        if usize::from(dims.species) != N
            || usize::from(dims.inlets) > I
            || usize::from(dims.outlets) > O
            || usize::from(dims.biases) > bias_slots.min(crate::observer::MAX_BIASES)
        {
            return Err(Error::LinkMapTooLarge);
        }
        let map = RegisterMap::new(dims)?;
        if !(1..=247).contains(&spec.unit_id) {
            return Err(Error::ConfigNonPositive);
        }
        let mut link = Self {
            sensor,
            map,
            spec,
            holding: [0; MAX_REGISTERS],
            input: [0; MAX_REGISTERS],
            coils: 0,
            seen: Seen::default(),
            last_input_ms: None,
            flags: LinkFlags::default(),
            lab: LabOutcome::None,
            heartbeat: 0,
            counters: LinkCounters::default(),
        };
        let nan = spec.word_order.split(NAN_BITS);
        let first = usize::from(map.inlet_flow_address(0));
        if let Some(analog) = link.holding.get_mut(first..usize::from(map.holding_len())) {
            for pair in analog.chunks_exact_mut(2) {
                pair.copy_from_slice(&nan);
            }
        }
        link.put_u32(6, NAN_BITS);
        link.put_u32(8, NAN_BITS);
        link.publish(None);
        Ok(link)
    }

    /// The sensor.
    pub fn sensor(&self) -> &Sensor<S, N, R, O, I, D, L> {
        &self.sensor
    }

    /// The sensor, to restore a checkpoint into.
    pub fn sensor_mut(&mut self) -> &mut Sensor<S, N, R, O, I, D, L> {
        &mut self.sensor
    }

    /// The register map.
    pub fn map(&self) -> &RegisterMap {
        &self.map
    }

    /// The configuration.
    pub fn spec(&self) -> &LinkSpec {
        &self.spec
    }

    /// Requests and stale ticks since start.
    pub fn counters(&self) -> LinkCounters {
        self.counters
    }

    /// The holding registers in use (what the PLC wrote).
    pub fn holding_registers(&self) -> &[u16] {
        used(&self.holding, self.map.holding_len())
    }

    /// The input registers in use (what the PLC reads).
    pub fn input_registers(&self) -> &[u16] {
        used(&self.input, self.map.input_len())
    }

    /// Write holding registers from `address` on, as a write request
    /// would (for a driver that gets its inputs by other means, such as
    /// polling a PLC).
    ///
    /// Errors: [`Error::LinkMapTooLarge`] when the range is outside the map
    /// (nothing is written).
    pub fn write_holding(&mut self, address: u16, values: &[u16]) -> Result<(), Error> {
        let a = usize::from(address);
        let end = a.checked_add(values.len()).ok_or(Error::LinkMapTooLarge)?;
        match self.holding.get_mut(a..end) {
            Some(dst) if end <= usize::from(self.map.holding_len()) => {
                dst.copy_from_slice(values);
                Ok(())
            }
            _ => Err(Error::LinkMapTooLarge),
        }
    }

    /// Whether the PLC has changed the input sequence since the last tick
    /// (in [`Clock::Sequence`] mode: a tick is due).
    pub fn sequence_pending(&self) -> bool {
        self.holding[0] != self.seen.input
    }

    /// The outcome of the checkpoint asked for by the last tick.
    pub fn checkpoint_saved(&mut self, ok: bool) {
        self.flags.set(LinkFlags::CHECKPOINT_SAVED, ok);
        self.flags.set(LinkFlags::CHECKPOINT_FAILED, !ok);
        let f = self.flags.bits();
        self.input[9] = f;
    }

    /// Answer one request frame into `response` (cleared first).
    pub fn handle(&mut self, request: &[u8], framing: Framing, response: &mut Response) -> Served {
        self.counters.requests = self.counters.requests.wrapping_add(1);
        let served = self.serve(request, framing, response);
        let c = &mut self.counters;
        match served {
            Served::Reply => c.replies = c.replies.wrapping_add(1),
            Served::Exception(_) => c.exceptions = c.exceptions.wrapping_add(1),
            Served::Silent(Silence::Crc) => c.crc_errors = c.crc_errors.wrapping_add(1),
            Served::Silent(Silence::Broken) => c.broken = c.broken.wrapping_add(1),
            Served::Silent(_) => c.not_answered = c.not_answered.wrapping_add(1),
        }
        served
    }

    fn serve(&mut self, request: &[u8], framing: Framing, response: &mut Response) -> Served {
        response.clear();
        if !well_formed(request, framing) {
            return Served::Silent(Silence::Broken);
        }
        let proto = match framing {
            Framing::Rtu => ModbusProto::Rtu,
            Framing::Tcp => ModbusProto::TcpUdp,
        };
        let mut frame = ModbusFrame::new(self.spec.unit_id, request, proto, response);
        match frame.parse() {
            Ok(()) => {}
            Err(ErrorKind::FrameCRCError) => return Served::Silent(Silence::Crc),
            Err(_) => return Served::Silent(Silence::Broken),
        }
        if frame.processing_required {
            let done = if frame.readonly {
                self.read(&mut frame)
            } else {
                self.write(&mut frame)
            };
            if done.is_err() {
                return Served::Silent(Silence::Broken);
            }
        }
        if !frame.response_required {
            frame.response.clear();
            let unit = request.get(frame.frame_start).copied().unwrap_or(0);
            return Served::Silent(if unit == 0 || unit == 255 {
                Silence::Broadcast
            } else {
                Silence::OtherUnit
            });
        }
        let exception = frame.error.map(|e| e.byte());
        match (frame.finalize_response(), exception) {
            (Ok(()), None) => Served::Reply,
            (Ok(()), Some(code)) => Served::Exception(code),
            (Err(_), _) => Served::Silent(Silence::Broken),
        }
    }

    fn read(&self, frame: &mut ModbusFrame<'_, Response>) -> Result<(), ErrorKind> {
        let func = frame.func;
        let result = match (func, frame.get_external_read()?) {
            (ModbusFunction::GetHoldings, Read::Words(w)) => {
                read_words(self.holding_registers(), w)
            }
            (ModbusFunction::GetInputs, Read::Words(w)) => read_words(self.input_registers(), w),
            (ModbusFunction::GetCoils, Read::Bits(b)) => {
                read_bits(self.coils, self.map.coil_len(), b)
            }
            _ => Err(ErrorKind::IllegalFunction),
        };
        frame.process_external_read(result)
    }

    fn write(&mut self, frame: &mut ModbusFrame<'_, Response>) -> Result<(), ErrorKind> {
        let result = match frame.get_external_write() {
            Ok(Write::Words(w)) => self.write_words(w),
            Ok(Write::Bits(b)) => self.write_bits(b),
            Err(e) => Err(e),
        };
        frame.process_external_write(result)
    }

    fn write_words(&mut self, w: WriteWords<'_>) -> Result<(), ErrorKind> {
        let (a, n) = (usize::from(w.address), usize::from(w.count));
        if n == 0 || w.data.len() != 2 * n {
            return Err(ErrorKind::IllegalDataValue);
        }
        if a + n > usize::from(self.map.holding_len()) {
            return Err(ErrorKind::IllegalDataAddress);
        }
        let dst = self
            .holding
            .get_mut(a..a + n)
            .ok_or(ErrorKind::IllegalDataAddress)?;
        for (dst, src) in dst.iter_mut().zip(w.data.chunks_exact(2)) {
            if let [hi, lo] = *src {
                *dst = u16::from_be_bytes([hi, lo]);
            }
        }
        Ok(())
    }

    fn write_bits(&mut self, b: WriteBits<'_>) -> Result<(), ErrorKind> {
        let (a, n) = (usize::from(b.address), usize::from(b.count));
        if n == 0 || b.data.len() != n.div_ceil(8) {
            return Err(ErrorKind::IllegalDataValue);
        }
        if a + n > usize::from(self.map.coil_len()) {
            return Err(ErrorKind::IllegalDataAddress);
        }
        let mut coils = self.coils;
        for k in 0..n {
            let on = b.data.get(k / 8).is_some_and(|x| x & (1 << (k % 8)) != 0);
            let bit = u32::try_from(a + k)
                .ok()
                .and_then(|s| 1u8.checked_shl(s))
                .unwrap_or(0);
            if on && bit == COIL_SAVE && !self.spec.checkpoints {
                return Err(ErrorKind::SlaveDeviceFailure);
            }
            if on {
                coils |= bit;
            } else {
                coils &= !bit;
            }
        }
        self.coils = coils;
        Ok(())
    }

    fn get_u32(&self, a: u16) -> u32 {
        let a = usize::from(a);
        let word = |k: usize| self.holding.get(k).copied().unwrap_or(0);
        self.spec.word_order.join([word(a), word(a + 1)])
    }

    fn get_f32(&self, a: u16) -> S {
        S::of(f64::from(f32::from_bits(self.get_u32(a))))
    }

    fn put_u32(&mut self, a: u16, x: u32) {
        put_words(&mut self.holding, a, self.spec.word_order.split(x));
    }

    fn out_u32(&mut self, a: u16, x: u32) {
        put_words(&mut self.input, a, self.spec.word_order.split(x));
    }

    fn out_f32(&mut self, a: u16, x: S) {
        self.out_u32(a, (x.to_f64() as f32).to_bits());
    }

    /// The readings in the holding registers; when `stale`, NaN on every
    /// conditioned channel (it holds its last good value, then goes bad).
    fn readings(&self, stale: bool) -> Readings<S, N, I, O> {
        let ch = &self.sensor.spec().channels;
        let m = &self.map;
        let pick = |a: u16, conditioned: bool| {
            if stale && conditioned {
                S::of(f64::NAN)
            } else {
                self.get_f32(a)
            }
        };
        let mut r = Readings {
            inlet_flows: [S::ZERO; I],
            feed: [[S::ZERO; N]; I],
            outlet_flows: [S::ZERO; O],
            temperature: pick(m.temperature_address(), ch.temperature.is_some()),
            level: pick(m.level_address(), ch.level.is_some()),
        };
        let d = m.dims();
        for (k, q) in (0u8..d.inlets).zip(r.inlet_flows.iter_mut()) {
            *q = pick(
                m.inlet_flow_address(k),
                ch.inlet_flows
                    .get(usize::from(k))
                    .is_some_and(Option::is_some),
            );
        }
        for (k, row) in (0u8..d.inlets).zip(r.feed.iter_mut()) {
            for (i, c) in (0u8..).zip(row.iter_mut()) {
                let conditioned = ch
                    .feed
                    .get(usize::from(k))
                    .and_then(|row| row.get(usize::from(i)))
                    .is_some_and(Option::is_some);
                *c = pick(m.feed_address(k, i), conditioned);
            }
        }
        for (k, q) in (0u8..d.outlets).zip(r.outlet_flows.iter_mut()) {
            *q = pick(
                m.outlet_flow_address(k),
                ch.outlet_flows
                    .get(usize::from(k))
                    .is_some_and(Option::is_some),
            );
        }
        r
    }

    /// The lab events the PLC raised since the last tick, applied in
    /// order: a draw, then a result.
    fn lab_events(&mut self) -> Option<LabOutcome> {
        let (draw, result) = (self.holding[1], self.holding[2]);
        let Some((seen_draw, seen_result)) = self.seen.lab else {
            self.seen.lab = Some((draw, result));
            return None;
        };
        self.seen.lab = Some((draw, result));
        let species = usize::from(self.holding[3]);
        let id = self.get_u32(4);
        let mut out = None;
        if draw != seen_draw {
            let sigma = self.get_f32(8);
            out = Some(LabOutcome::of_draw(
                self.sensor.lab_drawn(id, species, sigma),
            ));
        }
        if result != seen_result {
            let c = self.get_f32(6);
            out = Some(LabOutcome::of_result(self.sensor.lab_result(id, c)));
        }
        out
    }

    /// The coil commands, then cleared (all but function check).
    fn commands(&mut self) -> bool {
        self.flags.set(LinkFlags::RESET_APPLIED, false);
        self.flags.set(LinkFlags::RESET_REFUSED, false);
        if self.coils & COIL_RESET != 0 {
            let species = usize::from(self.holding[3]);
            let (c, sigma) = (self.get_f32(6), self.get_f32(8));
            let ok = self.sensor.reset_concentration(species, c, sigma);
            self.flags.set(LinkFlags::RESET_APPLIED, ok);
            self.flags.set(LinkFlags::RESET_REFUSED, !ok);
        }
        if self.coils & COIL_ACK != 0 {
            self.sensor.acknowledge_closure();
        }
        let check = self.coils & COIL_FUNCTION_CHECK != 0;
        self.sensor.set_function_check(check);
        self.flags.set(LinkFlags::FUNCTION_CHECK, check);
        let save = self.coils & COIL_SAVE != 0;
        self.coils &= COIL_FUNCTION_CHECK;
        save
    }

    /// One tick at `now` (ms, rising; in [`Clock::Sequence`] mode the
    /// driver counts ticks times the tick): the lab events and commands
    /// the PLC raised, then [`Sensor::tick`] on the inputs in the holding
    /// registers, then the outputs.
    pub fn tick(&mut self, now: Millis) -> LinkTick<S, N> {
        let seq = self.holding[0];
        if seq != self.seen.input {
            self.seen.input = seq;
            self.last_input_ms = Some(now);
        }
        let stale = self.spec.stale_after_ms > 0
            && self
                .last_input_ms
                .is_none_or(|t| now.saturating_sub(t) >= self.spec.stale_after_ms);
        let lab = if self.last_input_ms.is_some() {
            self.lab_events()
        } else {
            None
        };
        if let Some(l) = lab {
            self.lab = l;
        }
        let save_checkpoint = self.commands();
        let readings = self.readings(stale);
        let report = self.sensor.tick(now, &readings);
        if stale {
            self.counters.stale_ticks = self.counters.stale_ticks.wrapping_add(1);
        }
        self.flags.set(LinkFlags::STALE, stale);
        self.heartbeat = self.heartbeat.wrapping_add(1);
        self.publish(Some(&report));
        LinkTick {
            report,
            stale,
            save_checkpoint,
            lab,
        }
    }

    /// Refresh the input registers.
    fn publish(&mut self, report: Option<&SensorReport<S, N>>) {
        let stale = self.flags.contains(LinkFlags::STALE);
        let (mut status, mut holdup_q, mut conc_q, kernel, reasons) = match report {
            Some(r) => (
                r.diagnosis.status,
                r.diagnosis.holdup,
                r.diagnosis.concentrations,
                r.step.flags.bits(),
                r.diagnosis.reasons.bits(),
            ),
            // Before the first tick: nothing estimated from inputs yet.
            None => (DeviceStatus::Failure, Quality::Bad, [Quality::Bad; N], 0, 0),
        };
        if stale {
            status = DeviceStatus::Failure;
            holdup_q = Quality::Bad;
            conc_q = [Quality::Bad; N];
        }
        if let Some(r) = report {
            self.flags
                .set(LinkFlags::CLOSURE_ALARM, r.closure.is_some());
            let nis_off = matches!(r.nis, NisState::Overconfident | NisState::TooCautious);
            self.flags.set(LinkFlags::NIS_ALARM, nis_off);
            self.flags.set(LinkFlags::RESEEDED, r.reseeded);
        }
        self.input[0] = MAP_VERSION;
        self.input[1] = self.spec.word_order.code();
        self.out_u32(2, self.sensor.counters().ticks);
        self.input[4] = self.heartbeat;
        self.input[5] = self.seen.input;
        self.input[6] = status_code(status);
        self.input[7] = quality_code(holdup_q);
        self.input[8] = kernel;
        self.input[9] = self.flags.bits();
        self.input[10] = self.lab.code();
        self.out_u32(11, reasons);
        let m = self.map;
        for (i, q) in (0u8..).zip(conc_q.iter()) {
            if let Some(r) = self.input.get_mut(usize::from(m.quality_address(i))) {
                *r = quality_code(*q);
            }
        }
        let e = self.sensor.estimate();
        let a = m.holdup_address();
        self.out_f32(a, e.volume);
        self.out_f32(a + 2, e.volume_sigma.unwrap_or(S::ZERO));
        self.out_f32(a + 4, e.level);
        let sigma = e.concentration_sigma.unwrap_or([S::ZERO; N]);
        for (i, (c, s)) in (0u8..).zip(e.concentrations.iter().zip(sigma.iter())) {
            let a = m.concentration_address(i);
            self.out_f32(a, *c);
            self.out_f32(a + 2, *s);
        }
        let (b, sb) = self.sensor.biases();
        for (k, (b, s)) in (0..m.dims().biases).zip(b.iter().zip(sb.iter())) {
            let a = m.bias_address(k);
            self.out_f32(a, *b);
            self.out_f32(a + 2, *s);
        }
    }
}

/// A frame's lengths agree with each other, so that the codec never reads
/// past its end: RTU 4–256 bytes; TCP an MBAP header whose length field
/// counts the rest, at most 260 bytes; a bulk write's byte count within
/// the frame; a function code below 0x80 (the codes above are exception
/// responses, and the codec would overflow adding 0x80 to them).
pub fn well_formed(request: &[u8], framing: Framing) -> bool {
    let (start, tail) = match framing {
        Framing::Rtu => (0, 2),
        Framing::Tcp => (6, 0),
    };
    let len = request.len();
    let ok_len = match framing {
        Framing::Rtu => (4..=256).contains(&len),
        Framing::Tcp => {
            (8..=MAX_FRAME).contains(&len)
                && request.get(2..4) == Some(&[0, 0][..])
                && request
                    .get(4..6)
                    .map(|l| usize::from(u16::from_be_bytes([l[0], l[1]])))
                    == Some(len - 6)
        }
    };
    if !ok_len {
        return false;
    }
    match request.get(start + 1) {
        // 0x80 and above are exception responses, never requests.
        Some(0x80..) => false,
        // Writes of several coils or registers: the byte count fits.
        Some(0x0F | 0x10) => match request.get(start + 6) {
            Some(&bytes) => bytes <= 246 && start + 7 + usize::from(bytes) + tail <= len,
            None => false,
        },
        // Everything else the codec reads needs 6 bytes of PDU and unit.
        Some(_) => start + 6 + tail <= len,
        None => false,
    }
}

/// The first `len` registers of a table (all of it if `len` is past its
/// end, which the map's construction rules out).
fn used(table: &[u16; MAX_REGISTERS], len: u16) -> &[u16] {
    table.get(..usize::from(len)).unwrap_or(table)
}

/// Two registers from address `a` (nothing past the table's end).
fn put_words(table: &mut [u16; MAX_REGISTERS], a: u16, w: [u16; 2]) {
    let a = usize::from(a);
    if let Some(dst) = table.get_mut(a..a + 2) {
        dst.copy_from_slice(&w);
    }
}

fn read_words(regs: &[u16], w: ReadWords<'_>) -> Result<(), ErrorKind> {
    let (a, n) = (usize::from(w.address), usize::from(w.count));
    if n == 0 {
        return Err(ErrorKind::IllegalDataValue);
    }
    let src = regs.get(a..a + n).ok_or(ErrorKind::IllegalDataAddress)?;
    for (dst, x) in w.buf.chunks_exact_mut(2).zip(src.iter()) {
        dst.copy_from_slice(&x.to_be_bytes());
    }
    Ok(())
}

fn read_bits(coils: u8, len: u16, b: ReadBits<'_>) -> Result<(), ErrorKind> {
    let (a, n) = (usize::from(b.address), usize::from(b.count));
    if n == 0 {
        return Err(ErrorKind::IllegalDataValue);
    }
    if a + n > usize::from(len) {
        return Err(ErrorKind::IllegalDataAddress);
    }
    b.buf.fill(0);
    for k in 0..n {
        let on = u32::try_from(a + k)
            .ok()
            .and_then(|s| coils.checked_shr(s))
            .is_some_and(|x| x & 1 != 0);
        if let (true, Some(byte)) = (on, b.buf.get_mut(k / 8)) {
            *byte |= 1 << (k % 8);
        }
    }
    Ok(())
}
