//! The `wahbad` command line: parses flags and hands over to the library.

use std::process::ExitCode;

use clap::{Parser, Subcommand};

/// Robust attitude estimation from vector observations on a test bench.
#[derive(Debug, Parser)]
#[command(name = "wahbad", version, about, long_about = None)]
struct Cli {
    #[command(subcommand)]
    command: Command,
}

#[derive(Debug, Subcommand)]
enum Command {
    /// Print the version of the wire protocol this build speaks.
    ProtocolVersion,
}

fn main() -> ExitCode {
    let cli = Cli::parse();
    match cli.command {
        Command::ProtocolVersion => {
            println!("{}", wahbad_protocol::PROTOCOL_VERSION);
            ExitCode::SUCCESS
        }
    }
}
