//! `[vessel]`: the shape and its size, checked by the kernel's own
//! [`Geometry::new`].

use holdup_kernel::geometry::STRAPPING_CAPACITY;
use holdup_kernel::{Bottom, Geometry, Shape};
use toml::de::DeValue;

use super::quantity::{short, Conv, Qty};
use super::table::{list, number_of, type_name, Tbl, R};
use super::ConfigError;
use crate::units::{self, Kind, ToSi};

const VESSEL_KEYS: &[&str] = &[
    "shape",
    "diameter",
    "height",
    "length",
    "width",
    "bottom",
    "bottom_depth",
    "strapping",
];
const STRAPPING_KEYS: &[&str] = &["level_unit", "volume_unit", "points"];

/// The shapes `shape` names.
#[derive(Clone, Copy, PartialEq)]
enum ShapeKind {
    Vertical,
    Horizontal,
    Rect,
    Sphere,
    Strap,
}

const SHAPES: [(&str, ShapeKind); 5] = [
    ("vertical-cylinder", ShapeKind::Vertical),
    ("horizontal-cylinder", ShapeKind::Horizontal),
    ("rectangular", ShapeKind::Rect),
    ("sphere", ShapeKind::Sphere),
    ("strapping", ShapeKind::Strap),
];

impl ShapeKind {
    fn name(self) -> &'static str {
        SHAPES
            .iter()
            .find(|(_, s)| *s == self)
            .map_or("", |(n, _)| *n)
    }

    /// The keys of `[vessel]` this shape uses.
    fn keys(self) -> &'static [&'static str] {
        match self {
            ShapeKind::Vertical => &["shape", "diameter", "height", "bottom", "bottom_depth"],
            ShapeKind::Horizontal => &["shape", "diameter", "length"],
            ShapeKind::Rect => &["shape", "length", "width", "height"],
            ShapeKind::Sphere => &["shape", "diameter"],
            ShapeKind::Strap => &["shape", "strapping"],
        }
    }
}

/// Where in the file the kernel's geometry errors point.
struct Places {
    /// The dish or cone depth as written.
    depth: Option<Qty>,
    /// Offset of the strapping points (of `[vessel]` without them).
    points_at: usize,
    /// Offset of each strapping point.
    point_spans: Vec<usize>,
}

/// `[vessel]` → shape (SI) and its validated geometry.
pub(super) fn read(v: &Tbl<'_>) -> R<(Shape<f64>, Geometry<f64>)> {
    v.check_keys(VESSEL_KEYS)?;
    let (kind, _) = v.choice("shape", &SHAPES)?.ok_or_else(|| {
        v.missing(
            "shape",
            "valid: \"vertical-cylinder\", \"horizontal-cylinder\", \"rectangular\", \"sphere\", \"strapping\"",
        )
    })?;
    let used = kind.keys();
    v.check_unused(used, &format!("shape {}", kind.name()))?;
    let hint = format!(
        "shape {} needs {}",
        kind.name(),
        list(used.get(1..).unwrap_or(&[]))
    );
    let mut places = Places {
        depth: None,
        points_at: v.at,
        point_spans: Vec::new(),
    };
    let shape = match kind {
        ShapeKind::Vertical => read_vertical_cylinder(v, &hint, &mut places)?,
        ShapeKind::Horizontal => Shape::HorizontalCylinder {
            diameter: dimension(v, "diameter", &hint)?,
            length: dimension(v, "length", &hint)?,
        },
        ShapeKind::Rect => Shape::Rectangular {
            length: dimension(v, "length", &hint)?,
            width: dimension(v, "width", &hint)?,
            height: dimension(v, "height", &hint)?,
        },
        ShapeKind::Sphere => Shape::Sphere {
            diameter: dimension(v, "diameter", &hint)?,
        },
        ShapeKind::Strap => read_strapping(v, &mut places)?,
    };
    let geometry =
        Geometry::new(shape.clone()).map_err(|e| geometry_error(v, &shape, &places, e))?;
    Ok((shape, geometry))
}

/// A required positive length of `[vessel]`, m.
fn dimension(v: &Tbl<'_>, key: &str, hint: &str) -> R<f64> {
    Ok(v.req_quantity(key, Conv::Kind(Kind::Length), hint)?
        .positive(v.ctx)?
        .si)
}

/// A vertical cylinder with its bottom (`bottom`, `bottom_depth`).
fn read_vertical_cylinder(v: &Tbl<'_>, hint: &str, places: &mut Places) -> R<Shape<f64>> {
    let ctx = v.ctx;
    let diameter = dimension(v, "diameter", hint)?;
    let height = dimension(v, "height", hint)?;
    let (bottom, at) = v
        .choice("bottom", &[("flat", 0u8), ("cone", 1u8), ("dished", 2u8)])?
        .unwrap_or((0, v.at));
    let bottom = match bottom {
        0 => {
            if v.get("bottom_depth").is_some() {
                return Err(v.err(
                    v.key_at("bottom_depth"),
                    "bottom_depth",
                    "not used by bottom \"flat\"; bottom_depth is for \"cone\" and \"dished\"",
                ));
            }
            Bottom::Flat
        }
        b => {
            let q = v
                .req_quantity(
                    "bottom_depth",
                    Conv::Kind(Kind::Length),
                    "a cone or dished bottom needs its depth",
                )
                .map_err(|mut e| {
                    e.line = Some(ctx.line(at));
                    e
                })?
                .positive(ctx)?;
            let depth = q.si;
            places.depth = Some(q);
            if b == 1 {
                Bottom::Cone { height: depth }
            } else {
                Bottom::Dished { depth }
            }
        }
    };
    Ok(Shape::VerticalCylinder {
        diameter,
        height,
        bottom,
    })
}

/// A strapping table (`strapping = { level_unit, volume_unit, points }`).
fn read_strapping(v: &Tbl<'_>, places: &mut Places) -> R<Shape<f64>> {
    let s = v
        .opt_child("strapping", "a table { level_unit, volume_unit, points }")?
        .ok_or_else(|| {
            v.missing(
                "strapping",
                "{ level_unit = \"m\", volume_unit = \"m3\", points = [[0.0, 0.0], ...] }",
            )
        })?;
    s.check_keys(STRAPPING_KEYS)?;
    let unit = |key: &str, kind: Kind| -> R<ToSi> {
        let (u, at) = s
            .string(key)?
            .ok_or_else(|| s.missing(key, &format!("valid: {}", list(units::valid_units(kind)))))?;
        units::to_si(kind, u).map_err(|e| s.err(at, key, e.to_string()))
    };
    let level = unit("level_unit", Kind::Length)?;
    let volume = unit("volume_unit", Kind::Volume)?;
    let pts = s
        .get("points")
        .ok_or_else(|| s.missing("points", "[[level, volume], ...], from level 0 upwards"))?;
    places.points_at = pts.span().start;
    let DeValue::Array(items) = pts.get_ref() else {
        return Err(s.err(
            places.points_at,
            "points",
            format!(
                "expected an array of [level, volume] pairs, got {}",
                type_name(pts.get_ref())
            ),
        ));
    };
    if items.len() > STRAPPING_CAPACITY {
        return Err(s.err(
            places.points_at,
            "points",
            format!(
                "too many points: {}, at most {STRAPPING_CAPACITY} (kernel strapping capacity)",
                items.len()
            ),
        ));
    }
    let mut table: heapless::Vec<(f64, f64), STRAPPING_CAPACITY> = heapless::Vec::new();
    for (i, item) in items.iter().enumerate() {
        let key = format!("points[{i}]");
        let bad = |m: String| s.err(item.span().start, &key, m);
        let pair = match item.get_ref() {
            DeValue::Array(p) if p.len() == 2 => p,
            other => {
                return Err(bad(format!(
                    "expected a [level, volume] pair, got {}",
                    type_name(other)
                )))
            }
        };
        let mut xy = [0.0; 2];
        for (slot, x) in xy.iter_mut().zip(pair.iter()) {
            *slot = number_of(x.get_ref()).map_err(&bad)?;
        }
        let point = (level.apply(xy[0]), volume.apply(xy[1]));
        if !(point.0.is_finite() && point.1.is_finite()) {
            return Err(bad("is out of range in SI".to_string()));
        }
        table
            .push(point)
            .map_err(|_| bad(format!("at most {STRAPPING_CAPACITY} points")))?;
        places.point_spans.push(item.span().start);
    }
    Ok(Shape::Strapping(table))
}

/// What the kernel's geometry check refuses, at the key it concerns.
fn geometry_error(
    v: &Tbl<'_>,
    shape: &Shape<f64>,
    places: &Places,
    e: holdup_kernel::Error,
) -> ConfigError {
    use holdup_kernel::Error as K;
    let ctx = v.ctx;
    let message = e.message();
    match e {
        K::GeometryDishTooDeep => match &places.depth {
            Some(q) => ctx.error(
                Some(q.at),
                q.key.clone(),
                format!(
                    "{message}: depth {} > radius {} m",
                    q.shown(),
                    match shape {
                        Shape::VerticalCylinder { diameter, .. } => short(diameter / 2.0),
                        _ => String::new(),
                    }
                ),
            ),
            None => v.err_here(message),
        },
        K::StrappingNotMonotone(i) | K::StrappingNonFinite(i) => {
            let i = usize::from(i);
            let at = places
                .point_spans
                .get(i)
                .copied()
                .unwrap_or(places.points_at);
            ctx.error(Some(at), format!("[vessel] strapping.points[{i}]"), message)
        }
        K::StrappingTooShort | K::StrappingFull => {
            ctx.error(Some(places.points_at), "[vessel] strapping.points", message)
        }
        _ => v.err_here(message),
    }
}
