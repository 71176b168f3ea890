//! Source side of the replay: the plant's signals resolved against the log
//! reader's columns, and one tick's readings taken from its samples.

use holdup_kernel::{Readings, Scalar};

use crate::log::{SampleState, TagSample};
use crate::plant::{OutletKind, Plant, Signal};
use crate::to_kernel::{I, O};

/// A signal resolved against the reader.
#[derive(Clone, Debug)]
struct Source {
    signal: Signal,
    index: Option<usize>,
    /// A mass flow's density tag.
    density: Option<usize>,
}

impl Source {
    fn new(plant: &Plant, signal: &Signal) -> Self {
        let find = |t: &str| plant.tags.iter().position(|o| o.tag == t);
        Self {
            signal: signal.clone(),
            index: signal.tag().and_then(find),
            density: signal.density().and_then(|d| find(&d.tag)),
        }
    }

    /// SI value and state (constants are always exact). A mass flow with a
    /// density tag is missing or stale when either tag is.
    fn read(&self, samples: &[TagSample]) -> (f64, SampleState) {
        match self.index.and_then(|i| samples.get(i)) {
            None => (self.signal.to_si(0.0), SampleState::Exact),
            Some(s) => match self.density.and_then(|i| samples.get(i)) {
                None => (self.signal.to_si(s.value), s.state),
                Some(d) => {
                    let state = match (s.state, d.state) {
                        (SampleState::Missing, _) | (_, SampleState::Missing) => {
                            SampleState::Missing
                        }
                        (SampleState::Stale, _) | (_, SampleState::Stale) => SampleState::Stale,
                        (mass, _) => mass,
                    };
                    (self.signal.to_si_with(s.value, d.value), state)
                }
            },
        }
    }

    /// The reading handed to the sensor: the SI value, or NaN when the log
    /// has none for this tick (missing, or older than the tag's maximum
    /// age): the sensor's conditioning then holds its last good value.
    fn reading(&self, samples: &[TagSample]) -> f64 {
        match self.read(samples) {
            (_, SampleState::Missing | SampleState::Stale) => f64::NAN,
            (x, _) => x,
        }
    }
}

/// One online analyser's source and cycle.
#[derive(Clone, Debug)]
struct AnalyserSource {
    source: Source,
    cycle_ms: i64,
    last_used: Option<i64>,
}

/// The plant's signals resolved against the reader.
pub struct Sources {
    inlet_flow: Vec<Source>,
    feeds: Vec<Vec<Source>>,
    outlet_flow: Vec<Option<Source>>,
    temperature: Source,
    level: Option<Source>,
    analysers: Vec<AnalyserSource>,
    /// Analyser values repeated within their cycle and not used.
    pub analyser_repeats: u64,
}

/// What the log gives for one tick, owned (the reader's samples are
/// borrowed only until the next call).
#[derive(Clone, Debug)]
pub struct Frame<S, const N: usize> {
    /// Raw readings for the sensor, SI.
    pub readings: Readings<S, N, I, O>,
    /// The measured level as logged, m (NaN when missing or stale; `None`
    /// without a level signal).
    pub level: Option<f64>,
    /// Each metered flow as logged, m³/s (inlets, then measured outlets).
    pub flows: Vec<f64>,
    /// Each analyser's new analysis at this tick, mol/m³.
    pub analyses: Vec<Option<f64>>,
}

impl Sources {
    /// Resolve every signal of `plant`.
    pub fn new(plant: &Plant) -> Self {
        Self {
            inlet_flow: plant
                .inlets
                .iter()
                .map(|i| Source::new(plant, &i.flow))
                .collect(),
            feeds: plant
                .inlets
                .iter()
                .map(|i| i.feed.iter().map(|s| Source::new(plant, s)).collect())
                .collect(),
            outlet_flow: plant
                .outlets
                .iter()
                .map(|o| match &o.kind {
                    OutletKind::Measured(s) => Some(Source::new(plant, s)),
                    _ => None,
                })
                .collect(),
            temperature: Source::new(plant, &plant.temperature),
            level: plant.level.as_ref().map(|l| Source::new(plant, l)),
            analysers: plant
                .analysers
                .iter()
                .map(|a| AnalyserSource {
                    source: Source::new(plant, &a.reading),
                    cycle_ms: i64::try_from(a.cycle_ms).unwrap_or(i64::MAX),
                    last_used: None,
                })
                .collect(),
            analyser_repeats: 0,
        }
    }

    /// The temperature as logged at the first sample (for the initial
    /// state when the plant does not give one), K.
    pub fn temperature(&self, samples: &[TagSample]) -> f64 {
        self.temperature.read(samples).0
    }

    /// The frame of the tick at `t` (ms since the epoch).
    ///
    /// Analysers: a value is a new analysis only if the log stores a point
    /// at `t` (an interpolated or held value is not one), it is finite, and
    /// at least one cycle has passed since the last one used — a historian
    /// that repeats an analysis every second must not count it as many.
    pub fn frame<S: Scalar, const N: usize>(
        &mut self,
        samples: &[TagSample],
        t: i64,
    ) -> Frame<S, N> {
        let mut readings = Readings {
            inlet_flows: [S::ZERO; I],
            feed: [[S::ZERO; N]; I],
            outlet_flows: [S::ZERO; O],
            temperature: S::of(self.temperature.reading(samples)),
            level: S::of(f64::NAN),
        };
        let mut flows = Vec::with_capacity(I + O);
        for (k, src) in self.inlet_flow.iter().enumerate().take(I) {
            let q = src.reading(samples);
            readings.inlet_flows[k] = S::of(q);
            flows.push(q);
            for (i, f) in self.feeds[k].iter().enumerate().take(N) {
                readings.feed[k][i] = S::of(f.reading(samples));
            }
        }
        for (k, src) in self.outlet_flow.iter().enumerate().take(O) {
            if let Some(src) = src {
                let q = src.reading(samples);
                readings.outlet_flows[k] = S::of(q);
                flows.push(q);
            }
        }
        let level = self.level.as_ref().map(|l| l.reading(samples));
        if let Some(z) = level {
            readings.level = S::of(z);
        }
        let mut analyses = Vec::with_capacity(self.analysers.len());
        for a in self.analysers.iter_mut() {
            let (c, st) = a.source.read(samples);
            let mut new = (st == SampleState::Exact && c.is_finite()).then_some(c);
            if new.is_some() {
                if a.last_used.is_some_and(|l| t - l < a.cycle_ms) {
                    new = None;
                    self.analyser_repeats += 1;
                } else {
                    a.last_used = Some(t);
                }
            }
            analyses.push(new);
        }
        Frame {
            readings,
            level,
            flows,
            analyses,
        }
    }
}
