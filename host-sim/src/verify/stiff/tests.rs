//! Checks of the references of the stiff cases themselves: each closed form
//! or quadrature against an integration of the balance written here (not
//! the kernel), and the Gauss–Legendre rule against exact integrals and its
//! published table.

use super::*;

/// Classical fourth-order Runge–Kutta (Kutta, 1901; any numerical-analysis
/// text) for `y' = f(t, y)` from `y(0) = y0` with step `h`; `y` at each time
/// of `at` (increasing multiples of `h`).
fn rk4<const N: usize>(
    f: impl Fn(f64, &[f64; N]) -> [f64; N],
    y0: [f64; N],
    h: f64,
    at: &[f64],
) -> Vec<[f64; N]> {
    let axpy = |y: &[f64; N], a: f64, k: &[f64; N]| {
        let mut out = *y;
        for (o, ki) in out.iter_mut().zip(k.iter()) {
            *o += a * ki;
        }
        out
    };
    let mut y = y0;
    let mut n: u64 = 0;
    let mut out = Vec::new();
    for &t_end in at {
        let n_end = (t_end / h).round() as u64;
        while n < n_end {
            let t = n as f64 * h;
            let k1 = f(t, &y);
            let k2 = f(t + 0.5 * h, &axpy(&y, 0.5 * h, &k1));
            let k3 = f(t + 0.5 * h, &axpy(&y, 0.5 * h, &k2));
            let k4 = f(t + h, &axpy(&y, h, &k3));
            for i in 0..N {
                y[i] += h / 6.0 * (k1[i] + 2.0 * k2[i] + 2.0 * k3[i] + k4[i]);
            }
            n += 1;
        }
        out.push(y);
    }
    out
}

fn worst<const N: usize>(a: &[f64; N], b: &[f64; N]) -> f64 {
    a.iter()
        .zip(b.iter())
        .map(|(x, y)| rel(*x, *y))
        .fold(0.0, f64::max)
}

#[test]
fn gauss_legendre_8_matches_the_table_and_is_exact_to_degree_15() {
    // Abramowitz & Stegun, Handbook of Mathematical Functions, table 25.4,
    // n = 8 (from memory): positive nodes and their weights.
    let table = [
        (0.183_434_642_495_650, 0.362_683_783_378_362),
        (0.525_532_409_916_329, 0.313_706_645_877_887),
        (0.796_666_477_413_627, 0.222_381_034_453_374),
        (0.960_289_856_497_536, 0.101_228_536_290_376),
    ];
    let (x, w) = gauss_legendre::<8>();
    for (xt, wt) in table {
        for sign in [1.0, -1.0] {
            let i = x
                .iter()
                .position(|&xi| (xi - sign * xt).abs() < 1e-14)
                .unwrap_or_else(|| panic!("no node at {} in {x:?}", sign * xt));
            assert!((w[i] - wt).abs() < 1e-14, "weight {} vs {wt}", w[i]);
        }
    }
    // ∫_{-1}^{1} x^d dx = 2/(d + 1) for even d, 0 for odd: exact up to
    // d = 2M − 1 = 15, not at 16.
    for d in 0..=16i32 {
        let q: f64 = x.iter().zip(w.iter()).map(|(xi, wi)| wi * xi.powi(d)).sum();
        let exact = if d % 2 == 0 {
            2.0 / f64::from(d + 1)
        } else {
            0.0
        };
        if d <= 15 {
            assert!((q - exact).abs() < 1e-15, "degree {d}: {q} vs {exact}");
        } else {
            assert!((q - exact).abs() > 1e-6, "degree 16 should not be exact");
        }
    }
}

#[test]
fn composite_gauss_integrates_an_exponential() {
    // ∫_0^1 e^{-30 s} ds = (1 − e^{-30})/30 (elementary).
    let q = composite_gauss(|s| (-30.0 * s).exp(), 0.0, 1.0, 64);
    let exact = (1.0 - (-30.0f64).exp()) / 30.0;
    assert!(rel(q, exact) < 1e-14, "{q} vs {exact}");
}

#[test]
fn a_to_b_closed_form_solves_the_balance() {
    let lam = STIFF_Q / STIFF_V;
    let (feed, start) = ([STIFF_AF, 0.0], [50.0, 200.0]);
    // RK4 error per step is about (k·h)⁵/120 on the fast mode: 2e-15 at
    // k·h = 3e-3.
    for (k, h, at) in [
        (3.0, 1e-3, vec![0.1, 1.0, 2.0, 10.0, 300.0, 3000.0]),
        (30.0, 1e-4, vec![0.01, 0.1, 0.5, 1.0, 50.0]),
    ] {
        let f = |_t: f64, y: &[f64; 2]| {
            [
                lam * (feed[0] - y[0]) - k * y[0],
                lam * (feed[1] - y[1]) + k * y[0],
            ]
        };
        for (t, y) in at.iter().zip(rk4(f, start, h, &at)) {
            let c = a_to_b_closed_form(lam, k, feed, start, *t);
            assert!(worst(&c, &y) < 1e-10, "k {k} t {t}: {c:?} vs RK4 {y:?}");
        }
    }
}

#[test]
fn reversible_closed_form_solves_the_balance() {
    let lam = STIFF_Q / STIFF_V;
    let (feed, start) = ([STIFF_AF, 100.0], [50.0, 200.0]);
    let at = [0.1, 1.0, 2.0, 10.0, 300.0, 3000.0];
    for (kf, kr) in [(3.0, 1.5), (0.01, 0.005)] {
        let f = |_t: f64, y: &[f64; 2]| {
            let r = kf * y[0] - kr * y[1];
            [lam * (feed[0] - y[0]) - r, lam * (feed[1] - y[1]) + r]
        };
        for (t, y) in at.iter().zip(rk4(f, start, 1e-3, &at)) {
            let c = reversible_closed_form(lam, kf, kr, feed, start, *t);
            assert!(worst(&c, &y) < 1e-10, "kf {kf} t {t}: {c:?} vs RK4 {y:?}");
        }
        // Long after the step, both balances are at rest.
        let c = reversible_closed_form(lam, kf, kr, feed, start, 1e6);
        let r = kf * c[0] - kr * c[1];
        let residual = [lam * (feed[0] - c[0]) - r, lam * (feed[1] - c[1]) + r];
        for x in residual {
            assert!(x.abs() < 1e-12 * lam * feed[0], "residual {residual:?}");
        }
    }
}

#[test]
fn fill_draw_reference_solves_the_balance() {
    // Amounts, not concentrations, so the holdup's change needs no extra
    // term: n_A' = q_in·A_f − q_out·n_A/V(t) − k·n_A, n_B likewise + k·n_A.
    let at = [1.0, 10.0, 100.0, 600.0];
    for k in [3.0, 0.01] {
        for (q_in, q_out) in [(4e-3, 2e-3), (1e-3, 3e-3)] {
            let fd = FillDraw::case(q_in, q_out, k);
            let f = |t: f64, n: &[f64; 2]| {
                let d = q_out / fd.volume(t);
                [
                    q_in * fd.feed[0] - d * n[0] - k * n[0],
                    q_in * fd.feed[1] - d * n[1] + k * n[0],
                ]
            };
            let ode = rk4(f, fd.start.map(|c| c * fd.v0), 1e-3, &at);
            let mut n_a = fd.start[0] * fd.v0;
            let mut checked = 0;
            for s in 1..=600u32 {
                let t = f64::from(s);
                n_a = fd.advance_a(n_a, t - 1.0, t);
                if let Some(i) = at.iter().position(|&x| x == t) {
                    let v = fd.volume(t);
                    let c = [n_a / v, fd.total(t) - n_a / v];
                    let y = ode[i].map(|n| n / v);
                    assert!(
                        worst(&c, &y) < 1e-10,
                        "k {k}, q_in {q_in}, t {t}: {c:?} vs RK4 {y:?}"
                    );
                    checked += 1;
                }
            }
            assert_eq!(checked, at.len());
        }
    }
}
