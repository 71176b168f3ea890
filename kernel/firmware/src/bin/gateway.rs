//! The gateway: the observed scenario's soft sensor served as a Modbus RTU
//! server on UART 0 of `mps2-an386` (115,200 baud).
//!
//! The sensor (`observed::sensor`, `Sensor<f32, 3, 2, 1, 2, 5, 2>`) sits in
//! the kernel's `Link` (the register map; frame codec, CRC-16/MODBUS and
//! exceptions by `rmodbus`). At start the gateway writes the recipe's
//! constant feeds into the holding registers; the PLC writes the rest (see
//! `gateway::plc`). One main loop, which sleeps in `WFI` when idle:
//! * bytes go from the UART's receive interrupt (or, in the load mode, the
//!   injector) into the receiver with their arrival time on timer 0; a
//!   frame ends after 1.75 ms of silence; the main loop hands it to
//!   `Link::handle` and writes the answer back out;
//! * `Clock::Sequence` (the default): one tick each time the PLC raises the
//!   input sequence, at `now = ticks · 1 s`; `Clock::Free` (features
//!   `gateway-free-clock`, `gateway-load`): one tick every 1 s of timer 0,
//!   checked between frames, so a tick waits at most for one request.
//!
//! The load mode (`gateway-load`) runs 600 ticks (10 min) under injected
//! traffic, prints its table through semihosting and exits non-zero if a
//! gate fails.

#![no_std]
#![no_main]

#[allow(dead_code)]
#[path = "../observed.rs"]
mod observed;

#[path = "../gateway/mod.rs"]
mod gateway;

#[cfg(feature = "gateway-load")]
#[allow(dead_code)]
#[path = "../meter.rs"]
mod meter;
#[cfg(feature = "gateway-load")]
#[allow(dead_code)]
#[path = "../report.rs"]
mod report;

/// Values computed on the host by `build.rs`.
#[allow(dead_code)]
mod expected {
    use super::observed::*;
    include!(concat!(env!("OUT_DIR"), "/gateway.rs"));
}

use cortex_m_rt::entry;
use holdup_kernel::diagnostics::ChiSquareBounds;
use holdup_kernel::modbus::{Clock, Framing, Link, Response};
use holdup_kernel::Error;

use gateway::hw;
use gateway::plc;
use gateway::rx::{Receiver, COUNTS_PER_MS};
use observed::{Instruments, RefSensor};

/// What starts a tick: the PLC's input sequence, or the gateway's timer.
const CLOCK: Clock = if cfg!(any(
    feature = "gateway-free-clock",
    feature = "gateway-load"
)) {
    Clock::Free
} else {
    Clock::Sequence
};
/// The tick, ms.
const TICK_MS: u64 = holdup_kernel::reference::TICK_MS as u64;
/// The tick in timer counts.
const TICK_COUNTS: u64 = TICK_MS * COUNTS_PER_MS;
/// In `Clock::Free`, the first tick is due here (timer counts): after the
/// first write of the PLC in the load mode.
const FIRST_TICK: u64 = 50 * COUNTS_PER_MS;

type GatewayLink = Link<f32, 3, 2, 1, 2, 5, 2>;

/// The sensor behind its register map, the feeds written.
fn link() -> Result<GatewayLink, Error> {
    let bounds = ChiSquareBounds::from_quantiles(
        observed::NIS_PROBABILITY,
        expected::NIS_Z,
        expected::NIS_LOWER,
        expected::NIS_UPPER,
    )?;
    let sensor: RefSensor<f32> = observed::sensor(bounds)?;
    let mut link = Link::new(sensor, plc::link_spec(CLOCK))?;
    let map = *link.map();
    // The writes of `plc` assume the observed scenario's map.
    if map.inlet_flow_address(0) != 10
        || map.outlet_flow_address(0) != 26
        || map.input_len() != 38
        || map.holding_len() != 32
    {
        return Err(Error::LinkMapTooLarge);
    }
    let mut inst = Instruments::new(&expected::PLANT_LEVEL, &expected::LAB_VALUES);
    let (at, feeds) = plc::constants(&map, &inst.readings(0));
    link.write_holding(at, &feeds)?;
    Ok(link)
}

/// The server's state between frames and ticks.
struct Server {
    link: GatewayLink,
    response: Response,
    ticks: u32,
    next_due: u64,
}

impl Server {
    fn new(link: GatewayLink) -> Self {
        Self {
            link,
            response: Response::new(),
            ticks: 0,
            next_due: FIRST_TICK,
        }
    }

    /// The tick that is due at `now`, if any: its `now` for the sensor (ms)
    /// and, in `Clock::Free`, the timer count it was due at.
    fn due(&self, now: u64) -> Option<(u64, u64)> {
        let ms = u64::from(self.ticks) * TICK_MS;
        match CLOCK {
            Clock::Sequence => self.link.sequence_pending().then_some((ms, now)),
            Clock::Free => (now >= self.next_due).then_some((ms, self.next_due)),
        }
    }

    fn tick(&mut self, ms: u64) {
        let _ = self.link.tick(ms);
        self.ticks = self.ticks.wrapping_add(1);
        self.next_due += TICK_COUNTS;
    }
}

#[cfg(not(feature = "gateway-load"))]
mod serve {
    //! The server's receive path: the UART's receive interrupt stamps each
    //! byte with timer 0 and pushes it into the receiver; the main loop
    //! takes whole frames.

    use core::cell::RefCell;
    use cortex_m::interrupt::{self, Mutex};

    use crate::gateway::hw;
    use crate::gateway::rx::{Receiver, MAX_RTU};

    /// What the interrupt handler and the main loop share.
    pub struct Line {
        pub clock: hw::Clock,
        pub uart: hw::Uart,
        pub rx: Receiver,
        /// Bytes received so far (wrapping): the main loop sleeps only if
        /// none came since it last looked.
        pub bytes: u32,
    }

    pub static LINE: Mutex<RefCell<Option<Line>>> = Mutex::new(RefCell::new(None));

    /// A frame taken out of the receiver.
    pub struct Frame {
        pub buf: [u8; MAX_RTU],
        pub len: usize,
    }

    /// The state of the line at one look: the time, a whole frame if one
    /// is complete, when the frame being received ends if nothing follows,
    /// and the byte count.
    pub fn look(frame: &mut Frame) -> Option<(u64, bool, Option<u64>, u32)> {
        interrupt::free(|cs| {
            let mut line = LINE.borrow(cs).try_borrow_mut().ok()?;
            let line = line.as_mut()?;
            let now = line.clock.now();
            let mut got = false;
            if let Some(f) = line.rx.take(now) {
                if let Some(dst) = frame.buf.get_mut(..f.len()) {
                    dst.copy_from_slice(f);
                    frame.len = f.len();
                    got = true;
                }
            }
            Some((now, got, line.rx.deadline(), line.bytes))
        })
    }

    /// The receive interrupt: every byte waiting, stamped.
    pub fn on_receive() {
        interrupt::free(|cs| {
            let Ok(mut line) = LINE.borrow(cs).try_borrow_mut() else {
                return;
            };
            if let Some(line) = line.as_mut() {
                hw::uart_rx_acknowledge();
                while let Some(b) = line.uart.read() {
                    let now = line.clock.now();
                    line.rx.push(b, now);
                    line.bytes = line.bytes.wrapping_add(1);
                }
            }
        });
    }

    /// Send a response (the UART's transmit side is the main loop's).
    pub fn send(bytes: &[u8]) {
        let mut tx = hw::Uart;
        tx.write(bytes);
    }

    /// Sleep until a byte arrives or `deadline` (timer counts) passes,
    /// unless a byte came since the look that counted `seen`.
    pub fn sleep(seen: u32, deadline: Option<u64>) {
        interrupt::disable();
        let idle = interrupt::free(|cs| {
            let Ok(mut line) = LINE.borrow(cs).try_borrow_mut() else {
                return false;
            };
            let Some(line) = line.as_mut() else {
                return false;
            };
            if line.bytes != seen {
                return false;
            }
            match deadline {
                Some(d) => {
                    let now = line.clock.now();
                    if d <= now {
                        return false;
                    }
                    hw::alarm_in(d - now);
                    true
                }
                None => true,
            }
        });
        if idle {
            // Wakes on the pending interrupt even while masked; its handler
            // runs when interrupts are enabled again, below.
            cortex_m::asm::wfi();
        }
        // SAFETY: no critical section is open here (the one above ended),
        // so enabling interrupts breaks none.
        unsafe { interrupt::enable() };
    }
}

#[cfg(not(feature = "gateway-load"))]
#[cortex_m_rt::exception]
unsafe fn DefaultHandler(irqn: i16) {
    if irqn == hw::UART_RX_IRQ {
        serve::on_receive();
    } else if irqn == hw::ALARM_IRQ {
        hw::alarm_stop();
    }
}

#[cfg(not(feature = "gateway-load"))]
#[entry]
fn main() -> ! {
    let clock = hw::Clock::start();
    let uart = hw::Uart::start();
    let Ok(link) = link() else {
        // A configuration the kernel refuses: nothing to serve.
        loop {
            cortex_m::asm::wfi();
        }
    };
    let mut s = Server::new(link);
    cortex_m::interrupt::free(|cs| {
        // Nothing else holds it yet (interrupts are not enabled).
        if let Ok(mut line) = serve::LINE.borrow(cs).try_borrow_mut() {
            *line = Some(serve::Line {
                clock,
                uart,
                rx: Receiver::new(),
                bytes: 0,
            });
        }
    });
    hw::enable_interrupts();
    let mut frame = serve::Frame {
        buf: [0; gateway::rx::MAX_RTU],
        len: 0,
    };
    loop {
        let Some((now, got, end, seen)) = serve::look(&mut frame) else {
            continue;
        };
        if got {
            let request = frame.buf.get(..frame.len).unwrap_or(&[]);
            let _ = s.link.handle(request, Framing::Rtu, &mut s.response);
            serve::send(&s.response);
            continue;
        }
        if let Some((ms, _)) = s.due(now) {
            s.tick(ms);
            continue;
        }
        // Nothing to do: sleep until a byte, the frame's end or the tick.
        let tick = matches!(CLOCK, Clock::Free).then_some(s.next_due);
        let deadline = match (end, tick) {
            (Some(a), Some(b)) => Some(a.min(b)),
            (a, b) => a.or(b),
        };
        serve::sleep(seen, deadline);
    }
}

#[cfg(not(feature = "gateway-load"))]
#[panic_handler]
fn panic(_: &core::panic::PanicInfo) -> ! {
    #[cfg(feature = "panic-link-check")]
    {
        extern "C" {
            /// Deliberately undefined: if any panic path survives
            /// optimisation, the link fails naming this symbol.
            fn holdup_gateway_has_a_reachable_panic() -> !;
        }
        // SAFETY: never defined, so this is never called in a binary that links.
        unsafe { holdup_gateway_has_a_reachable_panic() }
    }
    // A gateway restarts rather than stop serving.
    #[cfg(not(feature = "panic-link-check"))]
    cortex_m::peripheral::SCB::sys_reset()
}

#[cfg(feature = "gateway-load")]
mod load_run {
    //! The load mode: see the crate documentation.

    use super::*;
    use crate::gateway::load::{crc16, Injector};
    use crate::gateway::plc::Plc;
    use crate::meter::{IcountSysTick, Meter};
    use crate::report::Report;
    use holdup_kernel::modbus::Served;

    /// Ticks run under load: 10 min of the scenario (the host's first
    /// checkpoint).
    pub const LOAD_TICKS: u32 = observed::OBS_EVERY;
    /// A tick must start within this of its due time: one request period
    /// (the PLC's 10 ms cycle).
    const DEADLINE_COUNTS: u64 = 10 * COUNTS_PER_MS;
    /// Gate: the dearest request, instructions (measured 3,746: the read of
    /// the whole input block; about 40 instructions per byte in and out,
    /// nearly all of it rmodbus's bit-by-bit CRC-16).
    const TARGET_REQUEST_MAX: u32 = 6_000;
    /// Gate: the dearest tick while serving, instructions (measured 6,944;
    /// the mean 6,721).
    const TARGET_TICK_MAX: u32 = 12_000;

    #[derive(Clone, Copy)]
    struct Cost {
        n: u32,
        sum: u64,
        min: u32,
        max: u32,
    }

    impl Cost {
        const ZERO: Self = Self {
            n: 0,
            sum: 0,
            min: u32::MAX,
            max: 0,
        };
        fn add(&mut self, x: u32) {
            self.n += 1;
            self.sum += u64::from(x);
            self.min = self.min.min(x);
            self.max = self.max.max(x);
        }
        fn merge(self, o: &Self) -> Self {
            Self {
                n: self.n + o.n,
                sum: self.sum + o.sum,
                min: self.min.min(o.min),
                max: self.max.max(o.max),
            }
        }
        fn mean(&self) -> u32 {
            if self.n == 0 {
                0
            } else {
                (self.sum as f32 / self.n as f32 + 0.5) as u32
            }
        }
        fn report(&self, out: &mut Report, name: &str) {
            out.counts(name, &[self.n, self.min, self.mean(), self.max]);
        }
    }

    fn verdict(out: &mut Report, name: &str, x: u32, ok: bool) -> bool {
        out.count(name, x, if ok { "met" } else { "MISSED" });
        ok
    }

    pub fn run(out: &mut Report) -> bool {
        let Some(cp) = cortex_m::Peripherals::take() else {
            return false;
        };
        let meter = IcountSysTick::new(cp.SYST);
        let overhead = meter.calibrate();
        let mut uart = hw::Uart::start();
        // CRC-16/MODBUS check value of "123456789" (the CRC catalogue's
        // `check` for CRC-16/MODBUS): 0x4B37.
        let crc_ok = crc16(b"123456789") == 0x4B37;
        let Ok(link) = link() else {
            out.line("gateway: configuration rejected");
            return false;
        };
        let mut s = Server::new(link);
        let mut rx = Receiver::new();
        let map = *s.link.map();
        let mut inst = Instruments::new(&expected::PLANT_LEVEL, &expected::LAB_VALUES);
        let mut plc = Plc::default();
        let mut inj = Injector::new(plc.writes(&map, &inst.readings(0)));
        // Time starts now, the sensor built: the first request at 1 ms,
        // the first tick at 50 ms.
        let mut clock = hw::Clock::start();
        let mut by_kind = [Cost::ZERO; 3];
        let mut not_replied = 0u32;
        let mut tick_cost = Cost::ZERO;
        let mut worst_late = 0u64;
        let mut misses = 0u32;
        let mut requests_while = 0u32;
        while s.ticks < LOAD_TICKS {
            let now = clock.now();
            inj.receive(now, &mut rx);
            if let Some(frame) = rx.take(now) {
                let kind = Injector::kind_of(frame);
                let a = meter.now();
                let served = s.link.handle(frame, Framing::Rtu, &mut s.response);
                let b = meter.now();
                by_kind[kind as usize].add(meter.units(a, b).saturating_sub(overhead));
                not_replied += u32::from(served != Served::Reply);
                uart.write(&s.response);
                requests_while += 1;
            }
            if let Some((ms, due)) = s.due(clock.now()) {
                let start = clock.now();
                let late = start - due;
                worst_late = worst_late.max(late);
                misses += u32::from(late > DEADLINE_COUNTS);
                let a = meter.now();
                s.tick(ms);
                let b = meter.now();
                tick_cost.add(meter.units(a, b).saturating_sub(overhead));
                inj.writes = plc.writes(&map, &inst.readings(s.ticks));
            }
        }
        let sensor = s.link.sensor();
        let v = sensor.vessel();
        let c = v.concentrations();
        let got = [v.volume(), c[0], c[1], c[2], sensor.biases().0[0]];
        let same = got
            .iter()
            .zip(expected::OBS_HOST_FIRST.iter())
            .all(|(g, h)| g.to_bits() == h.to_bits());
        let counters = s.link.counters();

        out.line(
            "holdup-gateway load: Modbus RTU at 115,200 baud, a request every 10 ms, \
             Clock::Free 1 s tick",
        );
        out.count("ticks under load", s.ticks, "");
        out.line("instructions (count / min / mean / max):");
        let names = [
            "request read input 0-37 (fn 04)",
            "request write tail 26-31 (fn 16)",
            "request write head 0-13 (fn 16)",
        ];
        for (name, k) in names.iter().zip(by_kind.iter()) {
            k.report(out, name);
        }
        let all = by_kind.iter().fold(Cost::ZERO, Cost::merge);
        all.report(out, "request, all kinds");
        tick_cost.report(out, "tick while serving");
        // Counts of 40 ns: 25 per microsecond.
        let late_us = (worst_late / 25) as u32;
        out.count("worst lateness of a tick start", late_us, "us");
        let mut pass = true;
        pass &= verdict(
            out,
            "check CRC-16/MODBUS check value 0x4B37",
            u32::from(!crc_ok),
            crc_ok,
        );
        pass &= verdict(
            out,
            "gate deadline misses (start > 10 ms late) == 0",
            misses,
            misses == 0,
        );
        let replied = not_replied == 0 && requests_while == inj.sent.iter().sum::<u32>();
        pass &= verdict(
            out,
            "gate requests not answered normally == 0",
            not_replied,
            replied,
        );
        let stale = counters.stale_ticks;
        pass &= verdict(out, "gate stale ticks == 0", stale, stale == 0);
        let max_ok = all.max < TARGET_REQUEST_MAX;
        pass &= verdict(out, "gate request max < 6000 instructions", all.max, max_ok);
        let tick_ok = tick_cost.max < TARGET_TICK_MAX;
        pass &= verdict(
            out,
            "gate tick while serving max < 12000 instructions",
            tick_cost.max,
            tick_ok,
        );
        pass &= verdict(
            out,
            "check sensor at tick 600 vs host f32 pipeline, bit for bit (differences)",
            u32::from(!same),
            same,
        );
        pass
    }

    pub fn finish(out: &mut Report, pass: bool) -> ! {
        out.finish("holdup-gateway load", pass)
    }
}

#[cfg(feature = "gateway-load")]
#[entry]
fn main() -> ! {
    let mut out = report::Report::open();
    let pass = load_run::run(&mut out);
    load_run::finish(&mut out, pass)
}

#[cfg(feature = "gateway-load")]
#[panic_handler]
fn panic(_: &core::panic::PanicInfo) -> ! {
    let mut out = report::Report::open();
    out.line("holdup-gateway: panic");
    load_run::finish(&mut out, false)
}
