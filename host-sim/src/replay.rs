//! Replay: a historian log through the kernel's [`holdup_kernel::Sensor`],
//! tick by tick, with the same zero-order hold and integer time as on the
//! gateway; estimates, summary and plots written to an output folder.
//!
//! The layout follows the data: **sources** ([`frame`]: the log's samples
//! as one tick's raw readings; [`labs`]: lab results and analyses) →
//! **the sensor** ([`assemble`] builds it from the plant; it conditions,
//! steps, corrects and diagnoses — the replay has no per-tick logic of its
//! own) → **sinks** ([`estimates`]: `estimates.csv`; [`figures`]: SVG
//! plots; [`record`] and [`summary`]: `summary.json` and the text;
//! [`crate::report`]: `report.html`). SI units inside; conversion only in
//! the sinks, times on the report's [`Clock`].
//!
//! Each row of `estimates.csv` at time `t` is the state at `t` predicted
//! from everything measured before `t`, with the status of the tick that
//! ended at `t`; the first row is the initial state.
//!
//! Memory is constant in the log's length: the log is streamed (bounded
//! look-ahead), estimates are written as they are made, plots keep a bounded
//! number of decimated points, and only the lab file (a few rows per shift)
//! is held whole.

pub mod assemble;
pub mod checks;
pub mod estimates;
pub mod figures;
pub mod frame;
pub mod labs;
pub mod record;
pub mod summary;

use std::fmt;
use std::path::{Path, PathBuf};
use std::time::Instant;

use holdup_kernel::{Geometry, Scalar, SensorReport};

use self::assemble::{HostSensor, Sensors};
use self::estimates::{EstimatesCsv, Row};
use self::figures::Figures;
use self::frame::{Frame, Sources};
use self::labs::Labs;
use self::record::Record;
use self::summary::{
    inputs_out, method_word, status_out, AgreementOut, ClosureAlarmOut, ClosureOut, EstimatorOut,
    FinalOut, LevelAgreement, LogOut, MeterBias, SpeciesAgreement, Summary, Window,
    BIAS_SIGNIFICANT_MIN, BIAS_SIGNIFICANT_SIGMAS,
};
use crate::clock::Clock;
use crate::digits::Digits;
use crate::lab::{self, LabError, LabResult};
use crate::log::{LogError, LogReader};
use crate::plant::{Plant, ScalarKind};
use crate::report::{self, Events, Report};
use crate::text::CAUTION;

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
    /// Write one estimates row every this many ms of plant time (0: every
    /// tick); a whole number of ticks (else [`ReplayError::Interval`]).
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
    /// A tag's conditioning is not valid once its role's defaults are
    /// added (for example a `max` below the default `min`).
    Conditioning {
        /// The configuration file.
        path: PathBuf,
        /// The tag.
        tag: String,
        /// What is wrong, with the range in SI.
        message: String,
    },
    /// The log holds no usable data: the file and why
    /// ([`crate::log::LogStats::why_empty`]).
    EmptyLog(PathBuf, String),
    /// The plant and its log disagree so that nothing useful can follow
    /// ([`checks`]).
    Check {
        /// The configuration file.
        path: PathBuf,
        /// What is wrong and what to check.
        message: String,
    },
    /// The interval of `estimates.csv` is not a whole number of ticks.
    Interval(String),
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
            ReplayError::Conditioning { path, tag, message } => {
                write!(f, "{}: [tags.\"{tag}\"]: {message}", path.display())
            }
            ReplayError::EmptyLog(p, why) => write!(
                f,
                "{}: the log holds no valid timestamped data to replay: {why}",
                p.display()
            ),
            ReplayError::Check { path, message } => write!(f, "{}: {message}", path.display()),
            ReplayError::Interval(m) => write!(f, "estimates interval: {m}"),
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

pub(crate) fn io_err(path: &Path) -> impl Fn(std::io::Error) -> ReplayError + '_ {
    move |error| ReplayError::Io {
        path: path.to_path_buf(),
        error,
    }
}

pub use crate::text::iso;

/// The outcome of a replay: the summary (also written to `summary.json`)
/// and its text (also printed).
#[derive(Clone, Debug)]
pub struct Outcome {
    /// The summary.
    pub summary: Summary,
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

fn kernel_err(plant: &Plant) -> impl Fn(holdup_kernel::Error) -> ReplayError + '_ {
    move |e| ReplayError::Kernel {
        path: plant.path.clone(),
        message: e.message(),
    }
}

/// The open loop's level against the measured one: sum of squares, largest
/// difference, count.
#[derive(Clone, Copy, Debug, Default)]
struct LevelError(f64, f64, u64);

impl LevelError {
    fn add(&mut self, d: f64) {
        self.0 += d * d;
        self.1 = self.1.max(d.abs());
        self.2 += 1;
    }

    fn out(self) -> Option<LevelAgreement> {
        (self.2 > 0).then(|| LevelAgreement {
            rmse_m: (self.0 / self.2 as f64).sqrt(),
            max_abs_m: self.1,
            n: self.2,
        })
    }
}

/// Everything the replay loop carries.
struct Replay<'a, S, const N: usize, const D: usize> {
    req: &'a Request<'a>,
    t0: i64,
    tick: i64,
    every: i64,
    main: HostSensor<S, N, D>,
    open: Option<HostSensor<S, N, D>>,
    labs: Labs,
    record: Record,
    csv: EstimatesCsv,
    figures: Figures,
    geometry: Geometry<f64>,
    level_error: LevelError,
    bias_names: Vec<String>,
    checks: checks::Checks,
    clock: Clock,
}

fn run_typed<S: Scalar, const N: usize, const D: usize>(
    req: &Request<'_>,
) -> Result<Outcome, ReplayError> {
    let plant = req.plant;
    let every = estimates::output_interval(req.output_every_ms, plant.tick_ms)
        .map_err(ReplayError::Interval)?;
    std::fs::create_dir_all(req.out_dir).map_err(io_err(req.out_dir))?;
    let lab_results: Vec<LabResult> = match req.lab {
        Some(p) => lab::load(p, plant).map_err(ReplayError::Lab)?,
        None => Vec::new(),
    };
    let mut reader = LogReader::open(req.log, &plant.log, &plant.tags)?;
    let empty = |r: &LogReader| ReplayError::EmptyLog(req.log.to_path_buf(), r.stats().why_empty());
    let Some(t0) = reader.first_time()? else {
        return Err(empty(&reader));
    };
    let mut sources = Sources::new(plant);
    let Some(first) = reader.sample(t0)? else {
        return Err(empty(&reader));
    };
    // Initial temperature: configured, or the signal's first value.
    let t_init = plant.initial.temperature.unwrap_or_else(|| {
        let t = sources.temperature(first);
        if t.is_finite() && t > 0.0 {
            t
        } else {
            298.15
        }
    });
    let frame: Frame<S, N> = sources.frame(first, t0);
    assemble::check_channels(plant)?;
    let Sensors { main, open } =
        assemble::sensors::<S, N, D>(plant, t_init).map_err(kernel_err(plant))?;
    let bias_names: Vec<String> = plant
        .estimator
        .as_ref()
        .map(|e| e.bias_meters.iter().map(|m| m.name.clone()).collect())
        .unwrap_or_default();
    let tick = i64::from(plant.tick_ms);
    // The report's clock: the log's zone, or UTC ([log] report_times).
    let clock = Clock::from(plant.log.output_zone);
    let mut replay = Replay {
        req,
        t0,
        tick,
        every: i64::try_from(every).unwrap_or(i64::MAX),
        main,
        open,
        labs: Labs::new(plant, lab_results),
        record: Record::new(plant),
        csv: EstimatesCsv::create(
            req.out_dir,
            plant,
            &bias_names,
            Digits::of::<S>(),
            clock.clone(),
        )?,
        clock,
        figures: Figures::new(plant, &bias_names),
        geometry: Geometry::new(plant.shape.clone()).map_err(kernel_err(plant))?,
        level_error: LevelError::default(),
        bias_names,
        checks: checks::Checks::default(),
    };
    let started = Instant::now();
    let t_end = replay.drive(&mut reader, &mut sources, frame)?;
    let wall = started.elapsed().as_secs_f64();
    replay.finish(&reader, &sources, t_end, wall)
}

impl<S: Scalar, const N: usize, const D: usize> Replay<'_, S, N, D> {
    fn hours(&self, t: i64) -> f64 {
        (t - self.t0) as f64 / 3.6e6
    }

    fn biases(&self) -> Vec<(f64, f64)> {
        let (b, s) = self.main.biases();
        (0..self.bias_names.len())
            .map(|j| (b[j].to_f64(), s[j].to_f64()))
            .collect()
    }

    /// The tick loop: at each sample time `t`, the sinks take the state at
    /// `t`, the measurements known at `t` go to the sensor, and — if the
    /// log goes on — the sensor ticks from `t`. Returns the last time.
    fn drive(
        &mut self,
        reader: &mut LogReader,
        sources: &mut Sources,
        mut frame: Frame<S, N>,
    ) -> Result<i64, ReplayError> {
        let bar = self.req.progress.then(|| {
            let b = indicatif::ProgressBar::new_spinner();
            b.set_style(
                indicatif::ProgressStyle::with_template("{spinner} {elapsed} {msg}")
                    .unwrap_or_else(|_| indicatif::ProgressStyle::default_spinner()),
            );
            b
        });
        let mut t = self.t0;
        let mut report: Option<SensorReport<S, N>> = None;
        loop {
            self.observe(t, &frame, report.as_ref())?;
            let open_ref = self.open.as_ref();
            self.labs
                .at(t, self.t0, &frame.analyses, &mut self.main, open_ref);
            let Some(samples) = reader.sample(t + self.tick)? else {
                break;
            };
            let next = sources.frame(samples, t + self.tick);
            let now = u64::try_from(t - self.t0).unwrap_or(0);
            let r = self.main.tick(now, &frame.readings);
            if let Some(o) = self.open.as_mut() {
                let _ = o.tick(now, &frame.readings);
            }
            self.record.tick(t, self.tick, &r, &self.main);
            self.figures
                .push_outflow(t + self.tick, self.tick as f64 / 1000.0, &r);
            report = Some(r);
            frame = next;
            t += self.tick;
            if let Some(b) = &bar {
                if self.record.ticks % 20_000 == 0 {
                    b.set_message(format!(
                        "plant time {} ({} ticks)",
                        self.req.plant.log.output_zone.iso(t),
                        self.record.ticks
                    ));
                    b.tick();
                }
            }
        }
        if let Some(b) = bar {
            b.finish_and_clear();
        }
        Ok(t)
    }

    /// The sinks at time `t`: the row, the plots and the open loop's level
    /// against the measured one.
    fn observe(
        &mut self,
        t: i64,
        frame: &Frame<S, N>,
        report: Option<&SensorReport<S, N>>,
    ) -> Result<(), ReplayError> {
        let x = self.hours(t);
        let est = self.main.estimate();
        let open = self.open.as_ref().map(|o| o.estimate());
        let biases = self.biases();
        let measured = frame.level.map(|z| {
            let v = if z.is_finite() {
                self.geometry.volume_at(z)
            } else {
                f64::NAN
            };
            (z, v)
        });
        if let Some(z) = frame.level.filter(|z| z.is_finite()) {
            self.checks.level(self.req.plant, &self.geometry, t, z)?;
            let open_level = open.as_ref().map_or(est.level, |o| o.level).to_f64();
            self.level_error.add(open_level - z);
        }
        self.figures.push(
            t,
            &est,
            open.as_ref(),
            measured,
            &biases,
            &frame.flows,
            &frame.analyses,
        );
        if (t - self.t0) % self.every == 0 {
            self.csv.write(&Row {
                t,
                elapsed_h: x,
                estimate: &est,
                open: open.as_ref().map(|o| &o.concentrations),
                level: frame.level,
                analyses: &frame.analyses,
                biases: &biases,
                report,
            })?;
        }
        Ok(())
    }

    /// Close the sinks and build the summary.
    fn finish(
        mut self,
        reader: &LogReader,
        sources: &Sources,
        t_end: i64,
        wall: f64,
    ) -> Result<Outcome, ReplayError> {
        let req = self.req;
        let plant = req.plant;
        self.labs.finish();
        self.record.finish();
        let stats = reader.stats();
        let level_gate = self.main.observer().map(|o| {
            (
                o.counters().level_accepted.into(),
                o.counters().level_rejected.into(),
            )
        });
        let verdict = self.checks.finish(
            plant,
            &self.geometry,
            stats,
            self.labs.results(),
            t_end,
            level_gate,
        )?;
        let mut summary = self.summary(stats, sources, t_end, wall);
        summary.warnings = std::mem::take(&mut self.checks.warnings);
        if !plant.unknowns.is_empty() {
            summary.warnings.insert(
                0,
                format!(
                    "the plant file marks {} unknown(s) ({}): the replay used their first \
                     guesses; `holdup fit` estimates them from the log and the lab results",
                    plant.unknowns.len(),
                    plant.unknowns.join(", ")
                ),
            );
        }
        summary.verdict = verdict;
        self.csv.finish()?;
        let events = Events::collect(stats, &self.record);
        let plots = self.figures.write(
            req.out_dir,
            plant,
            &self.clock,
            t_end,
            &events,
            self.labs.results(),
        )?;
        let page = Report {
            summary: &summary,
            plant,
            events: &events,
            plots: &plots,
            labs: self.labs.results(),
            clock: &self.clock,
            start: self.t0,
            end: t_end,
        };
        let html = req.out_dir.join(report::FILE);
        page.write(req.out_dir).map_err(io_err(&html))?;
        let json_path = req.out_dir.join("summary.json");
        let json = serde_json::to_string_pretty(&summary).unwrap_or_default() + "\n";
        std::fs::write(&json_path, json).map_err(io_err(&json_path))?;
        let text = format!("{summary}\n");
        Ok(Outcome { summary, text })
    }

    /// The estimator's counters, re-seeds and lab and analyser outcomes.
    fn estimator_out(&self) -> Option<EstimatorOut> {
        let k = self.main.observer()?.counters();
        Some(EstimatorOut {
            level_accepted: k.level_accepted,
            level_rejected: k.level_rejected,
            composition_accepted: k.composition_accepted,
            composition_rejected: k.composition_rejected,
            skipped: k.skipped,
            lab_expired: k.lab_expired,
            covariance_guarded: k.covariance_guarded,
            reseeds: u64::from(self.main.counters().reseeds),
            reseed_times: self
                .record
                .reseeds
                .iter()
                .take(record::KEEP_FIRST)
                .map(|t| self.req.plant.log.output_zone.iso(*t))
                .collect(),
            lab: self.labs.tally.clone(),
            analysers: self.labs.analyser_tally.clone(),
        })
    }

    /// Each biased meter with its verdict.
    fn meters_out(&self) -> Vec<MeterBias> {
        self.bias_names
            .iter()
            .zip(self.biases())
            .map(|(n, (b, s))| MeterBias {
                meter: n.clone(),
                bias: b,
                sigma: s,
                recalibrate: b.abs() >= BIAS_SIGNIFICANT_MIN
                    && b.abs() >= BIAS_SIGNIFICANT_SIGMAS * s,
            })
            .collect()
    }

    /// The closure test with its alarm windows.
    fn closure_out(&self) -> Option<ClosureOut> {
        let m = self.main.closure()?;
        Some(ClosureOut {
            windows_evaluated: m.windows_evaluated(),
            windows_lost: m.windows_lost(),
            residual_sigma_m3: m.residual_sigma().to_f64(),
            alarms: self
                .record
                .closure
                .iter()
                .map(|(span, a)| ClosureAlarmOut {
                    alarm: a.message(),
                    window: Window::new(span, &self.req.plant.log.output_zone),
                })
                .collect(),
        })
    }

    fn summary(
        &self,
        stats: &crate::log::LogStats,
        sources: &Sources,
        t_end: i64,
        wall: f64,
    ) -> Summary {
        let plant = self.req.plant;
        let zone = &plant.log.output_zone;
        let corrected = self.main.observer().is_some();
        let species = |i: usize| plant.species[i].name.clone();
        let agree = |open: &crate::lab::Comparison, corr: &crate::lab::Comparison, i: usize| {
            SpeciesAgreement {
                species: species(i),
                open_loop: AgreementOut::new(&open.results()[i], zone),
                corrected: corrected.then(|| AgreementOut::new(&corr.results()[i], zone)),
            }
        };
        let est = self.main.estimate();
        let by_species = |v: &[S; N]| {
            plant
                .species
                .iter()
                .zip(v.iter())
                .map(|(s, x)| (s.name.clone(), x.to_f64()))
                .collect()
        };
        let mut outputs = vec![
            "estimates.csv",
            "summary.json",
            report::FILE,
            "holdup.svg",
            "concentrations.svg",
            "flows.svg",
        ];
        if plant.species.len() > 4 {
            outputs.push("concentrations-2.svg");
        }
        Summary {
            plant: plant.name.clone(),
            config: plant.path.display().to_string(),
            log: self.req.log.display().to_string(),
            lab: self.req.lab.map(|p| p.display().to_string()),
            scalar: match plant.scalar {
                ScalarKind::F32 => "f32",
                ScalarKind::F64 => "f64",
            },
            method: method_word(plant.method),
            corrected,
            corrected_by: match (
                corrected,
                plant.analysers.is_empty(),
                self.req.lab.is_some(),
            ) {
                (false, _, _) => "open loop",
                (true, true, true) => "corrected by level and lab",
                (true, true, false) => "corrected by level",
                (true, false, true) => "corrected by level, analysers and lab",
                (true, false, false) => "corrected by level and analysers",
            },
            tick_ms: plant.tick_ms,
            time_zone: zone.label().to_string(),
            estimates_every_ms: u64::try_from(self.every).unwrap_or(0),
            start: zone.iso(self.t0),
            end: zone.iso(t_end),
            ticks: self.record.ticks,
            wall_seconds: wall,
            log_stats: LogOut {
                stats: stats.clone(),
                rows_rejected: stats.rows_rejected(),
            },
            log_lines: stats.describe(),
            kernel_flags_ticks: self
                .record
                .flags()
                .into_iter()
                .map(|(k, v)| (k.to_string(), v))
                .collect(),
            inputs: inputs_out(&self.record, zone),
            open_loop_level_vs_measured: self.level_error.out(),
            estimator: self.estimator_out(),
            meters: self.meters_out(),
            closure: self.closure_out(),
            status_ticks: status_out(&self.record),
            analyser_comparison: plant
                .analysers
                .iter()
                .map(|a| {
                    agree(
                        &self.labs.analyser_open,
                        &self.labs.analyser_corrected,
                        a.species,
                    )
                })
                .collect(),
            analyser_repeats_within_cycle: sources.analyser_repeats,
            lab_comparison: (0..plant.species.len())
                .map(|i| agree(&self.labs.open, &self.labs.corrected, i))
                .collect(),
            lab_outside_replay: self.labs.open.outside_span,
            final_state: FinalOut {
                holdup_m3: est.volume.to_f64(),
                holdup_sigma_m3: est.volume_sigma.map(|x| x.to_f64()),
                level_m: est.level.to_f64(),
                concentrations_mol_m3: by_species(&est.concentrations),
                concentration_sigmas_mol_m3: est.concentration_sigma.as_ref().map(by_species),
            },
            outputs: outputs.into_iter().map(String::from).collect(),
            warnings: Vec::new(),
            verdict: None,
            caution: CAUTION,
        }
    }
}
