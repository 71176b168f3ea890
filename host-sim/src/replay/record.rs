//! What the replay counts tick by tick for its summary: NE107 status and
//! reasons, kernel flags, closure alarms with their windows, re-seeds, and
//! every conditioned input's rejected or held values with their windows.

use std::collections::BTreeMap;

use holdup_kernel::diagnostics::{ClosureAlarm, DeviceStatus};
use holdup_kernel::signal::{Quality, SignalFlags};
use holdup_kernel::{Channel, Scalar, SensorReport, StatusFlags};

use super::assemble::HostSensor;
use crate::plant::{OutletKind, Plant};

/// How many windows of each kind are kept with their times.
pub const KEEP_FIRST: usize = 50;

/// An interval `[start, end)` of plant time, ms since the epoch.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Span {
    /// Start.
    pub start: i64,
    /// End (`None`: still open at the end of the log).
    pub end: Option<i64>,
}

/// Windows of one kind: every one counted and timed, the first
/// [`KEEP_FIRST`] kept.
#[derive(Clone, Debug, Default, PartialEq, Eq)]
pub struct Spans {
    /// Windows.
    pub total: u64,
    /// Their summed length, ms.
    pub total_ms: u64,
    /// The first ones.
    pub first: Vec<Span>,
    open: Option<i64>,
}

impl Spans {
    /// The condition holds over `[t, t + h)` or not.
    pub fn tick(&mut self, on: bool, t: i64, h: i64) {
        match (on, self.open) {
            (true, None) => self.open = Some(t),
            (false, Some(start)) => self.close(start, Some(t)),
            _ => {}
        }
        if on {
            self.total_ms = self.total_ms.saturating_add(h.unsigned_abs());
        }
    }

    fn close(&mut self, start: i64, end: Option<i64>) {
        self.total += 1;
        if self.first.len() < KEEP_FIRST {
            self.first.push(Span { start, end });
        }
        self.open = None;
    }

    /// Close a window still open at the end of the log.
    pub fn finish(&mut self) {
        if let Some(start) = self.open {
            self.close(start, None);
        }
    }
}

/// One conditioned input's record.
#[derive(Clone, Debug)]
pub struct InputRecord {
    /// The tag and what it measures (`FI-101 (inlet caustic pump flow)`).
    pub name: String,
    /// The tag.
    pub tag: String,
    /// The kernel channel.
    pub channel: Channel,
    /// Ticks with each conditioning flag.
    pub flag_ticks: BTreeMap<&'static str, u64>,
    /// Windows with a reading that was not `Good` (rejected and held,
    /// stale, stuck or saturated).
    pub not_good: Spans,
}

/// Everything counted over the replay.
#[derive(Clone, Debug, Default)]
pub struct Record {
    /// Ticks per NE107 status (index: `DeviceStatus as usize`).
    pub status_ticks: [u64; 5],
    /// Ticks each NE107 reason fired.
    pub reason_ticks: BTreeMap<&'static str, u64>,
    /// Ticks each kernel flag was raised (the sensor's tick).
    pub flag_ticks: BTreeMap<&'static str, u64>,
    /// Closure alarm windows, each with its sign.
    pub closure: Vec<(Span, ClosureAlarm)>,
    /// Times the estimator re-seeded its holdup from the level.
    pub reseeds: Vec<i64>,
    /// Every conditioned input.
    pub inputs: Vec<InputRecord>,
    /// Ticks.
    pub ticks: u64,
}

impl Record {
    /// A record for `plant`'s tagged inputs.
    pub fn new(plant: &Plant) -> Self {
        let mut inputs = Vec::new();
        let mut add = |tag: Option<&str>, what: String, channel: Channel| {
            if let Some(tag) = tag {
                inputs.push(InputRecord {
                    name: format!("{tag} ({what})"),
                    tag: tag.to_string(),
                    channel,
                    flag_ticks: BTreeMap::new(),
                    not_good: Spans::default(),
                });
            }
        };
        for (k, inlet) in plant.inlets.iter().enumerate() {
            let k8 = u8::try_from(k).unwrap_or(u8::MAX);
            add(
                inlet.flow.tag(),
                format!("flow of inlet {}", inlet.name),
                Channel::InletFlow(k8),
            );
            for (i, f) in inlet.feed.iter().enumerate() {
                add(
                    f.tag(),
                    format!("{} in inlet {}", plant.species[i].name, inlet.name),
                    Channel::Feed(k8, u8::try_from(i).unwrap_or(u8::MAX)),
                );
            }
        }
        for (k, outlet) in plant.outlets.iter().enumerate() {
            if let OutletKind::Measured(s) = &outlet.kind {
                add(
                    s.tag(),
                    format!("flow of outlet {}", outlet.name),
                    Channel::OutletFlow(u8::try_from(k).unwrap_or(u8::MAX)),
                );
            }
        }
        add(
            plant.temperature.tag(),
            "temperature".to_string(),
            Channel::Temperature,
        );
        if let Some(l) = &plant.level {
            add(l.tag(), "level".to_string(), Channel::Level);
        }
        Self {
            inputs,
            ..Self::default()
        }
    }

    /// Count the tick `[t, t + h)` the sensor just ran.
    pub fn tick<S: Scalar, const N: usize, const D: usize>(
        &mut self,
        t: i64,
        h: i64,
        report: &SensorReport<S, N>,
        sensor: &HostSensor<S, N, D>,
    ) {
        self.ticks += 1;
        let d = &report.diagnosis;
        self.status_ticks[d.status as usize] += 1;
        for r in d.reasons.names() {
            *self.reason_ticks.entry(r).or_default() += 1;
        }
        for f in report.step.flags.names() {
            *self.flag_ticks.entry(f).or_default() += 1;
        }
        if report.reseeded {
            self.reseeds.push(t);
        }
        self.closure_tick(report.closure, t);
        let quiet = report.channels_not_good == 0 && report.signal_flags.is_empty();
        for input in self.inputs.iter_mut() {
            let r = if quiet {
                None
            } else {
                sensor.reading(input.channel)
            };
            let bad = r.is_some_and(|r| r.quality != Quality::Good);
            input.not_good.tick(bad, t, h);
            if let Some(r) = r {
                for f in r.flags.names() {
                    *input.flag_ticks.entry(f).or_default() += 1;
                }
            }
        }
    }

    fn closure_tick(&mut self, alarm: Option<ClosureAlarm>, t: i64) {
        let open = self.closure.last_mut().filter(|(s, _)| s.end.is_none());
        match (alarm, open) {
            (Some(a), Some((_, b))) if *b == a => {}
            (Some(a), open) => {
                if let Some((s, _)) = open {
                    s.end = Some(t);
                }
                self.closure.push((
                    Span {
                        start: t,
                        end: None,
                    },
                    a,
                ));
            }
            (None, Some((s, _))) => s.end = Some(t),
            (None, None) => {}
        }
    }

    /// Close what is still open at the end of the log.
    pub fn finish(&mut self) {
        for input in self.inputs.iter_mut() {
            input.not_good.finish();
        }
    }

    /// Ticks with status `s`.
    pub fn status(&self, s: DeviceStatus) -> u64 {
        self.status_ticks[s as usize]
    }

    /// The kernel flags raised on some tick, in bit order with their ticks.
    pub fn flags(&self) -> Vec<(&'static str, u64)> {
        (0..16)
            .filter_map(|bit| StatusFlags::from_bits(1 << bit).names().next())
            .filter_map(|n| self.flag_ticks.get(n).map(|c| (n, *c)))
            .collect()
    }

    /// Inputs with any conditioning event.
    pub fn conditioned_events(&self) -> impl Iterator<Item = &InputRecord> {
        self.inputs
            .iter()
            .filter(|i| !i.flag_ticks.is_empty() || i.not_good.total > 0)
    }

    /// Whether every input's flags were clean (no event at all).
    pub fn inputs_clean(&self) -> bool {
        self.conditioned_events().next().is_none()
    }
}

/// The conditioning flag names (for the CSV column), in bit order.
pub fn signal_flag_names(f: SignalFlags) -> String {
    f.names().collect::<Vec<_>>().join("|")
}
