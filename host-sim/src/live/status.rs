//! What a live run shows: the status line (from the link's output block,
//! as a PLC reading it would see it) and the closing report.

use holdup_kernel::modbus::{RegisterMap, WordOrder};

use super::client::ClientCounters;
use super::poller::Losses;
use crate::plant::Plant;
use crate::text::iso;

/// The NE107 letter of a status code.
pub fn ne107_letter(code: u16) -> &'static str {
    match code {
        0 => "good",
        1 => "M",
        2 => "S",
        3 => "C",
        _ => "F",
    }
}

/// The `f32` at `address` of an output block.
pub fn f32_at(regs: &[u16], address: u16, order: WordOrder) -> f32 {
    let a = usize::from(address);
    match regs.get(a..a + 2) {
        Some(w) => f32::from_bits(order.join([w[0], w[1]])),
        None => f32::NAN,
    }
}

/// One status line: holdup ±σ, each concentration ±σ, NE107 status,
/// reconnects.
pub fn line(
    plant: &Plant,
    map: &RegisterMap,
    regs: &[u16],
    tick: u64,
    reconnects: u64,
    connected: bool,
) -> String {
    let order = WordOrder::HighFirst;
    let at = |a| f32_at(regs, a, order);
    let h = map.holdup_address();
    let mut s = format!("tick {tick}  holdup {:.4}±{:.4} m3", at(h), at(h + 2));
    for (i, sp) in (0u8..).zip(plant.species.iter()) {
        let a = map.concentration_address(i);
        s.push_str(&format!("  {} {:.3}±{:.3}", sp.name, at(a), at(a + 2)));
    }
    let status = regs.get(6).copied().unwrap_or(4);
    s.push_str(&format!(
        " mol/m3  NE107 {}  PLC {}  reconnects {reconnects}",
        ne107_letter(status),
        if connected { "up" } else { "away" }
    ));
    s
}

/// Ticks with no reading at all (the PLC away), as time windows.
#[derive(Clone, Debug, Default)]
pub struct Outages {
    /// Closed windows, first and last tick time, ms since the epoch.
    pub windows: Vec<(i64, i64)>,
    open: Option<(i64, i64)>,
}

impl Outages {
    /// Note tick time `t`: `away` when no tag was read.
    pub fn note(&mut self, t: i64, away: bool) {
        match (&mut self.open, away) {
            (Some((_, end)), true) => *end = t,
            (None, true) => self.open = Some((t, t)),
            (Some(w), false) => {
                self.windows.push(*w);
                self.open = None;
            }
            (None, false) => {}
        }
    }

    /// Close an open window.
    pub fn finish(&mut self) {
        if let Some(w) = self.open.take() {
            self.windows.push(w);
        }
    }
}

/// The closing report of the polling side.
pub fn report(
    tags: &[String],
    ticks: u64,
    rows: u64,
    late_ticks: u64,
    counters: &ClientCounters,
    losses: &Losses,
    outages: &Outages,
) -> String {
    let mut s = format!(
        "Live run: {ticks} ticks, {rows} rows recorded ({late_ticks} ticks started late)\n\
         PLC connection: {} connects, {} reconnects, {} lost, {} failed attempts, \
         {} timeouts, {} exception responses\n",
        counters.connects,
        counters.reconnects,
        counters.lost,
        counters.failed_attempts,
        counters.timeouts,
        counters.exceptions
    );
    if outages.windows.is_empty() {
        s.push_str("PLC away: never\n");
    }
    for (a, b) in &outages.windows {
        s.push_str(&format!(
            "PLC away (no reading at all): {} to {}\n",
            iso(*a),
            iso(*b)
        ));
    }
    for (i, tag) in tags.iter().enumerate() {
        let (m, nf) = (losses.missing[i], losses.not_finite[i]);
        if m > 0 {
            s.push_str(&format!(
                "tag {tag}: {m} polls without a reading ({nf} of them not finite)\n"
            ));
        }
    }
    s
}
