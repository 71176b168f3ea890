//! The gateway's configuration and what a PLC writes into its holding
//! registers, shared by the gateway binary (its start-up constants and its
//! load mode's requests) and the host program that computes the expected
//! registers (`host/gateway-expect`).
//!
//! A tick's inputs travel as two writes (function 16), in this order:
//! * the **tail**: outlet flow, temperature and level (holding 26–31 for the
//!   observed scenario's map);
//! * the **head**: the input sequence, the lab registers and the two inlet
//!   flows (holding 0–13). The sequence is raised in this last write, so a
//!   sequence-clocked gateway ticks only once every input of the tick is in.
//!
//! The feed concentrations are the recipe's constants: the gateway writes
//! them itself at start ([`constants`]); the PLC never does.

use holdup_kernel::modbus::{Clock, LinkSpec, RegisterMap, WordOrder};
use holdup_kernel::units::Millis;

use crate::observed::{Lab, Tick, LAB_SIGMA, LAB_SPECIES};

/// The unit id (slave address) the gateway answers to.
pub const UNIT_ID: u8 = 17;
/// Word order of every 32-bit value.
pub const WORD_ORDER: WordOrder = WordOrder::HighFirst;
/// Watchdog: the inputs are stale when the PLC has not raised the input
/// sequence for this long, ms.
pub const STALE_AFTER_MS: Millis = 5_000;
/// The link's configuration with tick source `clock`.
pub const fn link_spec(clock: Clock) -> LinkSpec {
    LinkSpec {
        unit_id: UNIT_ID,
        word_order: WORD_ORDER,
        clock,
        stale_after_ms: STALE_AFTER_MS,
        checkpoints: false,
    }
}

/// Registers of the head write (sequence, lab, two inlet flows).
pub const HEAD_LEN: usize = 14;
/// Registers of the tail write (outlet flow, temperature, level).
pub const TAIL_LEN: usize = 6;
/// Registers of the constant feeds (2 inlets × 3 species, `f32`).
pub const FEED_LEN: usize = 12;

/// One tick's writes: `(address, registers)` of the tail, then of the head.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct TickWrite {
    /// Address of the tail.
    pub tail_at: u16,
    /// Outlet flow, temperature, level.
    pub tail: [u16; TAIL_LEN],
    /// Address of the head (0).
    pub head_at: u16,
    /// Input sequence, lab draw and result sequences, lab species, sample
    /// id, lab value, lab σ, the inlet flows.
    pub head: [u16; HEAD_LEN],
}

fn f32_words(x: f32) -> [u16; 2] {
    WORD_ORDER.split(x.to_bits())
}

/// The constant feeds, `(address, registers)`, in the map's order.
pub fn constants(map: &RegisterMap, t: &Tick<f32>) -> (u16, [u16; FEED_LEN]) {
    let mut regs = [0u16; FEED_LEN];
    for (pair, c) in regs
        .chunks_exact_mut(2)
        .zip(t.raw.feed.iter().flat_map(|row| row.iter()))
    {
        pair.copy_from_slice(&f32_words(*c));
    }
    (map.feed_address(0, 0), regs)
}

/// The PLC's side of the lab registers: the sequences it raises and the
/// last sample's registers (they stay as written).
#[derive(Clone, Copy, Debug, Default)]
pub struct Plc {
    seq: u16,
    draw_seq: u16,
    result_seq: u16,
    sample_id: u32,
    value: f32,
}

impl Plc {
    /// The writes carrying tick `t`'s readings and lab event; raises the
    /// input sequence (so the first tick's is 1: the link counts a change
    /// from its initial 0).
    pub fn writes(&mut self, map: &RegisterMap, t: &Tick<f32>) -> TickWrite {
        self.seq = self.seq.wrapping_add(1);
        match t.lab {
            Lab::None => {}
            Lab::Drawn(id) => {
                self.draw_seq = self.draw_seq.wrapping_add(1);
                self.sample_id = id;
            }
            Lab::Result(id, v) => {
                self.result_seq = self.result_seq.wrapping_add(1);
                self.sample_id = id;
                self.value = v;
            }
        }
        let r = &t.raw;
        let mut tail = [0u16; TAIL_LEN];
        for (pair, x) in tail
            .chunks_exact_mut(2)
            .zip([r.outlet_flows[0], r.temperature, r.level])
        {
            pair.copy_from_slice(&f32_words(x));
        }
        let id = WORD_ORDER.split(self.sample_id);
        let [v0, v1] = f32_words(self.value);
        let [s0, s1] = f32_words(LAB_SIGMA);
        let [a0, a1] = f32_words(r.inlet_flows[0]);
        let [b0, b1] = f32_words(r.inlet_flows[1]);
        TickWrite {
            tail_at: map.outlet_flow_address(0),
            tail,
            head_at: 0,
            head: [
                self.seq,
                self.draw_seq,
                self.result_seq,
                LAB_SPECIES as u16,
                id[0],
                id[1],
                v0,
                v1,
                s0,
                s1,
                a0,
                a1,
                b0,
                b1,
            ],
        }
    }
}
