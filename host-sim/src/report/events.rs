//! The faults and alarms of a replay with their windows, each of one
//! [`Shade`] kind and about one subject: a tag of the log (its gaps, flat
//! lines and missing values as the reader found them, and the windows in
//! which the conditioning did not pass it as good) or the balance as a
//! whole (the closure alarms). The figures shade a panel with the events of
//! the signals it draws; the HTML report lists them all.

use holdup_kernel::diagnostics::ClosureAlarm;

use crate::log::{LogStats, WindowList};
use crate::plot::Shade;
use crate::replay::record::{Record, Spans};

/// What an event is about.
#[derive(Clone, Debug, PartialEq, Eq)]
pub enum Subject {
    /// One tag of the log.
    Tag(String),
    /// The balance of the vessel (flows against the level).
    Balance,
}

/// One window of a fault or an alarm, ms since the epoch.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct Event {
    /// Start.
    pub start: i64,
    /// End (`None`: still on at the end of the log).
    pub end: Option<i64>,
    /// Its kind.
    pub shade: Shade,
    /// What it is about.
    pub subject: Subject,
}

/// How many windows of one kind and subject there were, and how many of
/// them are kept with their times (the first ones).
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct Tally {
    /// The kind.
    pub shade: Shade,
    /// The subject.
    pub subject: Subject,
    /// Windows in all.
    pub total: u64,
    /// Windows kept with their times.
    pub kept: usize,
}

/// Every event of a replay, by start time, with the tallies.
#[derive(Clone, Debug, Default)]
pub struct Events {
    /// The windows kept with their times.
    pub list: Vec<Event>,
    /// Per kind and subject: windows in all and kept.
    pub tallies: Vec<Tally>,
}

impl Events {
    /// The events of the log reader's `stats` and the replay's `record`.
    pub fn collect(stats: &LogStats, record: &Record) -> Self {
        let mut ev = Events::default();
        for t in &stats.tags {
            let subject = Subject::Tag(t.tag.clone());
            ev.add_windows(&t.gaps, Shade::DataGap, &subject);
            ev.add_windows(&t.flat_lines, Shade::FlatLine, &subject);
            ev.add_windows(&t.missing_runs, Shade::MissingValues, &subject);
        }
        for i in &record.inputs {
            ev.add_spans(
                &i.not_good,
                Shade::InputNotGood,
                &Subject::Tag(i.tag.clone()),
            );
        }
        for alarm in [ClosureAlarm::MoreOutThanIn, ClosureAlarm::MoreInThanOut] {
            let shade = closure_shade(alarm);
            let mut n = 0;
            for (span, _) in record.closure.iter().filter(|(_, a)| *a == alarm) {
                n += 1;
                ev.list.push(Event {
                    start: span.start,
                    end: span.end,
                    shade,
                    subject: Subject::Balance,
                });
            }
            if n > 0 {
                ev.tallies.push(Tally {
                    shade,
                    subject: Subject::Balance,
                    total: n as u64,
                    kept: n,
                });
            }
        }
        ev.list.sort_by_key(|e| (e.start, e.shade));
        ev
    }

    fn add_windows(&mut self, w: &WindowList, shade: Shade, subject: &Subject) {
        if w.total == 0 {
            return;
        }
        for x in &w.first {
            self.list.push(Event {
                start: x.start,
                end: Some(x.end),
                shade,
                subject: subject.clone(),
            });
        }
        self.tallies.push(Tally {
            shade,
            subject: subject.clone(),
            total: w.total,
            kept: w.first.len(),
        });
    }

    fn add_spans(&mut self, s: &Spans, shade: Shade, subject: &Subject) {
        if s.total == 0 {
            return;
        }
        for x in &s.first {
            self.list.push(Event {
                start: x.start,
                end: x.end,
                shade,
                subject: subject.clone(),
            });
        }
        self.tallies.push(Tally {
            shade,
            subject: subject.clone(),
            total: s.total,
            kept: s.first.len(),
        });
    }

    /// The events about any of `tags`, or about the balance if `balance`.
    pub fn about<'a>(
        &'a self,
        tags: &'a [String],
        balance: bool,
    ) -> impl Iterator<Item = &'a Event> + 'a {
        self.list.iter().filter(move |e| match &e.subject {
            Subject::Tag(t) => tags.contains(t),
            Subject::Balance => balance,
        })
    }
}

/// The shade of a closure alarm.
pub fn closure_shade(a: ClosureAlarm) -> Shade {
    match a {
        ClosureAlarm::MoreOutThanIn => Shade::MoreOutThanIn,
        ClosureAlarm::MoreInThanOut => Shade::MoreInThanOut,
    }
}
