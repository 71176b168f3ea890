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
    /// Run the kernel through the analytic step-response cases and print a
    /// table; exits with status 1 if any case fails.
    ///
    /// Example: holdup verify
    Verify,
}

fn main() -> ExitCode {
    let cli = Cli::parse();
    match cli.command {
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
