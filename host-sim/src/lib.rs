//! Host side of holdup: analytic verification, the demo plant, and (later)
//! replay of historian logs through the same kernel that runs on the gateway.

pub mod demo;
pub mod verify;
