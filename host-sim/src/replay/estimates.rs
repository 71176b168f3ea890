//! `estimates.csv`: one row per written tick, every figure with the digits
//! of the replay's scalar type, SI units in the header, times on the
//! report's [`Clock`].
//!
//! Rows are written every [`DEFAULT_EVERY_MS`] of plant time unless asked
//! otherwise (a month of a 1 s log is 2.6 million rows at every tick); the
//! interval must be a whole number of ticks ([`output_interval`]).

use std::fs::File;
use std::io::{BufWriter, Write};
use std::path::{Path, PathBuf};

use holdup_kernel::signal::Quality;
use holdup_kernel::{Estimate, Scalar, SensorReport};

use super::record::signal_flag_names;
use super::{io_err, ReplayError};
use crate::clock::Clock;
use crate::digits::Digits;
use crate::plant::Plant;

/// Default interval between rows of `estimates.csv`: 1 min of plant time,
/// or the next whole number of ticks (see [`default_every_ms`]).
pub const DEFAULT_EVERY_MS: u64 = 60_000;

/// The default interval for a tick of `tick_ms`: [`DEFAULT_EVERY_MS`]
/// rounded up to a whole number of ticks (the tick itself when it is
/// coarser than a minute).
pub fn default_every_ms(tick_ms: u32) -> u64 {
    let tick = u64::from(tick_ms.max(1));
    DEFAULT_EVERY_MS.div_ceil(tick) * tick
}

/// The interval between rows, ms: `every_ms`, or the tick for 0 (every
/// tick). An interval that is not a whole number of ticks is an error: the
/// rows could only be written at some other interval.
pub fn output_interval(every_ms: u64, tick_ms: u32) -> Result<u64, String> {
    let tick = u64::from(tick_ms.max(1));
    if every_ms == 0 {
        Ok(tick)
    } else if every_ms % tick == 0 {
        Ok(every_ms)
    } else {
        Err(format!(
            "{every_ms} ms is not a whole number of ticks (the tick is {tick} ms): \
             rows can only be written every {tick} ms, {} ms, {} ms, ...",
            2 * tick,
            3 * tick
        ))
    }
}

/// An interval in words: `every tick (1 s)`, `every 1 min (60 ticks)`.
pub fn interval_words(every_ms: u64, tick_ms: u32) -> String {
    let tick = u64::from(tick_ms.max(1));
    let d = duration_words(every_ms);
    if every_ms == tick {
        format!("every tick ({d})")
    } else {
        format!("every {d} ({} ticks)", every_ms / tick)
    }
}

/// `250 ms`, `1.5 s`, `1 min`, `2 h`, `1 d`: the largest unit that divides
/// the duration, or ms/s.
pub fn duration_words(ms: u64) -> String {
    for (unit, n) in [("d", 86_400_000), ("h", 3_600_000), ("min", 60_000)] {
        if ms >= n && ms % n == 0 {
            return format!("{} {unit}", ms / n);
        }
    }
    if ms >= 1000 {
        format!("{} s", ms as f64 / 1000.0)
    } else {
        format!("{ms} ms")
    }
}

/// A species name made safe for a CSV header (no commas, quotes or spaces).
pub fn csv_name(s: &str) -> String {
    s.chars()
        .map(|c| {
            if c.is_alphanumeric() || c == '_' || c == '-' {
                c
            } else {
                '_'
            }
        })
        .collect()
}

/// The word for a quality in the CSV.
pub fn quality_word(q: Quality) -> &'static str {
    match q {
        Quality::Good => "good",
        Quality::Uncertain => "uncertain",
        Quality::Bad => "bad",
    }
}

/// The estimates file.
pub struct EstimatesCsv {
    path: PathBuf,
    out: BufWriter<File>,
    corrected: bool,
    has_level: bool,
    biases: usize,
    species: usize,
    digits: Digits,
    clock: Clock,
    row: String,
}

/// One row's content.
pub struct Row<'a, S, const N: usize> {
    /// Plant time, ms since the epoch.
    pub t: i64,
    /// Hours since the start.
    pub elapsed_h: f64,
    /// The reported estimate.
    pub estimate: &'a Estimate<S, N>,
    /// The open-loop concentrations beside a corrected estimate.
    pub open: Option<&'a [S; N]>,
    /// The measured level (NaN: none at this tick).
    pub level: Option<f64>,
    /// New analyses.
    pub analyses: &'a [Option<f64>],
    /// Meter biases and 1σ (corrected only).
    pub biases: &'a [(f64, f64)],
    /// The report of the tick that ended at `t` (none for the first row).
    pub report: Option<&'a SensorReport<S, N>>,
}

impl EstimatesCsv {
    /// Create the file in `dir` and write the header.
    pub fn create(
        dir: &Path,
        plant: &Plant,
        bias_names: &[String],
        digits: Digits,
        clock: Clock,
    ) -> Result<Self, ReplayError> {
        let path = dir.join("estimates.csv");
        let mut out = BufWriter::new(File::create(&path).map_err(io_err(&path))?);
        let corrected = plant.estimator.is_some();
        let mut h = String::from("time,elapsed_h,holdup_m3");
        if corrected {
            h.push_str(",holdup_sigma_m3");
        }
        h.push_str(",level_m");
        if plant.level.is_some() {
            h.push_str(",measured_level_m");
        }
        for s in &plant.species {
            let n = csv_name(&s.name);
            h.push_str(&format!(",{n}_mol_m3"));
            if corrected {
                h.push_str(&format!(",{n}_sigma_mol_m3,{n}_open_loop_mol_m3"));
            }
        }
        for a in &plant.analysers {
            let n = csv_name(&plant.species[a.species].name);
            h.push_str(&format!(",{n}_analyser_mol_m3"));
        }
        for b in bias_names {
            let n = csv_name(b);
            h.push_str(&format!(",bias_{n},bias_{n}_sigma"));
        }
        h.push_str(",status,holdup_quality,concentration_quality,reasons,flags,input_quality,conditioning,event\n");
        out.write_all(h.as_bytes()).map_err(io_err(&path))?;
        Ok(Self {
            path,
            out,
            corrected,
            has_level: plant.level.is_some(),
            biases: bias_names.len(),
            species: plant.species.len(),
            digits,
            clock,
            row: String::new(),
        })
    }

    /// Write one row.
    pub fn write<S: Scalar, const N: usize>(
        &mut self,
        r: &Row<'_, S, N>,
    ) -> Result<(), ReplayError> {
        let dg = self.digits;
        let e = r.estimate;
        let row = &mut self.row;
        row.clear();
        // elapsed_h is a convenience beside the exact time.
        row.push_str(&format!(
            "{},{:.6},{}",
            self.clock.iso(r.t),
            r.elapsed_h,
            dg.sci(e.volume.to_f64())
        ));
        if self.corrected {
            let s = e.volume_sigma.map_or(f64::NAN, |x| x.to_f64());
            row.push_str(&format!(",{}", dg.sci(s)));
        }
        row.push_str(&format!(",{}", dg.pos(e.level.to_f64())));
        if self.has_level {
            match r.level.filter(|z| z.is_finite()) {
                Some(z) => row.push_str(&format!(",{}", dg.pos(z))),
                None => row.push(','),
            }
        }
        for i in 0..self.species.min(N) {
            row.push_str(&format!(",{}", dg.sci(e.concentrations[i].to_f64())));
            if self.corrected {
                let s = e.concentration_sigma.map_or(f64::NAN, |c| c[i].to_f64());
                let o = r.open.map_or(f64::NAN, |c| c[i].to_f64());
                row.push_str(&format!(",{},{}", dg.sci(s), dg.sci(o)));
            }
        }
        for c in r.analyses {
            match c {
                Some(c) => row.push_str(&format!(",{}", dg.sci(*c))),
                None => row.push(','),
            }
        }
        for b in r.biases.iter().take(self.biases) {
            row.push_str(&format!(",{},{}", dg.pos(b.0), dg.pos(b.1)));
        }
        match r.report {
            None => row.push_str(",,,,,,,,"),
            Some(rep) => {
                let d = &rep.diagnosis;
                let worst_c = d
                    .concentrations
                    .iter()
                    .take(self.species)
                    .fold(Quality::Good, |a, b| a.max(*b));
                let reasons: Vec<&str> = d.reasons.names().collect();
                let flags: Vec<&str> = rep.step.flags.names().collect();
                row.push_str(&format!(
                    ",{},{},{},{},{},{},{},{}",
                    d.status.letter(),
                    quality_word(d.holdup),
                    quality_word(worst_c),
                    reasons.join("|"),
                    flags.join("|"),
                    quality_word(rep.inputs.worst()),
                    signal_flag_names(rep.signal_flags),
                    if rep.reseeded { "reseeded" } else { "" },
                ));
            }
        }
        row.push('\n');
        self.out
            .write_all(row.as_bytes())
            .map_err(io_err(&self.path))
    }

    /// Flush to disk.
    pub fn finish(mut self) -> Result<(), ReplayError> {
        self.out.flush().map_err(io_err(&self.path))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn the_default_interval_is_a_minute_in_whole_ticks() {
        assert_eq!(default_every_ms(1000), 60_000);
        assert_eq!(default_every_ms(250), 60_000);
        // 60 s / 7 s = 8.57: nine ticks.
        assert_eq!(default_every_ms(7000), 63_000);
        // A tick coarser than a minute: every tick.
        assert_eq!(default_every_ms(300_000), 300_000);
    }

    #[test]
    fn an_interval_must_be_whole_ticks() {
        assert_eq!(output_interval(0, 1000), Ok(1000));
        assert_eq!(output_interval(3000, 1000), Ok(3000));
        let e = output_interval(1500, 1000).expect_err("1.5 ticks");
        assert!(e.contains("1500 ms") && e.contains("1000 ms"), "{e}");
        assert!(output_interval(500, 1000).is_err());
    }

    #[test]
    fn intervals_in_words() {
        assert_eq!(interval_words(1000, 1000), "every tick (1 s)");
        assert_eq!(interval_words(60_000, 1000), "every 1 min (60 ticks)");
        assert_eq!(interval_words(5_400_000, 1000), "every 90 min (5400 ticks)");
        assert_eq!(duration_words(1500), "1.5 s");
        assert_eq!(duration_words(250), "250 ms");
        assert_eq!(duration_words(86_400_000), "1 d");
    }
}
