//! The PLC link: the register map and the sensor served over Modbus
//! (feature `modbus`).
//!
//! One register map ([`map`]) for every party: the gateway firmware serves
//! it over Modbus RTU on a UART, the host serves it over Modbus TCP, and
//! the generator of `docs/registers.md` lists it for a plant. The frame
//! codec (framing, CRC-16/MODBUS, exception responses) is the `rmodbus`
//! crate's, `no_std` and heap-free; [`Link`] adds what the addresses mean.
//!
//! A Modbus link has no authentication: keep it on a separate network
//! behind a firewall, and give readers that only read a port or unit that
//! refuses writes. The estimates it serves are advisory: validate them
//! against lab results, never use them as the only input to a safety
//! function, and follow site procedures and local codes.

pub mod link;
pub mod map;

pub use link::{
    quality_code, status_code, well_formed, Clock, Framing, LabOutcome, Link, LinkCounters,
    LinkFlags, LinkSpec, LinkTick, Response, Served, Silence, MAX_FRAME,
};
pub use map::{Dims, Entry, Item, Kind, RegisterMap, Table, WordOrder, MAP_VERSION, MAX_REGISTERS};

#[cfg(test)]
mod tests;
