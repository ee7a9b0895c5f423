//! Running the real `perihelix serve` binary in a test: a configuration in
//! a temporary directory (API on a loopback port the kernel picks),
//! readiness read from a NOTIFY_SOCKET as systemd would, a real HTTP client,
//! SIGTERM or SIGKILL to stop it. Every wait is a bounded poll.

use std::net::SocketAddr;
use std::os::unix::net::UnixDatagram;
use std::path::{Path, PathBuf};
use std::process::{Child, Command, Stdio};
use std::time::{Duration, Instant};

use serde_json::Value;

use super::repo;

/// Waits for `f` to give a value, polling every `every`, for at most
/// `limit`; panics with `what` when it never does.
pub fn poll_until<T>(
    what: &str,
    limit: Duration,
    every: Duration,
    mut f: impl FnMut() -> Option<T>,
) -> T {
    let deadline = Instant::now() + limit;
    loop {
        if let Some(v) = f() {
            return v;
        }
        assert!(
            Instant::now() < deadline,
            "timed out after {limit:?} waiting for {what}"
        );
        std::thread::sleep(every);
    }
}

/// The plots the object page of the invented outgassing body
/// (tests/reference/fixtures/synthetic/hyperbolic_outgassing) must have
/// once it has two solutions or more: the terms and the shifts have data
/// from the second solution on, and the gravity-only residuals are shown
/// because an outgassing model is recommended from the half arc on.
pub const OUTGASSING_PAGE_PLOTS: [&str; 10] = [
    "plot-inverse-a",
    "plot-e",
    "plot-ng",
    "plot-rms",
    "plot-terms",
    "plot-shift",
    "plot-residuals-ra",
    "plot-gravity-residuals-ra",
    "plot-residuals-dec",
    "plot-gravity-residuals-dec",
];

/// A daemon's directories and configuration.
pub struct DaemonDir {
    pub root: tempfile::TempDir,
    pub config: PathBuf,
}

impl DaemonDir {
    /// A configuration with the shipped stations, the embedded ephemeris,
    /// the API on a free loopback port, and `extra` TOML appended (it may
    /// set [refit] and the like).
    pub fn new(refit: &str) -> Self {
        let root = tempfile::tempdir().expect("a temporary directory");
        let config = root.path().join("config.toml");
        let text = format!(
            "[directories]\nincoming = \"incoming\"\narchive = \"archive\"\nrejected = \"rejected\"\ndatabase = \"db\"\n\
             [stations]\nfile = \"{}\"\n[api]\nbind = \"127.0.0.1:0\"\n[refit]\n{refit}\n",
            repo().join("config/stations.toml").display()
        );
        std::fs::write(&config, text).expect("the configuration is written");
        for d in ["incoming", "archive", "rejected"] {
            std::fs::create_dir_all(root.path().join(d)).expect("a directory");
        }
        Self { root, config }
    }

    pub fn path(&self, name: &str) -> PathBuf {
        self.root.path().join(name)
    }

    /// Writes a file into the incoming directory the way a careful
    /// producer does: under a temporary name, then renamed in.
    pub fn drop_file(&self, name: &str, text: &str) {
        let part = self.path("incoming").join(format!("{name}.part"));
        std::fs::write(&part, text).expect("the file is written");
        std::fs::rename(&part, self.path("incoming").join(name)).expect("the file is renamed in");
    }

    /// Every file under a directory, recursively (names only).
    pub fn files_under(&self, dir: &str) -> Vec<PathBuf> {
        fn walk(p: &Path, out: &mut Vec<PathBuf>) {
            if let Ok(entries) = std::fs::read_dir(p) {
                for e in entries.flatten() {
                    let path = e.path();
                    if path.is_dir() {
                        walk(&path, out);
                    } else {
                        out.push(path);
                    }
                }
            }
        }
        let mut out = Vec::new();
        walk(&self.path(dir), &mut out);
        out.sort();
        out
    }
}

/// A running daemon.
pub struct Running {
    pub child: Child,
    pub addr: SocketAddr,
    _socket_dir: tempfile::TempDir,
    runtime: tokio::runtime::Runtime,
    client: reqwest::Client,
    pub log: PathBuf,
}

/// The API token the tests' daemons are given through the environment.
pub const TOKEN: &str = "test-token-7f3a";

impl Running {
    /// Starts `perihelix serve` and waits (at most `limit`) for READY=1;
    /// a daemon that exits first fails the test with its log.
    pub fn start(dir: &DaemonDir, limit: Duration) -> Self {
        match Self::try_start(dir, limit) {
            Ok(running) => running,
            Err(refused) => panic!(
                "the daemon exited with {} before it was ready:\n{}",
                refused.status, refused.stderr
            ),
        }
    }

    pub fn url(&self, path: &str) -> String {
        format!("http://{}{path}", self.addr)
    }

    /// GET; the status and the body as JSON (Null when not JSON).
    pub fn get(&self, path: &str) -> (u16, Value) {
        let (status, text) = self.get_raw(path);
        (status, serde_json::from_str(&text).unwrap_or(Value::Null))
    }

    /// GET; the body as text.
    pub fn get_text(&self, path: &str) -> String {
        self.get_raw(path).1
    }

    fn get_raw(&self, path: &str) -> (u16, String) {
        let url = self.url(path);
        self.runtime.block_on(async {
            let r = self
                .client
                .get(&url)
                .send()
                .await
                .expect("the daemon answers");
            let status = r.status().as_u16();
            (status, r.text().await.unwrap_or_default())
        })
    }

    /// POST with an optional bearer token.
    pub fn post(
        &self,
        path: &str,
        token: Option<&str>,
        content_type: &str,
        body: Vec<u8>,
    ) -> (u16, Value) {
        let url = self.url(path);
        self.runtime.block_on(async {
            let mut req = self
                .client
                .post(&url)
                .header("content-type", content_type)
                .body(body);
            if let Some(t) = token {
                req = req.bearer_auth(t);
            }
            let r = req.send().await.expect("the daemon answers");
            let status = r.status().as_u16();
            let text = r.text().await.unwrap_or_default();
            (status, serde_json::from_str(&text).unwrap_or(Value::Null))
        })
    }

    /// The object's solutions (newest first), all pages.
    pub fn solutions(&self, object: &str) -> Vec<Value> {
        let mut out = Vec::new();
        let mut cursor: Option<String> = None;
        loop {
            let mut path = format!("/v1/objects/{}/solutions?limit=1000", encode(object));
            if let Some(c) = &cursor {
                path.push_str(&format!("&cursor={c}"));
            }
            let (status, page) = self.get(&path);
            if status != 200 {
                return out;
            }
            out.extend(page["solutions"].as_array().cloned().unwrap_or_default());
            match page["next_cursor"].as_str() {
                Some(c) => cursor = Some(c.to_string()),
                None => return out,
            }
        }
    }

    /// SIGTERM, then the exit status (bounded wait).
    pub fn stop(mut self, limit: Duration) -> std::process::ExitStatus {
        let _ = Command::new("kill")
            .arg("-TERM")
            .arg(self.child.id().to_string())
            .status();
        let deadline = Instant::now() + limit;
        loop {
            if let Ok(Some(s)) = self.child.try_wait() {
                return s;
            }
            if Instant::now() > deadline {
                let _ = self.child.kill();
                panic!(
                    "the daemon did not stop within {limit:?} of SIGTERM:\n{}",
                    std::fs::read_to_string(&self.log).unwrap_or_default()
                );
            }
            std::thread::sleep(Duration::from_millis(50));
        }
    }

    /// SIGKILL: no chance to flush or say goodbye.
    pub fn kill9(mut self) {
        let _ = self.child.kill();
        let _ = self.child.wait();
    }

    pub fn log_text(&self) -> String {
        std::fs::read_to_string(&self.log).unwrap_or_default()
    }
}

impl Drop for Running {
    fn drop(&mut self) {
        let _ = self.child.kill();
        let _ = self.child.wait();
    }
}

fn unique(p: PathBuf) -> PathBuf {
    let mut n = 0;
    loop {
        let candidate = if n == 0 {
            p.clone()
        } else {
            p.with_extension(format!("{n}.log"))
        };
        if !candidate.exists() {
            return candidate;
        }
        n += 1;
    }
}

/// Percent-encodes a path segment.
pub fn encode(s: &str) -> String {
    perihelix::daemon::history::encode_path(s)
}

/// The header lines of a PSV file (everything before the first data row)
/// and its data rows grouped by UTC night (the date of obsTime).
pub fn psv_nights(path: &Path) -> (String, Vec<(String, Vec<String>)>) {
    let text = std::fs::read_to_string(path).expect("the fixture reads");
    let mut header = String::new();
    let mut nights: Vec<(String, Vec<String>)> = Vec::new();
    let mut time_col = None;
    for line in text.lines() {
        if time_col.is_none() {
            header.push_str(line);
            header.push('\n');
            if !line.starts_with('#') && !line.starts_with('!') {
                time_col = line.split('|').position(|c| c.trim() == "obsTime");
            }
            continue;
        }
        let Some(col) = time_col else { continue };
        let date = line
            .split('|')
            .nth(col)
            .map(|t| t.trim().chars().take(10).collect::<String>())
            .unwrap_or_default();
        match nights.last_mut() {
            Some((d, rows)) if *d == date => rows.push(line.to_string()),
            _ => nights.push((date, vec![line.to_string()])),
        }
    }
    (header, nights)
}

impl DaemonDir {
    /// Writes bytes (not necessarily text) into the incoming directory
    /// under a temporary name, then renames them in.
    pub fn drop_bytes(&self, name: &str, bytes: &[u8]) {
        let part = self.path("incoming").join(format!("{name}.part"));
        std::fs::write(&part, bytes).expect("the file is written");
        std::fs::rename(&part, self.path("incoming").join(name)).expect("the file is renamed in");
    }

    /// Streams a file into the incoming directory through `write` (so a
    /// big file is never held whole), under a temporary name, then renames
    /// it in. Returns the bytes written.
    pub fn drop_streamed(
        &self,
        name: &str,
        write: impl FnOnce(&mut dyn std::io::Write) -> std::io::Result<()>,
    ) -> u64 {
        let part = self.path("incoming").join(format!("{name}.part"));
        let file = std::fs::File::create(&part).expect("the file is created");
        let mut out = std::io::BufWriter::with_capacity(1 << 20, file);
        write(&mut out).expect("the file is written");
        let file = out.into_inner().expect("the file is flushed");
        file.sync_all().expect("the file is synced");
        let bytes = file.metadata().expect("the file's size").len();
        std::fs::rename(&part, self.path("incoming").join(name)).expect("the file is renamed in");
        bytes
    }

    /// The file's rejection report `NAME.errors.json` in the rejected
    /// directory, parsed, once it exists.
    pub fn errors_report(&self, name: &str) -> Option<Value> {
        let text = std::fs::read(self.path("rejected").join(format!("{name}.errors.json"))).ok()?;
        serde_json::from_slice(&text).ok()
    }
}

impl Running {
    /// The daemon's process id.
    pub fn pid(&self) -> u32 {
        self.child.id()
    }

    /// An object's stored observation count from the API (None while the
    /// object is unknown).
    pub fn observation_count(&self, object: &str) -> Option<u64> {
        let (status, o) = self.get(&format!("/v1/objects/{}", encode(object)));
        (status == 200)
            .then(|| o["observations"].as_u64())
            .flatten()
    }
}

/// A `kB` figure of /proc/PID/status (`VmHWM`, `VmRSS`), in KiB.
pub fn proc_status_kib(pid: u32, key: &str) -> Option<u64> {
    let status = std::fs::read_to_string(format!("/proc/{pid}/status")).ok()?;
    let line = status.lines().find(|l| l.split(':').next() == Some(key))?;
    line.split_whitespace().nth(1)?.parse().ok()
}

/// The invented object of the generated files: the half-month letter Z is
/// never assigned, so it cannot name a real body.
pub const INVENTED_OBJECT: &str = "2026 ZC4";

/// The invented stations of config/stations.toml.
pub const INVENTED_STATIONS: [&str; 4] = ["ZQA", "ZQB", "ZQC", "ZQD"];

/// The column header of the generated files: the columns and padding of
/// tests/bench/ingest.rs.
pub const INVENTED_COLUMNS: &str = "permID |provID     |trkSub  |mode|stn |obsTime                 |ra          |dec         |rmsRA|rmsDec|rmsCorr|astCat|mag  |rmsMag|band|notes|remarks";

/// The header of generated block `k`: the version line (first block
/// only), the observatory and submitter groups, and the column header.
pub fn invented_block_header(k: usize) -> String {
    let station = INVENTED_STATIONS[k % INVENTED_STATIONS.len()];
    let version = if k == 0 { "# version=2022\n" } else { "" };
    format!(
        "{version}# observatory\n! mpcCode {station}\n# submitter\n! name Invented Submitter {k}\n{INVENTED_COLUMNS}\n"
    )
}

/// `seconds` after 2026-11-01T00:00:00Z as an ADES obsTime with
/// milliseconds (good for a year of seconds; no leap second falls in it).
pub fn invented_time(seconds: u64, millis: u64) -> String {
    const MONTHS: [(u32, u32, u64); 12] = [
        (2026, 11, 30),
        (2026, 12, 31),
        (2027, 1, 31),
        (2027, 2, 28),
        (2027, 3, 31),
        (2027, 4, 30),
        (2027, 5, 31),
        (2027, 6, 30),
        (2027, 7, 31),
        (2027, 8, 31),
        (2027, 9, 30),
        (2027, 10, 31),
    ];
    let mut day = seconds / 86_400;
    let rest = seconds % 86_400;
    let mut at = MONTHS[MONTHS.len() - 1];
    for m in MONTHS {
        if day < m.2 {
            at = m;
            break;
        }
        day -= m.2;
    }
    format!(
        "{:04}-{:02}-{:02}T{:02}:{:02}:{:02}.{millis:03}Z",
        at.0,
        at.1,
        day + 1,
        rest / 3600,
        (rest / 60) % 60,
        rest % 60
    )
}

/// Data row `i` of a generated file: one valid observation of `object`
/// from `station`, 9 s after row `i - 1` (so every row is distinct), on a
/// slow drift across the sky plus seeded noise of about 0.1 arcsec.
pub fn invented_row(
    object: &str,
    station: &str,
    i: usize,
    rng: &mut perihelix::fit::sampling::Gaussian,
) -> String {
    let seconds = i as u64 * 9;
    let days = seconds as f64 / 86_400.0;
    let noise_deg = 0.1 / 3600.0;
    let ra = 40.0 + 0.5 * days + noise_deg * rng.next_normal();
    let dec = 12.0 - 0.2 * days + noise_deg * rng.next_normal();
    let time = invented_time(seconds, (i as u64 * 125) % 1000);
    format!(
        "       |{object:<11}|        | CCD|{station} |{time}|{ra:<12.6}|{dec:<+12.6}|0.15 |0.13  | 0.21  |Gaia3 |21.9 |0.25  |   G|     |\n"
    )
}

/// Writes `rows` generated observations of `object` (seeded), starting a
/// new block (observatory, submitter, column header) every
/// `rows_per_block` rows.
pub fn write_invented_psv(
    out: &mut dyn std::io::Write,
    object: &str,
    rows: usize,
    rows_per_block: usize,
    seed: u64,
) -> std::io::Result<()> {
    let mut rng = perihelix::fit::sampling::Gaussian::new(seed);
    let per_block = rows_per_block.max(1);
    for i in 0..rows {
        let block = i / per_block;
        if i % per_block == 0 {
            out.write_all(invented_block_header(block).as_bytes())?;
        }
        let station = INVENTED_STATIONS[block % INVENTED_STATIONS.len()];
        out.write_all(invented_row(object, station, i, &mut rng).as_bytes())?;
    }
    Ok(())
}

/// How a daemon that was asked to start ended instead.
#[derive(Debug)]
pub struct Refused {
    pub status: std::process::ExitStatus,
    /// Everything it wrote to standard error (its log and last message).
    pub stderr: String,
}

impl Running {
    /// Starts `perihelix serve` as [`Running::start`] does, except that a
    /// daemon exiting before it is ready is an answer, not a failure: a
    /// test of a store that must be refused needs to see the refusal, and
    /// one that may be refused or recovered needs to see which.
    pub fn try_start(dir: &DaemonDir, limit: Duration) -> Result<Self, Refused> {
        let socket_dir = tempfile::tempdir().expect("a socket directory");
        let socket_path = socket_dir.path().join("notify.sock");
        let socket = UnixDatagram::bind(&socket_path).expect("the notify socket binds");
        socket
            .set_read_timeout(Some(Duration::from_millis(200)))
            .expect("a read timeout");
        let log = unique(dir.path("daemon.log"));
        let mut child = Command::new(env!("CARGO_BIN_EXE_perihelix"))
            .arg("serve")
            .arg("--config")
            .arg(&dir.config)
            .env("NOTIFY_SOCKET", &socket_path)
            .env("PERIHELIX_API_TOKEN", TOKEN)
            .env("RUST_LOG", "info")
            .stdout(Stdio::null())
            .stderr(std::fs::File::create(&log).expect("a log file"))
            .spawn()
            .expect("the daemon starts");
        let mut status = None;
        let deadline = Instant::now() + limit;
        let mut buf = [0u8; 4096];
        loop {
            if let Ok(Some(exit)) = child.try_wait() {
                return Err(Refused {
                    status: exit,
                    stderr: std::fs::read_to_string(&log).unwrap_or_default(),
                });
            }
            if Instant::now() >= deadline {
                let _ = child.kill();
                let _ = child.wait();
                panic!(
                    "the daemon neither got ready nor exited in {limit:?}:\n{}",
                    std::fs::read_to_string(&log).unwrap_or_default()
                );
            }
            if let Ok(n) = socket.recv(&mut buf) {
                let text = String::from_utf8_lossy(&buf[..n]).to_string();
                let mut ready = false;
                for line in text.lines() {
                    if line == "READY=1" {
                        ready = true;
                    }
                    if let Some(s) = line.strip_prefix("STATUS=serving on ") {
                        status = s.parse::<SocketAddr>().ok();
                    }
                }
                if ready {
                    break;
                }
            }
        }
        let addr = status.expect("the readiness message names the address");
        let runtime = tokio::runtime::Builder::new_current_thread()
            .enable_all()
            .build()
            .expect("a runtime for the HTTP client");
        let client = reqwest::Client::builder()
            .timeout(Duration::from_secs(30))
            .build()
            .expect("an HTTP client");
        Ok(Self {
            child,
            addr,
            _socket_dir: socket_dir,
            runtime,
            client,
            log,
        })
    }
}

/// Runs a command to its end, for at most `limit` (then kills it and
/// fails): its exit status, standard output and standard error. The output
/// goes through files, so a chatty command never blocks on a full pipe
/// while it is waited for.
pub fn run_bounded(
    command: &mut Command,
    limit: Duration,
) -> (std::process::ExitStatus, String, String) {
    let dir = tempfile::tempdir().expect("a directory for the output");
    let (out_path, err_path) = (dir.path().join("stdout"), dir.path().join("stderr"));
    let mut child = command
        .stdin(Stdio::null())
        .stdout(std::fs::File::create(&out_path).expect("an output file"))
        .stderr(std::fs::File::create(&err_path).expect("an output file"))
        .spawn()
        .expect("the command starts");
    let deadline = Instant::now() + limit;
    let status = loop {
        if let Some(s) = child.try_wait().expect("the command can be waited for") {
            break s;
        }
        if Instant::now() >= deadline {
            let _ = child.kill();
            let _ = child.wait();
            panic!(
                "{command:?} did not finish in {limit:?}:\n{}",
                std::fs::read_to_string(&err_path).unwrap_or_default()
            );
        }
        std::thread::sleep(Duration::from_millis(20));
    };
    let read = |p: &Path| std::fs::read_to_string(p).unwrap_or_default();
    (status, read(&out_path), read(&err_path))
}

/// Bytes under a directory, recursively (0 where it cannot be read).
pub fn bytes_under(dir: &Path) -> u64 {
    let Ok(entries) = std::fs::read_dir(dir) else {
        return 0;
    };
    entries
        .flatten()
        .map(|e| match e.metadata() {
            Ok(m) if m.is_dir() => bytes_under(&e.path()),
            Ok(m) => m.len(),
            Err(_) => 0,
        })
        .sum()
}

/// KiB (as /proc/PID/status gives them) in MiB.
pub fn mib(kib: u64) -> f64 {
    kib as f64 / 1024.0
}

/// A PSV file: `header` (with its newline) and then `rows`, one a line.
pub fn psv_file(header: &str, rows: &[String]) -> String {
    let mut text = header.to_string();
    for r in rows {
        text.push_str(r);
        text.push('\n');
    }
    text
}
