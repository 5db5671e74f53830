//! Shared by the `serve_*` system tests: start the real `wahbad` binary on
//! loopback with ephemeral ports, talk to it with blocking clients built on
//! the protocol crate, and run the Python examples.

#![allow(dead_code)]

use std::io::{BufRead, BufReader, Read, Write};
use std::net::{SocketAddr, TcpStream};
use std::path::{Path, PathBuf};
use std::process::{Child, Command, ExitStatus, Stdio};
use std::sync::mpsc;
use std::time::{Duration, Instant};

use wahbad_protocol::{encode_frame, FrameDecoder, Hello, Message, Obs, Role};

/// A running `wahbad serve`.
pub struct Daemon {
    pub child: Child,
    pub tcp: SocketAddr,
    pub udp: Option<SocketAddr>,
    pub unix: Option<PathBuf>,
    stderr: Option<std::thread::JoinHandle<String>>,
}

impl Daemon {
    /// Starts `wahbad serve --listen 127.0.0.1:0 ARGS` and waits for its listening lines.
    pub fn start(args: &[&str]) -> Daemon {
        let mut child = Command::new(env!("CARGO_BIN_EXE_wahbad"))
            .args(["serve", "--listen", "127.0.0.1:0"])
            .args(args)
            .env("RUST_LOG", "info")
            .stdin(Stdio::null())
            .stdout(Stdio::piped())
            .stderr(Stdio::piped())
            .spawn()
            .expect("start wahbad serve");
        let expect_udp = args.contains(&"--udp");
        let expect_unix = args.contains(&"--unix");
        let stdout = child.stdout.take().unwrap();
        let stderr = child.stderr.take().unwrap();
        let stderr = std::thread::spawn(move || {
            let mut text = String::new();
            let _ = BufReader::new(stderr).read_to_string(&mut text);
            text
        });
        let (tx, rx) = mpsc::channel();
        std::thread::spawn(move || {
            for line in BufReader::new(stdout).lines() {
                let Ok(line) = line else { break };
                if tx.send(line).is_err() {
                    break;
                }
            }
        });
        let (mut tcp, mut udp, mut unix) = (None, None, None);
        let deadline = Instant::now() + Duration::from_secs(20);
        while tcp.is_none() || (expect_udp && udp.is_none()) || (expect_unix && unix.is_none()) {
            let left = deadline.saturating_duration_since(Instant::now());
            let line = rx
                .recv_timeout(left)
                .expect("daemon did not announce its listeners");
            let mut parts = line.split_whitespace();
            match (parts.next(), parts.next(), parts.next()) {
                (Some("listening"), Some("tcp"), Some(addr)) => tcp = Some(addr.parse().unwrap()),
                (Some("listening"), Some("udp"), Some(addr)) => udp = Some(addr.parse().unwrap()),
                (Some("listening"), Some("unix"), Some(path)) => unix = Some(PathBuf::from(path)),
                _ => {}
            }
        }
        Daemon {
            child,
            tcp: tcp.unwrap(),
            udp,
            unix,
            stderr: Some(stderr),
        }
    }

    pub fn signal(&self, name: &str) {
        let status = Command::new("kill")
            .args([format!("-{name}"), self.child.id().to_string()])
            .status()
            .expect("run kill");
        assert!(status.success());
    }

    /// Waits for the process to exit (panics after `limit`); returns its status and stderr.
    pub fn wait(&mut self, limit: Duration) -> (ExitStatus, String) {
        let deadline = Instant::now() + limit;
        loop {
            if let Some(status) = self.child.try_wait().unwrap() {
                let stderr = self
                    .stderr
                    .take()
                    .map(|h| h.join().unwrap())
                    .unwrap_or_default();
                return (status, stderr);
            }
            if Instant::now() > deadline {
                let _ = self.child.kill();
                panic!("daemon did not exit within {limit:?}");
            }
            std::thread::sleep(Duration::from_millis(20));
        }
    }

    /// SIGTERM, then the exit status and stderr.
    pub fn stop(&mut self) -> (ExitStatus, String) {
        self.signal("TERM");
        self.wait(Duration::from_secs(20))
    }
}

impl Drop for Daemon {
    fn drop(&mut self) {
        if self.child.try_wait().ok().flatten().is_none() {
            let _ = self.child.kill();
            let _ = self.child.wait();
        }
    }
}

/// A blocking protocol client over any stream.
pub struct Client<S: Read + Write> {
    pub stream: S,
    decoder: FrameDecoder,
}

impl Client<TcpStream> {
    pub fn tcp(addr: SocketAddr) -> Self {
        let stream = TcpStream::connect(addr).expect("connect");
        stream.set_nodelay(true).unwrap();
        Client::new(stream)
    }
}

pub trait Timed {
    fn set_timeout(&self, limit: Option<Duration>);
}
impl Timed for TcpStream {
    fn set_timeout(&self, limit: Option<Duration>) {
        self.set_read_timeout(limit).unwrap();
    }
}
impl Timed for std::os::unix::net::UnixStream {
    fn set_timeout(&self, limit: Option<Duration>) {
        self.set_read_timeout(limit).unwrap();
    }
}

impl<S: Read + Write + Timed> Client<S> {
    pub fn new(stream: S) -> Self {
        Client {
            stream,
            decoder: FrameDecoder::new(),
        }
    }

    pub fn send(&mut self, msg: &Message) {
        self.stream.write_all(&encode_frame(msg)).expect("send");
    }

    pub fn send_raw(&mut self, bytes: &[u8]) {
        self.stream.write_all(bytes).expect("send raw");
    }

    /// Sends a hello and returns the first answer.
    pub fn hello(&mut self, role: Role, token: Option<&str>) -> Message {
        self.send(&hello(role, token));
        self.recv(Duration::from_secs(10)).expect("answer to hello")
    }

    /// The next message, or `None` on close or when `limit` passes.
    pub fn recv(&mut self, limit: Duration) -> Option<Message> {
        let deadline = Instant::now() + limit;
        loop {
            match self.decoder.next_message() {
                Ok(Some(msg)) => return Some(msg),
                Ok(None) => {}
                Err(err) => panic!("daemon sent a bad frame: {err}"),
            }
            let left = deadline.saturating_duration_since(Instant::now());
            if left.is_zero() {
                return None;
            }
            self.stream.set_timeout(Some(left));
            let mut buf = [0u8; 8192];
            match self.stream.read(&mut buf) {
                Ok(0) => return None,
                Ok(n) => self.decoder.push(&buf[..n]),
                Err(err)
                    if matches!(
                        err.kind(),
                        std::io::ErrorKind::WouldBlock | std::io::ErrorKind::TimedOut
                    ) =>
                {
                    return None
                }
                Err(_) => return None,
            }
        }
    }

    /// Whether the daemon has closed the connection (reads until EOF or `limit`).
    pub fn closed_within(&mut self, limit: Duration) -> bool {
        let deadline = Instant::now() + limit;
        loop {
            let left = deadline.saturating_duration_since(Instant::now());
            if left.is_zero() {
                return false;
            }
            self.stream.set_timeout(Some(left));
            let mut buf = [0u8; 8192];
            match self.stream.read(&mut buf) {
                Ok(0) => return true,
                Ok(_) => {}
                Err(err)
                    if matches!(
                        err.kind(),
                        std::io::ErrorKind::WouldBlock | std::io::ErrorKind::TimedOut
                    ) =>
                {
                    return false
                }
                Err(_) => return true,
            }
        }
    }
}

pub fn hello(role: Role, token: Option<&str>) -> Message {
    Message::Hello(Hello {
        version: 1,
        role,
        name: Some("serve test".into()),
        token: token.map(str::to_string),
        verdicts: None,
    })
}

/// A fixed attitude and reference directions for hand-made observations.
pub const Q_TRUE: [f64; 4] = [0.9, 0.1, -0.3, 0.3];

pub fn unit(v: [f64; 3]) -> [f64; 3] {
    let n = (v[0] * v[0] + v[1] * v[1] + v[2] * v[2]).sqrt();
    [v[0] / n, v[1] / n, v[2] / n]
}

pub fn q_unit(q: [f64; 4]) -> [f64; 4] {
    let n = q.iter().map(|c| c * c).sum::<f64>().sqrt();
    q.map(|c| c / n)
}

/// b = A(q) r with A as in the protocol.
pub fn rotate(q: [f64; 4], r: [f64; 3]) -> [f64; 3] {
    let [w, x, y, z] = q;
    [
        (1.0 - 2.0 * (y * y + z * z)) * r[0]
            + 2.0 * (x * y - w * z) * r[1]
            + 2.0 * (x * z + w * y) * r[2],
        2.0 * (x * y + w * z) * r[0]
            + (1.0 - 2.0 * (x * x + z * z)) * r[1]
            + 2.0 * (y * z - w * x) * r[2],
        2.0 * (x * z - w * y) * r[0]
            + 2.0 * (y * z + w * x) * r[1]
            + (1.0 - 2.0 * (x * x + y * y)) * r[2],
    ]
}

/// Noise-free observations of four well-spread directions at time `t`.
pub fn scene(frame: u64, t: i64) -> Vec<Message> {
    let q = q_unit(Q_TRUE);
    let refs = [
        [1.0, 0.0, 0.0],
        [0.0, 1.0, 0.0],
        [0.0, 0.0, 1.0],
        [0.6, -0.6, 0.5],
    ];
    refs.iter()
        .enumerate()
        .map(|(idx, r)| {
            let r = unit(*r);
            Message::Obs(Obs {
                sensor: format!("s{idx}").into(),
                seq: frame,
                t,
                b: rotate(q, r),
                r,
                sigma: Some(1e-3),
                token: None,
            })
        })
        .collect()
}

/// A source connection streaming `scene` frames (data time: `start.elapsed()`)
/// every `interval` on its own thread until [`SceneSource::stop`].
pub struct SceneSource {
    stop: std::sync::Arc<std::sync::atomic::AtomicBool>,
    thread: Option<std::thread::JoinHandle<()>>,
}

impl SceneSource {
    pub fn start(addr: SocketAddr, start: Instant, interval: Duration) -> SceneSource {
        use std::sync::atomic::{AtomicBool, Ordering};
        let stop = std::sync::Arc::new(AtomicBool::new(false));
        let mut source = Client::tcp(addr);
        assert!(matches!(
            source.hello(Role::Source, None),
            Message::Welcome(_)
        ));
        let source_stop = stop.clone();
        let thread = std::thread::spawn(move || {
            let mut frame = 0;
            while !source_stop.load(Ordering::Relaxed) {
                let t = start.elapsed().as_nanos() as i64;
                for msg in scene(frame, t) {
                    if source.stream.write_all(&encode_frame(&msg)).is_err() {
                        return;
                    }
                }
                frame += 1;
                std::thread::sleep(interval);
            }
        });
        SceneSource {
            stop,
            thread: Some(thread),
        }
    }

    /// Asks the thread to stop (it ends at its next frame).
    pub fn signal(&self) {
        self.stop.store(true, std::sync::atomic::Ordering::Relaxed);
    }

    /// Stops the thread and waits for it.
    pub fn stop(mut self) {
        self.signal();
        if let Some(thread) = self.thread.take() {
            thread.join().unwrap();
        }
    }
}

/// A fresh directory under the system temp dir, removed on drop.
pub struct TempDir(pub PathBuf);

impl TempDir {
    pub fn new(tag: &str) -> Self {
        let path = std::env::temp_dir().join(format!(
            "wahbad-{tag}-{}-{}",
            std::process::id(),
            Instant::now().elapsed().as_nanos() ^ (std::ptr::addr_of!(tag) as u128)
        ));
        std::fs::create_dir_all(&path).unwrap();
        TempDir(path)
    }

    pub fn join(&self, name: &str) -> PathBuf {
        self.0.join(name)
    }
}

impl Drop for TempDir {
    fn drop(&mut self) {
        let _ = std::fs::remove_dir_all(&self.0);
    }
}

/// The repository root (the daemon package's parent).
pub fn repo_root() -> &'static Path {
    Path::new(env!("CARGO_MANIFEST_DIR")).parent().unwrap()
}

/// The Python interpreter: `$PYTHON` or `python3`.
pub fn python() -> String {
    std::env::var("PYTHON").unwrap_or_else(|_| "python3".into())
}

/// Whether Python with `msgpack` is available. Under `CI=true` a missing one
/// fails the test (the same rule as `wahbad-tests`' `python::require_modules`,
/// repeated here because the daemon's tests cannot depend on that crate).
pub fn python_msgpack_ready() -> bool {
    let ok = Command::new(python())
        .args(["-c", "import msgpack"])
        .output()
        .map(|out| out.status.success())
        .unwrap_or(false);
    if ok {
        return true;
    }
    let in_ci = std::env::var("CI")
        .map(|v| v == "true" || v == "1")
        .unwrap_or(false);
    if in_ci {
        panic!("python3 with the msgpack package is required under CI=true (pip install -r tests/python/requirements.txt)");
    }
    eprintln!(
        "skipping: python3 with msgpack unavailable; pip install -r tests/python/requirements.txt"
    );
    false
}

/// Subscribes to the daemon at `addr` and collects, on a thread, every
/// solution and alert as its encoded frame, until the daemon says
/// `error shutdown` (`told` is then true) or closes, or `idle` passes with
/// nothing. Any other message (a `lagged` feed cannot be compared) panics.
pub fn capture_feed(
    addr: SocketAddr,
    idle: Duration,
) -> std::thread::JoinHandle<(Vec<Vec<u8>>, bool)> {
    let mut sub = Client::tcp(addr);
    assert!(matches!(
        sub.hello(Role::Subscriber, None),
        Message::Welcome(_)
    ));
    std::thread::spawn(move || {
        let mut live = Vec::new();
        while let Some(msg) = sub.recv(idle) {
            match msg {
                Message::Solution(_) | Message::Alert(_) => live.push(encode_frame(&msg)),
                Message::Error(err) => {
                    assert_eq!(err.code, "shutdown");
                    return (live, true);
                }
                other => panic!("unexpected {other:?}"),
            }
        }
        (live, false)
    })
}
