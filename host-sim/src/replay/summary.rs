//! The replay's summary: one struct, serialised with serde for
//! `summary.json` and displayed for the terminal. SI units throughout;
//! times as ISO 8601 text with milliseconds in the plant's report zone
//! ([`crate::plant::LogOptions::output_zone`]: `…+01:00`, or `…Z` in UTC).

use std::collections::BTreeMap;
use std::fmt;

use holdup_kernel::diagnostics::DeviceStatus;
use holdup_kernel::Method;
use serde::Serialize;

use super::labs::{AnalyserTally, LabTally};
use super::record::{Record, Span};
use crate::lab::Agreement;
use crate::zone::Zone;

/// A bias is reported as one to recalibrate when it is at least this many
/// standard deviations from zero ...
pub const BIAS_SIGNIFICANT_SIGMAS: f64 = 3.0;
/// ... and at least this large (relative).
pub const BIAS_SIGNIFICANT_MIN: f64 = 0.005;

/// The configuration word of an integrator (as written in `plant.toml`).
pub fn method_word(m: Method) -> &'static str {
    match m {
        Method::Auto => "auto",
        Method::Exact => "exact",
        Method::Mprk22 => "mprk22",
        Method::ReferenceRk4 => "rk4-reference",
        Method::ReferenceEuler => "euler-reference",
    }
}

/// A time window in the summary.
#[derive(Clone, Debug, Serialize)]
pub struct Window {
    /// Start, ISO 8601.
    pub start: String,
    /// End, ISO 8601 (`None`: still open at the end of the log).
    pub end: Option<String>,
}

impl Window {
    /// A span's times in `zone`.
    pub fn new(s: &Span, zone: &Zone) -> Self {
        Self {
            start: zone.iso(s.start),
            end: s.end.map(|t| zone.iso(t)),
        }
    }
}

/// Estimate − reference agreement of one species.
#[derive(Clone, Debug, Serialize)]
pub struct AgreementOut {
    /// Number compared.
    pub n: usize,
    /// Mean difference, mol/m³.
    pub bias_mol_m3: f64,
    /// Root mean square difference, mol/m³.
    pub rmse_mol_m3: f64,
    /// Largest absolute difference, mol/m³.
    pub max_abs_error_mol_m3: f64,
    /// When, ISO 8601.
    pub max_error_at: Option<String>,
}

impl AgreementOut {
    /// An agreement, its time in `zone`.
    pub fn new(a: &Agreement, zone: &Zone) -> Self {
        Self {
            n: a.n,
            bias_mol_m3: a.bias,
            rmse_mol_m3: a.rmse,
            max_abs_error_mol_m3: a.max_abs,
            max_error_at: a.max_at.map(|t| zone.iso(t)),
        }
    }
}

/// One species' comparison with the lab or an analyser.
#[derive(Clone, Debug, Serialize)]
pub struct SpeciesAgreement {
    /// Species.
    pub species: String,
    /// The open-loop balance.
    pub open_loop: AgreementOut,
    /// The corrected estimate, before the value's own fusion.
    pub corrected: Option<AgreementOut>,
}

/// One conditioned input's events.
#[derive(Clone, Debug, Serialize)]
pub struct InputEvents {
    /// Tag and role.
    pub input: String,
    /// Ticks with each conditioning flag (`out_of_range`, `held`, …).
    pub flag_ticks: BTreeMap<String, u64>,
    /// Windows with a reading that was not good.
    pub windows: u64,
    /// Their summed length, s.
    pub windows_total_s: f64,
    /// The first windows.
    pub first_windows: Vec<Window>,
}

/// One biased meter as the estimator sees it at the end.
#[derive(Clone, Debug, Serialize)]
pub struct MeterBias {
    /// Inlet or outlet name.
    pub meter: String,
    /// Relative bias (the meter reads `1 + bias` times the true flow).
    pub bias: f64,
    /// Its 1σ.
    pub sigma: f64,
    /// Significant: at least [`BIAS_SIGNIFICANT_SIGMAS`] σ and
    /// [`BIAS_SIGNIFICANT_MIN`] from zero.
    pub recalibrate: bool,
}

impl MeterBias {
    /// The plain-words verdict.
    pub fn verdict(&self) -> String {
        let reads = format!(
            "reads {:+.1} % ± {:.1} %",
            100.0 * self.bias,
            100.0 * self.sigma
        );
        if self.recalibrate {
            format!(
                "{}: {reads}: recalibrate (the estimator compensates meanwhile)",
                self.meter
            )
        } else {
            format!("{}: no significant bias ({reads})", self.meter)
        }
    }
}

/// The closure test.
#[derive(Clone, Debug, Serialize)]
pub struct ClosureOut {
    /// Windows checked.
    pub windows_evaluated: u32,
    /// Windows lost to missing data.
    pub windows_lost: u32,
    /// 1σ of a window residual, m³.
    pub residual_sigma_m3: f64,
    /// Alarms, each with its window.
    pub alarms: Vec<ClosureAlarmOut>,
}

/// One closure alarm.
#[derive(Clone, Debug, Serialize)]
pub struct ClosureAlarmOut {
    /// Its message.
    pub alarm: &'static str,
    /// When.
    pub window: Window,
}

/// The estimator's counters.
#[derive(Clone, Debug, Serialize)]
pub struct EstimatorOut {
    /// Level readings fused.
    pub level_accepted: u32,
    /// Level readings rejected by the gate.
    pub level_rejected: u32,
    /// Lab and analyser values fused.
    pub composition_accepted: u32,
    /// Lab and analyser values rejected by the gate.
    pub composition_rejected: u32,
    /// Measurements skipped (non-finite, near empty).
    pub skipped: u32,
    /// Lab samples dropped without a result.
    pub lab_expired: u32,
    /// Covariance repairs.
    pub covariance_guarded: u32,
    /// Re-seeds of the holdup from the level after a run of rejections.
    pub reseeds: u64,
    /// When (the first ones).
    pub reseed_times: Vec<String>,
    /// Lab outcomes.
    pub lab: LabTally,
    /// Analyser outcomes.
    pub analysers: AnalyserTally,
}

/// NE107 status over the run.
#[derive(Clone, Debug, Serialize)]
pub struct StatusOut {
    /// Ticks with no diagnostic.
    pub good: u64,
    /// Ticks "maintenance required".
    pub maintenance_required: u64,
    /// Ticks "out of specification".
    pub out_of_specification: u64,
    /// Ticks "function check".
    pub function_check: u64,
    /// Ticks "failure".
    pub failure: u64,
    /// Ticks each reason fired.
    pub reasons: BTreeMap<String, u64>,
}

/// The state at the end.
#[derive(Clone, Debug, Serialize)]
pub struct FinalOut {
    /// Holdup, m³.
    pub holdup_m3: f64,
    /// Its 1σ, m³ (corrected only).
    pub holdup_sigma_m3: Option<f64>,
    /// Level, m.
    pub level_m: f64,
    /// Concentrations, mol/m³.
    pub concentrations_mol_m3: BTreeMap<String, f64>,
    /// Their 1σ (corrected only).
    pub concentration_sigmas_mol_m3: Option<BTreeMap<String, f64>>,
}

/// Open-loop level against the measured one.
#[derive(Clone, Debug, Serialize)]
pub struct LevelAgreement {
    /// Root mean square difference, m.
    pub rmse_m: f64,
    /// Largest absolute difference, m.
    pub max_abs_m: f64,
    /// Ticks compared.
    pub n: u64,
}

/// The log reader's statistics with their total of rejected rows.
#[derive(Clone, Debug, Serialize)]
pub struct LogOut {
    /// Everything the reader counted.
    #[serde(flatten)]
    pub stats: crate::log::LogStats,
    /// Rows rejected whole, all reasons.
    pub rows_rejected: u64,
}

/// The whole summary.
#[derive(Clone, Debug, Serialize)]
pub struct Summary {
    /// Plant name.
    pub plant: String,
    /// Configuration file.
    pub config: String,
    /// Log file.
    pub log: String,
    /// Lab file.
    pub lab: Option<String>,
    /// Kernel scalar type.
    pub scalar: &'static str,
    /// Integrator.
    pub method: &'static str,
    /// Corrected by an estimator (else open loop).
    pub corrected: bool,
    /// What corrects it, in words.
    pub corrected_by: &'static str,
    /// Tick, ms.
    pub tick_ms: u32,
    /// Interval between the rows of `estimates.csv`, ms (a whole number of
    /// ticks).
    pub estimates_every_ms: u64,
    /// Zone of the summary's times (IANA name, or `UTC`).
    pub time_zone: String,
    /// First tick.
    pub start: String,
    /// End of the last tick.
    pub end: String,
    /// Ticks run.
    pub ticks: u64,
    /// Wall-clock time, s.
    pub wall_seconds: f64,
    /// What the log reader found.
    pub log_stats: LogOut,
    /// The same, in sentences (for the text).
    #[serde(skip)]
    pub log_lines: Vec<String>,
    /// Ticks with each kernel flag.
    pub kernel_flags_ticks: BTreeMap<String, u64>,
    /// Conditioning events of each input that had any.
    pub inputs: Vec<InputEvents>,
    /// The open loop's level against the measured one.
    pub open_loop_level_vs_measured: Option<LevelAgreement>,
    /// The estimator's counters.
    pub estimator: Option<EstimatorOut>,
    /// Meter biases with their verdicts.
    pub meters: Vec<MeterBias>,
    /// The closure test.
    pub closure: Option<ClosureOut>,
    /// NE107 status.
    pub status_ticks: StatusOut,
    /// Analyser comparisons.
    pub analyser_comparison: Vec<SpeciesAgreement>,
    /// Analyser values repeated within their cycle, not used.
    pub analyser_repeats_within_cycle: u64,
    /// Lab comparisons.
    pub lab_comparison: Vec<SpeciesAgreement>,
    /// Lab results outside the replayed span.
    pub lab_outside_replay: usize,
    /// The state at the end.
    #[serde(rename = "final")]
    pub final_state: FinalOut,
    /// Files written.
    pub outputs: Vec<String>,
    /// What the checks of the plant against its log found
    /// ([`super::checks`]).
    pub warnings: Vec<String>,
    /// Set when the usable data do not cover enough of the span: why. The
    /// outputs are written, and `holdup replay` exits with status 3.
    pub verdict: Option<String>,
    /// The usual cautions.
    pub caution: &'static str,
}

/// NE107 counts from the record.
pub fn status_out(r: &Record) -> StatusOut {
    StatusOut {
        good: r.status(DeviceStatus::Good),
        maintenance_required: r.status(DeviceStatus::MaintenanceRequired),
        out_of_specification: r.status(DeviceStatus::OutOfSpecification),
        function_check: r.status(DeviceStatus::FunctionCheck),
        failure: r.status(DeviceStatus::Failure),
        reasons: r
            .reason_ticks
            .iter()
            .map(|(k, v)| (k.to_string(), *v))
            .collect(),
    }
}

/// The conditioning events of the record.
pub fn inputs_out(r: &Record, zone: &Zone) -> Vec<InputEvents> {
    r.conditioned_events()
        .map(|i| InputEvents {
            input: i.name.clone(),
            flag_ticks: i
                .flag_ticks
                .iter()
                .map(|(k, v)| (k.to_string(), *v))
                .collect(),
            windows: i.not_good.total,
            windows_total_s: i.not_good.total_ms as f64 / 1000.0,
            first_windows: i
                .not_good
                .first
                .iter()
                .map(|w| Window::new(w, zone))
                .collect(),
        })
        .collect()
}

fn agreement_rows(f: &mut fmt::Formatter<'_>, rows: &[SpeciesAgreement]) -> fmt::Result {
    writeln!(
        f,
        "  {:<16} {:<10} {:>6} {:>12} {:>12} {:>12}",
        "species", "estimate", "n", "bias", "RMSE", "max |err|"
    )?;
    for r in rows {
        let mut list = vec![("open loop", &r.open_loop)];
        if let Some(c) = &r.corrected {
            list.push(("corrected", c));
        }
        for (what, a) in list {
            writeln!(
                f,
                "  {:<16} {:<10} {:>6} {:>12.4} {:>12.4} {:>12.4}",
                r.species, what, a.n, a.bias_mol_m3, a.rmse_mol_m3, a.max_abs_error_mol_m3
            )?;
        }
    }
    Ok(())
}

impl Summary {
    fn fmt_inputs(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        if self.inputs.is_empty() {
            writeln!(f, "Inputs: every tagged value passed its checks")?;
        } else {
            writeln!(
                f,
                "Inputs (values rejected, held or doubtful never reach the balance as read):"
            )?;
            for i in &self.inputs {
                let flags: Vec<String> = i
                    .flag_ticks
                    .iter()
                    .map(|(k, v)| format!("{k} {v}"))
                    .collect();
                write!(f, "  {}: {} ticks", i.input, flags.join(", "))?;
                if i.windows > 0 {
                    write!(
                        f,
                        "; not good in {} windows ({:.0} s in all)",
                        i.windows, i.windows_total_s
                    )?;
                    if let Some(w) = i.first_windows.first() {
                        write!(
                            f,
                            ", first from {} to {}",
                            w.start,
                            w.end.as_deref().unwrap_or("the end")
                        )?;
                    }
                }
                writeln!(f)?;
            }
        }
        Ok(())
    }

    fn fmt_estimator(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        if let Some(e) = &self.estimator {
            writeln!(
                f,
                "Estimator: {} level values fused, {} rejected by the gate, {} re-seeds from the level; lab: {} fused, {} rejected, {} not drawn, {} without pending sample, {} expired, {} pending at the end",
                e.level_accepted,
                e.level_rejected,
                e.reseeds,
                e.lab.fused,
                e.lab.rejected_by_gate,
                e.lab.not_drawn,
                e.lab.without_pending_sample,
                e.lab_expired,
                e.lab.pending_at_end
            )?;
            for t in &e.reseed_times {
                writeln!(f, "  re-seeded the holdup from the level at {t} (a run of level readings rejected by the gate)")?;
            }
            if !self.analyser_comparison.is_empty() {
                writeln!(
                    f,
                    "  analysers: {} readings fused, {} rejected by the gate, {} skipped (vessel near empty)",
                    e.analysers.fused, e.analysers.rejected_by_gate, e.analysers.skipped
                )?;
            }
        }
        for m in &self.meters {
            writeln!(f, "  meter {}", m.verdict())?;
        }
        Ok(())
    }

    fn fmt_closure(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        if let Some(c) = &self.closure {
            writeln!(
                f,
                "Balance closure (flows corrected by the estimated meter biases): {} windows checked ({} lost to missing data), residual 1σ {:.4} m³",
                c.windows_evaluated, c.windows_lost, c.residual_sigma_m3
            )?;
            if c.alarms.is_empty() {
                writeln!(f, "  no alarm: the balance closes")?;
            }
            for a in &c.alarms {
                match &a.window.end {
                    Some(end) => {
                        writeln!(f, "  alarm {}: from {} to {end}", a.alarm, a.window.start)?
                    }
                    None => writeln!(
                        f,
                        "  ALARM {}: from {}, still on at the end of the log",
                        a.alarm, a.window.start
                    )?,
                }
            }
        }
        Ok(())
    }
}

impl fmt::Display for Summary {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        writeln!(
            f,
            "Replay of {} ({}, {}, tick {} ms, {})",
            self.plant, self.scalar, self.method, self.tick_ms, self.corrected_by
        )?;
        writeln!(
            f,
            "  span {} .. {} ({}; {} ticks, {:.2} s wall, {:.0} ticks/s)",
            self.start,
            self.end,
            self.time_zone,
            self.ticks,
            self.wall_seconds,
            self.ticks as f64 / self.wall_seconds.max(1e-9)
        )?;
        writeln!(f, "Log:")?;
        for l in &self.log_lines {
            writeln!(f, "  {l}")?;
        }
        self.fmt_inputs(f)?;
        if self.kernel_flags_ticks.is_empty() {
            writeln!(f, "Kernel: no clamps or faults")?;
        } else {
            writeln!(f, "Kernel (ticks with each flag):")?;
            for (k, v) in &self.kernel_flags_ticks {
                writeln!(f, "  {k}: {v}")?;
            }
        }
        if let Some(l) = &self.open_loop_level_vs_measured {
            writeln!(
                f,
                "Open-loop vs measured level: RMSE {:.4} m, max {:.4} m over {} ticks",
                l.rmse_m, l.max_abs_m, l.n
            )?;
        }
        self.fmt_estimator(f)?;
        let s = &self.status_ticks;
        writeln!(
            f,
            "Status (NAMUR NE107, ticks): good {}, maintenance required {}, out of specification {}, function check {}, failure {}",
            s.good, s.maintenance_required, s.out_of_specification, s.function_check, s.failure
        )?;
        for (k, v) in &s.reasons {
            writeln!(f, "  {k}: {v} ticks")?;
        }
        self.fmt_closure(f)?;
        if !self.analyser_comparison.is_empty() {
            writeln!(
                f,
                "Analysers: one reading per cycle used; {} repeated values within a cycle not used",
                self.analyser_repeats_within_cycle
            )?;
            writeln!(f, "Analyser comparison at new analyses (estimate − analyser, mol/m³; corrected: before fusing the reading):")?;
            agreement_rows(f, &self.analyser_comparison)?;
        }
        if self.lab.is_some() {
            writeln!(
                f,
                "Lab comparison at sample times (estimate − lab, mol/m³):"
            )?;
            agreement_rows(f, &self.lab_comparison)?;
            if self.lab_outside_replay > 0 {
                writeln!(
                    f,
                    "  {} lab results fall outside the replayed span (not compared)",
                    self.lab_outside_replay
                )?;
            }
        }
        writeln!(
            f,
            "Estimates: one row {} of plant time in estimates.csv",
            super::estimates::interval_words(self.estimates_every_ms, self.tick_ms)
        )?;
        if !self.warnings.is_empty() {
            writeln!(f, "Warnings (the plant against its log):")?;
            for w in &self.warnings {
                writeln!(f, "  - {w}")?;
            }
        }
        if let Some(v) = &self.verdict {
            writeln!(f, "NOT USABLE: {v}")?;
        }
        writeln!(f, "Outputs: {}", self.outputs.join(", "))?;
        write!(f, "\n{}", self.caution)
    }
}
