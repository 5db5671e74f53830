//! The Unix-socket and UDP paths each carry a short session end to end
//! (real binary, loopback), with a token configured.

mod serve_support;

use std::net::UdpSocket;
use std::os::unix::net::UnixStream;
use std::time::Duration;

use serve_support::{q_unit, scene, Client, Daemon, TempDir, Q_TRUE};
use wahbad_protocol::{encode_body, Message, Role, Solution, Status};

const WAIT: Duration = Duration::from_secs(10);
const TOKEN: &str = "udp-and-unix";

fn angle_to_truth(solution: &Solution) -> f64 {
    let truth = q_unit(Q_TRUE);
    let dot: f64 = solution.q.iter().zip(truth).map(|(a, b)| a * b).sum();
    2.0 * dot.abs().min(1.0).acos()
}

fn solutions_until<S: std::io::Read + std::io::Write + serve_support::Timed>(
    sub: &mut Client<S>,
    t_min: i64,
) -> Vec<Solution> {
    let mut got = Vec::new();
    while got.last().map(|s: &Solution| s.t < t_min).unwrap_or(true) {
        match sub.recv(WAIT) {
            Some(Message::Solution(solution)) => got.push(solution),
            Some(_) => {}
            None => panic!("feed stopped after {} solutions", got.len()),
        }
    }
    got
}

#[test]
fn unix_socket_and_udp_each_carry_a_session() {
    let dir = TempDir::new("transports");
    let sock = dir.join("wahbad.sock");
    let token_file = dir.join("token");
    std::fs::write(&token_file, TOKEN).unwrap();
    let mut daemon = Daemon::start(&[
        "--unix",
        sock.to_str().unwrap(),
        "--udp",
        "127.0.0.1:0",
        "--token-file",
        token_file.to_str().unwrap(),
        "--period-ms",
        "100",
    ]);

    // Unix socket: subscriber and source both over it.
    let mut sub = Client::new(UnixStream::connect(daemon.unix.as_ref().unwrap()).unwrap());
    assert!(matches!(
        sub.hello(Role::Subscriber, Some(TOKEN)),
        Message::Welcome(_)
    ));
    let mut source = Client::new(UnixStream::connect(&sock).unwrap());
    assert!(matches!(
        source.hello(Role::Source, Some(TOKEN)),
        Message::Welcome(_)
    ));
    for frame in 0..20 {
        for msg in scene(frame, frame as i64 * 20_000_000) {
            source.send(&msg);
        }
    }
    let got = solutions_until(&mut sub, 200_000_000);
    assert!(
        got.iter().all(|s| angle_to_truth(s) < 1e-6),
        "unix session solutions off truth"
    );
    drop(source);

    // UDP: datagrams carrying the token are used; those without are dropped.
    let udp = UdpSocket::bind("127.0.0.1:0").unwrap();
    let daemon_udp = daemon.udp.unwrap();
    let (first, last) = (20u64, 40u64);
    for frame in first..last {
        for msg in scene(frame, frame as i64 * 20_000_000) {
            let mut msg = msg;
            if let Message::Obs(obs) = &mut msg {
                obs.token = Some(TOKEN.into());
            }
            udp.send_to(&encode_body(&msg), daemon_udp).unwrap();
        }
        // No token: must not count.
        udp.send_to(
            &encode_body(&scene(frame, frame as i64 * 20_000_000)[0]),
            daemon_udp,
        )
        .unwrap();
        std::thread::sleep(Duration::from_millis(2));
    }
    let got = solutions_until(&mut sub, 600_000_000);
    assert!(
        got.iter().all(|s| angle_to_truth(s) < 1e-6),
        "udp session solutions off truth"
    );
    sub.send(&Message::Status(Status::default()));
    let report = loop {
        match sub.recv(WAIT) {
            Some(Message::Status(Status {
                report: Some(report),
            })) => break report,
            Some(_) => {}
            None => panic!("no status"),
        }
    };
    assert_eq!(report.accepted, 4 * last, "{report:?}");
    let (status, stderr) = daemon.stop();
    assert!(status.success(), "{stderr}");
    assert!(!sock.exists(), "the socket file was not removed");
    assert!(!stderr.contains(TOKEN));
}
