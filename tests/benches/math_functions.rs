//! Accuracy and host speed of `micromath` 2.1 versus `libm` 0.2.16 in `f32`
//! on the elementary functions holdup uses, over the ranges it uses them on.
//!
//! Reference: every `f32` result is compared with the `f64` `libm` result
//! (`libm::exp`, `libm::expm1`, `libm::log1p`, `libm::log`, `libm::pow`,
//! `libm::sqrt`, `libm::cbrt`, `libm::acos`) evaluated on the *same* `f32`
//! input widened to `f64`, so input rounding is not counted as error. The
//! `f64` `libm` routines are themselves within about 1 ulp of `f64`, i.e.
//! about 1e-16 relative, far below the `f32` errors measured here (a
//! correctly rounded `f32` result is already up to 2^-24 ≈ 6e-8 off).
//!
//! Grids are dense and deterministic (200 000 points per range; log-spaced
//! where the range spans decades). Relative error is measured only where the
//! reference is non-zero (and, for `exp`, where it is at least 1e-30). Ulps
//! are ulps of `f32` at the reference value.
//!
//! Host speed: ns per call over a fixed input array, inputs and outputs
//! passed through `std::hint::black_box`, median of several interleaved
//! rounds; the micromath/libm ratio comes from the same run.
//!
//! Prints markdown tables to stdout.

use micromath::F32Ext;
use std::hint::black_box;
use std::time::Instant;

/// Points per (function, range) grid.
const GRID_POINTS: usize = 200_000;

/// How the inputs of one range are laid out.
#[derive(Clone, Copy)]
enum Grid {
    /// Evenly spaced over `[lo, hi]`; with `open_lo` the point `lo` is left out.
    Linear { lo: f64, hi: f64, open_lo: bool },
    /// Log-spaced magnitudes over `[lo, hi]` (both > 0), multiplied by `sign`.
    Log { lo: f64, hi: f64, sign: f64 },
    /// Log-spaced magnitudes over `[lo, hi]`, alternating `+` and `−` signs.
    LogBothSigns { lo: f64, hi: f64 },
}

impl Grid {
    fn points(self, n: usize) -> Vec<f32> {
        let last = (n - 1) as f64;
        (0..n)
            .map(|i| match self {
                Grid::Linear { lo, hi, open_lo } => {
                    let t = if open_lo {
                        (i + 1) as f64 / n as f64
                    } else {
                        i as f64 / last
                    };
                    (lo + (hi - lo) * t) as f32
                }
                Grid::Log { lo, hi, sign } => {
                    let t = i as f64 / last;
                    (sign * (lo.ln() + (hi.ln() - lo.ln()) * t).exp()) as f32
                }
                Grid::LogBothSigns { lo, hi } => {
                    let t = (i / 2) as f64 / ((n - 1) / 2).max(1) as f64;
                    let sign = if i % 2 == 0 { 1.0 } else { -1.0 };
                    (sign * (lo.ln() + (hi.ln() - lo.ln()) * t).exp()) as f32
                }
            })
            .collect()
    }
}

/// The relative-error budget a use of the function has to meet.
#[derive(Clone, Copy)]
enum Budget {
    /// Integrator state path: 1e-5 end-to-end needs about 1e-6 per call.
    StatePath,
    /// Displayed 1σ uncertainties: about 1e-2.
    Uncertainty,
    /// Geometry inverses: about 1e-5.
    Geometry,
}

impl Budget {
    fn limit(self) -> f64 {
        match self {
            Budget::StatePath => 1e-6,
            Budget::Uncertainty => 1e-2,
            Budget::Geometry => 1e-5,
        }
    }

    fn label(self) -> &'static str {
        match self {
            Budget::StatePath => "1e-6 (state)",
            Budget::Uncertainty => "1e-2 (1σ)",
            Budget::Geometry => "1e-5 (geom)",
        }
    }
}

type F32Fn = Box<dyn Fn(f32) -> f32>;
type F64Fn = Box<dyn Fn(f64) -> f64>;

/// One (function, range) with its reference and the `f32` candidates.
struct Case {
    function: &'static str,
    range: &'static str,
    grid: Grid,
    /// Only points whose reference magnitude is at least this are measured.
    min_reference: f64,
    budget: Budget,
    reference: F64Fn,
    candidates: Vec<(&'static str, F32Fn)>,
}

/// Error statistics of one candidate over one grid.
struct Stats {
    used: usize,
    max_rel: f64,
    sum_rel_sq: f64,
    max_ulp: f64,
    worst_x: f32,
}

/// Size of one `f32` ulp at magnitude `y` (subnormal spacing below the
/// smallest normal).
fn f32_ulp(y: f64) -> f64 {
    let y = y.abs();
    let biased = ((y.to_bits() >> 52) & 0x7ff) as i64;
    let exponent = (biased - 1023).max(-126);
    f64::from_bits(((exponent - 23 + 1023) as u64) << 52)
}

fn measure(inputs: &[f32], reference: &[f64], min_reference: f64, f: &dyn Fn(f32) -> f32) -> Stats {
    let mut stats = Stats {
        used: 0,
        max_rel: 0.0,
        sum_rel_sq: 0.0,
        max_ulp: 0.0,
        worst_x: f32::NAN,
    };
    for (&x, &r) in inputs.iter().zip(reference) {
        if r == 0.0 || !r.is_finite() || r.abs() < min_reference {
            continue;
        }
        let got = f64::from(f(x));
        let abs_err = if got.is_finite() {
            (got - r).abs()
        } else {
            f64::INFINITY
        };
        let rel = abs_err / r.abs();
        let ulp = abs_err / f32_ulp(r);
        stats.used += 1;
        stats.sum_rel_sq += rel * rel;
        if rel > stats.max_rel || stats.worst_x.is_nan() {
            stats.max_rel = rel;
            stats.worst_x = x;
        }
        stats.max_ulp = stats.max_ulp.max(ulp);
    }
    stats
}

fn mm_exp(x: f32) -> f32 {
    <f32 as F32Ext>::exp(x)
}

fn mm_ln(x: f32) -> f32 {
    <f32 as F32Ext>::ln(x)
}

fn mm_powf(x: f32, a: f32) -> f32 {
    <f32 as F32Ext>::powf(x, a)
}

fn mm_sqrt(x: f32) -> f32 {
    <f32 as F32Ext>::sqrt(x)
}

fn mm_acos(x: f32) -> f32 {
    <f32 as F32Ext>::acos(x)
}

const LIBM: &str = "libm f32";
/// The kernel's own `f32` cube root (`Scalar::cbrt` for `f32`): libm's
/// `cbrtf` finishes in `f64`, which a Cortex-M4F does in software.
const KERNEL_CBRT: &str = "kernel f32 (no f64)";
const MICROMATH: &str = "micromath f32";

fn pow_case(range: &'static str, grid: Grid, exponent: f32) -> Case {
    let a64 = f64::from(exponent);
    Case {
        function: "powf",
        range,
        grid,
        min_reference: f64::MIN_POSITIVE,
        budget: Budget::StatePath,
        reference: Box::new(move |x| libm::pow(x, a64)),
        candidates: vec![
            (LIBM, Box::new(move |x| libm::powf(x, exponent))),
            (MICROMATH, Box::new(move |x| mm_powf(x, exponent))),
        ],
    }
}

fn cases() -> Vec<Case> {
    let conc = Grid::Log {
        lo: 1e-6,
        hi: 1e4,
        sign: 1.0,
    };
    let mut cases = vec![
        Case {
            function: "exp",
            range: "[−40, 40] lin (Arrhenius)",
            grid: Grid::Linear {
                lo: -40.0,
                hi: 40.0,
                open_lo: false,
            },
            min_reference: 1e-30,
            budget: Budget::StatePath,
            reference: Box::new(libm::exp),
            candidates: vec![(LIBM, Box::new(libm::expf)), (MICROMATH, Box::new(mm_exp))],
        },
        Case {
            function: "exp",
            range: "[−50, 0] lin (e^(−λh))",
            grid: Grid::Linear {
                lo: -50.0,
                hi: 0.0,
                open_lo: false,
            },
            min_reference: 1e-30,
            budget: Budget::StatePath,
            reference: Box::new(libm::exp),
            candidates: vec![(LIBM, Box::new(libm::expf)), (MICROMATH, Box::new(mm_exp))],
        },
        Case {
            function: "expm1",
            range: "[−1e4, −1e-9] log-spaced −x",
            grid: Grid::Log {
                lo: 1e-9,
                hi: 1e4,
                sign: -1.0,
            },
            min_reference: f64::MIN_POSITIVE,
            budget: Budget::StatePath,
            reference: Box::new(libm::expm1),
            candidates: vec![
                (LIBM, Box::new(libm::expm1f)),
                (
                    "micromath exp(x)−1 (stand-in)",
                    Box::new(|x| mm_exp(x) - 1.0),
                ),
            ],
        },
        Case {
            function: "expm1",
            range: "[−1e-2, −1e-9] log-spaced −x",
            grid: Grid::Log {
                lo: 1e-9,
                hi: 1e-2,
                sign: -1.0,
            },
            min_reference: f64::MIN_POSITIVE,
            budget: Budget::StatePath,
            reference: Box::new(libm::expm1),
            candidates: vec![
                (LIBM, Box::new(libm::expm1f)),
                (
                    "micromath exp(x)−1 (stand-in)",
                    Box::new(|x| mm_exp(x) - 1.0),
                ),
                (
                    "libm expf(x)−1 (cancellation demo)",
                    Box::new(|x| libm::expf(x) - 1.0),
                ),
            ],
        },
        Case {
            function: "ln1p",
            range: "(−0.9, 10] lin",
            grid: Grid::Linear {
                lo: -0.9,
                hi: 10.0,
                open_lo: true,
            },
            min_reference: f64::MIN_POSITIVE,
            budget: Budget::StatePath,
            reference: Box::new(libm::log1p),
            candidates: vec![
                (LIBM, Box::new(libm::log1pf)),
                ("micromath ln(1+x) (stand-in)", Box::new(|x| mm_ln(1.0 + x))),
            ],
        },
        Case {
            function: "ln1p",
            range: "±[1e-9, 1e-2] log-spaced, alternating sign",
            grid: Grid::LogBothSigns { lo: 1e-9, hi: 1e-2 },
            min_reference: f64::MIN_POSITIVE,
            budget: Budget::StatePath,
            reference: Box::new(libm::log1p),
            candidates: vec![
                (LIBM, Box::new(libm::log1pf)),
                ("micromath ln(1+x) (stand-in)", Box::new(|x| mm_ln(1.0 + x))),
                (
                    "libm logf(1+x) (cancellation demo)",
                    Box::new(|x| libm::logf(1.0 + x)),
                ),
            ],
        },
        Case {
            function: "ln",
            range: "[1e-6, 1e4] log",
            grid: Grid::Log {
                lo: 1e-6,
                hi: 1e4,
                sign: 1.0,
            },
            min_reference: f64::MIN_POSITIVE,
            budget: Budget::StatePath,
            reference: Box::new(libm::log),
            candidates: vec![(LIBM, Box::new(libm::logf)), (MICROMATH, Box::new(mm_ln))],
        },
    ];
    for (range, exponent) in [
        ("c^0.5, c ∈ [1e-6, 1e4] log", 0.5),
        ("c^0.7, c ∈ [1e-6, 1e4] log", 0.7),
        ("c^1.3, c ∈ [1e-6, 1e4] log", 1.3),
        ("c^1.5, c ∈ [1e-6, 1e4] log", 1.5),
        ("c^2.5, c ∈ [1e-6, 1e4] log", 2.5),
        ("c^3, c ∈ [1e-6, 1e4] log", 3.0),
    ] {
        cases.push(pow_case(range, conc, exponent));
    }
    cases.push(pow_case(
        "weir H^1.5, H ∈ [1e-4, 2] log",
        Grid::Log {
            lo: 1e-4,
            hi: 2.0,
            sign: 1.0,
        },
        1.5,
    ));
    cases.extend([
        Case {
            function: "sqrt",
            range: "[0, 600] lin (2·g·h)",
            grid: Grid::Linear {
                lo: 0.0,
                hi: 600.0,
                open_lo: false,
            },
            min_reference: f64::MIN_POSITIVE,
            budget: Budget::StatePath,
            reference: Box::new(libm::sqrt),
            candidates: vec![
                (LIBM, Box::new(libm::sqrtf)),
                (MICROMATH, Box::new(mm_sqrt)),
            ],
        },
        Case {
            function: "sqrt",
            range: "[1e-12, 1e6] log (variance)",
            grid: Grid::Log {
                lo: 1e-12,
                hi: 1e6,
                sign: 1.0,
            },
            min_reference: f64::MIN_POSITIVE,
            budget: Budget::Uncertainty,
            reference: Box::new(libm::sqrt),
            candidates: vec![
                (LIBM, Box::new(libm::sqrtf)),
                (MICROMATH, Box::new(mm_sqrt)),
            ],
        },
        Case {
            function: "cbrt",
            range: "[1e-9, 1e6] log",
            grid: Grid::Log {
                lo: 1e-9,
                hi: 1e6,
                sign: 1.0,
            },
            min_reference: f64::MIN_POSITIVE,
            budget: Budget::Geometry,
            reference: Box::new(libm::cbrt),
            candidates: vec![
                (LIBM, Box::new(libm::cbrtf)),
                (KERNEL_CBRT, Box::new(<f32 as holdup_kernel::Scalar>::cbrt)),
            ],
        },
        Case {
            function: "acos",
            range: "[−1, 1] lin",
            grid: Grid::Linear {
                lo: -1.0,
                hi: 1.0,
                open_lo: false,
            },
            min_reference: f64::MIN_POSITIVE,
            budget: Budget::Geometry,
            reference: Box::new(libm::acos),
            candidates: vec![
                (LIBM, Box::new(libm::acosf)),
                (MICROMATH, Box::new(mm_acos)),
            ],
        },
    ]);
    cases
}

fn fmt_ulp(ulp: f64) -> String {
    if ulp < 1e4 {
        format!("{ulp:.2}")
    } else {
        format!("{ulp:.2e}")
    }
}

fn accuracy_table() {
    println!(
        "| function | range (grid) | points | implementation | max rel | RMS rel | max ulp (f32) | worst x | budget | fits |"
    );
    println!("|---|---|---:|---|---:|---:|---:|---:|---|:-:|");
    for case in cases() {
        let inputs = case.grid.points(GRID_POINTS);
        let reference: Vec<f64> = inputs
            .iter()
            .map(|&x| (case.reference)(f64::from(x)))
            .collect();
        for (name, f) in &case.candidates {
            let s = measure(&inputs, &reference, case.min_reference, f.as_ref());
            let rms = if s.used == 0 {
                f64::NAN
            } else {
                (s.sum_rel_sq / s.used as f64).sqrt()
            };
            let fits = if s.used > 0 && s.max_rel <= case.budget.limit() {
                "yes"
            } else {
                "no"
            };
            println!(
                "| {} | {} | {} | {} | {:.2e} | {:.2e} | {} | {:.6e} | {} | {} |",
                case.function,
                case.range,
                s.used,
                name,
                s.max_rel,
                rms,
                fmt_ulp(s.max_ulp),
                s.worst_x,
                case.budget.label(),
                fits
            );
        }
        if case.function == "cbrt" {
            println!(
                "| cbrt | {} | – | micromath f32 | n/a (micromath 2.1 has no cbrt) | | | | {} | – |",
                case.range,
                case.budget.label()
            );
        }
    }
}

/// Nanoseconds per call of `f` over `inputs`, one round of `reps` passes.
fn time_round(inputs: &[f32], out: &mut [f32], reps: usize, f: &impl Fn(f32) -> f32) -> f64 {
    let start = Instant::now();
    for _ in 0..reps {
        for (o, &x) in out.iter_mut().zip(inputs) {
            *o = f(black_box(x));
        }
        black_box(&mut *out);
    }
    start.elapsed().as_secs_f64() * 1e9 / (reps * inputs.len()) as f64
}

fn median(mut v: Vec<f64>) -> f64 {
    v.sort_by(f64::total_cmp);
    v[v.len() / 2]
}

/// Median ns/call of `libm_f` and `mm_f`, rounds interleaved so both see the
/// same machine load. Both are monomorphised (no dynamic dispatch), so each
/// gets the inlining it would get in the kernel.
fn time_pair<F, G>(grid: Grid, libm_f: F, mm_f: Option<G>) -> (f64, Option<f64>)
where
    F: Fn(f32) -> f32,
    G: Fn(f32) -> f32,
{
    const INPUTS: usize = 4096;
    const REPS: usize = 500;
    const ROUNDS: usize = 7;
    let inputs = grid.points(INPUTS);
    let mut out = vec![0.0f32; INPUTS];
    // Warm-up.
    time_round(&inputs, &mut out, REPS / 10, &libm_f);
    if let Some(m) = &mm_f {
        time_round(&inputs, &mut out, REPS / 10, m);
    }
    let mut libm_ns = Vec::with_capacity(ROUNDS);
    let mut mm_ns = Vec::with_capacity(ROUNDS);
    for _ in 0..ROUNDS {
        libm_ns.push(time_round(&inputs, &mut out, REPS, &libm_f));
        if let Some(m) = &mm_f {
            mm_ns.push(time_round(&inputs, &mut out, REPS, m));
        }
    }
    let mm = if mm_ns.is_empty() {
        None
    } else {
        Some(median(mm_ns))
    };
    (median(libm_ns), mm)
}

fn speed_row<F, G>(what: &str, grid: Grid, libm_f: F, mm_f: Option<G>)
where
    F: Fn(f32) -> f32,
    G: Fn(f32) -> f32,
{
    let (l, m) = time_pair(grid, libm_f, mm_f);
    match m {
        Some(m) => println!("| {what} | {l:.2} | {m:.2} | {:.2} |", m / l),
        None => println!("| {what} | {l:.2} | n/a | – |"),
    }
}

fn speed_table() {
    println!(
        "| function (inputs) | libm f32 ns/call | micromath f32 ns/call | ratio micromath/libm |"
    );
    println!("|---|---:|---:|---:|");
    let lin = |lo: f64, hi: f64| Grid::Linear {
        lo,
        hi,
        open_lo: false,
    };
    let log = |lo: f64, hi: f64, sign: f64| Grid::Log { lo, hi, sign };
    // Runtime exponent, so neither side is specialised on a constant.
    let exponent = black_box(1.3f32);
    speed_row(
        "exp ([−40, 40])",
        lin(-40.0, 40.0),
        libm::expf,
        Some(mm_exp),
    );
    speed_row(
        "expm1 ([−1e-2, −1e-9]; micromath exp(x)−1)",
        log(1e-9, 1e-2, -1.0),
        libm::expm1f,
        Some(|x| mm_exp(x) - 1.0),
    );
    speed_row(
        "ln1p ((−0.9, 10]; micromath ln(1+x))",
        Grid::Linear {
            lo: -0.9,
            hi: 10.0,
            open_lo: true,
        },
        libm::log1pf,
        Some(|x| mm_ln(1.0 + x)),
    );
    speed_row(
        "ln ([1e-6, 1e4])",
        log(1e-6, 1e4, 1.0),
        libm::logf,
        Some(mm_ln),
    );
    speed_row(
        "powf (c^1.3, c ∈ [1e-6, 1e4])",
        log(1e-6, 1e4, 1.0),
        |x| libm::powf(x, exponent),
        Some(|x| mm_powf(x, exponent)),
    );
    speed_row(
        "sqrt ([0, 600])",
        lin(0.0, 600.0),
        libm::sqrtf,
        Some(mm_sqrt),
    );
    speed_row(
        "cbrt ([1e-9, 1e6])",
        log(1e-9, 1e6, 1.0),
        libm::cbrtf,
        None::<fn(f32) -> f32>,
    );
    speed_row(
        "cbrt, kernel f32 routine ([1e-9, 1e6])",
        log(1e-9, 1e6, 1.0),
        <f32 as holdup_kernel::Scalar>::cbrt,
        None::<fn(f32) -> f32>,
    );
    speed_row("acos ([−1, 1])", lin(-1.0, 1.0), libm::acosf, Some(mm_acos));
}

fn main() {
    println!("# micromath 2.1 vs libm 0.2.16, f32, against an f64 reference\n");
    println!(
        "Reference: f64 libm on the same f32 input widened to f64 (f64 libm is itself within ~1 ulp of f64, \
         ~1e-16 relative, far below f32 errors). {GRID_POINTS} grid points per range; relative error only where \
         the reference is non-zero (exp: ≥ 1e-30). micromath 2.1 has no expm1, ln_1p or cbrt: the stand-ins \
         are micromath exp(x)−1 and ln(1+x); cbrt is libm only. powf exponents are the f32 values given, \
         widened for the reference.\n"
    );
    println!("## Accuracy\n");
    accuracy_table();
    println!("\n## Host speed\n");
    println!(
        "ns per call over 4096 inputs, black_box on every input and on the output buffer, median of 7 \
         interleaved rounds; noisy shared host, so read the ratio, not the absolute numbers.\n"
    );
    speed_table();
}
