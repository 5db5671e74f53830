//! `wahbad simulate`: run the bench scenario (an engineering model on an
//! air-bearing table) and write it to a log (`--out`) or stream it into a
//! running daemon as a TCP source (`--to`).
//!
//! The scenario is a preset (default `all_faults`, the default timeline) or
//! a TOML file (`--scenario`); `--duration`, `--seed` and
//! `--stars-per-frame` override either. Sensor rates and σ are the
//! scenario's (defaults in `wahbad::simulate::scenario`, rules of thumb of
//! the trade); the log's header carries the matching estimator
//! configuration, and `--write-config` writes it as a `serve --config` file.

use std::path::PathBuf;

use anyhow::Context;
use clap::{ArgGroup, Args};
use wahbad::record::unix_now_ns;
use wahbad::settings::{Token, TOKEN_ENV};
use wahbad::simulate::feed::{self, MessageCounts};
use wahbad::simulate::{Preset, Scenario, Simulator};

use super::{bad_input, Failure};

/// Flags of `wahbad simulate`.
#[derive(Debug, Args)]
#[command(group(ArgGroup::new("sink").required(true).args(["out", "to"])))]
#[command(group(ArgGroup::new("source").args(["preset", "scenario"])))]
pub struct SimulateArgs {
    /// Length of the run, seconds of data time [scenario default 120].
    #[arg(long, value_name = "SECONDS")]
    pub duration: Option<f64>,
    /// Seed of every random draw [scenario default 1].
    #[arg(long, value_name = "N")]
    pub seed: Option<u64>,
    /// Ready-made scenario: nominal, false_stars, lamp_reflection,
    /// coil_transient, dropout, all_faults [default all_faults].
    #[arg(long, value_name = "NAME")]
    pub preset: Option<Preset>,
    /// Scenario file (TOML, every key optional; see the simulator's docs).
    #[arg(long, value_name = "FILE.toml")]
    pub scenario: Option<PathBuf>,
    /// Stars the star camera reports per frame [scenario default 8].
    #[arg(long, value_name = "N")]
    pub stars_per_frame: Option<u32>,
    /// Write the run to this log (the recorder's format, with truth).
    #[arg(long, value_name = "LOG")]
    pub out: Option<PathBuf>,
    /// Stream the run into the daemon at HOST:PORT as a TCP source.
    #[arg(long, value_name = "ADDR")]
    pub to: Option<String>,
    /// With --to: data seconds per wall second (1 = real time, larger is faster).
    #[arg(long, value_name = "X", default_value_t = 1.0, requires = "to")]
    pub speed: f64,
    /// With --to: file holding the daemon's token; else the WAHBAD_TOKEN variable.
    #[arg(long, value_name = "FILE", requires = "to")]
    pub token_file: Option<PathBuf>,
    /// Also write the matching estimator configuration as a `serve --config` file.
    #[arg(long, value_name = "FILE.toml")]
    pub write_config: Option<PathBuf>,
}

/// The scenario the flags describe.
pub fn scenario_from(args: &SimulateArgs) -> Result<Scenario, Failure> {
    let mut scenario = match (&args.scenario, args.preset) {
        (Some(path), _) => {
            let text = std::fs::read_to_string(path)
                .with_context(|| format!("cannot read scenario file {}", path.display()))
                .map_err(Failure::BadInput)?;
            toml::from_str(&text)
                .with_context(|| format!("scenario file {}", path.display()))
                .map_err(Failure::BadInput)?
        }
        (None, Some(preset)) => Scenario::preset(preset),
        (None, None) => Scenario::preset(Preset::AllFaults),
    };
    if let Some(duration) = args.duration {
        scenario.duration_s = duration;
    }
    if let Some(seed) = args.seed {
        scenario.seed = seed;
    }
    if let Some(n) = args.stars_per_frame {
        scenario.star_cam.stars_per_frame = n;
    }
    scenario.validate().map_err(bad_input)?;
    Ok(scenario)
}

/// Runs `wahbad simulate`.
pub fn run(args: &SimulateArgs) -> Result<(), Failure> {
    let scenario = scenario_from(args)?;
    let estimator = feed::estimator_table(&scenario);
    if let Some(path) = &args.write_config {
        std::fs::write(path, feed::config_file_text(&estimator))
            .with_context(|| format!("cannot write {}", path.display()))
            .map_err(Failure::Failed)?;
    }
    let sim = Simulator::new(&scenario).map_err(bad_input)?;
    if let Some(path) = &args.out {
        let report = feed::write_log(sim, path, &estimator, unix_now_ns())
            .with_context(|| format!("cannot write the log {}", path.display()))
            .map_err(Failure::Failed)?;
        println!(
            "wrote {}: {}, {} records, {:.1} s of data",
            path.display(),
            counts_text(&report.counts),
            report.records,
            scenario.duration_s
        );
        return Ok(());
    }
    let to = args.to.as_deref().expect("clap requires --out or --to");
    let addr = resolve(to)?;
    let token = read_token(args.token_file.as_ref())?;
    let token_text = token
        .as_ref()
        .map(|t| String::from_utf8_lossy(t.as_bytes()).into_owned());
    let report =
        feed::stream_to(sim, addr, args.speed, token_text.as_deref()).map_err(|err| match err {
            feed::FeedError::Speed(_) => Failure::BadInput(err.into()),
            other => {
                Failure::Failed(anyhow::Error::new(other).context(format!("streaming to {to}")))
            }
        })?;
    println!(
        "sent to {to}: {} in {:.2} s; rejected {}",
        counts_text(&report.sent),
        report.elapsed.as_secs_f64(),
        report.rejected
    );
    for reason in &report.reject_reasons {
        println!("  reject: {reason}");
    }
    if let Some(status) = &report.status {
        println!(
            "daemon totals: accepted {}, rejected {}, dropped {}, epochs {}",
            status.accepted, status.rejected, status.dropped, status.epochs
        );
    }
    Ok(())
}

fn counts_text(counts: &MessageCounts) -> String {
    format!(
        "{} obs, {} rate, {} truth",
        counts.obs, counts.rates, counts.truths
    )
}

fn resolve(to: &str) -> Result<std::net::SocketAddr, Failure> {
    use std::net::ToSocketAddrs;
    to.to_socket_addrs()
        .with_context(|| format!("cannot resolve {to} (expected HOST:PORT)"))
        .map_err(Failure::BadInput)?
        .next()
        .ok_or_else(|| bad_input(format!("{to} resolves to no address")))
}

fn read_token(path: Option<&PathBuf>) -> Result<Option<Token>, Failure> {
    match path {
        Some(path) => {
            let text = std::fs::read_to_string(path)
                .with_context(|| format!("cannot read token file {}", path.display()))
                .map_err(Failure::BadInput)?;
            Ok(Some(
                Token::new(&text).map_err(|err| Failure::BadInput(err.into()))?,
            ))
        }
        None => std::env::var(TOKEN_ENV)
            .ok()
            .map(|t| Token::new(&t))
            .transpose()
            .map_err(|err| Failure::BadInput(err.into())),
    }
}
