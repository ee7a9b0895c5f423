//! Alert e-mail: one message per delivery, its Message-ID made from the
//! delivery id (so a repeat after a crash is recognisable), plain text
//! with an HTML alternative; sent through an SMTP relay or written as an
//! `.eml` file (the embedded default).

use std::path::{Path, PathBuf};
use std::time::Duration;

use lettre::message::{header::ContentType, Mailbox, MultiPart, SinglePart};
use lettre::transport::smtp::authentication::Credentials;
use lettre::{AsyncSmtpTransport, AsyncTransport, Message, Tokio1Executor};

use crate::config::{EmailSettings, MailTransport, SmtpSecurity, SmtpSettings};

use super::event::AlertEvent;
use super::text;

/// How long one SMTP conversation may take, from connect to the relay's
/// last answer.
const SMTP_TIMEOUT: Duration = Duration::from_secs(30);

/// The domain part of every Message-ID.
const MESSAGE_ID_DOMAIN: &str = "perihelix";

#[derive(Debug, thiserror::Error)]
pub enum MailError {
    #[error("address '{address}': {why}")]
    Address { address: String, why: String },
    #[error("building the message: {0}")]
    Build(String),
    #[error("SMTP relay {host}:{port}: {why}")]
    Smtp {
        host: String,
        port: u16,
        why: String,
    },
    #[error("writing {path}: {source}")]
    File {
        path: PathBuf,
        source: std::io::Error,
    },
}

/// Where mail goes.
pub enum Mailer {
    Directory(PathBuf),
    Smtp {
        transport: AsyncSmtpTransport<Tokio1Executor>,
        host: String,
        port: u16,
    },
}

impl Mailer {
    pub fn new(settings: &EmailSettings) -> Result<Self, MailError> {
        match &settings.transport {
            MailTransport::File { directory } => Ok(Self::Directory(directory.clone())),
            MailTransport::Smtp(s) => smtp(s),
        }
    }

    /// Sends (or writes) one message.
    pub async fn send(&self, message: &Message, delivery_id: &str) -> Result<(), MailError> {
        match self {
            Mailer::Directory(dir) => {
                let bytes = message.formatted();
                let dir = dir.clone();
                let name = format!("{}.eml", file_name(delivery_id));
                tokio::task::spawn_blocking(move || write_durably(&dir, &name, &bytes))
                    .await
                    .map_err(|e| MailError::File {
                        path: PathBuf::from(&delivery_id),
                        source: std::io::Error::other(e.to_string()),
                    })?
            }
            Mailer::Smtp {
                transport,
                host,
                port,
            } => {
                let fail = |why: String| MailError::Smtp {
                    host: host.clone(),
                    port: *port,
                    why,
                };
                // lettre's own timeout bounds the connect only: a relay
                // that accepts and then says nothing would hold every
                // delivery behind this one.
                match tokio::time::timeout(SMTP_TIMEOUT, transport.send(message.clone())).await {
                    Ok(Ok(_)) => Ok(()),
                    Ok(Err(e)) => Err(fail(e.to_string())),
                    Err(_) => Err(fail(format!(
                        "no answer within {} s",
                        SMTP_TIMEOUT.as_secs()
                    ))),
                }
            }
        }
    }

    /// What a test message or a log line calls this transport.
    pub fn describe(&self) -> String {
        match self {
            Mailer::Directory(d) => format!("files in {}", d.display()),
            Mailer::Smtp { host, port, .. } => format!("SMTP relay {host}:{port}"),
        }
    }
}

fn smtp(s: &SmtpSettings) -> Result<Mailer, MailError> {
    let fail = |why: String| MailError::Smtp {
        host: s.smtp_host.clone(),
        port: s.smtp_port,
        why,
    };
    let builder = match s.security {
        SmtpSecurity::None => AsyncSmtpTransport::<Tokio1Executor>::builder_dangerous(&s.smtp_host),
        SmtpSecurity::Starttls => {
            AsyncSmtpTransport::<Tokio1Executor>::starttls_relay(&s.smtp_host)
                .map_err(|e| fail(e.to_string()))?
        }
        SmtpSecurity::Tls => AsyncSmtpTransport::<Tokio1Executor>::relay(&s.smtp_host)
            .map_err(|e| fail(e.to_string()))?,
    };
    let mut builder = builder.port(s.smtp_port).timeout(Some(SMTP_TIMEOUT));
    if let Some(user) = &s.username {
        builder = builder.credentials(Credentials::new(
            user.clone(),
            s.password.clone().unwrap_or_default(),
        ));
    }
    Ok(Mailer::Smtp {
        transport: builder.build(),
        host: s.smtp_host.clone(),
        port: s.smtp_port,
    })
}

fn mailbox(address: &str) -> Result<Mailbox, MailError> {
    address
        .parse()
        .map_err(|e: lettre::address::AddressError| MailError::Address {
            address: address.to_string(),
            why: e.to_string(),
        })
}

/// The Message-ID of a delivery.
pub fn message_id(delivery_id: &str) -> String {
    format!("<{delivery_id}@{MESSAGE_ID_DOMAIN}>")
}

/// The message of one delivery of `event`.
pub fn message(
    settings: &EmailSettings,
    event: &AlertEvent,
    delivery_id: &str,
) -> Result<Message, MailError> {
    compose(
        settings,
        &event.subject,
        &event.text,
        delivery_id,
        &event.raised_utc,
    )
}

/// A message with `subject` and the plain `body` (with its HTML form).
pub fn compose(
    settings: &EmailSettings,
    subject: &str,
    body: &str,
    delivery_id: &str,
    date_utc: &str,
) -> Result<Message, MailError> {
    let mut b = Message::builder()
        .from(mailbox(&settings.from)?)
        .subject(subject)
        .message_id(Some(message_id(delivery_id)))
        .header(lettre::message::header::Date::new(date(date_utc)));
    for to in &settings.to {
        b = b.to(mailbox(to)?);
    }
    b.multipart(
        MultiPart::alternative()
            .singlepart(
                SinglePart::builder()
                    .header(ContentType::TEXT_PLAIN)
                    .body(body.to_string()),
            )
            .singlepart(
                SinglePart::builder()
                    .header(ContentType::TEXT_HTML)
                    .body(text::html(subject, body)),
            ),
    )
    .map_err(|e| MailError::Build(e.to_string()))
}

/// The message's Date: when the alert was raised (so a repeat is the
/// same message), else now.
fn date(utc: &str) -> std::time::SystemTime {
    crate::astro::time::UtcTime::parse_iso8601(utc)
        .ok()
        .and_then(|t| {
            let seconds = (t.mjd() - 40_587) as f64 * 86_400.0 + t.seconds_of_day();
            (seconds >= 0.0).then(|| std::time::UNIX_EPOCH + Duration::from_secs_f64(seconds))
        })
        .unwrap_or_else(std::time::SystemTime::now)
}

/// A delivery id as a file name (ids hold letters, digits, '.', '-', '_').
fn file_name(delivery_id: &str) -> String {
    delivery_id
        .chars()
        .map(|c| {
            if c.is_ascii_alphanumeric() || "._-".contains(c) {
                c
            } else {
                '_'
            }
        })
        .collect()
}

/// Writes `bytes` as `dir/name`: to a temporary name first, fsync'd, then
/// renamed, so a reader never sees half a message; a repeat of the same
/// delivery replaces the same file.
fn write_durably(dir: &Path, name: &str, bytes: &[u8]) -> Result<(), MailError> {
    use std::io::Write;
    let io = |path: &Path| {
        let path = path.to_path_buf();
        move |source| MailError::File { path, source }
    };
    std::fs::create_dir_all(dir).map_err(io(dir))?;
    let tmp = dir.join(format!(".{name}.tmp"));
    let path = dir.join(name);
    let mut f = std::fs::File::create(&tmp).map_err(io(&tmp))?;
    f.write_all(bytes)
        .and_then(|_| f.sync_all())
        .map_err(io(&tmp))?;
    std::fs::rename(&tmp, &path).map_err(io(&path))?;
    crate::store::journal::sync_dir(dir).map_err(io(dir))
}
