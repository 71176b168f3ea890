//! `[plant]`: the plant's name, the tick and how the kernel runs.

use holdup_kernel::Method;

use super::quantity::{short, Conv, Qty};
use super::table::{Ctx, Tbl, R};
use crate::plant::ScalarKind;
use crate::units::Kind;

const PLANT_KEYS: &[&str] = &["name", "tick", "scalar", "method", "min_holdup"];

/// Shortest and longest tick, ms.
const TICK_RANGE_MS: (u64, u64) = (1, 3_600_000);
/// Default `min_holdup`: this fraction of the vessel capacity.
const DEFAULT_MIN_HOLDUP_OF_CAPACITY: f64 = 0.01;

/// `[plant]` as read; `min_holdup` is checked against the vessel later.
pub(super) struct Settings<'a> {
    pub(super) name: &'a str,
    pub(super) tick_ms: u32,
    pub(super) scalar: ScalarKind,
    pub(super) method: Method,
    min_holdup: Option<Qty>,
}

/// `[plant]`.
pub(super) fn read<'a>(p: &Tbl<'a>) -> R<Settings<'a>> {
    p.check_keys(PLANT_KEYS)?;
    let (name, _) = p.name_string("name", "a free-text name for reports")?;
    let (tick, tick_at) = p
        .duration("tick")?
        .ok_or_else(|| p.missing("tick", "e.g. tick = \"1 s\" (1 ms .. 1 h)"))?;
    if tick < TICK_RANGE_MS.0 || tick > TICK_RANGE_MS.1 {
        return Err(p.err(
            tick_at,
            "tick",
            format!("must be between 1 ms and 1 h, got {tick} ms"),
        ));
    }
    // Within 1 ..= 3 600 000 it fits in u32.
    let tick_ms = u32::try_from(tick).map_err(|_| p.err(tick_at, "tick", "out of range"))?;
    let scalar = p
        .choice(
            "scalar",
            &[("f32", ScalarKind::F32), ("f64", ScalarKind::F64)],
        )?
        .map_or(ScalarKind::F32, |(s, _)| s);
    let method = p
        .choice(
            "method",
            &[
                ("auto", Method::Auto),
                ("exact", Method::Exact),
                ("mprk22", Method::Mprk22),
                ("rk4-reference", Method::ReferenceRk4),
                ("euler-reference", Method::ReferenceEuler),
            ],
        )?
        .map_or(Method::Auto, |(m, _)| m);
    let min_holdup = p.quantity("min_holdup", Conv::Kind(Kind::Volume))?;
    Ok(Settings {
        name,
        tick_ms,
        scalar,
        method,
        min_holdup,
    })
}

impl Settings<'_> {
    /// `min_holdup` in m³, at least 0 and below the vessel's `capacity`
    /// (m³); the default is 1 % of it.
    pub(super) fn min_holdup(&self, ctx: &Ctx<'_>, capacity: f64) -> R<f64> {
        match &self.min_holdup {
            None => Ok(DEFAULT_MIN_HOLDUP_OF_CAPACITY * capacity),
            Some(q) if q.si >= 0.0 && q.si < capacity => Ok(q.si),
            Some(q) => Err(q.fail(
                ctx,
                &format!(
                    "must be at least 0 and below the vessel capacity {} m3",
                    short(capacity)
                ),
            )),
        }
    }
}
