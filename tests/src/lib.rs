//! Cross-crate tests of holdup live in `tests/tests/`; benchmarks in
//! `tests/benches/`. This library is intentionally empty: the cases shared
//! with `holdup verify` live in `holdup_sim::verify`.
