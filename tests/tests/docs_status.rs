//! `docs/status.md` documents every NE107 reason and every conditioning
//! flag the kernel can report: each name from the kernel's own tables
//! appears there in backticks (a new reason or flag without its rule in the
//! docs fails here).

use holdup_kernel::diagnostics::Reasons;
use holdup_kernel::SignalFlags;

fn doc() -> String {
    let p = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("../docs/status.md");
    std::fs::read_to_string(&p).unwrap_or_else(|e| panic!("{}: {e}", p.display()))
}

#[test]
fn every_reason_is_documented_with_its_rule() {
    let doc = doc();
    let mut n = 0;
    for bit in 0..32 {
        for name in Reasons::from_bits(1 << bit).names() {
            n += 1;
            assert!(
                doc.contains(&format!("| `{name}` |")),
                "reason {name} is not in docs/status.md's table"
            );
        }
    }
    assert_eq!(
        n, 19,
        "the kernel's reason table changed: update docs/status.md"
    );
}

#[test]
fn every_conditioning_flag_is_documented() {
    let doc = doc();
    let mut n = 0;
    for bit in 0..16 {
        for name in SignalFlags::from_bits(1 << bit).names() {
            n += 1;
            assert!(
                doc.contains(&format!("`{name}`")),
                "flag {name} is not in docs/status.md"
            );
        }
    }
    assert_eq!(n, 11);
}
