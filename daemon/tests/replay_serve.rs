//! `wahbad replay --serve`: the replay republished over the wire protocol,
//! with the real binary. A subscriber gets welcome and the same frames the
//! `--solutions` file holds (a contiguous run of them: it connects after the
//! replay started), then `error shutdown`; a source is refused with `error hello`.

mod replay_support;
mod serve_support;

use std::io::{BufRead, BufReader};
use std::net::SocketAddr;
use std::process::{Command, Stdio};
use std::time::Duration;

use replay_support::{estimator_table, scenario, write_sim_log, TempDir};
use serve_support::Client;
use wahbad_protocol::{encode_frame, Message, Role};

#[test]
fn a_paced_replay_is_followed_by_a_subscriber_over_the_protocol() {
    let dir = TempDir::new("serve");
    let scenario = scenario(20.0, false);
    let log = dir.join("run.wlog");
    write_sim_log(&log, &scenario, &estimator_table(&scenario));
    let lines = dir.join("out.jsonl");
    let mut child = Command::new(env!("CARGO_BIN_EXE_wahbad"))
        .args(["replay", log.to_str().unwrap(), "--serve", "127.0.0.1:0"])
        .args(["--speed", "10", "--solutions", lines.to_str().unwrap()])
        .stdout(Stdio::piped())
        .stderr(Stdio::null())
        .spawn()
        .unwrap();
    let mut stdout = BufReader::new(child.stdout.take().unwrap());
    let addr: SocketAddr = loop {
        let mut line = String::new();
        assert!(
            stdout.read_line(&mut line).unwrap() > 0,
            "no listening line"
        );
        if let Some(addr) = line.trim().strip_prefix("listening tcp ") {
            break addr.parse().unwrap();
        }
    };
    let mut source = Client::tcp(addr);
    match source.hello(Role::Source, None) {
        Message::Error(err) => assert_eq!(err.code, "hello", "{}", err.message),
        other => panic!("a source was not refused: {other:?}"),
    }
    let mut sub = Client::tcp(addr);
    assert!(matches!(
        sub.hello(Role::Subscriber, None),
        Message::Welcome(_)
    ));
    let mut got = Vec::new();
    let mut told = false;
    while let Some(msg) = sub.recv(Duration::from_secs(20)) {
        match msg {
            Message::Solution(_) | Message::Alert(_) => got.push(encode_frame(&msg)),
            Message::Error(err) => {
                assert_eq!(err.code, "shutdown");
                told = true;
                break;
            }
            other => panic!("unexpected {other:?}"),
        }
    }
    let status = child.wait().unwrap();
    assert_eq!(status.code(), Some(0));
    assert!(told, "no `error shutdown` at the end of the replay");
    let written: Vec<Vec<u8>> = std::fs::read_to_string(&lines)
        .unwrap()
        .lines()
        .map(|line| encode_frame(&serde_json::from_str::<Message>(line).unwrap()))
        .collect();
    // 20 s at speed 10 is 2 s of wall time; connecting takes milliseconds.
    assert!(
        got.len() * 10 >= written.len() * 8,
        "{} of {}",
        got.len(),
        written.len()
    );
    let start = written
        .iter()
        .position(|frame| *frame == got[0])
        .expect("the first frame received is one of the replay's");
    assert_eq!(
        &written[start..],
        &got[..],
        "the feed is the replay's tail, in order"
    );
    eprintln!(
        "measured: subscriber got {} of {} outputs",
        got.len(),
        written.len()
    );
}
