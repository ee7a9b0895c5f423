//! The `perihelix` command line: a thin layer over the library.

use std::path::{Path, PathBuf};
use std::process::ExitCode;

use anyhow::Result;
use clap::{Parser, Subcommand};

use perihelix::config::{load_stations, Config, ConfigError, StationList};
use perihelix::ingest::DesignationKey;

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
        #[arg(long, short)]
        config: Option<PathBuf>,
        /// Station list, overriding the configuration's.
        #[arg(long)]
        stations: Option<PathBuf>,
        /// Print one JSON document instead of the report.
        #[arg(long)]
        json: bool,
    },
    /// Predict positions and their uncertainty for a station and time grid.
    Predict {
        #[arg(required = true)]
        files: Vec<PathBuf>,
        #[arg(long)]
        station: String,
        /// First time (ISO 8601 UTC).
        #[arg(long)]
        from: String,
        /// Last time (ISO 8601 UTC).
        #[arg(long)]
        to: String,
        /// Step in days.
        #[arg(long)]
        step: f64,
        #[arg(long, short)]
        config: Option<PathBuf>,
        #[arg(long)]
        json: bool,
    },
    /// Read, validate and summarise observation files without a daemon.
    Ingest {
        #[arg(required = true)]
        files: Vec<PathBuf>,
        #[arg(long, short)]
        config: Option<PathBuf>,
        /// Station list, overriding the configuration's (default:
        /// config/stations.toml when no configuration is given).
        #[arg(long)]
        stations: Option<PathBuf>,
        #[arg(long)]
        json: bool,
    },
    /// Show the history of solutions of an object from the store.
    History {
        /// Object designation or internal id.
        object: String,
        #[arg(long, short, default_value = "/etc/perihelix/config.toml")]
        config: PathBuf,
        #[arg(long)]
        json: bool,
    },
    /// Run the whole job on embedded defaults with an invented scenario.
    Demo {
        /// Where to put the demo's data (default: a new temporary directory).
        #[arg(long)]
        dir: Option<PathBuf>,
    },
    /// Check a configuration file and report every problem at once.
    CheckConfig {
        /// The configuration file.
        file: PathBuf,
    },
}

/// Exit code of a command that is not built yet: distinct from failures.
const NOT_YET: u8 = 3;

fn not_yet(command: &str, what: &str) -> Result<ExitCode> {
    eprintln!("perihelix {command}: not available yet ({what} has not landed).");
    Ok(ExitCode::from(NOT_YET))
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
        Command::Serve { .. } => not_yet("serve", "the daemon"),
        Command::Fit { .. } => not_yet("fit", "orbit determination"),
        Command::Predict { .. } => not_yet("predict", "orbit determination"),
        Command::History { .. } => not_yet("history", "the solution store"),
        Command::Demo { .. } => not_yet("demo", "the daemon"),
    }
}

/// Stations and links from the configuration (if given), the station list
/// overriding it (if given), else the shipped station list.
fn stations_and_links(
    config: Option<&Path>,
    stations: Option<&Path>,
) -> Result<(StationList, Vec<Vec<DesignationKey>>)> {
    let cfg = config.map(Config::load).transpose()?;
    let links = cfg.as_ref().map(|c| c.links.clone()).unwrap_or_default();
    let list = match (stations, cfg) {
        (Some(path), _) => load_stations(path).map_err(|problems| ConfigError { problems })?,
        (None, Some(c)) => c.stations,
        (None, None) => {
            let shipped = Path::new("config/stations.toml");
            if shipped.is_file() {
                load_stations(shipped).map_err(|problems| ConfigError { problems })?
            } else {
                StationList::default()
            }
        }
    };
    Ok((list, links))
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
