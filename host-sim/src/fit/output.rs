//! What a fit writes: `fit.json` (everything, for scripts), the fitted
//! plant file (`plant.fitted.toml`, the user's file with each unknown
//! replaced by its fitted value and a comment), `predictions.csv` (each
//! observation with the model's estimate at the guesses and at the fit),
//! `fit.svg` (the estimates over time with the observations),
//! `residuals.svg` and `parity.svg`; and the text printed.

use std::fmt::Write as _;
use std::path::Path;

use serde::Serialize;

use super::data::Origin;
use super::{Fit, FitError, Request};
use crate::clock::Clock;
use crate::plot::{Color, Figure, Markers, Panel, Series};
use crate::text::CAUTION;

/// The caution a fit adds to the usual one.
pub const FIT_CAUTION: &str = "Fitted parameters hold within the range of the data they came \
from (printed beside them); outside it they are an extrapolation. Validate them against new lab \
results before relying on them.";

#[derive(Serialize)]
struct ParamOut {
    name: String,
    unit: Option<String>,
    guess: f64,
    value: f64,
    se: Option<f64>,
    ci95: Option<[f64; 2]>,
    min: Option<f64>,
    max: Option<f64>,
    line: usize,
}

#[derive(Serialize)]
struct HeldOutOut {
    from: String,
    fitted_observations: usize,
    held_out_observations: usize,
    values_fitted_to_first_part: Vec<f64>,
    rms_normalised_at_fit: f64,
    rms_normalised_at_guess: f64,
    rms_relative_at_fit: f64,
    rms_relative_at_guess: f64,
}

#[derive(Serialize)]
struct RangeOut {
    temperature_c: Option<[f64; 2]>,
    observed: Vec<SpeciesRange>,
}

#[derive(Serialize)]
struct SpeciesRange {
    species: String,
    min_mol_m3: f64,
    max_mol_m3: f64,
    n: usize,
}

#[derive(Serialize)]
struct FitOut {
    plant: String,
    config: String,
    log: String,
    lab: Option<String>,
    start: String,
    end: String,
    ticks: usize,
    tick_ms: i64,
    lab_results: usize,
    analyser_readings: usize,
    residuals: usize,
    log_findings: Vec<String>,
    parameters: Vec<ParamOut>,
    correlation: Vec<Vec<f64>>,
    chi2: f64,
    dof: usize,
    reduced_chi2: f64,
    t975: f64,
    converged: bool,
    termination: String,
    evaluations: usize,
    wall_s: f64,
    held_out: Option<HeldOutOut>,
    data_range: RangeOut,
    warnings: Vec<String>,
    files: Vec<String>,
    caution: String,
}

fn io(path: &Path) -> impl Fn(std::io::Error) -> FitError + '_ {
    move |error| FitError::Io {
        path: path.to_path_buf(),
        error,
    }
}

/// Four significant digits, positional where that reads well.
pub fn sig(x: f64) -> String {
    if !x.is_finite() {
        return "-".into();
    }
    let a = x.abs();
    if a == 0.0 || (1e-3..1e5).contains(&a) {
        let decimals = if a == 0.0 {
            0
        } else {
            (3 - a.log10().floor() as i32).max(0) as usize
        };
        format!("{x:.decimals$}")
    } else {
        format!("{x:.3e}")
    }
}

/// Write every output of `fit` into `req.out_dir`; returns the text.
pub fn write(fit: &Fit, req: &Request<'_>) -> Result<String, FitError> {
    let dir = req.out_dir;
    std::fs::create_dir_all(dir).map_err(io(dir))?;
    let clock = Clock::from(fit.plant.log.output_zone);
    let mut files = Vec::new();

    let fitted = dir.join("plant.fitted.toml");
    std::fs::write(&fitted, fitted_toml(fit, &clock)).map_err(io(&fitted))?;
    files.push("plant.fitted.toml".to_string());

    let csv = dir.join("predictions.csv");
    std::fs::write(&csv, predictions_csv(fit, &clock)).map_err(io(&csv))?;
    files.push("predictions.csv".to_string());

    for (name, fig) in figures(fit, &clock)? {
        let p = dir.join(name);
        fig.write(&p).map_err(io(&p))?;
        files.push(name.to_string());
    }
    files.push("fit.json".to_string());
    let out = json(fit, req, &clock, files.clone());
    let p = dir.join("fit.json");
    let body = serde_json::to_string_pretty(&out).unwrap_or_default();
    std::fs::write(&p, body + "\n").map_err(io(&p))?;
    Ok(text(fit, &clock, &files))
}

fn ci(fit: &Fit, i: usize) -> Option<[f64; 2]> {
    let se = fit.stats.se[i];
    let v = fit.solution.theta[i];
    se.is_finite()
        .then_some([v - fit.stats.t975 * se, v + fit.stats.t975 * se])
}

fn ranges(fit: &Fit) -> RangeOut {
    let mut observed = Vec::new();
    for (s, sp) in fit.plant.species.iter().enumerate() {
        let vals: Vec<f64> = fit
            .data
            .observations
            .iter()
            .filter(|o| o.species == s)
            .map(|o| o.value)
            .collect();
        if vals.is_empty() {
            continue;
        }
        observed.push(SpeciesRange {
            species: sp.name.clone(),
            min_mol_m3: vals.iter().copied().fold(f64::INFINITY, f64::min),
            max_mol_m3: vals.iter().copied().fold(f64::NEG_INFINITY, f64::max),
            n: vals.len(),
        });
    }
    RangeOut {
        temperature_c: fit
            .data
            .temperature_range
            .map(|(lo, hi)| [lo - 273.15, hi - 273.15]),
        observed,
    }
}

fn json(fit: &Fit, req: &Request<'_>, clock: &Clock, files: Vec<String>) -> FitOut {
    let d = &fit.data;
    let labs = d
        .observations
        .iter()
        .filter(|o| matches!(o.origin, Origin::Lab(_)))
        .count();
    FitOut {
        plant: fit.plant.name.clone(),
        config: req.config.display().to_string(),
        log: req.log.display().to_string(),
        lab: req.lab.map(|p| p.display().to_string()),
        start: clock.iso(d.t0),
        end: clock.iso(d.time(d.ticks - 1)),
        ticks: d.ticks,
        tick_ms: d.tick_ms,
        lab_results: labs,
        analyser_readings: d.observations.len() - labs,
        residuals: d.observations.len(),
        log_findings: d.stats.describe(),
        parameters: fit
            .params
            .iter()
            .enumerate()
            .map(|(i, p)| ParamOut {
                name: p.name.clone(),
                unit: p.unit.clone(),
                guess: p.guess,
                value: fit.solution.theta[i],
                se: Some(fit.stats.se[i]).filter(|x| x.is_finite()),
                ci95: ci(fit, i),
                min: fit.template.unknowns[i].min,
                max: fit.template.unknowns[i].max,
                line: fit.template.unknowns[i].line,
            })
            .collect(),
        correlation: fit
            .stats
            .correlation
            .iter()
            .map(|r| {
                r.iter()
                    .map(|x| if x.is_finite() { *x } else { 0.0 })
                    .collect()
            })
            .collect(),
        chi2: fit.stats.chi2,
        dof: fit.stats.dof,
        reduced_chi2: fit.stats.s2,
        t975: fit.stats.t975,
        converged: fit.solution.converged,
        termination: fit.solution.termination.clone(),
        evaluations: fit.evaluations,
        wall_s: fit.wall_s,
        held_out: fit.held_out.as_ref().map(|h| HeldOutOut {
            from: clock.iso(d.time(h.split)),
            fitted_observations: h.fitted,
            held_out_observations: h.held,
            values_fitted_to_first_part: h.theta.clone(),
            rms_normalised_at_fit: h.rms_fitted,
            rms_normalised_at_guess: h.rms_guess,
            rms_relative_at_fit: h.rel_fitted,
            rms_relative_at_guess: h.rel_guess,
        }),
        data_range: ranges(fit),
        warnings: fit.warnings.clone(),
        files,
        caution: format!("{CAUTION} {FIT_CAUTION}"),
    }
}

fn range_words(fit: &Fit) -> String {
    let r = ranges(fit);
    let mut parts = Vec::new();
    if let Some([lo, hi]) = r.temperature_c {
        parts.push(format!("temperature {lo:.1} to {hi:.1} °C"));
    }
    for s in &r.observed {
        parts.push(format!(
            "{} {} to {} mol/m³ ({} observations)",
            s.species,
            sig(s.min_mol_m3),
            sig(s.max_mol_m3),
            s.n
        ));
    }
    parts.join(", ")
}

fn fitted_toml(fit: &Fit, clock: &Clock) -> String {
    let d = &fit.data;
    let span = format!("{} to {}", clock.iso(d.t0), clock.iso(d.time(d.ticks - 1)));
    let body = fit.template.fill(&fit.solution.theta, |i| {
        let se = fit.stats.se[i];
        let unit = fit.params[i].unit.as_deref().unwrap_or("");
        if se.is_finite() {
            format!(
                "fitted by holdup fit: {} ± {} {unit} (1 SE; guess {})",
                sig(fit.solution.theta[i]),
                sig(se),
                sig(fit.params[i].guess)
            )
        } else {
            format!(
                "fitted by holdup fit: {} {unit}, not determined by the data (guess {})",
                sig(fit.solution.theta[i]),
                sig(fit.params[i].guess)
            )
        }
    });
    format!(
        "# Fitted by holdup fit to the log {span} ({}).\n# Valid within that data's range: {}.\n# {FIT_CAUTION}\n{body}",
        fit.plant.name,
        range_words(fit)
    )
}

fn predictions_csv(fit: &Fit, clock: &Clock) -> String {
    let mut s = String::from(
        "sample_time,species,source,measured_mol_m3,sigma_mol_m3,at_guess_mol_m3,at_fit_mol_m3,normalised_residual,set\n",
    );
    let split = fit.held_out.as_ref().map(|h| h.fitted);
    for (i, o) in fit.data.observations.iter().enumerate() {
        let source = match o.origin {
            Origin::Lab(line) => format!("lab line {line}"),
            Origin::Analyser => "analyser".to_string(),
        };
        let set = match split {
            Some(n) if i >= n => "held out (then fitted)",
            _ => "fitted",
        };
        let p = fit.predicted[i];
        let _ = writeln!(
            s,
            "{},{},{source},{:?},{:?},{:?},{:?},{:?},{set}",
            clock.iso(o.time),
            fit.plant.species[o.species].name,
            o.value,
            o.sigma,
            fit.predicted_guess[i],
            p,
            (p - o.value) / o.sigma
        );
    }
    s
}

/// The observed species, in plant order.
fn observed_species(fit: &Fit) -> Vec<usize> {
    (0..fit.plant.species.len())
        .filter(|s| fit.data.observations.iter().any(|o| o.species == *s))
        .collect()
}

fn figures(fit: &Fit, clock: &Clock) -> Result<Vec<(&'static str, Figure)>, FitError> {
    let species = observed_species(fit);
    let d = &fit.data;
    // The estimates over time at the guesses and at the fit.
    let mut lines: Vec<(Series, Series)> = species
        .iter()
        .map(|_| {
            (
                Series::new("at the guesses", Color::SkyBlue),
                Series::new("fitted", Color::Blue),
            )
        })
        .collect();
    let guesses: Vec<f64> = fit.params.iter().map(|p| p.guess).collect();
    for (which, theta) in [(0, &guesses), (1, &fit.solution.theta)] {
        let plant = fit
            .template
            .plant(theta, &fit.plant.path)
            .map_err(FitError::Config)?;
        let mut sink = Vec::new();
        d.predict_with(&plant, d.ticks - 1, &mut sink, &mut |k, c| {
            for (line, &s) in lines.iter_mut().zip(&species) {
                let series = if which == 0 { &mut line.0 } else { &mut line.1 };
                series.push(d.time(k) as f64, c.get(s).copied().unwrap_or(f64::NAN));
            }
        })?;
    }
    let mut over_time = Figure {
        title: format!("{}: fitted model against the observations", fit.plant.name),
        clock: Some(clock.clone()),
        id: "fit".into(),
        footer: format!("{CAUTION} {FIT_CAUTION}"),
        ..Figure::default()
    };
    let mut residuals = Figure {
        title: "Normalised residuals (estimate − measured) / σ at the fitted values".into(),
        clock: Some(clock.clone()),
        id: "res".into(),
        footer: "About 95 % of the points of a good fit lie within ±2.".into(),
        ..Figure::default()
    };
    let mut parity = Figure {
        title: "Estimated against measured, at the fitted values".into(),
        x_label: "measured [mol/m³]".into(),
        id: "par".into(),
        footer: "Points on the diagonal are estimated exactly.".into(),
        ..Figure::default()
    };
    let mut lo = f64::INFINITY;
    let mut hi = f64::NEG_INFINITY;
    for (k, (&s, (guess_line, fit_line))) in species.iter().zip(lines).enumerate() {
        let name = &fit.plant.species[s].name;
        let mut p = Panel::new(&format!("{name} [mol/m³]"));
        p.series.push(guess_line);
        p.series.push(fit_line);
        let mut labs = Markers::new("lab", Color::Vermillion);
        let mut analyser = Markers::new("analyser", Color::Green);
        let mut res = Panel::new(&format!("{name} residual [σ]"));
        let mut res_m = Markers::new("residual", Color::Blue);
        let mut par_m = Markers::new(name, Color::nth(k));
        for (i, o) in d
            .observations
            .iter()
            .enumerate()
            .filter(|(_, o)| o.species == s)
        {
            let t = o.time as f64;
            match o.origin {
                Origin::Lab(_) => labs.push(t, o.value),
                Origin::Analyser => analyser.push(t, o.value),
            }
            let pred = fit.predicted[i];
            res_m.push(t, (pred - o.value) / o.sigma);
            par_m.push(o.value, pred);
            lo = lo.min(o.value.min(pred));
            hi = hi.max(o.value.max(pred));
        }
        for m in [labs, analyser] {
            if !m.is_empty() {
                p.markers.push(m);
            }
        }
        over_time.panels.push(p);
        res.markers.push(res_m);
        res.hlines = vec![(0.0, "0".into()), (2.0, "+2".into()), (-2.0, "−2".into())];
        residuals.panels.push(res);
        let mut pp = Panel::new("estimated [mol/m³]");
        pp.markers.push(par_m);
        parity.panels.push(pp);
    }
    // One parity panel with every species and the diagonal.
    if lo.is_finite() && hi.is_finite() {
        let mut merged = Panel::new("estimated [mol/m³]");
        for p in parity.panels.drain(..) {
            merged.markers.extend(p.markers);
        }
        let mut diag = Series::new("estimate = measured", Color::Black);
        diag.push(lo, lo);
        diag.push(hi, hi);
        merged.series.push(diag);
        parity.panels.push(merged);
    }
    Ok(vec![
        ("fit.svg", over_time),
        ("residuals.svg", residuals),
        ("parity.svg", parity),
    ])
}

fn text(fit: &Fit, clock: &Clock, files: &[String]) -> String {
    let d = &fit.data;
    let st = &fit.stats;
    let mut s = String::new();
    let labs = d
        .observations
        .iter()
        .filter(|o| matches!(o.origin, Origin::Lab(_)))
        .count();
    let _ = writeln!(s, "holdup fit: {}", fit.plant.name);
    let _ = writeln!(
        s,
        "  data: {} to {} ({} ticks of {} ms); {labs} lab results, {} analyser readings",
        clock.iso(d.t0),
        clock.iso(d.time(d.ticks - 1)),
        d.ticks,
        d.tick_ms,
        d.observations.len() - labs
    );
    for line in d.stats.describe() {
        let _ = writeln!(s, "  log: {line}");
    }
    let _ = writeln!(
        s,
        "  search: Levenberg-Marquardt {}; {} model runs in {:.2} s; chi2/(m - p) = {:.3} (m = {}, p = {})",
        fit.solution.termination,
        fit.evaluations,
        fit.wall_s,
        st.s2,
        d.observations.len(),
        fit.params.len()
    );
    let _ = writeln!(s);
    let w = fit
        .params
        .iter()
        .map(|p| p.name.chars().count())
        .max()
        .unwrap_or(4)
        .max(9);
    let _ = writeln!(
        s,
        "  {:<w$}  {:>11}  {:>11}  {:>11}  {:>25}  unit",
        "parameter", "guess", "fitted", "1 SE", "95 % interval"
    );
    for (i, p) in fit.params.iter().enumerate() {
        let interval = ci(fit, i).map_or("not determined".to_string(), |[a, b]| {
            format!("[{}, {}]", sig(a), sig(b))
        });
        let _ = writeln!(
            s,
            "  {:<w$}  {:>11}  {:>11}  {:>11}  {:>25}  {}",
            p.name,
            sig(p.guess),
            sig(fit.solution.theta[i]),
            sig(st.se[i]),
            interval,
            p.unit.as_deref().unwrap_or("(relative)")
        );
    }
    if fit.params.len() > 1 {
        let _ = writeln!(s, "\n  correlation:");
        for (i, row) in st.correlation.iter().enumerate() {
            let cells: Vec<String> = row.iter().map(|x| format!("{x:+.3}")).collect();
            let _ = writeln!(s, "  {:<w$}  {}", fit.params[i].name, cells.join("  "));
        }
    }
    let _ = writeln!(s, "\n  valid within the data's range: {}", range_words(fit));
    match &fit.held_out {
        Some(h) => {
            let _ = writeln!(
                s,
                "  held-out check: fitted to the {} observations before {}, the {} after are \
                 predicted with RMS error {:.2} % ({:.2} σ); at the guesses {:.2} % ({:.2} σ)",
                h.fitted,
                clock.iso(d.time(h.split)),
                h.held,
                100.0 * h.rel_fitted,
                h.rms_fitted,
                100.0 * h.rel_guess,
                h.rms_guess
            );
        }
        None => {
            let _ = writeln!(s, "  held-out check: not made");
        }
    }
    if !fit.warnings.is_empty() {
        let _ = writeln!(s, "\n  warnings:");
        for w in &fit.warnings {
            let _ = writeln!(s, "  - {w}");
        }
    }
    let _ = writeln!(s, "\n  written: {}", files.join(", "));
    let _ = writeln!(s, "\n  CAUTION: {CAUTION} {FIT_CAUTION}");
    s
}
