//! Alert webhooks: the alert as JSON, POSTed with an HMAC-SHA256
//! signature over the exact body bytes (RFC 2104) and the delivery id in a
//! header, so a receiver can check who sent it and drop a repeat.

use std::time::Duration;

use hmac::{Hmac, Mac};
use sha2::Sha256;

use super::event::AlertEvent;

pub const DELIVERY_HEADER: &str = "X-Perihelix-Delivery";
pub const SIGNATURE_HEADER: &str = "X-Perihelix-Signature";

/// How long one POST may take.
const TIMEOUT: Duration = Duration::from_secs(20);

/// `sha256=` and the lowercase hex HMAC-SHA256 of `body` under `secret`.
pub fn signature(secret: &[u8], body: &[u8]) -> String {
    // An HMAC takes a key of any length, so this cannot fail.
    let mut mac = <Hmac<Sha256> as Mac>::new_from_slice(secret)
        .unwrap_or_else(|_| unreachable!("HMAC accepts any key length"));
    mac.update(body);
    let tag = mac.finalize().into_bytes();
    let hex: String = tag.iter().map(|b| format!("{b:02x}")).collect();
    format!("sha256={hex}")
}

pub struct Webhook {
    client: reqwest::Client,
    url: String,
    secret: Vec<u8>,
}

impl Webhook {
    pub fn new(url: &str, secret: &str) -> Result<Self, String> {
        let client = reqwest::Client::builder()
            .timeout(TIMEOUT)
            .build()
            .map_err(|e| e.to_string())?;
        Ok(Self {
            client,
            url: url.to_string(),
            secret: secret.trim_end_matches(['\n', '\r']).as_bytes().to_vec(),
        })
    }

    pub fn url(&self) -> &str {
        &self.url
    }

    /// POSTs `payload` (the alert, or a test message); a non-2xx answer
    /// is a failure.
    pub async fn post(&self, payload: &serde_json::Value, delivery_id: &str) -> Result<(), String> {
        let body = serde_json::to_vec(payload).map_err(|e| e.to_string())?;
        let answer = self
            .client
            .post(&self.url)
            .header(reqwest::header::CONTENT_TYPE, "application/json")
            .header(DELIVERY_HEADER, delivery_id)
            .header(SIGNATURE_HEADER, signature(&self.secret, &body))
            .body(body)
            .send()
            .await
            .map_err(|e| format!("{}: {e}", self.url))?;
        let status = answer.status();
        if status.is_success() {
            Ok(())
        } else {
            Err(format!("{}: HTTP {status}", self.url))
        }
    }
}

/// What a webhook receives for one delivery.
pub fn payload(event: &AlertEvent, delivery_id: &str) -> serde_json::Value {
    serde_json::json!({ "delivery_id": delivery_id, "alert": event })
}

#[cfg(test)]
mod tests {
    use super::*;

    /// RFC 4231, section 4.3 (test case 2).
    #[test]
    fn the_signature_is_hmac_sha256() {
        assert_eq!(
            signature(b"Jefe", b"what do ya want for nothing?"),
            "sha256=5bdcc146bf60754e6a042426089575c75a003f089d2739839dec58b964ec3843"
        );
    }
}
