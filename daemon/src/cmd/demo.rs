//! `wahbad demo`: the whole program on a fresh machine in one command.
//!
//! Starts the daemon in-process on loopback (port 0, recording to
//! `OUT_DIR/demo.wlog`), subscribes to it and prints the feed as `watch`
//! does, streams the default simulated scenario (with its faults) into it as
//! a TCP source faster than real time, shuts it down, then replays the
//! recording (which reproduces the live solutions bit for bit) to write the
//! summary, the CSV and the SVG report into `OUT_DIR`.

use std::io::Write;
use std::net::SocketAddr;
use std::path::{Path, PathBuf};
use std::time::Instant;

use anyhow::Context;
use clap::Args;
use tokio::net::TcpListener;
use tokio::sync::oneshot;
use wahbad::replay::output::write_csv;
use wahbad::replay::{self, errors_against_truth, LogInput, RunOptions, Summary};
use wahbad::report::svg;
use wahbad::serve::display::{alert_line, lagged_line, legend, solution_line};
use wahbad::serve::{self, Connection, Listeners};
use wahbad::settings::{estimator_config, ServeArgs, ServeConfig};
use wahbad::simulate::feed::{self, StreamReport};
use wahbad::simulate::{Preset, Scenario, Simulator};
use wahbad_protocol::{Alert, Hello, Message, Role, Solution, PROTOCOL_VERSION};

use super::serve::CAUTION;
use super::{bad_input, Failure};

/// Flags of `wahbad demo`.
#[derive(Debug, Args)]
#[command(after_help = CAUTION)]
pub struct DemoArgs {
    /// Directory for the recording, summary, CSV and SVG report.
    #[arg(long, value_name = "DIR", default_value = "wahbad-demo")]
    pub out_dir: PathBuf,
    /// Length of the simulated run, seconds of data time [default 120, the
    /// whole fault timeline].
    #[arg(long, value_name = "SECONDS")]
    pub duration: Option<f64>,
    /// Seed of the simulation [default 1].
    #[arg(long, value_name = "N")]
    pub seed: Option<u64>,
    /// Data seconds streamed per wall second.
    #[arg(long, value_name = "X", default_value_t = 10.0)]
    pub speed: f64,
    /// Print only alerts and the end, not every solution line.
    #[arg(long)]
    pub quiet: bool,
}

/// Subscriber queue of the in-process daemon: room for the whole burst of
/// a fast demo, so the printed feed loses nothing.
const DEMO_SUBSCRIBER_QUEUE: usize = 8192;

/// Runs `wahbad demo`.
pub fn run(args: &DemoArgs) -> Result<(), Failure> {
    let wall = Instant::now();
    println!("{CAUTION}");
    let mut scenario = Scenario::preset(Preset::AllFaults);
    if let Some(duration) = args.duration {
        scenario.duration_s = duration;
    }
    if let Some(seed) = args.seed {
        scenario.seed = seed;
    }
    scenario.validate().map_err(bad_input)?;
    if !(args.speed.is_finite() && args.speed > 0.0) {
        return Err(bad_input(format!(
            "--speed must be finite and > 0, got {}",
            args.speed
        )));
    }
    std::fs::create_dir_all(&args.out_dir)
        .with_context(|| format!("cannot create {}", args.out_dir.display()))
        .map_err(Failure::Failed)?;
    let log = args.out_dir.join("demo.wlog");
    let config = demo_config(&scenario, &log)?;
    println!(
        "# simulating {:.0} s of the bench scenario (faults: false stars 22-32 s, lamp reflection \
         42-50 s, coil transient 55-62 s, star camera dropout 70-80 s) at {}x real time",
        scenario.duration_s, args.speed
    );

    let runtime = tokio::runtime::Builder::new_multi_thread()
        .worker_threads(2)
        .enable_all()
        .thread_name("wahbad-demo")
        .build()
        .context("cannot start the async runtime")
        .map_err(Failure::Failed)?;
    let (sent, live_feed) = runtime.block_on(live(scenario, config, args.speed, args.quiet))?;
    println!(
        "# streamed {} obs, {} rate, {} truth; {} rejected",
        sent.sent.obs, sent.sent.rates, sent.sent.truths, sent.rejected
    );
    report(&log, &args.out_dir, &live_feed)?;
    println!("# demo finished in {:.1} s", wall.elapsed().as_secs_f64());
    Ok(())
}

/// The daemon's settings: loopback port 0, recording, the scenario's sensors.
fn demo_config(scenario: &Scenario, log: &Path) -> Result<ServeConfig, Failure> {
    let args = ServeArgs {
        listen: Some(SocketAddr::from(([127, 0, 0, 1], 0))),
        record: Some(log.to_path_buf()),
        subscriber_queue: Some(DEMO_SUBSCRIBER_QUEUE),
        ..ServeArgs::default()
    };
    let mut config =
        ServeConfig::from_args(&args, None).map_err(|err| Failure::Failed(err.into()))?;
    let table = feed::estimator_table(scenario);
    config.estimator = estimator_config(&table).map_err(|err| Failure::Failed(err.into()))?;
    config.estimator_toml = toml::to_string(&table)
        .context("estimator table")
        .map_err(Failure::Failed)?;
    Ok(config)
}

/// The live part: daemon, subscriber printing the feed, simulated source.
async fn live(
    scenario: Scenario,
    config: ServeConfig,
    speed: f64,
    quiet: bool,
) -> Result<(StreamReport, LiveFeed), Failure> {
    let failed = Failure::Failed;
    let tcp = TcpListener::bind(config.listen)
        .await
        .context("cannot listen on loopback")
        .map_err(failed)?;
    let addr = tcp.local_addr().map_err(|err| failed(err.into()))?;
    println!("# daemon listening on tcp {addr} (in-process)");
    let (stop_tx, stop_rx) = oneshot::channel::<()>();
    let listeners = Listeners {
        tcp,
        unix: None,
        udp: None,
    };
    let server = tokio::spawn(serve::run(listeners, config, async move {
        let _ = stop_rx.await;
    }));

    // Subscribe before the first observation so no epoch is missed.
    let stream = tokio::net::TcpStream::connect(addr)
        .await
        .context("cannot subscribe to the in-process daemon")
        .map_err(failed)?;
    let mut conn = Connection::new(stream);
    conn.write_message(&Message::Hello(Hello {
        version: PROTOCOL_VERSION,
        role: Role::Subscriber,
        name: Some("wahbad demo".into()),
        token: None,
        verdicts: Some(true),
    }))
    .await
    .context("cannot send hello")
    .map_err(failed)?;
    match conn.read_message().await {
        Ok(Some(Message::Welcome(_))) => {}
        other => {
            return Err(failed(anyhow::anyhow!(
                "the in-process daemon did not welcome the subscriber: {other:?}"
            )))
        }
    }
    println!("{}", legend());
    let printer = tokio::spawn(print_feed(conn, quiet));

    let sim = Simulator::new(&scenario).map_err(bad_input)?;
    let source = tokio::task::spawn_blocking(move || feed::stream_to(sim, addr, speed, None));
    let sent = source
        .await
        .context("the simulated source panicked")
        .map_err(failed)?
        .context("streaming the simulation")
        .map_err(failed)?;
    let _ = stop_tx.send(());
    let summary = server
        .await
        .context("the daemon task panicked")
        .map_err(failed)?
        .context("the in-process daemon")
        .map_err(failed)?;
    let live_feed = printer
        .await
        .context("the feed printer panicked")
        .map_err(failed)?;
    if let Some(err) = summary.core.record_error {
        return Err(failed(anyhow::anyhow!(
            "the recording is incomplete: {err}"
        )));
    }
    Ok((sent, live_feed))
}

/// What the subscriber saw of the live feed.
#[derive(Debug, Default)]
struct LiveFeed {
    solutions: Vec<Solution>,
    alerts: Vec<Alert>,
    /// Messages the daemon skipped for this subscriber (it fell behind).
    skipped: u64,
}

/// Prints the feed as `watch` does, until the daemon says goodbye.
async fn print_feed(mut conn: Connection<tokio::net::TcpStream>, quiet: bool) -> LiveFeed {
    let mut feed = LiveFeed::default();
    // Locked per line: the lock is not held across an await.
    while let Ok(Some(msg)) = conn.read_message().await {
        let line = match msg {
            Message::Solution(solution) => {
                let line = (!quiet).then(|| solution_line(&solution));
                feed.solutions.push(solution);
                match line {
                    Some(line) => line,
                    None => continue,
                }
            }
            Message::Alert(alert) => {
                let line = alert_line(&alert);
                feed.alerts.push(alert);
                line
            }
            Message::Lagged(lagged) => {
                feed.skipped += lagged.skipped;
                lagged_line(&lagged)
            }
            Message::Error(_) => break,
            _ => continue,
        };
        let mut out = std::io::stdout().lock();
        if writeln!(out, "{line}").and_then(|()| out.flush()).is_err() {
            break;
        }
    }
    feed
}

/// Replays the recording into the summary, CSV and SVG report.
fn report(log: &Path, out_dir: &Path, live: &LiveFeed) -> Result<(), Failure> {
    let failed = |err: anyhow::Error| Failure::Failed(err);
    let input = LogInput::open(log)
        .context("cannot open the demo's recording")
        .map_err(failed)?;
    let config = input
        .header()
        .estimator_config()
        .context("the recorded configuration")
        .map_err(failed)?;
    let inlier_level = config.alerts.inlier_fraction.level;
    let options = RunOptions {
        speed: None,
        keep_verdicts: true,
        emit_verdicts: true,
    };
    let run = replay::run(input, config, &options, &mut |_| Ok(()), &mut |_| {})
        .context("replaying the demo's recording")
        .map_err(failed)?;
    let errors = (!run.truth.is_empty()).then(|| errors_against_truth(&run.solutions, &run.truth));
    let summary = Summary::build(&run.solutions, &run.alerts, run.counts, errors.as_deref());

    let summary_path = out_dir.join("summary.json");
    let json = serde_json::to_string_pretty(&summary).map_err(|err| failed(err.into()))?;
    write_file(&summary_path, format!("{json}\n").as_bytes())?;

    let csv_path = out_dir.join("demo.csv");
    let error_arcsec: Option<Vec<Option<f64>>> = errors
        .as_ref()
        .map(|errors| errors.iter().map(|e| e.map(|e| e.arcsec)).collect());
    let mut csv = Vec::new();
    write_csv(&mut csv, &run.solutions, error_arcsec.as_deref())
        .map_err(|err| failed(err.into()))?;
    write_file(&csv_path, &csv)?;

    let svg_path = out_dir.join("report.svg");
    let error_rad: Option<Vec<f64>> = error_arcsec.as_ref().map(|errors| {
        errors
            .iter()
            .map(|e| e.map_or(f64::NAN, |arcsec| arcsec / ARCSEC_PER_RAD))
            .collect()
    });
    let svg = svg::render(
        &run.solutions,
        &run.alerts,
        error_rad.as_deref(),
        inlier_level,
        "wahbad demo: simulated air-bearing table with faults",
    );
    write_file(&svg_path, svg.as_bytes())?;

    // The recording must reproduce the live feed exactly (verdicts included).
    let same = live.skipped == 0 && live.solutions == run.solutions && live.alerts == run.alerts;
    if same {
        println!(
            "# replay of the recording: {} solutions and {} alert messages, identical to the live feed",
            run.solutions.len(),
            run.alerts.len()
        );
    } else {
        println!(
            "# WARNING: the replay of the recording differs from the live feed \
             ({} live solutions, {} replayed; {} skipped for this subscriber)",
            live.solutions.len(),
            run.solutions.len(),
            live.skipped
        );
    }
    println!("# summary:");
    print!("{}", summary.human());
    println!("# recording: {}", log.display());
    println!("# summary:   {}", summary_path.display());
    println!("# csv:       {}", csv_path.display());
    println!("# report:    {}", svg_path.display());
    Ok(())
}

/// Arcseconds per radian (648000 / π).
const ARCSEC_PER_RAD: f64 = 648_000.0 / std::f64::consts::PI;

fn write_file(path: &Path, bytes: &[u8]) -> Result<(), Failure> {
    std::fs::write(path, bytes)
        .with_context(|| format!("cannot write {}", path.display()))
        .map_err(Failure::Failed)
}
