//! Who may write: the list of addresses and networks whose writes are
//! applied, and the function codes that count as writes.

use std::fmt;
use std::net::IpAddr;

/// Function codes that change the server's state: write single coil (05),
/// write single register (06), write multiple coils (0F), write multiple
/// registers (10), mask write register (16), read/write multiple registers
/// (17).
pub const WRITE_FUNCTIONS: [u8; 6] = [0x05, 0x06, 0x0F, 0x10, 0x16, 0x17];

/// Whether a function code writes.
pub fn is_write(function: u8) -> bool {
    WRITE_FUNCTIONS.contains(&function)
}

/// One address or network: an address and its prefix length.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Network {
    addr: IpAddr,
    prefix: u8,
}

impl Network {
    /// Whether `ip` is in the network. An IPv4 address reached over IPv6
    /// (`::ffff:a.b.c.d`) counts as the IPv4 address.
    pub fn contains(&self, ip: IpAddr) -> bool {
        let ip = match ip {
            IpAddr::V6(v6) => v6.to_ipv4_mapped().map_or(ip, IpAddr::V4),
            v4 => v4,
        };
        match (self.addr, ip) {
            (IpAddr::V4(n), IpAddr::V4(a)) => {
                masked(u128::from(u32::from(n)), 32, self.prefix)
                    == masked(u128::from(u32::from(a)), 32, self.prefix)
            }
            (IpAddr::V6(n), IpAddr::V6(a)) => {
                masked(u128::from(n), 128, self.prefix) == masked(u128::from(a), 128, self.prefix)
            }
            _ => false,
        }
    }
}

/// The top `prefix` bits of a `width`-bit address.
fn masked(x: u128, width: u8, prefix: u8) -> u128 {
    if prefix == 0 {
        0
    } else {
        x >> (width - prefix)
    }
}

impl fmt::Display for Network {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "{}/{}", self.addr, self.prefix)
    }
}

/// The addresses and networks allowed to write.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct AllowList(Vec<Network>);

impl AllowList {
    /// Loopback only (`127.0.0.0/8`, `::1`): the default.
    pub fn loopback() -> Self {
        Self(vec![
            Network {
                addr: IpAddr::from([127, 0, 0, 0]),
                prefix: 8,
            },
            Network {
                addr: IpAddr::from([0u16, 0, 0, 0, 0, 0, 0, 1]),
                prefix: 128,
            },
        ])
    }

    /// Nobody may write.
    pub fn nobody() -> Self {
        Self(Vec::new())
    }

    /// Parse a comma-separated list of addresses (`10.1.2.3`, `::1`) and
    /// networks (`10.1.0.0/16`, `fd00::/8`); `none` allows nobody.
    ///
    /// Errors: the item that is not an address or network, and why.
    pub fn parse(text: &str) -> Result<Self, String> {
        if text.trim() == "none" {
            return Ok(Self::nobody());
        }
        let mut out = Vec::new();
        for item in text.split(',').map(str::trim) {
            if item.is_empty() {
                return Err(format!(
                    "`{text}`: an empty item (two commas, or a trailing one)"
                ));
            }
            let (addr, prefix) = match item.split_once('/') {
                Some((a, p)) => (a, Some(p)),
                None => (item, None),
            };
            let addr: IpAddr = addr
                .parse()
                .map_err(|_| format!("`{item}`: not an IPv4 or IPv6 address"))?;
            let width = if addr.is_ipv4() { 32 } else { 128 };
            let prefix = match prefix {
                None => width,
                Some(p) => p
                    .parse::<u8>()
                    .ok()
                    .filter(|p| *p <= width)
                    .ok_or_else(|| format!("`{item}`: the prefix length must be 0 to {width}"))?,
            };
            out.push(Network { addr, prefix });
        }
        Ok(Self(out))
    }

    /// Whether `ip` may write.
    pub fn allows(&self, ip: IpAddr) -> bool {
        self.0.iter().any(|n| n.contains(ip))
    }
}

impl fmt::Display for AllowList {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        if self.0.is_empty() {
            return f.write_str("nobody");
        }
        for (k, n) in self.0.iter().enumerate() {
            if k > 0 {
                f.write_str(", ")?;
            }
            write!(f, "{n}")?;
        }
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn ip(s: &str) -> IpAddr {
        s.parse().unwrap()
    }

    #[test]
    fn loopback_is_the_default_and_covers_both_families() {
        let a = AllowList::loopback();
        assert!(a.allows(ip("127.0.0.1")));
        assert!(a.allows(ip("127.8.9.10")));
        assert!(a.allows(ip("::1")));
        assert!(a.allows(ip("::ffff:127.0.0.1")));
        assert!(!a.allows(ip("10.0.0.1")));
        assert!(!a.allows(ip("::2")));
    }

    #[test]
    fn networks_match_by_prefix() {
        // RFC 4632 prefix arithmetic: 10.20.0.0/14 spans 10.20.0.0–10.23.255.255.
        let a = AllowList::parse("10.20.0.0/14, 192.168.1.7, fd00::/8").unwrap();
        assert!(a.allows(ip("10.23.255.255")));
        assert!(!a.allows(ip("10.24.0.0")));
        assert!(!a.allows(ip("10.19.255.255")));
        assert!(a.allows(ip("192.168.1.7")));
        assert!(!a.allows(ip("192.168.1.8")));
        assert!(a.allows(ip("fdab::1")));
        assert!(!a.allows(ip("fe80::1")));
        assert!(AllowList::parse("0.0.0.0/0").unwrap().allows(ip("8.8.4.4")));
        assert!(!AllowList::parse("none").unwrap().allows(ip("127.0.0.1")));
    }

    #[test]
    fn bad_items_are_named() {
        let e = AllowList::parse("10.0.0.0/33").unwrap_err();
        assert!(e.contains("10.0.0.0/33") && e.contains("0 to 32"), "{e}");
        let e = AllowList::parse("10.0.0.1,,10.0.0.2").unwrap_err();
        assert!(e.contains("empty item"), "{e}");
        let e = AllowList::parse("plc-3").unwrap_err();
        assert!(e.contains("`plc-3`: not an IPv4"), "{e}");
    }

    #[test]
    fn the_write_functions_are_the_specifications_writes() {
        // Modbus Application Protocol v1.1b3, section 6: the write codes.
        for f in [5u8, 6, 15, 16, 22, 23] {
            assert!(is_write(f), "{f}");
        }
        for f in [1u8, 2, 3, 4, 7, 8, 43] {
            assert!(!is_write(f), "{f}");
        }
    }
}
