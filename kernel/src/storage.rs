//! Non-volatile byte storage for checkpoints: a trait, an in-memory
//! implementation, a driver for a serial FRAM on an SPI bus, and one for a
//! serial EEPROM on an I²C bus ([`I2cEeprom`], in `storage/eeprom.rs`).
//!
//! The trait is byte-addressed and deliberately small: read and write a run
//! of bytes at an address. Errors are the implementation's own type, which
//! says what [`ErrorKind`] of failure it was (the embedded-hal style), so
//! the checkpoint layer can report [`Error::StorageIo`] or
//! [`Error::StorageOutOfRange`] without knowing the bus.
//!
//! [`SpiFram`] speaks the command set common to serial FRAM parts (and the
//! read/write subset of serial EEPROMs): `WREN` (`0x06`) in its own chip
//! select, then `WRITE` (`0x02`) or `READ` (`0x03`) followed by a 2- or
//! 3-byte big-endian address and the data. FRAM writes complete at bus
//! speed, have no page boundaries and need no busy polling, so a write is
//! one transaction however long. An SPI EEPROM, which needs page splitting
//! and write-cycle polling, is not supported by this driver; for EEPROMs
//! see [`I2cEeprom`].

use embedded_hal::spi::{Operation, SpiDevice};

use crate::Error;

mod eeprom;
pub use eeprom::{EepromAddressing, EepromError, I2cEeprom, MAX_PAGE, POLL_INTERVAL_US};

/// What kind of failure a storage error is.
#[non_exhaustive]
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum ErrorKind {
    /// The access reaches beyond the device's capacity (nothing was done).
    OutOfRange,
    /// The bus or the device failed during the transfer.
    Bus,
    /// Any other failure.
    Other,
}

/// A storage error: any type that can say its [`ErrorKind`].
pub trait StorageError: core::fmt::Debug {
    /// The kind of failure.
    fn kind(&self) -> ErrorKind;
}

impl StorageError for ErrorKind {
    fn kind(&self) -> ErrorKind {
        *self
    }
}

impl From<ErrorKind> for Error {
    fn from(kind: ErrorKind) -> Self {
        match kind {
            ErrorKind::OutOfRange => Error::StorageOutOfRange,
            ErrorKind::Bus | ErrorKind::Other => Error::StorageIo,
        }
    }
}

/// Byte-addressed non-volatile storage.
pub trait Storage {
    /// The implementation's error.
    type Error: StorageError;

    /// Size of the device in bytes.
    fn capacity(&self) -> u32;

    /// Fill `buf` with the bytes at `addr ..`.
    fn read(&mut self, addr: u32, buf: &mut [u8]) -> Result<(), Self::Error>;

    /// Write `data` at `addr ..`.
    fn write(&mut self, addr: u32, data: &[u8]) -> Result<(), Self::Error>;
}

impl<T: Storage + ?Sized> Storage for &mut T {
    type Error = T::Error;

    fn capacity(&self) -> u32 {
        (**self).capacity()
    }

    fn read(&mut self, addr: u32, buf: &mut [u8]) -> Result<(), Self::Error> {
        (**self).read(addr, buf)
    }

    fn write(&mut self, addr: u32, data: &[u8]) -> Result<(), Self::Error> {
        (**self).write(addr, data)
    }
}

/// The byte range `addr .. addr + len` within a device of `capacity`
/// bytes, or `None` if it does not fit (or overflows).
fn span(addr: u32, len: usize, capacity: u32) -> Option<(usize, usize)> {
    let len = u32::try_from(len).ok()?;
    let end = addr.checked_add(len)?;
    if end > capacity {
        return None;
    }
    Some((usize::try_from(addr).ok()?, usize::try_from(end).ok()?))
}

/// Storage in a caller-owned byte buffer (RAM; for tests, host tools, or a
/// battery-backed SRAM window).
#[derive(Debug)]
pub struct MemStorage<'a> {
    mem: &'a mut [u8],
}

impl<'a> MemStorage<'a> {
    /// Storage over `mem` (its length, up to 4 GiB, is the capacity).
    pub fn new(mem: &'a mut [u8]) -> Self {
        Self { mem }
    }

    /// The bytes.
    pub fn bytes(&self) -> &[u8] {
        self.mem
    }

    /// The bytes, for changing them directly (fault injection in tests).
    pub fn bytes_mut(&mut self) -> &mut [u8] {
        self.mem
    }
}

impl Storage for MemStorage<'_> {
    type Error = ErrorKind;

    fn capacity(&self) -> u32 {
        u32::try_from(self.mem.len()).unwrap_or(u32::MAX)
    }

    fn read(&mut self, addr: u32, buf: &mut [u8]) -> Result<(), ErrorKind> {
        let (a, b) = span(addr, buf.len(), self.capacity()).ok_or(ErrorKind::OutOfRange)?;
        let src = self.mem.get(a..b).ok_or(ErrorKind::OutOfRange)?;
        buf.copy_from_slice(src);
        Ok(())
    }

    fn write(&mut self, addr: u32, data: &[u8]) -> Result<(), ErrorKind> {
        let (a, b) = span(addr, data.len(), self.capacity()).ok_or(ErrorKind::OutOfRange)?;
        let dst = self.mem.get_mut(a..b).ok_or(ErrorKind::OutOfRange)?;
        dst.copy_from_slice(data);
        Ok(())
    }
}

/// Write-enable latch command.
pub const CMD_WREN: u8 = 0x06;
/// Write command.
pub const CMD_WRITE: u8 = 0x02;
/// Read command.
pub const CMD_READ: u8 = 0x03;

/// Address bytes after a read or write command.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum AddressWidth {
    /// 16-bit address: devices up to 64 KiB.
    Two,
    /// 24-bit address: devices up to 16 MiB.
    Three,
}

impl AddressWidth {
    /// Largest capacity the width can address, bytes.
    pub const fn max_capacity(self) -> u32 {
        match self {
            AddressWidth::Two => 1 << 16,
            AddressWidth::Three => 1 << 24,
        }
    }
}

/// Error of the [`SpiFram`] driver.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum FramError<E> {
    /// The SPI transfer failed.
    Spi(E),
    /// The access reaches beyond the device (nothing was sent).
    OutOfRange,
}

impl<E: core::fmt::Debug> StorageError for FramError<E> {
    fn kind(&self) -> ErrorKind {
        match self {
            FramError::Spi(_) => ErrorKind::Bus,
            FramError::OutOfRange => ErrorKind::OutOfRange,
        }
    }
}

/// A serial FRAM on an SPI bus (the device's chip select is managed by the
/// [`SpiDevice`]).
#[derive(Debug)]
pub struct SpiFram<SPI> {
    spi: SPI,
    capacity: u32,
    width: AddressWidth,
}

impl<SPI: SpiDevice> SpiFram<SPI> {
    /// A device of `capacity` bytes addressed with `width`.
    ///
    /// Errors: [`Error::StorageConfig`] if the capacity is zero or beyond
    /// what the width can address.
    pub fn new(spi: SPI, capacity: u32, width: AddressWidth) -> Result<Self, Error> {
        if capacity == 0 || capacity > width.max_capacity() {
            return Err(Error::StorageConfig);
        }
        Ok(Self {
            spi,
            capacity,
            width,
        })
    }

    /// Give the SPI device back.
    pub fn release(self) -> SPI {
        self.spi
    }

    /// Command byte and address, big-endian; the slice to send is
    /// `..len`.
    fn command(&self, cmd: u8, addr: u32) -> ([u8; 4], usize) {
        let [_, a2, a1, a0] = addr.to_be_bytes();
        match self.width {
            AddressWidth::Two => ([cmd, a1, a0, 0], 3),
            AddressWidth::Three => ([cmd, a2, a1, a0], 4),
        }
    }
}

impl<SPI: SpiDevice> Storage for SpiFram<SPI> {
    type Error = FramError<SPI::Error>;

    fn capacity(&self) -> u32 {
        self.capacity
    }

    fn read(&mut self, addr: u32, buf: &mut [u8]) -> Result<(), Self::Error> {
        span(addr, buf.len(), self.capacity).ok_or(FramError::OutOfRange)?;
        if buf.is_empty() {
            return Ok(());
        }
        let (cmd, len) = self.command(CMD_READ, addr);
        let header = cmd.get(..len).unwrap_or(&cmd);
        self.spi
            .transaction(&mut [Operation::Write(header), Operation::Read(buf)])
            .map_err(FramError::Spi)
    }

    fn write(&mut self, addr: u32, data: &[u8]) -> Result<(), Self::Error> {
        span(addr, data.len(), self.capacity).ok_or(FramError::OutOfRange)?;
        if data.is_empty() {
            return Ok(());
        }
        // The write-enable latch is set when chip select rises after WREN,
        // so it is its own transaction; the device clears it after the write.
        self.spi.write(&[CMD_WREN]).map_err(FramError::Spi)?;
        let (cmd, len) = self.command(CMD_WRITE, addr);
        let header = cmd.get(..len).unwrap_or(&cmd);
        self.spi
            .transaction(&mut [Operation::Write(header), Operation::Write(data)])
            .map_err(FramError::Spi)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use embedded_hal_mock::eh1::spi::{Mock, Transaction};

    #[test]
    fn mem_storage_bounds() {
        let mut mem = [0u8; 8];
        let mut s = MemStorage::new(&mut mem);
        assert_eq!(s.capacity(), 8);
        s.write(6, &[1, 2]).unwrap();
        assert_eq!(s.write(7, &[1, 2]), Err(ErrorKind::OutOfRange));
        assert_eq!(s.write(u32::MAX, &[1]), Err(ErrorKind::OutOfRange));
        let mut b = [0u8; 2];
        s.read(6, &mut b).unwrap();
        assert_eq!(b, [1, 2]);
        assert_eq!(s.read(7, &mut b), Err(ErrorKind::OutOfRange));
        assert_eq!(Error::from(ErrorKind::OutOfRange), Error::StorageOutOfRange);
    }

    #[test]
    fn fram_two_byte_address_transactions() {
        let expectations = [
            // read 3 bytes at 0x1234
            Transaction::transaction_start(),
            Transaction::write_vec(vec![CMD_READ, 0x12, 0x34]),
            Transaction::read_vec(vec![7, 8, 9]),
            Transaction::transaction_end(),
            // write 2 bytes at 0x00FF: WREN alone, then WRITE
            Transaction::transaction_start(),
            Transaction::write_vec(vec![CMD_WREN]),
            Transaction::transaction_end(),
            Transaction::transaction_start(),
            Transaction::write_vec(vec![CMD_WRITE, 0x00, 0xFF]),
            Transaction::write_vec(vec![0xAB, 0xCD]),
            Transaction::transaction_end(),
        ];
        let spi = Mock::new(&expectations);
        let mut fram = SpiFram::new(spi, 8192, AddressWidth::Two).unwrap();
        let mut buf = [0u8; 3];
        fram.read(0x1234, &mut buf).unwrap();
        assert_eq!(buf, [7, 8, 9]);
        fram.write(0x00FF, &[0xAB, 0xCD]).unwrap();
        // Out of range: refused before any bus traffic.
        assert_eq!(fram.write(8191, &[1, 2]), Err(FramError::OutOfRange));
        assert_eq!(
            fram.read(8192, &mut buf).map_err(|e| e.kind()),
            Err(ErrorKind::OutOfRange)
        );
        // Empty accesses send nothing.
        fram.read(0, &mut []).unwrap();
        fram.write(0, &[]).unwrap();
        fram.release().done();
    }

    #[test]
    fn fram_three_byte_address_transactions() {
        let expectations = [
            Transaction::transaction_start(),
            Transaction::write_vec(vec![CMD_WREN]),
            Transaction::transaction_end(),
            Transaction::transaction_start(),
            Transaction::write_vec(vec![CMD_WRITE, 0x01, 0x23, 0x45]),
            Transaction::write_vec(vec![1, 2, 3, 4]),
            Transaction::transaction_end(),
            Transaction::transaction_start(),
            Transaction::write_vec(vec![CMD_READ, 0x01, 0x23, 0x45]),
            Transaction::read_vec(vec![1, 2, 3, 4]),
            Transaction::transaction_end(),
        ];
        let spi = Mock::new(&expectations);
        let mut fram = SpiFram::new(spi, 1 << 18, AddressWidth::Three).unwrap();
        fram.write(0x01_2345, &[1, 2, 3, 4]).unwrap();
        let mut buf = [0u8; 4];
        fram.read(0x01_2345, &mut buf).unwrap();
        assert_eq!(buf, [1, 2, 3, 4]);
        fram.release().done();
    }

    #[test]
    fn fram_bus_error_is_reported() {
        use embedded_hal::spi::{ErrorKind as SpiErrorKind, ErrorType};
        /// An SPI device whose every transfer fails.
        struct Failing;
        impl ErrorType for Failing {
            type Error = SpiErrorKind;
        }
        impl SpiDevice for Failing {
            fn transaction(&mut self, _: &mut [Operation<'_, u8>]) -> Result<(), SpiErrorKind> {
                Err(SpiErrorKind::Other)
            }
        }
        let mut fram = SpiFram::new(Failing, 8192, AddressWidth::Two).unwrap();
        let err = fram.write(0, &[1]).unwrap_err();
        assert_eq!(err, FramError::Spi(SpiErrorKind::Other));
        assert_eq!(err.kind(), ErrorKind::Bus);
        assert_eq!(Error::from(err.kind()), Error::StorageIo);
        let mut buf = [0u8; 2];
        assert_eq!(
            fram.read(0, &mut buf).map_err(|e| e.kind()),
            Err(ErrorKind::Bus)
        );
    }

    #[test]
    fn fram_config_checked() {
        let spi = Mock::new(&[]);
        assert_eq!(
            SpiFram::new(spi.clone(), (1 << 16) + 1, AddressWidth::Two).err(),
            Some(Error::StorageConfig)
        );
        assert_eq!(
            SpiFram::new(spi.clone(), 0, AddressWidth::Three).err(),
            Some(Error::StorageConfig)
        );
        let mut spi = spi;
        spi.done();
    }
}
