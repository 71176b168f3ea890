//! The report's tables, one function per section of the summary: run, log,
//! inputs, kernel and status, estimator, meters, closure, comparisons with
//! lab and analysers, faults and alarms, final state.

use std::fmt::Write as _;

use super::escape::{escape, push_escaped};
use super::events::Subject;
use super::Report;
use crate::plot::Shade;
use crate::replay::estimates::{duration_words, interval_words};
use crate::replay::summary::SpeciesAgreement;

/// A table cell.
pub(super) enum Cell {
    /// Text (escaped).
    T(String),
    /// A number (escaped, right-aligned).
    N(String),
    /// Markup made here (not escaped).
    H(String),
}

fn t(s: impl Into<String>) -> Cell {
    Cell::T(s.into())
}

fn n(s: impl ToString) -> Cell {
    Cell::N(s.to_string())
}

/// A table with a header row.
pub(super) fn table(out: &mut String, class: &str, head: &[&str], rows: &[Vec<Cell>]) {
    let _ = writeln!(out, "<table class=\"{class}\"><thead><tr>");
    for h in head {
        out.push_str("<th>");
        push_escaped(out, h);
        out.push_str("</th>");
    }
    out.push_str("</tr></thead><tbody>\n");
    for r in rows {
        out.push_str("<tr>");
        for c in r {
            match c {
                Cell::T(s) => {
                    out.push_str("<td>");
                    push_escaped(out, s);
                }
                Cell::N(s) => {
                    out.push_str("<td class=\"num\">");
                    push_escaped(out, s);
                }
                Cell::H(s) => {
                    out.push_str("<td>");
                    out.push_str(s);
                }
            }
            out.push_str("</td>");
        }
        out.push_str("</tr>\n");
    }
    out.push_str("</tbody></table>\n");
}

/// A two-column table of names and values.
fn pairs(out: &mut String, rows: &[(&str, String)]) {
    out.push_str("<table class=\"pairs\"><tbody>\n");
    for (k, v) in rows {
        out.push_str("<tr><th scope=\"row\">");
        push_escaped(out, k);
        out.push_str("</th><td>");
        push_escaped(out, v);
        out.push_str("</td></tr>\n");
    }
    out.push_str("</tbody></table>\n");
}

fn para(out: &mut String, s: &str) {
    out.push_str("<p>");
    push_escaped(out, s);
    out.push_str("</p>\n");
}

/// The run: files, kernel, span, interval of the estimates, clock.
pub(super) fn run(out: &mut String, r: &Report<'_>) {
    let s = r.summary;
    pairs(
        out,
        &[
            ("plant", s.plant.clone()),
            ("configuration", s.config.clone()),
            ("log", s.log.clone()),
            (
                "lab results",
                s.lab.clone().unwrap_or_else(|| "none given".into()),
            ),
            ("kernel", format!("{}, integrator {}", s.scalar, s.method)),
            ("estimate", s.corrected_by.to_string()),
            ("tick", duration_words(u64::from(s.tick_ms))),
            ("from", r.clock.iso(r.start)),
            ("to", r.clock.iso(r.end)),
            ("ticks", s.ticks.to_string()),
            ("wall time", format!("{:.2} s", s.wall_seconds)),
            (
                "estimates.csv",
                format!(
                    "one row {}",
                    interval_words(s.estimates_every_ms, s.tick_ms)
                ),
            ),
            ("times shown in", r.clock.describe(r.start)),
        ],
    );
}

/// The log reader's findings: its sentences and one row per tag.
pub(super) fn log(out: &mut String, r: &Report<'_>) {
    out.push_str("<ul>\n");
    for l in &r.summary.log_lines {
        out.push_str("<li>");
        push_escaped(out, l);
        out.push_str("</li>\n");
    }
    out.push_str("</ul>\n");
    let rows: Vec<Vec<Cell>> = r
        .summary
        .log_stats
        .stats
        .tags
        .iter()
        .map(|g| {
            vec![
                t(g.tag.clone()),
                n(g.points),
                n(g.missing.total),
                n(g.duplicates.total),
                n(g.bad_quality.total),
                n(g.gaps.total),
                n(g.flat_lines.total),
                n(g.missing_runs.total),
            ]
        })
        .collect();
    table(
        out,
        "data",
        &[
            "tag",
            "points",
            "missing values",
            "duplicates",
            "bad quality",
            "data gaps",
            "flat lines",
            "missing-value runs",
        ],
        &rows,
    );
}

/// The conditioning of each input, the kernel's flags and the NE107
/// status counts.
pub(super) fn inputs_and_status(out: &mut String, r: &Report<'_>) {
    let s = r.summary;
    if s.inputs.is_empty() {
        para(out, "Inputs: every tagged value passed its checks.");
    } else {
        let rows: Vec<Vec<Cell>> = s
            .inputs
            .iter()
            .map(|i| {
                let flags: Vec<String> = i
                    .flag_ticks
                    .iter()
                    .map(|(k, v)| format!("{k} {v}"))
                    .collect();
                vec![
                    t(i.input.clone()),
                    t(flags.join(", ")),
                    n(i.windows),
                    n(format!("{:.0}", i.windows_total_s)),
                ]
            })
            .collect();
        table(
            out,
            "data",
            &[
                "input",
                "ticks with each flag",
                "windows not good",
                "seconds not good",
            ],
            &rows,
        );
    }
    if s.kernel_flags_ticks.is_empty() {
        para(out, "Kernel: no clamps or faults.");
    } else {
        let rows: Vec<Vec<Cell>> = s
            .kernel_flags_ticks
            .iter()
            .map(|(k, v)| vec![t(k.clone()), n(v)])
            .collect();
        table(out, "data", &["kernel flag", "ticks"], &rows);
    }
    let st = &s.status_ticks;
    let mut rows = vec![
        vec![t("good"), n(st.good)],
        vec![t("maintenance required"), n(st.maintenance_required)],
        vec![t("out of specification"), n(st.out_of_specification)],
        vec![t("function check"), n(st.function_check)],
        vec![t("failure"), n(st.failure)],
    ];
    for (k, v) in &st.reasons {
        rows.push(vec![t(format!("reason: {k}")), n(v)]);
    }
    table(out, "data", &["status (NAMUR NE107)", "ticks"], &rows);
}

/// The estimator's counters, re-seeds and the meters' verdicts.
pub(super) fn estimator(out: &mut String, r: &Report<'_>) {
    let s = r.summary;
    match &s.estimator {
        None => para(out, "Open loop: no estimator configured."),
        Some(e) => {
            table(
                out,
                "data",
                &["measurement", "fused", "rejected by the gate", "other"],
                &[
                    vec![
                        t("level"),
                        n(e.level_accepted),
                        n(e.level_rejected),
                        t(format!("{} re-seeds from the level", e.reseeds)),
                    ],
                    vec![
                        t("lab"),
                        n(e.lab.fused),
                        n(e.lab.rejected_by_gate),
                        t(format!(
                            "{} not drawn, {} without pending sample, {} expired, {} pending at the end",
                            e.lab.not_drawn,
                            e.lab.without_pending_sample,
                            e.lab_expired,
                            e.lab.pending_at_end
                        )),
                    ],
                    vec![
                        t("analysers"),
                        n(e.analysers.fused),
                        n(e.analysers.rejected_by_gate),
                        t(format!("{} skipped", e.analysers.skipped)),
                    ],
                ],
            );
            if !e.reseed_times.is_empty() {
                let times: Vec<String> =
                    e.reseed_times.iter().map(|x| r.clock.reformat(x)).collect();
                para(
                    out,
                    &format!("Holdup re-seeded from the level at: {}", times.join(", ")),
                );
            }
        }
    }
    if !s.meters.is_empty() {
        let rows: Vec<Vec<Cell>> = s
            .meters
            .iter()
            .map(|m| {
                vec![
                    t(m.meter.clone()),
                    n(format!("{:+.2}", 100.0 * m.bias)),
                    n(format!("{:.2}", 100.0 * m.sigma)),
                    t(m.verdict()),
                ]
            })
            .collect();
        table(
            out,
            "data",
            &["meter", "bias [%]", "1σ [%]", "verdict"],
            &rows,
        );
    }
}

/// The balance closure test and its alarms.
pub(super) fn closure(out: &mut String, r: &Report<'_>) {
    match &r.summary.closure {
        None => para(out, "No closure test (it needs a level and an estimator)."),
        Some(c) => {
            para(
                out,
                &format!(
                    "{} windows checked ({} lost to missing data), residual 1σ {:.4} m³. {}",
                    c.windows_evaluated,
                    c.windows_lost,
                    c.residual_sigma_m3,
                    if c.alarms.is_empty() {
                        "No alarm: the balance closes."
                    } else {
                        "Alarms are listed under faults and alarms."
                    }
                ),
            );
        }
    }
}

fn agreement_rows(rows: &[SpeciesAgreement], r: &Report<'_>) -> Vec<Vec<Cell>> {
    let mut out = Vec::new();
    for a in rows {
        let mut list = vec![("open loop", &a.open_loop)];
        if let Some(c) = &a.corrected {
            list.push(("corrected", c));
        }
        for (what, g) in list {
            out.push(vec![
                t(a.species.clone()),
                t(what),
                n(g.n),
                n(format!("{:.4}", g.bias_mol_m3)),
                n(format!("{:.4}", g.rmse_mol_m3)),
                n(format!("{:.4}", g.max_abs_error_mol_m3)),
                t(g.max_error_at
                    .as_deref()
                    .map(|x| r.clock.reformat(x))
                    .unwrap_or_default()),
            ]);
        }
    }
    out
}

const AGREEMENT_HEAD: [&str; 7] = [
    "species",
    "estimate",
    "n",
    "bias [mol/m³]",
    "RMSE [mol/m³]",
    "max |error| [mol/m³]",
    "largest at",
];

/// Estimate against the lab (and the analysers), and the lab results.
pub(super) fn comparisons(out: &mut String, r: &Report<'_>) {
    let s = r.summary;
    if s.lab.is_none() {
        para(
            out,
            "No lab file was given: the estimate is not compared with lab results. Validate it against lab results before relying on it.",
        );
    } else {
        para(out, "At sample times (estimate − lab):");
        table(
            out,
            "data",
            &AGREEMENT_HEAD,
            &agreement_rows(&s.lab_comparison, r),
        );
        if s.lab_outside_replay > 0 {
            para(
                out,
                &format!(
                    "{} lab results fall outside the replayed span (not compared).",
                    s.lab_outside_replay
                ),
            );
        }
        let rows: Vec<Vec<Cell>> = r
            .labs
            .iter()
            .map(|l| {
                vec![
                    t(r.clock.iso(l.sample_time)),
                    t(l.result_time.map(|x| r.clock.iso(x)).unwrap_or_default()),
                    t(r.plant
                        .species
                        .get(l.species)
                        .map(|x| x.name.clone())
                        .unwrap_or_default()),
                    n(format!("{}", l.value)),
                    n(l.line),
                ]
            })
            .collect();
        out.push_str("<details><summary>");
        push_escaped(out, &format!("The {} lab results read", r.labs.len()));
        out.push_str("</summary>\n");
        table(
            out,
            "data",
            &["sampled", "result", "species", "value [mol/m³]", "line"],
            &rows,
        );
        out.push_str("</details>\n");
    }
    if !s.analyser_comparison.is_empty() {
        para(
            out,
            &format!(
                "Analysers at new analyses (estimate − analyser; corrected: before fusing the reading); {} repeated values within a cycle not used:",
                s.analyser_repeats_within_cycle
            ),
        );
        table(
            out,
            "data",
            &AGREEMENT_HEAD,
            &agreement_rows(&s.analyser_comparison, r),
        );
    }
}

/// A colour swatch of a shaded kind.
pub(super) fn swatch(shade: Shade) -> String {
    format!(
        "<span class=\"swatch\" style=\"background:{}\"></span>{}",
        shade.fill(),
        escape(shade.label())
    )
}

/// Every fault and alarm with its window, and the counts per kind.
pub(super) fn events(out: &mut String, r: &Report<'_>) {
    let ev = r.events;
    if ev.list.is_empty() {
        para(out, "None: no gap, flat line or missing values in the log, every input passed as good, no closure alarm.");
        return;
    }
    let subject = |s: &Subject| match s {
        Subject::Tag(t) => t.clone(),
        Subject::Balance => "balance (whole vessel)".to_string(),
    };
    let rows: Vec<Vec<Cell>> = ev
        .tallies
        .iter()
        .map(|x| {
            vec![
                Cell::H(swatch(x.shade)),
                t(subject(&x.subject)),
                n(x.total),
                n(x.kept),
            ]
        })
        .collect();
    table(
        out,
        "data",
        &["kind", "about", "windows", "listed below"],
        &rows,
    );
    let rows: Vec<Vec<Cell>> = ev
        .list
        .iter()
        .map(|e| {
            let end = e.end.unwrap_or(r.end);
            vec![
                Cell::H(swatch(e.shade)),
                t(subject(&e.subject)),
                t(r.clock.iso(e.start)),
                t(match e.end {
                    Some(x) => r.clock.iso(x),
                    None => "still on at the end of the log".into(),
                }),
                n(duration_words(u64::try_from(end - e.start).unwrap_or(0))),
            ]
        })
        .collect();
    table(
        out,
        "data events",
        &["kind", "about", "from", "to", "length"],
        &rows,
    );
}

/// The state at the end of the log.
pub(super) fn final_state(out: &mut String, r: &Report<'_>) {
    let f = &r.summary.final_state;
    let pm = |v: f64, s: Option<f64>| match s {
        Some(s) => format!("{v:.4} ± {s:.4}"),
        None => format!("{v:.4}"),
    };
    let mut rows = vec![
        vec![t("holdup [m³]"), n(pm(f.holdup_m3, f.holdup_sigma_m3))],
        vec![t("level [m]"), n(format!("{:.4}", f.level_m))],
    ];
    for (k, v) in &f.concentrations_mol_m3 {
        let s = f
            .concentration_sigmas_mol_m3
            .as_ref()
            .and_then(|m| m.get(k).copied());
        rows.push(vec![t(format!("{k} [mol/m³]")), n(pm(*v, s))]);
    }
    table(out, "data", &["quantity", "value (± 1σ)"], &rows);
}
