//! `perihelix history`: an object's solutions as a table, from the running
//! daemon's API, or from the store itself when no daemon answers.

use std::fmt::Write;

use crate::config::Config;
use crate::store::{ObjectState, SledStore, SolutionSummary, Store, StoreError};

/// Where the history came from.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum HistorySource {
    Daemon,
    Store,
}

#[derive(Debug, thiserror::Error)]
pub enum HistoryError {
    #[error("no object '{0}'")]
    UnknownObject(String),
    #[error("the daemon answered {status}: {body}")]
    Daemon { status: u16, body: String },
    #[error("{0}")]
    Store(#[from] StoreError),
    #[error("{0}")]
    Http(String),
}

/// The object and its solutions, oldest first.
pub struct History {
    pub object: ObjectState,
    pub solutions: Vec<SolutionSummary>,
    pub source: HistorySource,
}

/// Percent-encodes one path segment (designations hold spaces).
pub fn encode_path(s: &str) -> String {
    s.bytes()
        .map(|b| match b {
            b'A'..=b'Z' | b'a'..=b'z' | b'0'..=b'9' | b'-' | b'_' | b'.' | b'~' => {
                (b as char).to_string()
            }
            _ => format!("%{b:02X}"),
        })
        .collect()
}

async fn from_daemon(config: &Config, name: &str) -> Result<Option<History>, HistoryError> {
    let base = format!("http://{}", config.api.bind);
    let client = reqwest::Client::builder()
        .timeout(std::time::Duration::from_secs(30))
        .build()
        .map_err(|e| HistoryError::Http(e.to_string()))?;
    let get = |url: String| {
        let client = client.clone();
        async move {
            match client.get(&url).send().await {
                Ok(r) => Ok(Some(r)),
                Err(e) if e.is_connect() => Ok(None),
                Err(e) => Err(HistoryError::Http(e.to_string())),
            }
        }
    };
    let object_url = format!("{base}/v1/objects/{}", encode_path(name));
    let Some(r) = get(object_url.clone()).await? else {
        return Ok(None);
    };
    if r.status().as_u16() == 404 {
        return Err(HistoryError::UnknownObject(name.to_string()));
    }
    if !r.status().is_success() {
        let status = r.status().as_u16();
        return Err(HistoryError::Daemon {
            status,
            body: r.text().await.unwrap_or_default(),
        });
    }
    let object: ObjectState = r
        .json()
        .await
        .map_err(|e| HistoryError::Http(e.to_string()))?;
    let mut solutions = Vec::new();
    let mut cursor: Option<String> = None;
    loop {
        let mut url = format!("{object_url}/solutions?limit=1000");
        if let Some(c) = &cursor {
            url.push_str(&format!("&cursor={c}"));
        }
        let Some(r) = get(url).await? else {
            return Ok(None);
        };
        let page: serde_json::Value = r
            .json()
            .await
            .map_err(|e| HistoryError::Http(e.to_string()))?;
        let batch: Vec<SolutionSummary> = serde_json::from_value(page["solutions"].clone())
            .map_err(|e| HistoryError::Http(e.to_string()))?;
        solutions.extend(batch);
        match page["next_cursor"].as_str() {
            Some(c) => cursor = Some(c.to_string()),
            None => break,
        }
    }
    solutions.reverse();
    Ok(Some(History {
        object,
        solutions,
        source: HistorySource::Daemon,
    }))
}

fn from_store(config: &Config, name: &str) -> Result<History, HistoryError> {
    let store = SledStore::open(&config.directories.database)?;
    let object = store
        .object(name)?
        .ok_or_else(|| HistoryError::UnknownObject(name.to_string()))?;
    let mut solutions: Vec<SolutionSummary> = store.summaries(&object.id, None, usize::MAX)?;
    solutions.reverse();
    Ok(History {
        object,
        solutions,
        source: HistorySource::Store,
    })
}

/// Asks the daemon; reads the store when nothing listens.
pub async fn history(config: &Config, name: &str) -> Result<History, HistoryError> {
    if let Some(h) = from_daemon(config, name).await? {
        return Ok(h);
    }
    let (config, name) = (config.clone(), name.to_string());
    tokio::task::spawn_blocking(move || from_store(&config, &name))
        .await
        .map_err(|e| HistoryError::Http(e.to_string()))?
}

fn vs(v: Option<crate::solve::document::ValueSigma>, digits: usize) -> String {
    v.map_or_else(
        || "-".into(),
        |v| format!("{:.*} +/- {:.*}", digits, v.value, digits, v.sigma),
    )
}

/// The history as a table for a person.
pub fn table(h: &History) -> String {
    let mut out = String::new();
    let o = &h.object;
    let _ = writeln!(
        out,
        "{} ({}): {} observations, {} solutions{}",
        o.id,
        o.designations.join(", "),
        o.observations,
        h.solutions.len(),
        match h.source {
            HistorySource::Daemon => "",
            HistorySource::Store => " (read from the store: no daemon answered)",
        }
    );
    let _ = writeln!(
        out,
        "{:>4} {:<24} {:>5} {:>8} {:<26} {:<24} {:<26} {:>7} {:>7}",
        "seq",
        "computed (UTC)",
        "obs",
        "arc d",
        "recommended",
        "e",
        "original 1/a (1/au)",
        "NG sig",
        "rms\""
    );
    for s in &h.solutions {
        let rec = match (&s.recommended, &s.failure) {
            (Some(r), _) => r.clone(),
            (None, Some(f)) => format!("failed: {f}"),
            (None, None) => "none".into(),
        };
        let _ = writeln!(
            out,
            "{:>4} {:<24} {:>5} {:>8} {:<26} {:<24} {:<26} {:>7} {:>7}",
            s.seq,
            s.created_utc,
            s.observations,
            s.arc_days.map_or("-".into(), |a| format!("{a:.2}")),
            rec,
            vs(s.e, 6),
            vs(s.one_over_a_original_per_au, 6),
            s.ng_significance_sigma
                .map_or("unknown".into(), |x| format!("{x:.1}")),
            s.rms_arcsec.map_or("-".into(), |x| format!("{x:.3}")),
        );
    }
    out
}
