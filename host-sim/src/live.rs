//! `holdup live`: the laptop beside a PLC. Each tick, in real time at the
//! plant's tick, every tag the plant reads is polled from the PLC over
//! Modbus TCP ([`poller`], [`client`]: grouped requests, the `rmodbus`
//! codec), converted to SI exactly as the replay converts a log value,
//! written into the holding registers of the replay's own sensor behind
//! the register map ([`crate::link`]), the input sequence raised, and the
//! sensor ticked; the output block is optionally written back to the PLC.
//! The polled values are recorded as a wide log ([`recording`]); at the
//! end the recording is replayed ([`check`]) into the same folder, and
//! the live sensor's last estimate must equal the replay's bit for bit.
//!
//! A reading the PLC does not give (connection lost, timeout, exception
//! response, a value that is not finite) is missing: NaN for the sensor,
//! whose conditioning holds the last good value and then marks it bad
//! (NE107 `F`), and an empty cell in the recording. Nothing stops the tick
//! loop; the connection is re-made with exponential backoff.

pub mod check;
pub mod client;
pub mod decode;
pub mod interrupt;
pub mod poll;
pub mod poller;
pub mod recording;
pub mod status;

use std::fmt;
use std::io::Write;
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicBool, Ordering};
use std::time::{Duration, Instant, SystemTime, UNIX_EPOCH};

use holdup_kernel::modbus::WordOrder;

use self::poller::Poller;
use self::recording::Recording;
use self::status::Outages;
use crate::link::{self, PlantLink};
use crate::plant::{OutletKind, Plant, PlcSettings, ScalarKind, Signal};
use crate::replay::ReplayError;

/// What to run.
pub struct Request<'a> {
    /// The checked plant, with `[plc]`.
    pub plant: &'a Plant,
    /// Output folder (created if missing).
    pub out_dir: &'a Path,
    /// Stop after this long, ms (`None`: at `stop`).
    pub duration_ms: Option<u64>,
    /// Write the output block back to the PLC (also when `[plc] write_back`
    /// is set); needs a `write_back` address.
    pub write_back: bool,
    /// Show a status line (a terminal).
    pub status_line: bool,
    /// Set to stop at the next tick (an interrupt).
    pub stop: &'a AtomicBool,
}

/// Why a live run could not be done.
#[derive(Debug)]
pub enum LiveError {
    /// The plant cannot be run live, with why (naming the file and key).
    Plant(String),
    /// Writing an output failed.
    Io {
        /// The file.
        path: PathBuf,
        /// The system's error.
        error: std::io::Error,
    },
    /// The kernel refused the link.
    Kernel(&'static str),
    /// The PLC gave no reading before the run was to end.
    NoReading(String),
    /// The replay of the recording failed.
    Replay(ReplayError),
}

impl fmt::Display for LiveError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            LiveError::Plant(m) => write!(f, "{m}"),
            LiveError::Io { path, error } => write!(f, "{}: {error}", path.display()),
            LiveError::Kernel(m) => write!(f, "the kernel refused the link: {m}"),
            LiveError::NoReading(a) => {
                write!(f, "{a}: no reading from the PLC before the run ended")
            }
            LiveError::Replay(e) => write!(f, "replay of the recording: {e}"),
        }
    }
}

impl std::error::Error for LiveError {}

/// The outcome: the text to print (also written to `live.txt`) and whether
/// live equals replay.
pub struct Outcome {
    /// The polling report, the replay's summary and the comparison.
    pub text: String,
    /// The live sensor's last estimate equals the replay's bit for bit.
    pub agree: bool,
}

/// The `[plc]` of a plant that can run live.
pub fn check_plant(plant: &Plant) -> Result<&PlcSettings, LiveError> {
    let file = plant.path.display();
    let plc = plant.plc.as_ref().ok_or_else(|| {
        LiveError::Plant(format!(
            "{file}: [plc]: missing section (required by holdup live): the PLC's address and \
             where it holds each tag (see docs/config.md)"
        ))
    })?;
    if plant.scalar != ScalarKind::F32 {
        return Err(LiveError::Plant(format!(
            "{file}: [plant] scalar: holdup live needs \"f32\": the register map carries the \
             inputs as f32, so an f64 sensor could not be reproduced by its replay"
        )));
    }
    if let Some(a) = plant.analysers.first() {
        return Err(LiveError::Plant(format!(
            "{file}: [[analyser]] reading {}: holdup live does not take analyser readings \
             (the register map has no analyser inputs); remove the [[analyser]] to run live",
            a.reading.tag().unwrap_or("?")
        )));
    }
    Ok(plc)
}

/// Where each tagged signal goes in the link: holding address, index of
/// its tag among the polled values, the signal.
fn targets(plant: &Plant, tags: &[String], link: &dyn PlantLink) -> Vec<(u16, usize, Signal)> {
    let m = *link.map();
    let mut out: Vec<(u16, &Signal)> = Vec::new();
    for (k, inlet) in (0u8..).zip(plant.inlets.iter()) {
        out.push((m.inlet_flow_address(k), &inlet.flow));
        for (i, f) in (0u8..).zip(inlet.feed.iter()) {
            out.push((m.feed_address(k, i), f));
        }
    }
    for (k, outlet) in (0u8..).zip(plant.outlets.iter()) {
        if let OutletKind::Measured(s) = &outlet.kind {
            out.push((m.outlet_flow_address(k), s));
        }
    }
    out.push((m.temperature_address(), &plant.temperature));
    if let Some(l) = &plant.level {
        out.push((m.level_address(), l));
    }
    out.into_iter()
        .filter_map(|(a, s)| {
            let i = tags.iter().position(|t| Some(t.as_str()) == s.tag())?;
            Some((a, i, s.clone()))
        })
        .collect()
}

fn now_ms() -> i64 {
    SystemTime::now()
        .duration_since(UNIX_EPOCH)
        .map_or(0, |d| i64::try_from(d.as_millis()).unwrap_or(i64::MAX))
}

/// The live loop's state.
struct Live<'a> {
    req: &'a Request<'a>,
    plant: Plant,
    poller: Poller,
    recording: Recording,
    link: Box<dyn PlantLink>,
    targets: Vec<(u16, usize, Signal)>,
    write_back: Option<u16>,
    write_failed: bool,
    /// The output block before the first tick and after each tick.
    snapshots: Vec<Vec<u16>>,
    outages: Outages,
    late_ticks: u64,
    rows: u64,
    status_shown: bool,
}

/// Run live until `duration_ms` has elapsed or `stop` is set.
pub fn run(req: &Request<'_>) -> Result<Outcome, LiveError> {
    let plc = check_plant(req.plant)?;
    if req.write_back && plc.write_back.is_none() {
        return Err(LiveError::Plant(format!(
            "{}: [plc] write_back: missing (required by --write-back): the first holding \
             register to write the output block to",
            req.plant.path.display()
        )));
    }
    let out = req.out_dir;
    std::fs::create_dir_all(out).map_err(|error| LiveError::Io {
        path: out.to_path_buf(),
        error,
    })?;
    let mut poller = Poller::new(plc);
    let tags = poller.tags();
    let path = out.join("inputs.csv");
    let recording = Recording::create(&path, &tags).map_err(|error| LiveError::Io {
        path: path.clone(),
        error,
    })?;
    let tick = Duration::from_millis(u64::from(req.plant.tick_ms));
    let begun = Instant::now();
    let end = req.duration_ms.map(|ms| begun + Duration::from_millis(ms));
    let (first, base) = first_reading(&mut poller, req, tick, end)
        .ok_or_else(|| LiveError::NoReading(plc.address.clone()))?;
    let t0 = now_ms();
    let mut plant = req.plant.clone();
    if plant.initial.temperature.is_none() {
        // As the replay starts: the temperature signal's first value.
        let i = plant
            .temperature
            .tag()
            .and_then(|t| tags.iter().position(|x| x == t));
        let t = plant
            .temperature
            .to_si(i.and_then(|i| first[i]).unwrap_or(f64::NAN));
        plant.initial.temperature = Some(if t.is_finite() && t > 0.0 { t } else { 298.15 });
    }
    let spec = link::free_running();
    let link = link::build_for(&plant, spec).map_err(|e| LiveError::Kernel(e.message()))?;
    let targets = targets(&plant, &tags, link.as_ref());
    let write_back = plc.write_back;
    let snapshots = vec![link.input_registers().to_vec()];
    let mut live = Live {
        req,
        plant,
        poller,
        recording,
        link,
        targets,
        write_back,
        write_failed: false,
        snapshots,
        outages: Outages::default(),
        late_ticks: 0,
        rows: 0,
        status_shown: false,
    };
    live.drive(first, t0, base, tick, end)?;
    live.finish()
}

/// Poll every tick until a poll gives at least one reading: the values and
/// the instant of that poll (the run's tick 0). `None` when the run ends
/// first.
fn first_reading(
    poller: &mut Poller,
    req: &Request<'_>,
    tick: Duration,
    end: Option<Instant>,
) -> Option<(Vec<Option<f64>>, Instant)> {
    let mut next = Instant::now();
    loop {
        let at = Instant::now();
        let values = poller.poll();
        for m in std::mem::take(&mut poller.messages) {
            eprintln!("{m}");
        }
        if values.iter().any(Option::is_some) {
            return Some((values, at));
        }
        next += tick;
        if req.stop.load(Ordering::Relaxed) || end.is_some_and(|e| next >= e) {
            return None;
        }
        std::thread::sleep(next.saturating_duration_since(Instant::now()));
    }
}

impl Live<'_> {
    /// The tick loop: tick `k` at `base + k·tick` with the values polled
    /// then; at the end one more poll is recorded (the replay's last row,
    /// at which it stops without ticking).
    fn drive(
        &mut self,
        mut values: Vec<Option<f64>>,
        t0: i64,
        base: Instant,
        tick: Duration,
        end: Option<Instant>,
    ) -> Result<(), LiveError> {
        let tick_ms = i64::from(self.plant.tick_ms);
        let mut k: u64 = 0;
        loop {
            let t = t0 + tick_ms * k as i64;
            self.record(t, &values)?;
            let due = base + tick * u32::try_from(k + 1).unwrap_or(u32::MAX);
            let stopping = self.req.stop.load(Ordering::Relaxed) || end.is_some_and(|e| due >= e);
            if stopping {
                break;
            }
            self.step(&values, k);
            k += 1;
            let now = Instant::now();
            if now > due {
                self.late_ticks += 1;
            } else {
                std::thread::sleep(due - now);
            }
            values = self.poller.poll();
            self.show();
        }
        self.clear_status();
        Ok(())
    }

    fn record(&mut self, t: i64, values: &[Option<f64>]) -> Result<(), LiveError> {
        self.outages.note(t, values.iter().all(Option::is_none));
        self.rows += 1;
        self.recording
            .row(t, values)
            .map_err(|error| LiveError::Io {
                path: self.recording.path().to_path_buf(),
                error,
            })
    }

    /// Tick `k`: the values into the holding registers (SI, f32; NaN when
    /// missing), the input sequence raised, the tick, the write-back.
    fn step(&mut self, values: &[Option<f64>], k: u64) {
        for (address, i, signal) in &self.targets {
            let si = values[*i].map_or(f64::NAN, |v| signal.to_si(v));
            let words = WordOrder::HighFirst.split((si as f32).to_bits());
            // In the map by construction (the addresses are the map's).
            let _ = self.link.write_holding(*address, &words);
        }
        let seq = self.link.holding_registers()[0].wrapping_add(1);
        let _ = self.link.write_holding(0, &[seq]);
        let now = k * u64::from(self.plant.tick_ms);
        self.link.tick(now);
        self.snapshots.push(self.link.input_registers().to_vec());
        if let Some(a) = self.write_back {
            let unit = self.plant.plc.as_ref().map_or(1, |p| p.unit_id);
            let block = self.link.input_registers().to_vec();
            match self.poller.client.write(unit, a, &block) {
                Ok(()) => self.write_failed = false,
                Err(f) => {
                    if !self.write_failed && f != client::Failure::Offline {
                        self.poller
                            .messages
                            .push(format!("warning: write-back to holding {a}: {f}"));
                    }
                    self.write_failed = true;
                }
            }
            self.poller.drain_events();
        }
    }

    fn clear_status(&mut self) {
        if self.status_shown {
            eprint!("\r\x1b[2K");
            self.status_shown = false;
        }
    }

    /// The messages of the last poll, then the status line.
    fn show(&mut self) {
        let messages = std::mem::take(&mut self.poller.messages);
        if !messages.is_empty() {
            self.clear_status();
            for m in messages {
                eprintln!("{m}");
            }
        }
        if self.req.status_line {
            let regs = self.link.input_registers();
            let ticks = self.snapshots.len() as u64 - 1;
            let c = &self.poller.client;
            let s = status::line(
                &self.plant,
                self.link.map(),
                regs,
                ticks,
                c.counters.reconnects,
                c.connected(),
            );
            eprint!("\r\x1b[2K{s}");
            let _ = std::io::stderr().flush();
            self.status_shown = true;
        }
    }

    /// The report, the replay of the recording and the comparison.
    fn finish(mut self) -> Result<Outcome, LiveError> {
        self.outages.finish();
        let tags = self.poller.tags();
        let ticks = self.snapshots.len() as u64 - 1;
        let mut text = status::report(
            &tags,
            ticks,
            self.rows,
            self.late_ticks,
            &self.poller.client.counters,
            &self.poller.losses,
            &self.outages,
        );
        let log = self.recording.path().to_path_buf();
        let outcome =
            check::replay(&self.plant, &log, self.req.out_dir).map_err(LiveError::Replay)?;
        text.push('\n');
        text.push_str(&outcome.text);
        let n = usize::try_from(outcome.summary.ticks).unwrap_or(usize::MAX);
        let Some(regs) = self.snapshots.get(n) else {
            text.push_str(&format!(
                "\nlive vs replay: DIFFERENT: the replay ran {n} ticks, the live run {ticks}\n"
            ));
            let path = self.req.out_dir.join("live.txt");
            std::fs::write(&path, &text).map_err(|error| LiveError::Io { path, error })?;
            return Ok(Outcome { text, agree: false });
        };
        let compared = check::compare(&self.plant, self.link.map(), regs, &outcome);
        let diffs: Vec<String> = compared
            .iter()
            .filter(|c| !c.same())
            .map(|c| format!("  {}: live {:?}, replay {:?}", c.name, c.live, c.replay))
            .collect();
        let agree = diffs.is_empty();
        if agree {
            text.push_str(&format!(
                "\nlive vs replay: the same bit for bit ({} quantities after {n} ticks)\n",
                compared.len()
            ));
        } else {
            text.push_str(&format!(
                "\nlive vs replay: DIFFERENT after {n} ticks:\n{}\n",
                diffs.join("\n")
            ));
        }
        let path = self.req.out_dir.join("live.txt");
        std::fs::write(&path, &text).map_err(|error| LiveError::Io { path, error })?;
        Ok(Outcome { text, agree })
    }
}
