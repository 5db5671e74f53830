//! UDP sources: one MessagePack message per datagram, no hello, no replies.
//!
//! A datagram that is undecodable, invalid, lacks the configured token, or
//! finds the estimator queue full is dropped and counted; nothing waits.

use std::sync::Arc;

use tokio::net::UdpSocket;
use tokio::sync::watch;
use wahbad_protocol::{decode_datagram, Message, MAX_FRAME_LEN};

use super::session::{source_input_from, stopped, Answer};
use super::stats::bump;
use super::Shared;
use crate::core_thread::{CoreSender, Origin, SourceInput};
use crate::record::unix_now_ns;

/// Receives datagrams until shutdown.
pub async fn serve_udp(
    socket: UdpSocket,
    shared: Arc<Shared>,
    core: CoreSender,
    mut shutdown: watch::Receiver<bool>,
) {
    // One byte more than the largest valid datagram, so an oversize one is seen as such.
    let mut buf = vec![0u8; MAX_FRAME_LEN + 1];
    loop {
        let (len, peer) = tokio::select! {
            _ = stopped(&mut shutdown) => return,
            got = socket.recv_from(&mut buf) => match got {
                Ok(got) => got,
                Err(err) => {
                    tracing::debug!(%err, "udp receive failed");
                    continue;
                }
            },
        };
        let recv_ns = unix_now_ns();
        let datagram = &buf[..len];
        let msg = match decode_datagram(datagram) {
            Ok(msg) => msg,
            Err(err) => {
                bump(&shared.counters.rejected);
                tracing::debug!(%peer, %err, "udp datagram rejected");
                continue;
            }
        };
        if let Some(token) = &shared.config.token {
            let offered = match &msg {
                Message::Obs(obs) => obs.token.as_deref(),
                Message::Rate(rate) => rate.token.as_deref(),
                Message::Truth(truth) => truth.token.as_deref(),
                _ => None,
            };
            if !token.matches(offered) {
                bump(&shared.counters.udp_dropped_auth);
                tracing::debug!(%peer, "udp datagram dropped: missing or wrong token");
                continue;
            }
        }
        let input = match source_input_from(msg) {
            Ok(input) => input,
            Err(Answer::Reject(reject)) => {
                bump(&shared.counters.rejected);
                tracing::debug!(%peer, reason = %reject.reason, "udp datagram rejected");
                continue;
            }
            Err(Answer::Status | Answer::Fatal(_)) => {
                bump(&shared.counters.rejected);
                continue;
            }
        };
        let queued = core.try_send(SourceInput {
            recv_ns,
            origin: Origin::Datagram,
            raw: datagram.to_vec(),
            input,
            reply: None,
        });
        if queued.is_err() {
            bump(&shared.counters.udp_dropped_full);
            tracing::debug!(%peer, "udp datagram dropped: the estimator queue is full");
        }
    }
}
