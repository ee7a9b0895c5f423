//! The `perihelix` command line: a thin layer over the library.

use std::path::PathBuf;
use std::process::ExitCode;

use anyhow::Result;
use clap::{Parser, Subcommand};

use perihelix::config::Config;

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
        Command::Ingest { .. } => not_yet("ingest", "the observation readers"),
        Command::Serve { .. } => not_yet("serve", "the daemon"),
        Command::Fit { .. } => not_yet("fit", "orbit determination"),
        Command::Predict { .. } => not_yet("predict", "orbit determination"),
        Command::History { .. } => not_yet("history", "the solution store"),
        Command::Demo { .. } => not_yet("demo", "the daemon"),
    }
}

fn check_config(file: &std::path::Path) -> Result<ExitCode> {
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
