//! A small client of the Chrome DevTools Protocol (CDP) for the page test:
//! a real headless Chromium started on this machine, driven over its
//! loopback websocket. It opens a page, navigates, gathers what the page
//! logs as an error, evaluates JavaScript for JSON answers and takes
//! full-page screenshots.
//!
//! One websocket to the browser carries everything: pages are attached in
//! the flat session mode, so a page's commands and events are the
//! browser's messages tagged with the page's `sessionId`. Messages arrive
//! in order; a command's answer is the message with its `id`, and every
//! event read while waiting for one is kept for whoever waits for it next.
//!
//! Every wait is bounded: the socket reads with a short timeout and each
//! loop checks its deadline, so a browser that hangs fails the test with
//! what it said instead of hanging it. Chromium runs in its own process
//! group, and the whole group is killed when the [`Browser`] goes away,
//! with the crash handlers that leave the group (found by the temporary
//! directory they name).

use std::collections::{HashMap, VecDeque};
use std::io::{BufRead, BufReader, ErrorKind};
use std::net::{TcpStream, ToSocketAddrs};
use std::os::unix::fs::PermissionsExt;
use std::os::unix::process::CommandExt;
use std::path::{Path, PathBuf};
use std::process::{Child, Command, Stdio};
use std::sync::mpsc;
use std::sync::{Arc, Mutex};
use std::time::{Duration, Instant};

use base64::Engine;
use serde_json::{json, Value};
use tungstenite::protocol::WebSocketConfig;
use tungstenite::{Message, WebSocket};

/// How to get a browser when none is found.
pub const HOW_TO_GET_CHROMIUM: &str = "run bash tests/reference/setup-chromium.sh (installs Debian's chromium) or set PERIHELIX_CHROMIUM";

/// One socket read waits at most this long, so every loop over reads can
/// look at its own deadline in between.
const READ_SLICE: Duration = Duration::from_millis(250);

/// A command's answer: generous, the machine is small and loaded.
const COMMAND: Duration = Duration::from_secs(60);

/// Lines of Chromium's standard error kept for failure messages.
const STDERR_LINES: usize = 400;

/// The browser binary: `PERIHELIX_CHROMIUM`, else `chromium`, else
/// `chromium-browser` on PATH. A missing browser fails the test: the page
/// test is part of the suite, not an optional extra.
pub fn chromium_binary() -> PathBuf {
    if let Some(named) = std::env::var_os("PERIHELIX_CHROMIUM") {
        let path = PathBuf::from(&named);
        assert!(
            is_executable(&path),
            "PERIHELIX_CHROMIUM={} is not an executable file: {HOW_TO_GET_CHROMIUM}",
            path.display()
        );
        return path;
    }
    let dirs: Vec<PathBuf> = std::env::var_os("PATH")
        .map(|p| std::env::split_paths(&p).collect())
        .unwrap_or_default();
    for name in ["chromium", "chromium-browser"] {
        if let Some(found) = dirs.iter().map(|d| d.join(name)).find(|p| is_executable(p)) {
            return found;
        }
    }
    panic!("no chromium or chromium-browser on PATH: {HOW_TO_GET_CHROMIUM}");
}

fn is_executable(path: &Path) -> bool {
    std::fs::metadata(path)
        .map(|m| m.is_file() && m.permissions().mode() & 0o111 != 0)
        .unwrap_or(false)
}

/// A running headless Chromium and the websocket to it.
pub struct Browser {
    child: Child,
    /// The process group Chromium leads (its pid): the renderers, the GPU
    /// and utility processes and the crash handler are all in it.
    pgid: u32,
    ws: Option<WebSocket<TcpStream>>,
    next_id: u64,
    /// Events read but not yet asked for, oldest first.
    events: VecDeque<Value>,
    /// What each page session logged as an error, in arrival order.
    errors: HashMap<String, Vec<String>>,
    stderr: Arc<Mutex<VecDeque<String>>>,
    /// The profile and Chromium's configuration directory, removed only
    /// after the processes that write into it are gone.
    home: Option<tempfile::TempDir>,
    /// `home`'s path with a trailing slash: every process of this browser
    /// names it on its command line, including the crash handlers, which
    /// leave the process group.
    marker: String,
    shut_down: bool,
}

/// The answer to a navigation.
#[derive(Debug, Clone)]
pub struct Navigation {
    /// The URL that was asked for.
    pub url: String,
    /// The document's HTTP status.
    pub status: u16,
}

impl Browser {
    /// Starts Chromium (headless, a fresh profile, DevTools on a port the
    /// kernel picks) and connects to it; waits at most `limit` for it to
    /// say where it listens.
    pub fn launch(limit: Duration) -> Self {
        let binary = chromium_binary();
        let home = tempfile::tempdir().expect("a temporary directory for Chromium");
        let marker = format!("{}/", home.path().display());
        let mut child = Command::new(&binary)
            .args([
                "--headless",
                "--no-sandbox",
                "--disable-gpu",
                // The network is closed here: without these Chromium keeps
                // trying to reach its own services and fills its log with
                // refused connections.
                "--disable-quic",
                "--no-first-run",
                "--disable-background-networking",
                "--disable-component-update",
                "--disable-sync",
                "--disable-default-apps",
                "--mute-audio",
            ])
            .arg(format!("--user-data-dir={marker}profile"))
            .arg("--remote-debugging-port=0")
            .arg("about:blank")
            // The crash handlers keep their database under the
            // configuration directory and name it on their command line:
            // there they are found at the end, and nothing is left in the
            // user's own ~/.config.
            .env("XDG_CONFIG_HOME", format!("{marker}config"))
            .env("XDG_CACHE_HOME", format!("{marker}cache"))
            .stdin(Stdio::null())
            .stdout(Stdio::null())
            .stderr(Stdio::piped())
            // Its own group, so that one signal reaches every process it
            // forks, and none outlives the test.
            .process_group(0)
            .spawn()
            .unwrap_or_else(|e| {
                panic!(
                    "{} does not start ({e}): {HOW_TO_GET_CHROMIUM}",
                    binary.display()
                )
            });
        let pgid = child.id();

        // A thread drains standard error for Chromium's whole life (a full
        // pipe would stall it) and hands over the lines; the websocket
        // address is one of them.
        let stderr = Arc::new(Mutex::new(VecDeque::new()));
        let (lines_tx, lines_rx) = mpsc::channel::<String>();
        let pipe = child
            .stderr
            .take()
            .expect("Chromium's standard error is piped");
        {
            let kept = Arc::clone(&stderr);
            std::thread::spawn(move || {
                for line in BufReader::new(pipe).lines() {
                    let Ok(line) = line else { break };
                    if let Ok(mut k) = kept.lock() {
                        if k.len() == STDERR_LINES {
                            k.pop_front();
                        }
                        k.push_back(line.clone());
                    }
                    // The receiver stops listening once it has the address.
                    let _ = lines_tx.send(line);
                }
            });
        }

        let mut browser = Self {
            child,
            pgid,
            ws: None,
            next_id: 0,
            events: VecDeque::new(),
            errors: HashMap::new(),
            stderr,
            home: Some(home),
            marker,
            shut_down: false,
        };
        let deadline = Instant::now() + limit;
        let ws_url = loop {
            let left = deadline.saturating_duration_since(Instant::now());
            match lines_rx.recv_timeout(left.min(READ_SLICE)) {
                Ok(line) => {
                    if let Some(at) = line.find("DevTools listening on ") {
                        break line[at + "DevTools listening on ".len()..]
                            .trim()
                            .to_string();
                    }
                }
                Err(mpsc::RecvTimeoutError::Timeout) if !left.is_zero() => {}
                Err(e) => panic!(
                    "Chromium ({}) did not say where DevTools listens within {limit:?} ({e}); \
                     its standard error so far:\n{}",
                    binary.display(),
                    browser.stderr_text()
                ),
            }
        };
        browser.connect(&ws_url, deadline.saturating_duration_since(Instant::now()));
        browser
    }

    /// Opens the websocket at `ws_url` (`ws://127.0.0.1:PORT/devtools/browser/ID`).
    fn connect(&mut self, ws_url: &str, limit: Duration) {
        let authority = ws_url
            .strip_prefix("ws://")
            .and_then(|rest| rest.split('/').next())
            .unwrap_or_else(|| panic!("an unexpected DevTools address {ws_url:?}"));
        let addr = authority
            .to_socket_addrs()
            .ok()
            .and_then(|mut a| a.next())
            .unwrap_or_else(|| panic!("the DevTools address {ws_url:?} does not resolve"));
        assert!(
            addr.ip().is_loopback(),
            "DevTools listens on {addr}, not on loopback"
        );
        let limit = limit.max(Duration::from_secs(5));
        let stream = TcpStream::connect_timeout(&addr, limit)
            .unwrap_or_else(|e| panic!("connecting to DevTools at {addr}: {e}"));
        // The handshake is a single request and answer: one long timeout
        // for it, then short slices for the message loop.
        stream
            .set_read_timeout(Some(limit))
            .expect("a read timeout on the DevTools socket");
        stream
            .set_write_timeout(Some(COMMAND))
            .expect("a write timeout on the DevTools socket");
        stream
            .set_nodelay(true)
            .expect("TCP_NODELAY on the DevTools socket");
        // A full-page screenshot is one message of several megabytes.
        let config = WebSocketConfig::default()
            .max_message_size(Some(512 << 20))
            .max_frame_size(Some(512 << 20));
        let (ws, _) = tungstenite::client::client_with_config(ws_url, stream, Some(config))
            .unwrap_or_else(|e| {
                panic!(
                    "the DevTools websocket handshake at {ws_url} failed: {e}\n{}",
                    self.stderr_text()
                )
            });
        ws.get_ref()
            .set_read_timeout(Some(READ_SLICE))
            .expect("a short read timeout on the DevTools socket");
        self.ws = Some(ws);
    }

    /// The last lines Chromium wrote to standard error.
    pub fn stderr_text(&self) -> String {
        self.stderr
            .lock()
            .map(|k| k.iter().cloned().collect::<Vec<_>>().join("\n"))
            .unwrap_or_default()
    }

    /// Sends a command (to the browser, or to a page when `session` is
    /// given) and waits at most `limit` for its answer: its `result`, or
    /// its `error` as text.
    fn try_command(
        &mut self,
        session: Option<&str>,
        method: &str,
        params: Value,
        limit: Duration,
    ) -> Result<Value, String> {
        self.next_id += 1;
        let id = self.next_id;
        let mut message = json!({ "id": id, "method": method, "params": params });
        if let Some(s) = session {
            message["sessionId"] = json!(s);
        }
        self.send(&message.to_string(), limit)?;
        let deadline = Instant::now() + limit;
        loop {
            let Some(m) = self.read_one(deadline)? else {
                return Err(format!("no answer to {method} within {limit:?}"));
            };
            if m["id"].as_u64() == Some(id) {
                return match m.get("error") {
                    Some(e) => Err(format!("{method} failed: {e}")),
                    None => Ok(m["result"].clone()),
                };
            }
            self.keep_event(m);
        }
    }

    /// A command that must succeed.
    fn command(&mut self, session: Option<&str>, method: &str, params: Value) -> Value {
        self.try_command(session, method, params, COMMAND)
            .unwrap_or_else(|e| panic!("DevTools: {e}\nChromium said:\n{}", self.stderr_text()))
    }

    fn send(&mut self, text: &str, limit: Duration) -> Result<(), String> {
        let ws = self.ws.as_mut().ok_or("the DevTools socket is closed")?;
        let deadline = Instant::now() + limit;
        let mut outcome = ws.send(Message::text(text));
        // A write that timed out stays queued in the websocket; flushing
        // again carries on where it stopped.
        while let Err(tungstenite::Error::Io(e)) = &outcome {
            if !matches!(e.kind(), ErrorKind::WouldBlock | ErrorKind::TimedOut)
                || Instant::now() >= deadline
            {
                break;
            }
            outcome = ws.flush();
        }
        outcome.map_err(|e| format!("sending to DevTools: {e}"))
    }

    /// The next message as JSON, or None when `deadline` passes first.
    fn read_one(&mut self, deadline: Instant) -> Result<Option<Value>, String> {
        let ws = self.ws.as_mut().ok_or("the DevTools socket is closed")?;
        loop {
            match ws.read() {
                Ok(Message::Text(t)) => {
                    return serde_json::from_str(t.as_str())
                        .map(Some)
                        .map_err(|e| format!("DevTools sent something that is not JSON: {e}"));
                }
                Ok(Message::Close(c)) => return Err(format!("DevTools closed the socket: {c:?}")),
                // Pings are answered by the websocket itself.
                Ok(_) => {}
                // A read slice ran out; tungstenite keeps a partly read
                // message and goes on with it on the next read.
                Err(tungstenite::Error::Io(e))
                    if matches!(e.kind(), ErrorKind::WouldBlock | ErrorKind::TimedOut) =>
                {
                    if Instant::now() >= deadline {
                        return Ok(None);
                    }
                }
                Err(e) => return Err(format!("reading from DevTools: {e}")),
            }
        }
    }

    /// Files an event: an error a page logged goes to that page's list,
    /// anything else waits in the queue.
    fn keep_event(&mut self, event: Value) {
        let Some(session) = event["sessionId"].as_str() else {
            self.events.push_back(event);
            return;
        };
        if let Some(text) = logged_error(&event) {
            self.errors
                .entry(session.to_string())
                .or_default()
                .push(text);
        } else {
            self.events.push_back(event);
        }
    }

    /// Waits at most `limit` for the first event of `session` named
    /// `method` for which `matches` holds, and takes it out of the queue.
    fn wait_event(
        &mut self,
        session: &str,
        method: &str,
        limit: Duration,
        matches: impl Fn(&Value) -> bool,
    ) -> Value {
        let hit = |e: &Value| {
            e["sessionId"].as_str() == Some(session)
                && e["method"].as_str() == Some(method)
                && matches(&e["params"])
        };
        if let Some(at) = self.events.iter().position(hit) {
            return self.events.remove(at).expect("the event is queued");
        }
        let deadline = Instant::now() + limit;
        loop {
            let next = self.read_one(deadline).unwrap_or_else(|e| {
                panic!(
                    "waiting for {method}: {e}\nChromium said:\n{}",
                    self.stderr_text()
                )
            });
            let Some(m) = next else {
                panic!(
                    "no {method} within {limit:?}\nChromium said:\n{}",
                    self.stderr_text()
                );
            };
            if hit(&m) {
                return m;
            }
            self.keep_event(m);
        }
    }

    /// A new tab, attached in the flat session mode, with the domains the
    /// test listens to switched on.
    pub fn open_page(&mut self) -> Page<'_> {
        let target = self.command(None, "Target.createTarget", json!({ "url": "about:blank" }));
        let target_id = target["targetId"]
            .as_str()
            .expect("Target.createTarget names the target")
            .to_string();
        let attached = self.command(
            None,
            "Target.attachToTarget",
            json!({ "targetId": target_id, "flatten": true }),
        );
        let session = attached["sessionId"]
            .as_str()
            .expect("Target.attachToTarget names the session")
            .to_string();
        self.errors.insert(session.clone(), Vec::new());
        for domain in ["Page", "Runtime", "Log", "Network"] {
            self.command(Some(&session), &format!("{domain}.enable"), json!({}));
        }
        // Lifecycle events carry the navigation's loaderId, so a load is
        // known to be this navigation's and not a late one of about:blank.
        self.command(
            Some(&session),
            "Page.setLifecycleEventsEnabled",
            json!({ "enabled": true }),
        );
        Page {
            browser: self,
            session,
            target_id,
        }
    }

    /// Closes Chromium and makes sure every process of its group is gone
    /// (at most about `limit`); true when none is left.
    fn shut_down(&mut self, limit: Duration) -> bool {
        if self.shut_down {
            return true;
        }
        self.shut_down = true;
        // Asked nicely first, so it can end its renderers itself.
        let asked = self.ws.is_some()
            && self
                .try_command(None, "Browser.close", json!({}), Duration::from_secs(5))
                .is_ok();
        self.ws = None;
        let pid = self.child.id();
        if asked {
            // Polled, not reaped: while the leader is a zombie its pid
            // (and so the group id) cannot be reused, so the group kill
            // below cannot reach a stranger.
            let deadline = Instant::now() + limit.min(Duration::from_secs(10));
            while !is_zombie_or_gone(pid) && Instant::now() < deadline {
                std::thread::sleep(Duration::from_millis(50));
            }
        }
        // A negative pid names the group. `--` is essential: procps-ng's
        // kill (4.0.2 here) reads `kill -KILL -1234` as options and sends
        // SIGKILL to pid -1, every process the user may signal.
        if self.pgid > 1 {
            let _ = Command::new("kill")
                .args(["-s", "KILL", "--"])
                .arg(format!("-{}", self.pgid))
                .stderr(Stdio::null())
                .status();
        }
        let _ = self.child.kill();
        let _ = self.child.wait();
        // SIGKILL is delivered at once but a process takes a moment to go.
        // The crash handlers are in sessions of their own and end by
        // themselves once the browser has gone; one that lingers is
        // killed by its pid, found by this browser's own directory.
        let start = Instant::now();
        let mut strays_killed = false;
        loop {
            let left = leftovers(self.pgid, &self.marker);
            if left.is_empty() {
                break;
            }
            if start.elapsed() >= limit {
                return false;
            }
            if !strays_killed && start.elapsed() >= limit / 3 {
                for pid in left {
                    let _ = Command::new("kill")
                        .args(["-s", "KILL", "--"])
                        .arg(pid.to_string())
                        .stderr(Stdio::null())
                        .status();
                }
                strays_killed = true;
            }
            std::thread::sleep(Duration::from_millis(50));
        }
        drop(self.home.take());
        true
    }

    /// Closes Chromium; fails when one of its processes is left over.
    pub fn close(mut self) {
        let gone = self.shut_down(Duration::from_secs(30));
        assert!(
            gone,
            "Chromium processes left over: {:?}",
            leftovers(self.pgid, &self.marker)
        );
    }
}

impl Drop for Browser {
    fn drop(&mut self) {
        if !self.shut_down(Duration::from_secs(30)) {
            eprintln!(
                "Chromium processes left over: {:?}",
                leftovers(self.pgid, &self.marker)
            );
        }
    }
}

/// The fields of /proc/PID/stat after the command name (state, ppid,
/// pgrp, ...); the name in parentheses may itself hold spaces and
/// parentheses, so the fields are read after the last ')'.
fn proc_stat_fields(pid: u32) -> Option<Vec<String>> {
    let stat = std::fs::read_to_string(format!("/proc/{pid}/stat")).ok()?;
    let after = &stat[stat.rfind(')')? + 1..];
    Some(after.split_whitespace().map(str::to_string).collect())
}

fn is_zombie_or_gone(pid: u32) -> bool {
    proc_stat_fields(pid).is_none_or(|f| f.first().map(String::as_str) == Some("Z"))
}

/// Live (not zombie) processes of one browser: those in its group
/// `pgid`, and those whose command line names its directory `marker`.
fn leftovers(pgid: u32, marker: &str) -> Vec<u32> {
    let Ok(entries) = std::fs::read_dir("/proc") else {
        return Vec::new();
    };
    entries
        .flatten()
        .filter_map(|e| e.file_name().to_str()?.parse::<u32>().ok())
        .filter(|&pid| {
            let Some(f) = proc_stat_fields(pid) else {
                return false;
            };
            // Fields after the name: state, ppid, pgrp.
            if f.first().map(String::as_str) == Some("Z") {
                return false;
            }
            f.get(2).and_then(|g| g.parse::<u32>().ok()) == Some(pgid)
                || std::fs::read(format!("/proc/{pid}/cmdline"))
                    .is_ok_and(|c| String::from_utf8_lossy(&c).contains(marker))
        })
        .collect()
}

/// The text of an event that says a page went wrong: a console error or
/// failed assertion, an uncaught exception, or a browser log entry of level
/// error (a resource that failed to load shows up there).
fn logged_error(event: &Value) -> Option<String> {
    let p = &event["params"];
    match event["method"].as_str()? {
        "Runtime.consoleAPICalled" => {
            let kind = p["type"].as_str()?;
            if kind != "error" && kind != "assert" {
                return None;
            }
            let args: Vec<String> = p["args"]
                .as_array()
                .map(|a| {
                    a.iter()
                        .map(|x| match &x["value"] {
                            Value::String(s) => s.clone(),
                            Value::Null => x["description"].as_str().unwrap_or("").to_string(),
                            v => v.to_string(),
                        })
                        .collect()
                })
                .unwrap_or_default();
            Some(format!("console.{kind}: {}", args.join(" ")))
        }
        "Runtime.exceptionThrown" => {
            let d = &p["exceptionDetails"];
            let what = d["exception"]["description"]
                .as_str()
                .or(d["text"].as_str())
                .unwrap_or("an exception");
            Some(format!(
                "uncaught exception at {}:{}: {what}",
                d["url"].as_str().unwrap_or("?"),
                d["lineNumber"]
            ))
        }
        "Log.entryAdded" => {
            let e = &p["entry"];
            (e["level"].as_str()? == "error").then(|| {
                format!(
                    "log ({}): {} {}",
                    e["source"].as_str().unwrap_or("?"),
                    e["text"].as_str().unwrap_or(""),
                    e["url"].as_str().unwrap_or("")
                )
            })
        }
        _ => None,
    }
}

/// One tab of the browser.
pub struct Page<'b> {
    browser: &'b mut Browser,
    session: String,
    target_id: String,
}

impl Page<'_> {
    /// Loads `url` and waits (at most `limit` in all) until it has loaded
    /// and the network has gone quiet, so that late requests (a favicon,
    /// say) have had their say in the error list. A navigation Chromium
    /// cannot make at all fails here; the HTTP status is the caller's to
    /// judge.
    pub fn navigate(&mut self, url: &str, limit: Duration) -> Navigation {
        let session = self.session.clone();
        let deadline = Instant::now() + limit;
        let left = || deadline.saturating_duration_since(Instant::now());
        // What is queued belongs to the page before.
        self.browser
            .events
            .retain(|e| e["sessionId"].as_str() != Some(session.as_str()));
        let nav = self
            .browser
            .command(Some(&session), "Page.navigate", json!({ "url": url }));
        if let Some(e) = nav["errorText"].as_str() {
            panic!("Chromium could not load {url}: {e}");
        }
        let loader = nav["loaderId"]
            .as_str()
            .unwrap_or_else(|| panic!("Page.navigate to {url} gave no loaderId: {nav}"))
            .to_string();
        let response = self
            .browser
            .wait_event(&session, "Network.responseReceived", left(), |p| {
                p["loaderId"].as_str() == Some(&loader) && p["type"] == "Document"
            });
        let status = response["params"]["response"]["status"]
            .as_f64()
            .unwrap_or_else(|| panic!("no HTTP status for {url}: {response}"))
            as u16;
        for name in ["load", "networkIdle"] {
            self.browser
                .wait_event(&session, "Page.lifecycleEvent", left(), |p| {
                    p["loaderId"].as_str() == Some(&loader) && p["name"] == name
                });
        }
        Navigation {
            url: url.to_string(),
            status,
        }
    }

    /// The value of a JavaScript expression, as JSON (the expression must
    /// give something JSON can hold). A thrown exception fails the test.
    pub fn evaluate(&mut self, expression: &str) -> Value {
        let r = self.browser.command(
            Some(&self.session),
            "Runtime.evaluate",
            json!({ "expression": expression, "returnByValue": true, "awaitPromise": true }),
        );
        if let Some(e) = r.get("exceptionDetails") {
            panic!("evaluating {expression:?} threw: {e}");
        }
        r["result"]["value"].clone()
    }

    /// What the page has logged as an error since it was opened. A round
    /// trip to the page first, so that everything it sent before now has
    /// been read.
    pub fn console_errors(&mut self) -> Vec<String> {
        self.evaluate("0");
        self.browser
            .errors
            .get(&self.session)
            .cloned()
            .unwrap_or_default()
    }

    /// Forgets the errors gathered so far (to judge the next page alone).
    pub fn clear_console_errors(&mut self) {
        self.browser.errors.insert(self.session.clone(), Vec::new());
    }

    /// A PNG of the whole page, not only the viewport, at one device pixel
    /// per CSS pixel.
    pub fn screenshot_png(&mut self) -> Vec<u8> {
        let metrics = self
            .browser
            .command(Some(&self.session), "Page.getLayoutMetrics", json!({}));
        // cssContentSize is in CSS pixels; older Chromiums only have
        // contentSize.
        let size = if metrics["cssContentSize"].is_object() {
            &metrics["cssContentSize"]
        } else {
            &metrics["contentSize"]
        };
        let (width, height) = (
            size["width"].as_f64().unwrap_or(0.0).ceil(),
            size["height"].as_f64().unwrap_or(0.0).ceil(),
        );
        assert!(
            width > 0.0 && height > 0.0,
            "the page has no size: {metrics}"
        );
        let shot = self.browser.command(
            Some(&self.session),
            "Page.captureScreenshot",
            json!({
                "format": "png",
                "captureBeyondViewport": true,
                "clip": { "x": 0, "y": 0, "width": width, "height": height, "scale": 1 },
            }),
        );
        let data = shot["data"]
            .as_str()
            .expect("Page.captureScreenshot gives base64 data");
        base64::engine::general_purpose::STANDARD
            .decode(data)
            .expect("the screenshot is valid base64")
    }

    /// Closes the tab.
    pub fn close(self) {
        let id = self.target_id.clone();
        self.browser
            .command(None, "Target.closeTarget", json!({ "targetId": id }));
    }
}
