//! A real HTTP webhook receiver on loopback for the alert tests (axum 0.8 on
//! its own thread and tokio runtime). It takes a POST on any path, checks
//! `X-Perihelix-Signature: sha256=<lowercase hex HMAC-SHA256(secret, raw
//! body)>` with hmac 0.12 and sha2 0.10, and records every request with
//! what it answered.
//!
//! It answers, in this order of precedence: 405 to anything but POST, 503
//! while told to fail, 401 to a missing or wrong signature, 400 to a body
//! that is not JSON, else 200. Stopping it drops its runtime, which resets
//! open connections as a crash would; it can be started again on the same
//! port, so a daemon configured with that URL sees an outage and then a
//! recovery.

use std::future::IntoFuture;
use std::net::{Ipv4Addr, SocketAddr};
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::{mpsc, Arc, Mutex};
use std::thread::JoinHandle;
use std::time::Duration;

use axum::body::Bytes;
use axum::extract::State;
use axum::http::{HeaderMap, Method, StatusCode, Uri};
use axum::Router;
use hmac::{Hmac, Mac};
use serde_json::Value;
use sha2::Sha256;

use super::daemon::poll_until;

const START_LIMIT: Duration = Duration::from_secs(10);
const STOP_LIMIT: Duration = Duration::from_secs(10);

pub const DELIVERY_HEADER: &str = "x-perihelix-delivery";
pub const SIGNATURE_HEADER: &str = "x-perihelix-signature";

/// Lowercase hex of HMAC-SHA256(key, data).
pub fn hmac_sha256_hex(key: &[u8], data: &[u8]) -> String {
    let mut mac = Hmac::<Sha256>::new_from_slice(key).expect("HMAC takes a key of any length");
    mac.update(data);
    hex(&mac.finalize().into_bytes())
}

/// The `X-Perihelix-Signature` value a correct sender puts on `body`.
pub fn signature(secret: &[u8], body: &[u8]) -> String {
    format!("sha256={}", hmac_sha256_hex(secret, body))
}

fn hex(bytes: &[u8]) -> String {
    bytes.iter().map(|b| format!("{b:02x}")).collect()
}

/// Only the documented form counts: `sha256=` and 64 lowercase hex
/// digits; uppercase or any other spelling is a sender bug worth seeing.
fn signature_ok(secret: &[u8], body: &[u8], header: Option<&str>) -> bool {
    let Some(digits) = header.and_then(|h| h.strip_prefix("sha256=")) else {
        return false;
    };
    if digits.len() != 64
        || !digits
            .bytes()
            .all(|c| matches!(c, b'0'..=b'9' | b'a'..=b'f'))
    {
        return false;
    }
    let tag: Vec<u8> = (0..32)
        .map(|i| u8::from_str_radix(&digits[2 * i..2 * i + 2], 16).expect("checked hex"))
        .collect();
    let mut mac = Hmac::<Sha256>::new_from_slice(secret).expect("HMAC takes a key of any length");
    mac.update(body);
    // verify_slice compares in constant time, as a real receiver must.
    mac.verify_slice(&tag).is_ok()
}

/// One request as the receiver saw it.
#[derive(Debug, Clone)]
pub struct ReceivedHook {
    pub method: String,
    pub path: String,
    /// `X-Perihelix-Delivery`.
    pub delivery_id: Option<String>,
    /// `X-Perihelix-Signature`, as sent.
    pub signature: Option<String>,
    pub signature_ok: bool,
    pub content_type: Option<String>,
    pub raw: Vec<u8>,
    /// The body parsed as JSON; Null when it is not JSON.
    pub body: Value,
    /// The status the receiver answered.
    pub status: u16,
}

impl ReceivedHook {
    pub fn accepted(&self) -> bool {
        self.status == 200
    }
}

struct Shared {
    secret: Vec<u8>,
    failing: AtomicBool,
    received: Mutex<Vec<ReceivedHook>>,
}

/// A running receiver.
pub struct WebhookReceiver {
    port: u16,
    shared: Arc<Shared>,
    stop: Option<tokio::sync::oneshot::Sender<()>>,
    thread: Option<JoinHandle<()>>,
}

impl WebhookReceiver {
    /// A receiver on a free loopback port the kernel picks.
    pub fn start(secret: &[u8]) -> Self {
        Self::start_on(0, secret)
    }

    /// A receiver on `port` (0: any free one) checking signatures with
    /// `secret`.
    pub fn start_on(port: u16, secret: &[u8]) -> Self {
        let shared = Arc::new(Shared {
            secret: secret.to_vec(),
            failing: AtomicBool::new(false),
            received: Mutex::new(Vec::new()),
        });
        let (ready_tx, ready_rx) = mpsc::channel::<std::io::Result<u16>>();
        let (stop_tx, stop_rx) = tokio::sync::oneshot::channel::<()>();
        let app = Router::new().fallback(record).with_state(shared.clone());
        let thread = std::thread::spawn(move || {
            let runtime = tokio::runtime::Builder::new_current_thread()
                .enable_all()
                .build()
                .expect("a runtime for the webhook receiver");
            runtime.block_on(async move {
                let listener = match bind(port) {
                    Ok(l) => l,
                    Err(e) => {
                        let _ = ready_tx.send(Err(e));
                        return;
                    }
                };
                let bound = listener.local_addr().map(|a| a.port());
                let _ = ready_tx.send(bound);
                tokio::select! {
                    served = axum::serve(listener, app).into_future() => {
                        served.expect("the webhook receiver serves");
                    }
                    _ = stop_rx => {}
                }
            });
            // Dropping the runtime here cancels the per-connection tasks,
            // so their sockets close at once, keep-alive ones included.
        });
        let bound = match ready_rx.recv_timeout(START_LIMIT) {
            Ok(Ok(p)) => p,
            Ok(Err(e)) => panic!("the webhook receiver cannot listen on port {port}: {e}"),
            Err(e) => panic!("the webhook receiver did not start in {START_LIMIT:?}: {e}"),
        };
        Self {
            port: bound,
            shared,
            stop: Some(stop_tx),
            thread: Some(thread),
        }
    }

    pub fn port(&self) -> u16 {
        self.port
    }

    /// `http://127.0.0.1:PORT/hook`, as a daemon's `[alerts.webhook] url`.
    pub fn url(&self) -> String {
        format!("http://127.0.0.1:{}/hook", self.port)
    }

    /// While true, every request is answered 503 (and still recorded).
    pub fn set_failing(&self, failing: bool) {
        self.shared.failing.store(failing, Ordering::SeqCst);
    }

    /// Every request so far, in order of arrival.
    pub fn received(&self) -> Vec<ReceivedHook> {
        self.shared.received.lock().expect("the record").clone()
    }

    /// The requests answered 200.
    pub fn accepted(&self) -> Vec<ReceivedHook> {
        self.received()
            .into_iter()
            .filter(|h| h.accepted())
            .collect()
    }

    /// Waits (bounded) until the requests so far satisfy `done`; returns
    /// them.
    pub fn wait_until(
        &self,
        what: &str,
        limit: Duration,
        done: impl Fn(&[ReceivedHook]) -> bool,
    ) -> Vec<ReceivedHook> {
        poll_until(what, limit, Duration::from_millis(25), || {
            let r = self.received();
            done(&r).then_some(r)
        })
    }

    /// Stops it (the port is free on return) and gives what it received.
    pub fn stop(mut self) -> Vec<ReceivedHook> {
        self.shut_down(true);
        self.received()
    }

    fn shut_down(&mut self, strict: bool) {
        if let Some(stop) = self.stop.take() {
            let _ = stop.send(());
        }
        let Some(thread) = self.thread.take() else {
            return;
        };
        if strict {
            poll_until(
                "the webhook receiver to stop",
                STOP_LIMIT,
                Duration::from_millis(10),
                || thread.is_finished().then_some(()),
            );
            if let Err(panic) = thread.join() {
                std::panic::resume_unwind(panic);
            }
        } else {
            // From Drop, perhaps while a test is already failing: wait a
            // little, never panic.
            let deadline = std::time::Instant::now() + STOP_LIMIT;
            while !thread.is_finished() && std::time::Instant::now() < deadline {
                std::thread::sleep(Duration::from_millis(10));
            }
        }
    }
}

impl Drop for WebhookReceiver {
    fn drop(&mut self) {
        self.shut_down(false);
    }
}

/// SO_REUSEADDR, so a restart on the same port is not refused while the
/// previous receiver's connections sit in TIME_WAIT.
fn bind(port: u16) -> std::io::Result<tokio::net::TcpListener> {
    let socket = tokio::net::TcpSocket::new_v4()?;
    socket.set_reuseaddr(true)?;
    socket.bind(SocketAddr::from((Ipv4Addr::LOCALHOST, port)))?;
    socket.listen(1024)
}

async fn record(
    State(shared): State<Arc<Shared>>,
    method: Method,
    uri: Uri,
    headers: HeaderMap,
    body: Bytes,
) -> StatusCode {
    let header = |name: &str| {
        headers
            .get(name)
            .map(|v| String::from_utf8_lossy(v.as_bytes()).into_owned())
    };
    let signature = header(SIGNATURE_HEADER);
    let verified = signature_ok(&shared.secret, &body, signature.as_deref());
    let json: Option<Value> = serde_json::from_slice(&body).ok();
    let status = if method != Method::POST {
        StatusCode::METHOD_NOT_ALLOWED
    } else if shared.failing.load(Ordering::SeqCst) {
        StatusCode::SERVICE_UNAVAILABLE
    } else if !verified {
        StatusCode::UNAUTHORIZED
    } else if json.is_none() {
        StatusCode::BAD_REQUEST
    } else {
        StatusCode::OK
    };
    shared
        .received
        .lock()
        .expect("the record")
        .push(ReceivedHook {
            method: method.to_string(),
            path: uri.path().to_string(),
            delivery_id: header(DELIVERY_HEADER),
            signature,
            signature_ok: verified,
            content_type: header("content-type"),
            raw: body.to_vec(),
            body: json.unwrap_or(Value::Null),
            status: status.as_u16(),
        });
    status
}
