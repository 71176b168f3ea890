use clap::{Parser, Subcommand};
use std::process::ExitCode;

/// holdup: transient holdup and composition estimates for tanks and stirred
/// reactors, from measured flows.
#[derive(Parser)]
#[command(name = "holdup", version, about)]
struct Cli {
    #[command(subcommand)]
    command: Command,
}

#[derive(Subcommand)]
enum Command {
    /// Run the built-in demo plant (a continuous saponification reactor)
    /// through one 8-hour shift and print holdup and composition.
    ///
    /// Example: holdup demo --every 60
    Demo {
        /// Print a row every this many minutes of plant time.
        #[arg(long, default_value_t = 30)]
        every: u64,
    },
    /// Run the kernel through the analytic step-response cases and print a
    /// table; exits with status 1 if any case fails.
    ///
    /// Example: holdup verify
    Verify,
}

fn main() -> ExitCode {
    let cli = Cli::parse();
    match cli.command {
        Command::Demo { every } => match holdup_sim::demo::run(every.max(1)) {
            Ok(table) => {
                print!("{table}");
                ExitCode::SUCCESS
            }
            Err(e) => {
                eprintln!("holdup demo: built-in configuration rejected: {e}");
                ExitCode::FAILURE
            }
        },
        Command::Verify => {
            let results = holdup_sim::verify::run_all();
            print!("{}", holdup_sim::verify::table(&results));
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
