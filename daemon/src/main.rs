//! The `wahbad` command line: parses flags and hands over to the command modules.

mod cmd;

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
    /// Solve one set of vector pairs given as JSON; the result as JSON on stdout.
    Solve(cmd::solve::SolveArgs),
    /// Monte-Carlo study: success rate and error over the Cramér–Rao bound
    /// against outlier share, per method and pair count.
    Study(cmd::study::StudyArgs),
    /// Run the daemon: take sensor observations over TCP, a Unix socket or UDP,
    /// solve the attitude once per epoch and publish it to subscribers.
    /// Test and analysis software, not flight-qualified (see the caution below).
    Serve(cmd::serve::ServeCmdArgs),
    /// Subscribe to a running daemon and print its feed.
    Watch(cmd::watch::WatchArgs),
    /// Simulate the bench scenario (air-bearing table, star camera, magnetometer,
    /// sun sensor, gyro, faults, truth): write a log or stream into a daemon.
    Simulate(cmd::simulate::SimulateArgs),
    /// The whole program in one command: an in-process daemon fed by the
    /// simulated bench scenario with faults, its live feed, then a report.
    Demo(cmd::demo::DemoArgs),
    /// Run a recorded log through the estimator again: solutions, CSV,
    /// summary, error against truth; optionally paced and republished.
    Replay(cmd::replay::ReplayArgs),
    /// End-to-end figures (live TCP load, serve memory, replay throughput) as one JSON object.
    Bench(cmd::bench::BenchArgs),
}

fn main() -> ExitCode {
    let cli = Cli::parse();
    init_logging(&cli.command);
    let result = match &cli.command {
        Command::ProtocolVersion => {
            println!("{}", wahbad_protocol::PROTOCOL_VERSION);
            Ok(())
        }
        Command::Solve(args) => cmd::solve::run(args),
        Command::Study(args) => cmd::study::run(args),
        Command::Serve(args) => cmd::serve::run(args),
        Command::Watch(args) => cmd::watch::run(args),
        Command::Simulate(args) => cmd::simulate::run(args),
        Command::Demo(args) => cmd::demo::run(args),
        Command::Replay(args) => cmd::replay::run(args),
        Command::Bench(args) => cmd::bench::run(args),
    };
    match result {
        Ok(()) => ExitCode::SUCCESS,
        Err(failure) => failure.report(),
    }
}

/// Logs go to stderr; `RUST_LOG` overrides the default level, which is `info`
/// for the long-running daemon (its connection and alert lines) and `warn`
/// for the one-shot commands; `error` for the demo, which prints its alerts
/// itself (warn-level copies would double them). Colour only on a terminal.
fn init_logging(command: &Command) {
    use std::io::IsTerminal;
    let default_level = match command {
        Command::Serve(_) => "info",
        Command::Demo(_) => "error",
        _ => "warn",
    };
    tracing_subscriber::fmt()
        .with_env_filter(
            tracing_subscriber::EnvFilter::try_from_default_env()
                .unwrap_or_else(|_| tracing_subscriber::EnvFilter::new(default_level)),
        )
        .with_ansi(std::io::stderr().is_terminal())
        .with_writer(std::io::stderr)
        .init();
}
