//! `holdup fit`: the plant file's unknowns (quantities written with
//! `guess`, see [`crate::config::Template`]) estimated from the plant's own
//! history by weighted least squares of the lab results (and online
//! analyses) against the model's estimates at their sample times.
//!
//! The layout follows the work: [`data`] reads the log and the lab file
//! once into memory and runs the model for a set of values; [`solve`]
//! maps the bounds, runs Levenberg–Marquardt and computes the statistics;
//! [`words`] turns the statistics into plain-words warnings; [`output`]
//! writes `fit.json`, the fitted plant file, the predictions and the
//! plots.
//!
//! With `[fit] hold_out` (default 0.25) the last share of the log's span
//! is first kept out: the model is fitted to the observations before it
//! and its prediction of the ones after is reported beside the guesses'.
//! The reported values are then fitted to all observations.

pub mod data;
pub mod output;
pub mod solve;
pub mod words;

use std::fmt;
use std::path::{Path, PathBuf};
use std::time::Instant;

use self::data::{Data, Observation};
use self::solve::{Param, Residuals, Solution, Statistics};
use crate::config::{ConfigError, Template};
use crate::lab::LabError;
use crate::log::LogError;
use crate::plant::Plant;

/// What to fit and where to put the results.
#[derive(Clone, Debug)]
pub struct Request<'a> {
    /// The plant file with its unknowns.
    pub config: &'a Path,
    /// Historian log.
    pub log: &'a Path,
    /// Lab results.
    pub lab: Option<&'a Path>,
    /// Output folder (created if missing).
    pub out_dir: &'a Path,
}

/// Why a fit could not be done.
#[derive(Debug)]
pub enum FitError {
    /// The plant file is not valid.
    Config(ConfigError),
    /// The log cannot be read.
    Log(LogError),
    /// The lab file cannot be read.
    Lab(LabError),
    /// The log holds no usable data: the file and why.
    EmptyLog(PathBuf, String),
    /// Nothing to fit, or too little to fit it to.
    Setup(String),
    /// The model cannot be run (at the guesses).
    Model(String),
    /// Writing an output failed.
    Io {
        /// The file being written.
        path: PathBuf,
        /// The system's error.
        error: std::io::Error,
    },
}

impl fmt::Display for FitError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            FitError::Config(e) => write!(f, "{e}"),
            FitError::Log(e) => write!(f, "{e}"),
            FitError::Lab(e) => write!(f, "{e}"),
            FitError::EmptyLog(p, why) => write!(
                f,
                "{}: the log holds no valid timestamped data to fit to: {why}",
                p.display()
            ),
            FitError::Setup(m) | FitError::Model(m) => write!(f, "{m}"),
            FitError::Io { path, error } => write!(f, "{}: {error}", path.display()),
        }
    }
}

impl std::error::Error for FitError {}

impl From<LogError> for FitError {
    fn from(e: LogError) -> Self {
        FitError::Log(e)
    }
}

impl From<LabError> for FitError {
    fn from(e: LabError) -> Self {
        FitError::Lab(e)
    }
}

impl From<ConfigError> for FitError {
    fn from(e: ConfigError) -> Self {
        FitError::Config(e)
    }
}

/// The model the solver fits: the template filled with trial values, run
/// over the data up to tick `last`, against the first `count`
/// observations.
pub struct Model<'a> {
    template: &'a Template,
    path: &'a Path,
    data: &'a Data,
    last: usize,
    count: usize,
}

impl<'a> Model<'a> {
    /// The model against the observations before tick `split` (all with
    /// `split = data.ticks`).
    pub fn new(template: &'a Template, path: &'a Path, data: &'a Data, split: usize) -> Self {
        let count = data
            .observations
            .iter()
            .take_while(|o| o.tick < split)
            .count();
        let last = data
            .observations
            .get(count.saturating_sub(1))
            .map_or(0, |o| o.tick);
        Self {
            template,
            path,
            data,
            last,
            count,
        }
    }

    /// Observations fitted.
    pub fn observations(&self) -> &'a [Observation] {
        &self.data.observations[..self.count]
    }

    /// The model's estimate for each observation at `theta`.
    pub fn predictions(&self, theta: &[f64]) -> Result<Vec<f64>, String> {
        let plant = self
            .template
            .plant(theta, self.path)
            .map_err(|e| e.to_string())?;
        let mut out = Vec::with_capacity(self.count);
        self.data
            .predict(&plant, self.last, &mut out)
            .map_err(|e| e.to_string())?;
        out.truncate(self.count);
        Ok(out)
    }
}

impl Residuals for Model<'_> {
    fn residuals(&self, theta: &[f64]) -> Result<Vec<f64>, String> {
        let pred = self.predictions(theta)?;
        if pred.len() != self.count {
            return Err("the model stopped before the last observation".into());
        }
        Ok(pred
            .iter()
            .zip(self.observations())
            .map(|(p, o)| (p - o.value) / o.sigma)
            .collect())
    }
}

/// The check on held-out data.
#[derive(Clone, Debug)]
pub struct HeldOut {
    /// First tick held out.
    pub split: usize,
    /// Observations fitted before it.
    pub fitted: usize,
    /// Observations held out.
    pub held: usize,
    /// Values fitted to the first part.
    pub theta: Vec<f64>,
    /// RMS of `(ĉ − c)/σ` over the held-out observations at those values.
    pub rms_fitted: f64,
    /// The same at the guesses.
    pub rms_guess: f64,
    /// RMS relative error `(ĉ − c)/c` at those values and at the guesses.
    pub rel_fitted: f64,
    /// At the guesses.
    pub rel_guess: f64,
    /// Model runs it took.
    pub evaluations: usize,
}

/// Everything a fit found.
pub struct Fit {
    /// The plant at the guesses.
    pub plant: Plant,
    /// The unknowns.
    pub template: Template,
    /// Their parameters.
    pub params: Vec<Param>,
    /// The data.
    pub data: Data,
    /// The final search (all observations).
    pub solution: Solution,
    /// Its statistics.
    pub stats: Statistics,
    /// The model's estimate of every observation at the guesses and at
    /// the fitted values.
    pub predicted_guess: Vec<f64>,
    /// At the fitted values.
    pub predicted: Vec<f64>,
    /// The held-out check, if made.
    pub held_out: Option<HeldOut>,
    /// Model runs in all.
    pub evaluations: usize,
    /// Wall time of the fitting, s.
    pub wall_s: f64,
    /// Plain-words warnings.
    pub warnings: Vec<String>,
}

/// Fit the unknowns of the plant file at `config_path` to the data.
pub fn fit(config_path: &Path, log: &Path, lab: Option<&Path>) -> Result<Fit, FitError> {
    let text = std::fs::read_to_string(config_path).map_err(|e| {
        FitError::Config(ConfigError {
            path: config_path.to_path_buf(),
            line: None,
            key: String::new(),
            message: format!("cannot read the configuration file: {e}"),
        })
    })?;
    let template = Template::parse(&text, config_path)?;
    if template.unknowns.is_empty() {
        return Err(FitError::Setup(format!(
            "{}: nothing to fit: mark each unknown quantity with a first guess instead of its \
             value, e.g. rate_constant = {{ guess = 1e-4, unit = \"1/s\", min = 1e-7, max = 0.1 }} \
             (see docs/config.md, \"Fitting\")",
            config_path.display()
        )));
    }
    let plant = template.plant(&[], config_path)?;
    let data = Data::load(&plant, log, lab)?;
    fit_data(plant, template, data)
}

/// [`fit`] on data already in memory.
pub fn fit_data(plant: Plant, template: Template, data: Data) -> Result<Fit, FitError> {
    let params: Vec<Param> = template.unknowns.iter().map(Param::of).collect();
    let p = params.len();
    let m = data.observations.len();
    if m <= p {
        return Err(FitError::Setup(format!(
            "{m} observation(s) (lab results within the log's span, and analyser readings) \
             for {p} unknown(s): a fit needs more observations than unknowns{}",
            if data.labs_outside > 0 {
                format!(
                    "; {} lab row(s) lie outside the log's span",
                    data.labs_outside
                )
            } else {
                String::new()
            }
        )));
    }
    let started = Instant::now();
    let guesses: Vec<f64> = params.iter().map(|q| q.guess).collect();
    let path = plant.path.clone();
    let all = Model::new(&template, &path, &data, data.ticks);
    let predicted_guess = all
        .predictions(&guesses)
        .map_err(|e| FitError::Model(format!("the plant at its guesses cannot be run: {e}")))?;
    let max_eval = plant.fit.max_evaluations;
    let mut warnings = Vec::new();
    let mut evaluations = 1;
    let held_out = hold_out(
        &plant,
        (&template, &path, &data),
        &params,
        &predicted_guess,
        &mut warnings,
    )?;
    let start = held_out
        .as_ref()
        .map_or(guesses.clone(), |h| h.theta.clone());
    evaluations += held_out.as_ref().map_or(0, |h| h.evaluations);
    let solution = solve::minimise(&all, &params, &start, max_eval).map_err(FitError::Model)?;
    evaluations += solution.evaluations;
    let (j, residuals, runs) =
        solve::jacobian(&all, &params, &solution.theta).map_err(FitError::Model)?;
    evaluations += runs;
    let stats = solve::statistics(&residuals, &j).map_err(FitError::Setup)?;
    let predicted = all.predictions(&solution.theta).map_err(FitError::Model)?;
    evaluations += 1;
    let wall_s = started.elapsed().as_secs_f64();
    let mut fit = Fit {
        plant,
        template,
        params,
        data,
        solution,
        stats,
        predicted_guess,
        predicted,
        held_out,
        evaluations,
        wall_s,
        warnings,
    };
    let more = words::warnings(&fit);
    fit.warnings.extend(more);
    Ok(fit)
}

/// The held-out check: fit the observations before the split, predict
/// the rest (`at_guess`: every observation's estimate at the guesses).
fn hold_out(
    plant: &Plant,
    (template, path, data): (&Template, &Path, &Data),
    params: &[Param],
    at_guess: &[f64],
    warnings: &mut Vec<String>,
) -> Result<Option<HeldOut>, FitError> {
    let share = plant.fit.hold_out;
    if share <= 0.0 {
        return Ok(None);
    }
    let split = ((1.0 - share) * (data.ticks - 1) as f64).floor() as usize;
    let train = Model::new(template, path, data, split);
    let (fitted, held) = (train.count, data.observations.len() - train.count);
    if fitted <= params.len() || held == 0 {
        warnings.push(format!(
            "no held-out check: of {} observations, {fitted} lie in the first {:.0} % of the \
             log and {held} in the rest; the check needs more observations before the split \
             than unknowns ({}) and at least one after it ([fit] hold_out = 0 turns it off)",
            data.observations.len(),
            100.0 * (1.0 - share),
            params.len()
        ));
        return Ok(None);
    }
    let guesses: Vec<f64> = params.iter().map(|q| q.guess).collect();
    let sol = solve::minimise(&train, params, &guesses, plant.fit.max_evaluations)
        .map_err(FitError::Model)?;
    let all = Model::new(template, path, data, data.ticks);
    let at_fit = all.predictions(&sol.theta).map_err(FitError::Model)?;
    let rest = &data.observations[fitted..];
    let rms = |pred: &[f64], rel: bool| -> f64 {
        let s: f64 = rest
            .iter()
            .zip(&pred[fitted..])
            .map(|(o, p)| {
                let d = if rel {
                    (p - o.value) / o.value.abs().max(f64::MIN_POSITIVE)
                } else {
                    (p - o.value) / o.sigma
                };
                d * d
            })
            .sum();
        (s / rest.len() as f64).sqrt()
    };
    Ok(Some(HeldOut {
        split,
        fitted,
        held,
        rms_fitted: rms(&at_fit, false),
        rms_guess: rms(at_guess, false),
        rel_fitted: rms(&at_fit, true),
        rel_guess: rms(at_guess, true),
        theta: sol.theta,
        evaluations: sol.evaluations + 1,
    }))
}
