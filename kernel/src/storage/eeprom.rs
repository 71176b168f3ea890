//! A driver for serial EEPROMs on an I²C bus (the common 24-series command
//! set), for gateways whose non-volatile memory is an EEPROM, not an FRAM.
//!
//! An EEPROM differs from an FRAM in three ways, and the driver handles
//! each:
//!
//! * **Pages.** A write reaches at most to the end of its page (the
//!   address counter wraps within the page), so a longer write is split at
//!   page boundaries, one bus write per page.
//! * **Write cycle.** After each page the device programs its cells (a few
//!   ms) and does not acknowledge its address meanwhile. The driver polls
//!   (a dummy write of the address bytes) every [`POLL_INTERVAL_US`] until
//!   the device acknowledges, for at most the configured write-cycle time,
//!   then reports [`EepromError::WriteTimeout`].
//! * **Endurance.** Each cell takes a limited number of writes (datasheets
//!   of this family give 10⁶ per page, from memory: check the part). The
//!   checkpoint layer writes its two slots alternately, so each slot's pages
//!   are written every second checkpoint: at one checkpoint a second a page
//!   wears out in about 23 days; at one every 5 minutes, in about 19 years.
//!   Checkpoint an EEPROM minutes apart, not every tick.
//!
//! Addressing: parts up to 2 KiB take one address byte and carry the
//! address bits above 8 in the low bits of their device address
//! ([`EepromAddressing::OneByte`]); parts from 4 KiB to 64 KiB take two
//! address bytes ([`EepromAddressing::TwoBytes`]).

use embedded_hal::delay::DelayNs;
use embedded_hal::i2c::{Error as _, ErrorKind as I2cErrorKind, I2c};

use super::{span, ErrorKind, Storage, StorageError};
use crate::Error;

/// Largest page the driver supports, bytes.
pub const MAX_PAGE: usize = 256;

/// Time between two acknowledge polls during a write cycle, µs.
pub const POLL_INTERVAL_US: u32 = 100;

/// How the memory address is sent.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum EepromAddressing {
    /// One address byte; address bits 8–10 in the device address's low
    /// bits (parts of 128 B to 2 KiB).
    OneByte,
    /// Two address bytes, big-endian (parts of 4 KiB to 64 KiB).
    TwoBytes,
}

/// Error of the [`I2cEeprom`] driver.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum EepromError<E> {
    /// The I²C transfer failed.
    I2c(E),
    /// The access reaches beyond the device (nothing was sent).
    OutOfRange,
    /// The device did not acknowledge within the write-cycle time after a
    /// page write (that page may be incomplete).
    WriteTimeout,
}

impl<E: core::fmt::Debug> StorageError for EepromError<E> {
    fn kind(&self) -> ErrorKind {
        match self {
            EepromError::I2c(_) | EepromError::WriteTimeout => ErrorKind::Bus,
            EepromError::OutOfRange => ErrorKind::OutOfRange,
        }
    }
}

/// A serial EEPROM on an I²C bus.
#[derive(Debug)]
pub struct I2cEeprom<I2C, D> {
    i2c: I2C,
    delay: D,
    device: u8,
    capacity: u32,
    page: u32,
    addressing: EepromAddressing,
    max_polls: u32,
}

impl<I2C: I2c, D: DelayNs> I2cEeprom<I2C, D> {
    /// A device at 7-bit address `device` (its base address, with the
    /// block bits zero for [`EepromAddressing::OneByte`] parts above
    /// 256 B) of `capacity` bytes, with pages of `page` bytes and a
    /// write cycle of at most `write_cycle_ms` (the datasheet's `t_WR`).
    ///
    /// Errors: [`Error::StorageConfig`] if the device address is not 7-bit
    /// or has block bits set, the capacity is zero or beyond what the
    /// addressing reaches, the page is not a power of two up to
    /// [`MAX_PAGE`] and the capacity, or the write cycle is not 1–100 ms.
    pub fn new(
        i2c: I2C,
        delay: D,
        device: u8,
        capacity: u32,
        page: u32,
        addressing: EepromAddressing,
        write_cycle_ms: u32,
    ) -> Result<Self, Error> {
        let max_capacity = match addressing {
            EepromAddressing::OneByte => 1 << 11,
            EepromAddressing::TwoBytes => 1 << 16,
        };
        let block_bits = match addressing {
            EepromAddressing::OneByte => (capacity.saturating_sub(1) >> 8) as u8,
            EepromAddressing::TwoBytes => 0,
        };
        let ok = device <= 0x7F
            && device & block_bits == 0
            && capacity > 0
            && capacity <= max_capacity
            && page.is_power_of_two()
            && page as usize <= MAX_PAGE
            && page <= capacity
            && (1..=100).contains(&write_cycle_ms);
        if !ok {
            return Err(Error::StorageConfig);
        }
        Ok(Self {
            i2c,
            delay,
            device,
            capacity,
            page,
            addressing,
            max_polls: write_cycle_ms * 1000 / POLL_INTERVAL_US + 1,
        })
    }

    /// Give the bus and the delay back.
    pub fn release(self) -> (I2C, D) {
        (self.i2c, self.delay)
    }

    /// Device address and address bytes for `addr`; the bytes to send are
    /// `..len`.
    fn address(&self, addr: u32) -> (u8, [u8; 2], usize) {
        let [_, _, hi, lo] = addr.to_be_bytes();
        match self.addressing {
            EepromAddressing::OneByte => (self.device | (hi & 0x07), [lo, 0], 1),
            EepromAddressing::TwoBytes => (self.device, [hi, lo], 2),
        }
    }

    /// Poll until the device acknowledges again after a page write.
    fn wait_write_cycle(
        &mut self,
        device: u8,
        header: &[u8],
    ) -> Result<(), EepromError<I2C::Error>> {
        for _ in 0..self.max_polls {
            self.delay.delay_us(POLL_INTERVAL_US);
            match self.i2c.write(device, header) {
                Ok(()) => return Ok(()),
                Err(e) if matches!(e.kind(), I2cErrorKind::NoAcknowledge(_)) => {}
                Err(e) => return Err(EepromError::I2c(e)),
            }
        }
        Err(EepromError::WriteTimeout)
    }
}

impl<I2C: I2c, D: DelayNs> Storage for I2cEeprom<I2C, D> {
    type Error = EepromError<I2C::Error>;

    fn capacity(&self) -> u32 {
        self.capacity
    }

    fn read(&mut self, addr: u32, buf: &mut [u8]) -> Result<(), Self::Error> {
        span(addr, buf.len(), self.capacity).ok_or(EepromError::OutOfRange)?;
        // One-byte parts change device address every 256 bytes: split there
        // (two-byte parts read sequentially across the whole device).
        let block = match self.addressing {
            EepromAddressing::OneByte => 256,
            EepromAddressing::TwoBytes => self.capacity,
        };
        let mut at = addr;
        for chunk in chunks(buf.len(), addr, block) {
            let (device, header, len) = self.address(at);
            let head = header.get(..len).unwrap_or(&header);
            let Some(part) = buf.get_mut(chunk.clone()) else {
                return Err(EepromError::OutOfRange);
            };
            self.i2c
                .write_read(device, head, part)
                .map_err(EepromError::I2c)?;
            at += chunk.len() as u32;
        }
        Ok(())
    }

    fn write(&mut self, addr: u32, data: &[u8]) -> Result<(), Self::Error> {
        span(addr, data.len(), self.capacity).ok_or(EepromError::OutOfRange)?;
        let mut frame = [0u8; 2 + MAX_PAGE];
        let mut at = addr;
        for chunk in chunks(data.len(), addr, self.page) {
            let (device, header, len) = self.address(at);
            let Some(part) = data.get(chunk.clone()) else {
                return Err(EepromError::OutOfRange);
            };
            let n = len + part.len();
            let Some(out) = frame.get_mut(..n) else {
                return Err(EepromError::OutOfRange);
            };
            let Some((h, d)) = out.split_at_mut_checked(len) else {
                return Err(EepromError::OutOfRange);
            };
            h.copy_from_slice(header.get(..len).unwrap_or(&header));
            d.copy_from_slice(part);
            let out = &*out;
            self.i2c.write(device, out).map_err(EepromError::I2c)?;
            let head = header.get(..len).unwrap_or(&header);
            self.wait_write_cycle(device, head)?;
            at += part.len() as u32;
        }
        Ok(())
    }
}

/// Ranges of `0..len` that start at device address `addr` and do not
/// cross a multiple of `boundary` (a power of two, or the capacity).
fn chunks(len: usize, addr: u32, boundary: u32) -> impl Iterator<Item = core::ops::Range<usize>> {
    let mut start = 0usize;
    core::iter::from_fn(move || {
        if start >= len {
            return None;
        }
        let at = addr.wrapping_add(start as u32);
        let room = (boundary - at % boundary.max(1)) as usize;
        let end = len.min(start + room.max(1));
        let r = start..end;
        start = end;
        Some(r)
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use embedded_hal::i2c::NoAcknowledgeSource;
    use embedded_hal_mock::eh1::delay::NoopDelay;
    use embedded_hal_mock::eh1::i2c::{Mock, Transaction};

    const BUSY: I2cErrorKind = I2cErrorKind::NoAcknowledge(NoAcknowledgeSource::Address);

    #[test]
    fn chunks_split_at_boundaries() {
        let v: Vec<_> = chunks(10, 60, 32).collect();
        assert_eq!(v, [0..4, 4..10]);
        let v: Vec<_> = chunks(70, 0, 32).collect();
        assert_eq!(v, [0..32, 32..64, 64..70]);
        assert_eq!(chunks(0, 5, 32).count(), 0);
    }

    /// A 32 KiB part (two address bytes, 64-byte pages): a write across a
    /// page boundary is two page writes, each followed by acknowledge
    /// polling (busy twice, then ready); a read is one write-read.
    #[test]
    fn two_byte_part_splits_pages_and_polls_the_write_cycle() {
        let dev = 0x50;
        let expectations = [
            // 4 bytes at 0x013E: 2 in the page ending at 0x013F ...
            Transaction::write(dev, vec![0x01, 0x3E, 1, 2]),
            Transaction::write(dev, vec![0x01, 0x3E]).with_error(BUSY),
            Transaction::write(dev, vec![0x01, 0x3E]).with_error(BUSY),
            Transaction::write(dev, vec![0x01, 0x3E]),
            // ... and 2 in the next page.
            Transaction::write(dev, vec![0x01, 0x40, 3, 4]),
            Transaction::write(dev, vec![0x01, 0x40]),
            Transaction::write_read(dev, vec![0x01, 0x3E], vec![1, 2, 3, 4]),
        ];
        let i2c = Mock::new(&expectations);
        let mut e = I2cEeprom::new(
            i2c,
            NoopDelay,
            dev,
            32 * 1024,
            64,
            EepromAddressing::TwoBytes,
            5,
        )
        .unwrap();
        e.write(0x013E, &[1, 2, 3, 4]).unwrap();
        let mut buf = [0u8; 4];
        e.read(0x013E, &mut buf).unwrap();
        assert_eq!(buf, [1, 2, 3, 4]);
        // Out of range: refused before any bus traffic.
        assert_eq!(
            e.write(32 * 1024 - 1, &[1, 2]),
            Err(EepromError::OutOfRange)
        );
        e.release().0.done();
    }

    /// A 2 KiB part (one address byte, block bits in the device address,
    /// 16-byte pages): the device address follows the block.
    #[test]
    fn one_byte_part_puts_the_block_in_the_device_address() {
        let expectations = [
            Transaction::write(0x50 | 0x03, vec![0xFE, 9, 8]),
            Transaction::write(0x50 | 0x03, vec![0xFE]),
            Transaction::write(0x50 | 0x04, vec![0x00, 7]),
            Transaction::write(0x50 | 0x04, vec![0x00]),
            // A read across the 256-byte block is split too.
            Transaction::write_read(0x50 | 0x03, vec![0xFF], vec![8]),
            Transaction::write_read(0x50 | 0x04, vec![0x00], vec![7]),
        ];
        let i2c = Mock::new(&expectations);
        let mut e =
            I2cEeprom::new(i2c, NoopDelay, 0x50, 2048, 16, EepromAddressing::OneByte, 5).unwrap();
        e.write(0x03FE, &[9, 8, 7]).unwrap();
        let mut buf = [0u8; 2];
        e.read(0x03FF, &mut buf).unwrap();
        assert_eq!(buf, [8, 7]);
        e.release().0.done();
    }

    /// A device that never finishes its write cycle is reported after the
    /// configured time (1 ms: 11 polls 100 µs apart); a bus error during
    /// polling is reported as such.
    #[test]
    fn write_cycle_timeout_and_bus_errors() {
        let dev = 0x51;
        let mut expectations = vec![Transaction::write(dev, vec![0x00, 0x10, 5])];
        for _ in 0..11 {
            expectations.push(Transaction::write(dev, vec![0x00, 0x10]).with_error(BUSY));
        }
        expectations.push(Transaction::write(dev, vec![0x00, 0x20, 6]));
        expectations.push(Transaction::write(dev, vec![0x00, 0x20]).with_error(I2cErrorKind::Bus));
        let i2c = Mock::new(&expectations);
        let mut e =
            I2cEeprom::new(i2c, NoopDelay, dev, 4096, 32, EepromAddressing::TwoBytes, 1).unwrap();
        let err = e.write(0x0010, &[5]).unwrap_err();
        assert_eq!(err, EepromError::WriteTimeout);
        assert_eq!(err.kind(), ErrorKind::Bus);
        let err = e.write(0x0020, &[6]).unwrap_err();
        assert_eq!(err, EepromError::I2c(I2cErrorKind::Bus));
        assert_eq!(Error::from(err.kind()), Error::StorageIo);
        e.release().0.done();
    }

    /// A simulated 24-series part: two address bytes, a page counter that
    /// wraps within its page (as the real parts do, so an unsplit write
    /// would corrupt the page's start), and a write cycle during which the
    /// device does not acknowledge for `busy_polls` polls. The behaviour is
    /// that of the family's datasheets (page-write roll-over, acknowledge
    /// polling), written from memory.
    struct SimulatedPart {
        mem: Vec<u8>,
        page: usize,
        busy_polls: u32,
        busy: u32,
        page_writes: u32,
        pointer: usize,
    }

    impl embedded_hal::i2c::ErrorType for SimulatedPart {
        type Error = I2cErrorKind;
    }

    impl I2c for SimulatedPart {
        fn transaction(
            &mut self,
            _address: u8,
            operations: &mut [embedded_hal::i2c::Operation<'_>],
        ) -> Result<(), Self::Error> {
            use embedded_hal::i2c::Operation;
            if self.busy > 0 {
                self.busy -= 1;
                return Err(BUSY);
            }
            for op in operations.iter_mut() {
                match op {
                    Operation::Write(bytes) => {
                        let [hi, lo, data @ ..] = bytes else {
                            return Err(I2cErrorKind::Other);
                        };
                        self.pointer = usize::from(*hi) << 8 | usize::from(*lo);
                        if !data.is_empty() {
                            let base = self.pointer - self.pointer % self.page;
                            for (k, b) in data.iter().enumerate() {
                                let at = base + (self.pointer % self.page + k) % self.page;
                                self.mem[at] = *b;
                            }
                            self.page_writes += 1;
                            self.busy = self.busy_polls;
                        }
                    }
                    Operation::Read(buf) => {
                        for b in buf.iter_mut() {
                            *b = self.mem[self.pointer % self.mem.len()];
                            self.pointer += 1;
                        }
                    }
                }
            }
            Ok(())
        }
    }

    /// The driver on a simulated 4 KiB part with 32-byte pages, busy for
    /// `busy_polls` polls after each page write.
    fn simulated(busy_polls: u32) -> I2cEeprom<SimulatedPart, NoopDelay> {
        let part = SimulatedPart {
            mem: vec![0xFF; 4096],
            page: 32,
            busy_polls,
            busy: 0,
            page_writes: 0,
            pointer: 0,
        };
        I2cEeprom::new(
            part,
            NoopDelay,
            0x50,
            4096,
            32,
            EepromAddressing::TwoBytes,
            5,
        )
        .unwrap()
    }

    /// Writes of every length from 1 to 200 bytes at addresses around page
    /// boundaries read back exactly through the page-wrapping device, with
    /// one bus write per page touched.
    #[test]
    fn round_trips_through_a_page_wrapping_part() {
        let mut e = simulated(3);
        let mut shadow = vec![0xFFu8; 4096];
        let mut expected_pages = 0u32;
        let mut seed = 0x2545_f491u32;
        for len in 1..=200usize {
            let addr = (len * 97 + 29) % (4096 - len);
            let data: Vec<u8> = (0..len)
                .map(|_| {
                    seed ^= seed << 13;
                    seed ^= seed >> 17;
                    seed ^= seed << 5;
                    seed as u8
                })
                .collect();
            e.write(addr as u32, &data).unwrap();
            shadow[addr..addr + len].copy_from_slice(&data);
            expected_pages += ((addr + len - 1) / 32 - addr / 32 + 1) as u32;
            let mut back = vec![0u8; len];
            e.read(addr as u32, &mut back).unwrap();
            assert_eq!(back, data, "len {len} at {addr}");
        }
        let (part, _) = e.release();
        assert_eq!(part.mem, shadow);
        assert_eq!(part.page_writes, expected_pages);
    }

    /// Checkpoints saved through the driver restore bit for bit (the
    /// reference vessel after 100 ticks, two slots of 256 bytes).
    #[cfg(feature = "serde")]
    #[test]
    fn checkpoint_round_trip_through_the_driver() {
        use crate::checkpoint::Checkpoints;
        use crate::reference;
        let mut e = simulated(2);
        let mut v = reference::vessel::<f32>().unwrap();
        for _ in 0..100 {
            let u = reference::inputs_at::<f32>(v.time_ms());
            v.step(&u);
        }
        let slots = Checkpoints::new(1024, 256);
        let mut scratch = [0u8; 256];
        slots.save(&v, &mut e, &mut scratch).unwrap();
        let fresh = reference::vessel::<f32>().unwrap();
        let (state, _) = slots.restore(&fresh, &mut e, &mut scratch).unwrap();
        assert_eq!(state, v.state());
    }

    #[test]
    fn configuration_is_checked() {
        let bad = [
            (0x80, 4096, 32, EepromAddressing::TwoBytes, 5), // not 7-bit
            (0x51, 2048, 16, EepromAddressing::OneByte, 5),  // block bit set
            (0x50, 4096, 16, EepromAddressing::OneByte, 5),  // beyond 2 KiB
            (0x50, 1 << 17, 64, EepromAddressing::TwoBytes, 5), // beyond 64 KiB
            (0x50, 4096, 48, EepromAddressing::TwoBytes, 5), // page not 2^k
            (0x50, 4096, 512, EepromAddressing::TwoBytes, 5), // page > MAX_PAGE
            (0x50, 4096, 32, EepromAddressing::TwoBytes, 0), // no write cycle
            (0x50, 0, 32, EepromAddressing::TwoBytes, 5),    // empty
        ];
        let mock = Mock::new(&[]);
        for (device, capacity, page, addressing, t_wr) in bad {
            let r = I2cEeprom::new(
                mock.clone(),
                NoopDelay,
                device,
                capacity,
                page,
                addressing,
                t_wr,
            );
            assert_eq!(
                r.err(),
                Some(Error::StorageConfig),
                "{device:#x} {capacity} {page}"
            );
        }
        let ok = I2cEeprom::new(
            mock.clone(),
            NoopDelay,
            0x54,
            512,
            16,
            EepromAddressing::OneByte,
            5,
        )
        .unwrap();
        assert_eq!(ok.capacity(), 512);
        drop(ok);
        let mut mock = mock;
        mock.done();
    }
}
