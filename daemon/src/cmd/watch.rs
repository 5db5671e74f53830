//! `wahbad watch`: subscribe to a running daemon and print its feed, one
//! compact line per solution with alerts set apart, or one JSON object per
//! message with `--json`.

use std::io::Write;
use std::path::PathBuf;

use anyhow::Context;
use clap::Args;
use tokio::io::{AsyncRead, AsyncWrite};
use wahbad::serve::display::{alert_line, lagged_line, legend, solution_line};
use wahbad::serve::Connection;
use wahbad::settings::{Token, TOKEN_ENV};
use wahbad_protocol::{Hello, Message, Role, PROTOCOL_VERSION};

use super::Failure;

/// Flags of `wahbad watch`.
#[derive(Debug, Args)]
pub struct WatchArgs {
    /// Daemon to follow: HOST:PORT for TCP, or unix:PATH for a Unix socket.
    #[arg(long, value_name = "ADDR", default_value = "127.0.0.1:7600")]
    pub connect: String,
    /// One JSON object per message instead of the human lines.
    #[arg(long)]
    pub json: bool,
    /// Do not ask for per-observation verdicts (no outlier list on the lines).
    #[arg(long)]
    pub no_verdicts: bool,
    /// File holding the daemon's token; else the WAHBAD_TOKEN environment variable.
    #[arg(long, value_name = "FILE")]
    pub token_file: Option<PathBuf>,
}

/// Runs `wahbad watch` until the daemon closes the feed.
pub fn run(args: &WatchArgs) -> Result<(), Failure> {
    let token = match &args.token_file {
        Some(path) => {
            let text = std::fs::read_to_string(path)
                .with_context(|| format!("cannot read token file {}", path.display()))
                .map_err(Failure::BadInput)?;
            Some(Token::new(&text).map_err(|err| Failure::BadInput(err.into()))?)
        }
        None => std::env::var(TOKEN_ENV)
            .ok()
            .map(|t| Token::new(&t))
            .transpose()
            .map_err(|err| Failure::BadInput(err.into()))?,
    };
    let runtime = tokio::runtime::Builder::new_current_thread()
        .enable_all()
        .build()
        .context("cannot start the async runtime")
        .map_err(Failure::Failed)?;
    runtime.block_on(async {
        if let Some(path) = args.connect.strip_prefix("unix:") {
            let stream = tokio::net::UnixStream::connect(path)
                .await
                .with_context(|| format!("cannot connect to unix socket {path}"))
                .map_err(Failure::Failed)?;
            follow(stream, args, token).await
        } else {
            let stream = tokio::net::TcpStream::connect(&args.connect)
                .await
                .with_context(|| format!("cannot connect to {}", args.connect))
                .map_err(Failure::Failed)?;
            follow(stream, args, token).await
        }
    })
}

async fn follow<S: AsyncRead + AsyncWrite + Unpin>(
    stream: S,
    args: &WatchArgs,
    token: Option<Token>,
) -> Result<(), Failure> {
    let mut conn = Connection::new(stream);
    let hello = Message::Hello(Hello {
        version: PROTOCOL_VERSION,
        role: Role::Subscriber,
        name: Some("wahbad watch".into()),
        token: token.map(|t| String::from_utf8_lossy(t.as_bytes()).into_owned()),
        verdicts: Some(!args.no_verdicts),
    });
    let failed = |err: anyhow::Error| Failure::Failed(err);
    conn.write_message(&hello)
        .await
        .context("cannot send hello")
        .map_err(failed)?;
    let mut out = std::io::stdout().lock();
    let mut first = true;
    loop {
        let msg = match conn.read_message().await {
            Ok(Some(msg)) => msg,
            Ok(None) => {
                eprintln!("wahbad watch: the daemon closed the connection");
                return Ok(());
            }
            Err(err) => return Err(failed(anyhow::Error::new(err).context("feed lost"))),
        };
        if first {
            first = false;
            match &msg {
                Message::Welcome(_) => {}
                Message::Error(err) => {
                    return Err(failed(anyhow::anyhow!(
                        "the daemon refused the subscription ({}): {}",
                        err.code,
                        err.message
                    )))
                }
                _ => {
                    return Err(failed(anyhow::anyhow!(
                        "the daemon did not answer with welcome"
                    )))
                }
            }
            if !args.json {
                let _ = writeln!(out, "{}", legend());
            }
        }
        let written = if args.json {
            let json = serde_json::to_string(&msg).map_err(|err| failed(err.into()))?;
            writeln!(out, "{json}")
        } else {
            match &msg {
                Message::Solution(solution) => writeln!(out, "{}", solution_line(solution)),
                Message::Alert(alert) => writeln!(out, "{}", alert_line(alert)),
                Message::Lagged(lagged) => writeln!(out, "{}", lagged_line(lagged)),
                Message::Welcome(welcome) => {
                    writeln!(
                        out,
                        "# connected to {} (protocol {})",
                        welcome.server, welcome.version
                    )
                }
                _ => Ok(()),
            }
        };
        // A closed stdout (`watch | head`) ends the watch quietly.
        if written.and_then(|()| out.flush()).is_err() {
            return Ok(());
        }
        if let Message::Error(err) = &msg {
            if err.code == "shutdown" {
                eprintln!("wahbad watch: the daemon is shutting down");
                return Ok(());
            }
            return Err(failed(anyhow::anyhow!(
                "daemon error ({}): {}",
                err.code,
                err.message
            )));
        }
    }
}
