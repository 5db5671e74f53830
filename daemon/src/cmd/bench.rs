//! `wahbad bench`: end-to-end figures as one JSON object on stdout.
//!
//! - live: for each `--rates` value, a fresh `wahbad serve` on a loopback port
//!   and a separate load-generator process (`wahbad bench --load-generator`,
//!   see [`wahbad::loadgen`]) streaming to it with one subscriber; the serve
//!   process's resident memory (`/proc/PID/status` `VmRSS`, `VmHWM`) and CPU
//!   time are sampled while it runs;
//! - memory: the same at `--memory-rate` for `--memory-s`, RSS sampled every second;
//! - replay: the default simulated scenario and a dense variant (40 stars per
//!   frame) written in memory as a recording, then read back twice: decode-only
//!   (read + frame decode + validate) and full replay (the same plus the
//!   estimator). Done in-process with the simulator library and the record
//!   writer, because the `replay` and `simulate --out` commands are not on this
//!   branch.

use std::io::{BufRead, BufReader};
use std::net::SocketAddr;
use std::process::{Child, Command, Stdio};
use std::time::{Duration, Instant};

use anyhow::{anyhow, bail, Context};
use clap::Args;
use serde_json::{json, Value};
use wahbad::estimator::{Estimator, EstimatorConfig, Output};
use wahbad::loadgen::{self, LoadSpec};
use wahbad::record::{record_input, unix_now_ns, LogHeader, LogReader, LogWriter};
use wahbad::simulate::{Scenario, Simulator};
use wahbad_protocol::{encode_body, PROTOCOL_VERSION};

use super::Failure;

/// Flags of `wahbad bench`.
#[derive(Debug, Args)]
pub struct BenchArgs {
    /// Live runs: messages per second sent by the load generator, comma-separated.
    #[arg(long, value_delimiter = ',', default_values_t = [2_000.0, 200_000.0])]
    pub rates: Vec<f64>,
    /// Seconds of sending per live run.
    #[arg(long, default_value_t = 10.0)]
    pub duration_s: f64,
    /// Rate of the memory run, messages/s (0: no memory run).
    #[arg(long, default_value_t = 50_000.0)]
    pub memory_rate: f64,
    /// Seconds of the memory run.
    #[arg(long, default_value_t = 60.0)]
    pub memory_s: f64,
    /// Repetitions of each replay measurement (the median is reported).
    #[arg(long, default_value_t = 5)]
    pub replay_runs: usize,
    /// Skip the live and memory runs.
    #[arg(long)]
    pub no_live: bool,
    /// Subscriber asks for per-observation verdicts.
    #[arg(long)]
    pub verdicts: bool,
    /// Internal: run as the load generator against `--addr`.
    #[arg(long, hide = true)]
    pub load_generator: bool,
    /// Internal: the daemon's address (load generator).
    #[arg(long, hide = true)]
    pub addr: Option<SocketAddr>,
    /// Internal: the rate (load generator).
    #[arg(long, hide = true)]
    pub rate: Option<f64>,
}

/// Default epoch period and latency allowance of `serve`, ns.
const PERIOD_NS: i64 = 100_000_000;
const LATENCY_NS: i64 = 50_000_000;

/// Runs `wahbad bench`.
pub fn run(args: &BenchArgs) -> Result<(), Failure> {
    if args.load_generator {
        return load_generator(args).map_err(Failure::Failed);
    }
    let figures = orchestrate(args).map_err(Failure::Failed)?;
    println!(
        "{}",
        serde_json::to_string_pretty(&figures).map_err(|e| Failure::Failed(e.into()))?
    );
    Ok(())
}

fn load_generator(args: &BenchArgs) -> anyhow::Result<()> {
    let spec = LoadSpec {
        addr: args.addr.context("--addr is required")?,
        rate: args.rate.context("--rate is required")?,
        duration: Duration::from_secs_f64(args.duration_s),
        period_ns: PERIOD_NS,
        latency_ns: LATENCY_NS,
        verdicts: args.verdicts,
    };
    let report = loadgen::run(&spec)?;
    println!("{}", serde_json::to_string(&report)?);
    Ok(())
}

fn orchestrate(args: &BenchArgs) -> anyhow::Result<Value> {
    let mut live = Vec::new();
    let mut memory = Value::Null;
    if !args.no_live {
        for &rate in &args.rates {
            eprintln!(
                "wahbad bench: live run at {rate}/s for {} s",
                args.duration_s
            );
            live.push(live_run(rate, args.duration_s, args.verdicts, 0.25)?);
        }
        if args.memory_rate > 0.0 {
            eprintln!(
                "wahbad bench: memory run at {}/s for {} s",
                args.memory_rate, args.memory_s
            );
            memory = live_run(args.memory_rate, args.memory_s, args.verdicts, 1.0)?;
        }
    }
    eprintln!("wahbad bench: replay figures");
    let replay = replay_figures(args.replay_runs.max(1))?;
    Ok(json!({
        "machine": machine(),
        "latency_definition": "from the load generator handing the frame of the epoch-closing \
            observation to the kernel (monotonic clock, before write) to its subscriber thread \
            having decoded that epoch's solution; generator and subscriber share one process, \
            separate from serve",
        "live": live,
        "memory": memory,
        "replay": replay,
    }))
}

fn machine() -> Value {
    let cpuinfo = std::fs::read_to_string("/proc/cpuinfo").unwrap_or_default();
    let model = cpuinfo
        .lines()
        .find(|l| l.starts_with("model name"))
        .and_then(|l| l.split(':').nth(1))
        .map(|s| s.trim().to_string());
    json!({
        "nproc": std::thread::available_parallelism().map(|n| n.get()).ok(),
        "cpu_model": model,
    })
}

/// Kills the child when dropped (serve on any error path).
struct Reaped(Child);

impl Drop for Reaped {
    fn drop(&mut self) {
        let _ = self.0.kill();
        let _ = self.0.wait();
    }
}

fn live_run(rate: f64, duration_s: f64, verdicts: bool, sample_s: f64) -> anyhow::Result<Value> {
    let exe = std::env::current_exe().context("cannot find the wahbad binary")?;
    let mut serve = Reaped(
        Command::new(&exe)
            .args(["serve", "--listen", "127.0.0.1:0"])
            .stdout(Stdio::piped())
            .stderr(Stdio::null())
            .spawn()
            .context("cannot start wahbad serve")?,
    );
    let serve_pid = serve.0.id();
    let stdout = serve.0.stdout.take().context("serve stdout")?;
    let mut line = String::new();
    BufReader::new(stdout).read_line(&mut line)?;
    let addr = line
        .trim()
        .strip_prefix("listening tcp ")
        .ok_or_else(|| anyhow!("unexpected serve output {line:?}"))?
        .to_string();
    let rss_idle_kb = proc_status_kb(serve_pid, "VmRSS:");
    let mut gen = Command::new(&exe);
    gen.args(["bench", "--load-generator", "--addr", &addr])
        .args(["--rate", &rate.to_string()])
        .args(["--duration-s", &duration_s.to_string()])
        .stdout(Stdio::piped());
    if verdicts {
        gen.arg("--verdicts");
    }
    let mut gen = Reaped(gen.spawn().context("cannot start the load generator")?);
    let started = Instant::now();
    let mut rss_kb = Vec::new();
    let cpu0 = proc_cpu_s(serve_pid);
    loop {
        if gen.0.try_wait()?.is_some() {
            break;
        }
        std::thread::sleep(Duration::from_secs_f64(sample_s));
        if let Some(kb) = proc_status_kb(serve_pid, "VmRSS:") {
            rss_kb.push((started.elapsed().as_secs_f64(), kb));
        }
    }
    let wall_s = started.elapsed().as_secs_f64();
    let cpu_s = match (cpu0, proc_cpu_s(serve_pid)) {
        (Some(a), Some(b)) => Some(b - a),
        _ => None,
    };
    let hwm_kb = proc_status_kb(serve_pid, "VmHWM:");
    let mut out = String::new();
    use std::io::Read;
    gen.0
        .stdout
        .take()
        .context("generator stdout")?
        .read_to_string(&mut out)?;
    let status = gen.0.wait()?;
    if !status.success() {
        bail!("the load generator failed ({status})");
    }
    let load: Value = serde_json::from_str(out.trim()).context("load generator output")?;
    // Graceful stop of serve (SIGTERM); the guard kills it if that fails.
    let _ = Command::new("kill")
        .args(["-TERM", &serve_pid.to_string()])
        .status();
    let _ = serve.0.wait();
    let rss_values: Vec<u64> = rss_kb.iter().map(|&(_, kb)| kb).collect();
    Ok(json!({
        "rate_target": rate,
        "load": load,
        "serve": {
            "rss_idle_kb": rss_idle_kb,
            "vm_hwm_kb": hwm_kb,
            "rss_first_kb": rss_values.first(),
            "rss_max_kb": rss_values.iter().max(),
            "rss_last_kb": rss_values.last(),
            "rss_samples_kb": if sample_s >= 1.0 { json!(rss_kb) } else { Value::Null },
            "cpu_s": cpu_s,
            "cpu_share_of_wall": cpu_s.map(|c| c / wall_s),
        },
    }))
}

/// A `kB` line of `/proc/PID/status`.
fn proc_status_kb(pid: u32, key: &str) -> Option<u64> {
    let text = std::fs::read_to_string(format!("/proc/{pid}/status")).ok()?;
    let line = text.lines().find(|l| l.starts_with(key))?;
    line.split_whitespace().nth(1)?.parse().ok()
}

/// User + system CPU seconds of a process (`/proc/PID/stat`, clock ticks of 100 Hz assumed).
fn proc_cpu_s(pid: u32) -> Option<f64> {
    let text = std::fs::read_to_string(format!("/proc/{pid}/stat")).ok()?;
    let after = text.rsplit_once(')')?.1;
    let fields: Vec<&str> = after.split_whitespace().collect();
    // After the command name: state is field 3; utime 14 and stime 15 (1-based).
    let utime: f64 = fields.get(11)?.parse().ok()?;
    let stime: f64 = fields.get(12)?.parse().ok()?;
    Some((utime + stime) / 100.0)
}

/// A scenario as an in-memory recording, with the data duration in s.
fn recording(scenario: &Scenario) -> anyhow::Result<(Vec<u8>, f64, usize)> {
    let sim = Simulator::new(scenario)?;
    let duration_s = sim.duration_ns() as f64 * 1e-9;
    let header = LogHeader {
        created_ns: unix_now_ns(),
        program: format!("wahbad {}", env!("CARGO_PKG_VERSION")),
        protocol: PROTOCOL_VERSION,
        origin: "bench".into(),
        config: String::new(),
    };
    let mut writer = LogWriter::new(Vec::new(), &header)?;
    let mut n_messages = 0;
    let t0 = unix_now_ns();
    for msg in sim {
        let t = match &msg {
            wahbad_protocol::Message::Obs(o) => o.t,
            wahbad_protocol::Message::Rate(r) => r.t,
            wahbad_protocol::Message::Truth(t) => t.t,
            _ => 0,
        };
        writer.write_frame(t0 + t, &encode_body(&msg))?;
        n_messages += 1;
    }
    let bytes = writer.finish("finished", unix_now_ns())?;
    Ok((bytes, duration_s, n_messages))
}

/// One pass over the log: decode + validate, and the estimator when `estimate`.
/// Returns (seconds, observations, solutions).
fn pass(log: &[u8], estimate: bool) -> anyhow::Result<(f64, u64, u64)> {
    let start = Instant::now();
    let mut reader = LogReader::new(log)?;
    let mut estimator = Estimator::new(EstimatorConfig::default())?;
    let mut outputs: Vec<Output> = Vec::new();
    let (mut n_obs, mut n_solutions) = (0u64, 0u64);
    while let Some(record) = reader.next_record()? {
        let Some(input) = record_input(&record)? else {
            break;
        };
        if matches!(input, wahbad::Input::Obs(_)) {
            n_obs += 1;
        }
        if estimate {
            let _ = estimator.ingest(input, &mut outputs);
            n_solutions += outputs
                .iter()
                .filter(|o| matches!(o, Output::Solution(_)))
                .count() as u64;
            outputs.clear();
        } else {
            std::hint::black_box(input);
        }
    }
    Ok((start.elapsed().as_secs_f64(), n_obs, n_solutions))
}

fn median(xs: &mut [f64]) -> f64 {
    xs.sort_by(f64::total_cmp);
    xs[xs.len() / 2]
}

fn replay_figures(runs: usize) -> anyhow::Result<Value> {
    let mut out = serde_json::Map::new();
    let mut dense = Scenario::default();
    dense.star_cam.stars_per_frame = 40;
    for (name, scenario) in [("default", Scenario::default()), ("dense_40_stars", dense)] {
        let (log, duration_s, n_messages) = recording(&scenario)?;
        let (mut replay_s, mut decode_s, mut ratios) = (Vec::new(), Vec::new(), Vec::new());
        let (mut n_obs, mut n_solutions) = (0, 0);
        for _ in 0..runs {
            let (d, _, _) = pass(&log, false)?;
            let (r, obs, sols) = pass(&log, true)?;
            (n_obs, n_solutions) = (obs, sols);
            decode_s.push(d);
            replay_s.push(r);
            ratios.push(r / d);
        }
        let (r, d) = (median(&mut replay_s), median(&mut decode_s));
        out.insert(
            name.into(),
            json!({
                "data_s": duration_s,
                "messages": n_messages,
                "observations": n_obs,
                "solutions": n_solutions,
                "log_bytes": log.len(),
                "replay_s_median": r,
                "decode_only_s_median": d,
                "real_time_factor": duration_s / r,
                "replay_obs_per_s": n_obs as f64 / r,
                "decode_only_obs_per_s": n_obs as f64 / d,
                "replay_over_decode_per_run": ratios,
                "replay_over_decode_median": median(&mut ratios.clone()),
            }),
        );
    }
    out.insert(
        "note".into(),
        json!(
            "in-process: simulator library + record writer into memory, read back with the \
               record reader; `wahbad replay` / `simulate --out` are not on this branch"
        ),
    );
    Ok(Value::Object(out))
}
