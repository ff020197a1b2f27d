//! The real `kinema` binary for end-to-end tests: its path, the CLI, a running server
//! on a free loopback port, API keys made through `kinema keys create`, and the two
//! databases every end-to-end case runs on ([`TestDb`], [`crate::e2e!`]).
//!
//! The binary is the one cargo builds for the workspace (`target/debug/kinema`, found
//! beside the test executable, else under `CARGO_TARGET_DIR` or the workspace's
//! `target/`). `cargo nextest run --workspace` builds it with kinema-server's test
//! targets; a missing binary is a loud failure that says how to build it.

use std::io::{BufRead, BufReader};
use std::net::SocketAddr;
use std::path::PathBuf;
use std::process::{Child, Command, ExitStatus, Output, Stdio};
use std::sync::{Arc, Mutex, mpsc};
use std::time::{Duration, Instant};

use nix::sys::signal::{Signal, kill};
use nix::unistd::Pid;

use crate::db::{PgSchema, sqlite_file};
use crate::http::{Request, Response};

/// How long the server may take to print its address and become ready.
const START_TIMEOUT: Duration = Duration::from_secs(60);

/// Path of the `kinema` binary.
///
/// # Panics
/// When it has not been built.
pub fn kinema_bin() -> PathBuf {
    let name = format!("kinema{}", std::env::consts::EXE_SUFFIX);
    let mut candidates = Vec::new();
    // target/debug/deps/<test> → target/debug/kinema
    if let Ok(exe) = std::env::current_exe()
        && let Some(profile_dir) = exe.parent().and_then(|d| d.parent())
    {
        candidates.push(profile_dir.join(&name));
    }
    if let Some(dir) = std::env::var_os("CARGO_TARGET_DIR") {
        candidates.push(PathBuf::from(dir).join("debug").join(&name));
    }
    candidates.push(crate::workspace_root().join("target/debug").join(&name));
    candidates
        .iter()
        .find(|p| p.is_file())
        .cloned()
        .unwrap_or_else(|| {
            panic!(
                "the kinema binary is not built (looked at {candidates:?}); \
                 run `cargo build -p kinema-server` (or `cargo nextest run --workspace`, \
                 which builds it)"
            )
        })
}

/// Run `kinema` with `args` and wait for it.
///
/// # Panics
/// When the binary cannot be started.
pub fn kinema(args: &[&str]) -> Output {
    Command::new(kinema_bin())
        .args(args)
        .env_remove("DATABASE_URL")
        .output()
        .expect("the kinema binary runs")
}

/// Run `kinema` with `args` and insist on exit code 0; returns stdout.
///
/// # Panics
/// When the command fails.
pub fn kinema_ok(args: &[&str]) -> String {
    let out = kinema(args);
    assert!(
        out.status.success(),
        "kinema {args:?} failed ({:?}):\n{}",
        out.status.code(),
        String::from_utf8_lossy(&out.stderr)
    );
    String::from_utf8(out.stdout).expect("stdout is UTF-8")
}

/// An API key made with `kinema keys create`.
#[derive(Debug, Clone)]
pub struct Key {
    /// The key's ID (UUID, as `kinema keys list` and `kinema keys revoke` use it).
    pub id: String,
    /// The secret token.
    pub token: String,
}

/// Create a key with `scope` (`read`, `write`, `admin`), limited to `structures` when
/// not empty, through the real CLI: the token is the last line of stdout.
///
/// # Panics
/// When the command fails or prints something unexpected.
pub fn create_key(database_url: &str, scope: &str, structures: &[&str]) -> Key {
    let mut args = vec![
        "keys",
        "create",
        "--scope",
        scope,
        "--label",
        "e2e test",
        "--database-url",
        database_url,
    ];
    let joined = structures.join(",");
    if !structures.is_empty() {
        args.extend(["--structure", joined.as_str()]);
    }
    let out = kinema_ok(&args);
    let token = out.lines().last().unwrap_or("").trim().to_owned();
    let id = out
        .lines()
        .find_map(|l| l.strip_prefix("created key "))
        .and_then(|l| l.split_whitespace().next())
        .unwrap_or_else(|| panic!("no key ID in {out:?}"))
        .to_owned();
    assert!(
        token.starts_with("kn_"),
        "no token on the last line: {out:?}"
    );
    Key { id, token }
}

/// Poll `done` every 50 ms until it gives a value, at most `limit`.
///
/// # Panics
/// When `limit` passes first (naming `what` was waited for).
pub fn wait_for<T>(limit: Duration, what: &str, mut done: impl FnMut() -> Option<T>) -> T {
    let deadline = Instant::now() + limit;
    loop {
        if let Some(v) = done() {
            return v;
        }
        assert!(Instant::now() < deadline, "timed out waiting for {what}");
        std::thread::sleep(Duration::from_millis(50));
    }
}

/// A database for one end-to-end case: an SQLite file in a temporary folder or a fresh
/// PostgreSQL schema; removed when dropped.
#[derive(Debug)]
pub struct TestDb {
    /// `DATABASE_URL` for the server and the CLI.
    pub url: String,
    /// Which backend.
    pub backend: &'static str,
    sqlite_dir: Option<tempfile::TempDir>,
    pg: Option<PgSchema>,
}

/// A small runtime for the async database helpers.
fn block_on<F: Future>(f: F) -> F::Output {
    tokio::runtime::Builder::new_current_thread()
        .enable_all()
        .build()
        .expect("a tokio runtime")
        .block_on(f)
}

impl TestDb {
    /// A fresh SQLite file (not yet created; the server creates it).
    pub fn sqlite() -> Self {
        let (url, dir) = sqlite_file();
        Self {
            url,
            backend: "sqlite",
            sqlite_dir: Some(dir),
            pg: None,
        }
    }

    /// A fresh, empty PostgreSQL schema named after `tag`.
    ///
    /// # Panics
    /// When PostgreSQL is not reachable.
    pub fn postgres(tag: &str) -> Self {
        let schema = block_on(PgSchema::create(tag));
        Self {
            url: schema.url.clone(),
            backend: "postgres",
            sqlite_dir: None,
            pg: Some(schema),
        }
    }

    /// The folder of the SQLite file (SQLite only).
    pub fn sqlite_dir(&self) -> Option<&std::path::Path> {
        self.sqlite_dir.as_ref().map(tempfile::TempDir::path)
    }

    /// The PostgreSQL schema's name (PostgreSQL only).
    pub fn pg_schema(&self) -> Option<&str> {
        self.pg.as_ref().map(|s| s.schema.as_str())
    }
}

impl Drop for TestDb {
    fn drop(&mut self) {
        if let Some(s) = self.pg.take() {
            block_on(s.drop_schema());
        }
    }
}

/// `e2e!(case, …)`: one `#[test]` per case on each backend, in modules `sqlite` and
/// `postgres`. A case is `fn case(db: &TestDb)`.
#[macro_export]
macro_rules! e2e {
    ($($case:ident),* $(,)?) => {
        mod sqlite {
            $(
                #[test]
                fn $case() {
                    let db = $crate::server::TestDb::sqlite();
                    super::$case(&db);
                }
            )*
        }
        mod postgres {
            $(
                #[test]
                fn $case() {
                    let db = $crate::server::TestDb::postgres(stringify!($case));
                    super::$case(&db);
                }
            )*
        }
    };
}

/// A running `kinema serve`, stopped with SIGTERM when dropped.
#[derive(Debug)]
pub struct Server {
    child: Child,
    /// Where it listens.
    pub addr: SocketAddr,
    stderr: Arc<Mutex<String>>,
    stderr_reader: Option<std::thread::JoinHandle<()>>,
    exited: Option<ExitStatus>,
}

impl Server {
    /// `kinema serve --listen 127.0.0.1:0 --database-url URL`, waiting until `/readyz`
    /// answers 200.
    ///
    /// # Panics
    /// When the server does not start.
    pub fn start(database_url: &str) -> Self {
        Self::start_with(database_url, &[])
    }

    /// As [`Server::start`] with more `serve` flags.
    ///
    /// # Panics
    /// When the server does not start.
    pub fn start_with(database_url: &str, extra: &[&str]) -> Self {
        let mut child = Command::new(kinema_bin())
            .args(["serve", "--listen", "127.0.0.1:0", "--database-url"])
            .arg(database_url)
            .args(extra)
            .env_remove("DATABASE_URL")
            .env("KINEMA_LOG", "info")
            .stdin(Stdio::null())
            .stdout(Stdio::piped())
            .stderr(Stdio::piped())
            .spawn()
            .expect("start kinema serve");
        let stderr = Arc::new(Mutex::new(String::new()));
        let mut stderr_reader = None;
        if let Some(err) = child.stderr.take() {
            let sink = stderr.clone();
            stderr_reader = Some(std::thread::spawn(move || {
                for line in BufReader::new(err).lines().map_while(Result::ok) {
                    if let Ok(mut s) = sink.lock() {
                        s.push_str(&line);
                        s.push('\n');
                    }
                }
            }));
        }
        let (tx, rx) = mpsc::channel();
        if let Some(out) = child.stdout.take() {
            std::thread::spawn(move || {
                for line in BufReader::new(out).lines().map_while(Result::ok) {
                    let _ = tx.send(line);
                }
            });
        }
        let mut server = Self {
            child,
            addr: SocketAddr::from(([127, 0, 0, 1], 0)),
            stderr,
            stderr_reader,
            exited: None,
        };
        let deadline = Instant::now() + START_TIMEOUT;
        let addr = loop {
            let left = deadline.saturating_duration_since(Instant::now());
            match rx.recv_timeout(left) {
                Ok(line) => {
                    if let Some(a) = line.strip_prefix("listening on http://") {
                        break a
                            .trim()
                            .parse::<SocketAddr>()
                            .unwrap_or_else(|e| panic!("bad address in {line:?}: {e}"));
                    }
                }
                Err(_) => panic!(
                    "kinema serve printed no `listening on` line; exit {:?}, stderr:\n{}",
                    server.child.try_wait().ok().flatten(),
                    server.stderr()
                ),
            }
        };
        server.addr = addr;
        loop {
            let ready = std::net::TcpStream::connect(addr).is_ok()
                && Request::new("GET", "/readyz").send(addr).status == 200;
            if ready {
                break;
            }
            assert!(
                Instant::now() < deadline,
                "/readyz did not answer 200; stderr:\n{}",
                server.stderr()
            );
            std::thread::sleep(Duration::from_millis(50));
        }
        server
    }

    /// Everything the server wrote to stderr so far (its log lines).
    pub fn stderr(&self) -> String {
        self.stderr.lock().map(|s| s.clone()).unwrap_or_default()
    }

    /// Everything the server wrote to stderr, once it has exited (waits for the end of
    /// the stream).
    ///
    /// # Panics
    /// When the process is still running.
    pub fn stderr_after_exit(&mut self) -> String {
        assert!(!self.running(), "the server is still running");
        if let Some(h) = self.stderr_reader.take() {
            let _ = h.join();
        }
        self.stderr()
    }

    /// Send `req` to the server.
    pub fn send(&self, req: &Request<'_>) -> Response {
        req.send(self.addr)
    }

    /// `GET path` without a key.
    pub fn get(&self, path: &str) -> Response {
        self.send(&Request::new("GET", path))
    }

    /// Send SIGTERM.
    ///
    /// # Panics
    /// When the signal cannot be sent.
    pub fn sigterm(&self) {
        let pid = i32::try_from(self.child.id()).expect("a pid fits i32");
        kill(Pid::from_raw(pid), Signal::SIGTERM).expect("send SIGTERM");
    }

    /// The process ID.
    pub fn pid(&self) -> u32 {
        self.child.id()
    }

    /// Kill the process at once (SIGKILL: no shutdown, no cleanup, as when a machine
    /// dies) and wait for it.
    pub fn kill(&mut self) {
        let _ = self.child.kill();
        if let Ok(status) = self.child.wait() {
            self.exited = Some(status);
        }
    }

    /// Whether the process is still running.
    pub fn running(&mut self) -> bool {
        if self.exited.is_some() {
            return false;
        }
        match self.child.try_wait() {
            Ok(Some(status)) => {
                self.exited = Some(status);
                false
            }
            _ => true,
        }
    }

    /// Wait until the process exits, at most `timeout`; `None` when it is still running.
    pub fn wait_exit(&mut self, timeout: Duration) -> Option<ExitStatus> {
        let deadline = Instant::now() + timeout;
        while Instant::now() < deadline {
            if !self.running() {
                return self.exited;
            }
            std::thread::sleep(Duration::from_millis(20));
        }
        None
    }
}

impl Drop for Server {
    fn drop(&mut self) {
        if self.running() {
            let _ =
                i32::try_from(self.child.id()).map(|pid| kill(Pid::from_raw(pid), Signal::SIGTERM));
            if self.wait_exit(Duration::from_secs(10)).is_none() {
                let _ = self.child.kill();
                let _ = self.child.wait();
            }
        }
    }
}
