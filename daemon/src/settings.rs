//! Settings of `serve` (and the estimator flags `replay` shares): raw command
//! line flags, the TOML `--config` file, and the validated [`ServeConfig`].
//!
//! Precedence: a flag given on the command line, else the key in the config
//! file, else the documented default. The `[estimator]` table of the file is
//! the estimator's own configuration; the estimator flags patch it before it
//! is parsed, and the patched table is what a recording stores as "the
//! configuration in force".

use std::fmt;
use std::net::SocketAddr;
use std::path::{Path, PathBuf};
use std::time::Duration;

use clap::Args;
use serde::Deserialize;

use crate::estimator::EstimatorConfig;

/// Default TCP listen address.
pub const DEFAULT_LISTEN: &str = "127.0.0.1:7600";
/// Environment variable that may hold the shared token instead of `--token-file`.
pub const TOKEN_ENV: &str = "WAHBAD_TOKEN";

/// Estimator flags common to `serve` and `replay`; each overrides a key of
/// the config file's `[estimator]` table.
#[derive(Debug, Clone, Default, Args)]
pub struct EstimatorFlags {
    /// Epoch period P, ms of data time [estimator.period_ms; default 100].
    #[arg(long, value_name = "MS")]
    pub period_ms: Option<u64>,
    /// Window span S, ms: epoch E uses observations with E-S < t <= E
    /// [estimator.span_ms; default 1000].
    #[arg(long, value_name = "MS")]
    pub span_ms: Option<u64>,
    /// Latency allowance L, ms: epoch E is solved once data time reaches E+L
    /// [estimator.latency_ms; default 50].
    #[arg(long, value_name = "MS")]
    pub latency_ms: Option<u64>,
    /// Solver: auto, svd, q-method, triad, lud, gnc-tls, consensus
    /// [estimator.method; default auto].
    #[arg(long, value_name = "NAME")]
    pub method: Option<String>,
    /// Inlier-fraction alert level, 0..1; below it solutions are `degraded`
    /// [estimator.alerts.inlier_fraction.level; default 0.6].
    #[arg(long, value_name = "FRACTION")]
    pub inlier_min: Option<f64>,
    /// Hold time of every alert (raise and clear), ms of data time
    /// [estimator.alerts.*.hold_ms and unobservable_hold_ms; default 1000].
    #[arg(long, value_name = "MS")]
    pub hold_ms: Option<u64>,
}

/// Raw flags of `wahbad serve`.
#[derive(Debug, Clone, Default, Args)]
pub struct ServeArgs {
    /// TOML configuration file ([serve] and [estimator] tables); flags override it.
    #[arg(long, value_name = "FILE")]
    pub config: Option<PathBuf>,
    /// TCP address for sources and subscribers [serve.listen; default 127.0.0.1:7600].
    #[arg(long, value_name = "ADDR")]
    pub listen: Option<SocketAddr>,
    /// Also listen on a Unix-domain stream socket at PATH [serve.unix].
    #[arg(long, value_name = "PATH")]
    pub unix: Option<PathBuf>,
    /// Also accept source datagrams on this UDP address [serve.udp].
    #[arg(long, value_name = "ADDR")]
    pub udp: Option<SocketAddr>,
    /// File holding the shared token required in hello and in every UDP message
    /// [serve.token_file]; else the WAHBAD_TOKEN environment variable.
    #[arg(long, value_name = "FILE")]
    pub token_file: Option<PathBuf>,
    /// Record every input handed to the estimator, with its receive time, to FILE
    /// [serve.record].
    #[arg(long, value_name = "FILE")]
    pub record: Option<PathBuf>,
    /// Most open stream connections; more are answered `busy`
    /// [serve.max_connections; default 64].
    #[arg(long, value_name = "N")]
    pub max_connections: Option<usize>,
    /// Time a new connection has to send hello, ms [serve.hello_timeout_ms; default 5000].
    #[arg(long, value_name = "MS")]
    pub hello_timeout_ms: Option<u64>,
    /// Messages queued per subscriber before the oldest are dropped
    /// [serve.subscriber_queue; default 256].
    #[arg(long, value_name = "N")]
    pub subscriber_queue: Option<usize>,
    /// A subscriber whose socket accepts nothing for this long is disconnected, ms
    /// [serve.subscriber_timeout_ms; default 5000].
    #[arg(long, value_name = "MS")]
    pub subscriber_timeout_ms: Option<u64>,
    /// Inputs queued for the estimator thread [serve.core_queue; default 1024].
    #[arg(long, value_name = "N")]
    pub core_queue: Option<usize>,
    /// Live clock tick interval while sources are quiet, ms [serve.tick_ms; default 20].
    #[arg(long, value_name = "MS")]
    pub tick_ms: Option<u64>,
    #[command(flatten)]
    pub estimator: EstimatorFlags,
}

/// The `[serve]` table of the config file; every key optional.
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(default, deny_unknown_fields)]
struct ServeTable {
    listen: Option<SocketAddr>,
    unix: Option<PathBuf>,
    udp: Option<SocketAddr>,
    token_file: Option<PathBuf>,
    record: Option<PathBuf>,
    max_connections: Option<usize>,
    hello_timeout_ms: Option<u64>,
    subscriber_queue: Option<usize>,
    subscriber_timeout_ms: Option<u64>,
    core_queue: Option<usize>,
    tick_ms: Option<u64>,
}

/// The whole config file.
#[derive(Debug, Clone, Default, Deserialize)]
#[serde(default, deny_unknown_fields)]
struct ConfigFile {
    serve: ServeTable,
    estimator: toml::Table,
}

/// The shared secret. Its `Debug` and `Display` never show it.
#[derive(Clone, PartialEq, Eq)]
pub struct Token(String);

impl Token {
    /// Wraps a secret; surrounding whitespace (a file's trailing newline) is removed.
    pub fn new(secret: &str) -> Result<Self, SettingsError> {
        let secret = secret.trim();
        if secret.is_empty() {
            return Err(SettingsError::EmptyToken);
        }
        Ok(Token(secret.to_string()))
    }

    /// The secret's bytes, for masking in recordings.
    pub fn as_bytes(&self) -> &[u8] {
        self.0.as_bytes()
    }

    /// Compares with an offered token without stopping at the first difference.
    pub fn matches(&self, offered: Option<&str>) -> bool {
        let Some(offered) = offered else {
            return false;
        };
        let (a, b) = (self.0.as_bytes(), offered.as_bytes());
        let mut diff = (a.len() != b.len()) as u8;
        for idx in 0..a.len().max(b.len()) {
            diff |= a.get(idx).unwrap_or(&0) ^ b.get(idx).unwrap_or(&0);
        }
        diff == 0
    }
}

impl fmt::Debug for Token {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str("Token(<redacted>)")
    }
}

impl fmt::Display for Token {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str("<redacted>")
    }
}

/// Limits of the server; each hit is answered by the protocol and counted.
#[derive(Debug, Clone, PartialEq)]
pub struct Limits {
    /// Most open stream connections.
    pub max_connections: usize,
    /// Time allowed for the first frame.
    pub hello_timeout: Duration,
    /// Messages queued per subscriber.
    pub subscriber_queue: usize,
    /// Time a subscriber's socket may accept nothing before it is dropped.
    pub subscriber_timeout: Duration,
    /// Inputs queued for the estimator thread.
    pub core_queue: usize,
}

/// Validated settings of `serve`.
#[derive(Debug, Clone)]
pub struct ServeConfig {
    /// TCP listen address.
    pub listen: SocketAddr,
    /// Unix-domain socket path, if any.
    pub unix: Option<PathBuf>,
    /// UDP address for source datagrams, if any.
    pub udp: Option<SocketAddr>,
    /// The shared token, if one is configured.
    pub token: Option<Token>,
    /// Recording path, if any.
    pub record: Option<PathBuf>,
    /// Server limits.
    pub limits: Limits,
    /// Live clock tick interval.
    pub tick: Duration,
    /// The estimator configuration.
    pub estimator: EstimatorConfig,
    /// The `[estimator]` table in force (after flag overrides), as TOML text.
    pub estimator_toml: String,
}

/// Why the settings cannot be used.
#[derive(Debug, thiserror::Error)]
#[non_exhaustive]
pub enum SettingsError {
    /// The config file cannot be read.
    #[error("cannot read config file {path}: {source}")]
    ReadConfig {
        /// The file.
        path: PathBuf,
        /// The reason.
        source: std::io::Error,
    },
    /// The config file is not valid TOML or has unknown keys.
    #[error("config file {path}: {message}")]
    ParseConfig {
        /// The file.
        path: PathBuf,
        /// The parser's message.
        message: String,
    },
    /// The estimator configuration is invalid.
    #[error("estimator configuration: {0}")]
    Estimator(String),
    /// The token file cannot be read.
    #[error("cannot read token file {path}: {source}")]
    ReadToken {
        /// The file.
        path: PathBuf,
        /// The reason.
        source: std::io::Error,
    },
    /// The token is empty.
    #[error("the token is empty")]
    EmptyToken,
    /// A numeric setting is out of range.
    #[error("`{name}` {problem}")]
    Invalid {
        /// The setting.
        name: &'static str,
        /// What is wrong.
        problem: &'static str,
    },
}

impl EstimatorFlags {
    /// Writes the flags that were given into an `[estimator]` table.
    pub fn apply(&self, table: &mut toml::Table) {
        let int = |v: u64| toml::Value::Integer(i64::try_from(v).unwrap_or(i64::MAX));
        if let Some(ms) = self.period_ms {
            table.insert("period_ms".into(), int(ms));
        }
        if let Some(ms) = self.span_ms {
            table.insert("span_ms".into(), int(ms));
        }
        if let Some(ms) = self.latency_ms {
            table.insert("latency_ms".into(), int(ms));
        }
        if let Some(method) = &self.method {
            table.insert("method".into(), toml::Value::String(method.clone()));
        }
        if self.inlier_min.is_none() && self.hold_ms.is_none() {
            return;
        }
        let alerts = subtable(table, "alerts");
        if let Some(level) = self.inlier_min {
            subtable(alerts, "inlier_fraction").insert("level".into(), toml::Value::Float(level));
        }
        if let Some(ms) = self.hold_ms {
            subtable(alerts, "inlier_fraction").insert("hold_ms".into(), int(ms));
            subtable(alerts, "sensor_inliers").insert("hold_ms".into(), int(ms));
            alerts.insert("unobservable_hold_ms".into(), int(ms));
        }
    }
}

/// The sub-table `key` of `table`, created when missing (a non-table value is replaced).
fn subtable<'t>(table: &'t mut toml::Table, key: &str) -> &'t mut toml::Table {
    let entry = table
        .entry(key.to_string())
        .or_insert_with(|| toml::Value::Table(toml::Table::new()));
    if !entry.is_table() {
        *entry = toml::Value::Table(toml::Table::new());
    }
    entry.as_table_mut().expect("just made a table")
}

/// Parses an `[estimator]` table into the estimator's configuration.
pub fn estimator_config(table: &toml::Table) -> Result<EstimatorConfig, SettingsError> {
    toml::Value::Table(table.clone())
        .try_into()
        .map_err(|err: toml::de::Error| SettingsError::Estimator(err.message().to_string()))
}

/// Reads and parses a config file.
fn read_config(path: &Path) -> Result<ConfigFile, SettingsError> {
    let text = std::fs::read_to_string(path).map_err(|source| SettingsError::ReadConfig {
        path: path.to_path_buf(),
        source,
    })?;
    toml::from_str(&text).map_err(|err: toml::de::Error| SettingsError::ParseConfig {
        path: path.to_path_buf(),
        message: err.message().to_string(),
    })
}

/// The `[estimator]` table of `config` (or an empty one) with `flags` applied.
pub fn estimator_table(
    config: Option<&Path>,
    flags: &EstimatorFlags,
) -> Result<toml::Table, SettingsError> {
    let mut table = match config {
        Some(path) => read_config(path)?.estimator,
        None => toml::Table::new(),
    };
    flags.apply(&mut table);
    Ok(table)
}

impl ServeConfig {
    /// Validates the flags (and the config file they name); `env_token` is the
    /// value of [`TOKEN_ENV`], passed in so tests need not touch the environment.
    pub fn from_args(args: &ServeArgs, env_token: Option<String>) -> Result<Self, SettingsError> {
        let file = match &args.config {
            Some(path) => read_config(path)?,
            None => ConfigFile::default(),
        };
        let serve = file.serve;
        let mut table = file.estimator;
        args.estimator.apply(&mut table);
        let estimator = estimator_config(&table)?;
        let estimator_toml =
            toml::to_string(&table).map_err(|err| SettingsError::Estimator(err.to_string()))?;

        let token_file = args.token_file.clone().or(serve.token_file);
        let token = match token_file {
            Some(path) => {
                let text = std::fs::read_to_string(&path)
                    .map_err(|source| SettingsError::ReadToken { path, source })?;
                Some(Token::new(&text)?)
            }
            None => env_token.map(|t| Token::new(&t)).transpose()?,
        };

        let limits = Limits {
            max_connections: positive(
                "max_connections",
                args.max_connections.or(serve.max_connections).unwrap_or(64),
            )?,
            hello_timeout: millis(
                "hello_timeout_ms",
                args.hello_timeout_ms
                    .or(serve.hello_timeout_ms)
                    .unwrap_or(5000),
            )?,
            subscriber_queue: positive(
                "subscriber_queue",
                args.subscriber_queue
                    .or(serve.subscriber_queue)
                    .unwrap_or(256),
            )?,
            subscriber_timeout: millis(
                "subscriber_timeout_ms",
                args.subscriber_timeout_ms
                    .or(serve.subscriber_timeout_ms)
                    .unwrap_or(5000),
            )?,
            core_queue: positive(
                "core_queue",
                args.core_queue.or(serve.core_queue).unwrap_or(1024),
            )?,
        };
        Ok(ServeConfig {
            listen: args
                .listen
                .or(serve.listen)
                .unwrap_or_else(|| DEFAULT_LISTEN.parse().expect("valid default")),
            unix: args.unix.clone().or(serve.unix),
            udp: args.udp.or(serve.udp),
            token,
            record: args.record.clone().or(serve.record),
            limits,
            tick: millis("tick_ms", args.tick_ms.or(serve.tick_ms).unwrap_or(20))?,
            estimator,
            estimator_toml,
        })
    }

    /// Addresses this configuration would expose beyond the local machine.
    pub fn non_loopback_binds(&self) -> Vec<SocketAddr> {
        [Some(self.listen), self.udp]
            .into_iter()
            .flatten()
            .filter(|addr| !addr.ip().is_loopback())
            .collect()
    }
}

fn positive(name: &'static str, value: usize) -> Result<usize, SettingsError> {
    if value == 0 {
        return Err(SettingsError::Invalid {
            name,
            problem: "must be at least 1",
        });
    }
    Ok(value)
}

fn millis(name: &'static str, ms: u64) -> Result<Duration, SettingsError> {
    if ms == 0 {
        return Err(SettingsError::Invalid {
            name,
            problem: "must be at least 1 ms",
        });
    }
    Ok(Duration::from_millis(ms))
}

#[cfg(test)]
mod tests {
    use super::*;

    fn write_config(text: &str) -> (tempdir::Dir, PathBuf) {
        let dir = tempdir::Dir::new();
        let path = dir.path().join("wahbad.toml");
        std::fs::write(&path, text).unwrap();
        (dir, path)
    }

    /// A throwaway directory under the system temp dir, removed on drop.
    mod tempdir {
        pub struct Dir(std::path::PathBuf);
        impl Dir {
            pub fn new() -> Self {
                use std::sync::atomic::{AtomicU32, Ordering};
                static NEXT: AtomicU32 = AtomicU32::new(0);
                let path = std::env::temp_dir().join(format!(
                    "wahbad-settings-{}-{}",
                    std::process::id(),
                    NEXT.fetch_add(1, Ordering::Relaxed)
                ));
                std::fs::create_dir_all(&path).unwrap();
                Dir(path)
            }
            pub fn path(&self) -> &std::path::Path {
                &self.0
            }
        }
        impl Drop for Dir {
            fn drop(&mut self) {
                let _ = std::fs::remove_dir_all(&self.0);
            }
        }
    }

    #[test]
    fn defaults_without_file_or_flags() {
        let config = ServeConfig::from_args(&ServeArgs::default(), None).unwrap();
        assert_eq!(config.listen, DEFAULT_LISTEN.parse().unwrap());
        assert_eq!(config.limits.max_connections, 64);
        assert!(config.token.is_none());
        assert_eq!(config.estimator, EstimatorConfig::default());
        assert!(config.non_loopback_binds().is_empty());
    }

    #[test]
    fn flags_override_the_file() {
        let (_dir, path) = write_config(
            "[serve]\nlisten = \"0.0.0.0:7700\"\nmax_connections = 3\n\n\
             [estimator]\nperiod_ms = 200\nspan_ms = 2000\n\n\
             [estimator.alerts.inlier_fraction]\nlevel = 0.5\nhold_ms = 300\n",
        );
        let args = ServeArgs {
            config: Some(path),
            max_connections: Some(5),
            estimator: EstimatorFlags {
                period_ms: Some(50),
                inlier_min: Some(0.7),
                hold_ms: Some(400),
                method: Some("lud".into()),
                ..EstimatorFlags::default()
            },
            ..ServeArgs::default()
        };
        let config = ServeConfig::from_args(&args, None).unwrap();
        assert_eq!(config.listen, "0.0.0.0:7700".parse().unwrap());
        assert_eq!(config.limits.max_connections, 5);
        assert_eq!(config.estimator.period_ms, 50, "flag wins");
        assert_eq!(config.estimator.span_ms, 2000, "file kept");
        assert_eq!(config.estimator.alerts.inlier_fraction.level, 0.7);
        assert_eq!(config.estimator.alerts.inlier_fraction.hold_ms, 400);
        assert_eq!(config.estimator.alerts.sensor_inliers.hold_ms, 400);
        assert_eq!(config.estimator.alerts.unobservable_hold_ms, 400);
        assert_eq!(config.non_loopback_binds().len(), 1);
        // The recorded table parses back to the same configuration.
        let table: toml::Table = toml::from_str(&config.estimator_toml).unwrap();
        assert_eq!(estimator_config(&table).unwrap(), config.estimator);
    }

    #[test]
    fn unknown_keys_and_bad_values_are_clear_errors() {
        let (_dir, path) = write_config("[serve]\nlisten_on = \"x\"\n");
        let args = ServeArgs {
            config: Some(path.clone()),
            ..ServeArgs::default()
        };
        let err = ServeConfig::from_args(&args, None).unwrap_err().to_string();
        assert!(err.contains("listen_on"), "{err}");
        let args = ServeArgs {
            max_connections: Some(0),
            ..ServeArgs::default()
        };
        let err = ServeConfig::from_args(&args, None).unwrap_err().to_string();
        assert!(err.contains("max_connections"), "{err}");
        let args = ServeArgs {
            estimator: EstimatorFlags {
                method: Some("no-such-solver".into()),
                ..EstimatorFlags::default()
            },
            ..ServeArgs::default()
        };
        assert!(ServeConfig::from_args(&args, None).is_err());
    }

    #[test]
    fn the_commented_example_config_is_valid() {
        let path = PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("../examples/wahbad.toml");
        let args = ServeArgs {
            config: Some(path),
            ..ServeArgs::default()
        };
        let config = ServeConfig::from_args(&args, None).unwrap();
        assert_eq!(config.listen, DEFAULT_LISTEN.parse().unwrap());
        assert_eq!(config.estimator.sensors.len(), 3);
        assert_eq!(config.estimator.sensors["cam"].sigma, Some(1e-4));
    }

    #[test]
    fn token_from_file_or_env_is_trimmed_and_never_shown() {
        let (_dir, path) = write_config("s3cret\n");
        let args = ServeArgs {
            token_file: Some(path),
            ..ServeArgs::default()
        };
        let config = ServeConfig::from_args(&args, Some("other".into())).unwrap();
        let token = config.token.clone().unwrap();
        assert!(token.matches(Some("s3cret")), "the file wins over the env");
        assert!(!token.matches(Some("s3cre")));
        assert!(!token.matches(Some("s3cretX")));
        assert!(!token.matches(None));
        assert!(!format!("{config:?}").contains("s3cret"));
        let config = ServeConfig::from_args(&ServeArgs::default(), Some("e".into())).unwrap();
        assert!(config.token.unwrap().matches(Some("e")));
        assert!(ServeConfig::from_args(&ServeArgs::default(), Some("  ".into())).is_err());
    }
}
