use super::covariance::{identity, transition};
use crate::linalg::solve_matrix;

/// The block transition equals the Cayley transform solved as one
/// `D × D` system (the definition), for a Jacobian with a zero bias row.
#[test]
fn block_transition_matches_the_full_cayley_solve() {
    let f: [[f64; 5]; 5] = [
        [-2e-4, 0.0, 0.0, 0.0, -1.7e-4],
        [3e-3, -4e-4, -2e-5, 0.0, -1.6e-2],
        [1e-3, -1e-5, -5e-4, 0.0, 0.0],
        [-2e-3, 1e-5, 2e-5, -3e-4, 0.0],
        [0.0, 0.0, 0.0, 0.0, 0.0],
    ];
    for h in [1.0, 60.0, 3600.0] {
        let (phi, cayley) = transition(&f, h, 4);
        assert!(cayley);
        let mut a = identity::<f64, 5>();
        let mut full = identity::<f64, 5>();
        for i in 0..5 {
            for j in 0..5 {
                a[i][j] -= 0.5 * h * f[i][j];
                full[i][j] += 0.5 * h * f[i][j];
            }
        }
        solve_matrix(&mut a, &mut full, 5).unwrap();
        // The bias row is exactly a row of the identity.
        for j in 0..5 {
            assert_eq!(phi[4][j], if j == 4 { 1.0 } else { 0.0 });
        }
        for i in 0..5 {
            for j in 0..5 {
                assert!(
                    (phi[i][j] - full[i][j]).abs() <= 1e-14 * (1.0 + full[i][j].abs()),
                    "h {h}: Φ[{i}][{j}] {} against {}",
                    phi[i][j],
                    full[i][j]
                );
            }
        }
    }
}

/// A reset from a lab result: the concentration and its σ are the ones
/// given, uncorrelated with the holdup and the bias (first-order
/// propagation of `c = n/V`, the filter's own), pending samples dropped,
/// and the holdup untouched.
#[test]
fn a_reset_concentration_is_independent_of_the_rest() {
    use crate::model::Inputs;
    let mut o = crate::sensor::tests::observer::<f64>(100.0);
    let u = Inputs {
        inlet_flows: [1.2e-3],
        feed: [[50.0]],
        outlet_flows: [1e-3],
        temperature: 293.15,
    };
    for k in 0..600 {
        o.tick(&u);
        if k % 10 == 0 {
            o.update_level(o.vessel().level() + 0.002);
        }
    }
    o.lab_drawn(1, 0, 0.5).unwrap();
    let v_before = o.vessel().volume();
    assert!(o.reset_concentration(0, 42.0, 0.5));
    let (c, sc) = o.concentrations();
    assert!(
        (c[0] - 42.0).abs() < 1e-12 && (sc[0] - 0.5).abs() < 1e-12,
        "{c:?} {sc:?}"
    );
    assert_eq!(o.vessel().volume(), v_before);
    let p = o.covariance();
    let v = o.vessel().volume();
    for k in [0, 2] {
        // Cov(c, x_k) = (Cov(n, x_k) − c·Cov(V, x_k)) / V.
        let cov = (p[1][k] - c[0] * p[0][k]) / v;
        assert!(
            cov.abs() < 1e-12 * p[k][k].sqrt().max(1.0),
            "state {k}: {cov}"
        );
    }
    assert_eq!(o.pending_lab_samples(), 0);
    // Refused: out of range, negative, no σ.
    assert!(!o.reset_concentration(1, 1.0, 0.5));
    assert!(!o.reset_concentration(0, -1.0, 0.5));
    assert!(!o.reset_concentration(0, 1.0, 0.0));
}
