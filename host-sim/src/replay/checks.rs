//! Checks of the plant against its log: mistakes that a replay would
//! otherwise run through and report as "good".
//!
//! Each check is a warning in the summary (text and JSON), an error where
//! nothing useful can follow (exit 2), or a verdict that the replay's
//! results do not stand for the span (exit 3, outputs written):
//!
//! | check | outcome |
//! |---|---|
//! | the first level reading against `[initial]`: volumes more than [`VOLUME_WARN`] apart | warning |
//! | the same, a factor [`VOLUME_ERROR`] or more apart (a vessel or unit typed wrong) | error |
//! | level readings outside the vessel (below 0 or above its height, 1 % slack) | warning |
//! | most level readings rejected by the estimator's gate | warning |
//! | the tick more than [`COARSE_TICK`] times the log's median interval | warning |
//! | a linear tag that looks exception-stored ([`crate::log::storage`]) | warning |
//! | lab results reported after the log ends | warning |
//! | a tag the plant needs with no numeric value in the whole log | error (found before the replay by the log's order pass, `LogError::NoNumericValue`; here for a log read from a stream) |
//! | usable data (fresh values) for less than [`MIN_USABLE_SHARE`] of the ticks, or more than half the rows rejected | verdict |

use holdup_kernel::Geometry;

use super::ReplayError;
use crate::lab::LabResult;
use crate::log::{LogStats, TagStats};
use crate::plant::{Interpolation, Plant};
use crate::text::iso;

/// Relative difference of initial and first measured volume that is warned
/// about.
pub const VOLUME_WARN: f64 = 0.10;
/// Ratio of initial and first measured volume that is an error.
pub const VOLUME_ERROR: f64 = 10.0;
/// Tick / median log interval above which the tick is warned about.
pub const COARSE_TICK: f64 = 5.0;
/// Least share of ticks at which every tag must have a fresh value
/// (stored, interpolated or held within its maximum age).
pub const MIN_USABLE_SHARE: f64 = 0.5;
/// Slack on the vessel's height for level readings, share of the height.
const LEVEL_SLACK: f64 = 0.01;

/// What the checks found.
#[derive(Debug, Default)]
pub struct Checks {
    /// Warnings, one line each.
    pub warnings: Vec<String>,
    first_level_seen: bool,
    level_outside: u64,
    level_readings: u64,
    first_outside: Option<(i64, f64)>,
}

impl Checks {
    /// A measured level `z` (m) at `t`: the first one is checked against
    /// the initial state; all are checked against the vessel.
    pub fn level(
        &mut self,
        plant: &Plant,
        geometry: &Geometry<f64>,
        t: i64,
        z: f64,
    ) -> Result<(), ReplayError> {
        if !z.is_finite() {
            return Ok(());
        }
        let top = geometry.max_level();
        self.level_readings += 1;
        if z < -LEVEL_SLACK * top || z > (1.0 + LEVEL_SLACK) * top {
            self.level_outside += 1;
            self.first_outside.get_or_insert((t, z));
        }
        if self.first_level_seen {
            return Ok(());
        }
        self.first_level_seen = true;
        let v_level = geometry.volume_at(z.clamp(0.0, top));
        let v_init = plant.initial.volume;
        let big = v_level.max(v_init);
        if big <= 0.0 || (v_level - v_init).abs() <= VOLUME_WARN * big {
            return Ok(());
        }
        let tag = plant
            .level
            .as_ref()
            .and_then(|l| l.tag())
            .unwrap_or("level");
        let what = format!(
            "[initial] gives {} m3, but the first level reading ({tag} = {} m at {}) means {} m3 \
             in this vessel",
            short(v_init),
            short(z),
            iso(t),
            short(v_level)
        );
        let ratio = if v_level.min(v_init) > 0.0 {
            big / v_level.min(v_init)
        } else {
            f64::INFINITY
        };
        if ratio >= VOLUME_ERROR && v_level > 0.0 && v_init > 0.0 {
            return Err(ReplayError::Check {
                path: plant.path.clone(),
                message: format!(
                    "{what}: a factor {} apart, so the vessel's size, the level's unit or the \
                     initial volume is wrong; check [vessel] and [level], or start from the \
                     measured level with [initial] level = {{ value = {}, unit = \"m\" }}",
                    short(ratio),
                    short(z)
                ),
            });
        }
        self.warnings.push(format!(
            "{what}; the replay starts from [initial] (the estimator, if any, corrects it from \
             the level); if the log starts elsewhere, set [initial] level = {{ value = {}, \
             unit = \"m\" }}",
            short(z)
        ));
        Ok(())
    }

    /// The checks that need the whole log: warnings added, an error for a
    /// tag without any numeric value, and the verdict (`Some(why)` when the
    /// results do not stand for the span).
    pub fn finish(
        &mut self,
        plant: &Plant,
        geometry: &Geometry<f64>,
        stats: &LogStats,
        labs: &[LabResult],
        t_end: i64,
        level_gate: Option<(u64, u64)>,
    ) -> Result<Option<String>, ReplayError> {
        for t in &stats.tags {
            if t.points == 0 {
                return Err(ReplayError::Check {
                    path: plant.path.clone(),
                    message: no_value(&stats.path, t),
                });
            }
        }
        if self.level_outside > 0 {
            let tag = plant
                .level
                .as_ref()
                .and_then(|l| l.tag())
                .unwrap_or("level");
            let (t, z) = self.first_outside.unwrap_or((0, f64::NAN));
            self.warnings.push(format!(
                "{tag}: {} of {} level readings outside the vessel (0 to {} m), the first {} m \
                 at {}; check [vessel] height, the level's unit or its span",
                self.level_outside,
                self.level_readings,
                short(geometry.max_level()),
                short(z),
                iso(t)
            ));
        }
        if let Some((accepted, rejected)) = level_gate {
            if rejected > accepted {
                self.warnings.push(format!(
                    "the estimator rejected {rejected} level readings and fused {accepted}: \
                     the model and the level disagree for most of the log; check the vessel's \
                     shape and size, the level's unit and span, and the meters"
                ));
            }
        }
        self.coarse_tick(plant, stats);
        self.storage(plant, stats);
        let pending = labs
            .iter()
            .filter(|l| l.sample_time <= t_end && l.result_time.is_some_and(|r| r > t_end))
            .count();
        if pending > 0 {
            self.warnings.push(format!(
                "{pending} lab {} drawn before the log ends {} reported after it (pending at \
                 the end): compared with the estimate at the draw, never fused",
                if pending == 1 { "result" } else { "results" },
                if pending == 1 { "was" } else { "were" },
            ));
        }
        Ok(verdict(stats))
    }

    fn coarse_tick(&mut self, plant: &Plant, stats: &LogStats) {
        let finest = stats
            .tags
            .iter()
            .filter(|t| t.storage.intervals >= 10 && !t.storage.looks_exception_stored)
            .min_by_key(|t| t.storage.median_interval_ms);
        let Some(t) = finest else {
            return;
        };
        let median = t.storage.median_interval_ms.max(1) as f64;
        let ratio = plant.tick_ms as f64 / median;
        if ratio > COARSE_TICK {
            self.warnings.push(format!(
                "the tick ({} ms) is {}× the log's median interval (about {} ms, tag {}): each \
                 tick uses one sample and the points between are not used; a tick near the \
                 log's interval follows the plant more closely ([plant] tick)",
                plant.tick_ms,
                ratio.round(),
                t.storage.median_interval_ms,
                t.tag
            ));
        }
    }

    fn storage(&mut self, plant: &Plant, stats: &LogStats) {
        for t in &stats.tags {
            let linear = plant
                .tags
                .iter()
                .find(|o| o.tag == t.tag)
                .is_some_and(|o| o.interpolation == Interpolation::Linear);
            let s = &t.storage;
            if linear && s.looks_exception_stored {
                self.warnings.push(format!(
                    "{}: looks exception-stored ({} of {} long stretches between its points end \
                     in a jump larger than its typical change) but is read with linear \
                     interpolation, which turns each step into a ramp across the stretch before \
                     it; if the historian stored it only on change, set [tags.\"{}\"] \
                     interpolation = \"hold\"",
                    t.tag, s.jumps_after_long_stretch, s.long_stretches, t.tag
                ));
            }
        }
    }
}

/// Why a tag has no stored point.
fn no_value(path: &str, t: &TagStats) -> String {
    match t.missing.first.first() {
        Some(f) => format!(
            "{path}: tag {} has no numeric value in the whole log ({} cells, the first at line \
             {}: {}); the plant needs it: check the column, the decimal separator ([log] \
             decimal) and the export",
            t.tag, t.missing.total, f.line, f.detail
        ),
        None => format!(
            "{path}: tag {} has no point in the whole log (no row of it was read); the plant \
             needs it: check the tag's name against the log",
            t.tag
        ),
    }
}

/// `Some(why)` when the usable data do not cover enough of the span.
fn verdict(stats: &LogStats) -> Option<String> {
    if stats.rows > 0 && stats.rows_rejected() * 2 > stats.rows {
        return Some(format!(
            "{} of the log's {} rows were rejected (more than half): the results do not stand \
             for the log",
            stats.rows_rejected(),
            stats.rows
        ));
    }
    let worst = stats
        .tags
        .iter()
        .map(|t| {
            let k = &t.ticks;
            let all = k.exact + k.interpolated + k.held + k.stale + k.missing;
            let usable = k.exact + k.interpolated + k.held;
            (
                t,
                if all == 0 {
                    1.0
                } else {
                    usable as f64 / all as f64
                },
            )
        })
        .min_by(|a, b| a.1.total_cmp(&b.1))?;
    let (t, share) = worst;
    (share < MIN_USABLE_SHARE).then(|| {
        format!(
            "tag {} has a fresh value at only {:.0} % of the ticks (at least {:.0} % needed): \
             the rest of the replay runs on held or missing inputs and its results do not \
             stand for the span",
            t.tag,
            share * 100.0,
            MIN_USABLE_SHARE * 100.0
        )
    })
}

/// `x` to 4 significant digits for messages.
fn short(x: f64) -> String {
    let s = format!("{x:.4e}");
    s.parse::<f64>().map_or(s, |v| v.to_string())
}
