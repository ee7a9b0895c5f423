//! One typed configuration, loaded and validated at start.
//!
//! The loader reports every problem at once (file, line, key, reason) and
//! treats an unknown key as an error: a misspelt threshold that silently
//! falls back to its default is worse than a refusal to start.

mod reader;
mod stations;

use std::net::SocketAddr;
use std::path::{Path, PathBuf};

use serde::Serialize;
use thiserror::Error;

use crate::astro::time::{LeapSecondTable, TimeError};
use crate::ingest::DesignationKey;
use reader::{Source, TableReader};
use stations::{in_range, positive};
pub use stations::{
    load_stations, parse_stations, shipped_stations, Station, StationList, SHIPPED_STATIONS_TOML,
};

/// One thing wrong with a configuration file.
#[derive(Debug, Clone, PartialEq, Eq, Serialize)]
pub struct ConfigProblem {
    pub file: PathBuf,
    /// 1-based line; 0 when the file could not be read at all.
    pub line: usize,
    /// Dotted key, e.g. `fit.reject_chi2`; empty for whole-file problems.
    pub key: String,
    pub reason: String,
}

impl std::fmt::Display for ConfigProblem {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(f, "{}:{}", self.file.display(), self.line)?;
        if !self.key.is_empty() {
            write!(f, ": key '{}'", self.key)?;
        }
        write!(f, ": {}", self.reason)
    }
}

#[derive(Debug, Error)]
#[error("{} problem(s) in the configuration:\n{}", .problems.len(), render(.problems))]
pub struct ConfigError {
    pub problems: Vec<ConfigProblem>,
}

fn render(problems: &[ConfigProblem]) -> String {
    problems
        .iter()
        .map(|p| format!("  {p}"))
        .collect::<Vec<_>>()
        .join("\n")
}

/// Where the service keeps its files.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Directories {
    /// Watched for new observation files.
    pub incoming: PathBuf,
    /// Every accepted original file is moved here.
    pub archive: PathBuf,
    /// Files with no usable observation are moved here with a report.
    pub rejected: PathBuf,
    /// The embedded database and its journal.
    pub database: PathBuf,
}

/// Which source gives the Sun, planets and Moon.
#[derive(Debug, Clone, PartialEq, Serialize)]
#[serde(tag = "source", rename_all = "kebab-case")]
pub enum EphemerisChoice {
    /// Analytic theories compiled in; no file needed.
    Embedded,
    /// A JPL development ephemeris in SPK format, for full precision.
    Spk { path: PathBuf },
}

/// The radial law g(r) of the non-gravitational acceleration.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
#[serde(rename_all = "kebab-case")]
pub enum NonGravLaw {
    WaterIce,
    InverseSquare,
    /// The water-ice form with a user-set scale distance r0 (au).
    WaterIceScaled {
        r0_au: f64,
    },
}

/// Non-gravitational parameters a model may free.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Serialize)]
pub enum NonGravTerm {
    A1,
    A2,
    A3,
}

/// Settings of the orbit fit.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct FitSettings {
    /// Stated uncertainties below this are raised to it.
    pub sigma_floor_arcsec: f64,
    /// Used when neither the observation nor its station states one.
    pub default_sigma_arcsec: f64,
    /// Inflate sigmas by sqrt(N/4) for N > 4 observations of one station in
    /// one night.
    pub per_night_inflation: bool,
    /// Outlier rejection threshold on the 2-D chi^2 of one observation.
    pub reject_chi2: f64,
    /// A rejected observation is recovered below this.
    pub recover_chi2: f64,
    pub max_iterations: u32,
    /// The model ladder: each rung's free non-gravitational terms.
    pub ladder: Vec<Vec<NonGravTerm>>,
    pub laws: Vec<NonGravLaw>,
    /// Significance (Gaussian sigma) a term needs to be recommended.
    pub significance_sigma: f64,
    pub relativity: bool,
    /// Optional star-catalogue bias table (none shipped).
    pub catalog_bias_file: Option<PathBuf>,
}

impl Default for FitSettings {
    fn default() -> Self {
        use NonGravTerm::*;
        Self {
            sigma_floor_arcsec: 0.05,
            default_sigma_arcsec: 1.0,
            per_night_inflation: true,
            reject_chi2: 8.0,
            recover_chi2: 7.0,
            max_iterations: 40,
            ladder: vec![vec![], vec![A2], vec![A1], vec![A1, A2], vec![A1, A2, A3]],
            laws: vec![NonGravLaw::WaterIce, NonGravLaw::InverseSquare],
            significance_sigma: 3.0,
            relativity: true,
            catalog_bias_file: None,
        }
    }
}

/// When the daemon refits, and how many fits run at once.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct RefitSettings {
    /// Refit an object this long after its last new observation, s.
    pub quiet_period_s: f64,
    /// ...but never later than this after the first one, s.
    pub max_delay_s: f64,
    /// Fits at once, each on its own blocking thread.
    pub workers: usize,
    /// Periodic scan of the incoming directory, s.
    pub rescan_interval_s: f64,
}

impl Default for RefitSettings {
    fn default() -> Self {
        Self {
            quiet_period_s: 20.0,
            max_delay_s: 600.0,
            workers: 1,
            rescan_interval_s: 60.0,
        }
    }
}

/// How the daemon logs.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct LoggingSettings {
    /// A tracing filter ("info", "perihelix=debug,info", ...); RUST_LOG,
    /// when set, wins.
    pub level: String,
    /// Plain lines (journald stores them well) or one JSON object a line.
    pub json: bool,
}

impl Default for LoggingSettings {
    fn default() -> Self {
        Self {
            level: "info".into(),
            json: false,
        }
    }
}

/// The environment variable that can carry the API token (so it never
/// has to sit in a unit file or the configuration).
pub const API_TOKEN_ENV: &str = "PERIHELIX_API_TOKEN";

/// The JSON endpoint.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct ApiSettings {
    pub bind: SocketAddr,
    /// Bearer token for writes (and for reads when bound beyond loopback).
    /// Never serialised, so it cannot leak into a config hash or a log.
    #[serde(skip)]
    pub token: Option<String>,
}

/// How alert e-mail leaves the machine.
#[derive(Debug, Clone, PartialEq, Serialize)]
#[serde(tag = "transport", rename_all = "kebab-case")]
pub enum MailTransport {
    /// One `.eml` file per message into a directory: the embedded
    /// default, which needs no mail server.
    File {
        directory: PathBuf,
    },
    Smtp(SmtpSettings),
}

/// Alert e-mail: the transport, the sender and the recipients.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct EmailSettings {
    #[serde(flatten)]
    pub transport: MailTransport,
    pub from: String,
    pub to: Vec<String>,
}

/// An SMTP relay.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct SmtpSettings {
    pub smtp_host: String,
    pub smtp_port: u16,
    /// "none" (plain, loopback relays only), "starttls" or "tls".
    pub security: SmtpSecurity,
    pub username: Option<String>,
    #[serde(skip)]
    pub password: Option<String>,
}

#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize)]
#[serde(rename_all = "kebab-case")]
pub enum SmtpSecurity {
    None,
    Starttls,
    Tls,
}

/// A webhook receiving alert events as signed JSON.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct WebhookSettings {
    pub url: String,
    #[serde(skip)]
    pub secret: Option<String>,
}

/// The environment variables that can carry the SMTP password and the
/// webhook secret instead of a file.
pub const SMTP_PASSWORD_ENV: &str = "PERIHELIX_SMTP_PASSWORD";
pub const WEBHOOK_SECRET_ENV: &str = "PERIHELIX_WEBHOOK_SECRET";

/// When to tell the team, and how. Every rule fires when its value
/// crosses its threshold and clears only once the value is back inside by
/// `clear_fraction` of it, so a value hovering at the line raises one
/// alert, not one per refit.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct AlertSettings {
    /// Original barycentric 1/a below zero by this many sigma: unbound.
    pub unbound_sigma: f64,
    /// Non-gravitational terms needed at this significance.
    pub ng_significance_sigma: f64,
    /// Gravity alone no longer explains the data above this normalised
    /// RMS (or when its residual trend test fails at
    /// `batch_p_value_below`).
    pub gravity_normalized_rms_above: f64,
    /// New data disagree with the previous solution's prediction below
    /// this p-value.
    pub batch_p_value_below: f64,
    /// The predicted place moved more than this...
    pub prediction_shift_arcsec: f64,
    /// ...and more than this many of its sigmas...
    pub prediction_shift_sigma: f64,
    /// ...this many days after the fit.
    pub prediction_days: Vec<f64>,
    /// No converged fit for this long while data arrive.
    pub no_solution_hours: f64,
    /// How far back inside its threshold a value must come, as a fraction
    /// of the threshold, before its rule clears.
    pub clear_fraction: f64,
    /// A failed delivery is tried again after this long, doubling each
    /// time up to `retry_max_s`, and given up (marked dead, counted and
    /// shown) after `give_up_after` attempts.
    pub retry_first_s: f64,
    pub retry_max_s: f64,
    pub give_up_after: u32,
    pub email: EmailSettings,
    pub webhook: Option<WebhookSettings>,
}

impl AlertSettings {
    /// The defaults, with mail written as files under `mail_dir`.
    pub fn defaults(mail_dir: PathBuf) -> Self {
        Self {
            unbound_sigma: 3.0,
            ng_significance_sigma: 3.0,
            gravity_normalized_rms_above: 1.5,
            batch_p_value_below: 0.001,
            prediction_shift_arcsec: 10.0,
            prediction_shift_sigma: 3.0,
            prediction_days: vec![7.0, 30.0],
            no_solution_hours: 48.0,
            clear_fraction: 0.2,
            retry_first_s: 10.0,
            retry_max_s: 900.0,
            give_up_after: 12,
            email: EmailSettings {
                transport: MailTransport::File {
                    directory: mail_dir,
                },
                from: DEFAULT_FROM.into(),
                to: vec![DEFAULT_TO.into()],
            },
            webhook: None,
        }
    }
}

/// Sender and recipient of the file transport when none are configured.
const DEFAULT_FROM: &str = "perihelix <perihelix@localhost>";
const DEFAULT_TO: &str = "orbit team <orbits@localhost>";

/// The whole configuration.
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Config {
    pub directories: Directories,
    pub stations_file: Option<PathBuf>,
    pub stations: StationList,
    pub ephemeris: EphemerisChoice,
    /// Replacement leap-second table (IETF leap-seconds.list format).
    pub leap_seconds_file: Option<PathBuf>,
    pub fit: FitSettings,
    /// Extra designation links: each group names one object.
    pub links: Vec<Vec<DesignationKey>>,
    pub refit: RefitSettings,
    pub api: ApiSettings,
    pub logging: LoggingSettings,
    pub alerts: AlertSettings,
}

impl Config {
    /// The embedded defaults: data under `root`, embedded ephemeris, no mail,
    /// the API on loopback.
    pub fn embedded_default(root: &Path) -> Self {
        Self {
            directories: Directories {
                incoming: root.join("incoming"),
                archive: root.join("archive"),
                rejected: root.join("rejected"),
                database: root.join("db"),
            },
            stations_file: None,
            stations: StationList::default(),
            ephemeris: EphemerisChoice::Embedded,
            leap_seconds_file: None,
            fit: FitSettings::default(),
            links: Vec::new(),
            refit: RefitSettings::default(),
            api: ApiSettings {
                bind: SocketAddr::from(([127, 0, 0, 1], 8620)),
                token: None,
            },
            logging: LoggingSettings::default(),
            alerts: AlertSettings::defaults(root.join("mail")),
        }
    }

    /// Reads and validates a configuration file and the station list it
    /// names.
    pub fn load(path: &Path) -> Result<Self, ConfigError> {
        let text = std::fs::read_to_string(path).map_err(|e| ConfigError {
            problems: vec![ConfigProblem {
                file: path.to_path_buf(),
                line: 0,
                key: String::new(),
                reason: format!("cannot read the configuration: {e}"),
            }],
        })?;
        Self::parse(path, &text)
    }

    /// Validates configuration text; `path` names it in messages and anchors
    /// relative paths.
    pub fn parse(path: &Path, text: &str) -> Result<Self, ConfigError> {
        let src = Source::new(path, text);
        let mut extra = Vec::new();
        let config = reader::parse(&src, text).and_then(|doc| {
            let top = TableReader::new(&src, doc.as_table(), "", 1);
            let cfg = read_config(&top, &mut extra);
            top.finish();
            cfg
        });
        let mut problems = src.into_problems();
        problems.extend(extra);
        match config {
            Some(c) if problems.is_empty() => Ok(c),
            _ => {
                problems.sort_by(|a, b| (&a.file, a.line).cmp(&(&b.file, b.line)));
                Err(ConfigError { problems })
            }
        }
    }
}

/// Reads every section, even after a failed one, so all problems surface.
fn read_config(top: &TableReader<'_, '_>, extra: &mut Vec<ConfigProblem>) -> Option<Config> {
    let directories = top.table("directories").and_then(|t| {
        let d = (
            t.path("incoming", true),
            t.path("archive", true),
            t.path("rejected", true),
            t.path("database", true),
        );
        t.finish();
        let (incoming, archive, rejected, database) = (d.0?, d.1?, d.2?, d.3?);
        let all = [&incoming, &archive, &rejected, &database];
        for (i, a) in all.iter().enumerate() {
            if all[..i].contains(a) {
                top.problem("directories", format!("{} is named twice", a.display()));
            }
        }
        Some(Directories {
            incoming,
            archive,
            rejected,
            database,
        })
    });
    if directories.is_none() && !top.source().has_problem_under("directories") {
        top.problem("directories", "the [directories] section is required");
    }

    let (stations_file, stations) = match top.table("stations") {
        Some(t) => {
            let file = t.path("file", true);
            let read = match file {
                // An unreadable list is reported at the key that names it,
                // with the path as resolved, so the reader knows what to fix.
                Some(f) => match std::fs::read_to_string(&f) {
                    Err(e) => {
                        t.problem(
                            "file",
                            format!("cannot read the station list {}: {e}", f.display()),
                        );
                        (Some(f), None)
                    }
                    Ok(text) => match parse_stations(&f, &text) {
                        Ok(list) => (Some(f), Some(list)),
                        Err(p) => {
                            extra.extend(p);
                            (Some(f), None)
                        }
                    },
                },
                None => (None, None),
            };
            t.finish();
            read
        }
        None => (None, Some(StationList::default())),
    };

    let (ephemeris, leap_seconds_file) = match top.table("ephemeris") {
        Some(t) => {
            let source = t.string("source", false);
            let path = t.path("path", false);
            let leap = t.path("leap_seconds_file", false);
            let choice = match source.as_deref() {
                None | Some("embedded") => {
                    if path.is_some() {
                        t.problem("path", "a path is only used with source = \"spk\"");
                    }
                    Some(EphemerisChoice::Embedded)
                }
                Some("spk") => match path {
                    Some(p) if p.is_file() => Some(EphemerisChoice::Spk { path: p }),
                    Some(p) => {
                        t.problem("path", format!("no ephemeris file at {}", p.display()));
                        None
                    }
                    None => {
                        t.problem("path", "source = \"spk\" needs the path of the file");
                        None
                    }
                },
                Some(other) => {
                    t.problem(
                        "source",
                        format!("'{other}' is not a source: use \"embedded\" or \"spk\""),
                    );
                    None
                }
            };
            if let Some(l) = &leap {
                // Read it now, so a bad table stops the start, not a refit.
                match LeapSecondTable::from_file(l) {
                    Ok(_) => {}
                    Err(TimeError::LeapFileLine { path, line, reason }) => {
                        extra.push(ConfigProblem {
                            file: PathBuf::from(path),
                            line,
                            key: String::new(),
                            reason,
                        })
                    }
                    Err(e) => t.problem("leap_seconds_file", e.to_string()),
                }
            }
            t.finish();
            (choice, leap)
        }
        None => (Some(EphemerisChoice::Embedded), None),
    };

    let fit = match top.table("fit") {
        Some(t) => {
            let f = read_fit(&t);
            t.finish();
            f
        }
        None => Some(FitSettings::default()),
    };

    let mut links = Vec::new();
    for t in top.tables("link") {
        if let Some(group) = t.string_array("designations", true) {
            let mut keys = Vec::with_capacity(group.len());
            for text in &group {
                match DesignationKey::parse(text) {
                    Ok(k) => keys.push(k),
                    Err(reason) => t.problem("designations", reason),
                }
            }
            if group.len() < 2 {
                t.problem("designations", "a link needs at least two designations");
            } else if keys.len() == group.len() {
                links.push(keys);
            }
        }
        t.finish();
    }

    let refit = match top.table("refit") {
        Some(t) => {
            let r = read_refit(&t);
            t.finish();
            r
        }
        None => Some(RefitSettings::default()),
    };

    let logging = match top.table("logging") {
        Some(t) => {
            let l = read_logging(&t);
            t.finish();
            l
        }
        None => Some(LoggingSettings::default()),
    };

    let api = match top.table("api") {
        Some(t) => {
            let a = read_api(&t);
            t.finish();
            a
        }
        None => Some(ApiSettings {
            token: api_token_from_env(),
            ..Config::embedded_default(Path::new(".")).api
        }),
    };

    let alerts = match top.table("alerts") {
        Some(t) => {
            let a = read_alerts(&t);
            t.finish();
            a
        }
        None => Some(AlertSettings::defaults(
            top.source().base_dir().join("mail"),
        )),
    };

    Some(Config {
        directories: directories?,
        stations_file,
        stations: stations?,
        ephemeris: ephemeris?,
        leap_seconds_file,
        fit: fit?,
        links,
        refit: refit?,
        api: api?,
        logging: logging?,
        alerts: alerts?,
    })
}

fn read_refit(t: &TableReader<'_, '_>) -> Option<RefitSettings> {
    let d = RefitSettings::default();
    let non_negative = |x: f64| {
        if x >= 0.0 && x.is_finite() {
            Ok(())
        } else {
            Err(format!("{x} is not a duration in seconds (0 or more)"))
        }
    };
    let quiet = t.f64_where("quiet_period_s", false, non_negative);
    let max_delay = t.f64_where("max_delay_s", false, non_negative);
    let workers = t.u64("workers", false);
    let rescan = t.f64_where("rescan_interval_s", false, positive);
    if workers == Some(0) {
        t.problem("workers", "at least one worker is needed");
    }
    let quiet_period_s = quiet.unwrap_or(d.quiet_period_s);
    let max_delay_s = max_delay.unwrap_or(d.max_delay_s);
    if max_delay_s < quiet_period_s {
        t.problem(
            "max_delay_s",
            format!("{max_delay_s} is below quiet_period_s ({quiet_period_s}): no refit could wait for quiet"),
        );
    }
    if t.source().has_problem_under(&t.full_key("")) {
        return None;
    }
    Some(RefitSettings {
        quiet_period_s,
        max_delay_s,
        workers: workers.map_or(d.workers, |w| usize::try_from(w).unwrap_or(usize::MAX)),
        rescan_interval_s: rescan.unwrap_or(d.rescan_interval_s),
    })
}

fn read_logging(t: &TableReader<'_, '_>) -> Option<LoggingSettings> {
    let d = LoggingSettings::default();
    let level = t.string("level", false);
    if let Some(l) = &level {
        if let Err(e) = tracing_subscriber::EnvFilter::try_new(l) {
            t.problem("level", format!("'{l}' is not a log filter: {e}"));
        }
    }
    let json = match t.string("format", false).as_deref() {
        None | Some("plain") => Some(false),
        Some("json") => Some(true),
        Some(other) => {
            t.problem(
                "format",
                format!("'{other}' is not a format: use \"plain\" or \"json\""),
            );
            None
        }
    };
    if t.source().has_problem_under(&t.full_key("")) {
        return None;
    }
    Some(LoggingSettings {
        level: level.unwrap_or(d.level),
        json: json.unwrap_or(d.json),
    })
}

fn read_fit(t: &TableReader<'_, '_>) -> Option<FitSettings> {
    let d = FitSettings::default();
    let sigma_floor_arcsec = t.f64_where("sigma_floor_arcsec", false, positive);
    let default_sigma_arcsec = t.f64_where("default_sigma_arcsec", false, positive);
    let per_night_inflation = t.bool("per_night_inflation");
    let reject_chi2 = t
        .f64_where("reject_chi2", false, positive)
        .unwrap_or(d.reject_chi2);
    let recover_chi2 = t
        .f64_where("recover_chi2", false, positive)
        .unwrap_or(d.recover_chi2);
    let max_iterations = t.u64("max_iterations", false);
    let significance_sigma = t.f64_where("significance_sigma", false, positive);
    let relativity = t.bool("relativity");
    let catalog_bias_file = t.path("catalog_bias_file", false);
    let custom_r0 = t.f64_where("water_ice_r0_au", false, positive);

    if recover_chi2 >= reject_chi2 {
        t.problem(
            "recover_chi2",
            format!("{recover_chi2} must be below reject_chi2 ({reject_chi2}) or observations flip-flop"),
        );
    }
    if max_iterations == Some(0) {
        t.problem("max_iterations", "must be at least 1");
    }
    if let Some(p) = &catalog_bias_file {
        if !p.is_file() {
            t.problem(
                "catalog_bias_file",
                format!("no bias table at {}", p.display()),
            );
        }
    }

    let ladder = match t.string_array("ladder", false) {
        None => d.ladder.clone(),
        Some(rungs) => {
            let mut out = Vec::new();
            for rung in &rungs {
                match parse_rung(rung) {
                    Ok(terms) => out.push(terms),
                    Err(reason) => t.problem("ladder", reason),
                }
            }
            if rungs.first().is_none_or(|r| r != "gravity") {
                t.problem(
                    "ladder",
                    "the first rung must be \"gravity\": every model is compared with gravity alone",
                );
            }
            out
        }
    };

    let laws = match t.string_array("laws", false) {
        None => d.laws.clone(),
        Some(names) => {
            let mut out = Vec::new();
            for name in &names {
                match name.as_str() {
                    "water-ice" => out.push(NonGravLaw::WaterIce),
                    "inverse-square" => out.push(NonGravLaw::InverseSquare),
                    "water-ice-scaled" => match custom_r0 {
                        Some(r0_au) => out.push(NonGravLaw::WaterIceScaled { r0_au }),
                        None => t.problem("laws", "\"water-ice-scaled\" needs water_ice_r0_au"),
                    },
                    other => t.problem(
                        "laws",
                        format!(
                            "'{other}' is not a law: use \"water-ice\", \"inverse-square\" or \"water-ice-scaled\""
                        ),
                    ),
                }
            }
            if names.is_empty() {
                t.problem("laws", "at least one law is needed");
            }
            out
        }
    };

    if t.source().has_problem_under(&t.full_key("")) {
        return None;
    }
    Some(FitSettings {
        sigma_floor_arcsec: sigma_floor_arcsec.unwrap_or(d.sigma_floor_arcsec),
        default_sigma_arcsec: default_sigma_arcsec.unwrap_or(d.default_sigma_arcsec),
        per_night_inflation: per_night_inflation.unwrap_or(d.per_night_inflation),
        reject_chi2,
        recover_chi2,
        max_iterations: max_iterations
            .map_or(d.max_iterations, |n| u32::try_from(n).unwrap_or(u32::MAX)),
        ladder,
        laws,
        significance_sigma: significance_sigma.unwrap_or(d.significance_sigma),
        relativity: relativity.unwrap_or(d.relativity),
        catalog_bias_file,
    })
}

/// "gravity", "A2", "A1+A2", ... -> the free terms of that rung.
fn parse_rung(rung: &str) -> Result<Vec<NonGravTerm>, String> {
    if rung == "gravity" {
        return Ok(Vec::new());
    }
    let mut terms = Vec::new();
    for part in rung.split('+') {
        let term = match part.trim() {
            "A1" => NonGravTerm::A1,
            "A2" => NonGravTerm::A2,
            "A3" => NonGravTerm::A3,
            other => {
                return Err(format!(
                    "'{other}' in rung '{rung}' is not a term: use \"gravity\" or A1, A2, A3 joined by '+'"
                ))
            }
        };
        if terms.contains(&term) {
            return Err(format!("rung '{rung}' names {term:?} twice"));
        }
        terms.push(term);
    }
    terms.sort();
    Ok(terms)
}

fn read_api(t: &TableReader<'_, '_>) -> Option<ApiSettings> {
    let bind = t
        .string("bind", false)
        .and_then(|s| match s.parse::<SocketAddr>() {
            Ok(a) => Some(a),
            Err(_) => {
                t.problem(
                    "bind",
                    format!("'{s}' is not an address:port such as 127.0.0.1:8620"),
                );
                None
            }
        });
    let token = read_secret(t, "token", "token_file").or_else(api_token_from_env);
    if t.source().has_problem_under(&t.full_key("")) {
        return None;
    }
    let bind = bind.unwrap_or(Config::embedded_default(Path::new(".")).api.bind);
    if !bind.ip().is_loopback() && token.is_none() {
        t.problem(
            "token_file",
            format!(
                "the API binds {bind}, beyond loopback, so it needs a token (token_file or {API_TOKEN_ENV})"
            ),
        );
        return None;
    }
    Some(ApiSettings { bind, token })
}

/// The token the environment gives, if any.
fn api_token_from_env() -> Option<String> {
    std::env::var(API_TOKEN_ENV)
        .ok()
        .map(|s| s.trim().to_string())
        .filter(|s| !s.is_empty())
}

/// A secret given inline (`key`) or, better, in a file (`file_key`).
fn read_secret(t: &TableReader<'_, '_>, key: &str, file_key: &str) -> Option<String> {
    let inline = t.string(key, false);
    let file = t.path(file_key, false);
    match (inline, file) {
        (Some(_), Some(_)) => {
            t.problem(
                file_key,
                format!("give either {key} or {file_key}, not both"),
            );
            None
        }
        (Some(s), None) => Some(s),
        (None, Some(p)) => match std::fs::read_to_string(&p) {
            Ok(s) if !s.trim().is_empty() => Some(s.trim().to_string()),
            Ok(_) => {
                t.problem(file_key, format!("{} is empty", p.display()));
                None
            }
            Err(e) => {
                t.problem(file_key, format!("cannot read {}: {e}", p.display()));
                None
            }
        },
        (None, None) => None,
    }
}

fn read_alerts(t: &TableReader<'_, '_>) -> Option<AlertSettings> {
    let d = AlertSettings::defaults(t.source().base_dir().join("mail"));
    let sigma = |x: f64| in_range(x, 0.5, 100.0, "sigma");
    let unbound = t.f64_where("unbound_sigma", false, sigma);
    let ng = t.f64_where("ng_significance_sigma", false, sigma);
    let rms = t.f64_where("gravity_normalized_rms_above", false, |x| {
        in_range(x, 1.0, 1000.0, "normalised RMS")
    });
    let p = t.f64_where("batch_p_value_below", false, |x| {
        if x > 0.0 && x < 0.5 {
            Ok(())
        } else {
            Err(format!("{x} is not a p-value between 0 and 0.5"))
        }
    });
    let shift = t.f64_where("prediction_shift_arcsec", false, positive);
    let shift_sigma = t.f64_where("prediction_shift_sigma", false, sigma);
    let days = t.f64_array("prediction_days", false);
    if let Some(days) = &days {
        if days.is_empty() || days.iter().any(|d| !(*d > 0.0 && *d <= 3660.0)) {
            t.problem(
                "prediction_days",
                "give one or more days ahead, each above 0 and at most 3660",
            );
        }
    }
    let hours = t.f64_where("no_solution_hours", false, positive);
    let clear = t.f64_where("clear_fraction", false, |x| {
        in_range(x, 0.0, 0.9, "fraction of the threshold")
    });
    let retry_first = t.f64_where("retry_first_s", false, positive);
    let retry_max = t.f64_where("retry_max_s", false, positive);
    let give_up = t
        .u64("give_up_after", false)
        .and_then(|n| match u32::try_from(n) {
            Ok(n) if (1..=1000).contains(&n) => Some(n),
            _ => {
                t.problem(
                    "give_up_after",
                    format!("{n} attempts is not between 1 and 1000"),
                );
                None
            }
        });
    let email = match t.table("email") {
        Some(m) => {
            let e = read_email(&m, &d.email);
            m.finish();
            e
        }
        None => Some(d.email.clone()),
    };
    let webhook = t.table("webhook").map(|w| {
        let url = w.string("url", true);
        if let Some(u) = &url {
            if !(u.starts_with("http://") || u.starts_with("https://")) {
                w.problem("url", format!("'{u}' is not an http(s) URL"));
            }
        }
        let secret = read_secret(&w, "secret", "secret_file")
            .or_else(|| std::env::var(WEBHOOK_SECRET_ENV).ok());
        if secret.is_none() {
            w.problem(
                "secret_file",
                format!("a webhook needs a signing secret: secret_file, or {WEBHOOK_SECRET_ENV}"),
            );
        }
        w.finish();
        url.map(|url| WebhookSettings { url, secret })
    });
    if t.source().has_problem_under(&t.full_key("")) {
        return None;
    }
    Some(AlertSettings {
        unbound_sigma: unbound.unwrap_or(d.unbound_sigma),
        ng_significance_sigma: ng.unwrap_or(d.ng_significance_sigma),
        gravity_normalized_rms_above: rms.unwrap_or(d.gravity_normalized_rms_above),
        batch_p_value_below: p.unwrap_or(d.batch_p_value_below),
        prediction_shift_arcsec: shift.unwrap_or(d.prediction_shift_arcsec),
        prediction_shift_sigma: shift_sigma.unwrap_or(d.prediction_shift_sigma),
        prediction_days: days.unwrap_or(d.prediction_days),
        no_solution_hours: hours.unwrap_or(d.no_solution_hours),
        clear_fraction: clear.unwrap_or(d.clear_fraction),
        retry_first_s: retry_first.unwrap_or(d.retry_first_s),
        retry_max_s: retry_max.unwrap_or(d.retry_max_s),
        give_up_after: give_up.unwrap_or(d.give_up_after),
        email: email?,
        webhook: webhook.flatten(),
    })
}

/// `[alerts.email]`: the file transport (the default) or SMTP.
fn read_email(m: &TableReader<'_, '_>, default: &EmailSettings) -> Option<EmailSettings> {
    let smtp = match m.string("transport", false).as_deref() {
        None | Some("file") => false,
        Some("smtp") => true,
        Some(other) => {
            m.problem(
                "transport",
                format!("'{other}' is not one of \"file\", \"smtp\""),
            );
            return None;
        }
    };
    let from = m.string("from", smtp);
    let to = m.string_array("to", smtp);
    for addr in from.iter().chain(to.iter().flatten()) {
        if !looks_like_address(addr) {
            let key = if Some(addr) == from.as_ref() {
                "from"
            } else {
                "to"
            };
            m.problem(key, format!("'{addr}' is not an e-mail address"));
        }
    }
    if to.as_ref().is_some_and(Vec::is_empty) {
        m.problem("to", "at least one recipient is needed");
    }
    let transport = if smtp {
        if m.has("directory") {
            m.problem("directory", "only the file transport writes to a directory");
        }
        MailTransport::Smtp(read_smtp(m)?)
    } else {
        for key in [
            "smtp_host",
            "smtp_port",
            "security",
            "username",
            "password",
            "password_file",
        ] {
            if m.has(key) {
                m.problem(
                    key,
                    "only the smtp transport uses it (transport = \"smtp\")",
                );
            }
        }
        let directory = m.path("directory", false);
        match (directory, &default.transport) {
            (Some(directory), _) => MailTransport::File { directory },
            (None, t) => t.clone(),
        }
    };
    if m.source().has_problem_under(&m.full_key("")) {
        return None;
    }
    Some(EmailSettings {
        transport,
        from: from.unwrap_or_else(|| default.from.clone()),
        to: to.unwrap_or_else(|| default.to.clone()),
    })
}

fn read_smtp(m: &TableReader<'_, '_>) -> Option<SmtpSettings> {
    let host = m.string("smtp_host", true);
    let port = m
        .u64("smtp_port", false)
        .and_then(|p| match u16::try_from(p) {
            Ok(p) if p > 0 => Some(p),
            _ => {
                m.problem("smtp_port", format!("{p} is not a port number"));
                None
            }
        });
    let security = match m.string("security", false).as_deref() {
        None | Some("starttls") => Some(SmtpSecurity::Starttls),
        Some("tls") => Some(SmtpSecurity::Tls),
        Some("none") => Some(SmtpSecurity::None),
        Some(other) => {
            m.problem(
                "security",
                format!("'{other}' is not one of \"starttls\", \"tls\", \"none\""),
            );
            None
        }
    };
    let username = m.string("username", false);
    let password = read_secret(m, "password", "password_file")
        .or_else(|| std::env::var(SMTP_PASSWORD_ENV).ok());
    let security = security?;
    let default_port = match security {
        SmtpSecurity::Tls => 465,
        SmtpSecurity::Starttls => 587,
        SmtpSecurity::None => 25,
    };
    Some(SmtpSettings {
        smtp_host: host?,
        smtp_port: port.unwrap_or(default_port),
        security,
        username,
        password,
    })
}

fn looks_like_address(s: &str) -> bool {
    // A light check: catches a name pasted without its address, not every
    // RFC 5322 subtlety (the SMTP server has the last word).
    let addr = s
        .rsplit_once('<')
        .map(|(_, a)| a.trim_end_matches('>'))
        .unwrap_or(s);
    matches!(addr.split_once('@'), Some((l, d)) if !l.is_empty() && d.contains('.') && !d.contains(' '))
}

#[cfg(test)]
mod tests;
