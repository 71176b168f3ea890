//! Checkpoints: the kernel's state kept across power loss (feature `serde`).
//!
//! A state ([`VesselState`], [`ObserverState`]) is encoded with postcard
//! behind a fixed header and written into one of two slots of a
//! [`Storage`], alternately, each with a sequence number one above the
//! newest valid one. A write torn by power loss can only damage the slot
//! being written, which holds the older checkpoint; the newer one is never
//! touched. [`Checkpoints::restore`] takes the newest slot that passes every
//! check and says which slot it took and why the other was not taken.
//!
//! # Slot format (format version 2; version 1 had no sensor checkpoint, NIS windows that slid, and no re-seed counter)
//!
//! All integers little-endian. Slot `k` (0 or 1) starts at
//! `base + k·slot_len`.
//!
//! | offset | bytes | field |
//! |---|---|---|
//! | 0 | 4 | magic `"HDCK"` |
//! | 4 | 2 | format version ([`FORMAT_VERSION`]) |
//! | 6 | 2 | state kind ([`KIND_VESSEL`], [`KIND_OBSERVER`]) |
//! | 8 | 4 | sequence number (serial-number order, wraps) |
//! | 12 | 4 | configuration fingerprint |
//! | 16 | 4 | payload length `n` |
//! | 20 | 4 | CRC-32 of the payload |
//! | 24 | 4 | CRC-32 of bytes 0..24 |
//! | 28 | `n` | the state, postcard-encoded |
//!
//! The CRC is CRC-32/ISO-HDLC ([`crate::crc`]). The configuration
//! fingerprint is the CRC-32 of the state kind, the scalar's size, the const
//! sizes (`N, R, O`, and `D, L` for an observer) and the postcard encoding
//! of the [`Model`](crate::model::Model) (and the [`ObserverSpec`]): a checkpoint written for
//! another vessel, network, tick, integrator, observer tuning, scalar type
//! or capacity is refused with [`Error::CheckpointConfigMismatch`].
//!
//! # Checks on restore, in order
//!
//! magic ([`Error::CheckpointEmpty`]), header CRC
//! ([`Error::CheckpointCrcMismatch`]), format version
//! ([`Error::CheckpointVersion`]), state kind ([`Error::CheckpointKind`]),
//! fingerprint ([`Error::CheckpointConfigMismatch`]), length
//! ([`Error::CheckpointTooLarge`]), payload CRC
//! ([`Error::CheckpointCrcMismatch`]), decoding with nothing left over
//! ([`Error::CheckpointDecode`]), and the state's own validation against the
//! configuration ([`Error::CheckpointInvalidState`]: finite, non-negative,
//! within capacity, covariance symmetric positive definite). Nothing that
//! fails a check reaches the tick.
//!
//! Every buffer is the caller's (`scratch` must hold a header plus the
//! encoded state); every loop is bounded by the slot or buffer length; no
//! path panics.
//!
//! # Configuration encoding
//!
//! [`VesselSpec::encode`] and [`VesselSpec::decode`] (and the same for
//! [`ObserverSpec`]) let a configuration be produced on a laptop and stored
//! on the gateway. A decoded specification is validated by [`Model::new`](crate::model::Model::new)
//! (and [`Observer::new`]) like any other; bytes that do not decode are
//! [`Error::ConfigDecode`], a decoded geometry that is not valid is the
//! geometry's own error.

use serde::de::DeserializeOwned;
use serde::Serialize;

use crate::crc::{crc32, Crc32};
use crate::diagnostics::{ClosureMonitor, NisMonitor};
use crate::geometry::{Geometry, Shape};
use crate::model::VesselSpec;
use crate::observer::{Observer, ObserverSpec, ObserverState};
use crate::sensor::{Sensor, SensorState};
use crate::storage::{Storage, StorageError};
use crate::vessel::{Vessel, VesselState};
use crate::{Error, Scalar};

/// Magic number at the start of every checkpoint.
pub const MAGIC: [u8; 4] = *b"HDCK";
/// The format version written, and the only one read.
pub const FORMAT_VERSION: u16 = 2;
/// Bytes of the header before the payload.
pub const HEADER_LEN: usize = 28;
/// State kind of a [`Vessel`] checkpoint.
pub const KIND_VESSEL: u16 = 1;
/// State kind of an [`Observer`] checkpoint.
pub const KIND_OBSERVER: u16 = 2;
/// State kind of a balance-closure monitor record.
pub const KIND_CLOSURE: u16 = 3;
/// State kind of a windowed-NIS monitor record.
pub const KIND_NIS: u16 = 4;
/// State kind of a whole [`Sensor`] checkpoint.
pub const KIND_SENSOR: u16 = 5;

/// Something whose state can be checkpointed: it holds the configuration
/// (which gives the fingerprint and checks a decoded state) and the state.
pub trait Checkpoint {
    /// The state a checkpoint stores.
    type State: Serialize + DeserializeOwned;
    /// The state kind written in the header.
    const KIND: u16;

    /// The configuration fingerprint (see the module documentation).
    ///
    /// Errors: [`Error::ConfigEncode`] if the configuration cannot be
    /// encoded (not expected for the kernel's types).
    fn fingerprint(&self) -> Result<u32, Error>;

    /// The current state.
    fn snapshot(&self) -> Self::State;

    /// Check a decoded state against the configuration.
    ///
    /// Errors: [`Error::CheckpointInvalidState`].
    fn check(&self, state: &Self::State) -> Result<(), Error>;

    /// Check and install a state; on error nothing changes.
    ///
    /// Errors: [`Error::CheckpointInvalidState`].
    fn install(&mut self, state: &Self::State) -> Result<(), Error>;
}

/// A postcard flavor that feeds a CRC instead of a buffer.
struct CrcFlavor(Crc32);

impl postcard::ser_flavors::Flavor for CrcFlavor {
    type Output = u32;

    fn try_push(&mut self, data: u8) -> postcard::Result<()> {
        self.0.push(data);
        Ok(())
    }

    fn finalize(self) -> postcard::Result<u32> {
        Ok(self.0.finish())
    }
}

/// CRC-32 of `sizes` (each as a little-endian `u32`) followed by the
/// postcard encoding of each of `parts`, without a buffer.
fn fingerprint_of<A: Serialize, B: Serialize>(sizes: &[usize], a: &A, b: &B) -> Result<u32, Error> {
    let mut crc = Crc32::new();
    for &s in sizes {
        crc.update(&u32::try_from(s).unwrap_or(u32::MAX).to_le_bytes());
    }
    let crc = postcard::serialize_with_flavor::<A, CrcFlavor, u32>(a, CrcFlavor(crc))
        .map_err(|_| Error::ConfigEncode)?;
    // Chain: the first part's CRC seeds the second's input.
    let mut chained = Crc32::new();
    chained.update(&crc.to_le_bytes());
    postcard::serialize_with_flavor::<B, CrcFlavor, u32>(b, CrcFlavor(chained))
        .map_err(|_| Error::ConfigEncode)
}

impl<S, const N: usize, const R: usize, const O: usize> Checkpoint for Vessel<S, N, R, O>
where
    S: Scalar + Serialize + DeserializeOwned,
{
    type State = VesselState<S, N>;
    const KIND: u16 = KIND_VESSEL;

    fn fingerprint(&self) -> Result<u32, Error> {
        let sizes = [usize::from(Self::KIND), core::mem::size_of::<S>(), N, R, O];
        fingerprint_of(&sizes, self.model(), &())
    }

    fn snapshot(&self) -> Self::State {
        self.state()
    }

    fn check(&self, state: &Self::State) -> Result<(), Error> {
        self.check_state(state)
    }

    fn install(&mut self, state: &Self::State) -> Result<(), Error> {
        self.restore_state(state)
    }
}

impl<S> Checkpoint for ClosureMonitor<S>
where
    S: Scalar + Serialize + DeserializeOwned,
{
    type State = ClosureMonitor<S>;
    const KIND: u16 = KIND_CLOSURE;

    fn fingerprint(&self) -> Result<u32, Error> {
        let sizes = [usize::from(Self::KIND), core::mem::size_of::<S>()];
        fingerprint_of(&sizes, &self.config_key(), &())
    }

    fn snapshot(&self) -> Self::State {
        *self
    }

    fn check(&self, state: &Self::State) -> Result<(), Error> {
        if self.accepts(state) {
            Ok(())
        } else {
            Err(Error::CheckpointInvalidState)
        }
    }

    fn install(&mut self, state: &Self::State) -> Result<(), Error> {
        self.check(state)?;
        *self = *state;
        Ok(())
    }
}

impl<S, const W: usize> Checkpoint for NisMonitor<S, W>
where
    S: Scalar + Serialize + DeserializeOwned,
{
    type State = NisMonitor<S, W>;
    const KIND: u16 = KIND_NIS;

    fn fingerprint(&self) -> Result<u32, Error> {
        let sizes = [usize::from(Self::KIND), core::mem::size_of::<S>(), W];
        fingerprint_of(&sizes, &self.config_key(), &())
    }

    fn snapshot(&self) -> Self::State {
        *self
    }

    fn check(&self, state: &Self::State) -> Result<(), Error> {
        if self.accepts(state) {
            Ok(())
        } else {
            Err(Error::CheckpointInvalidState)
        }
    }

    fn install(&mut self, state: &Self::State) -> Result<(), Error> {
        self.check(state)?;
        *self = *state;
        Ok(())
    }
}

impl<S, const N: usize, const R: usize, const O: usize, const D: usize, const L: usize> Checkpoint
    for Observer<S, N, R, O, D, L>
where
    S: Scalar + Serialize + DeserializeOwned,
{
    type State = ObserverState<S, N, D, L>;
    const KIND: u16 = KIND_OBSERVER;

    fn fingerprint(&self) -> Result<u32, Error> {
        let sizes = [
            usize::from(Self::KIND),
            core::mem::size_of::<S>(),
            N,
            R,
            O,
            D,
            L,
        ];
        fingerprint_of(&sizes, self.vessel().model(), self.spec())
    }

    fn snapshot(&self) -> Self::State {
        self.state()
    }

    fn check(&self, state: &Self::State) -> Result<(), Error> {
        self.check_state(state)
    }

    fn install(&mut self, state: &Self::State) -> Result<(), Error> {
        self.restore_state(state)
    }
}

impl<
        S,
        const N: usize,
        const R: usize,
        const O: usize,
        const I: usize,
        const D: usize,
        const L: usize,
    > Checkpoint for Sensor<S, N, R, O, I, D, L>
where
    S: Scalar + Serialize + DeserializeOwned,
{
    type State = SensorState<S, N, I, O, D, L>;
    const KIND: u16 = KIND_SENSOR;

    fn fingerprint(&self) -> Result<u32, Error> {
        let sizes = [
            usize::from(Self::KIND),
            core::mem::size_of::<S>(),
            N,
            R,
            O,
            I,
            D,
            L,
        ];
        let model = self.vessel().model();
        match self.observer() {
            Some(o) => fingerprint_of(&sizes, model, &(o.spec(), self.spec())),
            None => fingerprint_of(&sizes, model, self.spec()),
        }
    }

    fn snapshot(&self) -> Self::State {
        self.state()
    }

    fn check(&self, state: &Self::State) -> Result<(), Error> {
        self.check_state(state)
    }

    fn install(&mut self, state: &Self::State) -> Result<(), Error> {
        self.restore_state(state)
    }
}

/// The parsed header of a slot.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
struct Header {
    kind: u16,
    sequence: u32,
    fingerprint: u32,
    len: u32,
    payload_crc: u32,
}

/// Take `K` bytes off the front of `bytes`.
fn take<const K: usize>(bytes: &mut &[u8]) -> [u8; K] {
    match bytes.split_first_chunk::<K>() {
        Some((head, rest)) => {
            *bytes = rest;
            *head
        }
        None => [0; K],
    }
}

impl Header {
    fn encode(&self) -> [u8; HEADER_LEN] {
        let mut out = [0u8; HEADER_LEN];
        let fields: [&[u8]; 7] = [
            &MAGIC,
            &FORMAT_VERSION.to_le_bytes(),
            &self.kind.to_le_bytes(),
            &self.sequence.to_le_bytes(),
            &self.fingerprint.to_le_bytes(),
            &self.len.to_le_bytes(),
            &self.payload_crc.to_le_bytes(),
        ];
        let mut crc = Crc32::new();
        let mut dst = out.iter_mut();
        for &b in fields.iter().flat_map(|f| f.iter()) {
            crc.push(b);
            if let Some(d) = dst.next() {
                *d = b;
            }
        }
        for (d, b) in dst.zip(crc.finish().to_le_bytes()) {
            *d = b;
        }
        out
    }

    /// Errors: [`Error::CheckpointEmpty`], [`Error::CheckpointCrcMismatch`],
    /// [`Error::CheckpointVersion`].
    fn parse(raw: &[u8; HEADER_LEN]) -> Result<Self, Error> {
        let mut r: &[u8] = raw;
        if take::<4>(&mut r) != MAGIC {
            return Err(Error::CheckpointEmpty);
        }
        let version = u16::from_le_bytes(take(&mut r));
        let kind = u16::from_le_bytes(take(&mut r));
        let sequence = u32::from_le_bytes(take(&mut r));
        let fingerprint = u32::from_le_bytes(take(&mut r));
        let len = u32::from_le_bytes(take(&mut r));
        let payload_crc = u32::from_le_bytes(take(&mut r));
        let header_crc = u32::from_le_bytes(take(&mut r));
        let covered = raw.get(..HEADER_LEN - 4).unwrap_or(&[]);
        if crc32(covered) != header_crc {
            return Err(Error::CheckpointCrcMismatch);
        }
        if version != FORMAT_VERSION {
            return Err(Error::CheckpointVersion);
        }
        Ok(Self {
            kind,
            sequence,
            fingerprint,
            len,
            payload_crc,
        })
    }
}

/// `a` is newer than `b` in serial-number order (RFC 1982 style: within
/// half the sequence space).
fn newer(a: u32, b: u32) -> bool {
    let d = a.wrapping_sub(b);
    d != 0 && d < 0x8000_0000
}

fn io<E: StorageError>(e: E) -> Error {
    Error::from(e.kind())
}

/// Where a checkpoint went.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct SlotInfo {
    /// Slot written, 0 or 1.
    pub slot: u8,
    /// Its sequence number.
    pub sequence: u32,
    /// Bytes written (header and payload).
    pub bytes: u32,
}

/// Why the slot not restored was not restored.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum OtherSlot {
    /// It holds a valid but older checkpoint (its sequence number).
    Older(u32),
    /// It failed a check (blank, torn, another configuration…).
    Rejected(Error),
}

/// What [`Checkpoints::restore`] found.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct RestoreReport {
    /// Slot restored, 0 or 1.
    pub slot: u8,
    /// Its sequence number.
    pub sequence: u32,
    /// Why the other slot was not taken.
    pub other: OtherSlot,
}

/// Two checkpoint slots of `slot_len` bytes each, from `base`.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Checkpoints {
    base: u32,
    slot_len: u32,
}

impl Checkpoints {
    /// Slots at `base` and `base + slot_len` (checked against the storage
    /// at every use: [`Error::CheckpointLayout`]).
    pub const fn new(base: u32, slot_len: u32) -> Self {
        Self { base, slot_len }
    }

    /// Bytes per slot.
    pub const fn slot_len(&self) -> u32 {
        self.slot_len
    }

    /// Address of slot `slot` (0 or 1), if the layout fits `capacity`.
    fn slot_addr(&self, slot: u8, capacity: u32) -> Result<u32, Error> {
        let end = self
            .slot_len
            .checked_mul(2)
            .and_then(|l| l.checked_add(self.base));
        let fits = end.is_some_and(|e| e <= capacity)
            && usize::try_from(self.slot_len).is_ok_and(|l| l > HEADER_LEN);
        if !fits || slot > 1 {
            return Err(Error::CheckpointLayout);
        }
        let offset = if slot == 0 { 0 } else { self.slot_len };
        self.base.checked_add(offset).ok_or(Error::CheckpointLayout)
    }

    /// Largest payload a slot holds.
    fn max_payload(&self) -> usize {
        usize::try_from(self.slot_len)
            .unwrap_or(usize::MAX)
            .saturating_sub(HEADER_LEN)
    }

    /// Read and check slot `slot` up to the payload CRC; the payload is left
    /// in the front of `scratch`. Returns the header.
    fn read_slot<St: Storage>(
        &self,
        slot: u8,
        kind: u16,
        fingerprint: u32,
        storage: &mut St,
        scratch: &mut [u8],
    ) -> Result<Header, Error> {
        let addr = self.slot_addr(slot, storage.capacity())?;
        let mut raw = [0u8; HEADER_LEN];
        storage.read(addr, &mut raw).map_err(io)?;
        let h = Header::parse(&raw)?;
        if h.kind != kind {
            return Err(Error::CheckpointKind);
        }
        if h.fingerprint != fingerprint {
            return Err(Error::CheckpointConfigMismatch);
        }
        let len = usize::try_from(h.len).map_err(|_| Error::CheckpointTooLarge)?;
        if len > self.max_payload() {
            return Err(Error::CheckpointTooLarge);
        }
        let payload = scratch.get_mut(..len).ok_or(Error::CheckpointTooLarge)?;
        // HEADER_LEN + len ≤ slot_len, inside the checked layout.
        let payload_addr = addr
            .checked_add(HEADER_LEN as u32)
            .ok_or(Error::CheckpointLayout)?;
        storage.read(payload_addr, payload).map_err(io)?;
        if crc32(payload) != h.payload_crc {
            return Err(Error::CheckpointCrcMismatch);
        }
        Ok(h)
    }

    /// Read, check, decode and validate slot `slot` for `config`.
    fn load<T: Checkpoint, St: Storage>(
        &self,
        slot: u8,
        config: &T,
        fingerprint: u32,
        storage: &mut St,
        scratch: &mut [u8],
    ) -> Result<(u32, T::State), Error> {
        let h = self.read_slot(slot, T::KIND, fingerprint, storage, scratch)?;
        let len = usize::try_from(h.len).map_err(|_| Error::CheckpointTooLarge)?;
        let payload = scratch.get(..len).ok_or(Error::CheckpointTooLarge)?;
        let (state, rest) =
            postcard::take_from_bytes::<T::State>(payload).map_err(|_| Error::CheckpointDecode)?;
        if !rest.is_empty() {
            return Err(Error::CheckpointDecode);
        }
        config.check(&state)?;
        Ok((h.sequence, state))
    }

    /// Check one slot completely for `config` (for diagnostics): its
    /// sequence number, or why [`Checkpoints::restore`] would not take it.
    ///
    /// Errors: any `Checkpoint*` or `Storage*` error.
    pub fn check_slot<T: Checkpoint, St: Storage>(
        &self,
        slot: u8,
        config: &T,
        storage: &mut St,
        scratch: &mut [u8],
    ) -> Result<u32, Error> {
        let fp = config.fingerprint()?;
        self.load(slot, config, fp, storage, scratch)
            .map(|(seq, _)| seq)
    }

    /// Write `obj`'s state into the slot not holding the newest valid
    /// checkpoint, with the next sequence number (1 into slot 0 if neither
    /// slot is valid). The record is written in one storage write; if it is
    /// torn, the other slot still holds the previous checkpoint.
    ///
    /// Errors: [`Error::CheckpointLayout`], [`Error::CheckpointTooLarge`]
    /// (the state does not fit the slot or `scratch`),
    /// [`Error::ConfigEncode`], [`Error::StorageIo`],
    /// [`Error::StorageOutOfRange`].
    pub fn save<T: Checkpoint, St: Storage>(
        &self,
        obj: &T,
        storage: &mut St,
        scratch: &mut [u8],
    ) -> Result<SlotInfo, Error> {
        let fp = obj.fingerprint()?;
        // The newest slot restore could take (same kind and configuration,
        // intact). A slot from another configuration is fair game.
        let mut newest: Option<(u8, u32)> = None;
        for slot in 0..2u8 {
            match self.read_slot(slot, T::KIND, fp, storage, scratch) {
                Ok(h) => {
                    if newest.is_none_or(|(_, s)| newer(h.sequence, s)) {
                        newest = Some((slot, h.sequence));
                    }
                }
                Err(Error::CheckpointLayout) => return Err(Error::CheckpointLayout),
                Err(e @ (Error::StorageIo | Error::StorageOutOfRange)) => return Err(e),
                Err(_) => {}
            }
        }
        let (slot, sequence) = match newest {
            Some((s, seq)) => (s ^ 1, seq.wrapping_add(1)),
            None => (0, 1),
        };
        let addr = self.slot_addr(slot, storage.capacity())?;
        let (head, body) = scratch
            .split_at_mut_checked(HEADER_LEN)
            .ok_or(Error::CheckpointTooLarge)?;
        let max = self.max_payload().min(body.len());
        let body = body.get_mut(..max).ok_or(Error::CheckpointTooLarge)?;
        let payload = postcard::to_slice(&obj.snapshot(), body).map_err(|e| match e {
            postcard::Error::SerializeBufferFull => Error::CheckpointTooLarge,
            _ => Error::ConfigEncode,
        })?;
        let len = u32::try_from(payload.len()).map_err(|_| Error::CheckpointTooLarge)?;
        let header = Header {
            kind: T::KIND,
            sequence,
            fingerprint: fp,
            len,
            payload_crc: crc32(payload),
        };
        head.copy_from_slice(&header.encode());
        let total = HEADER_LEN + payload.len();
        let record = scratch.get(..total).ok_or(Error::CheckpointTooLarge)?;
        storage.write(addr, record).map_err(io)?;
        Ok(SlotInfo {
            slot,
            sequence,
            bytes: u32::try_from(total).unwrap_or(u32::MAX),
        })
    }

    /// The newest valid state for `config` (an object built from the same
    /// configuration, whose own state is not used), checked against it and
    /// ready for [`Checkpoint::install`], and which slot it came from and
    /// why the other was not taken.
    ///
    /// When neither slot is valid: the common reason if both fail alike
    /// (for example both [`Error::CheckpointEmpty`] on first boot, or both
    /// [`Error::CheckpointConfigMismatch`] after a configuration change);
    /// the other slot's reason if one is blank; else
    /// [`Error::CheckpointNoValidSlot`] ([`Checkpoints::check_slot`] tells
    /// each slot's reason). [`Error::StorageIo`],
    /// [`Error::StorageOutOfRange`] and [`Error::CheckpointLayout`] are
    /// returned as they occur.
    pub fn restore<T: Checkpoint, St: Storage>(
        &self,
        config: &T,
        storage: &mut St,
        scratch: &mut [u8],
    ) -> Result<(T::State, RestoreReport), Error> {
        let fp = config.fingerprint()?;
        let fatal = |e: Error| {
            matches!(
                e,
                Error::CheckpointLayout | Error::StorageIo | Error::StorageOutOfRange
            )
        };
        // Pass 1: headers and CRCs, to order the slots.
        let mut scan = [Err(Error::CheckpointEmpty); 2];
        for (slot, r) in (0..2u8).zip(scan.iter_mut()) {
            *r = self
                .read_slot(slot, T::KIND, fp, storage, scratch)
                .map(|h| h.sequence);
            if let Err(e) = *r {
                if fatal(e) {
                    return Err(e);
                }
            }
        }
        let [s0, s1] = scan;
        let first: u8 = match (s0, s1) {
            (Ok(a), Ok(b)) if newer(b, a) => 1,
            (Err(_), Ok(_)) => 1,
            _ => 0,
        };
        // Pass 2: decode and validate, newest first.
        let mut reasons = [s0.err(), s1.err()];
        for slot in [first, first ^ 1] {
            let tried = reasons.get(usize::from(slot)).copied().flatten();
            if tried.is_some() {
                continue;
            }
            match self.load(slot, config, fp, storage, scratch) {
                Ok((sequence, state)) => {
                    let other_slot = slot ^ 1;
                    let other = match reasons.get(usize::from(other_slot)).copied().flatten() {
                        Some(e) => OtherSlot::Rejected(e),
                        None => OtherSlot::Older(if other_slot == 0 {
                            s0.unwrap_or(0)
                        } else {
                            s1.unwrap_or(0)
                        }),
                    };
                    return Ok((
                        state,
                        RestoreReport {
                            slot,
                            sequence,
                            other,
                        },
                    ));
                }
                Err(e) if fatal(e) => return Err(e),
                Err(e) => {
                    if let Some(r) = reasons.get_mut(usize::from(slot)) {
                        *r = Some(e);
                    }
                }
            }
        }
        let [r0, r1] = reasons;
        Err(match (r0, r1) {
            (Some(a), Some(b)) if a == b => a,
            (Some(Error::CheckpointEmpty), Some(e)) | (Some(e), Some(Error::CheckpointEmpty)) => e,
            _ => Error::CheckpointNoValidSlot,
        })
    }

    /// [`Checkpoints::restore`] into `target` (built from the same
    /// configuration); on error `target` is unchanged.
    ///
    /// Errors: as [`Checkpoints::restore`].
    pub fn restore_into<T: Checkpoint, St: Storage>(
        &self,
        target: &mut T,
        storage: &mut St,
        scratch: &mut [u8],
    ) -> Result<RestoreReport, Error> {
        let (state, report) = self.restore(&*target, storage, scratch)?;
        target.install(&state)?;
        Ok(report)
    }
}

/// Encode `value` with postcard into `buf`; the number of bytes used.
fn encode_into<T: Serialize>(value: &T, buf: &mut [u8]) -> Result<usize, Error> {
    postcard::to_slice(value, buf)
        .map(|b| b.len())
        .map_err(|_| Error::ConfigEncode)
}

/// Decode all of `bytes` as a `T`.
fn decode_all<T: DeserializeOwned>(bytes: &[u8]) -> Result<T, Error> {
    match postcard::take_from_bytes::<T>(bytes) {
        Ok((v, [])) => Ok(v),
        _ => Err(Error::ConfigDecode),
    }
}

impl<S, const N: usize, const R: usize, const O: usize> VesselSpec<S, N, R, O>
where
    S: Scalar + Serialize + DeserializeOwned,
{
    /// Encode with postcard into `buf`; the number of bytes used.
    ///
    /// Errors: [`Error::ConfigEncode`] when `buf` is too small.
    pub fn encode(&self, buf: &mut [u8]) -> Result<usize, Error> {
        encode_into(self, buf)
    }

    /// Decode a specification encoded by [`VesselSpec::encode`]. The
    /// geometry is validated as it is decoded; validate the rest with
    /// [`Model::new`](crate::model::Model::new).
    ///
    /// Errors: the geometry's own error ([`Error::GeometryNonPositive`],
    /// [`Error::StrappingNotMonotone`], …) when the bytes hold an invalid
    /// shape; [`Error::ConfigDecode`] for anything else that does not
    /// decode, or bytes left over.
    pub fn decode(bytes: &[u8]) -> Result<Self, Error> {
        decode_all(bytes).map_err(|e| {
            // The geometry is the first field: if its shape decodes but does
            // not validate, say why.
            match postcard::take_from_bytes::<Shape<S>>(bytes) {
                Ok((shape, _)) => Geometry::new(shape).err().unwrap_or(e),
                Err(_) => e,
            }
        })
    }
}

impl<S, const N: usize> ObserverSpec<S, N>
where
    S: Scalar + Serialize + DeserializeOwned,
{
    /// Encode with postcard into `buf`; the number of bytes used.
    ///
    /// Errors: [`Error::ConfigEncode`] when `buf` is too small.
    pub fn encode(&self, buf: &mut [u8]) -> Result<usize, Error> {
        encode_into(self, buf)
    }

    /// Decode a specification encoded by [`ObserverSpec::encode`]; validate
    /// it with [`Observer::new`].
    ///
    /// Errors: [`Error::ConfigDecode`] for bytes that do not decode, or
    /// bytes left over.
    pub fn decode(bytes: &[u8]) -> Result<Self, Error> {
        decode_all(bytes)
    }
}

#[cfg(test)]
mod tests;
