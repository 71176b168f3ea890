use super::closure::*;
use super::ne107::*;
use super::nis::*;
use super::*;
use crate::observer::Update;
use crate::{Error, Scalar, StatusFlags};
use statrs::distribution::{ChiSquared, ContinuousCDF};
use Quality::{Bad, Good, Uncertain};

/// SplitMix64 (Steele, Lea and Flood, 2014) with Box–Muller normals:
/// a fixed-seed, dependency-free generator for the Monte Carlo tests.
struct Rng {
    state: u64,
    spare: Option<f64>,
}

impl Rng {
    fn new(seed: u64) -> Self {
        Self {
            state: seed,
            spare: None,
        }
    }

    fn next_u64(&mut self) -> u64 {
        self.state = self.state.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut z = self.state;
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        z ^ (z >> 31)
    }

    /// Uniform on (0, 1]: 53 random bits, never 0 (for the logarithm).
    fn uniform(&mut self) -> f64 {
        ((self.next_u64() >> 11) as f64 + 1.0) * (1.0 / (1u64 << 53) as f64)
    }

    fn normal(&mut self) -> f64 {
        if let Some(z) = self.spare.take() {
            return z;
        }
        let r = (-2.0 * self.uniform().ln()).sqrt();
        let t = 2.0 * core::f64::consts::PI * self.uniform();
        self.spare = Some(r * t.sin());
        r * t.cos()
    }
}

fn ok<T, E: core::fmt::Debug>(r: Result<T, E>) -> T {
    match r {
        Ok(v) => v,
        Err(e) => panic!("unexpected error: {e:?}"),
    }
}

// -- CUSUM ------------------------------------------------------------

/// Mean and standard error of the run length to the first alarm of a
/// two-sided CUSUM (k = 0.5, zero start) on N(shift, 1) observations.
fn arl(h: f64, shift: f64, runs: u32, rng: &mut Rng) -> (f64, f64) {
    let mut cusum = ok(Cusum::new(0.5f64, h));
    let (mut sum, mut sum2) = (0.0f64, 0.0f64);
    for _ in 0..runs {
        cusum.reset();
        let mut n = 0u64;
        loop {
            n += 1;
            if cusum.update(shift + rng.normal()).is_some() {
                break;
            }
        }
        let n = n as f64;
        sum += n;
        sum2 += n * n;
    }
    let runs = f64::from(runs);
    let mean = sum / runs;
    let var = (sum2 - runs * mean * mean) / (runs - 1.0);
    (mean, (var / runs).sqrt())
}

/// Average run lengths of the two-sided tabular CUSUM, k = 0.5σ,
/// against the table in Montgomery, *Introduction to Statistical Quality
/// Control* (CUSUM ARL table for k = 1/2, h = 4 and h = 5): 168 / 8.38
/// and 465 / 10.4 in control / for a 1σ shift. The published values have
/// three significant figures, so half a unit in the last place is added
/// to three Monte Carlo standard errors.
#[test]
fn cusum_average_run_lengths_match_published_table() {
    let mut rng = Rng::new(0x5EED_C05A_0001);
    // (h, shift, published ARL, half a unit in its last place, runs)
    let cases = [
        (4.0, 0.0, 168.0, 0.5, 50_000),
        (4.0, 1.0, 8.38, 0.005, 200_000),
        (5.0, 0.0, 465.0, 0.5, 50_000),
        (5.0, 1.0, 10.4, 0.05, 200_000),
    ];
    for (h, shift, published, rounding, runs) in cases {
        let (mean, se) = arl(h, shift, runs, &mut rng);
        let tol = 3.0 * se + rounding;
        println!(
            "h = {h}, shift = {shift}σ: ARL {mean:.3} ± {se:.3} (MC s.e., {runs} runs), \
             published {published}, |diff| {:.3} <= {tol:.3}",
            (mean - published).abs()
        );
        assert!(
            (mean - published).abs() <= tol,
            "h = {h}, shift {shift}: ARL {mean} vs published {published} (tol {tol})"
        );
    }
}

#[test]
fn cusum_basics() {
    assert_eq!(Cusum::new(-0.1f64, 5.0), Err(Error::ConfigNonPositive));
    assert_eq!(Cusum::new(0.5f64, 0.0), Err(Error::ConfigNonPositive));
    assert_eq!(Cusum::new(f64::NAN, 5.0), Err(Error::ConfigNonFinite));
    let mut c = ok(Cusum::new(0.5f64, 4.0));
    // Exact arithmetic: S⁺ climbs by 1.5 per observation of 2.
    assert_eq!(c.update(2.0), None);
    assert_eq!(c.upper(), 1.5);
    assert_eq!(c.update(2.0), None);
    assert_eq!(c.update(2.0), Some(CusumSide::Upper)); // 4.5 > 4
    assert_eq!(c.upper(), 4.5);
    assert_eq!(c.alarm(), Some(CusumSide::Upper));
    // NaN is skipped.
    assert_eq!(c.update(f64::NAN), Some(CusumSide::Upper));
    assert_eq!(c.upper(), 4.5);
    // Limited at 2h = 8.
    for _ in 0..100 {
        c.update(10.0);
    }
    assert_eq!(c.upper(), 8.0);
    // Shift gone (x = 0): falls by k = 0.5 per observation and is no
    // longer above h = 4 after (8 − 4)/0.5 = 8 observations.
    for i in 0..7 {
        assert_eq!(c.update(0.0), Some(CusumSide::Upper), "obs {i}");
    }
    assert_eq!(c.update(0.0), None);
    // The alarm has ended: that side restarts from zero.
    assert_eq!(c.upper(), 0.0);
    // Lower side.
    c.reset();
    for _ in 0..3 {
        c.update(-2.0);
    }
    assert_eq!(c.alarm(), Some(CusumSide::Lower));
    assert_eq!(c.lower(), 4.5);
    assert_eq!(c.upper(), 0.0);
}

// -- Balance closure on a simulated tank --------------------------------

#[derive(Clone, Copy, Debug, PartialEq)]
enum Fault {
    None,
    /// An unmetered outflow of this fraction of the nominal throughput.
    Leak(f64),
    /// The inlet meter reads this factor times the true inflow.
    InletScale(f64),
    /// The outlet meter reads this factor times the true outflow.
    OutletScale(f64),
}

struct Outcome {
    /// Tick and sign of the first alarm.
    first_alarm: Option<(u64, ClosureAlarm)>,
    /// Normalised residuals of the windows before the fault's onset.
    clean: (f64, f64, usize),
    lost: u32,
}

const NOMINAL_FLOW: f64 = 1e-3; // m³/s (3.6 m³/h)
const AREA: f64 = core::f64::consts::PI; // 2 m diameter, m²
const LEVEL_NOISE: f64 = 2e-3; // m
const METER_NOISE: f64 = 1e-5; // m³/s each meter (1 % of nominal)

fn plant_config<S: Scalar>() -> ClosureConfig<S> {
    ClosureConfig {
        window_ticks: 600,
        tick_ms: 1000,
        holdup_noise: S::of(AREA * LEVEL_NOISE),
        net_flow_noise: S::of(METER_NOISE * core::f64::consts::SQRT_2),
        k: S::of(0.5),
        h: S::of(10.0),
    }
}

/// A vertical cylinder, 1 s ticks, inflow stepping every 2 h between
/// 0.6 and 1.4 × nominal and outflow between 0.7 and 1.3 × nominal on a
/// different cycle (the level wanders ±2 m), white noise on both meters
/// and on the level, the level reading missing for 700 ticks in every
/// 20,000 (so a window end is missed in each outage), and the fault
/// switched on at `onset` (tick).
fn run_tank<S: Scalar>(fault: Fault, onset: u64, ticks: u64, seed: u64) -> Outcome {
    let mut rng = Rng::new(seed);
    let mut monitor = ok(ClosureMonitor::<S>::new(&plant_config()));
    let mut volume = 15.0f64; // m³ (level 4.8 m)
    let mut first_alarm = None;
    let (mut sum, mut sum2, mut count) = (0.0, 0.0, 0usize);
    let inflow_cycle = [1.0, 1.4, 0.6, 1.2, 0.8, 1.0];
    let outflow_cycle = [1.0, 0.7, 1.3, 1.0, 1.1, 0.9, 1.0];
    for t in 0..ticks {
        let q_in = NOMINAL_FLOW * inflow_cycle[((t / 7200) % 6) as usize];
        let q_out = NOMINAL_FLOW * outflow_cycle[((t / 6000) % 7) as usize];
        let active = t >= onset;
        let leak = match fault {
            Fault::Leak(f) if active => f * NOMINAL_FLOW,
            _ => 0.0,
        };
        let (in_factor, out_factor) = match fault {
            Fault::InletScale(f) if active => (f, 1.0),
            Fault::OutletScale(f) if active => (1.0, f),
            _ => (1.0, 1.0),
        };
        volume += q_in - q_out - leak;
        let in_read = in_factor * q_in + METER_NOISE * rng.normal();
        let out_read = out_factor * q_out + METER_NOISE * rng.normal();
        let level = volume / AREA + LEVEL_NOISE * rng.normal();
        let holdup = if t % 20_000 < 700 {
            None
        } else {
            Some(S::of(AREA * level))
        };
        let report = monitor.update(holdup, S::of(in_read - out_read));
        if let Some(w) = report.window {
            if !active {
                let x = w.normalised.to_f64();
                sum += x;
                sum2 += x * x;
                count += 1;
            }
        }
        if first_alarm.is_none() {
            if let Some(a) = report.alarm {
                first_alarm = Some((t, a));
            }
        }
    }
    assert!(
        volume > 1.0 && volume < 30.0,
        "simulated level out of range"
    );
    let n = count as f64;
    let mean = sum / n;
    let sd = ((sum2 - n * mean * mean) / (n - 1.0)).sqrt();
    Outcome {
        first_alarm,
        clean: (mean, sd, count),
        lost: monitor.windows_lost(),
    }
}

const DAY: u64 = 86_400;

/// Three clean days (414 windows of 600 + 1 ticks evaluated, 12 lost to
/// level outages) raise no alarm with
/// k = 0.5, h = 10: the two-sided in-control ARL is about 7·10⁴ windows
/// (Siegmund's approximation, `(e^{2Δb} − 2Δb − 1)/(2Δ²)` per side with
/// Δ = 0.5, b = h + 1.166), so a false alarm in the period has
/// probability ≈ 0.6 %. The normalised residuals are N(0, 1) within three
/// standard errors (mean ±3/√n, standard deviation ±3/√(2n)), which checks
/// the noise model `σ_r`.
#[test]
fn closure_no_false_alarm_over_three_clean_days() {
    for seed in [1u64, 2] {
        let out = run_tank::<f64>(Fault::None, u64::MAX, 3 * DAY, seed);
        let (mean, sd, n) = out.clean;
        println!(
            "seed {seed}: {n} windows, residual mean {mean:.3}, sd {sd:.3}, lost {}",
            out.lost
        );
        assert!(
            out.first_alarm.is_none(),
            "false alarm {:?}",
            out.first_alarm
        );
        let n = n as f64;
        assert!(n > 400.0);
        assert!(mean.abs() < 3.0 / n.sqrt(), "mean {mean}");
        assert!((sd - 1.0).abs() < 3.0 / (2.0 * n).sqrt(), "sd {sd}");
        // An outage (700 ticks, longer than a window) loses the window
        // open when it starts, if any: at most one per outage, and the
        // first outage is before any window opened, so at most 12.
        assert!(out.lost >= 6 && out.lost <= 12, "lost {}", out.lost);
    }
    // The same in f32.
    let out = run_tank::<f32>(Fault::None, u64::MAX, 3 * DAY, 3);
    assert!(out.first_alarm.is_none());
    assert!((out.clean.1 - 1.0).abs() < 0.15, "f32 sd {}", out.clean.1);
}

/// Faults of 3 % of the nominal throughput, switched on after a clean
/// day: each window then shifts by about 1.2–2.8 σ_r (the level noise
/// dominates σ_r ≈ 8.9 L; 3 % of 1 L/s over 600 s is 18 L), so the alarm
/// comes within hours, never before the onset, and with the sign the
/// documentation gives.
#[test]
fn closure_alarm_sign_for_leak_and_meter_errors() {
    let cases = [
        (Fault::Leak(0.03), ClosureAlarm::MoreOutThanIn),
        (Fault::InletScale(1.03), ClosureAlarm::MoreOutThanIn),
        (Fault::InletScale(0.97), ClosureAlarm::MoreInThanOut),
        (Fault::OutletScale(1.03), ClosureAlarm::MoreInThanOut),
        (Fault::OutletScale(0.97), ClosureAlarm::MoreOutThanIn),
    ];
    for (i, (fault, expected)) in cases.into_iter().enumerate() {
        for s in 0..2u64 {
            let seed = 100 + 10 * i as u64 + s;
            let out = run_tank::<f64>(fault, DAY, 2 * DAY, seed);
            let (t, alarm) = match out.first_alarm {
                Some(a) => a,
                None => panic!("{fault:?}: no alarm"),
            };
            let delay_h = (t - DAY) as f64 / 3600.0;
            println!("{fault:?} (seed {seed}): {alarm:?} after {delay_h:.2} h");
            assert!(t >= DAY, "{fault:?}: alarm before onset at {t}");
            assert_eq!(alarm, expected, "{fault:?}");
            assert!(delay_h < 6.0, "{fault:?}: alarm after {delay_h} h");
        }
    }
    // And in f32.
    let out = run_tank::<f32>(Fault::Leak(0.03), DAY, 2 * DAY, 7);
    assert!(matches!(out.first_alarm, Some((t, ClosureAlarm::MoreOutThanIn)) if t >= DAY));
}

#[test]
fn closure_windows_exact_arithmetic() {
    let config = ClosureConfig {
        window_ticks: 4,
        tick_ms: 1000,
        holdup_noise: 0.5f64,
        net_flow_noise: 0.0,
        k: 0.5,
        h: 2.0,
    };
    let mut m = ok(ClosureMonitor::new(&config));
    assert_eq!(m.residual_sigma(), 0.5 * core::f64::consts::SQRT_2);
    // No start reading yet: flows ignored.
    assert_eq!(m.update(None, 1.0).window, None);
    // Start at 10; four ticks of +1 m³; end reading 13 → r = −1.
    assert_eq!(m.update(Some(10.0), 5.0).window, None);
    for _ in 0..3 {
        assert_eq!(m.update(Some(99.0), 1.0).window, None);
    }
    let w = m.update(Some(13.0), 1.0).window;
    assert_eq!(w.map(|w| w.volume), Some(-1.0));
    assert_eq!(m.windows_evaluated(), 1);
    // Next tick only gives the start reading (its flow is not counted).
    assert_eq!(m.update(Some(20.0), 1000.0).window, None);
    for _ in 0..3 {
        m.update(None, 0.5);
    }
    // Missing end reading: window lost.
    assert_eq!(m.update(None, 0.5).window, None);
    assert_eq!(m.windows_lost(), 1);
    // Non-finite flow loses the open window; this tick's reading starts
    // the next.
    m.update(Some(1.0), 0.0);
    m.update(Some(1.0), f64::NAN);
    assert_eq!(m.windows_lost(), 2);
    for _ in 0..3 {
        m.update(None, 0.0);
    }
    // r = 1 + 2 − 1 = 2 m³ → x = 2/0.707 = 2.83; S⁺ = 2.33 > h = 2.
    let r = m.update(Some(3.0), 0.0);
    assert_eq!(r.window.map(|w| w.volume), Some(2.0));
    assert_eq!(r.alarm, Some(ClosureAlarm::MoreInThanOut));
    m.reset();
    assert_eq!(m.alarm(), None);
}

#[test]
fn closure_config_errors() {
    let good = ClosureConfig {
        window_ticks: 10,
        tick_ms: 1000,
        holdup_noise: 0.01f64,
        net_flow_noise: 1e-5,
        k: 0.5,
        h: 5.0,
    };
    assert!(ClosureMonitor::new(&good).is_ok());
    let bad = |c: ClosureConfig<f64>| ClosureMonitor::new(&c).err();
    assert_eq!(
        bad(ClosureConfig { tick_ms: 0, ..good }),
        Some(Error::ConfigZeroTick)
    );
    assert_eq!(
        bad(ClosureConfig {
            window_ticks: 0,
            ..good
        }),
        Some(Error::ConfigNonPositive)
    );
    assert_eq!(
        bad(ClosureConfig {
            holdup_noise: -1.0,
            ..good
        }),
        Some(Error::ConfigNonPositive)
    );
    assert_eq!(
        bad(ClosureConfig {
            holdup_noise: 0.0,
            net_flow_noise: 0.0,
            ..good
        }),
        Some(Error::ConfigNonPositive)
    );
    assert_eq!(
        bad(ClosureConfig {
            net_flow_noise: f64::INFINITY,
            ..good
        }),
        Some(Error::ConfigNonFinite)
    );
    assert_eq!(
        bad(ClosureConfig { h: 0.0, ..good }),
        Some(Error::ConfigNonPositive)
    );
    assert_eq!(
        bad(ClosureConfig {
            k: f64::NAN,
            ..good
        }),
        Some(Error::ConfigNonFinite)
    );
}

// -- Chi-square bounds and NIS -------------------------------------------

/// Exact table (ν ≤ 32) against statrs' inverse CDF to 1e-9 relative
/// (statrs inverts its CDF numerically; the table is bisected to full
/// f64 precision); Wilson–Hilferty above against statrs, its worst
/// relative error over 33 ≤ ν ≤ 2000 printed and held below 0.3 % for
/// P ≤ 0.99 and 0.8 % for P = 0.999 (both at the lower bound, ν = 33).
#[test]
fn chi_square_bounds_against_statrs() {
    for (p, limit) in [(0.9f64, 3e-3), (0.95, 3e-3), (0.99, 3e-3), (0.999, 8e-3)] {
        let b = ok(ChiSquareBounds::new(p));
        let bf = ok(ChiSquareBounds::new(p as f32));
        let tail = 0.5 * (1.0 - p);
        let mut worst: (f64, u32, &str) = (0.0, 0, "");
        for nu in 1..=2000u32 {
            let d = ok(ChiSquared::new(f64::from(nu)));
            let lo = d.inverse_cdf(tail);
            let hi = d.inverse_cdf(1.0 - tail);
            let e_lo = (b.lower(nu) - lo).abs() / lo;
            let e_hi = (b.upper(nu) - hi).abs() / hi;
            if nu as usize <= EXACT_DOF {
                assert!(
                    e_lo < 1e-9 && e_hi < 1e-9,
                    "p {p} ν {nu}: {e_lo:e} {e_hi:e}"
                );
                // The f32 table is for P rounded to f32.
                let tf = 0.5 * (1.0 - f64::from(p as f32));
                let (lo, hi) = (d.inverse_cdf(tf), d.inverse_cdf(1.0 - tf));
                let f_lo = (f64::from(bf.lower(nu)) - lo).abs() / lo;
                let f_hi = (f64::from(bf.upper(nu)) - hi).abs() / hi;
                assert!(f_lo < 1e-6 && f_hi < 1e-6, "f32 p {p} ν {nu}");
            } else {
                if e_lo > worst.0 {
                    worst = (e_lo, nu, "lower");
                }
                if e_hi > worst.0 {
                    worst = (e_hi, nu, "upper");
                }
            }
        }
        println!(
            "P = {p}: Wilson–Hilferty worst relative error {:.2e} ({} bound, ν = {})",
            worst.0, worst.2, worst.1
        );
        assert!(worst.0 < limit, "P = {p}: {worst:?}");
    }
    assert_eq!(ChiSquareBounds::new(1.0f64), Err(Error::ConfigProbability));
    assert_eq!(ChiSquareBounds::new(0.0f64), Err(Error::ConfigProbability));
    assert_eq!(
        ChiSquareBounds::new(f64::NAN),
        Err(Error::ConfigProbability)
    );
    let b = ok(ChiSquareBounds::new(0.95f64));
    assert_eq!(b.lower(0), 0.0);
    assert_eq!(b.upper(0), 0.0);
    assert!(b.upper(u32::MAX).is_finite());
}

/// Bounds rebuilt from their quantiles are the same bounds (what a target
/// without double precision compiles in); numbers that cannot be chi-square
/// bounds are refused, each with its error.
#[test]
fn bounds_from_quantiles_round_trip_and_are_checked() {
    let b = ok(ChiSquareBounds::new(0.999f32));
    let (p, z, lo, hi) = b.quantiles();
    assert_eq!(ChiSquareBounds::from_quantiles(p, z, lo, hi), Ok(b));
    for nu in [1, 7, 32, 120, 5000] {
        let c = ok(ChiSquareBounds::from_quantiles(p, z, lo, hi));
        assert_eq!(c.lower(nu).to_bits(), b.lower(nu).to_bits());
        assert_eq!(c.upper(nu).to_bits(), b.upper(nu).to_bits());
    }
    let from = |p: f32, z: f32, lo: [f32; EXACT_DOF], hi: [f32; EXACT_DOF]| {
        ChiSquareBounds::from_quantiles(p, z, lo, hi).err()
    };
    assert_eq!(from(1.0, z, lo, hi), Some(Error::ConfigProbability));
    assert_eq!(from(f32::NAN, z, lo, hi), Some(Error::ConfigProbability));
    assert_eq!(from(p, f32::NAN, lo, hi), Some(Error::ConfigNonFinite));
    let mut inf = hi;
    inf[31] = f32::INFINITY;
    assert_eq!(from(p, z, lo, inf), Some(Error::ConfigNonFinite));
    assert_eq!(from(p, 0.0, lo, hi), Some(Error::ConfigNonPositive));
    assert_eq!(from(p, z, hi, lo), Some(Error::ConfigNonPositive));
    let mut negative = lo;
    negative[0] = -1e-3;
    assert_eq!(from(p, z, negative, hi), Some(Error::ConfigNonPositive));
}

/// Consistent filter (innovations exactly chi-square with 2 degrees of
/// freedom per update, W = 20, P = 0.95): each side flags in 2.5 % of the
/// windows. Innovations √2 times too large: overconfident; √2 times too
/// small: too cautious.
#[test]
fn nis_monitor_flags_mismatch() {
    let bounds = ok(ChiSquareBounds::new(0.95f64));
    let mut rng = Rng::new(42);
    for (scale, expect_over, expect_under) in
        [(1.0, 0.025, 0.025), (2.0, 0.8, 0.0), (0.5, 0.0, 0.75)]
    {
        let mut m = ok(NisMonitor::<f64, 20>::new(bounds));
        let (mut over, mut under, mut tests) = (0u32, 0u32, 0u32);
        for i in 0..200_000 {
            let a = rng.normal();
            let b = rng.normal();
            let r = m.update(scale * (a * a + b * b), 2);
            if i < 19 {
                assert_eq!(r.state, NisState::Filling);
                continue;
            }
            if i % 20 != 19 {
                continue; // the window is open: the last result stands
            }
            assert_eq!(r.dof, 40);
            tests += 1;
            match r.state {
                NisState::Overconfident => over += 1,
                NisState::TooCautious => under += 1,
                NisState::Consistent => {}
                NisState::Filling => panic!("still filling"),
            }
        }
        assert_eq!(tests, 10_000);
        let fo = f64::from(over) / f64::from(tests);
        let fu = f64::from(under) / f64::from(tests);
        println!("NIS scale {scale}: overconfident {fo:.4}, too cautious {fu:.4}");
        if scale == 1.0 {
            // 10⁴ independent windows: s.e. of a 2.5 % fraction 0.0016;
            // the tolerance is six of them.
            assert!((fo - expect_over).abs() < 0.01, "{fo}");
            assert!((fu - expect_under).abs() < 0.01, "{fu}");
        } else if scale > 1.0 {
            assert!(fo > expect_over && fu < 1e-3, "{fo} {fu}");
        } else {
            assert!(fu > expect_under && fo < 1e-3, "{fo} {fu}");
        }
    }
}

#[test]
fn nis_monitor_edges() {
    let bounds = ok(ChiSquareBounds::new(0.99f32));
    assert_eq!(
        NisMonitor::<f32, 0>::new(bounds).err(),
        Some(Error::ConfigNonPositive)
    );
    let mut m = ok(NisMonitor::<f32, 3>::new(bounds));
    assert_eq!(m.update(f32::NAN, 1).state, NisState::Filling);
    assert_eq!(m.update(-1.0, 1).state, NisState::Filling);
    assert_eq!(m.update(1.0, 0).state, NisState::Filling);
    assert_eq!(m.rejected(), 3);
    m.update(1.0, 1);
    m.update(1.0, 2);
    let r = m.update(1.0, 1);
    assert_eq!((r.state, r.sum, r.dof), (NisState::Consistent, 3.0, 4));
    // Exact ν = 4 bounds at P = 0.99: 0.2070 and 14.86 (statrs above).
    assert!((r.lower - 0.206_990_8).abs() < 1e-5 && (r.upper - 14.860_26).abs() < 1e-3);
    // A new window opens: the last result stands until it closes.
    let r = m.update(100.0, 1);
    assert_eq!((r.state, r.dof), (NisState::Consistent, 4));
    m.update(1.0, 1);
    let r = m.update(1.0, 1); // window: 100, 1, 1
    assert_eq!((r.state, r.sum, r.dof), (NisState::Overconfident, 102.0, 3));
    m.update(5.0, 1); // open again
    m.reset();
    assert_eq!(m.state(), NisState::Filling);
    m.update(0.0, 3);
    m.update(0.0, 1);
    let r = m.update(0.0, 1);
    assert_eq!((r.state, r.dof), (NisState::TooCautious, 5));
    // Observer updates: accepted and gate-rejected both enter (dof 1);
    // skipped ones do not.
    m.reset();
    m.record(&Update::Accepted { nis: 0.5 });
    m.record(&Update::Skipped);
    m.record(&Update::Rejected { nis: 30.0 });
    let r = m.record(&Update::Accepted { nis: 0.5 });
    assert_eq!((r.state, r.sum, r.dof), (NisState::Overconfident, 31.0, 3));
    assert_eq!(m.rejected(), 3); // a lifetime count: neither reset nor Skipped changes it
}

// -- NE107 mapping ---------------------------------------------------------

fn healthy() -> DiagnosticInputs<2> {
    DiagnosticInputs::healthy()
}

#[test]
fn ne107_each_rule_alone() {
    use DeviceStatus as D;
    type Case = (DiagnosticInputs<2>, Reasons, D, Quality, [Quality; 2]);
    let with = |f: &dyn Fn(&mut DiagnosticInputs<2>)| {
        let mut i = healthy();
        f(&mut i);
        i
    };
    let flags = |fl: StatusFlags| with(&|i| i.flags = fl);
    let cases: [Case; 22] = [
        (healthy(), Reasons::NONE, D::Good, Good, [Good, Good]),
        (
            flags(StatusFlags::NUMERIC_FAULT),
            Reasons::NUMERIC_FAULT,
            D::Failure,
            Good,
            [Bad, Bad],
        ),
        (
            with(&|i| i.flow = Bad),
            Reasons::FLOW_BAD,
            D::Failure,
            Uncertain,
            [Bad, Bad],
        ),
        (
            with(&|i| {
                i.flow = Bad;
                i.level = Uncertain;
            }),
            Reasons::FLOW_BAD | Reasons::NO_HOLDUP_SOURCE | Reasons::LEVEL_UNCERTAIN,
            D::Failure,
            Bad,
            [Bad, Bad],
        ),
        (
            with(&|i| i.feed = [Good, Bad]),
            Reasons::FEED_BAD,
            D::Failure,
            Good,
            [Good, Bad],
        ),
        (
            with(&|i| i.function_check = true),
            Reasons::FUNCTION_CHECK,
            D::FunctionCheck,
            Uncertain,
            [Uncertain, Uncertain],
        ),
        (
            flags(StatusFlags::EMPTY),
            Reasons::LOW_HOLDUP,
            D::OutOfSpecification,
            Good,
            [Uncertain; 2],
        ),
        (
            flags(StatusFlags::NEAR_EMPTY),
            Reasons::LOW_HOLDUP,
            D::OutOfSpecification,
            Good,
            [Uncertain; 2],
        ),
        (
            flags(StatusFlags::OVERFLOW),
            Reasons::OVERFLOW,
            D::OutOfSpecification,
            Uncertain,
            [Uncertain; 2],
        ),
        (
            flags(StatusFlags::OUTLET_LIMITED),
            Reasons::OUTLET_LIMITED,
            D::OutOfSpecification,
            Uncertain,
            [Uncertain; 2],
        ),
        (
            with(&|i| i.closure = Some(ClosureAlarm::MoreOutThanIn)),
            Reasons::CLOSURE,
            D::OutOfSpecification,
            Uncertain,
            [Uncertain; 2],
        ),
        (
            with(&|i| i.closure = Some(ClosureAlarm::MoreInThanOut)),
            Reasons::CLOSURE,
            D::OutOfSpecification,
            Uncertain,
            [Uncertain; 2],
        ),
        (
            with(&|i| i.nis = NisState::Overconfident),
            Reasons::NIS_OVERCONFIDENT,
            D::OutOfSpecification,
            Uncertain,
            [Uncertain; 2],
        ),
        (
            flags(StatusFlags::INPUT_NOT_FINITE),
            Reasons::INPUT_NOT_FINITE,
            D::OutOfSpecification,
            Good,
            [Uncertain; 2],
        ),
        (
            with(&|i| i.temperature = Bad),
            Reasons::TEMPERATURE_BAD,
            D::OutOfSpecification,
            Good,
            [Uncertain; 2],
        ),
        (
            with(&|i| i.level = Bad),
            Reasons::LEVEL_BAD,
            D::MaintenanceRequired,
            Uncertain,
            [Good; 2],
        ),
        (
            with(&|i| i.flow = Uncertain),
            Reasons::FLOW_UNCERTAIN,
            D::MaintenanceRequired,
            Uncertain,
            [Uncertain; 2],
        ),
        (
            with(&|i| i.level = Uncertain),
            Reasons::LEVEL_UNCERTAIN,
            D::MaintenanceRequired,
            Uncertain,
            [Good; 2],
        ),
        (
            with(&|i| i.temperature = Uncertain),
            Reasons::TEMPERATURE_UNCERTAIN,
            D::MaintenanceRequired,
            Good,
            [Uncertain; 2],
        ),
        (
            with(&|i| i.feed = [Uncertain, Good]),
            Reasons::FEED_UNCERTAIN,
            D::MaintenanceRequired,
            Good,
            [Uncertain, Good],
        ),
        (
            with(&|i| i.nis = NisState::TooCautious),
            Reasons::NIS_TOO_CAUTIOUS,
            D::MaintenanceRequired,
            Good,
            [Good; 2],
        ),
        (
            flags(StatusFlags::INPUT_NEGATIVE),
            Reasons::INPUT_NEGATIVE,
            D::MaintenanceRequired,
            Good,
            [Good; 2],
        ),
    ];
    for (i, (inputs, reasons, status, holdup, conc)) in cases.iter().enumerate() {
        let d = diagnose(inputs);
        assert_eq!(d.reasons, *reasons, "case {i}");
        assert_eq!(d.status, *status, "case {i}");
        assert_eq!(d.holdup, *holdup, "case {i}");
        assert_eq!(d.concentrations, *conc, "case {i}");
    }
    // Flags that lower nothing, and NIS still filling.
    let quiet = with(&|i| {
        i.flags = StatusFlags::AMOUNT_CLAMPED | StatusFlags::METHOD_FALLBACK;
        i.nis = NisState::Filling;
    });
    let d = diagnose(&quiet);
    assert_eq!(
        (d.status, d.holdup, d.reasons),
        (D::Good, Good, Reasons::NONE)
    );
}

#[test]
fn ne107_precedence_and_worst_quality() {
    use DeviceStatus as D;
    // C over S and M; qualities the worst of all rules.
    let mut i = healthy();
    i.function_check = true;
    i.closure = Some(ClosureAlarm::MoreOutThanIn);
    i.nis = NisState::TooCautious;
    i.feed = [Good, Bad];
    let d = diagnose(&i);
    assert_eq!(d.status, D::Failure); // the bad feed outranks C
    assert_eq!(d.concentrations, [Uncertain, Bad]);
    i.feed = [Good, Good];
    let d = diagnose(&i);
    assert_eq!(d.status, D::FunctionCheck);
    assert_eq!((d.holdup, d.concentrations), (Uncertain, [Uncertain; 2]));
    assert_eq!(
        d.reasons.names().collect::<std::vec::Vec<_>>(),
        ["function_check", "closure", "nis_too_cautious"]
    );
    // S over M.
    let mut i = healthy();
    i.flags = StatusFlags::NEAR_EMPTY | StatusFlags::INPUT_NEGATIVE;
    i.level = Bad;
    let d = diagnose(&i);
    assert_eq!(d.status, D::OutOfSpecification);
    assert_eq!((d.holdup, d.concentrations), (Uncertain, [Uncertain; 2]));
    // Order of the categories and letters.
    assert!(D::Good < D::MaintenanceRequired);
    assert!(D::MaintenanceRequired < D::OutOfSpecification);
    assert!(D::OutOfSpecification < D::FunctionCheck);
    assert!(D::FunctionCheck < D::Failure);
    assert_eq!(
        [
            D::Failure,
            D::FunctionCheck,
            D::OutOfSpecification,
            D::MaintenanceRequired,
            D::Good
        ]
        .map(D::letter),
        ['F', 'C', 'S', 'M', '-']
    );
    // Rule table and bits stay in step.
    for (n, (r, name)) in RULES.iter().zip(RULE_NAMES).enumerate() {
        assert_eq!(r.reason.bits(), 1 << n, "rule {n} ({name})");
    }
}
