//! Lab results: a small CSV of grab-sample analyses, read whole (a few per
//! shift), and the comparison of estimates with them.
//!
//! Format: header `sample_time,species,value,unit`, optional `result_time`
//! column; timestamps ISO 8601 with offset, or epoch seconds, or — when the
//! plant's `[log] timezone` is set — ISO 8601 without offset, read in that
//! zone (a local time skipped or repeated by a daylight-saving change is
//! refused: a lab row has no order to resolve it by; write the offset).
//! Units are concentration units of `docs/config.md`.

use std::fmt;
use std::path::{Path, PathBuf};

use crate::plant::Plant;
use crate::units;
use crate::zone::{Local, Zone};

/// One analysed value.
#[derive(Clone, Debug, PartialEq)]
pub struct LabResult {
    /// When the sample was drawn, ms since the Unix epoch.
    pub sample_time: i64,
    /// When the result was known, if given.
    pub result_time: Option<i64>,
    /// Species index in the plant.
    pub species: usize,
    /// Concentration, mol/m³.
    pub value: f64,
    /// Line in the file (for reports).
    pub line: usize,
}

/// A lab file that cannot be used, with where and why.
#[derive(Clone, Debug, PartialEq)]
pub struct LabError {
    /// File.
    pub path: PathBuf,
    /// Line (1-based), if the problem is on one.
    pub line: Option<usize>,
    /// What is wrong and what would be valid.
    pub message: String,
}

impl fmt::Display for LabError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self.line {
            Some(l) => write!(f, "{}:{}: {}", self.path.display(), l, self.message),
            None => write!(f, "{}: {}", self.path.display(), self.message),
        }
    }
}

impl std::error::Error for LabError {}

/// Parse a timestamp: epoch seconds (decimals allowed) or RFC 3339 with
/// offset. Returns ms since the Unix epoch.
pub fn parse_time(text: &str) -> Result<i64, String> {
    parse_time_in(text, None)
}

/// As [`parse_time`], and with `zone` also ISO 8601 without offset, as
/// local time in that zone.
pub fn parse_time_in(text: &str, zone: Option<&Zone>) -> Result<i64, String> {
    let t = text.trim();
    if let Some(zone) = zone {
        if let Ok((local, None)) = crate::log::time::parse_iso_local(t.as_bytes()) {
            return match zone.resolve(local) {
                Local::Single(ms) => Ok(ms),
                Local::Skipped => Err(format!(
                    "{t:?} does not exist in {} (clocks set forward); write the offset",
                    zone.label()
                )),
                Local::Repeated { .. } => Err(format!(
                    "{t:?} occurs twice in {} (clocks set back); write the offset, e.g. \
                     {}",
                    zone.label(),
                    "2026-10-25T02:30:00+02:00 or 2026-10-25T02:30:00+01:00"
                )),
            };
        }
    }
    if let Ok(secs) = t.parse::<f64>() {
        if secs.is_finite() && secs.abs() < 1e13 {
            return Ok((secs * 1000.0).round() as i64);
        }
        return Err(format!("epoch seconds out of range: {t}"));
    }
    chrono::DateTime::parse_from_rfc3339(t)
        .map(|d| d.timestamp_millis())
        .map_err(|_| {
            format!(
                "not a timestamp: {t:?} (expected ISO 8601 with offset, e.g. \
                 2026-03-01T06:00:00+01:00, or epoch seconds{})",
                if zone.is_some() {
                    ", or ISO 8601 local time in [log] timezone"
                } else {
                    "; local times need [log] timezone"
                }
            )
        })
}

/// Read a lab file for `plant`. Rows are returned sorted by sample time.
pub fn load(path: &Path, plant: &Plant) -> Result<Vec<LabResult>, LabError> {
    let err = |line: Option<usize>, message: String| LabError {
        path: path.to_path_buf(),
        line,
        message,
    };
    let mut rdr = csv::ReaderBuilder::new()
        .flexible(true)
        .trim(csv::Trim::All)
        .from_path(path)
        .map_err(|e| err(None, format!("cannot read: {e}")))?;
    let headers = rdr
        .headers()
        .map_err(|e| err(Some(1), format!("cannot read the header: {e}")))?
        .clone();
    let col = |name: &str| {
        headers
            .iter()
            .position(|h| h.trim_start_matches('\u{feff}').eq_ignore_ascii_case(name))
    };
    let need = |name: &str| {
        col(name).ok_or_else(|| {
            err(
                Some(1),
                format!(
                    "missing column {name:?}; the header must have sample_time, species, value, \
                     unit (and optionally result_time), found: {}",
                    headers.iter().collect::<Vec<_>>().join(", ")
                ),
            )
        })
    };
    let (c_time, c_species, c_value, c_unit) = (
        need("sample_time")?,
        need("species")?,
        need("value")?,
        need("unit")?,
    );
    let c_result = col("result_time");
    let zone = plant.log.timezone.as_ref();
    let names: Vec<&str> = plant.species.iter().map(|s| s.name.as_str()).collect();
    let mut out = Vec::new();
    for (i, rec) in rdr.records().enumerate() {
        let line = i + 2;
        let rec = rec.map_err(|e| err(Some(line), format!("unreadable row: {e}")))?;
        if rec.iter().all(|f| f.is_empty()) {
            continue;
        }
        let field = |c: usize, name: &str| {
            rec.get(c)
                .filter(|s| !s.is_empty())
                .ok_or_else(|| err(Some(line), format!("{name} is empty")))
        };
        let sample_time =
            parse_time_in(field(c_time, "sample_time")?, zone).map_err(|m| err(Some(line), m))?;
        let result_time = match c_result.and_then(|c| rec.get(c)).filter(|s| !s.is_empty()) {
            Some(s) => Some(parse_time_in(s, zone).map_err(|m| err(Some(line), m))?),
            None => None,
        };
        if let Some(r) = result_time {
            if r < sample_time {
                return Err(err(
                    Some(line),
                    "result_time is before sample_time".to_string(),
                ));
            }
        }
        let sp_name = field(c_species, "species")?;
        let species = names.iter().position(|n| *n == sp_name).ok_or_else(|| {
            err(
                Some(line),
                format!(
                    "unknown species {sp_name:?}; the plant defines: {}",
                    names.join(", ")
                ),
            )
        })?;
        let raw: f64 = field(c_value, "value")?
            .parse()
            .map_err(|_| err(Some(line), "value is not a number".to_string()))?;
        if !raw.is_finite() || raw < 0.0 {
            return Err(err(
                Some(line),
                format!("value must be a finite, non-negative concentration, got {raw}"),
            ));
        }
        let unit = field(c_unit, "unit")?;
        let conv = units::concentration_to_si(unit, plant.species[species].molar_mass)
            .map_err(|e| err(Some(line), e.to_string()))?;
        out.push(LabResult {
            sample_time,
            result_time,
            species,
            value: raw * conv.scale + conv.offset,
            line,
        });
    }
    out.sort_by_key(|r| r.sample_time);
    Ok(out)
}

/// Agreement of the estimate of one species with its lab results.
#[derive(Clone, Debug, Default, PartialEq)]
pub struct Agreement {
    /// Number of lab results compared.
    pub n: usize,
    /// Mean of estimate − lab, mol/m³.
    pub bias: f64,
    /// Root mean square of estimate − lab, mol/m³.
    pub rmse: f64,
    /// Largest |estimate − lab|, mol/m³.
    pub max_abs: f64,
    /// Sample time of the largest error, ms epoch.
    pub max_at: Option<i64>,
}

/// Accumulates estimate − lab differences per species.
#[derive(Clone, Debug)]
pub struct Comparison {
    sum: Vec<f64>,
    sum_sq: Vec<f64>,
    n: Vec<usize>,
    max_abs: Vec<f64>,
    max_at: Vec<Option<i64>>,
    /// Lab results outside the replayed time span (not compared).
    pub outside_span: usize,
}

impl Comparison {
    /// For `species` species.
    pub fn new(species: usize) -> Self {
        Self {
            sum: vec![0.0; species],
            sum_sq: vec![0.0; species],
            n: vec![0; species],
            max_abs: vec![0.0; species],
            max_at: vec![None; species],
            outside_span: 0,
        }
    }

    /// Record one comparison.
    pub fn add(&mut self, species: usize, estimate: f64, lab: f64, at: i64) {
        let d = estimate - lab;
        if let (Some(s), Some(q), Some(n), Some(m), Some(a)) = (
            self.sum.get_mut(species),
            self.sum_sq.get_mut(species),
            self.n.get_mut(species),
            self.max_abs.get_mut(species),
            self.max_at.get_mut(species),
        ) {
            *s += d;
            *q += d * d;
            *n += 1;
            if d.abs() >= *m {
                *m = d.abs();
                *a = Some(at);
            }
        }
    }

    /// The agreement of each species.
    pub fn results(&self) -> Vec<Agreement> {
        (0..self.n.len())
            .map(|i| {
                let n = self.n[i];
                if n == 0 {
                    return Agreement::default();
                }
                Agreement {
                    n,
                    bias: self.sum[i] / n as f64,
                    rmse: (self.sum_sq[i] / n as f64).sqrt(),
                    max_abs: self.max_abs[i],
                    max_at: self.max_at[i],
                }
            })
            .collect()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn times_parse_in_both_notations() {
        // 2026-03-01T06:00:00+01:00 = 2026-03-01T05:00:00Z = 1772341200 s
        // (hand-computed: 20513 days from 1970-01-01 to 2026-03-01, ×86400, +5 h).
        assert_eq!(
            parse_time("2026-03-01T06:00:00+01:00"),
            Ok(1_772_341_200_000)
        );
        assert_eq!(parse_time("2026-03-01T05:00:00Z"), Ok(1_772_341_200_000));
        assert_eq!(parse_time("1772341200.5"), Ok(1_772_341_200_500));
        assert!(parse_time("2026-03-01 06:00").is_err());
    }

    #[test]
    fn local_times_in_the_log_zone() {
        // CET = UTC+1 on 2026-03-01 (EU rule, common practice): 06:00 local
        // = 05:00Z = 1772341200 s.
        let z = Zone::from_name("Europe/Vienna").unwrap_or_else(|e| panic!("{e}"));
        assert_eq!(
            parse_time_in("2026-03-01 06:00", Some(&z)),
            Ok(1_772_341_200_000)
        );
        // An offset still wins over the zone.
        assert_eq!(
            parse_time_in("2026-03-01T05:00:00Z", Some(&z)),
            Ok(1_772_341_200_000)
        );
        let e = parse_time_in("2026-03-29 02:30", Some(&z)).unwrap_err();
        assert!(e.contains("does not exist in Europe/Vienna"), "{e}");
        let e = parse_time_in("2026-10-25 02:30", Some(&z)).unwrap_err();
        assert!(e.contains("occurs twice"), "{e}");
        let e = parse_time("2026-03-01 06:00").unwrap_err();
        assert!(e.contains("[log] timezone"), "{e}");
    }

    #[test]
    fn comparison_statistics_match_hand_values() {
        let mut c = Comparison::new(2);
        c.add(0, 11.0, 10.0, 1);
        c.add(0, 9.0, 10.0, 2);
        c.add(0, 13.0, 10.0, 3);
        let r = &c.results()[0];
        // differences 1, −1, 3: bias 1, rmse √(11/3), max 3 at t = 3.
        assert_eq!(r.n, 3);
        assert!((r.bias - 1.0).abs() < 1e-15);
        assert!((r.rmse - (11.0f64 / 3.0).sqrt()).abs() < 1e-15);
        assert_eq!((r.max_abs, r.max_at), (3.0, Some(3)));
        assert_eq!(c.results()[1].n, 0);
    }
}
