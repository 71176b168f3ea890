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
