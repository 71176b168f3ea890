//! One client connection: Modbus TCP frames cut from the byte stream by
//! their MBAP header, each answered through the link.
//!
//! A frame is the 6-byte MBAP header (transaction id, protocol id 0,
//! length of what follows) and `length` bytes (unit id, PDU). A header
//! whose protocol id is not 0 or whose length is outside 2–254 cannot be
//! resynchronised: the connection is closed. A request the link finds
//! malformed, or addressed to another unit, gets no answer (the client
//! times out); every other request gets an answer or an exception.

use std::io::{self, Read, Write};
use std::net::TcpStream;
use std::sync::atomic::Ordering;
use std::time::{Duration, Instant};

use holdup_kernel::modbus::{Clock, Framing, Response, Served, MAX_FRAME};

use super::access::is_write;
use super::{Shared, POLL};

/// The MBAP header's length.
pub const MBAP: usize = 6;

/// Largest value of the MBAP length field: unit id and a PDU of at most
/// 253 bytes.
pub const MAX_LENGTH: usize = 254;

/// Exception 01, illegal function: how a refused write is answered.
const ILLEGAL_FUNCTION: u8 = 0x01;

/// Where the bytes read so far stand.
#[derive(Debug, PartialEq, Eq)]
pub enum Cut {
    /// More bytes are needed: at least this many in all.
    Need(usize),
    /// A whole frame of this many bytes is at the start.
    Frame(usize),
    /// The header cannot be a Modbus TCP header.
    Broken,
}

/// Cut a frame from the start of `buf`.
pub fn cut(buf: &[u8]) -> Cut {
    if buf.len() < MBAP {
        return Cut::Need(MBAP);
    }
    let length = usize::from(u16::from_be_bytes([buf[4], buf[5]]));
    if buf[2..4] != [0, 0] || !(2..=MAX_LENGTH).contains(&length) {
        return Cut::Broken;
    }
    let total = MBAP + length;
    if buf.len() < total {
        Cut::Need(total)
    } else {
        Cut::Frame(total)
    }
}

/// The exception response to `request` with `code`.
pub fn exception(request: &[u8], code: u8) -> [u8; 9] {
    [
        request[0],
        request[1],
        0,
        0,
        0,
        3,
        request[6],
        request[7] | 0x80,
        code,
    ]
}

/// Serve one connection until the client closes it, it idles past the
/// timeout, it sends a header that cannot be resynchronised, or the
/// server stops.
pub fn serve(mut stream: TcpStream, shared: &Shared, may_write: bool) {
    if stream.set_read_timeout(Some(POLL)).is_err() || stream.set_nodelay(true).is_err() {
        return;
    }
    // Writes to a client that does not read must not block forever.
    let _ = stream.set_write_timeout(Some(shared.idle_timeout.max(Duration::from_secs(1))));
    let mut buf = [0u8; MAX_FRAME];
    let mut have = 0usize;
    let mut last = Instant::now();
    let mut response = Response::new();
    while !shared.stopping() {
        let need = match cut(&buf[..have]) {
            Cut::Broken => break,
            Cut::Frame(n) => {
                shared.stats.requests.fetch_add(1, Ordering::Relaxed);
                let reply = answer(&buf[..n], shared, may_write, &mut response);
                if let Some(r) = reply {
                    if stream.write_all(r).is_err() {
                        return;
                    }
                }
                buf.copy_within(n..have, 0);
                have -= n;
                last = Instant::now();
                continue;
            }
            Cut::Need(n) => n,
        };
        match stream.read(&mut buf[have..need]) {
            Ok(0) => return,
            Ok(k) => have += k,
            Err(e)
                if matches!(
                    e.kind(),
                    io::ErrorKind::WouldBlock | io::ErrorKind::TimedOut
                ) =>
            {
                if last.elapsed() >= shared.idle_timeout {
                    break;
                }
            }
            Err(e) if e.kind() == io::ErrorKind::Interrupted => {}
            Err(_) => return,
        }
    }
    shared.stats.clients_dropped.fetch_add(1, Ordering::Relaxed);
}

/// The answer to one frame, if any.
fn answer<'a>(
    frame: &[u8],
    shared: &Shared,
    may_write: bool,
    response: &'a mut Response,
) -> Option<&'a [u8]> {
    let (unit, function) = (frame[6], frame[7]);
    let write = is_write(function);
    if write && !may_write {
        shared.stats.writes_refused.fetch_add(1, Ordering::Relaxed);
        if unit != shared.unit_id {
            // Not ours (or a broadcast): nothing to answer, nothing applied.
            return None;
        }
        response.clear();
        let _ = response.extend_from_slice(&exception(frame, ILLEGAL_FUNCTION));
        return Some(response);
    }
    let served = shared.lock().link.handle(frame, Framing::Tcp, response);
    if write && shared.clock == Clock::Sequence {
        let mut d = shared.lock();
        if d.link.sequence_pending() {
            d.tick();
        }
    }
    match served {
        Served::Reply | Served::Exception(_) => Some(response),
        Served::Silent(_) => None,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn frames_are_cut_by_their_mbap_length() {
        // Modbus Messaging on TCP/IP v1.0b, 3.1.3: read input registers
        // 0..2 of unit 1, transaction 7: length 6 counts unit and PDU.
        let req = [0, 7, 0, 0, 0, 6, 1, 4, 0, 0, 0, 2];
        assert_eq!(cut(&req[..3]), Cut::Need(6));
        assert_eq!(cut(&req[..6]), Cut::Need(12));
        assert_eq!(cut(&req[..11]), Cut::Need(12));
        assert_eq!(cut(&req), Cut::Frame(12));
        let mut two = req.to_vec();
        two.extend_from_slice(&req);
        assert_eq!(
            cut(&two),
            Cut::Frame(12),
            "pipelined requests one at a time"
        );
    }

    #[test]
    fn headers_that_cannot_be_modbus_are_broken() {
        assert_eq!(cut(&[0, 1, 0, 1, 0, 6, 1, 4]), Cut::Broken, "protocol id 1");
        assert_eq!(cut(&[0, 1, 0, 0, 0, 1, 1]), Cut::Broken, "length 1");
        assert_eq!(cut(&[0, 1, 0, 0, 0, 255]), Cut::Broken, "length 255");
        assert_eq!(
            cut(&[0, 1, 0, 0, 0, 254]),
            Cut::Need(260),
            "254 is the longest"
        );
    }

    #[test]
    fn an_exception_echoes_the_transaction_and_unit() {
        let req = [0x12, 0x34, 0, 0, 0, 6, 9, 6, 0, 1, 0, 3];
        assert_eq!(
            exception(&req, 1),
            [0x12, 0x34, 0, 0, 0, 3, 9, 0x86, 1],
            "Modbus Application Protocol v1.1b3, 7: function | 0x80, code"
        );
    }
}
