//! Verdicts are built only while a subscriber wants them (`hello.verdicts`,
//! default `true`, `shared/protocol.md`), and a subscriber that wants them
//! gets them in every solution it receives, however often it joins while the
//! feed runs. Real binary, loopback TCP.

mod serve_support;

use std::time::{Duration, Instant};

use serve_support::{Client, Daemon, SceneSource};
use wahbad_protocol::{Message, Role, Solution};

fn subscriber(daemon: &Daemon, verdicts: Option<bool>) -> Client<std::net::TcpStream> {
    let mut client = Client::tcp(daemon.tcp);
    let mut hello = serve_support::hello(Role::Subscriber, None);
    if let Message::Hello(hello) = &mut hello {
        hello.verdicts = verdicts;
    }
    client.send(&hello);
    assert!(matches!(
        client.recv(Duration::from_secs(10)),
        Some(Message::Welcome(_))
    ));
    client
}

/// The next `count` solutions of `client` (alerts are passed over).
fn solutions(client: &mut Client<std::net::TcpStream>, count: usize) -> Vec<Solution> {
    let deadline = Instant::now() + Duration::from_secs(30);
    let mut got = Vec::new();
    while got.len() < count {
        assert!(Instant::now() < deadline, "only {} solutions", got.len());
        match client.recv(Duration::from_secs(5)) {
            Some(Message::Solution(s)) => got.push(s),
            Some(_) => {}
            None => panic!("the feed stopped after {} solutions", got.len()),
        }
    }
    got
}

fn assert_has_verdicts(s: &Solution) {
    let verdicts = s
        .verdicts
        .as_ref()
        .unwrap_or_else(|| panic!("solution t={} came without verdicts", s.t));
    assert_eq!(verdicts.len(), s.n as usize, "one verdict per observation");
}

#[test]
fn verdicts_follow_what_subscribers_ask_for() {
    let mut daemon = Daemon::start(&["--period-ms", "10", "--span-ms", "200", "--latency-ms", "5"]);
    let mut lean = subscriber(&daemon, Some(false));

    let source = SceneSource::start(daemon.tcp, Instant::now(), Duration::from_millis(2));

    // Nobody wants verdicts yet.
    for s in solutions(&mut lean, 20) {
        assert!(s.verdicts.is_none(), "a lean subscriber got verdicts");
    }
    // Verdict subscribers come and go while the feed runs: each one's
    // solutions all carry verdicts, from its first on; the lean one's never.
    for round in 0..20 {
        let mut full = subscriber(&daemon, if round % 2 == 0 { None } else { Some(true) });
        for s in solutions(&mut full, 3) {
            assert_has_verdicts(&s);
            assert!(s.n > 0);
        }
        drop(full);
        for s in solutions(&mut lean, 2) {
            assert!(s.verdicts.is_none(), "a lean subscriber got verdicts");
        }
    }
    // Two at once; one leaves, the other still gets them.
    let mut first = subscriber(&daemon, None);
    let mut second = subscriber(&daemon, Some(true));
    solutions(&mut first, 2)
        .iter()
        .for_each(assert_has_verdicts);
    drop(first);
    solutions(&mut second, 10)
        .iter()
        .for_each(assert_has_verdicts);

    source.stop();
    let (status, _) = daemon.stop();
    assert!(status.success());
}
