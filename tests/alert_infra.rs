//! Self-tests of the real servers the alert tests deliver to: aiosmtpd on
//! loopback (tests/common/smtp.rs; needs bash tests/reference/setup-smtp.sh)
//! and the axum webhook receiver (tests/common/webhook.rs). Mail is sent
//! with lettre's async SMTP transport, the one the daemon uses, and hooks
//! are posted with reqwest, so a failure here is the harness's and not the
//! daemon's.
//!
//! Addresses are under .test, which RFC 2606 section 2 reserves for testing.

mod common;

use std::time::Duration;

use lettre::message::header::{ContentTransferEncoding, ContentType};
use lettre::message::{Attachment, Body, Mailbox, MultiPart, SinglePart};
use lettre::{AsyncSmtpTransport, AsyncTransport, Message, Tokio1Executor};
use serde_json::json;

use common::smtp::{wait_for_messages, SmtpServer};
use common::webhook::{hmac_sha256_hex, signature, WebhookReceiver};

const WAIT: Duration = Duration::from_secs(10);

fn runtime() -> tokio::runtime::Runtime {
    tokio::runtime::Builder::new_current_thread()
        .enable_all()
        .build()
        .expect("a runtime")
}

fn mailbox(s: &str) -> Mailbox {
    s.parse().expect("a mailbox")
}

fn alert(message_id: &str, subject: &str, text: &str, html: &str) -> Message {
    Message::builder()
        .from(mailbox("Perihelix <alerts@observatory.test>"))
        .to(mailbox("Duty Astronomer <duty@observatory.test>"))
        .to(mailbox("orbits@mpc-desk.test"))
        .bcc(mailbox("archive@observatory.test"))
        .subject(subject)
        .message_id(Some(message_id.to_string()))
        .multipart(MultiPart::alternative_plain_html(
            text.to_string(),
            html.to_string(),
        ))
        .expect("the message builds")
}

async fn send(port: u16, message: Message) -> Result<(), lettre::transport::smtp::Error> {
    AsyncSmtpTransport::<Tokio1Executor>::builder_dangerous("127.0.0.1")
        .port(port)
        .timeout(Some(Duration::from_secs(5)))
        .build()
        .send(message)
        .await
        .map(|_| ())
}

#[test]
fn smtp_server_keeps_the_whole_message_and_its_envelope() {
    let dir = tempfile::tempdir().unwrap();
    let maildir = dir.path().join("maildir");
    let server = SmtpServer::start(&maildir);

    // Non-ASCII makes lettre encode the subject (RFC 2047) and the bodies;
    // the line of a lone dot must survive SMTP dot-stuffing; the long line
    // forces a transfer encoding that wraps.
    let subject = "Orbit changed: 2026 ZB1 — Δq 0.03 au";
    let text = format!(
        "The orbit of 2026 ZB1 moved.\n.\nq: 1.00 → 1.03 au\n{}\n",
        "residual ".repeat(20)
    );
    let html = "<p>The orbit of <b>2026 ZB1</b> moved: q 1.00 &rarr; 1.03 au, Δ</p>\n";
    let id = "<d-7f3a9c@perihelix>";
    runtime()
        .block_on(send(server.port(), alert(id, subject, &text, html)))
        .expect("aiosmtpd accepts the message");

    let mails = wait_for_messages(&maildir, 1, WAIT);
    assert_eq!(mails.len(), 1);
    let m = &mails[0];
    assert_eq!(m.subject.as_deref(), Some(subject));
    assert_eq!(m.message_id.as_deref(), Some(id));
    assert_eq!(m.delivery_id(), Some("d-7f3a9c"));
    assert_eq!(m.from.as_deref(), Some("alerts@observatory.test"));
    assert_eq!(m.to, ["duty@observatory.test", "orbits@mpc-desk.test"]);
    assert_eq!(m.text.as_deref(), Some(text.as_str()));
    assert_eq!(m.html.as_deref(), Some(html));
    assert_eq!(m.envelope_from, "alerts@observatory.test");
    assert_eq!(
        m.envelope_to,
        [
            "duty@observatory.test",
            "orbits@mpc-desk.test",
            "archive@observatory.test"
        ]
    );
    assert!(m.header("Bcc").is_none(), "Bcc must not reach the headers");
    assert!(m
        .header("Content-Type")
        .is_some_and(|c| c.starts_with("multipart/alternative")));
    server.stop();
}

#[test]
fn smtp_server_restarts_on_its_port_after_an_outage() {
    let dir = tempfile::tempdir().unwrap();
    let maildir = dir.path().join("maildir");
    let rt = runtime();
    let message = |n: u32| {
        alert(
            &format!("<outage-{n}@perihelix>"),
            &format!("alert {n}"),
            "text\n",
            "<p>html</p>\n",
        )
    };

    let server = SmtpServer::start(&maildir);
    let port = server.port();
    rt.block_on(send(port, message(1))).expect("first send");
    wait_for_messages(&maildir, 1, WAIT);

    server.stop();
    let refused = rt.block_on(send(port, message(2)));
    assert!(refused.is_err(), "a send with the server down must fail");

    let server = SmtpServer::start_on(port, &maildir);
    assert_eq!(server.port(), port);
    rt.block_on(send(port, message(3)))
        .expect("send after restart");

    let mails = wait_for_messages(&maildir, 2, WAIT);
    let ids: Vec<_> = mails.iter().map(|m| m.delivery_id().unwrap()).collect();
    assert_eq!(ids, ["outage-1", "outage-3"]);
    server.stop();
}

/// The other shapes a message can take: one part only (no boundary to
/// strip), and a base64 text part behind a text attachment that must not
/// be taken for the body.
#[test]
fn smtp_harness_reads_single_part_and_base64_bodies() {
    let dir = tempfile::tempdir().unwrap();
    let maildir = dir.path().join("maildir");
    let server = SmtpServer::start(&maildir);
    let rt = runtime();
    let text = "Line one.\nLine two, ending in a newline.\n";
    let builder = || {
        Message::builder()
            .from(mailbox("alerts@observatory.test"))
            .to(mailbox("duty@observatory.test"))
    };

    let single = builder()
        .subject("single part")
        .message_id(Some("<single@perihelix>".to_string()))
        .header(ContentType::TEXT_PLAIN)
        .body(text.to_string())
        .unwrap();
    rt.block_on(send(server.port(), single))
        .expect("single part sent");

    let base64 = Body::new_with_encoding(text.to_string(), ContentTransferEncoding::Base64)
        .expect("base64 takes any body");
    let mixed = builder()
        .subject("mixed")
        .message_id(Some("<mixed@perihelix>".to_string()))
        .multipart(
            MultiPart::mixed()
                .singlepart(
                    Attachment::new("residuals.txt".to_string())
                        .body("not the body\n".to_string(), ContentType::TEXT_PLAIN),
                )
                .singlepart(
                    SinglePart::builder()
                        .header(ContentType::TEXT_PLAIN)
                        .body(base64),
                ),
        )
        .unwrap();
    rt.block_on(send(server.port(), mixed)).expect("mixed sent");

    let mails = wait_for_messages(&maildir, 2, WAIT);
    assert_eq!(mails[0].delivery_id(), Some("single"));
    // One blank line more than was written: lettre 0.11.23 ends DATA with
    // "\r\n.\r\n" after a message that already ends in CRLF
    // (src/transport/smtp/client/async_connection.rs), where RFC 5321
    // section 4.1.1.4 counts that first CRLF as the last line's end. In a
    // multipart message the extra line falls after the closing boundary
    // and no part sees it. The server keeps what it was sent.
    assert_eq!(mails[0].text, Some(format!("{text}\n")));
    assert!(mails[0].raw.ends_with(b"newline.\r\n\r\n"));
    assert_eq!(mails[0].html, None);
    assert_eq!(mails[1].delivery_id(), Some("mixed"));
    assert!(String::from_utf8_lossy(&mails[1].raw).contains("Content-Transfer-Encoding: base64"));
    assert_eq!(mails[1].text.as_deref(), Some(text));
    assert_eq!(mails[1].html, None);
    server.stop();
}

/// RFC 4231 section 4.3, test case 2 (a key shorter than the block, and
/// ASCII text, as a configured secret and a JSON body are).
#[test]
fn hmac_sha256_matches_rfc_4231_test_case_2() {
    assert_eq!(
        hmac_sha256_hex(b"Jefe", b"what do ya want for nothing?"),
        "5bdcc146bf60754e6a042426089575c75a003f089d2739839dec58b964ec3843"
    );
}

async fn post(
    client: &reqwest::Client,
    url: &str,
    delivery: &str,
    signature: Option<&str>,
    body: &[u8],
) -> reqwest::Result<u16> {
    let mut request = client
        .post(url)
        .header("Content-Type", "application/json")
        .header("X-Perihelix-Delivery", delivery)
        .body(body.to_vec());
    if let Some(s) = signature {
        request = request.header("X-Perihelix-Signature", s);
    }
    Ok(request.send().await?.status().as_u16())
}

fn client() -> reqwest::Client {
    reqwest::Client::builder()
        .timeout(Duration::from_secs(5))
        .build()
        .expect("an HTTP client")
}

#[test]
fn webhook_receiver_verifies_signatures() {
    let secret = b"a secret only the test and the receiver know";
    let receiver = WebhookReceiver::start(secret);
    let rt = runtime();
    let client = client();
    let body = serde_json::to_vec(&json!({"object": "2026 ZB1", "kind": "orbit_changed"})).unwrap();
    let good = signature(secret, &body);
    let wrong = signature(b"some other secret", &body);
    let upper = good.to_uppercase().replacen("SHA256=", "sha256=", 1);

    let statuses = rt.block_on(async {
        [
            post(&client, &receiver.url(), "good", Some(&good), &body).await,
            post(&client, &receiver.url(), "wrong", Some(&wrong), &body).await,
            post(&client, &receiver.url(), "upper", Some(&upper), &body).await,
            post(&client, &receiver.url(), "unsigned", None, &body).await,
        ]
        .map(|s| s.expect("the receiver answers"))
    });
    assert_eq!(statuses, [200, 401, 401, 401]);

    let got = receiver.received();
    let summary: Vec<_> = got
        .iter()
        .map(|h| (h.delivery_id.as_deref().unwrap(), h.signature_ok, h.status))
        .collect();
    assert_eq!(
        summary,
        [
            ("good", true, 200),
            ("wrong", false, 401),
            ("upper", false, 401),
            ("unsigned", false, 401)
        ]
    );
    assert_eq!(got[0].body["object"], "2026 ZB1");
    assert_eq!(got[0].raw, body);
    assert_eq!(got[0].path, "/hook");
    assert_eq!(receiver.accepted().len(), 1);
    receiver.stop();
}

#[test]
fn webhook_receiver_fails_on_demand_and_restarts_on_its_port() {
    let secret = b"outage secret";
    let rt = runtime();
    let client = client();
    let body = br#"{"n":1}"#;
    let sig = signature(secret, body);

    let receiver = WebhookReceiver::start(secret);
    let (port, url) = (receiver.port(), receiver.url());
    receiver.set_failing(true);
    let failed = rt.block_on(post(&client, &url, "a", Some(&sig), body));
    receiver.set_failing(false);
    let passed = rt.block_on(post(&client, &url, "a", Some(&sig), body));
    assert_eq!((failed.unwrap(), passed.unwrap()), (503, 200));
    let before = receiver.stop();
    assert_eq!(
        before.iter().map(|h| h.status).collect::<Vec<_>>(),
        [503, 200]
    );
    assert!(before.iter().all(|h| h.signature_ok));

    // The client may hold a keep-alive connection to the stopped receiver;
    // it must fail, not hang, as a daemon's would.
    let down = rt.block_on(post(&client, &url, "b", Some(&sig), body));
    assert!(down.is_err(), "a post with the receiver down must fail");

    let receiver = WebhookReceiver::start_on(port, secret);
    assert_eq!(receiver.url(), url);
    let back = rt.block_on(post(&client, &url, "b", Some(&sig), body));
    assert_eq!(back.expect("the restarted receiver answers"), 200);
    let got = receiver.wait_until("one accepted hook", WAIT, |r| {
        r.iter().any(|h| h.accepted())
    });
    assert_eq!(got.len(), 1, "a new receiver starts with an empty record");
    assert_eq!(got[0].delivery_id.as_deref(), Some("b"));
    receiver.stop();
}
