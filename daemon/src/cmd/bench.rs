//! `wahbad bench`: end-to-end figures as one JSON object on stdout.
//!
//! - live: for each `--rates` value, a fresh `wahbad serve` on a loopback port
//!   and a separate load-generator process (`wahbad bench --load-generator`,
//!   see [`wahbad::loadgen`]) streaming to it with one subscriber; the serve
//!   process's resident memory (`/proc/PID/status` `VmRSS`, `VmHWM`) and CPU
//!   time are sampled while it runs;
//! - memory: the same at `--memory-rate` for `--memory-s`, RSS sampled every second;
//! - replay: logs of the default simulated scenario and of a dense variant
//!   (40 stars per frame) written by `wahbad simulate --out`; `wahbad replay`
//!   timed on them as a child process, and the same logs read in this process
//!   twice: decode-only (read + frame decode + validate) and full replay (the
//!   same plus the estimator), for the ratio.

use std::ffi::OsStr;
use std::io::{BufRead, BufReader};
use std::net::SocketAddr;
use std::path::{Path, PathBuf};
use std::process::{Child, Command, Stdio};
use std::time::{Duration, Instant};

use anyhow::{anyhow, bail, Context};
use clap::Args;
use serde_json::{json, Value};
use wahbad::estimator::{Estimator, Output};
use wahbad::loadgen::{self, LoadSpec};
use wahbad::record::{record_input, LogReader};
use wahbad::replay::resolve_config;
use wahbad::settings::EstimatorFlags;

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
    /// Seconds of data time of the simulated replay logs.
    #[arg(long, default_value_t = 600.0)]
    pub replay_duration_s: f64,
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
    let replay = replay_figures(args.replay_runs.max(1), args.replay_duration_s)?;
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
    let steal0 = host_steal_s();
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
    let steal_s = match (steal0, host_steal_s()) {
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
        // CPU time the hypervisor gave to others while this machine's CPUs
        // wanted it, summed over CPUs: latency tails follow it on shared hosts.
        "host_steal_s": steal_s,
    }))
}

/// Steal time of all CPUs so far, s (`/proc/stat`, 8th value of the `cpu`
/// line, ticks of 100 Hz assumed); `None` where there is no such file.
fn host_steal_s() -> Option<f64> {
    let text = std::fs::read_to_string("/proc/stat").ok()?;
    let line = text.lines().find(|l| l.starts_with("cpu "))?;
    let ticks: f64 = line.split_whitespace().nth(8)?.parse().ok()?;
    Some(ticks / 100.0)
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

/// One pass over the log: decode + validate, and the estimator (configured
/// from the log header, as `wahbad replay` does) when `estimate`.
/// Returns (seconds, observations, solutions).
fn pass(log: &[u8], estimate: bool) -> anyhow::Result<(f64, u64, u64)> {
    let start = Instant::now();
    let mut reader = LogReader::new(log)?;
    let config = resolve_config(reader.header(), None, &EstimatorFlags::default())?.config;
    let mut estimator = Estimator::new(config)?;
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

/// Runs `wahbad ARGS` to completion; its stdout is discarded. Returns wall seconds.
fn run_wahbad(exe: &Path, args: &[&OsStr]) -> anyhow::Result<f64> {
    let start = Instant::now();
    let out = Command::new(exe)
        .args(args)
        .stdin(Stdio::null())
        .stdout(Stdio::null())
        .stderr(Stdio::piped())
        .output()
        .with_context(|| format!("cannot run {}", exe.display()))?;
    let wall = start.elapsed().as_secs_f64();
    if !out.status.success() {
        bail!(
            "`wahbad {}` failed ({}): {}",
            args.iter()
                .map(|a| a.to_string_lossy())
                .collect::<Vec<_>>()
                .join(" "),
            out.status,
            String::from_utf8_lossy(&out.stderr).trim()
        );
    }
    Ok(wall)
}

/// A scratch directory removed on drop.
struct ScratchDir(PathBuf);

impl Drop for ScratchDir {
    fn drop(&mut self) {
        let _ = std::fs::remove_dir_all(&self.0);
    }
}

fn replay_figures(runs: usize, duration_s: f64) -> anyhow::Result<Value> {
    let exe = std::env::current_exe().context("cannot find the wahbad binary")?;
    let dir = ScratchDir(std::env::temp_dir().join(format!("wahbad-bench-{}", std::process::id())));
    std::fs::create_dir_all(&dir.0)
        .with_context(|| format!("cannot create {}", dir.0.display()))?;
    let mut out = serde_json::Map::new();
    let duration = duration_s.to_string();
    for (name, extra) in [("default", None), ("dense_40_stars", Some("40"))] {
        let log_path = dir.0.join(format!("{name}.wlog"));
        let summary_path = dir.0.join(format!("{name}.summary.json"));
        let mut simulate: Vec<&OsStr> = vec![
            "simulate".as_ref(),
            "--duration".as_ref(),
            duration.as_ref(),
            "--out".as_ref(),
            log_path.as_os_str(),
        ];
        if let Some(stars) = extra {
            simulate.extend([OsStr::new("--stars-per-frame"), OsStr::new(stars)]);
        }
        eprintln!("wahbad bench: simulating {name} ({duration_s} s of data)");
        run_wahbad(&exe, &simulate)?;
        let log = std::fs::read(&log_path)
            .with_context(|| format!("cannot read {}", log_path.display()))?;
        let replay_args: [&OsStr; 4] = [
            "replay".as_ref(),
            log_path.as_os_str(),
            "--summary".as_ref(),
            summary_path.as_os_str(),
        ];
        let (mut binary_s, mut in_process_s, mut decode_s) = (Vec::new(), Vec::new(), Vec::new());
        let (mut n_obs, mut n_solutions) = (0, 0);
        for run in 0..runs {
            eprintln!("wahbad bench: replay {name}, run {} of {runs}", run + 1);
            let (d, _, _) = pass(&log, false)?;
            let (r, obs, sols) = pass(&log, true)?;
            let b = run_wahbad(&exe, &replay_args)?;
            (n_obs, n_solutions) = (obs, sols);
            decode_s.push(d);
            in_process_s.push(r);
            binary_s.push(b);
        }
        let summary: Value = serde_json::from_slice(&std::fs::read(&summary_path)?)
            .context("the replay summary is not JSON")?;
        let (b, r, d) = (
            median(&mut binary_s),
            median(&mut in_process_s),
            median(&mut decode_s),
        );
        out.insert(
            name.into(),
            json!({
                "data_s": duration_s,
                "observations": n_obs,
                "solutions_in_process": n_solutions,
                "replay_summary_epochs": summary.get("epochs"),
                "log_bytes": log.len(),
                "replay_binary_s_median": b,
                "replay_binary_s_per_run": binary_s,
                "real_time_factor": duration_s / b,
                "replay_obs_per_s": n_obs as f64 / b,
                "replay_in_process_s_median": r,
                "real_time_factor_in_process": duration_s / r,
                "replay_in_process_obs_per_s": n_obs as f64 / r,
                "decode_only_s_median": d,
                "decode_only_obs_per_s": n_obs as f64 / d,
                "replay_binary_over_decode_only": b / d,
                "replay_in_process_over_decode_only": r / d,
            }),
        );
    }
    out.insert(
        "note".into(),
        json!(
            "logs written by `wahbad simulate --duration D --out` (default all_faults scenario; \
               dense: --stars-per-frame 40); replay_binary: wall time of `wahbad replay LOG \
               --summary FILE` as a child process (start-up, file read and summary included); \
               in_process and decode_only: the same log read from memory in this process, \
               with and without the estimator (configured from the log header)"
        ),
    );
    Ok(Value::Object(out))
}
