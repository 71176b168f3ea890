//! The receive path of Modbus RTU: bytes with the time they arrived, cut
//! into frames by the 3.5-character silence.
//!
//! The Modbus serial-line specification (Modbus over Serial Line V1.02,
//! §2.5.1.1; common practice) ends an RTU frame after a silence of 3.5
//! character times, and above 19,200 baud fixes it at 1.75 ms. Every byte
//! source pushes here: the UART (stamped when the byte is read) and the
//! load mode's injector (stamped with its nominal arrival time).

/// Timer counts (25 MHz) in one millisecond.
pub const COUNTS_PER_MS: u64 = 25_000;
/// The frame-end silence above 19,200 baud: 1.75 ms.
pub const SILENCE_COUNTS: u64 = 1_750 * COUNTS_PER_MS / 1_000;
/// Longest RTU frame, bytes.
pub const MAX_RTU: usize = 256;

/// The frame being received.
pub struct Receiver {
    buf: [u8; MAX_RTU],
    len: usize,
    /// Arrival of the last byte, timer counts.
    last: u64,
    /// The frame grew past 256 bytes: dropped at its end.
    overflow: bool,
    /// Frames dropped for their length.
    pub overflows: u32,
}

impl Receiver {
    /// An empty receiver.
    pub const fn new() -> Self {
        Self {
            buf: [0; MAX_RTU],
            len: 0,
            last: 0,
            overflow: false,
            overflows: 0,
        }
    }

    /// Byte `b`, arrived at `at` (timer counts). A byte after a silence
    /// that nobody collected still closes the frame before it: it is
    /// dropped (the server was too busy to answer it in time).
    pub fn push(&mut self, b: u8, at: u64) {
        if self.complete_at(at) {
            self.len = 0;
            self.overflow = false;
        }
        self.last = at;
        match self.buf.get_mut(self.len) {
            Some(slot) => {
                *slot = b;
                self.len += 1;
            }
            None => self.overflow = true,
        }
    }

    /// When the frame being received will be complete if no byte follows.
    #[cfg_attr(feature = "gateway-load", allow(dead_code))]
    pub fn deadline(&self) -> Option<u64> {
        (self.len > 0).then_some(self.last + SILENCE_COUNTS)
    }

    /// Whether a frame is complete at `t` (not yet taken).
    pub fn complete_at(&self, t: u64) -> bool {
        self.len > 0 && t.saturating_sub(self.last) >= SILENCE_COUNTS
    }

    /// The frame received, once the line has been silent for 1.75 ms at
    /// `now`; the receiver is then empty again.
    pub fn take(&mut self, now: u64) -> Option<&[u8]> {
        if self.len == 0 || now.saturating_sub(self.last) < SILENCE_COUNTS {
            return None;
        }
        let len = core::mem::take(&mut self.len);
        if core::mem::take(&mut self.overflow) {
            self.overflows = self.overflows.wrapping_add(1);
            return None;
        }
        self.buf.get(..len)
    }
}
