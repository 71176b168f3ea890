//! One poll of every tag: the grouped read requests through the client,
//! each tag's value decoded, and every failure counted and shown once when
//! it starts (a tag, the request and the reason), never stopping the poll.

use super::client::{Client, Event, Failure};
use super::decode;
use super::poll::{self, Group};
use crate::plant::{PlcPoint, PlcSettings};

/// Readings lost since start, per tag (in the points' order).
#[derive(Clone, Debug, Default, PartialEq, Eq)]
pub struct Losses {
    /// Polls that gave no reading (PLC away, timeout, exception).
    pub missing: Vec<u64>,
    /// Values that were not finite (NaN or infinite in the PLC).
    pub not_finite: Vec<u64>,
}

/// The poller.
pub struct Poller {
    /// The client (its counters are the connection's).
    pub client: Client,
    points: Vec<(String, PlcPoint)>,
    groups: Vec<Group>,
    /// Each group's last failure, to show a failure once when it starts.
    last_failure: Vec<Option<Failure>>,
    /// Each tag's last value was not finite.
    last_not_finite: Vec<bool>,
    /// Readings lost since start.
    pub losses: Losses,
    /// Lines for the operator not yet shown.
    pub messages: Vec<String>,
}

impl Poller {
    /// The poller of the PLC in `settings`.
    pub fn new(settings: &PlcSettings) -> Self {
        let groups = poll::plan(&settings.points);
        let n = settings.points.len();
        Self {
            client: Client::new(settings),
            points: settings.points.clone(),
            last_failure: vec![None; groups.len()],
            groups,
            last_not_finite: vec![false; n],
            losses: Losses {
                missing: vec![0; n],
                not_finite: vec![0; n],
            },
            messages: Vec::new(),
        }
    }

    /// The tags, in the order of the values of a poll.
    pub fn tags(&self) -> Vec<String> {
        self.points.iter().map(|(t, _)| t.clone()).collect()
    }

    /// Read requests per poll.
    pub fn requests(&self) -> usize {
        self.groups.len()
    }

    /// One poll: each tag's value in its unit, `None` when not read or not
    /// finite.
    pub fn poll(&mut self) -> Vec<Option<f64>> {
        let mut values = vec![None; self.points.len()];
        for g in 0..self.groups.len() {
            let group = &self.groups[g];
            let (unit, table, start, count) =
                (group.unit_id, group.table, group.start, group.count);
            match self.client.read(unit, table, start, count) {
                Ok(regs) => {
                    self.last_failure[g] = None;
                    let members = self.groups[g].members.clone();
                    for (i, off) in members {
                        let p = &self.points[i].1;
                        let x = decode::value(p, regs.get(usize::from(off)..).unwrap_or(&[]));
                        values[i] = self.finite(i, x);
                    }
                }
                Err(f) => self.failed(g, f),
            }
        }
        for (i, v) in values.iter().enumerate() {
            if v.is_none() {
                self.losses.missing[i] += 1;
            }
        }
        self.drain_events();
        values
    }

    fn finite(&mut self, i: usize, x: f64) -> Option<f64> {
        let bad = !x.is_finite();
        if bad {
            self.losses.not_finite[i] += 1;
            if !self.last_not_finite[i] {
                let tag = &self.points[i].0;
                self.messages.push(format!(
                    "warning: tag {tag}: the PLC holds a value that is not finite ({x}); \
                     recorded as missing"
                ));
            }
        }
        self.last_not_finite[i] = bad;
        (!bad).then_some(x)
    }

    fn failed(&mut self, g: usize, f: Failure) {
        let group = &self.groups[g];
        if f != Failure::Offline && self.last_failure[g].as_ref() != Some(&f) {
            let table = match group.table {
                crate::plant::PlcTable::Holding => "holding",
                crate::plant::PlcTable::Input => "input",
            };
            self.messages.push(format!(
                "warning: tag {}: unit {}, {table} registers {}..{}: {f}",
                group.names(&self.points),
                group.unit_id,
                group.start,
                u32::from(group.start) + u32::from(group.count) - 1,
            ));
        }
        self.last_failure[g] = Some(f);
    }

    /// Turn the client's connection events into lines for the operator.
    pub fn drain_events(&mut self) {
        for e in std::mem::take(&mut self.client.events) {
            self.messages.push(match e {
                Event::Connected(false) => "connected to the PLC".to_string(),
                Event::Connected(true) => format!(
                    "reconnected to the PLC (reconnect {})",
                    self.client.counters.reconnects
                ),
                Event::Lost(why, wait) => format!(
                    "warning: connection to the PLC lost ({why}); readings missing until it \
                     is back; next attempt in {} ms, then backing off",
                    wait.as_millis()
                ),
            });
        }
    }
}
