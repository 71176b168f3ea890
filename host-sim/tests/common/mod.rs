//! Helpers shared by the integration tests: the tree's root, a scratch
//! folder per test, and the check that committed fixtures match their
//! generators.

#![allow(dead_code)] // each test binary uses its own subset

use std::path::{Path, PathBuf};

/// The top of the tree.
pub fn root() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("..")
}

/// A fresh scratch folder named `name` under the target's temporary folder.
pub fn out_dir(name: &str) -> PathBuf {
    let d = Path::new(env!("CARGO_TARGET_TMPDIR")).join(name);
    let _ = std::fs::remove_dir_all(&d);
    d
}

/// Every `(path, text)` must be on disk as generated; with
/// `HOLDUP_WRITE_FIXTURES` set, they are written first.
pub fn check_fixtures(files: Vec<(PathBuf, String)>) {
    let write = std::env::var_os("HOLDUP_WRITE_FIXTURES").is_some();
    for (path, text) in files {
        if write {
            std::fs::create_dir_all(path.parent().expect("fixture has a folder")).expect("mkdir");
            std::fs::write(&path, &text).expect("write fixture");
        }
        let on_disk = std::fs::read_to_string(&path).unwrap_or_else(|e| {
            panic!("{}: {e} (run with HOLDUP_WRITE_FIXTURES=1)", path.display())
        });
        assert!(
            on_disk == text,
            "{} differs from its generator (run with HOLDUP_WRITE_FIXTURES=1)",
            path.display()
        );
    }
}
