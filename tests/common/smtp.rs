//! A real SMTP server on loopback for the alert tests: aiosmtpd 1.4.6 in the
//! venv that tests/reference/setup-smtp.sh makes, running
//! tests/reference/smtp_server.py, which keeps every message whole in a
//! Maildir-like directory with its envelope beside it. Messages are read
//! back with mailparse 0.15.
//!
//! The server can be stopped and started again on the same port, so a
//! daemon configured with that port sees an outage and then a recovery.

use std::io::{BufRead, BufReader};
use std::path::{Path, PathBuf};
use std::process::{Child, ChildStdin, Command, Stdio};
use std::sync::mpsc;
use std::time::Duration;

use mailparse::{MailHeaderMap, ParsedMail};
use serde_json::Value;

use super::daemon::poll_until;
use super::repo;

/// How long the Python interpreter gets to import aiosmtpd and bind; it
/// takes a fraction of a second, but CI machines are shared.
const START_LIMIT: Duration = Duration::from_secs(20);
const STOP_LIMIT: Duration = Duration::from_secs(10);

fn venv_python() -> PathBuf {
    let venv = repo().join("tests/reference/data/smtp-venv");
    // The marker is written last by the setup script, so a venv whose
    // install was interrupted is reported as missing rather than failing
    // later with an import error.
    assert!(
        venv.join("perihelix-ready").is_file() && venv.join("bin/python").exists(),
        "the SMTP test server's venv {} is missing or unfinished: run bash tests/reference/setup-smtp.sh",
        venv.display()
    );
    venv.join("bin/python")
}

/// A running tests/reference/smtp_server.py.
pub struct SmtpServer {
    child: Option<Child>,
    // Held open: the server exits when this pipe closes, which covers a
    // test process that ends without running Drop.
    stdin: Option<ChildStdin>,
    port: u16,
    maildir: PathBuf,
    _log_dir: tempfile::TempDir,
    log: PathBuf,
}

impl SmtpServer {
    /// A server on a free loopback port the kernel picks.
    pub fn start(maildir: &Path) -> Self {
        Self::start_on(0, maildir)
    }

    /// A server on `port` (0: any free one), keeping messages in `maildir`
    /// (created if missing; messages already there stay).
    pub fn start_on(port: u16, maildir: &Path) -> Self {
        let python = venv_python();
        let log_dir = tempfile::tempdir().expect("a directory for the server's log");
        let log = log_dir.path().join("smtp_server.log");
        let mut child = Command::new(python)
            .arg(repo().join("tests/reference/smtp_server.py"))
            .arg(maildir)
            .arg(port.to_string())
            .stdin(Stdio::piped())
            .stdout(Stdio::piped())
            .stderr(std::fs::File::create(&log).expect("a log file"))
            .spawn()
            .expect("the SMTP server starts");
        let stdin = child.stdin.take();
        let stdout = child.stdout.take().expect("the server's stdout");

        // A blocking read cannot be given a deadline, so it runs on its own
        // thread and the deadline is on the channel.
        let (tx, rx) = mpsc::channel();
        std::thread::spawn(move || {
            let mut line = String::new();
            let _ = BufReader::new(stdout).read_line(&mut line);
            let _ = tx.send(line);
        });
        let line = rx.recv_timeout(START_LIMIT).unwrap_or_default();
        let bound = line
            .trim()
            .strip_prefix("READY ")
            .and_then(|p| p.parse::<u16>().ok());
        let Some(bound) = bound else {
            let _ = child.kill();
            let _ = child.wait();
            panic!(
                "the SMTP server on port {port} did not get ready in {START_LIMIT:?} (said {line:?}):\n{}",
                std::fs::read_to_string(&log).unwrap_or_default()
            );
        };
        assert!(
            port == 0 || bound == port,
            "asked for port {port}, got {bound}"
        );
        Self {
            child: Some(child),
            stdin,
            port: bound,
            maildir: maildir.to_path_buf(),
            _log_dir: log_dir,
            log,
        }
    }

    pub fn port(&self) -> u16 {
        self.port
    }

    pub fn maildir(&self) -> &Path {
        &self.maildir
    }

    /// What the server wrote to standard error (Python tracebacks).
    pub fn log_text(&self) -> String {
        std::fs::read_to_string(&self.log).unwrap_or_default()
    }

    /// Kills the server (SIGKILL: an outage, not a goodbye) and waits for
    /// it, so the port is free for [`SmtpServer::start_on`] on return.
    pub fn stop(mut self) {
        self.kill_and_wait();
    }

    /// The messages received so far (those of earlier servers on the same
    /// directory included).
    pub fn messages(&self) -> Vec<ReceivedMail> {
        read_messages(&self.maildir)
    }

    fn kill_and_wait(&mut self) {
        drop(self.stdin.take());
        let Some(mut child) = self.child.take() else {
            return;
        };
        let _ = child.kill();
        poll_until(
            "the SMTP server to exit",
            STOP_LIMIT,
            Duration::from_millis(10),
            || child.try_wait().ok().flatten(),
        );
    }
}

impl Drop for SmtpServer {
    fn drop(&mut self) {
        if let Some(mut child) = self.child.take() {
            let _ = child.kill();
            let _ = child.wait();
        }
    }
}

/// One message as the server received it.
#[derive(Debug, Clone)]
pub struct ReceivedMail {
    /// The .eml file it was kept in.
    pub file: PathBuf,
    /// Exactly the bytes after DATA.
    pub raw: Vec<u8>,
    /// Every header, in order, with RFC 2047 words decoded.
    pub headers: Vec<(String, String)>,
    pub subject: Option<String>,
    /// The From mailbox's address (without display name).
    pub from: Option<String>,
    /// The To header's addresses (without display names).
    pub to: Vec<String>,
    /// As written, angle brackets included.
    pub message_id: Option<String>,
    /// The first text/plain part that is not an attachment, transfer
    /// encoding and charset undone, line ends as `\n`.
    pub text: Option<String>,
    /// The first text/html part that is not an attachment, likewise.
    pub html: Option<String>,
    /// MAIL FROM.
    pub envelope_from: String,
    /// RCPT TO, in order: Bcc recipients are here and in no header.
    pub envelope_to: Vec<String>,
}

impl ReceivedMail {
    /// The first header named `name` (any case).
    pub fn header(&self, name: &str) -> Option<&str> {
        self.headers
            .iter()
            .find(|(k, _)| k.eq_ignore_ascii_case(name))
            .map(|(_, v)| v.as_str())
    }

    /// The delivery id of a Message-ID `<ID@perihelix>`, as the daemon
    /// writes it.
    pub fn delivery_id(&self) -> Option<&str> {
        self.message_id
            .as_deref()?
            .strip_prefix('<')?
            .strip_suffix("@perihelix>")
    }
}

/// Every message kept in `maildir`, in order of arrival (empty when there
/// is none yet). Panics on a message that does not parse: the server keeps
/// what it was sent, so that is the sender's fault.
pub fn read_messages(maildir: &Path) -> Vec<ReceivedMail> {
    let Ok(entries) = std::fs::read_dir(maildir.join("new")) else {
        return Vec::new();
    };
    let mut files: Vec<PathBuf> = entries
        .flatten()
        .map(|e| e.path())
        .filter(|p| p.extension().is_some_and(|x| x == "eml"))
        .collect();
    // Names start with the zero-padded arrival time.
    files.sort();
    files.iter().map(|f| parse_message(f)).collect()
}

/// Waits (bounded) until `maildir` holds at least `count` messages.
pub fn wait_for_messages(maildir: &Path, count: usize, limit: Duration) -> Vec<ReceivedMail> {
    poll_until(
        &format!("{count} message(s) in {}", maildir.display()),
        limit,
        Duration::from_millis(25),
        || {
            let m = read_messages(maildir);
            (m.len() >= count).then_some(m)
        },
    )
}

fn parse_message(file: &Path) -> ReceivedMail {
    let raw = std::fs::read(file).expect("the message reads");
    let envelope: Value = serde_json::from_slice(
        &std::fs::read(file.with_extension("json")).expect("the envelope beside the message"),
    )
    .expect("the envelope is JSON");
    let mail = mailparse::parse_mail(&raw)
        .unwrap_or_else(|e| panic!("{} does not parse: {e}", file.display()));
    let headers = mail
        .headers
        .iter()
        .map(|h| (h.get_key(), h.get_value()))
        .collect();
    let addresses = |name: &str| -> Vec<String> {
        let Some(h) = mail.headers.get_first_header(name) else {
            return Vec::new();
        };
        let list = mailparse::addrparse_header(h)
            .unwrap_or_else(|e| panic!("{name} of {} does not parse: {e}", file.display()));
        list.iter()
            .flat_map(|a| match a {
                mailparse::MailAddr::Single(s) => vec![s.addr.clone()],
                mailparse::MailAddr::Group(g) => g.addrs.iter().map(|s| s.addr.clone()).collect(),
            })
            .collect()
    };
    ReceivedMail {
        file: file.to_path_buf(),
        raw: raw.clone(),
        headers,
        subject: mail.headers.get_first_value("Subject"),
        from: addresses("From").into_iter().next(),
        to: addresses("To"),
        message_id: mail
            .headers
            .get_first_value("Message-ID")
            .map(|v| v.trim().to_string()),
        text: first_part(&mail, "text/plain", false),
        html: first_part(&mail, "text/html", false),
        envelope_from: envelope["mail_from"]
            .as_str()
            .expect("mail_from in the envelope")
            .to_string(),
        envelope_to: envelope["rcpt_tos"]
            .as_array()
            .expect("rcpt_tos in the envelope")
            .iter()
            .map(|r| r.as_str().expect("a recipient").to_string())
            .collect(),
    }
}

fn first_part(part: &ParsedMail, mimetype: &str, in_multipart: bool) -> Option<String> {
    if !part.subparts.is_empty() {
        return part
            .subparts
            .iter()
            .find_map(|p| first_part(p, mimetype, true));
    }
    let attachment =
        part.get_content_disposition().disposition == mailparse::DispositionType::Attachment;
    if attachment || !part.ctype.mimetype.eq_ignore_ascii_case(mimetype) {
        return None;
    }
    let body = if in_multipart {
        body_before_boundary(part)
    } else {
        part.get_body().expect("the body decodes")
    };
    Some(body.replace("\r\n", "\n"))
}

/// A multipart's part's decoded body. RFC 2046 section 5.1.1 attaches the
/// line end before a boundary line to the boundary, but mailparse 0.15
/// leaves it in the part, so every part's text would gain a newline. It is
/// cut from the still encoded part, which is then parsed again: after
/// decoding (of base64, say) it could no longer be told from content.
fn body_before_boundary(part: &ParsedMail) -> String {
    let raw = part.raw_bytes;
    let trimmed = raw
        .strip_suffix(b"\r\n")
        .or_else(|| raw.strip_suffix(b"\n"))
        .unwrap_or(raw);
    mailparse::parse_mail(trimmed)
        .expect("the part parses on its own")
        .get_body()
        .expect("the part's body decodes")
}
