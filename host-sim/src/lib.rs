//! Host side of holdup: replay of historian logs through the same kernel
//! that runs on the gateway, the demo plant, and analytic verification.
//!
//! Layers, in the order data flows: [`config`] (TOML → [`plant::Plant`], with
//! [`units`]), [`log`] (streaming CSV → resampled tag values), [`lab`] (lab
//! results), [`to_kernel`] (plant → kernel types), [`replay`] (sources →
//! the kernel's sensor → sinks: estimates, summary, plots, with [`digits`]
//! for the figures it writes),
//! [`plot`] (SVG figures), [`text`] (the caution and timestamps the reports
//! share); [`link`] puts the replay's sensor behind the kernel's Modbus
//! register map; [`serve`] is that Modbus TCP server and [`registers`]
//! writes the map's documentation; [`live`] polls a PLC over Modbus TCP,
//! runs that sensor in real time, records the inputs and checks the run
//! against their replay; [`fit`] estimates the plant file's unknowns from
//! its log and lab results; [`demo`] generates an invented plant's files;
//! [`verify`] holds the analytic cases.

pub mod clock;
pub mod config;
pub mod demo;
pub mod digits;
pub mod fit;
pub mod lab;
pub mod link;
pub mod live;
pub mod log;
pub mod plant;
pub mod plot;
pub mod registers;
pub mod replay;
pub mod report;
pub mod serve;
pub mod text;
pub mod to_kernel;
pub mod units;
pub mod verify;
pub mod zone;
