//! The load mode's PLC: requests arriving every 10 ms at 115,200 baud byte
//! timing, pushed into the same receive path as the UART's bytes
//! ([`Receiver::push`]) with their nominal arrival times.
//!
//! Slot `j` (every [`REQUEST_COUNTS`], from [`FIRST_REQUEST`]) carries, by
//! `j mod 4`: a read of the whole input block (function 04), the tail write
//! of the coming tick's inputs, the read again, the head write (function
//! 16; see `plc`). Byte `k` of a frame is complete at the slot's start plus
//! `(k + 1)` character times of 11 bits (start, 8 data, parity, stop: the
//! RTU character of the Modbus serial-line specification, common practice).
//!
//! The injector is a receive FIFO with time stamps: bytes are delivered in
//! order when the main loop polls, each with the time it arrived on the
//! line, and a new frame waits until the receiver's previous one has been
//! taken (a byte is never lost while the main loop runs a tick).

use super::plc::{TickWrite, HEAD_LEN, UNIT_ID};
use super::rx::{Receiver, COUNTS_PER_MS};

/// One character on the line at 115,200 baud (11 bits), timer counts
/// (25 MHz): 95.49 µs.
pub const CHAR_COUNTS: u64 = 11 * 25_000_000 / 115_200;
/// Time between requests: 10 ms by the PLC's clock, which runs 372 ppm
/// slow against the gateway's (10.0037 ms): the requests then meet the
/// gateway's 1 s tick at every phase of their 10 ms cycle (0.37 ms later
/// each tick), so the worst lateness is found rather than a lucky phase.
pub const REQUEST_COUNTS: u64 = 10 * COUNTS_PER_MS + 93;
/// The first request starts here, timer counts.
pub const FIRST_REQUEST: u64 = COUNTS_PER_MS;
/// Input registers read by each read request (the whole block).
pub const READ_COUNT: u16 = 38;
/// Longest frame the injector sends (the head write).
const MAX_REQUEST: usize = 9 + 2 * HEAD_LEN + 2;

/// The kinds of request, in slot order.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Kind {
    /// Function 04 of the whole input block.
    Read = 0,
    /// Function 16 of outlet flow, temperature and level.
    Tail = 1,
    /// Function 16 of the sequence, lab registers and inlet flows.
    Head = 2,
}

impl Kind {
    fn of_slot(j: u64) -> Self {
        match j % 4 {
            1 => Kind::Tail,
            3 => Kind::Head,
            _ => Kind::Read,
        }
    }
}

/// CRC-16/MODBUS (reflected polynomial 0xA001, initial value 0xFFFF), bit
/// by bit: the request's check, sent low byte first.
pub fn crc16(bytes: &[u8]) -> u16 {
    let mut crc = 0xFFFFu16;
    for &b in bytes {
        crc ^= u16::from(b);
        for _ in 0..8 {
            crc = if crc & 1 != 0 {
                (crc >> 1) ^ 0xA001
            } else {
                crc >> 1
            };
        }
    }
    crc
}

/// The request frames of the coming tick and the slot being sent.
pub struct Injector {
    /// The writes the next requests carry (replaced after every tick).
    pub writes: TickWrite,
    slot: u64,
    byte: usize,
    frame: [u8; MAX_REQUEST],
    len: usize,
    /// Requests sent, by kind.
    pub sent: [u32; 3],
}

impl Injector {
    /// The injector carrying `writes` until they are replaced.
    pub fn new(writes: TickWrite) -> Self {
        Self {
            writes,
            slot: 0,
            byte: 0,
            frame: [0; MAX_REQUEST],
            len: 0,
            sent: [0; 3],
        }
    }

    fn build(&mut self, kind: Kind) {
        let mut f = [0u8; MAX_REQUEST];
        let (at, regs): (u16, &[u16]) = match kind {
            Kind::Read => (0, &[]),
            Kind::Tail => (self.writes.tail_at, &self.writes.tail),
            Kind::Head => (self.writes.head_at, &self.writes.head),
        };
        let [a0, a1] = at.to_be_bytes();
        let mut n = match kind {
            Kind::Read => {
                let [c0, c1] = READ_COUNT.to_be_bytes();
                f[..6].copy_from_slice(&[UNIT_ID, 0x04, a0, a1, c0, c1]);
                6
            }
            Kind::Tail | Kind::Head => {
                let [c0, c1] = (regs.len() as u16).to_be_bytes();
                f[..7].copy_from_slice(&[UNIT_ID, 0x10, a0, a1, c0, c1, 2 * regs.len() as u8]);
                let mut n = 7;
                for (dst, r) in f[7..].chunks_exact_mut(2).zip(regs.iter()) {
                    dst.copy_from_slice(&r.to_be_bytes());
                    n += 2;
                }
                n
            }
        };
        let crc = crc16(&f[..n]).to_le_bytes();
        f[n..n + 2].copy_from_slice(&crc);
        n += 2;
        self.frame = f;
        self.len = n;
        self.sent[kind as usize] += 1;
    }

    /// Push every byte that has arrived by `now` into `rx`, stopping before
    /// a new frame while `rx` holds a complete one.
    pub fn receive(&mut self, now: u64, rx: &mut Receiver) {
        loop {
            let start = FIRST_REQUEST + self.slot * REQUEST_COUNTS;
            let at = start + (self.byte as u64 + 1) * CHAR_COUNTS;
            if at > now || (self.byte == 0 && rx.complete_at(at)) {
                return;
            }
            if self.byte == 0 {
                self.build(Kind::of_slot(self.slot));
            }
            rx.push(self.frame[self.byte], at);
            self.byte += 1;
            if self.byte >= self.len {
                self.byte = 0;
                self.slot += 1;
            }
        }
    }

    /// The kind of a request frame (by function and address).
    pub fn kind_of(frame: &[u8]) -> Kind {
        match (frame.get(1), frame.get(2..4)) {
            (Some(0x10), Some([0, 0])) => Kind::Head,
            (Some(0x10), _) => Kind::Tail,
            _ => Kind::Read,
        }
    }
}
