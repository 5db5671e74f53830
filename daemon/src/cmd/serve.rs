//! `wahbad serve`: validate the flags, bind the sockets, run the server until
//! SIGINT or SIGTERM, exit 0 after a graceful shutdown.
//!
//! Once bound, one line per listener goes to stdout (`listening tcp ADDR`,
//! `listening unix PATH`, `listening udp ADDR`), so scripts started with port
//! 0 learn the real address.

use std::io::Write;
use std::path::Path;

use anyhow::Context;
use clap::Args;
use tokio::net::{TcpListener, UdpSocket, UnixListener};
use wahbad::serve::{self, Listeners};
use wahbad::settings::{ServeArgs, ServeConfig, TOKEN_ENV};

use super::Failure;

/// The caution every `serve --help` carries.
pub const CAUTION: &str = "CAUTION: wahbad is test and analysis software, not flight-qualified. \
Keep your bench's independent interlocks in place, and let your programme's own verification \
and safety rules take precedence over anything this program reports.";

/// Flags of `wahbad serve`.
#[derive(Debug, Args)]
#[command(after_help = CAUTION)]
pub struct ServeCmdArgs {
    #[command(flatten)]
    pub args: ServeArgs,
}

/// Runs `wahbad serve`.
pub fn run(cmd: &ServeCmdArgs) -> Result<(), Failure> {
    let config = ServeConfig::from_args(&cmd.args, std::env::var(TOKEN_ENV).ok())
        .map_err(|err| Failure::BadInput(err.into()))?;
    let exposed = config.non_loopback_binds();
    if !exposed.is_empty() && config.token.is_none() {
        let addrs: Vec<String> = exposed.iter().map(|a| a.to_string()).collect();
        tracing::warn!(
            addrs = %addrs.join(", "),
            "listening beyond loopback WITHOUT a token: anyone who can reach these addresses can feed \
             or read the estimator; set --token-file or {TOKEN_ENV}"
        );
        eprintln!(
            "wahbad: warning: {} is reachable from other machines and no token is set \
             (use --token-file or {TOKEN_ENV})",
            addrs.join(", ")
        );
    }
    let runtime = tokio::runtime::Builder::new_multi_thread()
        .worker_threads(2)
        .enable_all()
        .thread_name("wahbad-io")
        .build()
        .context("cannot start the async runtime")
        .map_err(Failure::Failed)?;
    runtime.block_on(async move {
        let listeners = bind(&config).await.map_err(Failure::Failed)?;
        let summary = serve::run(listeners, config, shutdown_signal())
            .await
            .map_err(|err| Failure::Failed(err.into()))?;
        if let Some(err) = summary.core.record_error {
            return Err(Failure::Failed(anyhow::anyhow!(
                "the recording is incomplete: {err}"
            )));
        }
        Ok(())
    })
}

/// Binds every configured socket and announces it on stdout.
async fn bind(config: &ServeConfig) -> anyhow::Result<Listeners> {
    let tcp = TcpListener::bind(config.listen)
        .await
        .with_context(|| format!("cannot listen on tcp {}", config.listen))?;
    let mut out = std::io::stdout().lock();
    writeln!(out, "listening tcp {}", tcp.local_addr()?)?;
    let unix = match &config.unix {
        Some(path) => {
            remove_stale_socket(path)?;
            let listener = UnixListener::bind(path)
                .with_context(|| format!("cannot listen on unix socket {}", path.display()))?;
            writeln!(out, "listening unix {}", path.display())?;
            Some((listener, path.clone()))
        }
        None => None,
    };
    let udp = match config.udp {
        Some(addr) => {
            let socket = UdpSocket::bind(addr)
                .await
                .with_context(|| format!("cannot bind udp {addr}"))?;
            writeln!(out, "listening udp {}", socket.local_addr()?)?;
            Some(socket)
        }
        None => None,
    };
    out.flush()?;
    tracing::info!(tcp = %tcp.local_addr()?, "serving");
    Ok(Listeners { tcp, unix, udp })
}

/// A socket file left by a previous run is removed; any other file is not.
fn remove_stale_socket(path: &Path) -> anyhow::Result<()> {
    use std::os::unix::fs::FileTypeExt;
    match std::fs::symlink_metadata(path) {
        Ok(meta) if meta.file_type().is_socket() => std::fs::remove_file(path)
            .with_context(|| format!("cannot remove stale socket {}", path.display())),
        Ok(_) => anyhow::bail!("{} exists and is not a socket", path.display()),
        Err(_) => Ok(()),
    }
}

/// Completes on SIGINT (Ctrl-C) or SIGTERM.
async fn shutdown_signal() {
    use tokio::signal::unix::{signal, SignalKind};
    let mut term = match signal(SignalKind::terminate()) {
        Ok(term) => term,
        Err(err) => {
            tracing::error!(%err, "cannot watch SIGTERM; only Ctrl-C stops the server");
            let _ = tokio::signal::ctrl_c().await;
            return;
        }
    };
    tokio::select! {
        _ = tokio::signal::ctrl_c() => tracing::info!("SIGINT received"),
        _ = term.recv() => tracing::info!("SIGTERM received"),
    }
}
