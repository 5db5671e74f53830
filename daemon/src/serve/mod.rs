//! The live server behind `wahbad serve`.
//!
//! - [`connection`]: a framed stream ([`Connection`]).
//! - [`display`]: the human feed lines of `watch`.
//! - `session`: one stream connection: hello, then the source or subscriber loop.
//! - `udp`: source datagrams.
//! - [`stats`]: the counters behind `status` and the final summary.
//!
//! [`run`] takes bound listeners, the validated [`ServeConfig`] and a
//! shutdown future; the binary only parses flags, binds and passes the
//! signal. Data flow: sessions decode and validate, the core thread
//! ([`crate::core_thread`]) records and ingests in arrival order, and its
//! outputs go to every subscriber through a broadcast ring of bounded size
//! (a slow subscriber loses the oldest messages and is sent `lagged`).
//!
//! Shutdown: stop accepting; tell sources (`error shutdown`) and stop reading
//! them; the core drains its queue, closes the current epoch and the
//! recording; subscribers get the last outputs, then `error shutdown`.

pub mod connection;
pub mod display;
mod session;
pub mod stats;
mod udp;

pub use connection::{Connection, ReadError};
pub use stats::{Counters, CountersSnapshot};

use std::future::Future;
use std::path::PathBuf;
use std::sync::{Arc, Mutex};
use std::time::Duration;

use tokio::net::{TcpListener, UdpSocket, UnixListener};
use tokio::sync::{broadcast, watch, Semaphore};
use tokio::task::JoinSet;
use wahbad_protocol::{ErrorCode, PROTOCOL_VERSION};

use crate::core_thread::{self, CoreReport, CoreSender, CoreSetup, Published, VerdictDemand};
use crate::estimator::Estimator;
use crate::record::{unix_now_ns, LogHeader, LogWriter};
use crate::settings::ServeConfig;

/// The sockets [`run`] serves, already bound.
pub struct Listeners {
    /// TCP listener for sources and subscribers.
    pub tcp: TcpListener,
    /// Unix-domain listener and its path (removed at exit), if any.
    pub unix: Option<(UnixListener, PathBuf)>,
    /// UDP socket for source datagrams, if any.
    pub udp: Option<UdpSocket>,
}

/// What a finished run did.
#[derive(Debug, Clone)]
pub struct ServeSummary {
    /// Every server counter at the end.
    pub counters: CountersSnapshot,
    /// What the core thread reported.
    pub core: CoreReport,
}

/// Why the server could not start or ended badly.
#[derive(Debug, thiserror::Error)]
#[non_exhaustive]
pub enum ServeError {
    /// The estimator configuration was refused.
    #[error("estimator configuration: {0}")]
    Config(String),
    /// The recording could not be created.
    #[error("cannot create the recording {path}: {source}")]
    Record {
        /// The path.
        path: PathBuf,
        /// Why.
        source: crate::record::RecordError,
    },
    /// The estimator thread could not start or panicked.
    #[error("estimator thread: {0}")]
    Core(String),
}

/// What every task shares.
pub(crate) struct Shared {
    config: ServeConfig,
    counters: Arc<Counters>,
    /// A receiver kept only to make new ones; never read.
    feed_template: Mutex<broadcast::Receiver<Arc<Published>>>,
    /// Subscribers wanting verdicts (read by the core thread).
    verdict_demand: Arc<VerdictDemand>,
    server_name: String,
}

impl Shared {
    fn subscribe(&self) -> broadcast::Receiver<Arc<Published>> {
        self.feed_template
            .lock()
            .expect("feed template lock")
            .resubscribe()
    }
}

/// Time subscribers get, after the core has finished, to take the last outputs.
const DRAIN_GRACE: Duration = Duration::from_secs(3);

/// Serves until `shutdown` completes, then shuts down gracefully.
pub async fn run(
    listeners: Listeners,
    config: ServeConfig,
    shutdown: impl Future<Output = ()>,
) -> Result<ServeSummary, ServeError> {
    let estimator = Estimator::new(config.estimator.clone())
        .map_err(|err| ServeError::Config(err.to_string()))?;
    let recorder = match &config.record {
        Some(path) => {
            let header = LogHeader {
                created_ns: unix_now_ns(),
                program: format!("wahbad {}", env!("CARGO_PKG_VERSION")),
                protocol: PROTOCOL_VERSION,
                origin: "serve".into(),
                config: config.estimator_toml.clone(),
            };
            let writer = LogWriter::create(path, &header).map_err(|source| ServeError::Record {
                path: path.clone(),
                source,
            })?;
            tracing::info!(path = %path.display(), "recording inputs");
            Some(writer)
        }
        None => None,
    };
    let counters = Arc::new(Counters::default());
    let (feed, feed_template) = broadcast::channel(config.limits.subscriber_queue);
    let verdict_demand = Arc::new(VerdictDemand::default());
    let setup = CoreSetup {
        estimator,
        period_ns: config.estimator.period_ms as i64 * 1_000_000,
        latency_ns: config.estimator.latency_ms as i64 * 1_000_000,
        tick: config.tick,
        queue: config.limits.core_queue,
        recorder,
        mask: config.token.as_ref().map(|token| token.as_bytes().to_vec()),
        verdict_demand: verdict_demand.clone(),
    };
    let (core, core_handle) = core_thread::spawn(setup, counters.clone(), feed)
        .map_err(|err| ServeError::Core(err.to_string()))?;
    let shared = Arc::new(Shared {
        config,
        counters: counters.clone(),
        feed_template: Mutex::new(feed_template),
        verdict_demand,
        server_name: format!("wahbad {}", env!("CARGO_PKG_VERSION")),
    });
    let (stop_tx, stop_rx) = watch::channel(false);
    let mut tasks = JoinSet::new();
    let Listeners { tcp, unix, udp } = listeners;
    if let Some(socket) = udp {
        tasks.spawn(udp::serve_udp(
            socket,
            shared.clone(),
            core.clone(),
            stop_rx.clone(),
        ));
    }
    let permits = Arc::new(Semaphore::new(shared.config.limits.max_connections));
    let (unix_listener, unix_path) = match unix {
        Some((listener, path)) => (Some(listener), Some(path)),
        None => (None, None),
    };
    tokio::pin!(shutdown);
    loop {
        tokio::select! {
            _ = &mut shutdown => break,
            accepted = tcp.accept() => match accepted {
                Ok((stream, peer)) => {
                    let _ = stream.set_nodelay(true);
                    admit(stream, peer.to_string(), &shared, Some(&core), &stop_rx, &permits, &mut tasks);
                }
                Err(err) => accept_failed(err).await,
            },
            accepted = accept_unix(unix_listener.as_ref()) => match accepted {
                Ok(stream) => admit(stream, "unix".to_string(), &shared, Some(&core), &stop_rx, &permits, &mut tasks),
                Err(err) => accept_failed(err).await,
            },
            // Reap finished sessions so the set does not grow.
            Some(_) = tasks.join_next(), if !tasks.is_empty() => {}
        }
    }
    tracing::info!("shutting down: no new connections; finishing the current epoch");
    drop(tcp);
    drop(unix_listener);
    if let Some(path) = unix_path {
        let _ = std::fs::remove_file(path);
    }
    let _ = stop_tx.send(true);
    // The core ends once every sender clone is gone: this one, the UDP
    // task's and the sources' (which stop on the signal above).
    drop(core);
    let report = tokio::task::spawn_blocking(move || core_handle.join())
        .await
        .map_err(|err| ServeError::Core(err.to_string()))?
        .map_err(|_| ServeError::Core("the estimator thread panicked".into()))?;
    // Subscribers now see the feed close and say goodbye.
    drop(shared);
    let deadline = tokio::time::sleep(DRAIN_GRACE);
    tokio::pin!(deadline);
    loop {
        tokio::select! {
            _ = &mut deadline => {
                tracing::warn!(left = tasks.len(), "connections still open after the grace time: closing them");
                tasks.abort_all();
                break;
            }
            next = tasks.join_next() => if next.is_none() { break },
        }
    }
    if let Some(err) = &report.record_error {
        tracing::error!(error = %err, "the recording is incomplete");
    } else if let Some(records) = report.records {
        tracing::info!(records, "recording closed cleanly");
    }
    let summary = ServeSummary {
        counters: counters.snapshot(),
        core: report,
    };
    tracing::info!(
        epochs = summary.counters.epochs,
        accepted = summary.counters.accepted,
        rejected = summary.counters.rejected,
        dropped = summary.counters.dropped,
        "stopped"
    );
    Ok(summary)
}

/// Serves subscribers only, from a feed made elsewhere (what `replay --serve`
/// uses): the same hello, token, welcome, subscriber loop, `status` answers,
/// `lagged` and connection limit as [`run`]; a source's hello is refused with
/// `error hello`. The subscribers' feed ends when every sender of `feed` is
/// dropped (they are then sent `error shutdown`); the server stops accepting
/// when `shutdown` completes and gives open connections [`DRAIN_GRACE`] to finish.
pub async fn run_feed(
    tcp: TcpListener,
    config: ServeConfig,
    counters: Arc<Counters>,
    feed: broadcast::Receiver<Arc<Published>>,
    shutdown: impl Future<Output = ()>,
) {
    let shared = Arc::new(Shared {
        config,
        counters,
        feed_template: Mutex::new(feed),
        // A replay builds verdicts whatever its subscribers want.
        verdict_demand: Arc::new(VerdictDemand::default()),
        server_name: format!("wahbad {} (replay)", env!("CARGO_PKG_VERSION")),
    });
    let (stop_tx, stop_rx) = watch::channel(false);
    let permits = Arc::new(Semaphore::new(shared.config.limits.max_connections));
    let mut tasks = JoinSet::new();
    tokio::pin!(shutdown);
    loop {
        tokio::select! {
            _ = &mut shutdown => break,
            accepted = tcp.accept() => match accepted {
                Ok((stream, peer)) => {
                    let _ = stream.set_nodelay(true);
                    admit(stream, peer.to_string(), &shared, None, &stop_rx, &permits, &mut tasks);
                }
                Err(err) => accept_failed(err).await,
            },
            Some(_) = tasks.join_next(), if !tasks.is_empty() => {}
        }
    }
    drop(tcp);
    // Connections still in their hello are told; subscribers finish the feed.
    let _ = stop_tx.send(true);
    drop(shared);
    let deadline = tokio::time::sleep(DRAIN_GRACE);
    tokio::pin!(deadline);
    loop {
        tokio::select! {
            _ = &mut deadline => {
                tasks.abort_all();
                break;
            }
            next = tasks.join_next() => if next.is_none() { break },
        }
    }
}

/// Starts a session for an accepted stream, or refuses it with `busy`.
fn admit<S>(
    stream: S,
    peer: String,
    shared: &Arc<Shared>,
    core: Option<&CoreSender>,
    stop: &watch::Receiver<bool>,
    permits: &Arc<Semaphore>,
    tasks: &mut JoinSet<()>,
) where
    S: tokio::io::AsyncRead + tokio::io::AsyncWrite + Unpin + Send + 'static,
{
    let Ok(permit) = permits.clone().try_acquire_owned() else {
        stats::bump(&shared.counters.busy);
        tracing::warn!(
            %peer,
            limit = shared.config.limits.max_connections,
            "connection refused: connection limit reached"
        );
        tasks.spawn(async move {
            let mut conn = Connection::new(stream);
            session::close_with_error(
                &mut conn,
                ErrorCode::Busy,
                "connection limit reached; try again later".into(),
            )
            .await;
        });
        return;
    };
    let (shared, core, stop) = (shared.clone(), core.cloned(), stop.clone());
    tasks.spawn(async move {
        session::serve_stream(stream, peer, shared, core, stop).await;
        drop(permit);
    });
}

async fn accept_unix(listener: Option<&UnixListener>) -> std::io::Result<tokio::net::UnixStream> {
    match listener {
        Some(listener) => listener.accept().await.map(|(stream, _)| stream),
        None => std::future::pending().await,
    }
}

/// Accept errors (out of file descriptors, ...) are logged and retried after a pause.
async fn accept_failed(err: std::io::Error) {
    tracing::error!(%err, "accept failed; retrying");
    tokio::time::sleep(Duration::from_millis(100)).await;
}
