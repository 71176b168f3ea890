//! `[plc]` (the PLC a live run polls) and the `plc` table of each
//! `[tags."…"]` (where that PLC holds the tag and how to read it).
//!
//! Register addresses are the protocol's 0-based addresses, as on the wire:
//! the register a PLC's documentation calls 40001 (holding) or 30001
//! (input) is address 0.

use toml::de::DeValue;

use super::table::{list, section, Tbl, R};
use crate::plant::{PlcPoint, PlcSettings, PlcTable, PlcType};
use holdup_kernel::modbus::WordOrder;

const PLC_KEYS: &[&str] = &[
    "address",
    "unit",
    "word_order",
    "timeout",
    "reconnect",
    "reconnect_max",
    "write_back",
];
const POINT_KEYS: &[&str] = &[
    "unit",
    "table",
    "address",
    "type",
    "word_order",
    "scale",
    "offset",
];

/// Default request timeout, ms (shortened to half the tick for a faster tick).
const DEFAULT_TIMEOUT_MS: u64 = 500;
/// Default first reconnection wait, ms.
const DEFAULT_RECONNECT_MS: u64 = 1_000;
/// Default longest reconnection wait, ms.
const DEFAULT_RECONNECT_MAX_MS: u64 = 30_000;

const WORD_ORDERS: &[(&str, WordOrder)] = &[
    ("high-first", WordOrder::HighFirst),
    ("low-first", WordOrder::LowFirst),
];

/// An optional whole number in `lo..=hi`, with its offset.
fn integer(t: &Tbl<'_>, key: &str, lo: u32, hi: u32) -> R<Option<(u32, usize)>> {
    let Some((x, at)) = t.number(key)? else {
        return Ok(None);
    };
    if x.fract() != 0.0 || x < f64::from(lo) || x > f64::from(hi) {
        return Err(t.err(
            at,
            key,
            format!("must be a whole number from {lo} to {hi}, got {x}"),
        ));
    }
    Ok(Some((x as u32, at)))
}

/// An optional positive duration, ms.
fn positive_duration(t: &Tbl<'_>, key: &str, default: u64) -> R<(u64, usize)> {
    match t.duration(key)? {
        None => Ok((default, t.key_at(key))),
        Some((0, at)) => Err(t.err(at, key, "must be longer than 0 ms")),
        Some(d) => Ok(d),
    }
}

/// `host:port`, checked for form only (it is resolved when connecting).
fn check_address(t: &Tbl<'_>, s: &str, at: usize) -> R<()> {
    let valid = s
        .rsplit_once(':')
        .is_some_and(|(host, port)| !host.trim().is_empty() && port.parse::<u16>().is_ok());
    if valid {
        Ok(())
    } else {
        Err(t.err(
            at,
            "address",
            format!("expected \"host:port\" (for example \"192.168.0.10:502\"), got \"{s}\""),
        ))
    }
}

/// `[plc]` and every tag's `plc` table; `None` without `[plc]`. `used` are
/// the plant's tags in first-use order; `tick_ms` the plant's tick (a
/// request must time out within it).
pub(super) fn read(root: &Tbl<'_>, used: &[String], tick_ms: u64) -> R<Option<PlcSettings>> {
    let Some(p) = section(root, "plc")? else {
        refuse_points_without_plc(root)?;
        return Ok(None);
    };
    p.check_keys(PLC_KEYS)?;
    let (address, at) = p.name_string("address", "\"host:port\" of the PLC's Modbus TCP server")?;
    check_address(&p, address, at)?;
    let unit_id = integer(&p, "unit", 1, 255)?.map_or(1, |(u, _)| u as u8);
    let word_order = p
        .choice("word_order", WORD_ORDERS)?
        .map_or(WordOrder::HighFirst, |(w, _)| w);
    let default_timeout = DEFAULT_TIMEOUT_MS.min(tick_ms / 2).max(1);
    let (timeout_ms, at) = positive_duration(&p, "timeout", default_timeout)?;
    if timeout_ms >= tick_ms {
        return Err(p.err(
            at,
            "timeout",
            format!("must be shorter than the tick ({tick_ms} ms), got {timeout_ms} ms"),
        ));
    }
    let (reconnect_ms, _) = positive_duration(&p, "reconnect", DEFAULT_RECONNECT_MS)?;
    let (reconnect_max_ms, at) = positive_duration(
        &p,
        "reconnect_max",
        DEFAULT_RECONNECT_MAX_MS.max(reconnect_ms),
    )?;
    if reconnect_max_ms < reconnect_ms {
        return Err(p.err(
            at,
            "reconnect_max",
            format!(
                "must not be shorter than reconnect ({reconnect_ms} ms), got {reconnect_max_ms} ms"
            ),
        ));
    }
    let write_back = integer(&p, "write_back", 0, 65_535)?.map(|(a, _)| a as u16);
    let mut settings = PlcSettings {
        address: address.to_string(),
        unit_id,
        word_order,
        timeout_ms,
        reconnect_ms,
        reconnect_max_ms,
        write_back,
        points: Vec::new(),
    };
    settings.points = read_points(root, &p, used, &settings)?;
    Ok(Some(settings))
}

/// The `[tags."…"]` tables in file order, as (tag, table).
fn tag_tables<'a>(root: &Tbl<'a>) -> R<Vec<(String, Tbl<'a>)>> {
    let Some(ts) = section(root, "tags")? else {
        return Ok(Vec::new());
    };
    let mut out = Vec::new();
    for (k, value) in ts.entries() {
        // The shape of each entry was checked by the `[tags."…"]` reader.
        if let DeValue::Table(table) = value.get_ref() {
            let tag: &str = k.get_ref();
            out.push((
                tag.to_string(),
                Tbl {
                    ctx: root.ctx,
                    table,
                    at: value.span().start,
                    section: format!("[tags.\"{tag}\"]"),
                    prefix: String::new(),
                },
            ));
        }
    }
    Ok(out)
}

fn refuse_points_without_plc(root: &Tbl<'_>) -> R<()> {
    for (_, t) in tag_tables(root)? {
        if t.get("plc").is_some() {
            return Err(t.err(
                t.key_at("plc"),
                "plc",
                "needs a [plc] section (the PLC's address and defaults)",
            ));
        }
    }
    Ok(())
}

/// Every used tag's point: each must have one.
fn read_points(
    root: &Tbl<'_>,
    p: &Tbl<'_>,
    used: &[String],
    settings: &PlcSettings,
) -> R<Vec<(String, PlcPoint)>> {
    let tables = tag_tables(root)?;
    let mut points = Vec::new();
    for tag in used {
        let found = tables.iter().find(|(t, _)| t == tag);
        let Some((_, t)) = found.filter(|(_, t)| t.get("plc").is_some()) else {
            return Err(p.err_here(format!(
                "tag {tag} has no [tags.\"{tag}\"] plc table: with [plc], every tag the \
                 plant reads needs one (for example plc = {{ address = 0, type = \"f32\" }})"
            )));
        };
        let v = t.get("plc").ok_or_else(|| t.missing("plc", ""))?;
        let c = t.child("plc", v, "a table { address, type, … }")?;
        points.push((tag.clone(), read_point(&c, settings)?));
    }
    Ok(points)
}

/// One `plc = { … }` table.
fn read_point(c: &Tbl<'_>, settings: &PlcSettings) -> R<PlcPoint> {
    c.check_keys(POINT_KEYS)?;
    let unit_id = integer(c, "unit", 1, 255)?.map_or(settings.unit_id, |(u, _)| u as u8);
    let table = c
        .choice(
            "table",
            &[("holding", PlcTable::Holding), ("input", PlcTable::Input)],
        )?
        .map_or(PlcTable::Holding, |(t, _)| t);
    let types = [
        ("u16", PlcType::U16),
        ("i16", PlcType::I16),
        ("u32", PlcType::U32),
        ("i32", PlcType::I32),
        ("f32", PlcType::F32),
    ];
    let names: Vec<String> = types.iter().map(|(n, _)| format!("\"{n}\"")).collect();
    let kind = c
        .choice("type", &types)?
        .map(|(k, _)| k)
        .ok_or_else(|| c.missing("type", &format!("one of {}", list(&names))))?;
    let (address, at) = integer(c, "address", 0, 65_535)?.ok_or_else(|| {
        c.missing(
            "address",
            "the first register, 0-based protocol address (40001 is 0)",
        )
    })?;
    if address + u32::from(kind.width()) > 65_536 {
        return Err(c.err(
            at,
            "address",
            format!(
                "a {}-register value cannot start at {address}",
                kind.width()
            ),
        ));
    }
    let word_order = c
        .choice("word_order", WORD_ORDERS)?
        .map_or(settings.word_order, |(w, _)| w);
    let scale = c.number("scale")?.map_or(1.0, |(x, _)| x);
    if scale == 0.0 {
        return Err(c.err(c.key_at("scale"), "scale", "must not be 0"));
    }
    let offset = c.number("offset")?.map_or(0.0, |(x, _)| x);
    Ok(PlcPoint {
        unit_id,
        table,
        address: address as u16,
        kind,
        word_order,
        scale,
        offset,
    })
}
