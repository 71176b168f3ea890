//! The fit's data, read once: every tick's log samples in memory, and the
//! observations (lab results and online analyses) the model is fitted to;
//! and the model run from them for one set of parameter values.
//!
//! The samples are the log reader's, raw (before units, so a meter bias or
//! a level offset being fitted applies to them like any conversion): 16
//! bytes per tag per tick, 14 MB for 48 h at 1 s with five tags.

use std::path::Path;

use holdup_kernel::Scalar;

use crate::lab;
use crate::log::{LogReader, LogStats, TagSample};
use crate::plant::Plant;
use crate::replay::assemble::{self, Sensors};
use crate::replay::frame::Sources;

use super::FitError;

/// Where an observation comes from.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Origin {
    /// A lab result, with its line in the lab file.
    Lab(usize),
    /// An online analyser's new analysis.
    Analyser,
}

/// One measured concentration the model is fitted to.
#[derive(Clone, Debug, PartialEq)]
pub struct Observation {
    /// When the sample was taken, ms since the Unix epoch.
    pub time: i64,
    /// The tick whose state is compared: the first at or after `time`
    /// (as the replay compares lab results).
    pub tick: usize,
    /// Species index.
    pub species: usize,
    /// Measured value, mol/m³.
    pub value: f64,
    /// Its 1σ, mol/m³.
    pub sigma: f64,
    /// Lab or analyser.
    pub origin: Origin,
}

/// The log and the observations in memory.
pub struct Data {
    /// First sample time, ms since the Unix epoch.
    pub t0: i64,
    /// Tick, ms.
    pub tick_ms: i64,
    /// Ticks held (sample times `t0 + k·tick`).
    pub ticks: usize,
    tags: usize,
    samples: Vec<TagSample>,
    /// Observations by tick.
    pub observations: Vec<Observation>,
    /// Lab rows outside the log's span (not used).
    pub labs_outside: usize,
    /// The vessel temperature's range over the log, K (finite readings).
    pub temperature_range: Option<(f64, f64)>,
    /// The log reader's findings (rows read and rejected, faults per
    /// tag), reported with the fit.
    pub stats: LogStats,
}

impl Data {
    /// Read `log` and `lab` for `plant` (the plant at the guesses).
    pub fn load(plant: &Plant, log: &Path, lab: Option<&Path>) -> Result<Self, FitError> {
        let mut reader = LogReader::open(log, &plant.log, &plant.tags)?;
        let empty = |r: &LogReader| FitError::EmptyLog(log.to_path_buf(), r.stats().why_empty());
        let Some(t0) = reader.first_time()? else {
            return Err(empty(&reader));
        };
        let tick_ms = i64::from(plant.tick_ms);
        let tags = plant.tags.len();
        let mut samples = Vec::new();
        let mut t = t0;
        while let Some(s) = reader.sample(t)? {
            samples.extend_from_slice(s);
            t += tick_ms;
        }
        let ticks = samples.len().checked_div(tags).unwrap_or(0);
        if ticks < 2 {
            return Err(empty(&reader));
        }
        let stats = reader.stats().clone();
        let mut data = Self {
            t0,
            tick_ms,
            ticks,
            tags,
            samples,
            observations: Vec::new(),
            labs_outside: 0,
            temperature_range: None,
            stats,
        };
        data.survey(plant);
        if let Some(path) = lab {
            let rel = plant.fit.lab_sigma;
            for l in lab::load(path, plant)? {
                let Some(tick) = data.tick_at(l.sample_time) else {
                    data.labs_outside += 1;
                    continue;
                };
                data.observations.push(Observation {
                    time: l.sample_time,
                    tick,
                    species: l.species,
                    value: l.value,
                    sigma: rel * l.value.abs().max(SIGMA_FLOOR),
                    origin: Origin::Lab(l.line),
                });
            }
        }
        data.observations.sort_by_key(|o| (o.tick, o.time));
        Ok(data)
    }

    /// The first tick at or after `t`, if within the log.
    fn tick_at(&self, t: i64) -> Option<usize> {
        if t < self.t0 {
            return None;
        }
        let k = usize::try_from((t - self.t0 + self.tick_ms - 1) / self.tick_ms).ok()?;
        (k < self.ticks).then_some(k)
    }

    /// Time of tick `k`, ms since the epoch.
    pub fn time(&self, k: usize) -> i64 {
        self.t0 + self.tick_ms * k as i64
    }

    fn row(&self, k: usize) -> &[TagSample] {
        self.samples
            .get(k * self.tags..(k + 1) * self.tags)
            .unwrap_or(&[])
    }

    /// One pass over the log for what does not depend on the unknowns:
    /// the analysers' new analyses (observations) and the temperature
    /// range.
    fn survey(&mut self, plant: &Plant) {
        let mut sources = Sources::new(plant);
        let sigmas: Vec<(usize, f64)> = plant
            .analysers
            .iter()
            .map(|a| (a.species, a.sigma))
            .collect();
        let mut range: Option<(f64, f64)> = None;
        let mut found = Vec::new();
        for k in 0..self.ticks {
            // Any fixed N: only the temperature and the analyses are used.
            let frame = sources.frame::<f64, 1>(self.row(k), self.time(k));
            let temp = frame.readings.temperature;
            if temp.is_finite() {
                range = Some(range.map_or((temp, temp), |(lo, hi)| (lo.min(temp), hi.max(temp))));
            }
            for (&(species, sigma), c) in sigmas.iter().zip(frame.analyses.iter()) {
                if let Some(c) = c {
                    found.push(Observation {
                        time: self.time(k),
                        tick: k,
                        species,
                        value: *c,
                        sigma,
                        origin: Origin::Analyser,
                    });
                }
            }
        }
        self.temperature_range = range;
        self.observations.extend(found);
    }

    /// Run `plant` from the first tick through tick `last`, and give the
    /// estimate of each observation's species at its tick, for the
    /// observations up to tick `last` (in order), into `out`.
    ///
    /// The sensor is the replay's main one (the estimator, when the plant
    /// has one: the level corrects the holdup) in `f64`, with neither lab
    /// results nor analyses fused: they are what it is compared with.
    pub fn predict(&self, plant: &Plant, last: usize, out: &mut Vec<f64>) -> Result<(), FitError> {
        self.predict_with(plant, last, out, &mut |_, _| {})
    }

    /// As [`Data::predict`], handing `trace` every tick's index and
    /// concentrations (mol/m³) on the way.
    pub fn predict_with(
        &self,
        plant: &Plant,
        last: usize,
        out: &mut Vec<f64>,
        trace: &mut dyn FnMut(usize, &[f64]),
    ) -> Result<(), FitError> {
        macro_rules! by_n {
            ($($n:literal => $d:literal),*) => {
                match plant.species.len() {
                    $($n => self.predict_typed::<$n, $d>(plant, last, out, trace),)*
                    n => Err(FitError::Model(format!("{n} species: at most 8 are supported"))),
                }
            };
        }
        by_n!(1 => 6, 2 => 7, 3 => 8, 4 => 9, 5 => 10, 6 => 11, 7 => 12, 8 => 13)
    }

    fn predict_typed<const N: usize, const D: usize>(
        &self,
        plant: &Plant,
        last: usize,
        out: &mut Vec<f64>,
        trace: &mut dyn FnMut(usize, &[f64]),
    ) -> Result<(), FitError> {
        out.clear();
        let mut sources = Sources::new(plant);
        let t_init = plant.initial.temperature.unwrap_or_else(|| {
            let t = sources.temperature(self.row(0));
            if t.is_finite() && t > 0.0 {
                t
            } else {
                298.15
            }
        });
        let Sensors { mut main, .. } = assemble::sensors::<f64, N, D>(plant, t_init)
            .map_err(|e| FitError::Model(e.message().to_string()))?;
        let last = last.min(self.ticks - 1);
        let mut next = self.observations.iter().peekable();
        for k in 0..=last {
            let c = main.estimate().concentrations;
            trace(k, &c);
            while let Some(o) = next.next_if(|o| o.tick == k) {
                out.push(c.get(o.species).copied().unwrap_or(f64::NAN).to_f64());
            }
            if k == last {
                break;
            }
            let frame = sources.frame::<f64, N>(self.row(k), self.time(k));
            let now = u64::try_from(self.tick_ms * k as i64).unwrap_or(0);
            let _ = main.tick(now, &frame.readings);
        }
        Ok(())
    }
}

/// Smallest concentration a relative lab σ is taken of, mol/m³ (a result
/// of zero still has an uncertainty).
const SIGMA_FLOOR: f64 = 0.1;
