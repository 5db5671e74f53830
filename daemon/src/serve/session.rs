//! One stream connection from accept to close: the hello exchange, then the
//! source loop (frames in, `reject`s out) or the subscriber loop (the feed
//! out, `status` answers on request).

use std::sync::Arc;
use std::time::Duration;

use tokio::io::{AsyncRead, AsyncWrite};
use tokio::sync::{broadcast, mpsc, watch};
use tokio::time::timeout;
use wahbad_protocol::{
    decode_body, validate_obs, validate_rate, validate_truth, ErrorCode, ErrorMessage, FrameError,
    Hello, Lagged, Message, Reject, Role, Status, Welcome, PROTOCOL_VERSION,
};

use super::connection::{Connection, ReadError};
use super::stats::{bump, GaugeGuard};
use super::Shared;
use crate::core_thread::{CoreSender, Origin, SourceInput};
use crate::estimator::Input;
use crate::record::unix_now_ns;

/// Time allowed for writing an `error` before closing regardless.
const ERROR_WRITE_TIMEOUT: Duration = Duration::from_secs(1);

/// Rejects queued per source connection; beyond that they are not sent.
const REJECT_QUEUE: usize = 256;

/// Serves one accepted stream until it closes or the server shuts down.
pub async fn serve_stream<S>(
    stream: S,
    peer: String,
    shared: Arc<Shared>,
    core: Option<CoreSender>,
    mut shutdown: watch::Receiver<bool>,
) where
    S: AsyncRead + AsyncWrite + Unpin,
{
    let mut conn = Connection::new(stream);
    let first = tokio::select! {
        first = timeout(shared.config.limits.hello_timeout, conn.read_frame()) => first,
        _ = stopped(&mut shutdown) => {
            close_with_error(&mut conn, ErrorCode::Shutdown, "the daemon is shutting down".into()).await;
            return;
        }
    };
    let hello = match first {
        Err(_elapsed) => {
            bump(&shared.counters.hello_timeouts);
            tracing::info!(%peer, "connection closed: no hello in time");
            let ms = shared.config.limits.hello_timeout.as_millis();
            close_with_error(
                &mut conn,
                ErrorCode::Timeout,
                format!("no hello within {ms} ms"),
            )
            .await;
            return;
        }
        Ok(Ok(None)) => return,
        Ok(Err(ReadError::Io(err))) => {
            tracing::debug!(%peer, %err, "connection lost before hello");
            return;
        }
        // No stall limit is set before the hello; the hello timeout covers it.
        Ok(Err(err @ ReadError::Stalled { .. })) => {
            tracing::debug!(%peer, %err, "connection stalled before hello");
            return;
        }
        Ok(Err(ReadError::Frame(err))) => {
            first_frame_error(&mut conn, &shared, &peer, err).await;
            return;
        }
        Ok(Ok(Some(body))) => match decode_body(&body) {
            Ok(Message::Hello(hello)) => hello,
            Ok(other) => {
                bump(&shared.counters.hello_errors);
                let message = format!("the first frame must be hello, got {}", other.type_name());
                tracing::info!(%peer, "connection refused: {message}");
                close_with_error(&mut conn, ErrorCode::Hello, message).await;
                return;
            }
            Err(err) => {
                first_frame_error(&mut conn, &shared, &peer, err).await;
                return;
            }
        },
    };
    if let Err((code, message)) = check_hello(&hello, &shared) {
        let counter = match code {
            ErrorCode::Version => &shared.counters.version_errors,
            _ => &shared.counters.auth_failures,
        };
        bump(counter);
        // The offered token is never logged.
        tracing::warn!(%peer, code = code.as_str(), "hello refused: {message}");
        close_with_error(&mut conn, code, message).await;
        return;
    }
    // A feed-only server (a replay) has no estimator to feed.
    if hello.role == Role::Source && core.is_none() {
        bump(&shared.counters.hello_errors);
        let message = "this server only publishes a replay; sources are not accepted";
        tracing::info!(%peer, "connection refused: {message}");
        close_with_error(&mut conn, ErrorCode::Hello, message.into()).await;
        return;
    }
    let welcome = Message::Welcome(Welcome {
        version: PROTOCOL_VERSION,
        server: shared.server_name.clone(),
    });
    if conn.write_message(&welcome).await.is_err() {
        return;
    }
    let name = hello.name.clone().unwrap_or_default();
    // After the hello, a started frame has as long as the hello had.
    conn.set_stall_limit(Some(shared.config.limits.hello_timeout));
    match hello.role {
        Role::Source => {
            let Some(core) = core else { return };
            tracing::info!(%peer, %name, "source connected");
            let _gauge = GaugeGuard::new(&shared.counters.sources);
            source_loop(&mut conn, &shared, &peer, core, shutdown).await;
            tracing::info!(%peer, %name, "source disconnected");
        }
        Role::Subscriber => {
            drop(core);
            tracing::info!(%peer, %name, "subscriber connected");
            let _gauge = GaugeGuard::new(&shared.counters.subscribers);
            let verdicts = hello.verdicts.unwrap_or(true);
            subscriber_loop(&mut conn, &shared, &peer, verdicts).await;
            tracing::info!(%peer, %name, "subscriber disconnected");
        }
    }
}

/// Version and token checks of a decoded hello.
fn check_hello(hello: &Hello, shared: &Shared) -> Result<(), (ErrorCode, String)> {
    if hello.version != PROTOCOL_VERSION {
        return Err((
            ErrorCode::Version,
            format!(
                "protocol version {} is not supported; this daemon speaks version {PROTOCOL_VERSION}",
                hello.version
            ),
        ));
    }
    if let Some(token) = &shared.config.token {
        if !token.matches(hello.token.as_deref()) {
            let why = if hello.token.is_some() {
                "wrong"
            } else {
                "missing"
            };
            return Err((ErrorCode::Auth, format!("{why} token")));
        }
    }
    Ok(())
}

/// Answers a first frame that is not a usable hello.
async fn first_frame_error<S: AsyncRead + AsyncWrite + Unpin>(
    conn: &mut Connection<S>,
    shared: &Shared,
    peer: &str,
    err: FrameError,
) {
    // A bad length or an undecodable body is `framing`; a readable message
    // that is not a valid hello is `hello` (the protocol crate's rule).
    let code = err.first_frame_code();
    if code == ErrorCode::Framing {
        bump(&shared.counters.framing_errors);
    } else {
        bump(&shared.counters.hello_errors);
    }
    let message = if code == ErrorCode::Hello {
        format!("the first frame is not a valid hello: {err}")
    } else {
        err.to_string()
    };
    tracing::info!(peer, code = code.as_str(), "connection refused: {message}");
    close_with_error(conn, code, message).await;
}

/// Reads a source's frames and hands them to the core, answering rejects.
async fn source_loop<S: AsyncRead + AsyncWrite + Unpin>(
    conn: &mut Connection<S>,
    shared: &Shared,
    peer: &str,
    core: CoreSender,
    mut shutdown: watch::Receiver<bool>,
) {
    let (reply_tx, mut reply_rx) = mpsc::channel::<Reject>(REJECT_QUEUE);
    loop {
        tokio::select! {
            biased;
            _ = stopped(&mut shutdown) => {
                close_with_error(conn, ErrorCode::Shutdown, "the daemon is shutting down".into()).await;
                return;
            }
            Some(reject) = reply_rx.recv() => {
                if conn.write_message(&Message::Reject(reject)).await.is_err() {
                    return;
                }
            }
            frame = conn.read_frame() => {
                let body = match frame {
                    Ok(Some(body)) => body,
                    Ok(None) => return,
                    Err(err) => {
                        stream_error(conn, shared, peer, err).await;
                        return;
                    }
                };
                let recv_ns = unix_now_ns();
                let input = match source_input(&body) {
                    Ok(input) => input,
                    Err(Answer::Reject(reject)) => {
                        bump(&shared.counters.rejected);
                        tracing::debug!(peer, reason = %reject.reason, "message rejected");
                        if conn.write_message(&Message::Reject(reject)).await.is_err() {
                            return;
                        }
                        continue;
                    }
                    Err(Answer::Status) => {
                        let status = Message::Status(Status { report: Some(shared.counters.status_report()) });
                        if conn.write_message(&status).await.is_err() {
                            return;
                        }
                        continue;
                    }
                    Err(Answer::Fatal(err)) => {
                        stream_error(conn, shared, peer, ReadError::Frame(err)).await;
                        return;
                    }
                };
                let queued = core.send(SourceInput {
                    recv_ns,
                    origin: Origin::Stream,
                    raw: body,
                    input,
                    reply: Some(reply_tx.clone()),
                });
                if queued.await.is_err() {
                    return;
                }
            }
        }
    }
}

/// What a source frame leads to, when it is not an input for the core.
pub(super) enum Answer {
    /// Answer with this reject and go on.
    Reject(Reject),
    /// Answer with a status report and go on.
    Status,
    /// End the connection with `error framing`.
    Fatal(FrameError),
}

/// Decodes and validates a source's frame body (or datagram).
pub(super) fn source_input_from(msg: Message) -> Result<Input, Answer> {
    let reject = |sensor: Option<String>, seq: Option<u64>, reason: String| {
        Answer::Reject(Reject {
            sensor,
            seq,
            reason,
        })
    };
    match msg {
        Message::Obs(obs) => validate_obs(&obs)
            .map(Input::Obs)
            .map_err(|err| reject(Some(obs.sensor.to_string()), Some(obs.seq), err.to_string())),
        Message::Rate(rate) => validate_rate(&rate).map(Input::Rate).map_err(|err| {
            reject(
                Some(rate.sensor.to_string()),
                Some(rate.seq),
                err.to_string(),
            )
        }),
        Message::Truth(truth) => validate_truth(&truth)
            .map(Input::Truth)
            .map_err(|err| reject(None, None, err.to_string())),
        Message::Status(_) => Err(Answer::Status),
        other => Err(reject(
            None,
            None,
            format!(
                "a source sends obs, rate, truth or status; got {}",
                other.type_name()
            ),
        )),
    }
}

fn source_input(body: &[u8]) -> Result<Input, Answer> {
    match decode_body(body) {
        Ok(msg) => source_input_from(msg),
        Err(err) => match err.to_reject() {
            Some(reject) => Err(Answer::Reject(reject)),
            None => Err(Answer::Fatal(err)),
        },
    }
}

/// Sends the feed to a subscriber and answers its status requests.
async fn subscriber_loop<S: AsyncRead + AsyncWrite + Unpin>(
    conn: &mut Connection<S>,
    shared: &Shared,
    peer: &str,
    verdicts: bool,
) {
    // Counted before subscribing, so everything the core computes from now
    // on carries verdicts; the outputs at the head of the feed computed before
    // are skipped (see `VerdictDemand`).
    let _want = verdicts.then(|| shared.verdict_demand.want());
    let mut feed = shared.subscribe();
    let mut head = verdicts;
    let write_timeout = shared.config.limits.subscriber_timeout;
    loop {
        tokio::select! {
            published = feed.recv() => {
                let written = match published {
                    Ok(published) if head && !published.verdicts_built => continue,
                    Ok(published) => {
                        head = false;
                        timeout(write_timeout, conn.write_encoded(published.frame(verdicts))).await
                    }
                    Err(broadcast::error::RecvError::Lagged(skipped)) => {
                        shared.counters.lagged_skipped.fetch_add(skipped, std::sync::atomic::Ordering::Relaxed);
                        tracing::debug!(peer, skipped, "subscriber lagging: oldest messages dropped");
                        let lagged = Message::Lagged(Lagged { skipped });
                        timeout(write_timeout, conn.write_message(&lagged)).await
                    }
                    Err(broadcast::error::RecvError::Closed) => {
                        close_with_error(conn, ErrorCode::Shutdown, "the daemon is shutting down".into()).await;
                        return;
                    }
                };
                match written {
                    Ok(Ok(())) => {}
                    Ok(Err(_)) => return,
                    Err(_elapsed) => {
                        bump(&shared.counters.subscriber_timeouts);
                        tracing::warn!(
                            peer,
                            timeout_ms = write_timeout.as_millis() as u64,
                            "subscriber disconnected: it stopped reading"
                        );
                        return;
                    }
                }
            }
            frame = conn.read_frame() => {
                let body = match frame {
                    Ok(Some(body)) => body,
                    Ok(None) => return,
                    Err(err) => {
                        stream_error(conn, shared, peer, err).await;
                        return;
                    }
                };
                let answer = match decode_body(&body) {
                    Ok(Message::Status(_)) => Message::Status(Status { report: Some(shared.counters.status_report()) }),
                    Ok(other) => {
                        bump(&shared.counters.rejected);
                        Message::Reject(Reject {
                            sensor: None,
                            seq: None,
                            reason: format!("a subscriber sends only status; got {}", other.type_name()),
                        })
                    }
                    Err(err) => match err.to_reject() {
                        Some(reject) => {
                            bump(&shared.counters.rejected);
                            Message::Reject(reject)
                        }
                        None => {
                            stream_error(conn, shared, peer, ReadError::Frame(err)).await;
                            return;
                        }
                    },
                };
                if !matches!(timeout(write_timeout, conn.write_message(&answer)).await, Ok(Ok(()))) {
                    return;
                }
            }
        }
    }
}

/// Ends a connection whose stream failed after the hello.
async fn stream_error<S: AsyncRead + AsyncWrite + Unpin>(
    conn: &mut Connection<S>,
    shared: &Shared,
    peer: &str,
    err: ReadError,
) {
    match err {
        ReadError::Io(err) => tracing::debug!(peer, %err, "connection lost"),
        ReadError::Stalled { .. } => {
            tracing::info!(peer, %err, "connection closed: peer stalled mid-frame");
            close_with_error(conn, ErrorCode::Timeout, err.to_string()).await;
        }
        ReadError::Frame(err) => {
            bump(&shared.counters.framing_errors);
            tracing::info!(peer, %err, "connection closed: framing error");
            close_with_error(conn, ErrorCode::Framing, err.to_string()).await;
        }
    }
}

/// Sends `error`, half-closes, and reads what the peer still sends for a
/// moment, so the error is delivered rather than lost to a reset.
pub async fn close_with_error<S: AsyncRead + AsyncWrite + Unpin>(
    conn: &mut Connection<S>,
    code: ErrorCode,
    message: String,
) {
    let error = Message::Error(ErrorMessage {
        code: code.as_str().to_string(),
        message,
    });
    if !matches!(
        timeout(ERROR_WRITE_TIMEOUT, conn.write_message(&error)).await,
        Ok(Ok(()))
    ) {
        return;
    }
    let _ = timeout(ERROR_WRITE_TIMEOUT, conn.shutdown()).await;
    let _ = timeout(Duration::from_millis(500), conn.drain()).await;
}

/// Completes once the server's stop signal is set (or its sender is gone).
pub(super) async fn stopped(signal: &mut watch::Receiver<bool>) {
    // The guard `wait_for` returns is not `Send`; drop it at once.
    let _ = signal.wait_for(|stop| *stop).await.map(|_| ());
}
