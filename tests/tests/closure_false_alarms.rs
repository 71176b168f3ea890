//! How often the balance-closure alarm fires on a clean, balanced plant.
//!
//! The in-control average run length (ARL₀, in windows) of the two-sided
//! tabular CUSUM is computed by the Markov-chain method of Brook and Evans
//! ("An approach to the probability distribution of CUSUM run length",
//! Biometrika 59, 1972): the statistic is discretised into `m` states, the
//! transition matrix `R` among the in-control states is built from the
//! normal distribution, and the ARL is the first entry of `(I − R)⁻¹·1`.
//! One-sided ARLs combine into the two-sided one as
//! `1/ARL = 1/ARL⁺ + 1/ARL⁻` (Lucas and Crosier, Technometrics 24, 1982;
//! exact for k ≥ 0 and a zero start). The method is checked against the
//! published table in Montgomery, *Introduction to Statistical Quality
//! Control* (k = 1/2: h = 4 → 168 in control and 8.38 at a 1σ shift,
//! h = 5 → 465 and 10.4; the values the kernel's Monte Carlo test also
//! uses).
//!
//! With the replay's defaults (30-minute windows, k = 0.5, h = 7) the
//! expected number of false alarms on a clean log is then printed, and a
//! simulated year of a balanced tank with white meter noise is run through
//! the kernel's `ClosureMonitor`: at most one alarm per 30 days.

use holdup_kernel::diagnostics::{ClosureConfig, ClosureMonitor};
use nalgebra::{DMatrix, DVector};

/// Standard normal CDF (through `erfc`, Abramowitz and Stegun 7.1.2).
fn phi(x: f64) -> f64 {
    0.5 * libm::erfc(-x / std::f64::consts::SQRT_2)
}

/// One-sided upper CUSUM `S ← max(0, S + x − k)`, alarm at `S > h`, on
/// `x ~ N(mu, 1)`: ARL from a zero start, Brook–Evans with `m` states.
fn arl_one_sided(k: f64, h: f64, mu: f64, m: usize) -> f64 {
    let w = 2.0 * h / (2.0 * m as f64 - 1.0);
    let mut a = DMatrix::<f64>::identity(m, m);
    for i in 0..m {
        let si = i as f64 * w;
        for j in 0..m {
            let p = if j == 0 {
                phi(w / 2.0 - si + k - mu)
            } else {
                let sj = j as f64 * w;
                phi(sj + w / 2.0 - si + k - mu) - phi(sj - w / 2.0 - si + k - mu)
            };
            a[(i, j)] -= p;
        }
    }
    let ones = DVector::<f64>::from_element(m, 1.0);
    let x = a.lu().solve(&ones).expect("I − R is regular");
    x[0]
}

/// Two-sided ARL at a mean shift `mu` (σ units).
fn arl(k: f64, h: f64, mu: f64) -> f64 {
    let up = arl_one_sided(k, h, mu, 400);
    let down = arl_one_sided(k, h, -mu, 400);
    1.0 / (1.0 / up + 1.0 / down)
}

/// Brook–Evans against Montgomery's table (three significant figures,
/// so within half a unit of the last place plus 0.5 % for the
/// discretisation).
#[test]
fn markov_chain_arl_matches_the_published_table() {
    for (h, mu, published) in [
        (4.0, 0.0, 168.0),
        (4.0, 1.0, 8.38),
        (5.0, 0.0, 465.0),
        (5.0, 1.0, 10.4),
    ] {
        let a = arl(0.5, h, mu);
        println!("k = 0.5, h = {h}, shift {mu}σ: ARL {a:.2} (published {published})");
        assert!(
            (a - published).abs() <= 0.005 * published + 0.05 * published.log10().ceil(),
            "h {h} shift {mu}: {a} vs {published}"
        );
    }
}

/// The replay's defaults (`[estimator] closure_window = "30 min"`,
/// `cusum_k = 0.5`, `cusum_h = 7`): the computed ARL₀ and what it means
/// per 30 days, and the detection delay for a 1σ and a 2σ shift.
#[test]
fn default_closure_test_raises_at_most_one_false_alarm_in_30_days() {
    let windows_per_30_days = 30.0 * 24.0 * 2.0;
    let arl0 = arl(0.5, 7.0, 0.0);
    let per_30_days = windows_per_30_days / arl0;
    println!(
        "h = 7: ARL₀ {arl0:.0} windows ({:.1} days of 30-min windows): {per_30_days:.2} false alarms per 30 days; \
         ARL at 1σ {:.1} windows, at 2σ {:.1} windows (h = 5: ARL₀ {:.0}, {:.2} per 30 days)",
        arl0 / 48.0,
        arl(0.5, 7.0, 1.0),
        arl(0.5, 7.0, 2.0),
        arl(0.5, 5.0, 0.0),
        windows_per_30_days / arl(0.5, 5.0, 0.0)
    );
    assert!(per_30_days <= 1.0, "{per_30_days}");

    // A simulated year: a 10 m³ tank, 1 L/s in and out with 1 % white
    // noise on each meter, level noise 3 mm on π m² (σ_V = 9.4 L), the
    // residual normalised as the sensor does. Level: the true holdup is
    // constant; the meters' noise is all the balance sees.
    let tick_s = 1.0;
    let q = 1e-3;
    let area = std::f64::consts::PI;
    let cfg = ClosureConfig {
        window_ticks: 1800,
        tick_ms: 1000,
        holdup_noise: area * 0.003,
        net_flow_noise: 0.01 * (2.0f64).sqrt() * q,
        k: 0.5,
        h: 7.0,
    };
    let mut m = ClosureMonitor::new(&cfg).expect("valid");
    let mut rng = Rng(0xC105_0BE5);
    let days = 360u64;
    let mut alarms = 0u32;
    let mut on = false;
    for _ in 0..days * 86_400 {
        let net = (q * (1.0 + 0.01 * rng.normal()) - q * (1.0 + 0.01 * rng.normal())) * tick_s;
        let v = 10.0 + area * 0.003 * rng.normal();
        let a = m.update(Some(v), net).alarm.is_some();
        if a && !on {
            alarms += 1;
        }
        on = a;
    }
    let rate = f64::from(alarms) * 30.0 / days as f64;
    println!(
        "simulated {days} days: {alarms} closure alarms ({rate:.2} per 30 days; expected {:.1} in all)",
        days as f64 * 48.0 / arl0
    );
    // Poisson with mean ≈ 4.9: more than 12 has a chance below 0.2 %.
    assert!(rate <= 1.0, "{alarms} alarms in {days} days");
}

/// SplitMix64 with Box–Muller normals (Steele, Lea and Flood, 2014).
struct Rng(u64);

impl Rng {
    fn uniform(&mut self) -> f64 {
        self.0 = self.0.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut z = self.0;
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        ((z ^ (z >> 31)) >> 11) as f64 / (1u64 << 53) as f64
    }
    fn normal(&mut self) -> f64 {
        let u1 = self.uniform().max(1e-300);
        let u2 = self.uniform();
        (-2.0 * u1.ln()).sqrt() * (2.0 * std::f64::consts::PI * u2).cos()
    }
}
