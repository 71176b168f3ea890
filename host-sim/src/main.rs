use clap::{Parser, Subcommand};
use std::io::IsTerminal;
use std::path::{Path, PathBuf};
use std::process::ExitCode;

use holdup_sim::{config, demo, live, replay, units, verify};

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
    },
    /// Replay a historian log through the kernel and write estimates, a
    /// summary and plots.
    ///
    /// Example: holdup replay --config plant.toml --log log.csv --lab lab.csv --out report
    Replay {
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
        /// Write one row of estimates.csv every this much plant time
        /// (for example "1 min"); default every tick.
        #[arg(long)]
        every: Option<String>,
        /// No progress indicator.
        #[arg(long, short)]
        quiet: bool,
    },
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
}

fn run_replay(
    config_path: &Path,
    log: &Path,
    lab: Option<&Path>,
    out: &Path,
    every_ms: u64,
    quiet: bool,
) -> ExitCode {
    let plant = match config::load(config_path) {
        Ok(p) => p,
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
            ExitCode::SUCCESS
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
    let plant = match config::load(config_path) {
        Ok(p) => p,
        Err(e) => {
            eprintln!("error: {e}");
            return ExitCode::from(2);
        }
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
        Command::Demo { out, quiet } => {
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
            run_replay(
                &files.config,
                &files.log,
                Some(&files.lab),
                &out.join("report"),
                0,
                quiet,
            )
        }
        Command::Replay {
            config,
            log,
            lab,
            out,
            every,
            quiet,
        } => {
            let every_ms = match every.as_deref().map(units::parse_duration_ms) {
                None => 0,
                Some(Ok(ms)) => ms,
                Some(Err(e)) => {
                    eprintln!("error: --every: {e}");
                    return ExitCode::from(2);
                }
            };
            run_replay(&config, &log, lab.as_deref(), &out, every_ms, quiet)
        }
        Command::Live {
            config,
            out,
            duration,
            write_back,
            quiet,
        } => run_live(&config, &out, duration.as_deref(), write_back, quiet),
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
