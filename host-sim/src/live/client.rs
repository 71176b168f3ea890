//! A Modbus TCP client over a `std::net::TcpStream`, with the `rmodbus`
//! crate's client codec (the same codec the kernel's link serves with):
//! every request bounded by the configured timeout, the connection dropped
//! on a timeout or a broken frame, and reconnection with exponential
//! backoff. It never blocks longer than one timeout per call.

use std::fmt;
use std::io::{Read, Write};
use std::net::{TcpStream, ToSocketAddrs};
use std::time::{Duration, Instant};

use rmodbus::client::ModbusRequest;
use rmodbus::ModbusProto;

use crate::plant::{PlcSettings, PlcTable};

/// Longest Modbus TCP frame.
const MAX_FRAME: usize = 260;
/// Most registers one write request carries (the protocol's limit).
pub const MAX_WRITE: usize = 123;

type Frame = heapless::Vec<u8, MAX_FRAME>;

/// Why a request got no value.
#[derive(Clone, Debug, PartialEq, Eq)]
pub enum Failure {
    /// Not connected (waiting to reconnect).
    Offline,
    /// No (complete) response within the timeout.
    Timeout,
    /// An exception response with this code.
    Exception(u8),
    /// The connection failed, or the response was not a valid answer.
    Link(String),
}

impl fmt::Display for Failure {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Failure::Offline => write!(f, "PLC not connected"),
            Failure::Timeout => write!(f, "no response within the timeout"),
            Failure::Exception(c) => write!(f, "exception response, code {c:02}"),
            Failure::Link(m) => write!(f, "{m}"),
        }
    }
}

/// Connection events since start.
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq)]
pub struct ClientCounters {
    /// Connections made, the first included.
    pub connects: u64,
    /// Connections made after a lost one.
    pub reconnects: u64,
    /// Connections lost (timeout, broken frame, closed by the PLC).
    pub lost: u64,
    /// Connection attempts that failed.
    pub failed_attempts: u64,
    /// Requests that timed out.
    pub timeouts: u64,
    /// Exception responses.
    pub exceptions: u64,
}

/// What changed in the connection during a call, for the operator.
#[derive(Clone, Debug, PartialEq, Eq)]
pub enum Event {
    /// Connected (`true`: after a lost connection).
    Connected(bool),
    /// The connection was lost, with why; the next attempt waits this long.
    Lost(String, Duration),
}

/// The client.
pub struct Client {
    address: String,
    timeout: Duration,
    backoff_start: Duration,
    backoff_max: Duration,
    backoff: Duration,
    next_attempt: Instant,
    stream: Option<TcpStream>,
    tr_id: u16,
    was_connected: bool,
    /// Connection events.
    pub counters: ClientCounters,
    /// Events not yet shown.
    pub events: Vec<Event>,
}

impl Client {
    /// A client of the PLC in `settings`, not yet connected.
    pub fn new(settings: &PlcSettings) -> Self {
        let ms = Duration::from_millis;
        Self {
            address: settings.address.clone(),
            timeout: ms(settings.timeout_ms),
            backoff_start: ms(settings.reconnect_ms),
            backoff_max: ms(settings.reconnect_max_ms),
            backoff: ms(settings.reconnect_ms),
            next_attempt: Instant::now(),
            stream: None,
            tr_id: 0,
            was_connected: false,
            counters: ClientCounters::default(),
            events: Vec::new(),
        }
    }

    /// Whether a connection is open.
    pub fn connected(&self) -> bool {
        self.stream.is_some()
    }

    /// Connect if not connected and the backoff allows; whether connected.
    pub fn ensure_connected(&mut self) -> bool {
        if self.stream.is_some() {
            return true;
        }
        let now = Instant::now();
        if now < self.next_attempt {
            return false;
        }
        match self.connect() {
            Ok(s) => {
                self.stream = Some(s);
                self.counters.connects += 1;
                if self.was_connected {
                    self.counters.reconnects += 1;
                }
                self.events.push(Event::Connected(self.was_connected));
                self.was_connected = true;
                self.backoff = self.backoff_start;
                true
            }
            Err(_) => {
                self.counters.failed_attempts += 1;
                self.schedule_retry(now);
                false
            }
        }
    }

    fn connect(&self) -> std::io::Result<TcpStream> {
        let mut last = std::io::Error::other(format!("{}: no address", self.address));
        for a in self.address.to_socket_addrs()? {
            match TcpStream::connect_timeout(&a, self.timeout) {
                Ok(s) => {
                    s.set_nodelay(true)?;
                    return Ok(s);
                }
                Err(e) => last = e,
            }
        }
        Err(last)
    }

    fn schedule_retry(&mut self, now: Instant) {
        self.next_attempt = now + self.backoff;
        self.backoff = (self.backoff * 2).min(self.backoff_max);
    }

    /// Drop the connection after a failure; the next attempt waits the
    /// backoff's first step.
    fn drop_connection(&mut self, why: &Failure) {
        if self.stream.take().is_some() {
            self.counters.lost += 1;
            self.backoff = self.backoff_start;
            self.schedule_retry(Instant::now());
            let wait = self.next_attempt.saturating_duration_since(Instant::now());
            self.events.push(Event::Lost(why.to_string(), wait));
        }
    }

    /// Read `count` registers of `table` from `start` at `unit_id`.
    pub fn read(
        &mut self,
        unit_id: u8,
        table: PlcTable,
        start: u16,
        count: u16,
    ) -> Result<Vec<u16>, Failure> {
        let mut req = self.request(unit_id);
        let mut frame = Frame::new();
        let made = match table {
            PlcTable::Holding => req.generate_get_holdings(start, count, &mut frame),
            PlcTable::Input => req.generate_get_inputs(start, count, &mut frame),
        };
        made.map_err(|e| Failure::Link(format!("cannot encode the request: {e:?}")))?;
        let response = self.exchange(&frame)?;
        let mut out: heapless::Vec<u16, 128> = heapless::Vec::new();
        match req.parse_u16(&response, &mut out) {
            Ok(()) if out.len() == usize::from(count) => Ok(out.to_vec()),
            Ok(()) => self.broken(format!(
                "the response holds {} registers, {count} asked for",
                out.len()
            )),
            Err(e) => self.broken(format!("the response is not valid: {e:?}")),
        }
    }

    /// Write `values` to holding registers from `start` at `unit_id`, in
    /// requests of at most [`MAX_WRITE`] registers.
    pub fn write(&mut self, unit_id: u8, start: u16, values: &[u16]) -> Result<(), Failure> {
        for (k, chunk) in values.chunks(MAX_WRITE).enumerate() {
            let at = usize::from(start) + k * MAX_WRITE;
            let at = u16::try_from(at)
                .map_err(|_| Failure::Link(format!("register {at} is past 65535")))?;
            let mut req = self.request(unit_id);
            let mut frame = Frame::new();
            req.generate_set_holdings_bulk(at, chunk, &mut frame)
                .map_err(|e| Failure::Link(format!("cannot encode the request: {e:?}")))?;
            let response = self.exchange(&frame)?;
            if let Err(e) = req.parse_ok(&response) {
                return self.broken(format!("the response is not valid: {e:?}"));
            }
        }
        Ok(())
    }

    fn request(&mut self, unit_id: u8) -> ModbusRequest {
        self.tr_id = self.tr_id.wrapping_add(1);
        let mut r = ModbusRequest::new(unit_id, ModbusProto::TcpUdp);
        r.tr_id = self.tr_id;
        r
    }

    fn broken<T>(&mut self, message: String) -> Result<T, Failure> {
        let f = Failure::Link(message);
        self.drop_connection(&f);
        Err(f)
    }

    /// Send a request frame and read its response within the timeout. An
    /// exception response is returned as [`Failure::Exception`] (the
    /// connection stays); a timeout or a broken connection drops it.
    fn exchange(&mut self, request: &[u8]) -> Result<Vec<u8>, Failure> {
        if !self.ensure_connected() {
            return Err(Failure::Offline);
        }
        let deadline = Instant::now() + self.timeout;
        let result = match self.stream.as_mut() {
            Some(s) => send_and_receive(s, request, deadline),
            None => Err(Failure::Offline),
        };
        match result {
            Ok(r) if r.get(0..2) != request.get(0..2) => {
                self.broken("the response answers another transaction".to_string())
            }
            Ok(r) => match (r.get(7), r.get(8)) {
                (Some(f), Some(code)) if f & 0x80 != 0 => {
                    self.counters.exceptions += 1;
                    Err(Failure::Exception(*code))
                }
                _ => Ok(r),
            },
            Err(f) => {
                if f == Failure::Timeout {
                    self.counters.timeouts += 1;
                }
                self.drop_connection(&f);
                Err(f)
            }
        }
    }
}

/// Write `request`, then read one MBAP-framed response by `deadline`.
fn send_and_receive(
    s: &mut TcpStream,
    request: &[u8],
    deadline: Instant,
) -> Result<Vec<u8>, Failure> {
    let io = |e: std::io::Error| match e.kind() {
        std::io::ErrorKind::WouldBlock | std::io::ErrorKind::TimedOut => Failure::Timeout,
        _ => Failure::Link(format!("connection failed: {e}")),
    };
    let left = |d: Instant| {
        let l = d.saturating_duration_since(Instant::now());
        if l.is_zero() {
            Err(Failure::Timeout)
        } else {
            Ok(l)
        }
    };
    s.set_write_timeout(Some(left(deadline)?)).map_err(io)?;
    s.write_all(request).map_err(io)?;
    let mut buf = vec![0u8; 6];
    read_exact_by(s, &mut buf, deadline, &left, &io)?;
    let len = usize::from(u16::from_be_bytes([buf[4], buf[5]]));
    if !(2..=MAX_FRAME - 6).contains(&len) {
        return Err(Failure::Link(format!(
            "the response's length field ({len}) is not valid"
        )));
    }
    buf.resize(6 + len, 0);
    read_exact_by(s, &mut buf[6..], deadline, &left, &io)?;
    Ok(buf)
}

fn read_exact_by(
    s: &mut TcpStream,
    mut buf: &mut [u8],
    deadline: Instant,
    left: &dyn Fn(Instant) -> Result<Duration, Failure>,
    io: &dyn Fn(std::io::Error) -> Failure,
) -> Result<(), Failure> {
    while !buf.is_empty() {
        s.set_read_timeout(Some(left(deadline)?)).map_err(io)?;
        match s.read(buf) {
            Ok(0) => return Err(Failure::Link("the PLC closed the connection".into())),
            Ok(n) => buf = &mut buf[n..],
            Err(e) if e.kind() == std::io::ErrorKind::Interrupted => {}
            Err(e) => return Err(io(e)),
        }
    }
    Ok(())
}
