//! The built-in demo: the reference saponification reactor through one
//! shift, run by the same kernel the gateway runs.

use holdup_kernel::reference;
use holdup_kernel::StatusFlags;
use std::fmt::Write as _;

/// The caution printed with every report.
pub const CAUTION: &str = "Estimates are advisory: validate them against lab results, never use \
them as the only input to a safety function, and follow site procedures and local codes.";

/// Run the reference scenario in `f32` (as on the gateway) and return a
/// table with one row every `every_min` minutes.
pub fn run(every_min: u64) -> Result<String, holdup_kernel::Error> {
    let mut ves = reference::vessel::<f32>()?;
    let mut out = String::new();
    let _ = writeln!(
        out,
        "Demo plant: continuous saponification reactor, 1.6 m dia., dished bottom, \
         caustic and ester pumps at 0.6 m3/h each;\nester pump to 80 % at 2 h, \
         jacket 25 -> 35 degC from 4 h to 6 h. Tick 1 s, f32.\n"
    );
    let _ = writeln!(
        out,
        "{:>6} {:>9} {:>8} {:>8} {:>9} {:>9} {:>9}  flags",
        "t [h]", "holdup", "level", "T", "NaOH", "EtOAc", "NaOAc"
    );
    let _ = writeln!(
        out,
        "{:>6} {:>9} {:>8} {:>8} {:>9} {:>9} {:>9}",
        "", "[m3]", "[m]", "[degC]", "[mol/m3]", "[mol/m3]", "[mol/m3]"
    );
    let every = every_min * 60 * 1000;
    let mut flags = StatusFlags::NONE;
    let row = |ves: &reference::ReferenceVessel<f32>, flags: StatusFlags, out: &mut String| {
        let c = ves.concentrations();
        let names: Vec<&str> = flags.names().collect();
        let _ = writeln!(
            out,
            "{:>6.2} {:>9.4} {:>8.4} {:>8.2} {:>9.3} {:>9.3} {:>9.3}  {}",
            ves.time_ms() as f64 / 3.6e6,
            ves.volume(),
            ves.level(),
            ves.temperature() - 273.15,
            c[0],
            c[1],
            c[2],
            if names.is_empty() {
                "-".to_string()
            } else {
                names.join(",")
            }
        );
    };
    row(&ves, flags, &mut out);
    while ves.time_ms() < reference::SHIFT_MS {
        let u = reference::inputs_at::<f32>(ves.time_ms());
        flags |= ves.step(&u).flags;
        if ves.time_ms() % every == 0 {
            row(&ves, flags, &mut out);
            flags = StatusFlags::NONE;
        }
    }
    let _ = writeln!(out, "\n{CAUTION}");
    Ok(out)
}
