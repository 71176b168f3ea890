//! Replay: a historian log through the kernel, tick by tick, with the same
//! zero-order hold and integer time as on the gateway; estimates, summary
//! and plots written to an output folder.
//!
//! Memory is constant in the log's length: the log is streamed (bounded
//! look-ahead), estimates are written as they are made, plots keep a bounded
//! number of decimated points, and only the lab file (a few rows per shift)
//! is held whole.

use std::fmt;
use std::fs::File;
use std::io::{BufWriter, Write};
use std::path::{Path, PathBuf};
use std::time::Instant;

use holdup_kernel::diagnostics::{
    diagnose, ClosureAlarm, ClosureConfig, ClosureMonitor, DeviceStatus, DiagnosticInputs,
};
use holdup_kernel::{Geometry, Inputs, Quality, Scalar, StatusFlags};
use serde_json::json;

use crate::correct::Corrector;
use crate::demo::CAUTION;
use crate::digits::Digits;
use crate::lab::{self, Comparison, LabError, LabResult};
use crate::log::{LogError, LogReader, SampleState};
use crate::plant::{OutletKind, Plant, ScalarKind, Signal};
use crate::plot::{Band, Color, Figure, Markers, Panel, Series};
use crate::to_kernel::{self, HostVessel, I, O};

/// What to replay and where to put the results.
#[derive(Clone, Debug)]
pub struct Request<'a> {
    /// The checked plant.
    pub plant: &'a Plant,
    /// Historian log.
    pub log: &'a Path,
    /// Optional lab results.
    pub lab: Option<&'a Path>,
    /// Output folder (created if missing).
    pub out_dir: &'a Path,
    /// Write one estimates row every this many ms of plant time (0: every tick).
    pub output_every_ms: u64,
    /// Show a progress indicator on the terminal.
    pub progress: bool,
}

/// Why a replay could not be done.
#[derive(Debug)]
pub enum ReplayError {
    /// The log cannot be read.
    Log(LogError),
    /// The lab file cannot be read.
    Lab(LabError),
    /// The kernel refused the configuration.
    Kernel {
        /// The configuration file.
        path: PathBuf,
        /// The kernel's message.
        message: &'static str,
    },
    /// The log holds no usable data.
    EmptyLog(PathBuf),
    /// Writing an output failed.
    Io {
        /// The file being written.
        path: PathBuf,
        /// The system's error.
        error: std::io::Error,
    },
}

impl fmt::Display for ReplayError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            ReplayError::Log(e) => write!(f, "{e}"),
            ReplayError::Lab(e) => write!(f, "{e}"),
            ReplayError::Kernel { path, message } => write!(
                f,
                "{}: the configuration is not accepted by the kernel: {message}",
                path.display()
            ),
            ReplayError::EmptyLog(p) => write!(
                f,
                "{}: the log holds no valid timestamped data to replay",
                p.display()
            ),
            ReplayError::Io { path, error } => write!(f, "{}: {error}", path.display()),
        }
    }
}

impl std::error::Error for ReplayError {}

impl From<LogError> for ReplayError {
    fn from(e: LogError) -> Self {
        ReplayError::Log(e)
    }
}

fn io_err(path: &Path) -> impl Fn(std::io::Error) -> ReplayError + '_ {
    move |error| ReplayError::Io {
        path: path.to_path_buf(),
        error,
    }
}

/// Format ms since the Unix epoch as ISO 8601 UTC.
pub fn iso(ms: i64) -> String {
    chrono::DateTime::from_timestamp_millis(ms)
        .map(|d| d.format("%Y-%m-%dT%H:%M:%S%.3fZ").to_string())
        .unwrap_or_else(|| format!("{ms} ms"))
}

/// The outcome of a replay: the summary as JSON (also written to
/// `summary.json`) and as text (also printed).
#[derive(Clone, Debug)]
pub struct Outcome {
    /// Machine-readable summary.
    pub json: serde_json::Value,
    /// Human-readable summary.
    pub text: String,
}

/// Run a replay.
pub fn run(req: &Request<'_>) -> Result<Outcome, ReplayError> {
    let n = req.plant.species.len();
    // The observer state is padded to four bias slots (D = N + 5), so one
    // instance per species count and scalar type covers every configuration.
    macro_rules! by_n {
        ($s:ty) => {
            match n {
                1 => run_typed::<$s, 1, 6>(req),
                2 => run_typed::<$s, 2, 7>(req),
                3 => run_typed::<$s, 3, 8>(req),
                4 => run_typed::<$s, 4, 9>(req),
                5 => run_typed::<$s, 5, 10>(req),
                6 => run_typed::<$s, 6, 11>(req),
                7 => run_typed::<$s, 7, 12>(req),
                _ => run_typed::<$s, 8, 13>(req),
            }
        };
    }
    match req.plant.scalar {
        ScalarKind::F32 => by_n!(f32),
        ScalarKind::F64 => by_n!(f64),
    }
}

/// Index of each signal's tag in the reader's sample order.
fn tag_index(plant: &Plant, s: &Signal) -> Option<usize> {
    s.tag()
        .and_then(|t| plant.tags.iter().position(|o| o.tag == t))
}

/// A signal resolved against the reader.
#[derive(Clone, Debug)]
struct Source {
    signal: Signal,
    index: Option<usize>,
}

impl Source {
    fn new(plant: &Plant, signal: &Signal) -> Self {
        Self {
            signal: signal.clone(),
            index: tag_index(plant, signal),
        }
    }

    /// SI value and state (constants are always exact).
    fn read(&self, samples: &[crate::log::TagSample]) -> (f64, SampleState) {
        match self.index.and_then(|i| samples.get(i)) {
            None => (self.signal.to_si(0.0), SampleState::Exact),
            Some(s) => (self.signal.to_si(s.value), s.state),
        }
    }
}

/// Ticks with each kernel flag raised.
#[derive(Clone, Debug, Default)]
struct Tally {
    flags: [u64; 16],
}

/// Quality of each category of input this tick.
#[derive(Clone, Copy, Debug)]
struct InputQuality<const N: usize> {
    flow: Quality,
    level: Quality,
    temperature: Quality,
    feed: [Quality; N],
}

impl<const N: usize> Default for InputQuality<N> {
    fn default() -> Self {
        Self {
            flow: Quality::Good,
            level: Quality::Good,
            temperature: Quality::Good,
            feed: [Quality::Good; N],
        }
    }
}

impl<const N: usize> InputQuality<N> {
    /// The worst of all inputs, as a word for estimates.csv.
    fn word(&self) -> &'static str {
        let w = self
            .feed
            .iter()
            .fold(self.flow.max(self.temperature), |a, b| a.max(*b));
        quality_word(w)
    }
}

/// Quality of a resampled log value: interpolated or held within its
/// maximum age is good; stale (older) is uncertain; missing is bad.
fn quality_of(state: SampleState) -> Quality {
    match state {
        SampleState::Stale => Quality::Uncertain,
        SampleState::Missing => Quality::Bad,
        _ => Quality::Good,
    }
}

fn quality_word(q: Quality) -> &'static str {
    match q {
        Quality::Good => "good",
        Quality::Uncertain => "uncertain",
        Quality::Bad => "bad",
    }
}

/// The signals of the plant resolved against the reader.
struct Sources {
    inlet_flow: Vec<Source>,
    feeds: Vec<Vec<Source>>,
    outlet_flow: Vec<Option<Source>>,
    temperature: Source,
    level: Option<Source>,
    /// Each analyser's species and reading.
    analysers: Vec<(usize, Source)>,
}

impl Sources {
    fn new(plant: &Plant) -> Self {
        Self {
            inlet_flow: plant
                .inlets
                .iter()
                .map(|i| Source::new(plant, &i.flow))
                .collect(),
            feeds: plant
                .inlets
                .iter()
                .map(|i| i.feed.iter().map(|s| Source::new(plant, s)).collect())
                .collect(),
            outlet_flow: plant
                .outlets
                .iter()
                .map(|o| match &o.kind {
                    OutletKind::Measured(s) => Some(Source::new(plant, s)),
                    _ => None,
                })
                .collect(),
            temperature: Source::new(plant, &plant.temperature),
            level: plant.level.as_ref().map(|l| Source::new(plant, l)),
            analysers: plant
                .analysers
                .iter()
                .map(|a| (a.species, Source::new(plant, &a.reading)))
                .collect(),
        }
    }

    /// Each analyser's reading at this tick (mol/m³): `Some` only for a
    /// point stored at the tick (`Exact`) that is finite. An interpolated
    /// or held value is not a new analysis.
    fn analyser_readings(&self, samples: &[crate::log::TagSample]) -> Vec<Option<f64>> {
        self.analysers
            .iter()
            .map(|(_, src)| {
                let (c, st) = src.read(samples);
                (st == SampleState::Exact && c.is_finite()).then_some(c)
            })
            .collect()
    }

    /// The kernel inputs held over the tick from the current samples, the
    /// worst input quality, the flows in m³/h (for plots) and the measured
    /// level (NaN when missing or stale).
    fn inputs<S: Scalar, const N: usize>(
        &self,
        samples: &[crate::log::TagSample],
    ) -> (Inputs<S, N, I, O>, InputQuality<N>, Vec<f64>, Option<f64>) {
        let mut u: Inputs<S, N, I, O> = Inputs::quiescent(S::ONE);
        let mut q = InputQuality::<N>::default();
        // A missing value reaches the kernel as NaN: it is replaced and flagged there.
        let si = |(x, st): (f64, SampleState)| {
            if st == SampleState::Missing {
                f64::NAN
            } else {
                x
            }
        };
        let mut flows = Vec::new();
        for (k, src) in self.inlet_flow.iter().enumerate() {
            let r = src.read(samples);
            q.flow = q.flow.max(quality_of(r.1));
            u.inlet_flows[k] = S::of(si(r));
            flows.push(r.0 * 3600.0);
            for (i, f) in self.feeds[k].iter().enumerate().take(N) {
                let r = f.read(samples);
                q.feed[i] = q.feed[i].max(quality_of(r.1));
                u.feed[k][i] = S::of(si(r));
            }
        }
        for (k, src) in self.outlet_flow.iter().enumerate() {
            if let Some(src) = src {
                let r = src.read(samples);
                q.flow = q.flow.max(quality_of(r.1));
                u.outlet_flows[k] = S::of(si(r));
                flows.push(r.0 * 3600.0);
            }
        }
        let r = self.temperature.read(samples);
        q.temperature = quality_of(r.1);
        u.temperature = S::of(si(r));
        let level = self.level.as_ref().map(|l| {
            let (z, st) = l.read(samples);
            q.level = quality_of(st);
            if st == SampleState::Missing || st == SampleState::Stale {
                f64::NAN
            } else {
                z
            }
        });
        if self.level.is_none() {
            q.level = Quality::Bad;
        }
        (u, q, flows, level)
    }
}

fn kernel_err(plant: &Plant) -> impl Fn(holdup_kernel::Error) -> ReplayError + '_ {
    move |e| ReplayError::Kernel {
        path: plant.path.clone(),
        message: e.message(),
    }
}

fn agreement_json(a: &crate::lab::Agreement) -> serde_json::Value {
    json!({
        "n": a.n,
        "bias_mol_m3": a.bias,
        "rmse_mol_m3": a.rmse,
        "max_abs_error_mol_m3": a.max_abs,
        "max_error_at": a.max_at.map(iso),
    })
}

fn run_typed<S: Scalar, const N: usize, const D: usize>(
    req: &Request<'_>,
) -> Result<Outcome, ReplayError> {
    let plant = req.plant;
    std::fs::create_dir_all(req.out_dir).map_err(io_err(req.out_dir))?;
    let labs: Vec<LabResult> = match req.lab {
        Some(p) => lab::load(p, plant).map_err(ReplayError::Lab)?,
        None => Vec::new(),
    };

    let mut reader = LogReader::open(req.log, &plant.log, &plant.tags)?;
    let t0 = reader
        .first_time()?
        .ok_or_else(|| ReplayError::EmptyLog(req.log.to_path_buf()))?;
    let sources = Sources::new(plant);

    // Initial temperature: configured, or the signal's first value.
    let t_init = match plant.initial.temperature {
        Some(t) => t,
        None => {
            let samples = reader
                .sample(t0)?
                .ok_or_else(|| ReplayError::EmptyLog(req.log.to_path_buf()))?;
            let (t, _) = sources.temperature.read(samples);
            if t.is_finite() && t > 0.0 {
                t
            } else {
                298.15
            }
        }
    };
    let mut ves: HostVessel<S, N> = to_kernel::vessel(plant, t_init).map_err(kernel_err(plant))?;
    let mut corr: Option<Corrector<S, N, D>> = match &plant.estimator {
        Some(e) => Some(Corrector::new(plant, e, t_init, &labs).map_err(kernel_err(plant))?),
        None => None,
    };
    let geometry: Geometry<f64> = Geometry::new(plant.shape.clone()).map_err(kernel_err(plant))?;
    let n_species = plant.species.len();

    // Outputs.
    let est_path = req.out_dir.join("estimates.csv");
    let mut est = BufWriter::new(File::create(&est_path).map_err(io_err(&est_path))?);
    let mut header = String::from("time,elapsed_h,holdup_m3");
    if corr.is_some() {
        header.push_str(",holdup_sigma_m3");
    }
    header.push_str(",level_m");
    if sources.level.is_some() {
        header.push_str(",measured_level_m");
    }
    for s in &plant.species {
        let n = csv_name(&s.name);
        header.push_str(&format!(",{n}_mol_m3"));
        if corr.is_some() {
            header.push_str(&format!(",{n}_sigma_mol_m3,{n}_open_loop_mol_m3"));
        }
    }
    for a in &plant.analysers {
        let n = csv_name(&plant.species[a.species].name);
        header.push_str(&format!(",{n}_analyser_mol_m3"));
    }
    if let Some(c) = &corr {
        for b in &c.bias_names {
            let n = csv_name(b);
            header.push_str(&format!(",bias_{n},bias_{n}_sigma"));
        }
    }
    if corr.is_some() {
        header.push_str(",status,holdup_quality,concentration_quality");
    }
    header.push_str(",flags,input_quality\n");
    est.write_all(header.as_bytes())
        .map_err(io_err(&est_path))?;

    let hours = |t: i64| (t - t0) as f64 / 3.6e6;
    let corrected = corr.is_some();
    let est_label = if corrected { "corrected" } else { "estimate" };
    let mut s_level_est = Series::new(&format!("level, {est_label}"), Color::nth(0));
    let mut s_level_meas = Series::new("measured level", Color::nth(5));
    let mut s_hold_est = Series::new(&format!("holdup, {est_label}"), Color::nth(0));
    let mut s_hold_open = Series::new("holdup, open loop", Color::nth(1));
    let mut s_hold_meas = Series::new("holdup from measured level", Color::nth(5));
    let mut conc_series: Vec<Series> = plant
        .species
        .iter()
        .map(|s| Series::new(&format!("{} {est_label}", s.name), Color::nth(0)))
        .collect();
    let mut open_series: Vec<Series> = plant
        .species
        .iter()
        .map(|s| Series::new(&format!("{} open loop", s.name), Color::nth(1)))
        .collect();
    let mut bias_series: Vec<Series> = corr
        .as_ref()
        .map(|c| {
            c.bias_names
                .iter()
                .enumerate()
                .map(|(j, b)| Series::new(&format!("bias of {b}"), Color::nth(j + 2)))
                .collect()
        })
        .unwrap_or_default();
    let mut flow_series: Vec<Series> = plant
        .inlets
        .iter()
        .enumerate()
        .map(|(k, i)| Series::new(&format!("in: {}", i.name), Color::nth(k + 2)))
        .chain(
            plant
                .outlets
                .iter()
                .enumerate()
                .filter(|(_, o)| matches!(o.kind, OutletKind::Measured(_)))
                .map(|(k, o)| Series::new(&format!("out: {}", o.name), Color::nth(k + 5))),
        )
        .collect();
    let mut s_outflow = Series::new("total outflow (balance)", Color::nth(1));

    let mut analyser_marks: Vec<Markers> = plant
        .analysers
        .iter()
        .map(|_| Markers::new("analyser", Color::nth(7)))
        .collect();
    let mut analyser_open = Comparison::new(n_species);
    let mut analyser_last: Vec<Option<i64>> = vec![None; plant.analysers.len()];
    let mut analyser_repeats: u64 = 0;
    let mut open_cmp = Comparison::new(n_species);
    let mut lab_cursor = 0usize;
    let mut tally = Tally::default();
    let mut level_err = (0.0f64, 0.0f64, 0u64); // sum sq, max abs, n

    let started = Instant::now();
    let bar = if req.progress {
        let b = indicatif::ProgressBar::new_spinner();
        b.set_style(
            indicatif::ProgressStyle::with_template("{spinner} {elapsed} {msg}")
                .unwrap_or_else(|_| indicatif::ProgressStyle::default_spinner()),
        );
        Some(b)
    } else {
        None
    };

    let tick = i64::from(plant.tick_ms);
    let every = (req.output_every_ms as i64).max(tick);
    // Balance closure: needs the estimator's noise settings, the level, and
    // every outlet metered (an orifice or weir flow is not a measurement).
    let computed_outlets = plant
        .outlets
        .iter()
        .any(|o| !matches!(o.kind, OutletKind::Measured(_)));
    let closure_settings = plant
        .estimator
        .as_ref()
        .filter(|_| sources.level.is_some() && !computed_outlets);
    let mut closure: Option<ClosureMonitor<S>> = None;
    let mut closure_alarms: Vec<(i64, Option<i64>, ClosureAlarm)> = Vec::new();
    let mut net_prev = 0.0f64; // m³ in − out over the previous tick, from the meters
    let mut status_ticks = [0u64; 5];
    let mut reason_ticks: std::collections::BTreeMap<&'static str, u64> = Default::default();
    let n_inlets = plant.inlets.len();
    let mut ticks: u64 = 0;
    let mut t = t0;
    let mut row = String::new();
    let dg = Digits::of::<S>();
    while let Some(samples) = reader.sample(t)? {
        let (u, quality, flows_now, measured_level) = sources.inputs::<S, N>(samples);
        // One reading per analyser cycle: a historian that repeats the last
        // analysis every tick must not count it as new information.
        let mut analysed = sources.analyser_readings(samples);
        for ((c, last), a) in analysed
            .iter_mut()
            .zip(analyser_last.iter_mut())
            .zip(plant.analysers.iter())
        {
            if c.is_some() {
                if last.is_some_and(|l| (t - l) < a.cycle_ms as i64) {
                    *c = None;
                    analyser_repeats += 1;
                } else {
                    *last = Some(t);
                }
            }
        }

        // Open loop at t; lab samples drawn up to t compared with it.
        let open_conc = ves.concentrations().map(|c| c.to_f64());
        while let Some(l) = labs.get(lab_cursor) {
            if l.sample_time > t {
                break;
            }
            if l.sample_time < t0 {
                open_cmp.outside_span += 1;
            } else {
                open_cmp.add(l.species, open_conc[l.species], l.value, l.sample_time);
            }
            lab_cursor += 1;
        }
        // Analysers against the open loop (every new analysis).
        for ((species, _), (c, m)) in sources
            .analysers
            .iter()
            .zip(analysed.iter().zip(analyser_marks.iter_mut()))
        {
            if let Some(c) = c {
                analyser_open.add(*species, open_conc[*species], *c, t);
                m.push(hours(t), *c);
            }
        }
        // Corrected: the level and analysers now, lab draws and results up
        // to now.
        let cstate = corr.as_mut().map(|c| {
            c.measure(t, measured_level, &analysed, &labs);
            c.state()
        });
        let (v, z, conc) = match (&cstate, &corr) {
            (Some(cs), Some(c)) => (cs.volume.0, c.level(), cs.conc),
            _ => (ves.volume().to_f64(), ves.level().to_f64(), open_conc),
        };

        let x = hours(t);
        s_level_est.push(x, z);
        s_hold_est.push(x, v);
        if corrected {
            s_hold_open.push(x, ves.volume().to_f64());
        }
        if let Some(m) = measured_level {
            s_level_meas.push(x, m);
            s_hold_meas.push(
                x,
                if m.is_finite() {
                    geometry.volume_at(m)
                } else {
                    f64::NAN
                },
            );
            if m.is_finite() {
                let d = ves.level().to_f64() - m;
                level_err.0 += d * d;
                level_err.1 = level_err.1.max(d.abs());
                level_err.2 += 1;
            }
        }
        for (s, c) in conc_series.iter_mut().zip(conc.iter()) {
            s.push(x, *c);
        }
        if corrected {
            for (s, c) in open_series.iter_mut().zip(open_conc.iter()) {
                s.push(x, *c);
            }
        }
        if let Some(cs) = &cstate {
            for (s, b) in bias_series.iter_mut().zip(cs.bias.iter()) {
                s.push(x, 100.0 * b.0);
            }
        }
        for (s, q) in flow_series.iter_mut().zip(flows_now.iter()) {
            s.push(x, *q);
        }

        // Closure window: the holdup the level says now against what the
        // meters said went in and out during the previous tick.
        if let Some(e) = closure_settings {
            if closure.is_none() {
                let q_nom: f64 = flows_now
                    .iter()
                    .map(|q| (q / 3600.0).powi(2))
                    .sum::<f64>()
                    .sqrt();
                let z0 = measured_level
                    .filter(|z| z.is_finite())
                    .unwrap_or(ves.level().to_f64());
                let cfg = ClosureConfig {
                    window_ticks: u32::try_from(e.closure_window_ms / plant.tick_ms as u64)
                        .unwrap_or(u32::MAX)
                        .max(1),
                    tick_ms: plant.tick_ms,
                    holdup_noise: S::of(geometry.area_at(z0) * e.level_sigma),
                    net_flow_noise: S::of((e.flow_sigma * q_nom).max(1e-9)),
                    k: S::of(e.cusum_k),
                    h: S::of(e.cusum_h),
                };
                closure = Some(ClosureMonitor::new(&cfg).map_err(kernel_err(plant))?);
            }
            if let Some(m) = closure.as_mut() {
                let held = measured_level
                    .filter(|z| z.is_finite())
                    .map(|z| S::of(geometry.volume_at(z)));
                let rep = m.update(held, S::of(net_prev));
                match (rep.alarm, closure_alarms.last_mut()) {
                    (Some(a), Some(last)) if last.1.is_none() && last.2 == a => {}
                    (Some(a), last) => {
                        if let Some(l) = last {
                            if l.1.is_none() {
                                l.1 = Some(t);
                            }
                        }
                        closure_alarms.push((t, None, a));
                    }
                    (None, Some(last)) if last.1.is_none() => last.1 = Some(t),
                    (None, _) => {}
                }
            }
            let (q_in, q_out) = flows_now.split_at(n_inlets.min(flows_now.len()));
            net_prev = (q_in.iter().sum::<f64>() - q_out.iter().sum::<f64>()) / 3600.0
                * (tick as f64 / 1000.0);
        }

        let report = ves.step(&u);
        if let Some(c) = corr.as_mut() {
            c.tick(&u);
        }
        // NE107 status of the corrected estimate.
        let diag = corr.as_ref().map(|c| {
            let d = diagnose(&DiagnosticInputs::<N> {
                flags: report.flags,
                flow: quality.flow,
                level: quality.level,
                temperature: quality.temperature,
                feed: quality.feed,
                closure: closure.as_ref().and_then(|m| m.alarm()),
                nis: c.nis_state(),
                function_check: false,
            });
            status_ticks[d.status as usize] += 1;
            for r in d.reasons.names() {
                *reason_ticks.entry(r).or_default() += 1;
            }
            d
        });
        ticks += 1;
        s_outflow.push(
            x,
            report.outflow_volume.to_f64() / (tick as f64 / 1000.0) * 3600.0,
        );
        for (bit, c) in tally.flags.iter_mut().enumerate() {
            if report.flags.bits() & (1 << bit) != 0 {
                *c += 1;
            }
        }
        if (t - t0) % every == 0 {
            row.clear();
            // elapsed_h is a convenience beside the exact time; every other
            // figure with the digits of the replay's scalar type.
            row.push_str(&format!("{},{:.6},{}", iso(t), x, dg.sci(v)));
            if let Some(cs) = &cstate {
                row.push_str(&format!(",{}", dg.sci(cs.volume.1)));
            }
            row.push_str(&format!(",{}", dg.pos(z)));
            if let Some(m) = measured_level {
                if m.is_finite() {
                    row.push_str(&format!(",{}", dg.pos(m)));
                } else {
                    row.push(',');
                }
            }
            for i in 0..n_species.min(N) {
                row.push_str(&format!(",{}", dg.sci(conc[i])));
                if let Some(cs) = &cstate {
                    row.push_str(&format!(
                        ",{},{}",
                        dg.sci(cs.conc_sigma[i]),
                        dg.sci(open_conc[i])
                    ));
                }
            }
            for c in &analysed {
                match c {
                    Some(c) => row.push_str(&format!(",{}", dg.sci(*c))),
                    None => row.push(','),
                }
            }
            if let Some(cs) = &cstate {
                for b in &cs.bias {
                    row.push_str(&format!(",{},{}", dg.pos(b.0), dg.pos(b.1)));
                }
            }
            let names: Vec<&str> = report.flags.names().collect();
            if let Some(d) = &diag {
                let worst_c = d
                    .concentrations
                    .iter()
                    .take(n_species)
                    .fold(Quality::Good, |a, b| a.max(*b));
                row.push_str(&format!(
                    ",{},{},{}",
                    d.status.letter(),
                    quality_word(d.holdup),
                    quality_word(worst_c)
                ));
            }
            row.push_str(&format!(",{},{}\n", names.join("|"), quality.word()));
            est.write_all(row.as_bytes()).map_err(io_err(&est_path))?;
        }
        if let Some(b) = &bar {
            if ticks % 20_000 == 0 {
                b.set_message(format!("plant time {} ({} ticks)", iso(t), ticks));
                b.tick();
            }
        }
        t += tick;
    }
    if let Some(b) = bar {
        b.finish_and_clear();
    }
    est.flush().map_err(io_err(&est_path))?;
    open_cmp.outside_span += labs.len().saturating_sub(lab_cursor);
    let t_end = t;
    let wall = started.elapsed().as_secs_f64();

    // Plots.
    let stats = reader.stats();
    let bands: Vec<Band> = stats
        .fault_windows()
        .into_iter()
        .map(|(a, b, label)| Band {
            x0: hours(a),
            x1: hours(b),
            label,
        })
        .collect();
    let mut bands = bands;
    for (a, b, alarm) in &closure_alarms {
        bands.push(Band {
            x0: hours(*a),
            x1: hours(b.unwrap_or(t_end)),
            label: alarm.message().to_string(),
        });
    }
    let x_label = format!("time since {} [h]", iso(t0));
    let footer = CAUTION.to_string();
    let mut fig_holdup = Panel::new("holdup [m³]");
    let mut fig_level = Panel::new("level [m]");
    // Measured first, so the estimates are drawn on top of the noisier trace.
    if sources.level.is_some() {
        fig_level.series.push(s_level_meas);
        fig_holdup.series.push(s_hold_meas);
    }
    if corrected {
        fig_holdup.series.push(s_hold_open);
    }
    fig_holdup.series.push(s_hold_est);
    fig_level.series.push(s_level_est);
    fig_level.bands = bands.clone();
    write_fig(
        req.out_dir,
        "holdup.svg",
        Figure {
            title: format!("{}: holdup and level", plant.name),
            x_label: x_label.clone(),
            panels: vec![fig_holdup, fig_level],
            footer: footer.clone(),
        },
    )?;
    let mut conc_panels = Vec::new();
    let mut open_iter = open_series.into_iter();
    for (i, s) in conc_series.into_iter().enumerate() {
        let mut p = Panel::new(&format!("{} [mol/m³]", plant.species[i].name));
        let mut m = Markers::new("lab result", Color::nth(6));
        for l in labs.iter().filter(|l| l.species == i) {
            m.push(hours(l.sample_time), l.value);
        }
        if let Some(o) = open_iter.next().filter(|_| corrected) {
            p.series.push(o);
        }
        p.series.push(s);
        p.markers.push(m);
        for (a, marks) in plant.analysers.iter().zip(analyser_marks.iter_mut()) {
            if a.species == i {
                p.markers.push(std::mem::replace(
                    marks,
                    Markers::new("analyser", Color::nth(7)),
                ));
            }
        }
        p.bands = bands.clone();
        conc_panels.push(p);
    }
    for (k, chunk) in conc_panels.chunks_mut(4).enumerate() {
        let name = if k == 0 {
            "concentrations.svg".to_string()
        } else {
            format!("concentrations-{}.svg", k + 1)
        };
        write_fig(
            req.out_dir,
            &name,
            Figure {
                title: format!("{}: composition, estimate and lab", plant.name),
                x_label: x_label.clone(),
                panels: chunk.iter_mut().map(std::mem::take).collect(),
                footer: footer.clone(),
            },
        )?;
    }
    let mut flows = Panel::new("flow [m³/h]");
    flows.series = flow_series;
    // The balance's outflow adds information only where some outlet is not
    // metered (orifice, weir) or the vessel overflowed.
    let computed = plant
        .outlets
        .iter()
        .any(|o| !matches!(o.kind, OutletKind::Measured(_)));
    if computed || tally.flags[2] > 0 {
        flows.series.push(s_outflow);
    }
    flows.bands = bands.clone();
    let mut flow_panels = vec![flows];
    if !bias_series.is_empty() {
        let mut p = Panel::new("estimated meter bias [%]");
        p.series = bias_series;
        p.bands = bands;
        flow_panels.push(p);
    }
    write_fig(
        req.out_dir,
        "flows.svg",
        Figure {
            title: format!("{}: flows", plant.name),
            x_label,
            panels: flow_panels,
            footer,
        },
    )?;

    // Summary.
    // Flag names come from the kernel's own table (one bit each).
    let flags_json: serde_json::Map<String, serde_json::Value> = tally
        .flags
        .iter()
        .enumerate()
        .filter(|(_, n)| **n > 0)
        .filter_map(|(bit, n)| {
            StatusFlags::from_bits(1 << bit)
                .names()
                .next()
                .map(|name| (name.to_string(), json!(n)))
        })
        .collect();
    let open_agree = open_cmp.results();
    let corr_agree = corr.as_ref().map(|c| c.comparison.results());
    let lab_json: Vec<serde_json::Value> = plant
        .species
        .iter()
        .enumerate()
        .map(|(i, s)| {
            let mut v = json!({ "species": s.name, "open_loop": agreement_json(&open_agree[i]) });
            if let Some(c) = &corr_agree {
                v["corrected"] = agreement_json(&c[i]);
            }
            v
        })
        .collect();
    let final_state = match &corr {
        Some(c) => {
            let cs = c.state();
            json!({
                "holdup_m3": cs.volume.0,
                "holdup_sigma_m3": cs.volume.1,
                "level_m": c.level(),
                "concentrations_mol_m3": plant.species.iter().zip(cs.conc.iter())
                    .map(|(s, x)| (s.name.clone(), json!(x))).collect::<serde_json::Map<_, _>>(),
                "concentration_sigmas_mol_m3": plant.species.iter().zip(cs.conc_sigma.iter())
                    .map(|(s, x)| (s.name.clone(), json!(x))).collect::<serde_json::Map<_, _>>(),
                "meter_bias": c.bias_names.iter().zip(cs.bias.iter())
                    .map(|(n, b)| (n.clone(), json!({"relative": b.0, "sigma": b.1}))).collect::<serde_json::Map<_, _>>(),
            })
        }
        None => json!({
            "holdup_m3": ves.volume().to_f64(),
            "level_m": ves.level().to_f64(),
            "concentrations_mol_m3": plant.species.iter().zip(ves.concentrations().iter())
                .map(|(s, x)| (s.name.clone(), json!(x.to_f64()))).collect::<serde_json::Map<_, _>>(),
        }),
    };
    let estimator_json = corr.as_ref().map(|c| {
        let k = c.counters();
        json!({
            "level_accepted": k.level_accepted,
            "level_rejected": k.level_rejected,
            "composition_accepted": k.composition_accepted,
            "composition_rejected": k.composition_rejected,
            "skipped": k.skipped,
            "lab_expired": k.lab_expired,
            "covariance_guarded": k.covariance_guarded,
            "lab_fused": c.tally.fused,
            "lab_rejected_by_gate": c.tally.rejected,
            "lab_not_drawn": c.tally.not_drawn,
            "lab_result_without_pending_sample": c.tally.not_pending,
            "analyser_fused": c.analyser_tally.fused,
            "analyser_rejected_by_gate": c.analyser_tally.rejected,
            "analyser_skipped": c.analyser_tally.skipped,
        })
    });
    let analyser_agree_open = analyser_open.results();
    let analyser_agree_corr = corr.as_ref().map(|c| c.analyser_comparison.results());
    let analyser_json: Vec<serde_json::Value> = plant
        .analysers
        .iter()
        .map(|a| {
            let mut v = json!({
                "species": plant.species[a.species].name,
                "tag": a.reading.tag(),
                "sigma_mol_m3": a.sigma,
                "cycle_ms": a.cycle_ms,
                "open_loop": agreement_json(&analyser_agree_open[a.species]),
            });
            if let Some(c) = &analyser_agree_corr {
                v["corrected_before_fusing"] = agreement_json(&c[a.species]);
            }
            v
        })
        .collect();
    let level_json = if level_err.2 > 0 {
        json!({
            "rmse_m": (level_err.0 / level_err.2 as f64).sqrt(),
            "max_abs_m": level_err.1,
            "n": level_err.2,
        })
    } else {
        serde_json::Value::Null
    };
    let json = json!({
        "plant": plant.name,
        "config": plant.path.display().to_string(),
        "log": req.log.display().to_string(),
        "lab": req.lab.map(|p| p.display().to_string()),
        "scalar": match plant.scalar { ScalarKind::F32 => "f32", ScalarKind::F64 => "f64" },
        "method": format!("{:?}", plant.method),
        "tick_ms": plant.tick_ms,
        "start": iso(t0),
        "end": iso(t_end),
        "ticks": ticks,
        "wall_seconds": wall,
        "log_stats": stats.to_json(),
        "kernel_flags_ticks": flags_json,
        "open_loop_level_vs_measured": level_json,
        "estimator": estimator_json,
        "closure": closure.as_ref().map(|m| json!({
            "windows_evaluated": m.windows_evaluated(),
            "windows_lost": m.windows_lost(),
            "residual_sigma_m3": m.residual_sigma().to_f64(),
            "alarms": closure_alarms.iter().map(|(a, b, al)| json!({
                "start": iso(*a),
                "end": b.map(iso),
                "alarm": al.message(),
            })).collect::<Vec<_>>(),
        })),
        "status_ticks": if corrected {
            json!({
                "good": status_ticks[DeviceStatus::Good as usize],
                "maintenance_required": status_ticks[DeviceStatus::MaintenanceRequired as usize],
                "out_of_specification": status_ticks[DeviceStatus::OutOfSpecification as usize],
                "function_check": status_ticks[DeviceStatus::FunctionCheck as usize],
                "failure": status_ticks[DeviceStatus::Failure as usize],
                "reasons": reason_ticks.iter().map(|(k, v)| (k.to_string(), json!(v))).collect::<serde_json::Map<_, _>>(),
            })
        } else {
            serde_json::Value::Null
        },
        "analyser_comparison": analyser_json,
        "analyser_repeats_within_cycle": analyser_repeats,
        "lab_comparison": lab_json,
        "lab_outside_replay": open_cmp.outside_span,
        "final": final_state,
        "caution": CAUTION,
    });
    let json_path = req.out_dir.join("summary.json");
    std::fs::write(
        &json_path,
        serde_json::to_string_pretty(&json).unwrap_or_default() + "\n",
    )
    .map_err(io_err(&json_path))?;

    let mut text = String::new();
    text.push_str(&format!(
        "Replay of {} ({}, {:?}, tick {} ms{})\n",
        plant.name,
        if plant.scalar == ScalarKind::F32 {
            "f32"
        } else {
            "f64"
        },
        plant.method,
        plant.tick_ms,
        if corrected {
            match (plant.analysers.is_empty(), req.lab.is_some()) {
                (true, true) => ", corrected by level and lab",
                (true, false) => ", corrected by level",
                (false, true) => ", corrected by level, analysers and lab",
                (false, false) => ", corrected by level and analysers",
            }
        } else {
            ", open loop"
        }
    ));
    text.push_str(&format!(
        "  span {} .. {} ({:.2} h, {} ticks, {:.2} s wall, {:.0} ticks/s)\n",
        iso(t0),
        iso(t_end),
        hours(t_end),
        ticks,
        wall,
        ticks as f64 / wall.max(1e-9)
    ));
    text.push_str("Log:\n");
    for line in stats.describe() {
        text.push_str(&format!("  {line}\n"));
    }
    if flags_json.is_empty() {
        text.push_str("Kernel: no clamps or faults\n");
    } else {
        text.push_str("Kernel (ticks with each flag):\n");
        for (k, v) in &flags_json {
            text.push_str(&format!("  {k}: {v}\n"));
        }
    }
    if level_err.2 > 0 {
        text.push_str(&format!(
            "Open-loop vs measured level: RMSE {:.4} m, max {:.4} m over {} ticks\n",
            (level_err.0 / level_err.2 as f64).sqrt(),
            level_err.1,
            level_err.2
        ));
    }
    if let Some(c) = &corr {
        let k = c.counters();
        text.push_str(&format!(
            "Estimator: {} level values fused, {} rejected by the gate; lab: {} fused, {} rejected, {} not drawn, {} without pending sample, {} expired\n",
            k.level_accepted,
            k.level_rejected,
            c.tally.fused,
            c.tally.rejected,
            c.tally.not_drawn,
            c.tally.not_pending,
            k.lab_expired
        ));
        if !plant.analysers.is_empty() {
            text.push_str(&format!(
                "  analysers: {} readings fused, {} rejected by the gate, {} skipped (vessel near empty)\n",
                c.analyser_tally.fused, c.analyser_tally.rejected, c.analyser_tally.skipped
            ));
        }
        let cs = c.state();
        for (n, b) in c.bias_names.iter().zip(cs.bias.iter()) {
            text.push_str(&format!(
                "  meter bias of {n}: {:+.2} % ± {:.2} %\n",
                100.0 * b.0,
                100.0 * b.1
            ));
        }
    }
    if corrected {
        text.push_str(&format!(
            "Status (NAMUR NE107, ticks): good {}, maintenance required {}, out of specification {}, function check {}, failure {}\n",
            status_ticks[DeviceStatus::Good as usize],
            status_ticks[DeviceStatus::MaintenanceRequired as usize],
            status_ticks[DeviceStatus::OutOfSpecification as usize],
            status_ticks[DeviceStatus::FunctionCheck as usize],
            status_ticks[DeviceStatus::Failure as usize],
        ));
        for (k, v) in &reason_ticks {
            text.push_str(&format!("  {k}: {v} ticks\n"));
        }
    }
    if let Some(m) = &closure {
        text.push_str(&format!(
            "Balance closure: {} windows checked ({} lost to missing data), residual 1σ {:.4} m³\n",
            m.windows_evaluated(),
            m.windows_lost(),
            m.residual_sigma().to_f64()
        ));
        if closure_alarms.is_empty() {
            text.push_str("  no alarm: the balance closes\n");
        }
        for (a, b, al) in &closure_alarms {
            text.push_str(&format!(
                "  ALARM {}: from {} to {}\n",
                al.message(),
                iso(*a),
                b.map(iso).unwrap_or_else(|| "the end".to_string())
            ));
        }
    }
    if !plant.analysers.is_empty() {
        text.push_str(&format!(
            "Analysers: one reading per cycle used; {analyser_repeats} repeated values within a cycle not used\n"
        ));
        text.push_str(
            "Analyser comparison at new analyses (estimate − analyser, mol/m³; corrected: before fusing the reading):\n",
        );
        text.push_str(&format!(
            "  {:<16} {:<10} {:>6} {:>12} {:>12} {:>12}\n",
            "species", "estimate", "n", "bias", "RMSE", "max |err|"
        ));
        for a in &plant.analysers {
            let mut rows = vec![("open loop", &analyser_agree_open[a.species])];
            if let Some(c) = &analyser_agree_corr {
                rows.push(("corrected", &c[a.species]));
            }
            for (what, g) in rows {
                text.push_str(&format!(
                    "  {:<16} {:<10} {:>6} {:>12.4} {:>12.4} {:>12.4}\n",
                    plant.species[a.species].name, what, g.n, g.bias, g.rmse, g.max_abs
                ));
            }
        }
    }
    if req.lab.is_some() {
        text.push_str("Lab comparison at sample times (estimate − lab, mol/m³):\n");
        text.push_str(&format!(
            "  {:<16} {:<10} {:>4} {:>12} {:>12} {:>12}\n",
            "species", "estimate", "n", "bias", "RMSE", "max |err|"
        ));
        for (i, s) in plant.species.iter().enumerate() {
            let mut rows = vec![("open loop", &open_agree[i])];
            if let Some(c) = &corr_agree {
                rows.push(("corrected", &c[i]));
            }
            for (what, a) in rows {
                text.push_str(&format!(
                    "  {:<16} {:<10} {:>4} {:>12.4} {:>12.4} {:>12.4}\n",
                    s.name, what, a.n, a.bias, a.rmse, a.max_abs
                ));
            }
        }
        if open_cmp.outside_span > 0 {
            text.push_str(&format!(
                "  {} lab results fall outside the replayed span (not compared)\n",
                open_cmp.outside_span
            ));
        }
    }
    text.push_str(&format!(
        "Outputs in {}: estimates.csv, summary.json, holdup.svg, concentrations.svg, flows.svg\n",
        req.out_dir.display()
    ));
    text.push_str(&format!("\n{CAUTION}\n"));
    Ok(Outcome { json, text })
}

fn write_fig(dir: &Path, name: &str, fig: Figure) -> Result<(), ReplayError> {
    let p = dir.join(name);
    fig.write(&p).map_err(io_err(&p))
}

/// A species name made safe for a CSV header (no commas, quotes or spaces).
fn csv_name(s: &str) -> String {
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
