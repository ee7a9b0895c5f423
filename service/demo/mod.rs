//! `perihelix demo`: the whole job on embedded defaults, for a newcomer.
//!
//! It invents a visitor ([`scenario`]), starts the real daemon (this same
//! binary's `serve`, as a child process, in a directory of its own: sled
//! store, the embedded ephemeris, alert e-mails written as files, the API
//! and the pages on a free loopback port) and drops the nights into the
//! watched directory in order, faster than real time, waiting for each
//! solution and printing one line for it. It ends with the solution
//! history, the alert e-mails written, the planner's best nights and the
//! page's address.
//!
//! The daemon's readiness and address come over a NOTIFY_SOCKET, the way
//! systemd hears them; everything else goes through the JSON API.

pub mod scenario;

use std::io::Write;
use std::os::unix::net::UnixDatagram;
use std::path::{Path, PathBuf};
use std::process::{Child, Command, Stdio};
use std::time::{Duration, Instant};

use serde_json::Value;

use crate::config::Config;
use crate::daemon::history::{encode_path, table, History, HistorySource};
use crate::store::{ObjectState, SolutionSummary};

#[derive(Debug, thiserror::Error)]
pub enum DemoError {
    #[error("making the scenario: {0}")]
    Scenario(String),
    #[error("{path}: {source}")]
    Io {
        path: PathBuf,
        source: std::io::Error,
    },
    #[error("the daemon: {0}")]
    Daemon(String),
    #[error("the API: {0}")]
    Api(String),
    #[error("{0} is not empty: give the demo a new directory (or none, for a temporary one)")]
    NotEmpty(PathBuf),
}

fn io(path: &Path) -> impl FnOnce(std::io::Error) -> DemoError + '_ {
    move |source| DemoError::Io {
        path: path.to_path_buf(),
        source,
    }
}

/// What the demo is asked to do.
#[derive(Debug, Clone)]
pub struct DemoOptions {
    /// Where its data go (a new directory under the system's temporary
    /// directory when None).
    pub dir: Option<PathBuf>,
    /// Leave the daemon and the page running at the end.
    pub keep_serving: bool,
    /// Fewer, larger batches of nights (the tests' mode).
    pub quick: bool,
    pub seed: u64,
}

/// Batches of nights fed to the daemon, one solution each.
const STEPS: usize = 18;
const QUICK_STEPS: usize = 7;
/// The first batch: the nights of the first week after discovery (at
/// least three, which the verdicts need). A first fit of a day's arc
/// would spend most of the demo searching for an initial orbit.
const FIRST_NIGHTS: usize = 3;
const FIRST_DAYS: f64 = 7.0;
const READY_WITHIN: Duration = Duration::from_secs(120);
const FIT_WITHIN: Duration = Duration::from_secs(600);
const POLL: Duration = Duration::from_millis(250);

/// What the demo left behind.
#[derive(Debug, Clone)]
pub struct DemoOutcome {
    pub dir: PathBuf,
    pub config: PathBuf,
    pub emails: Vec<PathBuf>,
    pub page_url: String,
}

/// Runs the demo, writing its story to `out`.
pub fn run(options: &DemoOptions, out: &mut dyn Write) -> Result<DemoOutcome, DemoError> {
    let started = Instant::now();
    let dir = match &options.dir {
        Some(d) => d.clone(),
        None => std::env::temp_dir().join(format!(
            "perihelix-demo-{}-{}",
            std::process::id(),
            std::time::SystemTime::now()
                .duration_since(std::time::UNIX_EPOCH)
                .map_or(0, |d| d.as_secs())
        )),
    };
    // A store from an earlier run would take the nights as duplicates and
    // no solution would come: the demo wants a directory of its own.
    if std::fs::read_dir(&dir).is_ok_and(|mut d| d.next().is_some()) {
        return Err(DemoError::NotEmpty(dir));
    }
    let config = write_configuration(&dir)?;
    let cfg = Config::load(&config).map_err(|e| DemoError::Daemon(e.to_string()))?;
    let ctx =
        crate::solve::SolveContext::new(&cfg).map_err(|e| DemoError::Scenario(e.to_string()))?;
    let s = scenario::scenario(
        ctx.ephemeris.as_ref(),
        &ctx.scales,
        &cfg.stations,
        options.seed,
    )?;
    let batches = batches(
        &s.tracklets,
        if options.quick { QUICK_STEPS } else { STEPS },
    );
    let observations: usize = s.tracklets.iter().map(|t| t.rows.len()).sum();
    say(
        out,
        format_args!(
            "An invented visitor, {}: {} observations in {} tracklets from the invented stations \
             ({} station-nights lost to cloud, {} to a bright Moon; {} gross outliers), \
             perihelion {}.\nData, store, mail and log under {}\n",
            s.designation,
            observations,
            s.tracklets.len(),
            s.lost.clouded,
            s.lost.moonlit,
            s.outliers,
            s.perihelion_utc,
            dir.display()
        ),
    );

    let mut daemon = Daemon::start(&config, &dir)?;
    let api = Api::new(&daemon.address)?;
    say(
        out,
        format_args!(
            "The daemon is up on http://{} (log: {}).\n\n",
            daemon.address,
            daemon.log.display()
        ),
    );
    say(out, format_args!("{}\n", LINE_HEADER));
    let name = encode_path(s.designation);
    let mut sent = 0;
    for (k, batch) in batches.iter().enumerate() {
        let rows: Vec<&str> = batch
            .iter()
            .flat_map(|t| t.rows.iter().map(String::as_str))
            .collect();
        sent += rows.len();
        let night = batch.last().map_or("-", |t| t.date.as_str()).to_string();
        drop_file(
            &cfg.directories.incoming,
            &format!("night-{:02}-{night}.psv", k + 1),
            &s.header,
            &rows,
        )?;
        progress(k, batches.len(), &night);
        let record = api.wait_for(&name, sent, &mut daemon)?;
        clear_progress();
        say(
            out,
            format_args!("{}\n", solution_line(k + 1, batches.len(), &night, &record)),
        );
    }

    let object: ObjectState = api.get_as(&format!("/v1/objects/{name}"))?;
    let list = api.get(&format!("/v1/objects/{name}/solutions?limit=1000"))?;
    let mut solutions: Vec<SolutionSummary> = serde_json::from_value(list["solutions"].clone())
        .map_err(|e| DemoError::Api(format!("the solution list: {e}")))?;
    solutions.reverse();
    say(
        out,
        format_args!(
            "\nThe solution history:\n{}",
            table(&History {
                object: object.clone(),
                solutions,
                source: HistorySource::Daemon,
            })
        ),
    );
    let latest = api.get(&format!("/v1/objects/{name}/solutions/latest"))?;
    say(
        out,
        format_args!("\n{}", verdict_lines(&latest["document"])),
    );
    // The month after the last night: the invented nights need not sit
    // before today, so the plan stored with the solution (the month after
    // it was computed) may look at another season.
    let plan = match s.tracklets.last() {
        Some(t) => {
            let day = |d: f64| crate::page::svg::iso_date_of_mjd(t.mjd.floor() as i64 + d as i64);
            match (day(1.0), day(31.0)) {
                (Some(from), Some(to)) => {
                    api.get(&format!("/v1/objects/{name}/plan?from={from}&to={to}"))?
                }
                _ => Value::Null,
            }
        }
        None => Value::Null,
    };
    say(out, format_args!("\n{}", plan_lines(&plan)));
    let emails = emails(&dir.join("mail"))?;
    say(
        out,
        format_args!("\nAlert e-mails written ({}):\n", emails.len()),
    );
    for e in &emails {
        say(out, format_args!("  {}  {}\n", e.display(), subject_of(e)));
    }
    let page_url = format!("http://{}/objects/{}", daemon.address, object.id);
    say(
        out,
        format_args!("\nDone in {:.0} s.\n", started.elapsed().as_secs_f64()),
    );
    if options.keep_serving {
        say(
            out,
            format_args!(
                "The page: {page_url}\nThe JSON API: http://{}/v1/objects\n\
                 The daemon keeps serving; stop it with Ctrl-C.\n",
                daemon.address
            ),
        );
    } else {
        say(
            out,
            format_args!(
                "The daemon has stopped; its store stays in {}. To see the page, run the demo \
                 with --keep-serving, or serve this store again:\n  perihelix serve --config {}\n\
                 and open /objects/{} on the address it logs (a free port each time).\n",
                dir.display(),
                config.display(),
                object.id
            ),
        );
    }
    let outcome = DemoOutcome {
        dir: dir.clone(),
        config: config.clone(),
        emails,
        page_url,
    };
    if options.keep_serving {
        daemon.wait()?;
    } else {
        daemon.stop()?;
    }
    Ok(outcome)
}

fn say(out: &mut dyn Write, args: std::fmt::Arguments<'_>) {
    // The story is best effort: a closed pipe must not stop the demo.
    let _ = out.write_fmt(args);
    let _ = out.flush();
}

/// The configuration: embedded defaults but for the paths, a free port
/// and a short quiet period (the nights arrive in seconds, not days).
fn write_configuration(dir: &Path) -> Result<PathBuf, DemoError> {
    for sub in ["incoming", "archive", "rejected", "mail"] {
        std::fs::create_dir_all(dir.join(sub)).map_err(io(&dir.join(sub)))?;
    }
    let stations = dir.join("stations.toml");
    std::fs::write(&stations, crate::config::SHIPPED_STATIONS_TOML).map_err(io(&stations))?;
    let config = dir.join("config.toml");
    let text = "# Written by perihelix demo: the embedded defaults but for these.\n\
         [directories]\nincoming = \"incoming\"\narchive = \"archive\"\nrejected = \"rejected\"\ndatabase = \"db\"\n\
         [stations]\nfile = \"stations.toml\"\n\
         [ephemeris]\nsource = \"embedded\"\n\
         [refit]\nquiet_period_s = 1\nmax_delay_s = 60\n\
         [api]\nbind = \"127.0.0.1:0\"\n\
         [alerts.email]\ntransport = \"file\"\ndirectory = \"mail\"\n";
    std::fs::write(&config, text).map_err(io(&config))?;
    Ok(config)
}

/// The tracklets in `steps` batches by observing date: the first week's
/// dates, then the rest in equal runs of dates.
fn batches(tracklets: &[scenario::Tracklet], steps: usize) -> Vec<Vec<scenario::Tracklet>> {
    let mut dates: Vec<&str> = tracklets.iter().map(|t| t.date.as_str()).collect();
    dates.dedup();
    let start = tracklets.first().map_or(0.0, |t| t.mjd);
    let in_first_week = tracklets
        .iter()
        .filter(|t| t.mjd < start + FIRST_DAYS)
        .map(|t| t.date.as_str())
        .collect::<std::collections::BTreeSet<_>>()
        .len();
    let first = in_first_week.max(FIRST_NIGHTS).min(dates.len());
    let rest = dates.len() - first;
    let per = rest.div_ceil(steps.saturating_sub(1).max(1)).max(1);
    let step_of = |date: &str| -> usize {
        let i = dates.iter().position(|d| *d == date).unwrap_or(0);
        if i < first {
            0
        } else {
            1 + (i - first) / per
        }
    };
    let mut out: Vec<Vec<scenario::Tracklet>> = Vec::new();
    for t in tracklets {
        let k = step_of(&t.date);
        if out.len() <= k {
            out.resize_with(k + 1, Vec::new);
        }
        out[k].push(t.clone());
    }
    out.retain(|b| !b.is_empty());
    out
}

/// Written under a temporary name, then renamed in: the daemon never
/// sees half a file.
fn drop_file(incoming: &Path, name: &str, header: &str, rows: &[&str]) -> Result<(), DemoError> {
    let part = incoming.join(format!(".{name}.part"));
    let mut text = String::with_capacity(header.len() + rows.len() * 120);
    text.push_str(header);
    for r in rows {
        text.push_str(r);
        text.push('\n');
    }
    std::fs::write(&part, text).map_err(io(&part))?;
    let target = incoming.join(name);
    std::fs::rename(&part, &target).map_err(io(&target))
}

const LINE_HEADER: &str = "step   night       obs  recommended          e (1 sigma)              1/a orig (sigma)  NG (sigma)  RMS (\")  gravity nRMS  alerts raised";

fn solution_line(step: usize, steps: usize, night: &str, record: &Value) -> String {
    let s = &record["summary"];
    let num = |v: &Value| v.as_f64();
    let e = match (num(&s["e"]["value"]), num(&s["e"]["sigma"])) {
        (Some(v), Some(sg)) => format!("{v:.5} +/- {sg:.1e}"),
        _ => "-".into(),
    };
    let inverse_a = match (
        num(&s["one_over_a_original_per_au"]["value"]),
        num(&s["one_over_a_original_per_au"]["sigma"]),
    ) {
        (Some(v), Some(sg)) if sg > 0.0 => format!("{:+.1}", v / sg),
        _ => "-".into(),
    };
    let alerts: Vec<String> = record["alerts"]
        .as_array()
        .map(|a| {
            a.iter()
                .map(|x| {
                    format!(
                        "{}{}",
                        x["rule_key"].as_str().unwrap_or("?"),
                        if x["edge"] == "cleared" {
                            " (cleared)"
                        } else {
                            ""
                        }
                    )
                })
                .collect()
        })
        .unwrap_or_default();
    format!(
        "{:>2}/{:<2}  {night}  {:>4}  {:<19}  {:<23}  {:>16}  {:>10}  {:>7}  {:>12}  {}",
        step,
        steps,
        s["observations"].as_u64().unwrap_or(0),
        s["recommended"].as_str().unwrap_or("none converged"),
        e,
        inverse_a,
        num(&s["ng_significance_sigma"]).map_or("-".into(), |x| format!("{x:.1}")),
        num(&s["rms_arcsec"]).map_or("-".into(), |x| format!("{x:.2}")),
        num(&s["gravity_normalized_rms"]).map_or("-".into(), |x| format!("{x:.2}")),
        if alerts.is_empty() {
            "-".to_string()
        } else {
            alerts.join(", ")
        }
    )
}

/// The latest verdict in the document's own words.
fn verdict_lines(doc: &Value) -> String {
    let mut out = String::from("The verdict now:\n");
    for key in ["terms", "bound", "law", "cost_of_honesty"] {
        if let Some(t) = doc[key]["text"].as_str() {
            out.push_str(&format!("  {t}\n"));
        }
    }
    out
}

fn plan_lines(plan: &Value) -> String {
    let Some(nights) = plan["nights"].as_array().filter(|n| !n.is_empty()) else {
        return format!(
            "No observing plan: {}\n",
            plan["message"].as_str().unwrap_or("none stored")
        );
    };
    let mut out = format!(
        "The planner: the nights that would best tell {} from its rivals ({} to {}):\n",
        plan["model"].as_str().unwrap_or("?"),
        plan["from_utc"].as_str().unwrap_or("?"),
        plan["to_utc"].as_str().unwrap_or("?"),
    );
    for n in nights.iter().take(5) {
        out.push_str(&format!(
            "  {} night of {}: expected separation {:.2} sigma, {} nights like it for 3 sigma\n",
            n["station"].as_str().unwrap_or("?"),
            n["night"].as_str().unwrap_or("?"),
            n["expected_sigma"].as_f64().unwrap_or(f64::NAN),
            n["nights_to_3_sigma"]
                .as_u64()
                .map_or("no number of".to_string(), |k| k.to_string())
        ));
    }
    out
}

fn emails(dir: &Path) -> Result<Vec<PathBuf>, DemoError> {
    let mut list: Vec<PathBuf> = std::fs::read_dir(dir)
        .map_err(io(dir))?
        .filter_map(|e| e.ok().map(|e| e.path()))
        .filter(|p| p.extension().is_some_and(|x| x == "eml"))
        .collect();
    list.sort_by_key(|p| std::fs::metadata(p).and_then(|m| m.modified()).ok());
    Ok(list)
}

fn subject_of(path: &Path) -> String {
    std::fs::read_to_string(path)
        .ok()
        .and_then(|t| {
            t.lines()
                .find_map(|l| l.strip_prefix("Subject: ").map(str::to_string))
        })
        .unwrap_or_default()
}

fn progress(step: usize, steps: usize, night: &str) {
    if !std::io::IsTerminal::is_terminal(&std::io::stderr()) {
        return;
    }
    let width = 30;
    let done = width * step / steps.max(1);
    eprint!(
        "\r[{}{}] {}/{} nights up to {night} in; fitting...",
        "#".repeat(done),
        ".".repeat(width - done),
        step + 1,
        steps
    );
}

fn clear_progress() {
    if std::io::IsTerminal::is_terminal(&std::io::stderr()) {
        eprint!("\r{}\r", " ".repeat(78));
    }
}

/// The daemon as a child process.
struct Daemon {
    child: Child,
    address: std::net::SocketAddr,
    log: PathBuf,
}

impl Daemon {
    fn start(config: &Path, dir: &Path) -> Result<Self, DemoError> {
        let socket_path = dir.join("notify.sock");
        let _ = std::fs::remove_file(&socket_path);
        let socket = UnixDatagram::bind(&socket_path).map_err(io(&socket_path))?;
        socket
            .set_read_timeout(Some(POLL))
            .map_err(io(&socket_path))?;
        let log = dir.join("daemon.log");
        let exe = std::env::current_exe().map_err(io(Path::new("the perihelix binary")))?;
        let child = Command::new(exe)
            .arg("serve")
            .arg("--config")
            .arg(config)
            .env("NOTIFY_SOCKET", &socket_path)
            .stdin(Stdio::null())
            .stdout(Stdio::null())
            .stderr(std::fs::File::create(&log).map_err(io(&log))?)
            .spawn()
            .map_err(|e| DemoError::Daemon(format!("cannot start it: {e}")))?;
        let mut daemon = Daemon {
            child,
            address: std::net::SocketAddr::from(([127, 0, 0, 1], 0)),
            log,
        };
        let deadline = Instant::now() + READY_WITHIN;
        let mut buf = [0u8; 4096];
        let mut address = None;
        loop {
            daemon.check_alive()?;
            if Instant::now() > deadline {
                return Err(DemoError::Daemon(format!(
                    "not ready within {READY_WITHIN:?}; see {}",
                    daemon.log.display()
                )));
            }
            if let Ok(n) = socket.recv(&mut buf) {
                let text = String::from_utf8_lossy(&buf[..n]).to_string();
                for line in text.lines() {
                    if let Some(a) = line.strip_prefix("STATUS=serving on ") {
                        address = a.parse().ok();
                    }
                }
                if text.lines().any(|l| l == "READY=1") {
                    break;
                }
            }
        }
        daemon.address =
            address.ok_or_else(|| DemoError::Daemon("ready without saying its address".into()))?;
        Ok(daemon)
    }

    fn check_alive(&mut self) -> Result<(), DemoError> {
        match self.child.try_wait() {
            Ok(Some(status)) => Err(DemoError::Daemon(format!(
                "exited ({status}); its log:\n{}",
                std::fs::read_to_string(&self.log).unwrap_or_default()
            ))),
            _ => Ok(()),
        }
    }

    /// SIGTERM, as systemd stops it, and a bounded wait.
    fn stop(&mut self) -> Result<(), DemoError> {
        if let Ok(Some(_)) = self.child.try_wait() {
            return Ok(());
        }
        let pid = self.child.id().to_string();
        let _ = Command::new("kill").args(["-s", "TERM", &pid]).status();
        let deadline = Instant::now() + Duration::from_secs(60);
        while Instant::now() < deadline {
            if let Ok(Some(_)) = self.child.try_wait() {
                return Ok(());
            }
            std::thread::sleep(POLL);
        }
        let _ = self.child.kill();
        let _ = self.child.wait();
        Err(DemoError::Daemon(
            "did not stop within 60 s of SIGTERM".into(),
        ))
    }

    fn wait(&mut self) -> Result<(), DemoError> {
        self.child
            .wait()
            .map(|_| ())
            .map_err(|e| DemoError::Daemon(e.to_string()))
    }
}

/// A demo that fails part-way (a fit that never comes, an API error)
/// must not leave its daemon running behind it.
impl Drop for Daemon {
    fn drop(&mut self) {
        let _ = self.stop();
    }
}

/// A small blocking client for the daemon's API.
struct Api {
    runtime: tokio::runtime::Runtime,
    client: reqwest::Client,
    base: String,
}

impl Api {
    fn new(address: &std::net::SocketAddr) -> Result<Self, DemoError> {
        Ok(Self {
            runtime: tokio::runtime::Builder::new_current_thread()
                .enable_all()
                .build()
                .map_err(|e| DemoError::Api(e.to_string()))?,
            client: reqwest::Client::builder()
                .timeout(Duration::from_secs(30))
                .build()
                .map_err(|e| DemoError::Api(e.to_string()))?,
            base: format!("http://{address}"),
        })
    }

    /// The body of a 200 answer as JSON; None for a 404.
    fn try_get(&self, path: &str) -> Result<Option<Value>, DemoError> {
        let url = format!("{}{path}", self.base);
        self.runtime.block_on(async {
            let r = self
                .client
                .get(&url)
                .send()
                .await
                .map_err(|e| DemoError::Api(format!("GET {path}: {e}")))?;
            if r.status() == reqwest::StatusCode::NOT_FOUND {
                return Ok(None);
            }
            if !r.status().is_success() {
                return Err(DemoError::Api(format!("GET {path}: {}", r.status())));
            }
            r.json()
                .await
                .map(Some)
                .map_err(|e| DemoError::Api(format!("GET {path}: {e}")))
        })
    }

    fn get(&self, path: &str) -> Result<Value, DemoError> {
        self.try_get(path)?
            .ok_or_else(|| DemoError::Api(format!("GET {path}: not found")))
    }

    fn get_as<T: serde::de::DeserializeOwned>(&self, path: &str) -> Result<T, DemoError> {
        serde_json::from_value(self.get(path)?).map_err(|e| DemoError::Api(format!("{path}: {e}")))
    }

    /// The latest record once a solution has seen `observations`.
    fn wait_for(
        &self,
        name: &str,
        observations: usize,
        daemon: &mut Daemon,
    ) -> Result<Value, DemoError> {
        let deadline = Instant::now() + FIT_WITHIN;
        loop {
            daemon.check_alive()?;
            if let Some(r) = self.try_get(&format!("/v1/objects/{name}/solutions/latest"))? {
                if r["summary"]["observations"].as_u64() == Some(observations as u64) {
                    return Ok(r);
                }
            }
            if Instant::now() > deadline {
                return Err(DemoError::Daemon(format!(
                    "no solution with {observations} observations within {FIT_WITHIN:?}; see {}",
                    daemon.log.display()
                )));
            }
            std::thread::sleep(POLL);
        }
    }
}
