#![no_main]
//! Plant configuration TOML (UTF-8-lossy) through config::parse.
use libfuzzer_sys::fuzz_target;
use std::path::Path;

fuzz_target!(|data: &[u8]| {
    let text = String::from_utf8_lossy(data);
    let _ = holdup_sim::config::parse(&text, Path::new("fuzz/plant.toml"));
});
