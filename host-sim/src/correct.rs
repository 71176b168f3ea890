//! The corrected estimate in a replay: the kernel's observer, fed with the
//! level signal every tick, the online analysers' readings when there is a
//! new analysis, and lab results at the times they were drawn and known,
//! next to the open-loop balance.

use heapless::Vec as HVec;
use holdup_kernel::diagnostics::{ChiSquareBounds, NisMonitor, NisState};
use holdup_kernel::observer::{ObserverCounters, MAX_BIASES};
use holdup_kernel::{BiasTarget, Inputs, Observer, ObserverSpec, Scalar, Update};

use crate::lab::{Comparison, LabResult};
use crate::plant::{Estimator, Plant};
use crate::to_kernel::{self, I, O, R};

/// Pending lab samples the replay's observer can hold.
pub const LAB_SLOTS: usize = 8;

/// Why lab results were not fused.
#[derive(Clone, Debug, Default, PartialEq, Eq)]
pub struct LabTally {
    /// Fused.
    pub fused: u64,
    /// Rejected by the innovation gate (outliers).
    pub rejected: u64,
    /// Not drawn: vessel near empty, or all slots busy.
    pub not_drawn: u64,
    /// Result came after the maximum age, or its draw was not recorded.
    pub not_pending: u64,
}

/// What happened to the online analysers' readings.
#[derive(Clone, Debug, Default, PartialEq, Eq)]
pub struct AnalyserTally {
    /// Fused.
    pub fused: u64,
    /// Rejected by the innovation gate (outliers).
    pub rejected: u64,
    /// Skipped by the observer (vessel near empty).
    pub skipped: u64,
}

/// One online analyser in the replay's observer.
struct AnalyserFeed {
    species: usize,
    sigma: f64,
}

/// Level innovations in the model-mismatch window.
pub const NIS_WINDOW: usize = 120;

/// The observer with its lab schedule.
pub struct Corrector<S, const N: usize, const D: usize> {
    obs: Observer<S, N, R, O, D, LAB_SLOTS>,
    nis: NisMonitor<S, NIS_WINDOW>,
    lab_sigma: f64,
    /// Lab indices in sample-time order (the lab list is sorted so), cursor.
    next_draw: usize,
    /// Lab indices in result-time order, and cursor.
    by_result: Vec<usize>,
    next_result: usize,
    drawn: Vec<bool>,
    /// Agreement of the corrected estimate with the lab, a priori (taken
    /// at the draw, before that sample's own result is fused).
    pub comparison: Comparison,
    /// Lab outcomes.
    pub tally: LabTally,
    /// Names of the biased meters, in state order.
    pub bias_names: Vec<String>,
    analysers: Vec<AnalyserFeed>,
    /// Agreement of the corrected estimate with the analysers' readings, a
    /// priori (before each reading is fused).
    pub analyser_comparison: Comparison,
    /// Analyser outcomes.
    pub analyser_tally: AnalyserTally,
}

/// Corrected state at one time.
#[derive(Clone, Debug)]
pub struct Corrected<const N: usize> {
    /// Holdup and 1σ, m³.
    pub volume: (f64, f64),
    /// Concentrations, mol/m³.
    pub conc: [f64; N],
    /// Their 1σ, mol/m³.
    pub conc_sigma: [f64; N],
    /// Relative meter biases and 1σ (configured meters only).
    pub bias: Vec<(f64, f64)>,
}

fn result_time(l: &LabResult) -> i64 {
    l.result_time.unwrap_or(l.sample_time)
}

impl<S: Scalar, const N: usize, const D: usize> Corrector<S, N, D> {
    /// Build the observer for `plant` with estimator settings `est`.
    pub fn new(
        plant: &Plant,
        est: &Estimator,
        temperature: f64,
        labs: &[LabResult],
    ) -> Result<Self, holdup_kernel::Error> {
        let ves = to_kernel::vessel::<S, N>(plant, temperature)?;
        let v0 = plant.initial.volume.max(plant.min_holdup);
        let per_hour = |x: f64| x * x / 3600.0;
        let mut amount_noise = [S::ZERO; N];
        let mut amount_sigma = [S::ZERO; N];
        for i in 0..N {
            let drift = est.concentration_drift.get(i).copied().unwrap_or(0.0);
            amount_noise[i] = S::of(per_hour(drift * v0));
            let sd = est
                .initial_concentration_sigma
                .get(i)
                .copied()
                .unwrap_or(0.0);
            amount_sigma[i] = S::of(sd * v0);
        }
        let mut biases: HVec<BiasTarget, MAX_BIASES> = HVec::new();
        for m in est.bias_meters.iter().take(MAX_BIASES) {
            let idx = u8::try_from(m.index).unwrap_or(u8::MAX);
            let _ = biases.push(if m.outlet {
                BiasTarget::Outlet(idx)
            } else {
                BiasTarget::Inlet(idx)
            });
        }
        while biases.len() < D - 1 - N {
            let _ = biases.push(BiasTarget::Unused);
        }
        let spec = ObserverSpec {
            level_sigma: S::of(est.level_sigma),
            volume_noise: S::of(per_hour(est.holdup_drift)),
            amount_noise,
            bias_noise: S::of(per_hour(est.bias_drift)),
            initial_volume_sigma: S::of(est.initial_volume_sigma),
            initial_amount_sigma: amount_sigma,
            initial_bias_sigma: S::of(est.bias_sigma),
            gate: S::of(est.gate),
            lab_max_age_ms: est.lab_max_age_ms,
            biases,
        };
        let obs = Observer::new(ves, spec)?;
        // Two-sided 95 % bounds on the windowed sum of level NIS values.
        let nis = NisMonitor::new(ChiSquareBounds::new(S::of(0.95))?)?;
        let mut by_result: Vec<usize> = (0..labs.len()).collect();
        by_result.sort_by_key(|&i| result_time(&labs[i]));
        Ok(Self {
            obs,
            nis,
            lab_sigma: est.lab_sigma,
            next_draw: 0,
            by_result,
            next_result: 0,
            drawn: vec![false; labs.len()],
            comparison: Comparison::new(plant.species.len()),
            tally: LabTally::default(),
            bias_names: est.bias_meters.iter().map(|m| m.name.clone()).collect(),
            analysers: plant
                .analysers
                .iter()
                .map(|a| AnalyserFeed {
                    species: a.species,
                    sigma: a.sigma,
                })
                .collect(),
            analyser_comparison: Comparison::new(plant.species.len()),
            analyser_tally: AnalyserTally::default(),
        })
    }

    /// Everything known at time `t` before the tick from `t`: the level
    /// reading, the analysers' new analyses (`analysers[k]` for the
    /// plant's analyser `k`; `None` when there is none at `t`: the replay
    /// passes one reading per analyser cycle), lab samples drawn up to `t`,
    /// lab results known by `t`.
    pub fn measure(
        &mut self,
        t: i64,
        level: Option<f64>,
        analysers: &[Option<f64>],
        labs: &[LabResult],
    ) {
        if let Some(z) = level.filter(|z| z.is_finite()) {
            let out = self.obs.update_level(S::of(z));
            let _ = self.nis.record(&out);
        }
        for (a, reading) in self.analysers.iter().zip(analysers.iter()) {
            let Some(c) = reading.filter(|c| c.is_finite()) else {
                continue;
            };
            let (est, _) = self.obs.concentrations();
            if let Some(e) = est.get(a.species) {
                self.analyser_comparison.add(a.species, e.to_f64(), c, t);
            }
            match self
                .obs
                .update_concentration(a.species, S::of(c), S::of(a.sigma))
            {
                Update::Accepted { .. } => self.analyser_tally.fused += 1,
                Update::Rejected { .. } => self.analyser_tally.rejected += 1,
                Update::Skipped => self.analyser_tally.skipped += 1,
            }
        }
        while let Some(l) = labs.get(self.next_draw) {
            if l.sample_time > t {
                break;
            }
            let idx = self.next_draw;
            self.next_draw += 1;
            let (c, _) = self.obs.concentrations();
            let c_est = c.get(l.species).map(|x| x.to_f64()).unwrap_or(0.0);
            self.comparison
                .add(l.species, c_est, l.value, l.sample_time);
            // The analysis's 1σ, known at the draw: relative to the current
            // estimate (the result itself is not known yet).
            let sigma = self.lab_sigma * c_est.abs().max(0.1);
            match self.obs.lab_drawn(idx as u32, l.species, S::of(sigma)) {
                Ok(()) => self.drawn[idx] = true,
                Err(_) => self.tally.not_drawn += 1,
            }
        }
        while let Some(&idx) = self.by_result.get(self.next_result) {
            let Some(l) = labs.get(idx) else {
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
            match self.obs.lab_result(idx as u32, S::of(l.value)) {
                Ok(Update::Accepted { .. }) => self.tally.fused += 1,
                Ok(Update::Rejected { .. }) => self.tally.rejected += 1,
                Ok(Update::Skipped) | Err(_) => self.tally.not_pending += 1,
            }
        }
    }

    /// Predict over one tick with the measured inputs.
    pub fn tick(&mut self, u: &Inputs<S, N, I, O>) {
        let _ = self.obs.tick(u);
    }

    /// The corrected state now.
    pub fn state(&self) -> Corrected<N> {
        let (v, sv) = self.obs.volume();
        let (c, sc) = self.obs.concentrations();
        let (b, sb) = self.obs.biases();
        Corrected {
            volume: (v.to_f64(), sv.to_f64()),
            conc: c.map(|x| x.to_f64()),
            conc_sigma: sc.map(|x| x.to_f64()),
            bias: (0..self.bias_names.len())
                .map(|j| (b[j].to_f64(), sb[j].to_f64()))
                .collect(),
        }
    }

    /// Level of the corrected holdup, m.
    pub fn level(&self) -> f64 {
        self.obs.vessel().level().to_f64()
    }

    /// Model-mismatch state of the windowed level NIS.
    pub fn nis_state(&self) -> NisState {
        self.nis.state()
    }

    /// The observer's counters.
    pub fn counters(&self) -> ObserverCounters {
        self.obs.counters()
    }
}
