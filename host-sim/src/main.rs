use clap::{Parser, Subcommand};
use std::io::IsTerminal;
use std::path::{Path, PathBuf};
use std::process::ExitCode;

use holdup_kernel::modbus::{Clock, LinkSpec, WordOrder};
use holdup_sim::serve::access::AllowList;
use holdup_sim::serve::checkpoint::CheckpointFile;
use holdup_sim::serve::status::StatusLine;
use holdup_sim::serve::{ServeOptions, Server, SECURITY_NOTE};
use holdup_sim::text::CAUTION;
use holdup_sim::{config, demo, link, live, registers, replay, units, verify};

/// holdup: composition and holdup of tanks and stirred reactors from
/// measured flows, replayed from historian logs through the same kernel that
/// runs on the gateway.
///
/// Estimates are advisory: validate them against lab results, never use them
/// as the only input to a safety function, and follow site procedures and
/// local codes.
#[derive(Parser)]
#[command(name = "holdup", version, about, long_about)]
struct Cli {
    #[command(subcommand)]
    command: Command,
}

#[derive(Subcommand)]
enum Command {
    /// Generate the built-in demo plant (a saponification reactor), its
    /// historian log and lab results, replay them, and write the report.
    ///
    /// Example: holdup demo --out holdup-demo
    Demo {
        /// Folder for the generated inputs and the report (created if missing;
        /// nothing outside it is touched).
        #[arg(long, default_value = "holdup-demo")]
        out: PathBuf,
        /// No progress indicator.
        #[arg(long, short)]
        quiet: bool,
        /// Then fit the saponification's rate constant and activation
        /// energy (marked unknown in plant-fit.toml) to the demo's log and
        /// lab results, into the folder's fit/.
        #[arg(long)]
        fit: bool,
    },
    /// Replay a historian log through the kernel and write estimates, a
    /// summary and plots.
    ///
    /// Example: holdup replay --config plant.toml --log log.csv --lab lab.csv --out report
    Replay {
        #[command(flatten)]
        files: LogFiles,
        /// Write one row of estimates.csv every this much plant time, a
        /// whole number of ticks (for example "10 min"), or "tick" for
        /// every tick; default 1 min (rounded up to whole ticks).
        #[arg(long)]
        every: Option<String>,
        /// No progress indicator.
        #[arg(long, short)]
        quiet: bool,
    },
    /// Estimate the plant file's unknowns (quantities written with `guess`
    /// instead of `value`) from the log and the lab results: fitted values
    /// with standard errors, 95 % intervals and correlations, a held-out
    /// check, plots, and the fitted plant file.
    ///
    /// Example: holdup fit --config plant.toml --log log.csv --lab lab.csv --out fit
    Fit(LogFiles),
    /// Poll a PLC over Modbus TCP at the plant's tick, run the sensor live,
    /// record the inputs, then replay the recording and check that the live
    /// estimate equals the replay's bit for bit (exit 1 if not).
    ///
    /// Example: holdup live --config plant.toml --out live-run --duration 10min
    Live {
        /// Plant configuration with [plc] and each tag's plc table (see
        /// docs/config.md).
        #[arg(long)]
        config: PathBuf,
        /// Output folder: inputs.csv, then the replay's report (created if
        /// missing).
        #[arg(long)]
        out: PathBuf,
        /// Stop after this long (for example "30 s", "8 h"); default: run
        /// until interrupted (Ctrl-C).
        #[arg(long)]
        duration: Option<String>,
        /// Write the output block back to the PLC after each tick (needs
        /// [plc] write_back, which alone also enables it).
        #[arg(long)]
        write_back: bool,
        /// No status line.
        #[arg(long, short)]
        quiet: bool,
    },
    /// Run the kernel through the analytic step-response cases and print a
    /// table; exits with status 1 if any case fails.
    ///
    /// Example: holdup verify
    Verify,
    /// Serve the plant's sensor live as a Modbus TCP server: a PLC writes
    /// the measured inputs and reads the estimates (see docs/registers.md).
    ///
    /// Example: holdup serve --config plant.toml --listen 0.0.0.0:1502 --allow-write-from 10.4.0.20
    Serve(ServeArgs),
    /// Write the plant's register map: registers.md (tables for the
    /// reader) and registers.csv (one row per entry, for import).
    ///
    /// Example: holdup registers --config plant.toml --out docs
    Registers {
        /// Plant configuration (TOML; see docs/config.md).
        #[arg(long)]
        config: PathBuf,
        /// Output folder (created if missing).
        #[arg(long)]
        out: PathBuf,
    },
}

/// The files of `holdup replay` and `holdup fit`.
#[derive(clap::Args)]
struct LogFiles {
    /// Plant configuration (TOML; see docs/config.md).
    #[arg(long)]
    config: PathBuf,
    /// Historian log (CSV, wide or long).
    #[arg(long)]
    log: PathBuf,
    /// Lab results (CSV: sample_time,species,value,unit[,result_time]).
    #[arg(long)]
    lab: Option<PathBuf>,
    /// Output folder (created if missing).
    #[arg(long)]
    out: PathBuf,
}

/// The options of `holdup serve`.
#[derive(clap::Args)]
struct ServeArgs {
    /// Plant configuration (TOML; see docs/config.md).
    #[arg(long)]
    config: PathBuf,
    /// Address and port to listen on (port 0: any free port, printed at start).
    #[arg(long, default_value = "127.0.0.1:1502")]
    listen: String,
    /// A second address and port that answers reads and refuses every write.
    #[arg(long)]
    read_only_listen: Option<String>,
    /// Unit id (slave address) answered, 1-247.
    #[arg(long, default_value_t = 1)]
    unit: u8,
    /// How 32-bit values are split across two registers.
    #[arg(long, value_enum, default_value_t = Order::HighFirst)]
    word_order: Order,
    /// What starts a tick: `real` (the plant's tick in real time) or
    /// `sequence` (each change of the input-sequence register).
    #[arg(long, value_enum, default_value_t = ClockArg::Real)]
    clock: ClockArg,
    /// Watchdog: the inputs are stale when the input sequence has not
    /// changed for this long ("10 s", "30 ticks", or "off").
    #[arg(long, default_value = "10 s")]
    stale_after: String,
    /// Addresses and networks allowed to write, comma-separated
    /// ("10.4.0.20, 10.5.0.0/16", or "none"); default loopback only.
    #[arg(long)]
    allow_write_from: Option<String>,
    /// Close a connection that sends no whole request for this long.
    #[arg(long, default_value = "60 s")]
    idle_timeout: String,
    /// Connections open at once, at most.
    #[arg(long, default_value_t = 32)]
    max_clients: usize,
    /// Checkpoint file: the save coil writes the sensor's state there, and
    /// a restart restores it (without it the coil answers exception 04).
    #[arg(long)]
    checkpoint: Option<PathBuf>,
}

/// `--word-order`.
#[derive(Clone, Copy, clap::ValueEnum)]
enum Order {
    /// High 16 bits in the lower address.
    HighFirst,
    /// Low 16 bits in the lower address.
    LowFirst,
}

/// `--clock`.
#[derive(Clone, Copy, clap::ValueEnum)]
enum ClockArg {
    /// The plant's tick in real time.
    Real,
    /// One tick per change of the input-sequence register.
    Sequence,
}

/// The watchdog's time in ms: "off", "N ticks" or a duration.
fn stale_after_ms(text: &str, tick_ms: u32) -> Result<u64, String> {
    let t = text.trim();
    if t == "off" {
        return Ok(0);
    }
    if let Some(n) = t.strip_suffix("ticks").or_else(|| t.strip_suffix("tick")) {
        let n: u64 = n
            .trim()
            .parse()
            .map_err(|_| format!("`{text}`: the number of ticks is not a whole number"))?;
        return Ok(n.saturating_mul(u64::from(tick_ms)));
    }
    units::parse_duration_ms(t).map_err(|e| e.to_string())
}

/// The options checked, each error naming its option.
fn serve_setup(a: &ServeArgs, tick_ms: u32) -> Result<(LinkSpec, ServeOptions), String> {
    let addr = |opt: &str, s: &str| {
        s.parse::<std::net::SocketAddr>()
            .map_err(|_| format!("{opt}: `{s}` is not an address and port (like 127.0.0.1:1502)"))
    };
    if !(1..=247).contains(&a.unit) {
        return Err(format!("--unit: {} is outside 1-247", a.unit));
    }
    let stale =
        stale_after_ms(&a.stale_after, tick_ms).map_err(|e| format!("--stale-after: {e}"))?;
    let idle =
        units::parse_duration_ms(&a.idle_timeout).map_err(|e| format!("--idle-timeout: {e}"))?;
    if idle == 0 {
        return Err("--idle-timeout: must be longer than 0".into());
    }
    if a.max_clients == 0 {
        return Err("--max-clients: must be at least 1".into());
    }
    let allow_write = match &a.allow_write_from {
        None => AllowList::loopback(),
        Some(s) => AllowList::parse(s).map_err(|e| format!("--allow-write-from: {e}"))?,
    };
    let spec = LinkSpec {
        unit_id: a.unit,
        word_order: match a.word_order {
            Order::HighFirst => WordOrder::HighFirst,
            Order::LowFirst => WordOrder::LowFirst,
        },
        clock: match a.clock {
            ClockArg::Real => Clock::Free,
            ClockArg::Sequence => Clock::Sequence,
        },
        stale_after_ms: stale,
        checkpoints: a.checkpoint.is_some(),
    };
    let options = ServeOptions {
        listen: addr("--listen", &a.listen)?,
        read_only_listen: match &a.read_only_listen {
            Some(s) => Some(addr("--read-only-listen", s)?),
            None => None,
        },
        allow_write,
        idle_timeout: std::time::Duration::from_millis(idle),
        max_clients: a.max_clients,
    };
    Ok((spec, options))
}

fn run_serve(a: &ServeArgs) -> ExitCode {
    let fail = |e: String| {
        eprintln!("error: {e}");
        ExitCode::from(2)
    };
    let plant = match load_plant(&a.config) {
        Ok(p) => p,
        Err(code) => return code,
    };
    let (spec, options) = match serve_setup(a, plant.tick_ms) {
        Ok(x) => x,
        Err(e) => return fail(e),
    };
    let mut link = match link::build_for(&plant, spec) {
        Ok(l) => l,
        Err(e) => return fail(format!("{}: {}", a.config.display(), e.message())),
    };
    let checkpoint = match &a.checkpoint {
        None => None,
        Some(path) => match CheckpointFile::open(path, link.as_mut()) {
            Ok((file, report)) => {
                match report {
                    Some(r) => println!(
                        "restored from {}: slot {}, sequence {}",
                        path.display(),
                        r.slot,
                        r.sequence
                    ),
                    None => println!("checkpoints to {} (no file yet)", path.display()),
                }
                Some(file)
            }
            Err(e) => return fail(format!("--checkpoint: {e}")),
        },
    };
    let map = *link.map();
    let server = match Server::start(link, &options) {
        Ok(s) => s,
        Err(e) => return fail(format!("cannot listen: {e}")),
    };
    if let Some(file) = checkpoint {
        server.set_checkpoint(file);
    }
    println!("{CAUTION}\n\n{SECURITY_NOTE}\n");
    println!(
        "{}: unit {}, {} holding, {} input registers, {} coils; writes from {}",
        plant.name,
        spec.unit_id,
        map.holding_len(),
        map.input_len(),
        map.coil_len(),
        options.allow_write
    );
    if let Some(ro) = server.read_only_addr() {
        println!("read-only on {ro}");
    }
    println!("listening on {}", server.local_addr());
    let names = plant.species.iter().map(|s| s.name.clone()).collect();
    let line = StatusLine::new(map, spec.word_order, names);
    let tty = std::io::stderr().is_terminal();
    // On a terminal, end of input (Ctrl-D) stops the server; a server
    // started with no terminal runs until it is killed.
    let (done_tx, done) = std::sync::mpsc::channel::<()>();
    if std::io::stdin().is_terminal() {
        println!("Ctrl-D stops the server.");
        std::thread::spawn(move || {
            let _ = std::io::copy(&mut std::io::stdin().lock(), &mut std::io::sink());
            let _ = done_tx.send(());
        });
    } else {
        std::mem::forget(done_tx);
    }
    while done
        .recv_timeout(std::time::Duration::from_secs(1))
        .is_err()
    {
        if tty {
            let shared = server.shared();
            let regs = shared.lock().link.input_registers().to_vec();
            eprint!("\r{}\x1b[K", line.render(&regs, &shared.stats));
        }
    }
    let shared = std::sync::Arc::clone(server.shared());
    server.stop();
    let regs = shared.lock().link.input_registers().to_vec();
    println!("\nstopped: {}", line.render(&regs, &shared.stats));
    ExitCode::SUCCESS
}

/// The plant configuration, or exit status 2 with the loader's message
/// (file, line, key) printed.
fn load_plant(path: &Path) -> Result<holdup_sim::plant::Plant, ExitCode> {
    config::load(path).map_err(|e| {
        eprintln!("error: {e}");
        ExitCode::from(2)
    })
}

fn run_fit(config: &Path, log: &Path, lab: Option<&Path>, out: &Path) -> ExitCode {
    let req = holdup_sim::fit::Request {
        config,
        log,
        lab,
        out_dir: out,
    };
    match holdup_sim::fit::fit(config, log, lab) {
        Ok(f) => match holdup_sim::fit::output::write(&f, &req) {
            Ok(text) => {
                print!("{text}");
                if f.solution.converged {
                    ExitCode::SUCCESS
                } else {
                    eprintln!("holdup fit: the search did not converge (outputs written)");
                    ExitCode::from(3)
                }
            }
            Err(e) => {
                eprintln!("error: {e}");
                ExitCode::from(2)
            }
        },
        Err(e) => {
            eprintln!("error: {e}");
            ExitCode::from(2)
        }
    }
}

fn run_registers(config_path: &Path, out: &Path) -> ExitCode {
    let plant = match load_plant(config_path) {
        Ok(p) => p,
        Err(code) => return code,
    };
    match registers::write(&plant, out) {
        Ok(files) => {
            for f in files {
                println!("wrote {}", f.display());
            }
            ExitCode::SUCCESS
        }
        Err(e) => {
            eprintln!("error: {e}");
            ExitCode::from(2)
        }
    }
}

/// The rows' interval of `estimates.csv` from `--every` (None: the
/// default; `tick`: every tick, 0), checked against the plant's tick.
fn every_ms(every: Option<&str>, plant: &holdup_sim::plant::Plant) -> Result<u64, String> {
    let Some(text) = every else {
        return Ok(replay::estimates::default_every_ms(plant.tick_ms));
    };
    if text.trim() == "tick" {
        return Ok(0);
    }
    let ms = units::parse_duration_ms(text).map_err(|e| format!("--every: {e}"))?;
    if ms == 0 {
        return Err(format!(
            "--every \"{text}\": the interval must be positive (\"tick\" writes every tick)"
        ));
    }
    replay::estimates::output_interval(ms, plant.tick_ms).map_err(|e| {
        format!(
            "--every \"{text}\": {e} ([plant] tick in {})",
            plant.path.display()
        )
    })
}

fn run_replay(
    config_path: &Path,
    log: &Path,
    lab: Option<&Path>,
    out: &Path,
    every: Option<&str>,
    quiet: bool,
) -> ExitCode {
    let plant = match load_plant(config_path) {
        Ok(p) => p,
        Err(code) => return code,
    };
    let every_ms = match every_ms(every, &plant) {
        Ok(ms) => ms,
        Err(e) => {
            eprintln!("error: {e}");
            return ExitCode::from(2);
        }
    };
    let req = replay::Request {
        plant: &plant,
        log,
        lab,
        out_dir: out,
        output_every_ms: every_ms,
        progress: !quiet && std::io::stderr().is_terminal(),
    };
    match replay::run(&req) {
        Ok(outcome) => {
            print!("{}", outcome.text);
            match &outcome.summary.verdict {
                None => ExitCode::SUCCESS,
                Some(why) => {
                    eprintln!(
                        "error: the replay ran, but {why} (outputs written to {})",
                        out.display()
                    );
                    ExitCode::from(3)
                }
            }
        }
        Err(e) => {
            eprintln!("error: {e}");
            ExitCode::from(2)
        }
    }
}

fn run_live(
    config_path: &Path,
    out: &Path,
    duration: Option<&str>,
    write_back: bool,
    quiet: bool,
) -> ExitCode {
    let duration_ms = match duration.map(units::parse_duration_ms) {
        None => None,
        Some(Ok(ms)) => Some(ms),
        Some(Err(e)) => {
            eprintln!("error: --duration: {e}");
            return ExitCode::from(2);
        }
    };
    let plant = match load_plant(config_path) {
        Ok(p) => p,
        Err(code) => return code,
    };
    let req = live::Request {
        plant: &plant,
        out_dir: out,
        duration_ms,
        write_back,
        status_line: !quiet && std::io::stderr().is_terminal(),
        stop: live::interrupt::flag(),
    };
    match live::run(&req) {
        Ok(outcome) => {
            print!("{}", outcome.text);
            if outcome.agree {
                ExitCode::SUCCESS
            } else {
                ExitCode::FAILURE
            }
        }
        Err(e) => {
            eprintln!("error: {e}");
            ExitCode::from(2)
        }
    }
}

fn main() -> ExitCode {
    let cli = Cli::parse();
    match cli.command {
        Command::Demo { out, quiet, fit } => {
            let files = match demo::generate(&out) {
                Ok(f) => f,
                Err(e) => {
                    eprintln!("error: cannot write the demo into {}: {e}", out.display());
                    return ExitCode::from(2);
                }
            };
            println!(
                "Demo plant written to {}: plant.toml, log.csv (12 h at 1 s from {}), lab.csv\n",
                out.display(),
                demo::start_iso()
            );
            let replayed = run_replay(
                &files.config,
                &files.log,
                Some(&files.lab),
                &out.join("report"),
                None,
                quiet,
            );
            if !fit || replayed != ExitCode::SUCCESS {
                return replayed;
            }
            let plant = match demo::write_fit_plant(&out) {
                Ok(p) => p,
                Err(e) => {
                    eprintln!("error: cannot write the demo's fit plant: {e}");
                    return ExitCode::from(2);
                }
            };
            println!(
                "\nFitting the saponification's rate constant and activation energy ({}):\n",
                plant.display()
            );
            run_fit(&plant, &files.log, Some(&files.lab), &out.join("fit"))
        }
        Command::Replay {
            files: f,
            every,
            quiet,
        } => run_replay(
            &f.config,
            &f.log,
            f.lab.as_deref(),
            &f.out,
            every.as_deref(),
            quiet,
        ),
        Command::Fit(f) => run_fit(&f.config, &f.log, f.lab.as_deref(), &f.out),
        Command::Live {
            config,
            out,
            duration,
            write_back,
            quiet,
        } => run_live(&config, &out, duration.as_deref(), write_back, quiet),
        Command::Serve(a) => run_serve(&a),
        Command::Registers { config, out } => run_registers(&config, &out),
        Command::Verify => {
            let results = verify::run_all();
            print!("{}", verify::table(&results));
            let failed = results.iter().filter(|r| !r.passed()).count();
            println!("{} passed, {} failed", results.len() - failed, failed);
            if failed == 0 {
                ExitCode::SUCCESS
            } else {
                ExitCode::FAILURE
            }
        }
    }
}
