//! The gateway's socket check, host side: runs the observed scenario's
//! sensor behind the same `Link` in `f32` on the host, fed the writes a PLC
//! makes each tick (`gateway::plc`, the same source the firmware builds),
//! and prints, one JSON object a line, each tick's writes and the input
//! registers the gateway must then serve, bit for bit.
//!
//!     gateway-expect [TICKS]     (default 660)
//!
//! The schedule is the observed scenario's instruments (`Instruments`: raw
//! 4–20 mA readings with their noise) compressed so that a short run meets
//! every event: lab sample 1 drawn at [`DRAW_AT`] s, its result at
//! [`RESULT_AT`] s (the plant's NaOH at the draw plus lab noise), and the
//! level loop's 3.4 mA fault for `LEVEL_FAULT_S` s from [`FAULT_AT`] s.
//!
//! Every tick is also run through the firmware's own pipeline
//! (`observed::step` on a `Tracked` sensor: the lab calls, then
//! `Sensor::tick`); the program fails unless the sensor behind the
//! registers is that sensor, bit for bit, at every tick.

#[allow(dead_code)]
#[path = "../../../src/observed.rs"]
mod observed;
#[path = "../../../src/gateway/plc.rs"]
mod plc;

use std::fmt::Write as _;
use std::process::ExitCode;

use holdup_kernel::diagnostics::ChiSquareBounds;
use holdup_kernel::modbus::{Clock, Link, LinkFlags};
use holdup_kernel::reference;

use observed::*;

/// Lab sample 1 is drawn at the start of this tick (s).
const DRAW_AT: u32 = 120;
/// Its result comes in at the start of this tick (s).
const RESULT_AT: u32 = 300;
/// The level loop reads 3.4 mA from this tick on, for `LEVEL_FAULT_S` s.
const FAULT_AT: u32 = 420;

/// The plant (reference vessel, `f64`, true flows) over `ticks` s: its
/// level every `LEVEL_KNOT_S` s and the lab result of the sample drawn at
/// [`DRAW_AT`] (as `build.rs` makes the scenario's).
fn plant(ticks: u32) -> (Vec<f32>, f32) {
    let mut v = reference::vessel::<f64>().expect("reference vessel");
    let mut knots = vec![v.level() as f32];
    let mut lab = f32::NAN;
    let mut noise = Noise::new(LAB_SEED);
    let end = ticks.max(DRAW_AT) + 2 * LEVEL_KNOT_S;
    for n in 0..end {
        if n == DRAW_AT {
            let c = v.concentrations()[LAB_SPECIES] as f32;
            lab = c + LAB_SIGMA * noise.normal();
        }
        let u = reference::inputs_at::<f64>(v.time_ms());
        v.step(&u);
        if (n + 1) % LEVEL_KNOT_S == 0 {
            knots.push(v.level() as f32);
        }
    }
    (knots, lab)
}

fn list(xs: &[u16]) -> String {
    let mut s = String::from("[");
    for (i, x) in xs.iter().enumerate() {
        if i > 0 {
            s.push(',');
        }
        let _ = write!(s, "{x}");
    }
    s.push(']');
    s
}

fn main() -> ExitCode {
    let ticks: u32 = match std::env::args().nth(1).map(|a| a.parse()) {
        None => 660,
        Some(Ok(n)) => n,
        Some(Err(_)) => {
            eprintln!("usage: gateway-expect [TICKS]");
            return ExitCode::from(2);
        }
    };
    let (knots, lab_value) = plant(ticks);
    let labs = [lab_value];
    let bounds = ChiSquareBounds::<f32>::new(NIS_PROBABILITY).expect("NIS bounds");
    let mut tracked = Tracked::<f32>::new(bounds).expect("sensor");
    let mut link = Link::new(
        sensor(bounds).expect("sensor"),
        plc::link_spec(Clock::Sequence),
    )
    .expect("link");
    let map = *link.map();
    // The gateway's start: the constant feeds (its own instruments'
    // first reading, as the firmware takes them).
    let (feeds_at, feeds) = plc::constants(&map, &Instruments::new(&knots, &labs).readings(0));
    link.write_holding(feeds_at, &feeds).expect("feeds");
    println!(
        "{{\"unit\":{},\"input_len\":{},\"holding_len\":{},\"ticks\":{},\"draw_at\":{},\"result_at\":{},\"fault_at\":{},\"fault_s\":{},\"feeds_at\":{},\"feeds\":{}}}",
        plc::UNIT_ID,
        map.input_len(),
        map.holding_len(),
        ticks,
        DRAW_AT,
        RESULT_AT,
        FAULT_AT,
        LEVEL_FAULT_S,
        feeds_at,
        list(&feeds)
    );
    let mut inst = Instruments::new(&knots, &labs);
    let mut plc = plc::Plc::default();
    let mut differ = 0u32;
    let mut fault_ticks = 0u32;
    let mut lab_outcomes = Vec::new();
    for n in 0..ticks {
        let mut t = inst.readings(n);
        t.lab = if n == DRAW_AT {
            Lab::Drawn(1)
        } else if n == RESULT_AT {
            Lab::Result(1, lab_value)
        } else {
            Lab::None
        };
        if (FAULT_AT..FAULT_AT + LEVEL_FAULT_S).contains(&n) {
            t.raw.level = LEVEL_FAULT_MA;
        }
        let w = plc.writes(&map, &t);
        link.write_holding(w.tail_at, &w.tail).expect("tail");
        link.write_holding(w.head_at, &w.head).expect("head");
        if !link.sequence_pending() {
            eprintln!("gateway-expect: tick {n}: the head write did not raise the sequence");
            return ExitCode::FAILURE;
        }
        let lt = link.tick(u64::from(n) * u64::from(reference::TICK_MS));
        let rep = step(&mut tracked, &t);
        let same = lt.report == rep
            && state5(link.sensor())
                .iter()
                .zip(state5(&tracked.sensor).iter())
                .all(|(a, b)| a.to_bits() == b.to_bits());
        differ += u32::from(!same);
        if let Some(l) = lt.lab {
            lab_outcomes.push((n, l));
        }
        fault_ticks += u32::from(rep.inputs.level != holdup_kernel::Quality::Good);
        let regs = link.input_registers();
        if LinkFlags::from_bits(regs[9]).contains(LinkFlags::STALE) {
            eprintln!("gateway-expect: tick {n}: stale");
            return ExitCode::FAILURE;
        }
        println!(
            "{{\"n\":{n},\"tail_at\":{},\"tail\":{},\"head_at\":{},\"head\":{},\"expect\":{}}}",
            w.tail_at,
            list(&w.tail),
            w.head_at,
            list(&w.head),
            list(regs)
        );
    }
    eprintln!(
        "gateway-expect: {ticks} ticks; lab events {lab_outcomes:?}; level not Good on {fault_ticks} ticks; \
         link sensor vs firmware pipeline: {differ} ticks differ; lab errors {}",
        tracked.lab_errors
    );
    if differ != 0 || tracked.lab_errors != 0 {
        return ExitCode::FAILURE;
    }
    ExitCode::SUCCESS
}
