//! The firmware's report: semihosting text on the emulator, `defmt` frames
//! with a `defmt-*` feature.
//!
//! The text path formats numbers itself (no `core::fmt`, whose machinery
//! brings panic paths into the binary): integers exactly, floats to six
//! significant digits for display — the checks compare the binary values.

/// Where the report goes.
pub struct Report {
    #[cfg(not(feature = "defmt"))]
    out: Option<cortex_m_semihosting::hio::HostStream>,
}

/// One line of text being assembled (text path).
#[cfg(not(feature = "defmt"))]
struct Line {
    buf: [u8; 160],
    len: usize,
}

#[cfg(not(feature = "defmt"))]
impl Line {
    // Not inlined, like every method here: the report runs a few dozen
    // times, so its size counts and its speed does not.
    #[inline(never)]
    fn new() -> Self {
        Self {
            buf: [0; 160],
            len: 0,
        }
    }

    /// Append `b`; a line that does not fit ends in `~` (truncated, and
    /// says so) and keeps room for its newline.
    #[inline(never)]
    fn byte(&mut self, b: u8) -> &mut Self {
        let room = self.buf.len() - 1;
        if self.len < room || (b == b'\n' && self.len == room) {
            if let Some(slot) = self.buf.get_mut(self.len) {
                *slot = b;
                self.len += 1;
            }
        } else if let Some(last) = self.buf.get_mut(room - 1) {
            *last = b'~';
        }
        self
    }

    #[inline(never)]
    fn str(&mut self, s: &str) -> &mut Self {
        for b in s.bytes() {
            self.byte(b);
        }
        self
    }

    /// Decimal digits of `x` (`u32` only: a `u64` would bring the software
    /// 64-bit division into the image).
    #[inline(never)]
    fn u32(&mut self, mut x: u32) -> &mut Self {
        let mut digits = [0u8; 10];
        let mut n = 0;
        loop {
            if let Some(d) = digits.get_mut(n) {
                *d = b'0' + (x % 10) as u8;
            }
            n += 1;
            x /= 10;
            if x == 0 || n >= digits.len() {
                break;
            }
        }
        for d in digits.iter().take(n).rev() {
            self.byte(*d);
        }
        self
    }

    /// `x` to six significant digits, `d.ddddde±XX`.
    #[inline(never)]
    fn f32(&mut self, x: f32) -> &mut Self {
        if x.is_nan() {
            return self.str("NaN");
        }
        if x < 0.0 {
            self.byte(b'-');
        }
        let mut m = if x < 0.0 { -x } else { x };
        if m == f32::INFINITY {
            return self.str("inf");
        }
        if m == 0.0 {
            return self.str("0");
        }
        // Scale into [1, 10) (bounded: |exponent| ≤ 45 for f32).
        let mut e: i32 = 0;
        while m >= 10.0 && e < 60 {
            m /= 10.0;
            e += 1;
        }
        while m < 1.0 && e > -60 {
            m *= 10.0;
            e -= 1;
        }
        // Six significant digits, rounded; carry into the exponent.
        let mut digits = (m * 100_000.0 + 0.5) as u32;
        if digits >= 1_000_000 {
            digits /= 10;
            e += 1;
        }
        self.u32(digits / 100_000).byte(b'.');
        let frac = digits % 100_000;
        let mut scale = 10_000;
        while scale > 0 {
            self.byte(b'0' + ((frac / scale) % 10) as u8);
            scale /= 10;
        }
        self.byte(b'e');
        if e < 0 {
            self.byte(b'-');
        } else {
            self.byte(b'+');
        }
        self.u32(e.unsigned_abs())
    }
}

impl Report {
    /// Open the report channel (the semihosting console on the text path).
    pub fn open() -> Self {
        Self {
            #[cfg(not(feature = "defmt"))]
            out: cortex_m_semihosting::hio::hstdout().ok(),
        }
    }

    #[cfg(not(feature = "defmt"))]
    #[inline(never)]
    fn emit(&mut self, line: &mut Line) {
        line.byte(b'\n');
        if let (Some(out), Some(bytes)) = (self.out.as_mut(), line.buf.get(..line.len)) {
            let _ = out.write_all(bytes);
        }
    }

    /// A plain line of text.
    #[inline(never)]
    pub fn line(&mut self, s: &str) {
        #[cfg(not(feature = "defmt"))]
        self.emit(Line::new().str(s));
        #[cfg(feature = "defmt")]
        defmt::println!("{=str}", s);
    }

    /// The verdict line (`<program>: PASS` or `: FAIL`), then the exit
    /// through semihosting: status 0 only when `pass`. Not returned from
    /// under a debugger or QEMU; on a bare board, parks the core.
    pub fn finish(&mut self, program: &str, pass: bool) -> ! {
        let verdict = if pass { "PASS" } else { "FAIL" };
        #[cfg(not(feature = "defmt"))]
        self.emit(Line::new().str(program).str(": ").str(verdict));
        #[cfg(feature = "defmt")]
        defmt::println!("{=str}: {=str}", program, verdict);
        use cortex_m_semihosting::debug;
        debug::exit(if pass {
            debug::EXIT_SUCCESS
        } else {
            debug::EXIT_FAILURE
        });
        loop {
            cortex_m::asm::wfi();
        }
    }

    /// One check's outcome.
    #[inline(never)]
    pub fn check(&mut self, name: &str, points: u32, max_rel: f32, tol: f32, pass: bool) {
        let verdict = if pass { "pass" } else { "FAIL" };
        #[cfg(not(feature = "defmt"))]
        self.emit(
            Line::new()
                .str("check ")
                .str(name)
                .str(": ")
                .u32(points)
                .str(" checkpoints, max rel error ")
                .f32(max_rel)
                .str(" (tolerance ")
                .f32(tol)
                .str(") ")
                .str(verdict),
        );
        #[cfg(feature = "defmt")]
        defmt::println!(
            "check {=str}: {=u32} checkpoints, max rel error {=f32} (tolerance {=f32}) {=str}",
            name,
            points,
            max_rel,
            tol,
            verdict
        );
    }

    /// One check's outcome, with what was measured, its tolerance and unit:
    /// `check <name>: <points> checkpoints, <what> <measured> (tolerance
    /// <tol> <unit>) pass|FAIL`.
    #[allow(clippy::too_many_arguments)]
    #[inline(never)]
    pub fn check_value(
        &mut self,
        name: &str,
        points: u32,
        what: &str,
        measured: f32,
        tol: f32,
        unit: &str,
        pass: bool,
    ) {
        let verdict = if pass { "pass" } else { "FAIL" };
        #[cfg(not(feature = "defmt"))]
        self.emit(
            Line::new()
                .str("check ")
                .str(name)
                .str(": ")
                .u32(points)
                .str(" checkpoints, ")
                .str(what)
                .str(" ")
                .f32(measured)
                .str(" (tolerance ")
                .f32(tol)
                .str(" ")
                .str(unit)
                .str(") ")
                .str(verdict),
        );
        #[cfg(feature = "defmt")]
        defmt::println!(
            "check {=str}: {=u32} checkpoints, {=str} {=f32} (tolerance {=f32} {=str}) {=str}",
            name,
            points,
            what,
            measured,
            tol,
            unit,
            verdict
        );
    }

    /// A named value with a unit.
    #[inline(never)]
    pub fn value(&mut self, name: &str, x: f32, unit: &str) {
        #[cfg(not(feature = "defmt"))]
        self.emit(Line::new().str(name).str(": ").f32(x).str(" ").str(unit));
        #[cfg(feature = "defmt")]
        defmt::println!("{=str}: {=f32} {=str}", name, x, unit);
    }

    /// A named count with a unit.
    #[inline(never)]
    pub fn count(&mut self, name: &str, x: u32, unit: &str) {
        #[cfg(not(feature = "defmt"))]
        self.emit(Line::new().str(name).str(": ").u32(x).str(" ").str(unit));
        #[cfg(feature = "defmt")]
        defmt::println!("{=str}: {=u32} {=str}", name, x, unit);
    }

    /// Named counts: `name: a / b / c`.
    #[inline(never)]
    pub fn counts(&mut self, name: &str, xs: &[u32]) {
        #[cfg(not(feature = "defmt"))]
        {
            let mut line = Line::new();
            line.str(name).str(":");
            for (i, x) in xs.iter().enumerate() {
                line.str(if i == 0 { " " } else { " / " }).u32(*x);
            }
            self.emit(&mut line);
        }
        #[cfg(feature = "defmt")]
        defmt::println!("{=str}: {=[?]}", name, xs);
    }

    /// Cost of a tick over a run: min, mean, max.
    #[inline(never)]
    pub fn cost(&mut self, name: &str, unit: &str, ticks: u32, min: u32, mean: f32, max: u32) {
        #[cfg(not(feature = "defmt"))]
        self.emit(
            Line::new()
                .str("cost ")
                .str(name)
                .str(": ")
                .str(unit)
                .str(" per tick over ")
                .u32(ticks)
                .str(" ticks: min ")
                .u32(min)
                .str(" mean ")
                .f32(mean)
                .str(" max ")
                .u32(max),
        );
        #[cfg(feature = "defmt")]
        defmt::println!(
            "cost {=str}: {=str} per tick over {=u32} ticks: min {=u32} mean {=f32} max {=u32}",
            name,
            unit,
            ticks,
            min,
            mean,
            max
        );
    }
}
