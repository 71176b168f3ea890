//! The peripherals of QEMU's `mps2-an386` the gateway uses, from ARM's
//! Cortex-M System Design Kit (addresses and interrupt numbers from the
//! AN386 memory map as QEMU builds it, `hw/arm/mps2.c`): the APB timer 0
//! at `0x4000_0000`, free-running, as the gateway's clock; the APB timer 1
//! at `0x4000_1000` (IRQ 9) as the alarm that ends an idle wait; the APB
//! UART 0 at `0x4000_4000` (receive IRQ 0), the Modbus line.
//!
//! The server takes each received byte in the UART's receive interrupt
//! (the CMSDK UART holds one byte: at 115,200 baud the next one comes
//! 95 µs later, less than a tick) and sleeps in `WFI` when idle, woken by
//! that interrupt or by timer 1's alarm (the frame's end, the next tick).

use core::ptr::{read_volatile, write_volatile};

/// The peripheral clock (PCLK) of the board, Hz.
pub const PCLK_HZ: u32 = 25_000_000;
/// Line speed, baud.
pub const BAUD: u32 = 115_200;

const TIMER0: usize = 0x4000_0000;
const TIMER_CTRL: usize = 0x00;
const TIMER_VALUE: usize = 0x04;
const TIMER_RELOAD: usize = 0x08;

const TIMER1: usize = 0x4000_1000;
const TIMER_INTCLEAR: usize = 0x0C;
const TIMER_CTRL_EN: u32 = 1 << 0;
const TIMER_CTRL_IRQ_EN: u32 = 1 << 3;
const IRQ_UART0_RX: u32 = 0;
const IRQ_TIMER1: u32 = 9;
/// NVIC interrupt set-enable register (IRQs 0–31).
const NVIC_ISER0: usize = 0xE000_E100;

const UART0: usize = 0x4000_4000;
const UART_INTCLEAR: usize = 0x0C;
const CTRL_RX_IRQ_EN: u32 = 1 << 3;
const INT_RX: u32 = 1 << 1;
const UART_DATA: usize = 0x00;
const UART_STATE: usize = 0x04;
const UART_CTRL: usize = 0x08;
const UART_BAUDDIV: usize = 0x10;
const STATE_TX_FULL: u32 = 1 << 0;
const STATE_RX_FULL: u32 = 1 << 1;
const CTRL_TX_EN: u32 = 1 << 0;
const CTRL_RX_EN: u32 = 1 << 1;

fn read(addr: usize) -> u32 {
    // SAFETY: `addr` is one of the register addresses above, a 32-bit
    // device register of the board; reading it has no effect on memory.
    unsafe { read_volatile(addr as *const u32) }
}

fn write(addr: usize, x: u32) {
    // SAFETY: as in `read`: a device register, not memory Rust owns.
    unsafe { write_volatile(addr as *mut u32, x) }
}

/// Timer 0 counting down from `u32::MAX` at PCLK, extended to 64 bits:
/// [`Clock::now`] must run at least once per wrap (171 s), which the main
/// loop does many times a millisecond.
pub struct Clock {
    last: u32,
    total: u64,
}

impl Clock {
    /// Start the timer.
    pub fn start() -> Self {
        write(TIMER0 + TIMER_CTRL, 0);
        write(TIMER0 + TIMER_RELOAD, u32::MAX);
        write(TIMER0 + TIMER_VALUE, u32::MAX);
        write(TIMER0 + TIMER_CTRL, 1);
        Self { last: 0, total: 0 }
    }

    /// Counts (of PCLK, 40 ns) since [`Clock::start`].
    pub fn now(&mut self) -> u64 {
        let up = u32::MAX - read(TIMER0 + TIMER_VALUE);
        self.total += u64::from(up.wrapping_sub(self.last));
        self.last = up;
        self.total
    }
}

/// UART 0: 115,200 baud (divider PCLK / baud), receiver and transmitter
/// on, the receive interrupt raised (as a wake-up: see the module).
pub struct Uart;

impl Uart {
    /// Configure the UART.
    pub fn start() -> Self {
        write(UART0 + UART_BAUDDIV, PCLK_HZ / BAUD);
        write(UART0 + UART_CTRL, CTRL_TX_EN | CTRL_RX_EN | CTRL_RX_IRQ_EN);
        Self
    }

    /// The byte in the receive buffer, if any.
    #[cfg_attr(feature = "gateway-load", allow(dead_code))]
    pub fn read(&mut self) -> Option<u8> {
        (read(UART0 + UART_STATE) & STATE_RX_FULL != 0).then(|| read(UART0 + UART_DATA) as u8)
    }

    /// Send `bytes`, waiting while the transmit buffer is full.
    pub fn write(&mut self, bytes: &[u8]) {
        for &b in bytes {
            while read(UART0 + UART_STATE) & STATE_TX_FULL != 0 {}
            write(UART0 + UART_DATA, u32::from(b));
        }
    }
}

/// Enable the two wake-ups in the NVIC: the UART's receive interrupt and
/// timer 1's alarm.
#[cfg_attr(feature = "gateway-load", allow(dead_code))]
pub fn enable_interrupts() {
    write(NVIC_ISER0, (1 << IRQ_UART0_RX) | (1 << IRQ_TIMER1));
}

/// The interrupt number of the UART's receive interrupt.
#[cfg_attr(feature = "gateway-load", allow(dead_code))]
pub const UART_RX_IRQ: i16 = IRQ_UART0_RX as i16;
/// The interrupt number of timer 1.
#[cfg_attr(feature = "gateway-load", allow(dead_code))]
pub const ALARM_IRQ: i16 = IRQ_TIMER1 as i16;

/// Acknowledge the UART's receive interrupt (in its handler, before
/// reading the byte: a byte arriving after the read raises it again).
#[cfg_attr(feature = "gateway-load", allow(dead_code))]
pub fn uart_rx_acknowledge() {
    write(UART0 + UART_INTCLEAR, INT_RX);
}

/// Stop timer 1 and acknowledge its interrupt.
#[cfg_attr(feature = "gateway-load", allow(dead_code))]
pub fn alarm_stop() {
    write(TIMER1 + TIMER_CTRL, 0);
    write(TIMER1 + TIMER_INTCLEAR, 1);
}

/// Raise timer 1's interrupt in `counts` (at most 2^32 − 1: 171 s; a
/// longer wait just wakes early).
#[cfg_attr(feature = "gateway-load", allow(dead_code))]
pub fn alarm_in(counts: u64) {
    let counts = u32::try_from(counts).unwrap_or(u32::MAX).max(1);
    alarm_stop();
    write(TIMER1 + TIMER_VALUE, counts);
    write(TIMER1 + TIMER_RELOAD, counts);
    write(TIMER1 + TIMER_CTRL, TIMER_CTRL_EN | TIMER_CTRL_IRQ_EN);
}
