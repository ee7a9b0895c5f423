//! The `perihelix` command line: a thin layer over the library.

use std::path::{Path, PathBuf};
use std::process::ExitCode;

use anyhow::{Context, Result};
use clap::{Parser, Subcommand};

use perihelix::astro::time::{Epoch, UtcTime};
use perihelix::config::{parse_stations, shipped_stations, Config, ConfigError, StationList};
use perihelix::fit::predict::{EllipseMethod, PredictSettings, PredictionPoint, MIN_SAMPLES};
use perihelix::ingest::{DesignationKey, ObjectObservations};
use perihelix::solve::prediction::{predict_with_average, utc_grid, GridError, PredictionDocument};

/// Keeps a small body's orbit right while observations keep coming in.
///
/// perihelix reads astrometric observations (IAU ADES PSV or XML, or JSON
/// lines), fits the orbit with the gravity of the Sun and planets, relativity
/// and optional cometary non-gravitational terms, and says whether gravity
/// alone still explains the data. Run as a daemon with `serve`, or use the
/// batch commands on files.
#[derive(Parser, Debug)]
#[command(name = "perihelix", version, about, long_about)]
struct Cli {
    #[command(subcommand)]
    command: Command,
}

#[derive(Subcommand, Debug)]
enum Command {
    /// Run the service: watch the incoming directory, refit, answer JSON,
    /// send alerts.
    Serve {
        /// Configuration file (see config/example.toml).
        #[arg(long, short, default_value = "/etc/perihelix/config.toml")]
        config: PathBuf,
    },
    /// Fit the orbit of the object in the given observation files and
    /// report every model of the ladder.
    Fit {
        /// Observation files (.psv, .xml, .jsonl).
        #[arg(required = true)]
        files: Vec<PathBuf>,
        /// Configuration file for the fit settings and the station list
        /// (see config/example.toml; default: the embedded defaults).
        #[arg(long, short)]
        config: Option<PathBuf>,
        /// Station list file, replacing the configuration's (default: the
        /// configuration's, else the built-in config/stations.toml).
        #[arg(long)]
        stations: Option<PathBuf>,
        /// Print one JSON document instead of the report.
        #[arg(long)]
        json: bool,
        /// Report the elements at this epoch: a Julian date (TDB) such as
        /// 2461000.5, or an ISO 8601 UTC time or date alone (00:00 UTC)
        /// (default: the fit epoch, a whole TDB day near the middle of the
        /// arc).
        #[arg(long)]
        epoch: Option<String>,
        /// The object to fit when the files hold several (a designation
        /// as written, or the internal id `perihelix ingest` shows).
        #[arg(long)]
        object: Option<String>,
        /// Skip the original and future 1/a (two long integrations per
        /// model).
        #[arg(long)]
        no_distant: bool,
    },
    /// Predict positions and their uncertainty for a station and time grid:
    /// the orbit is fitted from the files first, as `fit` does.
    Predict {
        /// Observation files (.psv, .xml, .jsonl).
        #[arg(required = true)]
        files: Vec<PathBuf>,
        /// The observing station's code (from the station list).
        #[arg(long)]
        station: String,
        /// First time: ISO 8601 UTC (2026-09-01T06:00:00Z), or a date
        /// alone (2026-09-01, meaning 00:00 UTC).
        #[arg(long)]
        from: String,
        /// Last time, in the same forms as --from.
        #[arg(long)]
        to: String,
        /// Step in days.
        #[arg(long, allow_negative_numbers = true)]
        step: f64,
        /// Configuration file for the fit settings and the station list
        /// (see config/example.toml; default: the embedded defaults).
        #[arg(long, short)]
        config: Option<PathBuf>,
        /// Station list file, replacing the configuration's (default: the
        /// configuration's, else the built-in config/stations.toml).
        #[arg(long)]
        stations: Option<PathBuf>,
        /// The object when the files hold several.
        #[arg(long)]
        object: Option<String>,
        /// The ladder model to predict from, by its name in the fit report
        /// (e.g. "gravity", "A1 water-ice"; checked before the fit);
        /// default the recommended one.
        #[arg(long)]
        model: Option<String>,
        /// Make the uncertainty ellipse from this many samples of the
        /// covariance, each propagated through the full force model
        /// (default: the linear covariance map).
        #[arg(long, value_name = "SAMPLES")]
        monte_carlo: Option<usize>,
        /// Seed of the Monte Carlo samples.
        #[arg(long, default_value_t = 1)]
        seed: u64,
        /// Print one JSON document instead of the table.
        #[arg(long)]
        json: bool,
    },
    /// Rank the nights and stations where one night's observations would
    /// best tell the recommended model from its rivals (fitted
    /// from the files first, as `fit` does).
    Plan {
        /// Observation files (.psv, .xml, .jsonl).
        #[arg(required = true)]
        files: Vec<PathBuf>,
        /// First night's start: ISO 8601 UTC, or a date alone (00:00 UTC).
        #[arg(long)]
        from: String,
        /// Last night's end, in the same forms as --from.
        #[arg(long)]
        to: String,
        /// Stations to plan for (repeat the option; default: the stations
        /// that observed the object).
        #[arg(long = "station", value_name = "CODE")]
        stations_wanted: Vec<String>,
        /// One rival model to tell the recommended one from, by its name in
        /// the fit report (default: every other converged model, each
        /// weighed by how well it fits, exp(-dBIC/2)).
        #[arg(long)]
        rival: Option<String>,
        /// Configuration file for the fit settings and the station list
        /// (see config/example.toml; default: the embedded defaults).
        #[arg(long, short)]
        config: Option<PathBuf>,
        /// Station list file, replacing the configuration's (default: the
        /// configuration's, else the built-in config/stations.toml).
        #[arg(long)]
        stations: Option<PathBuf>,
        /// The object when the files hold several.
        #[arg(long)]
        object: Option<String>,
        /// Print one JSON document instead of the table.
        #[arg(long)]
        json: bool,
    },
    /// Read, validate and summarise observation files without a daemon.
    Ingest {
        /// Observation files (.psv, .xml, .jsonl).
        #[arg(required = true)]
        files: Vec<PathBuf>,
        /// Configuration file for the station list and designation links
        /// (see config/example.toml; default: the embedded defaults).
        #[arg(long, short)]
        config: Option<PathBuf>,
        /// Station list file, replacing the configuration's (default: the
        /// configuration's, else the built-in config/stations.toml).
        #[arg(long)]
        stations: Option<PathBuf>,
        /// Print the summary as one JSON document, every rejected line in
        /// it (the text groups lines rejected for the same reason).
        #[arg(long)]
        json: bool,
    },
    /// Rebuild the store's index from its journal (after the index was
    /// lost or damaged); the old index is moved aside, never deleted.
    Rebuild {
        /// The daemon's configuration file, which names the store.
        #[arg(long, short, default_value = "/etc/perihelix/config.toml")]
        config: PathBuf,
    },
    /// Write the store (or one object of it) as JSON lines: a header, every
    /// journal entry (observations, solutions with their alerts,
    /// overrides, delivery attempts, acknowledgements) and an end line with
    /// a digest. Safe while the daemon runs; see docs/backup.md.
    Export {
        /// The daemon's configuration file, which names the store.
        #[arg(long, short, default_value = "/etc/perihelix/config.toml")]
        config: PathBuf,
        /// Only this object (an internal id or a designation).
        #[arg(long)]
        object: Option<String>,
        /// Write to this file (whole or not at all) instead of standard
        /// output.
        #[arg(long, short)]
        output: Option<PathBuf>,
    },
    /// Read an export into an empty store (refused if the store has
    /// anything) and build its index; the daemon then starts with that
    /// history.
    Import {
        /// The export file, or - for standard input.
        file: PathBuf,
        /// The configuration file naming the (empty) store to fill.
        #[arg(long, short, default_value = "/etc/perihelix/config.toml")]
        config: PathBuf,
        /// Only check the file, every line as an import would; no store
        /// is touched.
        #[arg(long)]
        check: bool,
    },
    /// Show the history of solutions of an object: from the running
    /// daemon, or from the store when no daemon answers.
    History {
        /// Object designation or internal id.
        object: String,
        /// The daemon's configuration file (its API address and store).
        #[arg(long, short, default_value = "/etc/perihelix/config.toml")]
        config: PathBuf,
        /// Print one JSON document instead of the table.
        #[arg(long)]
        json: bool,
    },
    /// Run the whole job on embedded defaults with an invented visitor:
    /// the real daemon is started in a directory of its own and fed the
    /// nights one batch at a time; one line per solution, then the
    /// history, the alert e-mails and the page's address.
    Demo {
        /// Where to put the demo's data (default: a new temporary directory).
        #[arg(long)]
        dir: Option<PathBuf>,
        /// Leave the daemon and its page running at the end (Ctrl-C stops it).
        #[arg(long)]
        keep_serving: bool,
        /// Fewer, larger batches of nights (fewer solutions, quicker).
        #[arg(long)]
        quick: bool,
        /// Seed of the scenario's weather, cadence and noise.
        #[arg(long, default_value_t = 20_270_620)]
        seed: u64,
    },
    /// Send one test message on every configured alert channel (e-mail,
    /// webhook) and report each result.
    AlertTest {
        /// The daemon's configuration file, which names the channels.
        #[arg(long, short, default_value = "/etc/perihelix/config.toml")]
        config: PathBuf,
    },
    /// Check a configuration file and report every problem at once.
    CheckConfig {
        /// The configuration file.
        file: PathBuf,
    },
}

fn main() -> ExitCode {
    let cli = Cli::parse();
    match run(cli) {
        Ok(code) => code,
        Err(e) => {
            eprintln!("error: {e:#}");
            ExitCode::FAILURE
        }
    }
}

fn run(cli: Cli) -> Result<ExitCode> {
    match cli.command {
        Command::CheckConfig { file } => check_config(&file),
        Command::Ingest {
            files,
            config,
            stations,
            json,
        } => ingest(&files, config.as_deref(), stations.as_deref(), json),
        Command::Serve { config } => serve(&config),
        Command::AlertTest { config } => alert_test(&config),
        Command::Rebuild { config } => rebuild(&config),
        Command::Export {
            config,
            object,
            output,
        } => export(&config, object.as_deref(), output.as_deref()),
        Command::Import {
            file,
            config,
            check,
        } => import(&file, &config, check),
        Command::History {
            object,
            config,
            json,
        } => history(&object, &config, json),
        Command::Fit {
            files,
            config,
            stations,
            json,
            epoch,
            object,
            no_distant,
        } => fit(
            &files,
            config.as_deref(),
            stations.as_deref(),
            &FitOptions {
                json,
                epoch,
                object,
                distant: !no_distant,
            },
        ),
        Command::Predict {
            files,
            station,
            from,
            to,
            step,
            config,
            stations,
            object,
            model,
            monte_carlo,
            seed,
            json,
        } => predict(
            &files,
            config.as_deref(),
            stations.as_deref(),
            &PredictOptions {
                station,
                from,
                to,
                step_days: step,
                object,
                model,
                method: match monte_carlo {
                    None => EllipseMethod::Linear,
                    Some(samples) => EllipseMethod::MonteCarlo { samples, seed },
                },
                json,
            },
        ),
        Command::Plan {
            files,
            from,
            to,
            stations_wanted,
            rival,
            config,
            stations,
            object,
            json,
        } => plan(
            &files,
            config.as_deref(),
            stations.as_deref(),
            &PlanOptions {
                from,
                to,
                stations: stations_wanted,
                rival,
                object,
                json,
            },
        ),
        Command::Demo {
            dir,
            keep_serving,
            quick,
            seed,
        } => demo(&perihelix::demo::DemoOptions {
            dir,
            keep_serving,
            quick,
            seed,
        }),
    }
}

/// Logging for the daemon: RUST_LOG when set, else the configured filter;
/// plain lines (journald adds its own time stamps) or JSON lines.
fn init_logging(cfg: &Config) {
    use tracing_subscriber::EnvFilter;
    let filter = EnvFilter::try_from_default_env()
        .or_else(|_| EnvFilter::try_new(&cfg.logging.level))
        .unwrap_or_else(|_| EnvFilter::new("info"));
    let builder = tracing_subscriber::fmt()
        .with_env_filter(filter)
        .with_ansi(std::io::IsTerminal::is_terminal(&std::io::stderr()))
        .with_writer(std::io::stderr);
    if cfg.logging.json {
        builder.json().init();
    } else {
        builder.init();
    }
}

fn runtime(cfg: &Config) -> Result<tokio::runtime::Runtime> {
    Ok(tokio::runtime::Builder::new_multi_thread()
        .max_blocking_threads(perihelix::daemon::blocking_threads(cfg))
        .enable_all()
        .build()?)
}

fn serve(config: &Path) -> Result<ExitCode> {
    let cfg = Config::load(config)?;
    init_logging(&cfg);
    runtime(&cfg)?.block_on(perihelix::daemon::serve(cfg))?;
    Ok(ExitCode::SUCCESS)
}

fn alert_test(config: &Path) -> Result<ExitCode> {
    let cfg = Config::load(config)?;
    init_logging(&cfg);
    let results = runtime(&cfg)?
        .block_on(perihelix::alerts::outbox::test_every_channel(&cfg))
        .map_err(anyhow::Error::msg)?;
    let mut failed = 0;
    for r in &results {
        match &r.result {
            Ok(()) => println!("{:<8} {}: sent", r.channel.name(), r.destination),
            Err(e) => {
                failed += 1;
                println!("{:<8} {}: FAILED: {e}", r.channel.name(), r.destination);
            }
        }
    }
    Ok(if failed == 0 {
        ExitCode::SUCCESS
    } else {
        ExitCode::FAILURE
    })
}

fn rebuild(config: &Path) -> Result<ExitCode> {
    let cfg = Config::load(config)?;
    init_logging(&cfg);
    let (store, entries) = perihelix::store::SledStore::rebuild(&cfg.directories.database)?;
    let (objects, observations, solutions) = store.counts();
    println!(
        "rebuilt the index from {entries} journal entries: {objects} objects, {observations} observations, {solutions} solutions"
    );
    Ok(ExitCode::SUCCESS)
}

fn demo(options: &perihelix::demo::DemoOptions) -> Result<ExitCode> {
    perihelix::demo::run(options, &mut std::io::stdout())?;
    Ok(ExitCode::SUCCESS)
}

fn export(config: &Path, object: Option<&str>, output: Option<&Path>) -> Result<ExitCode> {
    let cfg = Config::load(config)?;
    let database = &cfg.directories.database;
    let summary = match output {
        Some(path) => perihelix::transfer::export_to_file(database, object, path)?,
        None => perihelix::transfer::export(
            database,
            object,
            &mut std::io::stdout().lock(),
            "standard output",
        )?,
    };
    let what = match &summary.exported {
        perihelix::transfer::Exported::Store => "the store".to_string(),
        perihelix::transfer::Exported::Object { object, .. } => format!("object {object}"),
    };
    eprintln!(
        "exported {what}: {} journal entries ({}) from {}",
        summary.entries,
        summary.counts,
        summary.journal.display()
    );
    if summary.left_out_last_line {
        eprintln!("an entry still being written was left out: the next export has it");
    }
    Ok(ExitCode::SUCCESS)
}

fn import(file: &Path, config: &Path, check: bool) -> Result<ExitCode> {
    let name = file.display().to_string();
    let mut input: Box<dyn std::io::BufRead> = if name == "-" {
        Box::new(std::io::stdin().lock())
    } else {
        let f = std::fs::File::open(file).with_context(|| name.clone())?;
        Box::new(std::io::BufReader::with_capacity(1 << 16, f))
    };
    let source = if name == "-" { "standard input" } else { &name };
    if check {
        let checked = perihelix::transfer::check(&mut input, source)?;
        println!(
            "{source}: a whole export of {} journal entries ({})",
            checked.entries, checked.counts
        );
        return Ok(ExitCode::SUCCESS);
    }
    let cfg = Config::load(config)?;
    let s = perihelix::transfer::import(&cfg.directories.database, &mut input, source)?;
    println!(
        "imported {} journal entries ({}) into {}: {} objects, {} observations, {} solutions",
        s.checked.entries,
        s.checked.counts,
        s.journal.display(),
        s.objects,
        s.observations,
        s.solutions
    );
    if s.checked.header.software_version != perihelix::transfer::SOFTWARE_VERSION {
        eprintln!(
            "note: written by perihelix {}, imported by {}: an export of this store differs \
             from the file in its header line",
            s.checked.header.software_version,
            perihelix::transfer::SOFTWARE_VERSION
        );
    }
    Ok(ExitCode::SUCCESS)
}

fn history(object: &str, config: &Path, json: bool) -> Result<ExitCode> {
    let cfg = Config::load(config)?;
    let h = runtime(&cfg)?.block_on(perihelix::daemon::history::history(&cfg, object))?;
    if json {
        println!(
            "{}",
            serde_json::to_string_pretty(&serde_json::json!({
                "object": h.object,
                "solutions": h.solutions,
                "source": match h.source {
                    perihelix::daemon::history::HistorySource::Daemon => "daemon",
                    perihelix::daemon::history::HistorySource::Store => "store",
                },
            }))?
        );
    } else {
        print!("{}", perihelix::daemon::history::table(&h));
    }
    Ok(ExitCode::SUCCESS)
}

/// The configuration (if given, else the embedded defaults) with its
/// station list replaced by `stations` (if given), or by the shipped station
/// list, compiled in, when neither names one: the batch commands then work
/// the same from any working directory.
fn configuration(config: Option<&Path>, stations: Option<&Path>) -> Result<Config> {
    let (cfg, explicit) = match config {
        Some(path) => (Config::load(path)?, true),
        None => (Config::embedded_default(Path::new(".")), false),
    };
    let list = match (stations, explicit) {
        (Some(path), _) => station_file(path)?,
        (None, true) => cfg.stations.clone(),
        (None, false) => shipped_stations()
            .map_err(|problems| ConfigError { problems })
            .context("the built-in station list")?,
    };
    Ok(Config {
        stations: list,
        ..cfg
    })
}

/// The station list named by `--stations`; its errors say which option
/// named the path, so the user knows what to change.
fn station_file(path: &Path) -> Result<StationList> {
    let text = std::fs::read_to_string(path).map_err(|e| {
        anyhow::anyhow!(
            "--stations {}: cannot read the station list: {e}",
            path.display()
        )
    })?;
    parse_stations(path, &text)
        .map_err(|problems| ConfigError { problems })
        .with_context(|| format!("--stations {}", path.display()))
}

/// Stations and links from [`configuration`].
fn stations_and_links(
    config: Option<&Path>,
    stations: Option<&Path>,
) -> Result<(StationList, Vec<Vec<DesignationKey>>)> {
    let cfg = configuration(config, stations)?;
    Ok((cfg.stations, cfg.links))
}

fn ingest(
    files: &[PathBuf],
    config: Option<&Path>,
    stations: Option<&Path>,
    json: bool,
) -> Result<ExitCode> {
    let (stations, links) = stations_and_links(config, stations)?;
    let outcome = perihelix::ingest::ingest_files(files, &stations, &links);
    if json {
        println!("{}", serde_json::to_string_pretty(&outcome.summary)?);
    } else {
        print!("{}", outcome.summary);
    }
    // Rejected lines are reported, not fatal; a run that kept nothing is.
    Ok(if outcome.summary.observations_kept == 0 {
        ExitCode::FAILURE
    } else {
        ExitCode::SUCCESS
    })
}

fn check_config(file: &Path) -> Result<ExitCode> {
    match Config::load(file) {
        Ok(cfg) => {
            println!(
                "{}: valid ({} stations, ephemeris {}, {} ladder rungs x {} laws)",
                file.display(),
                cfg.stations.len(),
                match &cfg.ephemeris {
                    perihelix::config::EphemerisChoice::Embedded => "embedded".to_string(),
                    perihelix::config::EphemerisChoice::Spk { path } =>
                        format!("from {}", path.display()),
                },
                cfg.fit.ladder.len(),
                cfg.fit.laws.len()
            );
            Ok(ExitCode::SUCCESS)
        }
        Err(e) => {
            eprintln!("{e}");
            Ok(ExitCode::FAILURE)
        }
    }
}

/// How `fit` runs and reports, beyond the files and configuration.
struct FitOptions {
    json: bool,
    epoch: Option<String>,
    object: Option<String>,
    distant: bool,
}

fn fit(
    files: &[PathBuf],
    config: Option<&Path>,
    stations: Option<&Path>,
    options: &FitOptions,
) -> Result<ExitCode> {
    let cfg = configuration(config, stations)?;
    let (name, object) = read_object(files, &cfg, options.object.as_deref())?;
    let epoch = options
        .epoch
        .as_deref()
        .map(|text| parse_epoch(text, &cfg))
        .transpose()?;
    let request = perihelix::solve::SolveRequest {
        elements_epoch: epoch,
        distant: options.distant,
        ..Default::default()
    };
    let solved = perihelix::solve::solve_records(&cfg, &name, &object.observations, &request)?;
    for r in &solved.refused {
        eprintln!("not used: {r}");
    }
    let doc = perihelix::solve::document::SolutionDocument::new(&solved);
    if options.json {
        println!("{}", serde_json::to_string_pretty(&doc)?);
    } else {
        print!("{}", perihelix::solve::report::text(&doc));
    }
    Ok(ExitCode::SUCCESS)
}

/// `--model`, checked against the configured ladder's model names before
/// the fit, which takes seconds; whether the model converged is known only
/// after it.
fn check_model(cfg: &Config, model: Option<&str>) -> Result<()> {
    let Some(wanted) = model else {
        return Ok(());
    };
    let names = perihelix::solve::settings::ladder_model_names(&cfg.fit);
    anyhow::ensure!(
        names.iter().any(|n| n == wanted),
        "--model {wanted:?}: no such model; the ladder has: {}",
        names.join(", ")
    );
    Ok(())
}

/// How `predict` runs and reports, beyond the files and configuration.
struct PredictOptions {
    station: String,
    from: String,
    to: String,
    step_days: f64,
    object: Option<String>,
    model: Option<String>,
    method: EllipseMethod,
    json: bool,
}

fn predict(
    files: &[PathBuf],
    config: Option<&Path>,
    stations: Option<&Path>,
    options: &PredictOptions,
) -> Result<ExitCode> {
    let cfg = configuration(config, stations)?;
    // Everything the request itself can get wrong is checked before the
    // fit, which takes seconds.
    if let EllipseMethod::MonteCarlo { samples, .. } = options.method {
        anyhow::ensure!(
            samples >= MIN_SAMPLES,
            "--monte-carlo {samples}: at least {MIN_SAMPLES} samples are needed for a sample covariance"
        );
    }
    check_model(&cfg, options.model.as_deref())?;
    let observer = perihelix::solve::input::station_position(&cfg.stations, &options.station)
        .map_err(|e| {
            let known: Vec<&str> = cfg.stations.iter().map(|s| s.code.as_str()).collect();
            anyhow::anyhow!(
                "--station {}: {e} (the list has: {})",
                options.station,
                if known.is_empty() {
                    "no stations".to_string()
                } else {
                    known.join(", ")
                }
            )
        })?;
    let parse = |option: &str, text: &str| {
        UtcTime::parse_iso8601_or_date(text).map_err(|e| anyhow::anyhow!("{option} {text}: {e}"))
    };
    let from = parse("--from", &options.from)?;
    let to = parse("--to", &options.to)?;
    let scales = perihelix::solve::time_scales(&cfg)?;
    let times = utc_grid(&from, &to, options.step_days, &scales).map_err(|e| {
        let option = match e {
            GridError::EndBeforeStart { .. } => "--to",
            GridError::Step { .. } => "--step",
            GridError::TooManyPoints { .. } => "--from/--to/--step",
            GridError::Time(_) => "--from/--to",
        };
        anyhow::anyhow!("{option}: {e}")
    })?;

    let (name, object) = read_object(files, &cfg, options.object.as_deref())?;
    let solved = perihelix::solve::solve_records(
        &cfg,
        &name,
        &object.observations,
        &perihelix::solve::SolveRequest::default(),
    )?;
    for r in &solved.refused {
        eprintln!("not used: {r}");
    }
    let ladder = &solved.solution.ladder;
    let chosen = match options.model.as_deref() {
        None => ladder
            .recommended_model()
            .ok_or_else(|| anyhow::anyhow!("no model of the ladder converged"))?,
        Some(wanted) => ladder
            .models
            .iter()
            .find(|m| m.name() == wanted)
            .ok_or_else(|| {
                let names: Vec<String> = ladder.models.iter().map(|m| m.name()).collect();
                anyhow::anyhow!(
                    "--model {wanted:?}: no such model; the ladder has: {}",
                    names.join(", ")
                )
            })?,
    };
    if chosen.converged_fit().is_none() {
        anyhow::bail!("--model {:?}: that model did not converge", chosen.name());
    }
    let candidates = ladder.converged_models();
    let points: Vec<PredictionPoint> = times
        .into_iter()
        .map(|time| PredictionPoint { time, observer })
        .collect();
    // The fit's own integrator settings carry the orbit on.
    let fit_settings = perihelix::solve::settings::solve_settings(&cfg.fit, &cfg.stations)?;
    let settings = PredictSettings {
        method: options.method,
        // Magnitudes from the brightness law the observations support.
        magnitude: solved.brightness.as_ref().and_then(|b| b.law),
        ..fit_settings.predict_settings()
    };
    let predicted = predict_with_average(
        solved.ephemeris.as_ref(),
        &candidates,
        &chosen.name(),
        &points,
        &settings,
    )?;
    let doc = PredictionDocument::new(
        &name,
        &predicted,
        options.method,
        &solved.ephemeris.describe(),
        &options.station,
    );
    if options.json {
        println!("{}", serde_json::to_string_pretty(&doc)?);
    } else {
        print!("{}", doc.text());
    }
    Ok(ExitCode::SUCCESS)
}

/// How `plan` runs and reports, beyond the files and configuration.
struct PlanOptions {
    from: String,
    to: String,
    stations: Vec<String>,
    rival: Option<String>,
    object: Option<String>,
    json: bool,
}

fn plan(
    files: &[PathBuf],
    config: Option<&Path>,
    stations: Option<&Path>,
    options: &PlanOptions,
) -> Result<ExitCode> {
    let cfg = configuration(config, stations)?;
    // Everything the request can get wrong is checked before the fit.
    if let Some(rival) = options.rival.as_deref() {
        let names = perihelix::solve::settings::ladder_model_names(&cfg.fit);
        anyhow::ensure!(
            names.iter().any(|n| n == rival),
            "--rival {rival:?}: no such model; the ladder has: {}",
            names.join(", ")
        );
    }
    let parse = |option: &str, text: &str| {
        UtcTime::parse_iso8601_or_date(text).map_err(|e| anyhow::anyhow!("{option} {text}: {e}"))
    };
    let from = parse("--from", &options.from)?;
    let to = parse("--to", &options.to)?;
    for code in &options.stations {
        perihelix::solve::input::station_position(&cfg.stations, code)
            .map_err(|e| anyhow::anyhow!("--station {code}: {e}"))?;
    }
    let (name, object) = read_object(files, &cfg, options.object.as_deref())?;
    let context = perihelix::solve::SolveContext::new(&cfg)?;
    let solved = perihelix::solve::solve_records_in(
        &context,
        &cfg,
        &name,
        &object.observations,
        &perihelix::solve::SolveRequest::default(),
    )?;
    // The plan reads the solution as the daemon stores it: one path.
    let document =
        serde_json::to_value(perihelix::solve::document::SolutionDocument::new(&solved))?;
    let plan = perihelix::solve::plan::plan_stored(
        context.ephemeris.as_ref(),
        &context.scales,
        &context.settings,
        &cfg.stations,
        Some(&document),
        &options.stations,
        options.rival.as_deref(),
        &from,
        &to,
    )?;
    if options.json {
        let mut value = serde_json::to_value(&plan)?;
        if let Some(o) = value.as_object_mut() {
            o.insert("object".into(), name.into());
        }
        println!("{}", serde_json::to_string_pretty(&value)?);
    } else {
        println!("{name}");
        print!("{}", plan.text());
    }
    Ok(ExitCode::SUCCESS)
}

/// Reads the files (reporting rejected lines on stderr, one line per
/// reason, never fatal) and picks the object to fit, with the name it is
/// reported under.
fn read_object(
    files: &[PathBuf],
    cfg: &Config,
    wanted: Option<&str>,
) -> Result<(String, ObjectObservations)> {
    let outcome = perihelix::ingest::ingest_files(files, &cfg.stations, &cfg.links);
    let rejected = &outcome.summary.rejected;
    for group in perihelix::ingest::group_rejections(rejected, perihelix::ingest::GROUP_LINES_SHOWN)
    {
        eprintln!("rejected: {group}");
    }
    let object = pick_object(&outcome.objects, wanted)?.clone();
    let name = perihelix::ingest::DesignationKey::best_name(&object.designations)
        .unwrap_or_else(|| object.id.to_string());
    Ok((name, object))
}

/// The one object to fit: the only one in the files, or the one named.
fn pick_object<'a>(
    objects: &'a [ObjectObservations],
    wanted: Option<&str>,
) -> Result<&'a ObjectObservations> {
    let listing = || {
        objects
            .iter()
            .map(|o| {
                let names: Vec<String> = o.designations.iter().map(ToString::to_string).collect();
                format!("{} ({})", o.id, names.join(", "))
            })
            .collect::<Vec<_>>()
            .join("; ")
    };
    match wanted {
        None => match objects {
            [] => anyhow::bail!("the files hold no valid observations"),
            [one] => Ok(one),
            _ => anyhow::bail!(
                "the files hold {} objects; choose one with --object: {}",
                objects.len(),
                listing()
            ),
        },
        Some(w) => objects
            .iter()
            .find(|o| o.id.to_string() == w || o.designations.iter().any(|d| d.to_string() == w))
            .ok_or_else(|| {
                anyhow::anyhow!("no object {w:?} in the files; they hold: {}", listing())
            }),
    }
}

/// `--epoch`: a Julian date on the TDB scale, or an ISO 8601 UTC time or
/// date (00:00 UTC).
fn parse_epoch(text: &str, cfg: &Config) -> Result<Epoch> {
    if let Ok(jd) = text.trim().parse::<f64>() {
        anyhow::ensure!(
            jd.is_finite() && (2_000_000.0..3_000_000.0).contains(&jd),
            "--epoch {text}: a Julian date between 2000000 and 3000000 was expected"
        );
        // Two parts keep a fractional day exact where it can be.
        let day = jd.floor();
        return Ok(Epoch::from_tdb_jd(day, jd - day));
    }
    let utc = UtcTime::parse_iso8601_or_date(text)
        .map_err(|e| anyhow::anyhow!("--epoch {text}: neither a Julian date nor {e}"))?;
    Ok(perihelix::solve::time_scales(cfg)?
        .resolve_utc(&utc, None)?
        .tdb())
}
