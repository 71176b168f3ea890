//! Every analytic case of `holdup verify` (closed forms from outside the
//! project, sources named in `holdup_sim::verify`) must pass in both
//! precisions.

use holdup_sim::verify;

#[test]
fn every_verification_case_passes() {
    let results = verify::run_all();
    println!("{}", verify::table(&results));
    assert_eq!(results.len(), 30, "one f32 and one f64 run per case");
    // Every failing case is listed, not only the first.
    let failed: Vec<String> = results
        .iter()
        .filter(|r| !r.passed())
        .map(|r| {
            format!(
                "{} ({}) max rel error {:e} > tolerance {:e}; source: {}",
                r.name, r.scalar, r.max_rel_error, r.tolerance, r.source
            )
        })
        .collect();
    assert!(
        failed.is_empty(),
        "{} of {} cases fail:\n{}",
        failed.len(),
        results.len(),
        failed.join("\n")
    );
}
