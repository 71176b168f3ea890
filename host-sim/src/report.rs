//! `report.html`: one self-contained page per replay — the caution first,
//! then the run, the log, the inputs, the estimator, the meters, the
//! balance closure, the lab and analyser comparisons, every fault and alarm
//! with its window, the plots (inline SVG) and the final state. No script,
//! no external resource: it opens offline in any browser and can be mailed
//! as one file. Times are on the report's [`crate::clock::Clock`]; every
//! piece of text from the user's files is escaped.
//!
//! Modules: [`events`] (faults and alarms with their windows, shared with
//! the figures), `escape` (HTML escaping), `tables` (the summary's tables),
//! `page` (the document around them).

mod escape;
pub mod events;
mod page;
mod tables;
#[cfg(test)]
mod tests;

use std::path::{Path, PathBuf};

use crate::clock::Clock;
use crate::lab::LabResult;
use crate::plant::Plant;
use crate::replay::figures::Plot;
use crate::replay::summary::Summary;

pub use self::escape::escape;
pub use self::events::Events;

/// File name of the report in the output folder.
pub const FILE: &str = "report.html";

/// Everything the page shows.
#[derive(Clone, Copy, Debug)]
pub struct Report<'a> {
    /// The replay's summary.
    pub summary: &'a Summary,
    /// The plant (species names for the lab table).
    pub plant: &'a Plant,
    /// Faults and alarms.
    pub events: &'a Events,
    /// The figures, in order.
    pub plots: &'a [Plot],
    /// The lab results read.
    pub labs: &'a [LabResult],
    /// The clock of every time shown.
    pub clock: &'a Clock,
    /// First tick, ms since the epoch.
    pub start: i64,
    /// End of the last tick, ms since the epoch.
    pub end: i64,
}

impl Report<'_> {
    /// The page.
    pub fn to_html(&self) -> String {
        page::render(self)
    }

    /// Write [`FILE`] into `dir`; returns its path.
    pub fn write(&self, dir: &Path) -> std::io::Result<PathBuf> {
        let path = dir.join(FILE);
        std::fs::write(&path, self.to_html())?;
        Ok(path)
    }
}
