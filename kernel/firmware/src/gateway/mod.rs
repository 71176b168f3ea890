//! The gateway's parts: its peripherals, the RTU receive path, what the
//! PLC writes, and the load mode's request injector.

pub mod hw;
#[cfg(feature = "gateway-load")]
pub mod load;
// Its tick writes are the load mode's requests (and the host program's).
#[cfg_attr(not(feature = "gateway-load"), allow(dead_code))]
pub mod plc;
pub mod rx;
