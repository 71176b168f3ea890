//! The replay's SVG figures: holdup and level, composition against lab and
//! analysers, flows and meter biases; log faults and closure alarms shaded.

use std::path::Path;

use holdup_kernel::{Estimate, Scalar, SensorReport};

use super::record::Record;
use super::{io_err, iso, ReplayError};
use crate::lab::LabResult;
use crate::log::LogStats;
use crate::plant::{OutletKind, Plant};
use crate::plot::{Band, Color, Figure, Markers, Panel, Series};
use crate::text::CAUTION;

/// The series being collected (each bounded in memory by decimation).
pub struct Figures {
    corrected: bool,
    has_level: bool,
    level_est: Series,
    level_meas: Series,
    hold_est: Series,
    hold_open: Series,
    hold_meas: Series,
    conc: Vec<Series>,
    open: Vec<Series>,
    bias: Vec<Series>,
    flows: Vec<Series>,
    outflow: Series,
    analysers: Vec<(usize, Markers)>,
    overflowed: bool,
}

impl Figures {
    /// Empty series for `plant` with the biased meters `bias_names`.
    pub fn new(plant: &Plant, bias_names: &[String]) -> Self {
        let corrected = plant.estimator.is_some();
        let label = if corrected { "corrected" } else { "estimate" };
        Self {
            corrected,
            has_level: plant.level.is_some(),
            level_est: Series::new(&format!("level, {label}"), Color::nth(0)),
            level_meas: Series::new("measured level", Color::nth(5)),
            hold_est: Series::new(&format!("holdup, {label}"), Color::nth(0)),
            hold_open: Series::new("holdup, open loop", Color::nth(1)),
            hold_meas: Series::new("holdup from measured level", Color::nth(5)),
            conc: plant
                .species
                .iter()
                .map(|s| Series::new(&format!("{} {label}", s.name), Color::nth(0)))
                .collect(),
            open: plant
                .species
                .iter()
                .map(|s| Series::new(&format!("{} open loop", s.name), Color::nth(1)))
                .collect(),
            bias: bias_names
                .iter()
                .enumerate()
                .map(|(j, b)| Series::new(&format!("bias of {b}"), Color::nth(j + 2)))
                .collect(),
            flows: plant
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
                .collect(),
            outflow: Series::new("total outflow (balance)", Color::nth(1)),
            analysers: plant
                .analysers
                .iter()
                .map(|a| (a.species, Markers::new("analyser", Color::nth(7))))
                .collect(),
            overflowed: false,
        }
    }

    /// Add the estimates at `x` hours.
    #[allow(clippy::too_many_arguments)]
    pub fn push<S: Scalar, const N: usize>(
        &mut self,
        x: f64,
        e: &Estimate<S, N>,
        open: Option<&Estimate<S, N>>,
        measured_level: Option<(f64, f64)>,
        biases: &[(f64, f64)],
        flows: &[f64],
        analyses: &[Option<f64>],
    ) {
        self.level_est.push(x, e.level.to_f64());
        self.hold_est.push(x, e.volume.to_f64());
        if let Some(o) = open {
            self.hold_open.push(x, o.volume.to_f64());
            for (s, c) in self.open.iter_mut().zip(o.concentrations.iter()) {
                s.push(x, c.to_f64());
            }
        }
        if let Some((z, v)) = measured_level {
            self.level_meas.push(x, z);
            self.hold_meas.push(x, v);
        }
        for (s, c) in self.conc.iter_mut().zip(e.concentrations.iter()) {
            s.push(x, c.to_f64());
        }
        for (s, b) in self.bias.iter_mut().zip(biases.iter()) {
            s.push(x, 100.0 * b.0);
        }
        for (s, q) in self.flows.iter_mut().zip(flows.iter()) {
            s.push(x, *q * 3600.0); // m³/s → m³/h, the plot's unit
        }
        for ((_, m), c) in self.analysers.iter_mut().zip(analyses.iter()) {
            if let Some(c) = c {
                m.push(x, *c);
            }
        }
    }

    /// Add the balance's outflow of the tick that ended at `x` hours.
    pub fn push_outflow<S: Scalar, const N: usize>(
        &mut self,
        x: f64,
        tick_s: f64,
        r: &SensorReport<S, N>,
    ) {
        self.outflow
            .push(x, r.step.outflow_volume.to_f64() / tick_s * 3600.0);
        self.overflowed |= r.step.flags.contains(holdup_kernel::StatusFlags::OVERFLOW);
    }

    /// Write `holdup.svg`, `concentrations*.svg` and `flows.svg`.
    #[allow(clippy::too_many_arguments)]
    pub fn write(
        self,
        dir: &Path,
        plant: &Plant,
        t0: i64,
        t_end: i64,
        stats: &LogStats,
        record: &Record,
        labs: &[LabResult],
    ) -> Result<(), ReplayError> {
        let hours = |t: i64| (t - t0) as f64 / 3.6e6;
        let mut bands: Vec<Band> = stats
            .fault_windows()
            .into_iter()
            .map(|(a, b, label)| Band {
                x0: hours(a),
                x1: hours(b),
                label,
            })
            .collect();
        for (span, alarm) in &record.closure {
            bands.push(Band {
                x0: hours(span.start),
                x1: hours(span.end.unwrap_or(t_end)),
                label: alarm.message().to_string(),
            });
        }
        let x_label = format!("time since {} [h]", iso(t0));
        let footer = CAUTION.to_string();
        let mut holdup = Panel::new("holdup [m³]");
        let mut level = Panel::new("level [m]");
        // Measured first, so the estimates are drawn on top of the noisier trace.
        if self.has_level {
            level.series.push(self.level_meas);
            holdup.series.push(self.hold_meas);
        }
        if self.corrected {
            holdup.series.push(self.hold_open);
        }
        holdup.series.push(self.hold_est);
        level.series.push(self.level_est);
        level.bands = bands.clone();
        write_fig(
            dir,
            "holdup.svg",
            Figure {
                title: format!("{}: holdup and level", plant.name),
                x_label: x_label.clone(),
                panels: vec![holdup, level],
                footer: footer.clone(),
            },
        )?;
        let mut panels = Vec::new();
        let mut open = self.open.into_iter();
        let mut analysers = self.analysers;
        for (i, s) in self.conc.into_iter().enumerate() {
            let mut p = Panel::new(&format!("{} [mol/m³]", plant.species[i].name));
            if let Some(o) = open.next().filter(|_| self.corrected) {
                p.series.push(o);
            }
            p.series.push(s);
            let mut m = Markers::new("lab result", Color::nth(6));
            for l in labs.iter().filter(|l| l.species == i) {
                m.push(hours(l.sample_time), l.value);
            }
            if !m.is_empty() {
                p.markers.push(m);
            }
            for (species, marks) in analysers.iter_mut() {
                if *species == i {
                    p.markers.push(std::mem::replace(
                        marks,
                        Markers::new("analyser", Color::nth(7)),
                    ));
                }
            }
            p.bands = bands.clone();
            panels.push(p);
        }
        for (k, chunk) in panels.chunks_mut(4).enumerate() {
            let name = if k == 0 {
                "concentrations.svg".to_string()
            } else {
                format!("concentrations-{}.svg", k + 1)
            };
            write_fig(
                dir,
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
        flows.series = self.flows;
        // The balance's outflow adds information only where some outlet is
        // not metered (orifice, weir) or the vessel overflowed.
        let computed = plant
            .outlets
            .iter()
            .any(|o| !matches!(o.kind, OutletKind::Measured(_)));
        if computed || self.overflowed {
            flows.series.push(self.outflow);
        }
        flows.bands = bands.clone();
        let mut flow_panels = vec![flows];
        if !self.bias.is_empty() {
            let mut p = Panel::new("estimated meter bias [%]");
            p.series = self.bias;
            p.bands = bands;
            flow_panels.push(p);
        }
        write_fig(
            dir,
            "flows.svg",
            Figure {
                title: format!("{}: flows", plant.name),
                x_label,
                panels: flow_panels,
                footer,
            },
        )
    }
}

fn write_fig(dir: &Path, name: &str, fig: Figure) -> Result<(), ReplayError> {
    let p = dir.join(name);
    fig.write(&p).map_err(io_err(&p))
}
