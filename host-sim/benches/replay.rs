//! Replay benchmark: the release `holdup` binary on a week and a month of a
//! 1 s historian log, timed and measured from outside, its answer checked
//! against a closed form; optionally the same week through a scipy script
//! (`benches/ode_replay.py`) for comparison.
//!
//! Run with `cargo bench -p holdup-sim --bench replay` (a `harness = false`
//! bench: it never runs under `cargo test`). Arguments after `--`:
//! `week` and/or `month` (default both), `--runs N` (best wall time of N,
//! default 1), `--no-python`. See `benches/README.md`.
//!
//! ## The plant (invented)
//!
//! Blend tank T-7 of the Harlowe Fen bulk terminal: a vertical cylinder,
//! 2.0 m across with a flat bottom, 10 m³ held constant (1 m³/h in and 1 m³/h
//! out, both metered and logged exactly). One species, A, fed at a grade that
//! steps every 6 h through 80 → 120 → 100 mol/m³ and is consumed by a
//! first-order decay A → (products not tracked), k = 2e-5 1/s, with no
//! activation energy: the network is linear and uncoupled, so the kernel's
//! `auto` method takes its exact step. The log also carries the tank
//! temperature (a daily swing with sensor noise; it does not change the rate)
//! and the level (constant). Tags, wide CSV, epoch seconds, one row a second:
//! `FI-101` inflow m³/h, `FI-201` outflow m³/h, `AI-101` feed mol/m³,
//! `TI-301` °C, `LI-301` m.
//!
//! ## The exact answer
//!
//! With `q_in = q_out = q` the holdup `V` is constant and the amount balance
//! `d(Vc)/dt = q·c_f − q·c − k·V·c` divided by `V` gives
//!
//! ```text
//! dc/dt = (q/V)·c_f − (q/V + k)·c.
//! ```
//!
//! On a piece `[t_i, t_{i+1})` with the feed `c_f` constant this is linear
//! with constant coefficients. Its fixed point (`dc/dt = 0`) is
//! `c_ss = (q/V)·c_f / (q/V + k)`, and the deviation `c − c_ss` obeys
//! `d(c − c_ss)/dt = −(q/V + k)(c − c_ss)`, so
//!
//! ```text
//! c(t) = c_ss + (c(t_i) − c_ss)·exp(−(q/V + k)(t − t_i)),
//! ```
//!
//! chained piece to piece from `c(0) = c₀`. The feed is a step at the first
//! row of each grade, which is exactly what the replay's zero-order hold
//! feeds the kernel (the inputs of the tick `[t, t + 1 s)` are the row at
//! `t`), so the only difference left is the kernel's `f32` rounding
//! (`estimates.csv` prints the shortest digits that read back to the same
//! `f32`, so the printing adds none).
//!
//! ## What is measured
//!
//! For each log the `holdup` binary is started as a child process with
//! `replay --quiet --every "1 h"`; wall time is from spawn to reaping, and
//! peak memory is the child's `ru_maxrss` (peak resident set size) returned
//! by `wait4(2)` through the `libc` crate when the child is reaped — exact,
//! no polling. The maximum relative error of `c_A` is taken over all hourly
//! rows of `estimates.csv` against the closed form above.

use std::fs::{self, File};
use std::io::{self, BufWriter, Write};
use std::path::{Path, PathBuf};
use std::process::{Command, ExitStatus, Stdio};
use std::time::{Duration, Instant};

use holdup_kernel::{Bottom, Shape};

/// The `holdup` binary built for this bench (release settings).
const HOLDUP: &str = env!("CARGO_BIN_EXE_holdup");
/// The scipy comparison script, next to this file.
const PY_SCRIPT: &str = concat!(env!("CARGO_MANIFEST_DIR"), "/benches/ode_replay.py");

/// Bump when the generated log changes, so stale cached logs are rewritten.
const GENERATOR_VERSION: u32 = 2;

/// First row: 2026-06-01T00:00:00Z, epoch seconds.
const START_EPOCH_S: i64 = 1_780_272_000;
/// Holdup, m³ (constant).
const VOLUME_M3: f64 = 10.0;
/// Tank diameter, m (flat-bottomed vertical cylinder).
const DIAMETER_M: f64 = 2.0;
/// Straight-shell height, m (capacity 12.6 m³).
const HEIGHT_M: f64 = 4.0;
/// Inflow = outflow, m³/h.
const FLOW_M3_H: f64 = 1.0;
/// First-order rate constant of A → (consumed), 1/s.
const K_PER_S: f64 = 2e-5;
/// Initial concentration of A, mol/m³.
const C0_MOL_M3: f64 = 50.0;
/// Feed grades, mol/m³, cycled.
const GRADES_MOL_M3: [f64; 3] = [80.0, 120.0, 100.0];
/// Length of one grade, s.
const GRADE_S: i64 = 6 * 3600;
/// Report interval asked of `holdup replay`, s.
const EVERY_S: i64 = 3600;

/// How the rows of a benchmark log are laid out.
#[derive(Clone, Copy, PartialEq, Eq)]
enum Layout {
    /// Wide, one row a second, oldest first.
    Wide,
    /// Wide, newest first (the reader sorts it on disk).
    WideNewestFirst,
    /// Long (`time,tag,value`), one tag after another, each oldest first
    /// (the reader sorts it on disk).
    LongByTag,
}

/// A benchmark log.
#[derive(Clone, Copy)]
struct Case {
    name: &'static str,
    /// Seconds of plant time (one sample of every tag a second).
    seconds: u64,
    layout: Layout,
}

impl Case {
    /// Rows of the file (long: one per tag and second).
    fn rows(self) -> u64 {
        match self.layout {
            Layout::LongByTag => self.seconds * TAGS.len() as u64,
            _ => self.seconds,
        }
    }
}

const WEEK: Case = Case {
    name: "week",
    seconds: 7 * 86_400,
    layout: Layout::Wide,
};
const MONTH: Case = Case {
    name: "month",
    seconds: 30 * 86_400,
    layout: Layout::Wide,
};
const WEEK_NEWEST_FIRST: Case = Case {
    name: "week-newest-first",
    seconds: 7 * 86_400,
    layout: Layout::WideNewestFirst,
};
const MONTH_NEWEST_FIRST: Case = Case {
    name: "month-newest-first",
    seconds: 30 * 86_400,
    layout: Layout::WideNewestFirst,
};
const WEEK_LONG_BY_TAG: Case = Case {
    name: "week-long-by-tag",
    seconds: 7 * 86_400,
    layout: Layout::LongByTag,
};
const MONTH_LONG_BY_TAG: Case = Case {
    name: "month-long-by-tag",
    seconds: 30 * 86_400,
    layout: Layout::LongByTag,
};
/// About 0.9 GB of long log: only when asked for by name.
const QUARTER_LONG_BY_TAG: Case = Case {
    name: "quarter-long-by-tag",
    seconds: 90 * 86_400,
    layout: Layout::LongByTag,
};
/// Every case; all but the last run by default.
const ALL: [Case; 7] = [
    WEEK,
    MONTH,
    WEEK_NEWEST_FIRST,
    MONTH_NEWEST_FIRST,
    WEEK_LONG_BY_TAG,
    MONTH_LONG_BY_TAG,
    QUARTER_LONG_BY_TAG,
];

/// The log's tags, in column order.
const TAGS: [&str; 5] = ["FI-101", "FI-201", "AI-101", "TI-301", "LI-301"];

/// Feed concentration in force from second `t` (since the first row).
fn feed_at(t_s: i64) -> f64 {
    GRADES_MOL_M3[(t_s / GRADE_S) as usize % GRADES_MOL_M3.len()]
}

/// Exact c_A (mol/m³) at `t_s` seconds after the first row (module docs).
fn exact_c(t_s: i64) -> f64 {
    let q = FLOW_M3_H / 3600.0;
    let lam = q / VOLUME_M3 + K_PER_S;
    let mut c = C0_MOL_M3;
    let mut start = 0i64;
    loop {
        let c_ss = (q / VOLUME_M3) * feed_at(start) / lam;
        let end = start + GRADE_S;
        let upto = end.min(t_s);
        c = c_ss + (c - c_ss) * (-lam * (upto - start) as f64).exp();
        if t_s < end {
            return c;
        }
        start = end;
    }
}

/// SplitMix64 with Box–Muller normals: deterministic sensor noise.
struct Rng(u64);

impl Rng {
    fn next_f64(&mut self) -> f64 {
        self.0 = self.0.wrapping_add(0x9e37_79b9_7f4a_7c15);
        let mut z = self.0;
        z = (z ^ (z >> 30)).wrapping_mul(0xbf58_476d_1ce4_e5b9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94d0_49bb_1331_11eb);
        z ^= z >> 31;
        (z >> 11) as f64 / (1u64 << 53) as f64
    }

    fn normal(&mut self) -> f64 {
        let u1 = self.next_f64().max(f64::MIN_POSITIVE);
        let u2 = self.next_f64();
        (-2.0 * u1.ln()).sqrt() * (std::f64::consts::TAU * u2).cos()
    }
}

/// Measured level of the full tank, m.
fn level_m() -> f64 {
    VOLUME_M3 / (std::f64::consts::PI * DIAMETER_M * DIAMETER_M / 4.0)
}

/// The benchmark plant, `fixtures/bench/plant.toml`.
const PLANT_TOML: &str = include_str!("../../fixtures/bench/plant.toml");

/// Refuse to run when the committed plant and the constants of the closed
/// form (module docs) describe different tanks: the error would then measure
/// the mismatch, not the kernel.
fn check_plant() -> Result<(), String> {
    let fixture = Path::new(concat!(
        env!("CARGO_MANIFEST_DIR"),
        "/../fixtures/bench/plant.toml"
    ));
    let plant = holdup_sim::config::parse(PLANT_TOML, fixture).map_err(|e| e.to_string())?;
    let mut differences = Vec::new();
    let mut compare = |what: &str, fixture: Option<f64>, constant: f64| {
        if fixture != Some(constant) {
            differences.push(format!(
                "{what}: {fixture:?} in the file, {constant} in the bench"
            ));
        }
    };
    let (diameter, height) = match plant.shape {
        Shape::VerticalCylinder {
            diameter,
            height,
            bottom: Bottom::Flat,
        } => (Some(diameter), Some(height)),
        _ => (None, None),
    };
    compare(
        "flat-bottomed vertical cylinder, diameter m",
        diameter,
        DIAMETER_M,
    );
    compare(
        "flat-bottomed vertical cylinder, height m",
        height,
        HEIGHT_M,
    );
    compare("initial volume m3", Some(plant.initial.volume), VOLUME_M3);
    compare(
        "initial c_A mol/m3",
        plant.initial.concentrations.first().copied(),
        C0_MOL_M3,
    );
    let k = match plant.reactions.as_slice() {
        [r] => Some(r.forward.rate_constant),
        _ => None,
    };
    compare("the one reaction's rate constant 1/s", k, K_PER_S);
    if differences.is_empty() {
        Ok(())
    } else {
        Err(format!(
            "{} does not match the bench's closed form: {}",
            fixture.display(),
            differences.join("; ")
        ))
    }
}

/// The five values of second `t` (in [`TAGS`] order), as logged.
fn values(t: i64, rng: &mut Rng) -> [String; 5] {
    // Tank temperature: 18 °C ± 3 °C over the day, 0.05 °C sensor noise.
    let day = std::f64::consts::TAU * (t % 86_400) as f64 / 86_400.0;
    let temp = 18.0 + 3.0 * day.sin() + 0.05 * rng.normal();
    [
        format!("{FLOW_M3_H:.3}"),
        format!("{FLOW_M3_H:.3}"),
        format!("{:.1}", feed_at(t)),
        format!("{temp:.2}"),
        format!("{:.4}", level_m()),
    ]
}

/// Write the case's log to `path`; returns its size. The same values in
/// every layout (one noise sequence, drawn in time order).
fn write_log(path: &Path, case: Case) -> io::Result<u64> {
    let part = path.with_extension("csv.part");
    let mut w = BufWriter::with_capacity(1 << 20, File::create(&part)?);
    let mut rng = Rng(0x7a4b_11fe_0c0f_fee5);
    let seconds = case.seconds as i64;
    match case.layout {
        Layout::Wide | Layout::WideNewestFirst => {
            writeln!(w, "time,{}", TAGS.join(","))?;
            let row = |t: i64, rng: &mut Rng| {
                format!("{},{}\n", START_EPOCH_S + t, values(t, rng).join(","))
            };
            if case.layout == Layout::Wide {
                for t in 0..seconds {
                    w.write_all(row(t, &mut rng).as_bytes())?;
                }
            } else {
                let rows: Vec<String> = (0..seconds).map(|t| row(t, &mut rng)).collect();
                for r in rows.iter().rev() {
                    w.write_all(r.as_bytes())?;
                }
            }
        }
        Layout::LongByTag => {
            writeln!(w, "time,tag,value")?;
            // The temperature's noise is drawn in time order; the other
            // values are functions of time.
            let temps: Vec<String> = (0..seconds)
                .map(|t| values(t, &mut rng)[3].clone())
                .collect();
            for (k, tag) in TAGS.iter().enumerate() {
                for t in 0..seconds {
                    let v = if k == 3 {
                        temps[t as usize].clone()
                    } else {
                        values(t, &mut Rng(0))[k].clone()
                    };
                    writeln!(w, "{},{tag},{v}", START_EPOCH_S + t)?;
                }
            }
        }
    }
    w.flush()?;
    drop(w);
    fs::rename(&part, path)?;
    Ok(fs::metadata(path)?.len())
}

/// Environment variable that makes this binary generate one log and exit
/// (`<case name>=<path>`).
const GENERATE_ENV: &str = "HOLDUP_BENCH_GENERATE";

/// Write the case's log in a child process (this binary, with
/// [`GENERATE_ENV`]), so that the memory the generator needs never counts
/// in this process: Linux carries a process's peak RSS across `fork` and
/// `exec` into its children's `ru_maxrss`, so a bench holding a large log
/// in memory would report it as the replay's.
fn generate(path: &Path, case: Case) -> io::Result<u64> {
    let status = Command::new(std::env::current_exe()?)
        .env(GENERATE_ENV, format!("{}={}", case.name, path.display()))
        .status()?;
    if !status.success() {
        return Err(io::Error::other(format!(
            "generating {} failed ({status})",
            path.display()
        )));
    }
    Ok(fs::metadata(path)?.len())
}

/// The plant file for the case: the bench plant, reading a long log for
/// [`Layout::LongByTag`].
fn plant_toml(case: Case) -> String {
    match case.layout {
        Layout::LongByTag => PLANT_TOML
            .replace("format = \"wide\"", "format = \"long\"")
            .replace("time_column = \"time\"\n", ""),
        _ => PLANT_TOML.to_string(),
    }
}

/// The case's folder with `plant.toml` and `log.csv`, generating the log
/// unless a complete one from this generator version is already there.
fn prepare(root: &Path, case: Case) -> io::Result<(PathBuf, PathBuf, u64, bool)> {
    let dir = root.join(case.name);
    fs::create_dir_all(&dir)?;
    let config = dir.join("plant.toml");
    fs::write(&config, plant_toml(case))?;
    let log = dir.join("log.csv");
    let meta = dir.join("log.csv.meta");
    let actual = fs::metadata(&log).map(|m| m.len()).ok();
    let recorded = fs::read_to_string(&meta).ok();
    if let (Some(len), Some(rec)) = (actual, recorded) {
        if rec.trim() == meta_line(case.rows(), len) {
            return Ok((config, log, len, true));
        }
    }
    let _ = fs::remove_file(&meta);
    let len = generate(&log, case)?;
    fs::write(&meta, meta_line(case.rows(), len) + "\n")?;
    Ok((config, log, len, false))
}

fn meta_line(rows: u64, bytes: u64) -> String {
    format!("generator {GENERATOR_VERSION} rows {rows} bytes {bytes}")
}

/// A finished child: how it ended, its wall time and peak RSS.
struct Measured {
    status: ExitStatus,
    wall: Duration,
    peak_rss_mib: Option<f64>,
}

/// Run `cmd` to completion with stdout and stderr sent to `out_file`,
/// measuring wall time and (on Unix) the child's peak RSS from `wait4`.
fn measure(mut cmd: Command, out_file: &Path) -> io::Result<Measured> {
    let out = File::create(out_file)?;
    let err = out.try_clone()?;
    cmd.stdin(Stdio::null())
        .stdout(Stdio::from(out))
        .stderr(Stdio::from(err));
    let started = Instant::now();
    let child = cmd.spawn()?;
    reap(child, started)
}

#[cfg(unix)]
fn reap(child: std::process::Child, started: Instant) -> io::Result<Measured> {
    use std::os::unix::process::ExitStatusExt;
    let pid = child.id() as libc::pid_t;
    let mut status: libc::c_int = 0;
    // SAFETY: `rusage` is plain old data; all-zero is a valid value.
    let mut usage: libc::rusage = unsafe { std::mem::zeroed() };
    loop {
        // SAFETY: `pid` is our own child, not yet reaped (the `Child` handle
        // is never waited on); both pointers are to live locals.
        let r = unsafe { libc::wait4(pid, &mut status, 0, &mut usage) };
        if r == pid {
            break;
        }
        let e = io::Error::last_os_error();
        if e.kind() != io::ErrorKind::Interrupted {
            return Err(e);
        }
    }
    let wall = started.elapsed();
    // Already reaped: dropping the handle only closes its pipes.
    drop(child);
    // ru_maxrss is in KiB on Linux and the BSDs, in bytes on macOS.
    let kib = if cfg!(target_os = "macos") {
        usage.ru_maxrss as f64 / 1024.0
    } else {
        usage.ru_maxrss as f64
    };
    Ok(Measured {
        status: ExitStatus::from_raw(status),
        wall,
        peak_rss_mib: Some(kib / 1024.0),
    })
}

#[cfg(not(unix))]
fn reap(mut child: std::process::Child, started: Instant) -> io::Result<Measured> {
    let status = child.wait()?;
    Ok(Measured {
        status,
        wall: started.elapsed(),
        peak_rss_mib: None,
    })
}

/// Run the command made by `make` `runs` times, each to completion: the
/// fastest run's status and wall time, and the highest peak RSS of all runs.
fn best_of(
    runs: u32,
    what: &str,
    console: &Path,
    make: impl Fn() -> Command,
) -> Result<Measured, String> {
    let mut best: Option<Measured> = None;
    for run in 0..runs {
        let m = measure(make(), console).map_err(|e| format!("cannot start {what}: {e}"))?;
        if !m.status.success() {
            let said = fs::read_to_string(console).unwrap_or_default();
            return Err(format!("{what} failed ({}):\n{said}", m.status));
        }
        eprintln!(
            "{what}: run {}/{runs}: {:.2} s",
            run + 1,
            m.wall.as_secs_f64()
        );
        best = Some(match best {
            None => m,
            Some(b) => {
                let peak = match (b.peak_rss_mib, m.peak_rss_mib) {
                    (Some(x), Some(y)) => Some(x.max(y)),
                    (x, y) => x.or(y),
                };
                let fastest = if m.wall < b.wall { m } else { b };
                Measured {
                    peak_rss_mib: peak,
                    ..fastest
                }
            }
        });
    }
    best.ok_or_else(|| format!("{what}: no run"))
}

/// Max relative error of c_A over the rows of `estimates.csv`, with the
/// number of rows checked.
fn check_estimates(path: &Path) -> Result<(f64, usize), String> {
    let text = fs::read_to_string(path).map_err(|e| format!("{}: {e}", path.display()))?;
    let mut lines = text.lines();
    let header: Vec<&str> = lines.next().unwrap_or("").split(',').collect();
    let col = |name: &str| {
        header
            .iter()
            .position(|h| *h == name)
            .ok_or_else(|| format!("{}: no column {name} in {header:?}", path.display()))
    };
    let (i_h, i_c) = (col("elapsed_h")?, col("A_mol_m3")?);
    let mut worst = 0.0f64;
    let mut n = 0;
    for (k, line) in lines.enumerate() {
        let f: Vec<&str> = line.split(',').collect();
        let num = |i: usize| -> Result<f64, String> {
            f.get(i)
                .and_then(|s| s.parse().ok())
                .ok_or_else(|| format!("{}: row {}: bad field {i}", path.display(), k + 2))
        };
        let t_s = (num(i_h)? * 3600.0).round() as i64;
        let exact = exact_c(t_s);
        worst = worst.max((num(i_c)? - exact).abs() / exact.abs());
        n += 1;
    }
    Ok((worst, n))
}

/// One line of the result table.
struct Row {
    label: String,
    rows: u64,
    wall_s: f64,
    peak_rss_mib: Option<f64>,
    max_rel_error: f64,
}

fn run_holdup(root: &Path, case: Case, runs: u32) -> Result<(Row, PathBuf), String> {
    let started = Instant::now();
    let (config, log, bytes, reused) = prepare(root, case).map_err(|e| format!("{e}"))?;
    eprintln!(
        "{}: log {} ({} rows, {:.1} MiB) {}",
        case.name,
        log.display(),
        case.rows(),
        bytes as f64 / (1 << 20) as f64,
        if reused {
            "reused".to_string()
        } else {
            format!("generated in {:.1} s", started.elapsed().as_secs_f64())
        }
    );
    let out = root.join(case.name).join("out");
    let console = root.join(case.name).join("holdup-console.txt");
    let what = format!("holdup replay on the {} log", case.name);
    let best = best_of(runs, &what, &console, || {
        let _ = fs::remove_dir_all(&out);
        let mut cmd = Command::new(HOLDUP);
        cmd.arg("replay")
            .arg("--config")
            .arg(&config)
            .arg("--log")
            .arg(&log)
            .arg("--out")
            .arg(&out)
            .args(["--every", "1 h", "--quiet"]);
        cmd
    })?;
    let (err, n) = check_estimates(&out.join("estimates.csv"))?;
    let expect = case.seconds.div_ceil(EVERY_S as u64) as usize;
    if n < expect {
        return Err(format!(
            "{}: estimates.csv has {n} hourly rows, expected at least {expect}",
            case.name
        ));
    }
    Ok((
        Row {
            label: format!("{} (holdup, f32)", case.name),
            rows: case.rows(),
            wall_s: best.wall.as_secs_f64(),
            peak_rss_mib: best.peak_rss_mib,
            max_rel_error: err,
        },
        log,
    ))
}

fn python() -> String {
    std::env::var("PYTHON").unwrap_or_else(|_| "python3".to_string())
}

fn run_python(root: &Path, log: &Path, rows: u64, runs: u32) -> Result<(Row, String), String> {
    let console = root.join("week").join("python-console.txt");
    let what = format!("{} {PY_SCRIPT}", python());
    let m = best_of(runs, &what, &console, || {
        let mut cmd = Command::new(python());
        cmd.arg(PY_SCRIPT)
            .arg(log)
            .arg(VOLUME_M3.to_string())
            .arg(K_PER_S.to_string())
            .arg("--c0")
            .arg(C0_MOL_M3.to_string())
            .arg("--every")
            .arg(EVERY_S.to_string());
        cmd
    })?;
    let said = fs::read_to_string(&console).unwrap_or_default();
    let json: serde_json::Value = said
        .lines()
        .rev()
        .find_map(|l| serde_json::from_str(l).ok())
        .ok_or_else(|| format!("{PY_SCRIPT} printed no JSON line:\n{said}"))?;
    let get = |k: &str| json.get(k).and_then(|v| v.as_f64()).unwrap_or(f64::NAN);
    let note = format!(
        "scipy script ({}): reading the log {:.2} s, solve_ivp {:.3} s with {} RHS calls, \
         the rest interpreter start-up and imports.",
        json.get("solver").and_then(|v| v.as_str()).unwrap_or("?"),
        get("read_s"),
        get("solve_s"),
        get("nfev"),
    );
    Ok((
        Row {
            label: "week (scipy LSODA script)".to_string(),
            rows,
            wall_s: m.wall.as_secs_f64(),
            peak_rss_mib: m.peak_rss_mib,
            max_rel_error: get("max_rel_error"),
        },
        note,
    ))
}

fn scipy_available() -> bool {
    Command::new(python())
        .args(["-c", "import numpy, scipy"])
        .stdout(Stdio::null())
        .stderr(Stdio::null())
        .status()
        .is_ok_and(|s| s.success())
}

fn main() {
    if let Some(job) = std::env::var_os(GENERATE_ENV) {
        let job = job.to_string_lossy().into_owned();
        let done = job.split_once('=').and_then(|(name, path)| {
            let case = ALL.iter().find(|c| c.name == name)?;
            Some(write_log(Path::new(path), *case))
        });
        match done {
            Some(Ok(_)) => std::process::exit(0),
            Some(Err(e)) => {
                eprintln!("error: {job}: {e}");
                std::process::exit(1)
            }
            None => {
                eprintln!("error: {GENERATE_ENV}={job}: expected <case>=<path>");
                std::process::exit(2)
            }
        }
    }
    let mut cases = Vec::new();
    let mut runs = 1u32;
    let mut with_python = true;
    let mut args = std::env::args().skip(1);
    while let Some(a) = args.next() {
        match a.as_str() {
            "--no-python" => with_python = false,
            name if ALL.iter().any(|c| c.name == name) => {
                cases.extend(ALL.iter().filter(|c| c.name == name).copied())
            }
            "--runs" => {
                runs = args
                    .next()
                    .and_then(|n| n.parse().ok())
                    .filter(|n| *n > 0)
                    .unwrap_or_else(|| {
                        eprintln!("--runs needs a positive count");
                        std::process::exit(2)
                    })
            }
            _ => {} // `cargo bench` passes `--bench`; filters of other benches
        }
    }
    if cases.is_empty() {
        cases = ALL[..ALL.len() - 1].to_vec();
    }
    // <target>/tmp → <target>/holdup-bench (override: HOLDUP_BENCH_DIR).
    let root = std::env::var_os("HOLDUP_BENCH_DIR")
        .map(PathBuf::from)
        .unwrap_or_else(|| {
            Path::new(env!("CARGO_TARGET_TMPDIR"))
                .parent()
                .unwrap_or(Path::new("."))
                .join("holdup-bench")
        });
    eprintln!("replay bench: {HOLDUP}, files in {}", root.display());
    if let Err(e) = check_plant() {
        eprintln!("error: {e}");
        std::process::exit(1);
    }

    let mut rows = Vec::new();
    let mut week_log = None;
    for case in &cases {
        match run_holdup(&root, *case, runs) {
            Ok((row, log)) => {
                if case.name == "week" {
                    week_log = Some(log);
                }
                rows.push(row);
            }
            Err(e) => {
                eprintln!("error: {e}");
                std::process::exit(1);
            }
        }
    }

    let mut notes = Vec::new();
    if with_python {
        if !scipy_available() {
            notes.push(format!(
                "scipy comparison skipped: `{} -c \"import numpy, scipy\"` failed; \
                 install them with `pip install numpy scipy` (or set PYTHON).",
                python()
            ));
        } else {
            let log = match week_log {
                Some(l) => Ok(l),
                None => prepare(&root, WEEK).map(|p| p.1).map_err(|e| e.to_string()),
            };
            match log.and_then(|l| run_python(&root, &l, WEEK.rows(), runs)) {
                Ok((row, note)) => {
                    rows.push(row);
                    notes.push(note);
                }
                Err(e) => {
                    eprintln!("error: {e}");
                    std::process::exit(1);
                }
            }
        }
    }

    println!();
    println!("| log | rows | wall s | rows/s | peak RSS MiB | max rel error c_A |");
    println!("|---|---:|---:|---:|---:|---:|");
    for r in &rows {
        println!(
            "| {} | {} | {:.2} | {:.0} | {} | {:.1e} |",
            r.label,
            r.rows,
            r.wall_s,
            r.rows as f64 / r.wall_s,
            r.peak_rss_mib
                .map_or_else(|| "n/a".to_string(), |m| format!("{m:.1}")),
            r.max_rel_error
        );
    }
    println!();
    let holdup_week = rows.iter().find(|r| r.label.starts_with("week (holdup"));
    let scipy_week = rows.iter().find(|r| r.label.contains("scipy"));
    if let (Some(h), Some(p)) = (holdup_week, scipy_week) {
        println!(
            "Week log, whole process each: the scipy script takes {:.1}× the wall time of `holdup replay`.",
            p.wall_s / h.wall_s
        );
    }
    for note in &notes {
        println!("{note}");
    }
    println!(
        "Wall time from spawn to reaping, best of {runs}; peak RSS is the child's ru_maxrss from \
         wait4(2); error against the closed form at every hourly row."
    );
}
