//! `wahbad replay LOG`: run a recorded log through the estimator again and
//! write what it gives (see [`wahbad::replay`]).
//!
//! Exit codes: 0 when the replay ran, also when the log was damaged and
//! worked around (a torn tail, a missing end record, resynced or unusable
//! records: each is a warning on stderr naming the file and the offset or
//! record number); 1 with `--fail-on-alert` when any alert was raised, or
//! when an output cannot be written or the log cannot be read part way;
//! 2 when the input is unusable: the file is missing, empty, not a log, of an
//! unknown format version, with a bad header, or the flags or configuration
//! are invalid.
//!
//! Stdout: the configuration line at the start, the human summary at the end
//! (and `listening tcp ADDR` first with `--serve`). The progress bar goes to
//! stderr and is hidden when stderr is not a terminal.

use std::fs::File;
use std::io::{BufWriter, Write};
use std::net::SocketAddr;
use std::path::{Path, PathBuf};
use std::sync::atomic::Ordering::Relaxed;
use std::sync::Arc;

use anyhow::Context;
use clap::Args;
use indicatif::{ProgressBar, ProgressDrawTarget, ProgressStyle};
use tokio::sync::broadcast;
use wahbad::core_thread::Published;
use wahbad::estimator::Output;
use wahbad::replay::truth::ARCSEC_PER_RAD;
use wahbad::replay::{self, output, LogInput, ReplayError, ReplayRun, RunOptions, Summary};
use wahbad::report::{self, aem::AemError, aem::AemOptions};
use wahbad::serve::Counters;
use wahbad::settings::{EstimatorFlags, ServeArgs, ServeConfig, TOKEN_ENV};

use super::{bad_input, Failure};

/// Flags of `wahbad replay`.
#[derive(Debug, Args)]
pub struct ReplayArgs {
    /// The log to replay (written by `serve --record` or `simulate --out`).
    #[arg(value_name = "LOG")]
    pub log: PathBuf,
    /// Pace the replay on data time: 1 = real time, 10 = ten times faster
    /// [default: as fast as possible].
    #[arg(long, value_name = "X")]
    pub speed: Option<f64>,
    /// Republish the solutions and alerts to subscribers on this TCP address,
    /// over the wire protocol, so `watch` can follow the replay (sources are refused;
    /// with --speed the subscribers keep up, unpaced they get `lagged`).
    #[arg(long, value_name = "ADDR")]
    pub serve: Option<SocketAddr>,
    /// Write the solution and alert messages as JSON lines to FILE.
    #[arg(long, value_name = "FILE")]
    pub solutions: Option<PathBuf>,
    /// Write one CSV row per epoch to FILE.
    #[arg(long, value_name = "FILE")]
    pub csv: Option<PathBuf>,
    /// Write the summary as JSON to FILE.
    #[arg(long, value_name = "FILE")]
    pub summary: Option<PathBuf>,
    /// Write the SVG report (error, ±3σ, inlier fraction, outliers, alerts) to FILE.svg.
    #[arg(long, value_name = "FILE.svg")]
    pub report: Option<PathBuf>,
    /// Write the attitude as a CCSDS Attitude Ephemeris Message (keyword-value form) to FILE.
    #[arg(long, value_name = "FILE")]
    pub aem: Option<PathBuf>,
    /// UTC of bench time 0 for `--aem`, ISO-8601, e.g. 2026-12-01T00:00:00Z.
    #[arg(long, value_name = "ISO")]
    pub utc_epoch: Option<String>,
    /// Exit 1 when any alert was raised (for scripted campaigns).
    #[arg(long)]
    pub fail_on_alert: bool,
    /// TOML file whose [estimator] table replaces the configuration recorded in the log.
    #[arg(long, value_name = "FILE")]
    pub config: Option<PathBuf>,
    #[command(flatten)]
    pub estimator: EstimatorFlags,
}

fn replay_failure(err: ReplayError) -> Failure {
    if err.is_bad_input() {
        Failure::BadInput(err.into())
    } else {
        Failure::Failed(err.into())
    }
}

fn create(path: &Path) -> Result<BufWriter<File>, Failure> {
    File::create(path)
        .map(BufWriter::new)
        .with_context(|| format!("cannot create {}", path.display()))
        .map_err(Failure::Failed)
}

/// Runs `wahbad replay`.
pub fn run(args: &ReplayArgs) -> Result<(), Failure> {
    if let Some(speed) = args.speed {
        if !(speed.is_finite() && speed > 0.0) {
            return Err(bad_input(format!(
                "--speed must be a finite number > 0, got {speed}"
            )));
        }
    }
    if args.utc_epoch.is_some() && args.aem.is_none() {
        return Err(bad_input("--utc-epoch is only used with --aem"));
    }
    let log = LogInput::open(&args.log).map_err(replay_failure)?;
    let resolved = replay::resolve_config(log.header(), args.config.as_deref(), &args.estimator)
        .map_err(replay_failure)?;
    println!(
        "replay {}: {} bytes, written by {} ({}); configuration: {}",
        args.log.display(),
        log.file_len(),
        log.header().origin,
        log.header().program,
        resolved.source
    );
    let inlier_level = resolved.config.alerts.inlier_fraction.level;
    let mut solutions_out = args
        .solutions
        .as_deref()
        .map(create)
        .transpose()?
        .map(output::JsonLines::new);
    let options = RunOptions {
        speed: args.speed,
        keep_verdicts: args.report.is_some(),
        emit_verdicts: args.solutions.is_some() || args.serve.is_some(),
    };
    let bar = progress_bar(log.file_len());
    let mut progress = |bytes: u64| bar.set_position(bytes);
    let run = match args.serve {
        None => {
            let mut on_output = |out: &Output| match &mut solutions_out {
                Some(lines) => lines.write(out),
                None => Ok(()),
            };
            replay::run(
                log,
                resolved.config,
                &options,
                &mut on_output,
                &mut progress,
            )
            .map_err(replay_failure)?
        }
        Some(addr) => {
            let serve_args = ServeArgs {
                listen: Some(addr),
                ..ServeArgs::default()
            };
            let serve_config = ServeConfig::from_args(&serve_args, std::env::var(TOKEN_ENV).ok())
                .map_err(|err| Failure::BadInput(err.into()))?;
            serve_replay(
                serve_config,
                log,
                resolved.config,
                options,
                solutions_out.take(),
                bar.clone(),
            )?
        }
    };
    bar.finish_and_clear();
    if let Some(lines) = solutions_out {
        lines
            .finish()
            .context("cannot write the solutions file")
            .map_err(Failure::Failed)?;
    }
    report_damage(&args.log, &run);
    finish(args, &run, inlier_level)
}

fn progress_bar(len: u64) -> ProgressBar {
    let bar = ProgressBar::with_draw_target(Some(len), ProgressDrawTarget::stderr());
    bar.set_style(
        ProgressStyle::with_template(
            "{elapsed_precise} [{bar:40}] {bytes}/{total_bytes} eta {eta}",
        )
        .unwrap_or_else(|_| ProgressStyle::default_bar())
        .progress_chars("=> "),
    );
    bar
}

/// Warnings on stderr: what was damaged, where, and what was still used.
fn report_damage(path: &Path, run: &ReplayRun) {
    for warning in &run.warnings {
        eprintln!("wahbad: warning: {}: {warning}", path.display());
    }
    for bad in &run.bad_records {
        eprintln!(
            "wahbad: warning: {}: record {} not used: {}",
            path.display(),
            bad.record,
            bad.reason
        );
    }
    if !run.warnings.is_empty() || !run.bad_records.is_empty() {
        eprintln!(
            "wahbad: warning: {}: replayed the {} good records (header included)",
            path.display(),
            run.n_records.saturating_sub(run.bad_records.len() as u64)
        );
    }
}

/// Outputs written after the replay: CSV, summary, report, AEM; then the exit decision.
fn finish(args: &ReplayArgs, run: &ReplayRun, inlier_level: f64) -> Result<(), Failure> {
    let errors =
        (!run.truth.is_empty()).then(|| replay::errors_against_truth(&run.solutions, &run.truth));
    let error_arcsec: Option<Vec<Option<f64>>> = errors
        .as_ref()
        .map(|errors| errors.iter().map(|e| e.map(|e| e.arcsec)).collect());
    if let Some(path) = &args.csv {
        let mut out = create(path)?;
        output::write_csv(&mut out, &run.solutions, error_arcsec.as_deref())
            .with_context(|| format!("cannot write {}", path.display()))
            .map_err(Failure::Failed)?;
    }
    let summary = Summary::build(&run.solutions, &run.alerts, run.counts, errors.as_deref());
    if let Some(path) = &args.summary {
        let mut out = create(path)?;
        serde_json::to_writer_pretty(&mut out, &summary)
            .map_err(std::io::Error::other)
            .and_then(|()| out.write_all(b"\n"))
            .and_then(|()| out.flush())
            .with_context(|| format!("cannot write {}", path.display()))
            .map_err(Failure::Failed)?;
    }
    extra_outputs(args, run, error_arcsec.as_deref(), inlier_level)?;
    print!("{}", summary.human());
    if args.fail_on_alert && summary.any_alert() {
        return Err(Failure::Failed(anyhow::anyhow!(
            "{} alert(s) raised during the replay (--fail-on-alert)",
            summary.alerts.len()
        )));
    }
    Ok(())
}

/// `--report` and `--aem`.
fn extra_outputs(
    args: &ReplayArgs,
    run: &ReplayRun,
    error_arcsec: Option<&[Option<f64>]>,
    inlier_level: f64,
) -> Result<(), Failure> {
    if let Some(path) = &args.report {
        let error_rad: Option<Vec<f64>> = error_arcsec.map(|errors| {
            errors
                .iter()
                .map(|e| e.map_or(f64::NAN, |arcsec| arcsec / ARCSEC_PER_RAD))
                .collect()
        });
        let title = format!(
            "wahbad replay of {}",
            args.log
                .file_name()
                .map(|name| name.to_string_lossy().into_owned())
                .unwrap_or_default()
        );
        let svg = report::svg::render(
            &run.solutions,
            &run.alerts,
            error_rad.as_deref(),
            inlier_level,
            &title,
        );
        std::fs::write(path, svg)
            .with_context(|| format!("cannot write {}", path.display()))
            .map_err(Failure::Failed)?;
    }
    if let Some(path) = &args.aem {
        let mut opts = AemOptions::default();
        match &args.utc_epoch {
            Some(epoch) => opts.utc_epoch = epoch.clone(),
            None => eprintln!(
                "wahbad: note: no --utc-epoch: bench time 0 is written as {} in {}",
                opts.utc_epoch,
                path.display()
            ),
        }
        let text = report::aem::write(&run.solutions, &opts).map_err(|err| match err {
            AemError::BadUtcEpoch { .. } => Failure::BadInput(err.into()),
            _ => Failure::Failed(anyhow::Error::from(err).context("cannot write the AEM")),
        })?;
        std::fs::write(path, text)
            .with_context(|| format!("cannot write {}", path.display()))
            .map_err(Failure::Failed)?;
    }
    Ok(())
}

/// One output as the live server publishes it (replays always build verdicts).
fn published(output: &Output) -> Published {
    Published::encode(output.clone(), true)
}

/// The replay on a blocking thread while the feed is served to subscribers.
fn serve_replay(
    serve_config: ServeConfig,
    log: LogInput,
    config: wahbad::EstimatorConfig,
    options: RunOptions,
    mut solutions_out: Option<output::JsonLines<BufWriter<File>>>,
    bar: ProgressBar,
) -> Result<ReplayRun, Failure> {
    let runtime = tokio::runtime::Builder::new_multi_thread()
        .worker_threads(2)
        .enable_all()
        .thread_name("wahbad-io")
        .build()
        .context("cannot start the async runtime")
        .map_err(Failure::Failed)?;
    runtime.block_on(async move {
        let tcp = tokio::net::TcpListener::bind(serve_config.listen)
            .await
            .with_context(|| format!("cannot listen on tcp {}", serve_config.listen))
            .map_err(Failure::Failed)?;
        let local = tcp
            .local_addr()
            .map_err(|err| Failure::Failed(err.into()))?;
        println!("listening tcp {local}");
        let _ = std::io::stdout().flush();
        let counters = Arc::new(Counters::default());
        let (feed, template) = broadcast::channel(serve_config.limits.subscriber_queue);
        let (done_tx, done_rx) = tokio::sync::oneshot::channel::<()>();
        let feed_counters = counters.clone();
        let replay = tokio::task::spawn_blocking(move || {
            let mut on_output = |out: &Output| {
                if let Output::Solution(_) = out {
                    feed_counters.epochs.fetch_add(1, Relaxed);
                }
                // No subscriber is not an error: the feed goes on.
                let _ = feed.send(Arc::new(published(out)));
                match &mut solutions_out {
                    Some(lines) => lines.write(out),
                    None => Ok(()),
                }
            };
            let mut progress = |bytes: u64| bar.set_position(bytes);
            let result = replay::run(log, config, &options, &mut on_output, &mut progress);
            drop(feed);
            let _ = done_tx.send(());
            (result, solutions_out)
        });
        let server = wahbad::serve::run_feed(tcp, serve_config, counters, template, async {
            let _ = done_rx.await;
        });
        let (joined, ()) = tokio::join!(replay, server);
        let (result, lines) = joined
            .map_err(|err| Failure::Failed(anyhow::anyhow!("the replay thread failed: {err}")))?;
        if let Some(lines) = lines {
            lines
                .finish()
                .context("cannot write the solutions file")
                .map_err(Failure::Failed)?;
        }
        result.map_err(replay_failure)
    })
}
