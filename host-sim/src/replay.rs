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

use holdup_kernel::{Geometry, Inputs, Scalar, StatusFlags};
use serde_json::json;

use crate::demo::CAUTION;
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
    macro_rules! by_n {
        ($s:ty) => {
            match n {
                1 => run_typed::<$s, 1>(req),
                2 => run_typed::<$s, 2>(req),
                3 => run_typed::<$s, 3>(req),
                4 => run_typed::<$s, 4>(req),
                5 => run_typed::<$s, 5>(req),
                6 => run_typed::<$s, 6>(req),
                7 => run_typed::<$s, 7>(req),
                _ => run_typed::<$s, 8>(req),
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

fn run_typed<S: Scalar, const N: usize>(req: &Request<'_>) -> Result<Outcome, ReplayError> {
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

    let inlet_flow: Vec<Source> = plant
        .inlets
        .iter()
        .map(|i| Source::new(plant, &i.flow))
        .collect();
    let feeds: Vec<Vec<Source>> = plant
        .inlets
        .iter()
        .map(|i| i.feed.iter().map(|s| Source::new(plant, s)).collect())
        .collect();
    let outlet_flow: Vec<Option<Source>> = plant
        .outlets
        .iter()
        .map(|o| match &o.kind {
            OutletKind::Measured(s) => Some(Source::new(plant, s)),
            _ => None,
        })
        .collect();
    let temperature = Source::new(plant, &plant.temperature);
    let level = plant.level.as_ref().map(|l| Source::new(plant, l));

    // Initial temperature: configured, or the signal's first value.
    let t_init = match plant.initial.temperature {
        Some(t) => t,
        None => {
            let samples = reader
                .sample(t0)?
                .ok_or_else(|| ReplayError::EmptyLog(req.log.to_path_buf()))?;
            let (t, _) = temperature.read(samples);
            if t.is_finite() && t > 0.0 {
                t
            } else {
                298.15
            }
        }
    };
    let mut ves: HostVessel<S, N> =
        to_kernel::vessel(plant, t_init).map_err(|e| ReplayError::Kernel {
            path: plant.path.clone(),
            message: e.message(),
        })?;
    let geometry: Geometry<f64> =
        Geometry::new(plant.shape.clone()).map_err(|e| ReplayError::Kernel {
            path: plant.path.clone(),
            message: e.message(),
        })?;

    // Outputs.
    let est_path = req.out_dir.join("estimates.csv");
    let mut est = BufWriter::new(File::create(&est_path).map_err(io_err(&est_path))?);
    let mut header = String::from("time,elapsed_h,holdup_m3,level_m");
    if level.is_some() {
        header.push_str(",measured_level_m");
    }
    for s in &plant.species {
        header.push_str(&format!(",{}_mol_m3", csv_name(&s.name)));
    }
    header.push_str(",flags,input_quality\n");
    est.write_all(header.as_bytes())
        .map_err(io_err(&est_path))?;

    let hours = |t: i64| (t - t0) as f64 / 3.6e6;
    let mut fig_level = Panel::new("level [m]");
    let mut s_level_est = Series::new("estimated level", Color::nth(0));
    let mut s_level_meas = Series::new("measured level", Color::nth(5));
    let mut fig_holdup = Panel::new("holdup [m³]");
    let mut s_hold_est = Series::new("estimated holdup", Color::nth(0));
    let mut s_hold_meas = Series::new("holdup from measured level", Color::nth(5));
    let mut conc_series: Vec<Series> = plant
        .species
        .iter()
        .map(|s| Series::new(&format!("{} estimate", s.name), Color::nth(0)))
        .collect();
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

    let mut comparison = Comparison::new(plant.species.len());
    let mut lab_iter = labs.iter().peekable();
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
    let mut prev_conc: [f64; N] = [0.0; N];
    let mut prev_t = t0;
    let mut ticks: u64 = 0;
    let mut t = t0;
    let mut row = String::new();
    while let Some(samples) = reader.sample(t)? {
        // Inputs held over [t, t + tick).
        let mut u: Inputs<S, N, I, O> = Inputs::quiescent(S::ONE);
        let mut quality = "good";
        // Worst state of the inputs used this tick (counts per tag are in the
        // reader's statistics).
        let mut note = |state: SampleState| match state {
            SampleState::Stale if quality == "good" => quality = "uncertain",
            SampleState::Missing => quality = "bad",
            _ => {}
        };
        let mut flows_now: Vec<f64> = Vec::with_capacity(flow_series.len());
        for (k, src) in inlet_flow.iter().enumerate() {
            let (q, st) = src.read(samples);
            note(st);
            u.inlet_flows[k] = S::of(if st == SampleState::Missing {
                f64::NAN
            } else {
                q
            });
            flows_now.push(q * 3600.0);
            for (i, f) in feeds[k].iter().enumerate().take(N) {
                let (c, st) = f.read(samples);
                note(st);
                u.feed[k][i] = S::of(if st == SampleState::Missing {
                    f64::NAN
                } else {
                    c
                });
            }
        }
        for (k, src) in outlet_flow.iter().enumerate() {
            if let Some(src) = src {
                let (q, st) = src.read(samples);
                note(st);
                u.outlet_flows[k] = S::of(if st == SampleState::Missing {
                    f64::NAN
                } else {
                    q
                });
                flows_now.push(q * 3600.0);
            }
        }
        let (temp, st) = temperature.read(samples);
        note(st);
        u.temperature = S::of(if st == SampleState::Missing {
            f64::NAN
        } else {
            temp
        });
        let measured_level = level.as_ref().map(|l| {
            let (z, st) = l.read(samples);
            if st == SampleState::Missing || st == SampleState::Stale {
                f64::NAN
            } else {
                z
            }
        });

        // State at t (before the tick): estimates row, plots, lab.
        let conc = ves.concentrations().map(|c| c.to_f64());
        let v = ves.volume().to_f64();
        let z = ves.level().to_f64();
        while let Some(l) = lab_iter.peek() {
            if l.sample_time > t {
                break;
            }
            if l.sample_time < t0 {
                comparison.outside_span += 1;
            } else {
                // Linear between the states at prev_t and t.
                let w = if t > prev_t {
                    (l.sample_time - prev_t) as f64 / (t - prev_t) as f64
                } else {
                    1.0
                };
                let e = prev_conc[l.species] + w * (conc[l.species] - prev_conc[l.species]);
                comparison.add(l.species, e, l.value, l.sample_time);
            }
            lab_iter.next();
        }
        prev_conc = conc;
        prev_t = t;

        let x = hours(t);
        s_level_est.push(x, z);
        s_hold_est.push(x, v);
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
                let d = z - m;
                level_err.0 += d * d;
                level_err.1 = level_err.1.max(d.abs());
                level_err.2 += 1;
            }
        }
        for (s, c) in conc_series.iter_mut().zip(conc.iter()) {
            s.push(x, *c);
        }
        for (s, q) in flow_series.iter_mut().zip(flows_now.iter()) {
            s.push(x, *q);
        }

        let report = ves.step(&u);
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
            row.push_str(&format!("{},{:.6},{:.6e},{:.6}", iso(t), x, v, z));
            if let Some(m) = measured_level {
                if m.is_finite() {
                    row.push_str(&format!(",{m:.6}"));
                } else {
                    row.push(',');
                }
            }
            for c in conc.iter().take(plant.species.len()) {
                row.push_str(&format!(",{c:.6e}"));
            }
            let names: Vec<&str> = report.flags.names().collect();
            row.push_str(&format!(",{},{}\n", names.join("|"), quality));
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
    // Final row at the end time.
    est.flush().map_err(io_err(&est_path))?;
    comparison.outside_span += lab_iter.count();
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
    let x_label = format!("time since {} [h]", iso(t0));
    let footer = CAUTION.to_string();
    // Measured first, so the estimate is drawn on top of the noisier trace.
    if level.is_some() {
        fig_level.series.push(s_level_meas);
    }
    fig_level.series.push(s_level_est);
    fig_level.bands = bands.clone();
    if level.is_some() {
        fig_holdup.series.push(s_hold_meas);
    }
    fig_holdup.series.push(s_hold_est);
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
    for (i, s) in conc_series.into_iter().enumerate() {
        let mut p = Panel::new(&format!("{} [mol/m³]", plant.species[i].name));
        let mut m = Markers::new("lab result", Color::nth(6));
        for l in labs.iter().filter(|l| l.species == i) {
            m.push(hours(l.sample_time), l.value);
        }
        p.series.push(s);
        p.markers.push(m);
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
    flows.bands = bands;
    write_fig(
        req.out_dir,
        "flows.svg",
        Figure {
            title: format!("{}: flows", plant.name),
            x_label,
            panels: vec![flows],
            footer,
        },
    )?;

    // Summary.
    let flag_names = [
        "empty",
        "near_empty",
        "overflow",
        "outlet_limited",
        "input_negative",
        "input_not_finite",
        "amount_clamped",
        "method_fallback",
        "numeric_fault",
    ];
    let flags_json: serde_json::Map<String, serde_json::Value> = flag_names
        .iter()
        .enumerate()
        .filter(|(i, _)| tally.flags[*i] > 0)
        .map(|(i, n)| (n.to_string(), json!(tally.flags[i])))
        .collect();
    let agreements = comparison.results();
    let lab_json: Vec<serde_json::Value> = plant
        .species
        .iter()
        .zip(agreements.iter())
        .map(|(s, a)| {
            json!({
                "species": s.name,
                "n": a.n,
                "bias_mol_m3": a.bias,
                "rmse_mol_m3": a.rmse,
                "max_abs_error_mol_m3": a.max_abs,
                "max_error_at": a.max_at.map(iso),
            })
        })
        .collect();
    let final_conc: serde_json::Map<String, serde_json::Value> = plant
        .species
        .iter()
        .zip(ves.concentrations().iter())
        .map(|(s, c)| (s.name.clone(), json!(c.to_f64())))
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
        "estimated_vs_measured_level": level_json,
        "lab_comparison": lab_json,
        "lab_outside_replay": comparison.outside_span,
        "final": {
            "holdup_m3": ves.volume().to_f64(),
            "level_m": ves.level().to_f64(),
            "concentrations_mol_m3": final_conc,
        },
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
        "Replay of {} ({}, {:?}, tick {} ms)\n",
        plant.name,
        if plant.scalar == ScalarKind::F32 {
            "f32"
        } else {
            "f64"
        },
        plant.method,
        plant.tick_ms
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
            "Estimated vs measured level: RMSE {:.4} m, max {:.4} m over {} ticks\n",
            (level_err.0 / level_err.2 as f64).sqrt(),
            level_err.1,
            level_err.2
        ));
    }
    if req.lab.is_some() {
        text.push_str("Lab comparison (estimate − lab, mol/m³):\n");
        text.push_str(&format!(
            "  {:<16} {:>4} {:>12} {:>12} {:>12}\n",
            "species", "n", "bias", "RMSE", "max |err|"
        ));
        for (s, a) in plant.species.iter().zip(agreements.iter()) {
            text.push_str(&format!(
                "  {:<16} {:>4} {:>12.4} {:>12.4} {:>12.4}\n",
                s.name, a.n, a.bias, a.rmse, a.max_abs
            ));
        }
        if comparison.outside_span > 0 {
            text.push_str(&format!(
                "  {} lab results fall outside the replayed span (not compared)\n",
                comparison.outside_span
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

/// Flags as a compact string (for logs and tests).
pub fn flag_string(f: StatusFlags) -> String {
    f.names().collect::<Vec<_>>().join("|")
}
