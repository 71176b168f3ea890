//! The live run against its replay: the recording replayed by
//! [`crate::replay::run`] (estimates, summary, plots, exactly as `holdup
//! replay` writes them), and the replay's last estimate compared bit for
//! bit with the live sensor's estimate after the same number of ticks.

use std::path::Path;

use holdup_kernel::modbus::{RegisterMap, WordOrder};

use super::recording::TIME_COLUMN;
use super::status::f32_at;
use crate::plant::{EmptyCells, Interpolation, LogFormat, LogOptions, Plant, TimeFormat};
use crate::replay::{self, Outcome, ReplayError};

/// The plant the recording is replayed with: the live run's plant, reading
/// the recording's layout, an empty cell as no reading at that time
/// ([`EmptyCells::NoReading`]: the poll got none, so the tag reads NaN
/// there, as it did for the live sensor) and every tag held (one row a
/// tick: nothing to interpolate). A whole row missing from the recording
/// would be a gap as in any log.
pub fn replay_plant(plant: &Plant) -> Plant {
    let mut p = plant.clone();
    p.log = LogOptions {
        format: LogFormat::Wide,
        time: TimeFormat::Iso8601,
        time_column: Some(TIME_COLUMN.to_string()),
        max_age_ms: plant.log.max_age_ms,
        empty_cells: EmptyCells::NoReading,
        ..LogOptions::default()
    };
    for t in &mut p.tags {
        t.interpolation = Interpolation::Hold;
    }
    p
}

/// Replay `log` into `out_dir`.
pub fn replay(plant: &Plant, log: &Path, out_dir: &Path) -> Result<Outcome, ReplayError> {
    let p = replay_plant(plant);
    replay::run(&replay::Request {
        plant: &p,
        log,
        lab: None,
        out_dir,
        output_every_ms: 0,
        progress: false,
    })
}

/// One quantity compared.
#[derive(Clone, Debug, PartialEq)]
pub struct Compared {
    /// What it is.
    pub name: String,
    /// The live sensor's value.
    pub live: f32,
    /// The replay's value.
    pub replay: f64,
}

impl Compared {
    /// The same bits: the replay's value is the live one exactly.
    pub fn same(&self) -> bool {
        f64::from(self.live).to_bits() == self.replay.to_bits()
    }
}

/// The replay's final state against the live output block `regs` (the
/// link's, high word first) after as many ticks as the replay ran.
pub fn compare(plant: &Plant, map: &RegisterMap, regs: &[u16], outcome: &Outcome) -> Vec<Compared> {
    let f = &outcome.summary.final_state;
    let at = |a: u16| f32_at(regs, a, WordOrder::HighFirst);
    let h = map.holdup_address();
    let mut out = vec![
        Compared {
            name: "holdup".into(),
            live: at(h),
            replay: f.holdup_m3,
        },
        Compared {
            name: "level".into(),
            live: at(h + 4),
            replay: f.level_m,
        },
    ];
    if let Some(s) = f.holdup_sigma_m3 {
        out.push(Compared {
            name: "holdup sigma".into(),
            live: at(h + 2),
            replay: s,
        });
    }
    for (i, sp) in (0u8..).zip(plant.species.iter()) {
        let a = map.concentration_address(i);
        if let Some(c) = f.concentrations_mol_m3.get(&sp.name) {
            out.push(Compared {
                name: format!("{} concentration", sp.name),
                live: at(a),
                replay: *c,
            });
        }
        if let Some(s) = f
            .concentration_sigmas_mol_m3
            .as_ref()
            .and_then(|m| m.get(&sp.name))
        {
            out.push(Compared {
                name: format!("{} sigma", sp.name),
                live: at(a + 2),
                replay: *s,
            });
        }
    }
    out
}
