//! Lab results and online analyses into the sensor, and how the estimates
//! agreed with them.
//!
//! Lab samples are given to the sensor when drawn (`sample_time`) and their
//! results when known (`result_time`, else the sample time); each is
//! compared with the estimate at the sample time, before its own result is
//! fused (a priori). Analyses are compared before they are fused.

use holdup_kernel::{Scalar, Update};

use super::assemble::HostSensor;
use crate::lab::{Comparison, LabResult};
use crate::plant::Plant;

/// Why lab results were or were not fused.
#[derive(Clone, Debug, Default, PartialEq, Eq, serde::Serialize)]
pub struct LabTally {
    /// Fused.
    pub fused: u64,
    /// Rejected by the innovation gate (outliers).
    pub rejected_by_gate: u64,
    /// Not drawn: vessel near empty, or every slot busy.
    pub not_drawn: u64,
    /// The result came after the maximum age, or its sample was dropped.
    pub without_pending_sample: u64,
    /// Drawn in the log's span but still without a result at its end.
    pub pending_at_end: u64,
}

/// What happened to the online analysers' readings.
#[derive(Clone, Debug, Default, PartialEq, Eq, serde::Serialize)]
pub struct AnalyserTally {
    /// Fused.
    pub fused: u64,
    /// Rejected by the innovation gate.
    pub rejected_by_gate: u64,
    /// Skipped by the observer (vessel near empty).
    pub skipped: u64,
}

/// The lab schedule and the comparisons.
pub struct Labs {
    labs: Vec<LabResult>,
    /// Lab indices in result-time order, and the cursor.
    by_result: Vec<usize>,
    next_result: usize,
    /// Next lab index (sample-time order) to draw.
    next_draw: usize,
    drawn: Vec<bool>,
    lab_sigma: Option<f64>,
    analyser: Vec<(usize, f64)>,
    /// Open-loop estimate against the lab at sample times.
    pub open: Comparison,
    /// Corrected estimate against the lab at sample times (a priori).
    pub corrected: Comparison,
    /// Lab outcomes (corrected sensor).
    pub tally: LabTally,
    /// Open-loop estimate against new analyses.
    pub analyser_open: Comparison,
    /// Corrected estimate against new analyses, before fusing them.
    pub analyser_corrected: Comparison,
    /// Analyser outcomes.
    pub analyser_tally: AnalyserTally,
}

fn result_time(l: &LabResult) -> i64 {
    l.result_time.unwrap_or(l.sample_time)
}

impl Labs {
    /// The schedule of `labs` (sorted by sample time) for `plant`.
    pub fn new(plant: &Plant, labs: Vec<LabResult>) -> Self {
        let n = plant.species.len();
        let mut by_result: Vec<usize> = (0..labs.len()).collect();
        by_result.sort_by_key(|&i| result_time(&labs[i]));
        Self {
            drawn: vec![false; labs.len()],
            labs,
            by_result,
            next_result: 0,
            next_draw: 0,
            lab_sigma: plant.estimator.as_ref().map(|e| e.lab_sigma),
            analyser: plant
                .analysers
                .iter()
                .map(|a| (a.species, a.sigma))
                .collect(),
            open: Comparison::new(n),
            corrected: Comparison::new(n),
            tally: LabTally::default(),
            analyser_open: Comparison::new(n),
            analyser_corrected: Comparison::new(n),
            analyser_tally: AnalyserTally::default(),
        }
    }

    /// The lab results (sample-time order).
    pub fn results(&self) -> &[LabResult] {
        &self.labs
    }

    /// Everything known at `t` before the tick from `t`: new analyses,
    /// samples drawn and results known by then. `main` is the reported
    /// sensor (fused into when it has an observer), `open` the open-loop
    /// balance beside it (compared only).
    pub fn at<S: Scalar, const N: usize, const D: usize>(
        &mut self,
        t: i64,
        t0: i64,
        analyses: &[Option<f64>],
        main: &mut HostSensor<S, N, D>,
        open: Option<&HostSensor<S, N, D>>,
    ) {
        let corrected = main.observer().is_some();
        let open_c = open.unwrap_or(main).estimate().concentrations;
        let main_c = main.estimate().concentrations;
        for (&(species, sigma), c) in self.analyser.iter().zip(analyses.iter()) {
            let (Some(c), Some(o)) = (c, open_c.get(species)) else {
                continue;
            };
            self.analyser_open.add(species, o.to_f64(), *c, t);
            if !corrected {
                continue;
            }
            self.analyser_corrected
                .add(species, main_c[species].to_f64(), *c, t);
            match main.analyser(species, S::of(*c), S::of(sigma)) {
                Ok(Update::Accepted { .. }) => self.analyser_tally.fused += 1,
                Ok(Update::Rejected { .. }) => self.analyser_tally.rejected_by_gate += 1,
                Ok(Update::Skipped) | Err(_) => self.analyser_tally.skipped += 1,
            }
        }
        while let Some(l) = self.labs.get(self.next_draw) {
            if l.sample_time > t {
                break;
            }
            let idx = self.next_draw;
            self.next_draw += 1;
            if l.sample_time < t0 {
                self.open.outside_span += 1;
                continue;
            }
            let species = l.species;
            self.open
                .add(species, open_c[species].to_f64(), l.value, l.sample_time);
            let (Some(rel), true) = (self.lab_sigma, corrected) else {
                continue;
            };
            let c_est = main_c[species].to_f64();
            self.corrected.add(species, c_est, l.value, l.sample_time);
            // The analysis's 1σ, known at the draw: relative to the current
            // estimate (the result itself is not known yet).
            let sigma = rel * c_est.abs().max(0.1);
            match main.lab_drawn(idx as u32, species, S::of(sigma)) {
                Ok(()) => self.drawn[idx] = true,
                Err(_) => self.tally.not_drawn += 1,
            }
        }
        while let Some(&idx) = self.by_result.get(self.next_result) {
            let Some(l) = self.labs.get(idx) else {
                self.next_result += 1;
                continue;
            };
            if result_time(l) > t || idx >= self.next_draw {
                break;
            }
            self.next_result += 1;
            if !self.drawn[idx] {
                continue;
            }
            self.drawn[idx] = false;
            match main.lab_result(idx as u32, S::of(l.value)) {
                Ok(Update::Accepted { .. }) => self.tally.fused += 1,
                Ok(Update::Rejected { .. }) => self.tally.rejected_by_gate += 1,
                Ok(Update::Skipped) | Err(_) => self.tally.without_pending_sample += 1,
            }
        }
    }

    /// At the end of the replay: samples never reached (after the log's
    /// end) count as outside the span; drawn ones still without a result
    /// are counted as pending.
    pub fn finish(&mut self) {
        self.open.outside_span += self.labs.len().saturating_sub(self.next_draw);
        self.tally.pending_at_end = self.drawn.iter().filter(|d| **d).count() as u64;
    }
}
