//! The replay's SVG figures: holdup and level, composition against lab and
//! analysers, flows and meter biases, on the report's clock, with ±1σ bands
//! where the estimator gives σ (holdup, concentrations, biases).
//!
//! Faults and alarms ([`Events`]) shade only the panels of the signals
//! concerned: a tag's faults shade the panels that draw it or what it
//! directly measures — a flow tag the flows panel (and the bias panel if
//! its meter's bias is estimated), the level tag the level and holdup
//! panels, an analyser or feed-concentration tag its species' panel; the
//! temperature is drawn nowhere, so its faults are only listed in the
//! report. A closure alarm is about the whole balance: it shades the
//! holdup, flows and bias panels, not the level or composition ones.

use std::path::Path;

use holdup_kernel::{Estimate, Scalar, SensorReport};

use super::{io_err, ReplayError};
use crate::clock::Clock;
use crate::lab::LabResult;
use crate::plant::{OutletKind, Plant};
use crate::plot::{Band, Color, Figure, Markers, Panel, Series, Shade};
use crate::report::events::Events;
use crate::text::CAUTION;

/// A written figure: its file name, its title and its SVG text.
#[derive(Clone, Debug)]
pub struct Plot {
    /// File name in the output folder, e.g. `holdup.svg`.
    pub file: String,
    /// The figure's title.
    pub title: String,
    /// The SVG document.
    pub svg: String,
}

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
            hold_est: Series::new(&format!("holdup, {label}"), Color::nth(0)).with_sigma_band(),
            hold_open: Series::new("holdup, open loop", Color::nth(1)),
            hold_meas: Series::new("holdup from measured level", Color::nth(5)),
            conc: plant
                .species
                .iter()
                .map(|s| {
                    Series::new(&format!("{} {label}", s.name), Color::nth(0)).with_sigma_band()
                })
                .collect(),
            open: plant
                .species
                .iter()
                .map(|s| Series::new(&format!("{} open loop", s.name), Color::nth(1)))
                .collect(),
            bias: bias_names
                .iter()
                .enumerate()
                .map(|(j, b)| {
                    Series::new(&format!("bias of {b}"), Color::nth(j + 2)).with_sigma_band()
                })
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

    /// Add the estimates at `t` (ms since the epoch).
    #[allow(clippy::too_many_arguments)]
    pub fn push<S: Scalar, const N: usize>(
        &mut self,
        t: i64,
        e: &Estimate<S, N>,
        open: Option<&Estimate<S, N>>,
        measured_level: Option<(f64, f64)>,
        biases: &[(f64, f64)],
        flows: &[f64],
        analyses: &[Option<f64>],
    ) {
        let x = t as f64;
        self.level_est.push(x, e.level.to_f64());
        let vs = e.volume_sigma.map_or(f64::NAN, |s| s.to_f64());
        self.hold_est.push_with_sigma(x, e.volume.to_f64(), vs);
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
        for (i, (s, c)) in self
            .conc
            .iter_mut()
            .zip(e.concentrations.iter())
            .enumerate()
        {
            let cs = e
                .concentration_sigma
                .as_ref()
                .map_or(f64::NAN, |v| v[i].to_f64());
            s.push_with_sigma(x, c.to_f64(), cs);
        }
        for (s, b) in self.bias.iter_mut().zip(biases.iter()) {
            s.push_with_sigma(x, 100.0 * b.0, 100.0 * b.1);
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

    /// Add the balance's outflow of the tick that ended at `t` (ms since
    /// the epoch).
    pub fn push_outflow<S: Scalar, const N: usize>(
        &mut self,
        t: i64,
        tick_s: f64,
        r: &SensorReport<S, N>,
    ) {
        self.outflow
            .push(t as f64, r.step.outflow_volume.to_f64() / tick_s * 3600.0);
        self.overflowed |= r.step.flags.contains(holdup_kernel::StatusFlags::OVERFLOW);
    }

    /// Write `holdup.svg`, `concentrations*.svg` and `flows.svg` into `dir`
    /// and return them (for the HTML report).
    pub fn write(
        self,
        dir: &Path,
        plant: &Plant,
        clock: &Clock,
        t_end: i64,
        events: &Events,
        labs: &[LabResult],
    ) -> Result<Vec<Plot>, ReplayError> {
        let tags = Tags::of(plant);
        // Windows of one kind that overlap (several tags of one panel) are
        // drawn as one, so that overlaps do not look darker.
        let shade = |p: &mut Panel, tags: &[String], balance: bool| {
            let mut w: Vec<(Shade, i64, i64)> = events
                .about(tags, balance)
                .map(|e| (e.shade, e.start, e.end.unwrap_or(t_end)))
                .collect();
            w.sort_unstable();
            let mut merged: Vec<(Shade, i64, i64)> = Vec::with_capacity(w.len());
            for (k, a, b) in w {
                match merged.last_mut() {
                    Some(last) if last.0 == k && a <= last.2 => last.2 = last.2.max(b),
                    _ => merged.push((k, a, b)),
                }
            }
            p.bands = merged
                .into_iter()
                .map(|(k, a, b)| Band::new(a as f64, b as f64, k))
                .collect();
        };
        let figure = |id: &str, title: String, panels: Vec<Panel>| {
            let fig = Figure {
                title,
                x_label: String::new(),
                panels,
                footer: CAUTION.to_string(),
                clock: Some(clock.clone()),
                id: format!("{id}-"),
            };
            (format!("{id}.svg"), fig)
        };
        let mut plots = Vec::new();

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
        shade(&mut holdup, &tags.level, true);
        shade(&mut level, &tags.level, false);
        plots.push(figure(
            "holdup",
            format!("{}: holdup and level", plant.name),
            vec![holdup, level],
        ));

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
                m.push(l.sample_time as f64, l.value);
            }
            p.markers.push(m);
            for (species, marks) in analysers.iter_mut() {
                if *species == i {
                    p.markers.push(std::mem::replace(
                        marks,
                        Markers::new("analyser", Color::nth(7)),
                    ));
                }
            }
            shade(&mut p, &tags.species[i], false);
            panels.push(p);
        }
        for (k, chunk) in panels.chunks_mut(4).enumerate() {
            let id = if k == 0 {
                "concentrations".to_string()
            } else {
                format!("concentrations-{}", k + 1)
            };
            plots.push(figure(
                &id,
                format!("{}: composition, estimate and lab", plant.name),
                chunk.iter_mut().map(std::mem::take).collect(),
            ));
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
        shade(&mut flows, &tags.flows, true);
        let mut flow_panels = vec![flows];
        if !self.bias.is_empty() {
            let mut p = Panel::new("estimated meter bias [%]");
            p.series = self.bias;
            shade(&mut p, &tags.biased, true);
            flow_panels.push(p);
        }
        plots.push(figure(
            "flows",
            format!("{}: flows", plant.name),
            flow_panels,
        ));

        plots
            .into_iter()
            .map(|(file, fig)| {
                let svg = fig.to_svg();
                let path = dir.join(&file);
                std::fs::write(&path, &svg).map_err(io_err(&path))?;
                Ok(Plot {
                    file,
                    title: fig.title,
                    svg,
                })
            })
            .collect()
    }
}

/// The log tags behind each kind of panel.
struct Tags {
    /// The level transmitter.
    level: Vec<String>,
    /// Metered inlet and outlet flows.
    flows: Vec<String>,
    /// The flow tags of the meters whose bias is estimated.
    biased: Vec<String>,
    /// Per species: its analysers and feed concentrations.
    species: Vec<Vec<String>>,
}

impl Tags {
    fn of(plant: &Plant) -> Self {
        let own = |t: Option<&str>| t.map(str::to_owned);
        let outlet_tag = |o: &crate::plant::Outlet| match &o.kind {
            OutletKind::Measured(s) => own(s.tag()),
            _ => None,
        };
        let inlet_tags = plant.inlets.iter().filter_map(|i| own(i.flow.tag()));
        let biased = plant
            .estimator
            .iter()
            .flat_map(|e| e.bias_meters.iter())
            .filter_map(|m| {
                if m.outlet {
                    plant.outlets.get(m.index).and_then(outlet_tag)
                } else {
                    plant.inlets.get(m.index).and_then(|i| own(i.flow.tag()))
                }
            })
            .collect();
        Tags {
            level: plant
                .level
                .as_ref()
                .and_then(|l| own(l.tag()))
                .into_iter()
                .collect(),
            flows: inlet_tags
                .chain(plant.outlets.iter().filter_map(outlet_tag))
                .collect(),
            biased,
            species: (0..plant.species.len())
                .map(|i| {
                    let analysers = plant
                        .analysers
                        .iter()
                        .filter(|a| a.species == i)
                        .filter_map(|a| own(a.reading.tag()));
                    let feeds = plant
                        .inlets
                        .iter()
                        .filter_map(|inlet| inlet.feed.get(i).and_then(|f| own(f.tag())));
                    analysers.chain(feeds).collect()
                })
                .collect(),
        }
    }
}
