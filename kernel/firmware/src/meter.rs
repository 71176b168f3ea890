//! What the firmware measures on itself: the cost of a tick and the stack
//! it uses.
//!
//! **Cost.** [`Meter`] reads a free-running counter before and after a
//! tick. On the emulator it is SysTick under QEMU's `-icount shift=10`: every
//! guest instruction advances virtual time by exactly 1,024 ns and SysTick
//! counts the 25 MHz core clock of `mps2-an386`, i.e. 25.6 SysTick counts
//! per instruction, so `instructions = (counts·5 + 64)/128`, exact while a
//! window stays under 2²⁴ counts (≈ 655,000 instructions) and identical on
//! every run. The fixed cost of the two counter reads is measured once
//! ([`Meter::calibrate`]) and subtracted. On a board (`board` feature) the
//! counter is the DWT cycle counter: the same code reports clock cycles.
//!
//! **Stack.** [`paint`] fills the unused stack below the caller with a
//! pattern; after the tick, [`lowest_touched`] finds the lowest word that no
//! longer holds it: that is the tick's deepest stack excursion.

/// The pattern painted into unused stack.
const PAINT: u32 = 0xC0DE_5AFE;

/// A free-running counter of instructions (emulator) or cycles (board).
pub trait Meter {
    /// What one unit of [`Meter::units`] is, for the report.
    const UNIT: &'static str;
    /// The raw counter now.
    fn now(&self) -> u32;
    /// Units between two readings `start` then `end`.
    fn units(&self, start: u32, end: u32) -> u32;
    /// Nanoseconds of one unit (the virtual time of an instruction under
    /// icount; the clock period on a board), for the fixed-tick loop.
    fn ns_per_unit(&self) -> u32;

    /// Units counted by an empty window: what the two readings cost.
    fn calibrate(&self) -> u32 {
        let a = self.now();
        let b = self.now();
        self.units(a, b)
    }
}

/// SysTick under QEMU's `-icount shift=10`: counts instructions.
#[cfg(not(feature = "board"))]
pub struct IcountSysTick {
    _syst: cortex_m::peripheral::SYST,
}

#[cfg(not(feature = "board"))]
impl IcountSysTick {
    /// Take SysTick: core clock, full 24-bit reload, no interrupt.
    pub fn new(mut syst: cortex_m::peripheral::SYST) -> Self {
        use cortex_m::peripheral::syst::SystClkSource;
        syst.disable_interrupt();
        syst.set_clock_source(SystClkSource::Core);
        syst.set_reload(0x00FF_FFFF);
        syst.clear_current();
        syst.enable_counter();
        Self { _syst: syst }
    }
}

#[cfg(not(feature = "board"))]
impl Meter for IcountSysTick {
    const UNIT: &'static str = "instructions";

    #[inline(always)]
    fn now(&self) -> u32 {
        cortex_m::peripheral::SYST::get_current()
    }

    #[inline(always)]
    fn units(&self, start: u32, end: u32) -> u32 {
        // SysTick counts down and wraps at 2^24.
        let counts = start.wrapping_sub(end) & 0x00FF_FFFF;
        (counts * 5 + 64) / 128
    }

    fn ns_per_unit(&self) -> u32 {
        1024
    }
}

/// The DWT cycle counter of a real Cortex-M4 (not modelled by QEMU).
#[cfg(feature = "board")]
pub struct DwtCycles {
    _dwt: cortex_m::peripheral::DWT,
    ns_per_cycle: u32,
}

#[cfg(feature = "board")]
impl DwtCycles {
    /// Enable trace and the cycle counter; `core_hz` is the CPU clock.
    pub fn new(
        mut dcb: cortex_m::peripheral::DCB,
        mut dwt: cortex_m::peripheral::DWT,
        core_hz: u32,
    ) -> Self {
        dcb.enable_trace();
        dwt.enable_cycle_counter();
        Self {
            _dwt: dwt,
            ns_per_cycle: (1_000_000_000 / core_hz.max(1)).max(1),
        }
    }
}

#[cfg(feature = "board")]
impl Meter for DwtCycles {
    const UNIT: &'static str = "cycles";

    #[inline(always)]
    fn now(&self) -> u32 {
        cortex_m::peripheral::DWT::cycle_count()
    }

    #[inline(always)]
    fn units(&self, start: u32, end: u32) -> u32 {
        end.wrapping_sub(start)
    }

    fn ns_per_unit(&self) -> u32 {
        self.ns_per_cycle
    }
}

/// The current stack pointer.
#[inline(always)]
pub fn stack_pointer() -> usize {
    cortex_m::register::msp::read() as usize
}

/// The lowest address the stack may reach (end of `.bss`/`.uninit`, from
/// cortex-m-rt's linker script) and the top it starts from.
pub fn stack_bounds() -> (usize, usize) {
    extern "C" {
        static _stack_end: u32;
        static _stack_start: u32;
    }
    // Only the symbols' addresses are taken; nothing is read through them.
    (
        core::ptr::addr_of!(_stack_end) as usize,
        core::ptr::addr_of!(_stack_start) as usize,
    )
}

/// Paint the words in `[bottom, top)` (4-aligned, below the caller's stack
/// frame) with the pattern.
#[inline(never)]
pub fn paint(bottom: usize, top: usize) {
    let mut p = (bottom + 3) & !3;
    while p + 4 <= top {
        // SAFETY: `[bottom, top)` lies between the end of the statics and the
        // live stack (callers pass `top` below their own stack pointer, with
        // room for this leaf's frame), so no live object is overwritten.
        unsafe { core::ptr::write_volatile(p as *mut u32, PAINT) };
        p += 4;
    }
}

/// The lowest address in `[bottom, top)` whose word no longer holds the
/// pattern, or `top` if none was touched.
#[inline(never)]
pub fn lowest_touched(bottom: usize, top: usize) -> usize {
    let mut p = (bottom + 3) & !3;
    while p + 4 <= top {
        // SAFETY: the same range `paint` wrote; reading RAM words is sound.
        if unsafe { core::ptr::read_volatile(p as *const u32) } != PAINT {
            return p;
        }
        p += 4;
    }
    top
}
