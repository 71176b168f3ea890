#![no_main]
//! Long-format historian log through LogReader (fixed tag list), sampled forward.
use holdup_sim::plant::LogFormat;
use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| holdup_fuzz::run_log(data, LogFormat::Long));
