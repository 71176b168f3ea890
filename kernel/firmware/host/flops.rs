//! Counting the floating-point work of a tick on the host.
//!
//! `Counted` is an `f32` that counts every arithmetic operation and every
//! elementary-function call the kernel makes through its `Scalar` trait. The
//! kernel is generic over that trait, so the same tick runs on it with the
//! same branches as the firmware's `f32` tick; the counts are the work the
//! tick needs, independent of the instruction set: `+ − × ÷` of the model,
//! the integrator and the totals, and the calls into `libm`. Comparisons,
//! negation and absolute value are not counted as flops.

use core::cmp::Ordering;
use core::ops::{Add, AddAssign, Div, Mul, MulAssign, Neg, Sub, SubAssign};
use std::cell::Cell;

use holdup_kernel::{reference, Scalar};

/// What is counted, in this order.
const KINDS: [&str; 12] = [
    "add", "sub", "mul", "div", "exp", "expm1", "ln", "ln1p", "powf", "sqrt", "cbrt", "acos",
];

thread_local! {
    static COUNTS: Cell<[u64; 12]> = const { Cell::new([0; 12]) };
}

fn bump(kind: usize) {
    COUNTS.with(|c| {
        let mut a = c.get();
        a[kind] += 1;
        c.set(a);
    });
}

fn take() -> [u64; 12] {
    COUNTS.with(|c| c.replace([0; 12]))
}

#[derive(Clone, Copy, Debug, Default)]
pub struct Counted(f32);

impl PartialEq for Counted {
    fn eq(&self, o: &Self) -> bool {
        self.0 == o.0
    }
}
impl PartialOrd for Counted {
    fn partial_cmp(&self, o: &Self) -> Option<Ordering> {
        self.0.partial_cmp(&o.0)
    }
}

macro_rules! binop {
    ($tr:ident, $f:ident, $atr:ident, $af:ident, $op:tt, $kind:expr) => {
        impl $tr for Counted {
            type Output = Counted;
            fn $f(self, o: Counted) -> Counted {
                bump($kind);
                Counted(self.0 $op o.0)
            }
        }
        impl $atr for Counted {
            fn $af(&mut self, o: Counted) {
                *self = $tr::$f(*self, o);
            }
        }
    };
}
binop!(Add, add, AddAssign, add_assign, +, 0);
binop!(Sub, sub, SubAssign, sub_assign, -, 1);
binop!(Mul, mul, MulAssign, mul_assign, *, 2);
impl Div for Counted {
    type Output = Counted;
    fn div(self, o: Counted) -> Counted {
        bump(3);
        Counted(self.0 / o.0)
    }
}
impl Neg for Counted {
    type Output = Counted;
    fn neg(self) -> Counted {
        Counted(-self.0)
    }
}

impl Scalar for Counted {
    const ZERO: Self = Counted(0.0);
    const ONE: Self = Counted(1.0);
    const TWO: Self = Counted(2.0);
    const HALF: Self = Counted(0.5);
    const EPSILON: Self = Counted(f32::EPSILON);
    const MIN_POSITIVE: Self = Counted(f32::MIN_POSITIVE);
    const MAX: Self = Counted(f32::MAX);
    const PI: Self = Counted(core::f32::consts::PI);
    fn of(x: f64) -> Self {
        Counted(x as f32)
    }
    fn of_u32(x: u32) -> Self {
        Counted(x as f32)
    }
    fn to_f64(self) -> f64 {
        f64::from(self.0)
    }
    fn exp(self) -> Self {
        bump(4);
        Counted(self.0.exp())
    }
    fn expm1(self) -> Self {
        bump(5);
        Counted(self.0.exp_m1())
    }
    fn ln(self) -> Self {
        bump(6);
        Counted(self.0.ln())
    }
    fn ln1p(self) -> Self {
        bump(7);
        Counted(self.0.ln_1p())
    }
    fn powf(self, y: Self) -> Self {
        bump(8);
        Counted(self.0.powf(y.0))
    }
    fn sqrt(self) -> Self {
        bump(9);
        Counted(self.0.sqrt())
    }
    fn cbrt(self) -> Self {
        bump(10);
        Counted(self.0.cbrt())
    }
    fn acos(self) -> Self {
        bump(11);
        Counted(self.0.acos())
    }
    fn abs(self) -> Self {
        Counted(self.0.abs())
    }
    fn is_finite(self) -> bool {
        self.0.is_finite()
    }
    fn is_nan(self) -> bool {
        self.0.is_nan()
    }
}

/// Per-tick counts over a run.
pub struct TickFlops {
    ticks: u64,
    total: [u64; 12],
    arith_min: u64,
    arith_max: u64,
}

impl TickFlops {
    fn new() -> Self {
        Self {
            ticks: 0,
            total: [0; 12],
            arith_min: u64::MAX,
            arith_max: 0,
        }
    }

    fn record(&mut self, c: [u64; 12]) {
        self.ticks += 1;
        for (t, x) in self.total.iter_mut().zip(c) {
            *t += x;
        }
        let arith: u64 = c[..4].iter().sum();
        self.arith_min = self.arith_min.min(arith);
        self.arith_max = self.arith_max.max(arith);
    }

    /// The counts as a `Flops` constant for the firmware.
    pub fn to_rust(&self, name: &str, what: &str) -> String {
        let n = self.ticks as f64;
        let mut s = format!(
            "/// Floating-point work of {what}, per tick, counted on the host over the \
             whole scenario ({} ticks).\npub const {name}: Flops = Flops {{\n",
            self.ticks
        );
        for (k, t) in KINDS.iter().zip(self.total) {
            s.push_str(&format!("    {k}: {},\n", super::f32_lit(t as f64 / n)));
        }
        s.push_str(&format!(
            "    arith_min: {},\n    arith_max: {},\n}};\n\n",
            self.arith_min, self.arith_max
        ));
        s
    }
}

/// The analytic scenario's tick.
pub fn exact_tick() -> TickFlops {
    let mut v = super::scenarios::exact_vessel::<Counted>().expect("analytic vessel");
    let u = super::scenarios::exact_inputs::<Counted>();
    let mut f = TickFlops::new();
    take();
    for _ in 0..super::scenarios::EXACT_TICKS {
        v.step(&u);
        f.record(take());
    }
    f
}

/// The reference scenario's tick (inputs are made outside the counted part).
pub fn reference_tick() -> TickFlops {
    let mut v = reference::vessel::<Counted>().expect("reference vessel");
    let mut f = TickFlops::new();
    for _ in 0..super::scenarios::REF_TICKS {
        let u = reference::inputs_at::<Counted>(v.time_ms());
        take();
        v.step(&u);
        f.record(take());
    }
    f
}

/// The observed scenario's pipeline tick: lab event, then `Sensor::tick`
/// (the readings are made outside the counted part, in `f32`, and widened).
pub fn sensor_tick(level_knots: &[f32], lab_values: &[f32]) -> TickFlops {
    use super::observed::{step, Instruments, Tracked, NIS_PROBABILITY, OBS_TICKS};
    use holdup_kernel::diagnostics::ChiSquareBounds;
    let bounds = ChiSquareBounds::new(Counted::of(f64::from(NIS_PROBABILITY))).expect("bounds");
    let mut t = Tracked::<Counted>::new(bounds).expect("sensor");
    let mut inst = Instruments::new(level_knots, lab_values);
    let mut f = TickFlops::new();
    for n in 0..OBS_TICKS {
        let r = inst.readings(n).cast::<Counted>();
        take();
        step(&mut t, &r);
        f.record(take());
    }
    f
}
