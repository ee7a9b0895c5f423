//! deploy/ as an operator gets it (issue 14, point 3): install.sh staged
//! into a temporary root (twice: an edited configuration is kept), the
//! example configuration writing only where the unit lets it, and the
//! installed unit checked by systemd's own tools: `systemd-analyze verify`
//! finds nothing to say about it and `systemd-analyze security
//! --offline=true` puts its exposure at 2.0 or lower.
//!
//! The systemd checks need Debian's `systemd` package (systemd-analyze,
//! systemd-sysusers, systemd-tmpfiles), not systemd running: they read unit
//! files under `--root`, so they work in a container too. Where
//! systemd-analyze is missing they say SKIPPED and how to install it.
//! Nothing here touches the real /etc or /usr.

use std::collections::BTreeSet;
use std::io::Read;
use std::path::{Path, PathBuf};
use std::process::{Command, Stdio};
use std::time::{Duration, Instant};

/// Issue 14 asks for an overall exposure of 2.0 or lower.
const EXPOSURE_LIMIT: f64 = 2.0;

/// The items `systemd-analyze security` may still mark open (✗), each
/// left open on purpose; docs/operations.md ("Hardening") gives the same
/// list to the operator. Anything else open fails the test: set it in
/// deploy/perihelix.service, or justify it here and there.
const LEFT_OPEN: &[(&str, &str)] = &[
    (
        "PrivateNetwork=",
        "alerts go to an SMTP relay and webhooks; the API listens on TCP",
    ),
    (
        "RestrictAddressFamilies=~AF_(INET|INET6)",
        "the same: SMTP, webhooks and the API are TCP over IPv4 or IPv6",
    ),
    (
        "RestrictAddressFamilies=~AF_UNIX",
        "NOTIFY_SOCKET (READY=1, the watchdog) and the resolver (nscd, nss-resolve)",
    ),
    (
        "IPAddressDeny=",
        "which relay and webhook hosts to reach is the operator's choice; a drop-in can pin them",
    ),
    (
        "RootDirectory=/RootImage=",
        "the binary is installed on the host; ProtectSystem=strict makes the host read-only",
    ),
    (
        "DeviceAllow=",
        "ProtectClock= adds read access to the RTC (char-rtc:r); PrivateDevices= still hides it",
    ),
    (
        "UMask=",
        "0027: the perihelix group (analysts) reads what the service writes; nothing world-readable",
    ),
];

const UNIT: &str = "perihelix.service";
/// Every external command here finishes in well under a second; this only
/// bounds a hang.
const COMMAND_LIMIT: Duration = Duration::from_secs(60);

fn repo() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
}

struct Output {
    code: Option<i32>,
    stdout: String,
    stderr: String,
}

impl Output {
    fn both(&self) -> String {
        format!("{}{}", self.stdout, self.stderr)
    }
}

/// Runs a command to its end, or kills it (that one process) past `limit`.
fn run(command: &mut Command, limit: Duration) -> Output {
    let described = format!("{command:?}");
    let mut child = command
        .stdin(Stdio::null())
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .unwrap_or_else(|e| panic!("cannot start {described}: {e}"));
    let mut out = child.stdout.take().expect("piped stdout");
    let mut err = child.stderr.take().expect("piped stderr");
    let out_reader = std::thread::spawn(move || {
        let mut s = String::new();
        let _ = out.read_to_string(&mut s);
        s
    });
    let err_reader = std::thread::spawn(move || {
        let mut s = String::new();
        let _ = err.read_to_string(&mut s);
        s
    });
    let deadline = Instant::now() + limit;
    let status = loop {
        if let Some(status) = child.try_wait().expect("waiting for a child") {
            break status;
        }
        if Instant::now() >= deadline {
            let _ = child.kill();
            let _ = child.wait();
            panic!("{described} did not finish within {limit:?}");
        }
        std::thread::sleep(Duration::from_millis(10));
    };
    Output {
        code: status.code(),
        stdout: out_reader.join().expect("stdout reader"),
        stderr: err_reader.join().expect("stderr reader"),
    }
}

fn on_path(name: &str) -> Option<PathBuf> {
    let path = std::env::var_os("PATH")?;
    std::env::split_paths(&path)
        .map(|dir| dir.join(name))
        .find(|candidate| candidate.is_file())
}

/// systemd-analyze, or None after saying SKIPPED as issue 14 asks.
fn systemd_analyze() -> Option<PathBuf> {
    let found = on_path("systemd-analyze");
    if found.is_none() {
        println!("SKIPPED: systemd-analyze not found; run bash tests/reference/setup-systemd.sh");
    }
    found
}

fn install(root: &Path) -> Output {
    let out = run(
        Command::new("bash")
            .arg(repo().join("deploy/install.sh"))
            .arg("--root")
            .arg(root)
            .arg("--binary")
            .arg(env!("CARGO_BIN_EXE_perihelix"))
            .env_remove("DESTDIR"),
        COMMAND_LIMIT,
    );
    println!("--- install.sh --root {}\n{}", root.display(), out.both());
    assert_eq!(out.code, Some(0), "install.sh failed:\n{}", out.both());
    out
}

fn read(path: &Path) -> String {
    std::fs::read_to_string(path).unwrap_or_else(|e| panic!("{}: {e}", path.display()))
}

/// The files install.sh puts in place, and the repository file each must
/// equal.
const INSTALLED: &[(&str, &str)] = &[
    (
        "usr/lib/systemd/system/perihelix.service",
        "deploy/perihelix.service",
    ),
    (
        "usr/lib/sysusers.d/perihelix.conf",
        "deploy/perihelix.sysusers",
    ),
    (
        "usr/lib/tmpfiles.d/perihelix.conf",
        "deploy/perihelix.tmpfiles",
    ),
    ("usr/share/doc/perihelix/README.md", "README.md"),
    (
        "usr/share/doc/perihelix/operations.md",
        "docs/operations.md",
    ),
    (
        "usr/share/doc/perihelix/example.toml",
        "config/example.toml",
    ),
];

#[test]
fn install_script_stages_everything_and_never_overwrites_the_configuration() {
    let root = tempfile::tempdir().expect("a temporary root");
    let root = root.path();

    let first = install(root);
    let binary = root.join("usr/bin/perihelix");
    assert_eq!(
        std::fs::read(&binary).expect("the installed binary"),
        std::fs::read(env!("CARGO_BIN_EXE_perihelix")).expect("the built binary"),
        "usr/bin/perihelix is not the binary given with --binary"
    );
    for (installed, source) in INSTALLED {
        assert_eq!(
            read(&root.join(installed)),
            read(&repo().join(source)),
            "{installed} is not a copy of {source}"
        );
    }
    let config = root.join("etc/perihelix/config.toml");
    let stations = root.join("etc/perihelix/stations.toml");
    assert_eq!(read(&config), read(&repo().join("config/example.toml")));
    assert_eq!(read(&stations), read(&repo().join("config/stations.toml")));
    assert!(
        first
            .stdout
            .contains(&format!("installed {}", config.display())),
        "install.sh does not say it installed the configuration:\n{}",
        first.stdout
    );
    // The staged configuration is checked by the staged binary.
    assert!(
        first.stdout.contains("config.toml: valid"),
        "{}",
        first.stdout
    );
    // With --root it stays inside the root and says what it left out.
    assert!(
        first.stdout.contains("skipped systemd-sysusers"),
        "{}",
        first.stdout
    );
    assert!(
        first.stdout.contains("skipped systemctl daemon-reload"),
        "{}",
        first.stdout
    );
    assert!(
        first.stdout.contains("systemctl enable --now perihelix"),
        "install.sh does not give the next steps:\n{}",
        first.stdout
    );

    // The operator edits both files; a second install keeps them, says so,
    // and still refreshes the project's own files.
    let edited = format!(
        "{}\n# edited by the operator\n",
        read(&config).replace("workers = 1", "workers = 2")
    );
    std::fs::write(&config, &edited).expect("editing the configuration");
    let edited_stations = format!("{}\n# edited too\n", read(&stations));
    std::fs::write(&stations, &edited_stations).expect("editing the stations");
    std::fs::write(root.join(INSTALLED[0].0), "stale").expect("staling the unit");

    let second = install(root);
    assert_eq!(read(&config), edited, "install.sh overwrote config.toml");
    assert_eq!(
        read(&stations),
        edited_stations,
        "install.sh overwrote stations.toml"
    );
    for path in [&config, &stations] {
        let said = format!("kept {} (it exists; not overwritten)", path.display());
        assert!(
            second.stdout.contains(&said),
            "install.sh does not say it kept {}:\n{}",
            path.display(),
            second.stdout
        );
    }
    assert_eq!(
        read(&root.join(INSTALLED[0].0)),
        read(&repo().join(INSTALLED[0].1)),
        "a second install did not refresh the unit"
    );
}

/// One `Key=value` setting of the unit's [Service] section, every value
/// it is given (space-separated lists joined).
fn unit_values(unit: &str, key: &str) -> Vec<String> {
    let prefix = format!("{key}=");
    unit.lines()
        .filter_map(|line| line.trim().strip_prefix(&prefix))
        .flat_map(|v| v.split_whitespace().map(str::to_owned).collect::<Vec<_>>())
        .collect()
}

#[test]
fn example_configuration_writes_only_where_the_unit_and_tmpfiles_allow() {
    let example: toml::Value =
        toml::from_str(&read(&repo().join("config/example.toml"))).expect("example.toml parses");
    let dirs = &example["directories"];
    let written: Vec<&str> = ["incoming", "archive", "rejected", "database"]
        .iter()
        .map(|k| dirs[k].as_str().expect("a directory"))
        .chain([example["alerts"]["email"]["directory"]
            .as_str()
            .expect("the mail directory")])
        .collect();

    let unit = read(&repo().join("deploy/perihelix.service"));
    assert_eq!(unit_values(&unit, "StateDirectory"), ["perihelix"]);
    assert_eq!(unit_values(&unit, "ProtectSystem"), ["strict"]);
    assert_eq!(unit_values(&unit, "ReadWritePaths"), ["/var/lib/perihelix"]);
    let exec = unit_values(&unit, "ExecStart");
    assert_eq!(
        exec,
        [
            "/usr/bin/perihelix",
            "serve",
            "--config",
            "/etc/perihelix/config.toml"
        ],
        "ExecStart must run what install.sh installs"
    );

    let tmpfiles = read(&repo().join("deploy/perihelix.tmpfiles"));
    let made: BTreeSet<&str> = tmpfiles
        .lines()
        .filter(|l| l.starts_with("d "))
        .filter_map(|l| l.split_whitespace().nth(1))
        .collect();
    for dir in written {
        assert!(
            dir.starts_with("/var/lib/perihelix/"),
            "config/example.toml writes to {dir}, outside the unit's ReadWritePaths"
        );
        assert!(
            made.contains(dir),
            "deploy/perihelix.tmpfiles does not make {dir}"
        );
    }
}

/// The installed layout plus the host's targets and slices, which a
/// service's default dependencies pull in when verify loads it.
fn staged_root_for_systemd() -> tempfile::TempDir {
    let root = tempfile::tempdir().expect("a temporary root");
    install(root.path());
    let host_units = ["/usr/lib/systemd/system", "/lib/systemd/system"]
        .iter()
        .map(Path::new)
        .find(|d| d.join("sysinit.target").is_file())
        .expect("the host's unit directory with sysinit.target (Debian's systemd package)");
    let staged_units = root.path().join("usr/lib/systemd/system");
    let mut copied = 0;
    for entry in std::fs::read_dir(host_units).expect("listing the host's units") {
        let entry = entry.expect("a directory entry");
        let name = entry.file_name();
        let name = name.to_string_lossy();
        let plain = entry.file_type().is_ok_and(|t| t.is_file());
        if plain && (name.ends_with(".target") || name.ends_with(".slice")) {
            std::fs::copy(entry.path(), staged_units.join(&*name)).expect("copying a unit");
            copied += 1;
        }
    }
    println!(
        "copied {copied} targets and slices from {}",
        host_units.display()
    );
    root
}

fn version(analyze: &Path) -> String {
    let out = run(Command::new(analyze).arg("--version"), COMMAND_LIMIT);
    out.stdout.lines().next().unwrap_or("unknown").to_owned()
}

#[test]
fn unit_verifies_cleanly() {
    let Some(analyze) = systemd_analyze() else {
        return;
    };
    println!("{}", version(&analyze));
    let root = staged_root_for_systemd();
    // Under --root the unit's paths are the staged ones: ExecStart's
    // /usr/bin/perihelix is the freshly built binary, so the unit is
    // verified exactly as shipped.
    let out = run(
        Command::new(&analyze)
            .arg("verify")
            .arg(format!("--root={}", root.path().display()))
            .arg("/usr/lib/systemd/system/perihelix.service")
            .env("SYSTEMD_LOG_COLOR", "0"),
        COMMAND_LIMIT,
    );
    println!(
        "--- systemd-analyze verify (exit {:?}):\n{}",
        out.code,
        out.both()
    );
    let about_unit: Vec<&str> = out
        .stdout
        .lines()
        .chain(out.stderr.lines())
        .filter(|l| l.contains("perihelix"))
        .collect();
    assert!(
        about_unit.is_empty(),
        "systemd-analyze verify has something to say about the unit:\n{}",
        about_unit.join("\n")
    );
    assert_eq!(out.code, Some(0), "systemd-analyze verify failed");

    // The sysusers snippet parses and makes the account (dry run: nothing
    // written).
    if let Some(sysusers) = on_path("systemd-sysusers") {
        let out = run(
            Command::new(sysusers)
                .arg(format!("--root={}", root.path().display()))
                .arg("--dry-run"),
            COMMAND_LIMIT,
        );
        println!("--- systemd-sysusers --dry-run:\n{}", out.both());
        assert_eq!(out.code, Some(0));
        assert!(
            out.both().contains("Creating user 'perihelix'"),
            "the sysusers snippet does not make the perihelix user"
        );
    }
}

#[test]
fn tmpfiles_make_the_directories_with_their_modes() {
    let (Some(sysusers), Some(tmpfiles)) =
        (on_path("systemd-sysusers"), on_path("systemd-tmpfiles"))
    else {
        println!("SKIPPED: systemd-sysusers or systemd-tmpfiles not found; run bash tests/reference/setup-systemd.sh");
        return;
    };
    let root = tempfile::tempdir().expect("a temporary root");
    install(root.path());
    let root_arg = format!("--root={}", root.path().display());
    // Both write only under the staged root: its own /etc/passwd and
    // /var/lib. Giving the directories to the perihelix user needs root.
    let out = run(Command::new(sysusers).arg(&root_arg), COMMAND_LIMIT);
    println!("--- systemd-sysusers --root:\n{}", out.both());
    assert_eq!(out.code, Some(0));
    let passwd = read(&root.path().join("etc/passwd"));
    let line = passwd
        .lines()
        .find(|l| l.starts_with("perihelix:"))
        .expect("the perihelix account in the staged /etc/passwd");
    assert!(
        line.ends_with(":/var/lib/perihelix:/usr/sbin/nologin"),
        "{line}"
    );
    let out = run(
        Command::new(tmpfiles).arg(&root_arg).arg("--create"),
        COMMAND_LIMIT,
    );
    println!("--- systemd-tmpfiles --root --create:\n{}", out.both());
    if out.code != Some(0) && out.both().contains("Operation not permitted") {
        println!("SKIPPED the directory modes: giving them to the perihelix user needs root");
        return;
    }
    assert_eq!(out.code, Some(0));
    use std::os::unix::fs::MetadataExt;
    let uid: u32 = line.split(':').nth(2).unwrap().parse().unwrap();
    for (dir, mode) in [
        ("", 0o750),
        ("/incoming", 0o770),
        ("/archive", 0o750),
        ("/rejected", 0o750),
        ("/db", 0o750),
        ("/mail", 0o750),
    ] {
        let path = root.path().join(format!("var/lib/perihelix{dir}"));
        let meta = std::fs::metadata(&path).unwrap_or_else(|e| panic!("{}: {e}", path.display()));
        assert!(meta.is_dir());
        assert_eq!(meta.mode() & 0o7777, mode, "{}", path.display());
        assert_eq!(meta.uid(), uid, "{}", path.display());
    }
}

#[test]
fn exposure_is_at_most_two() {
    let Some(analyze) = systemd_analyze() else {
        return;
    };
    let version = version(&analyze);
    println!("{version}");
    let root = staged_root_for_systemd();
    let out = run(
        Command::new(&analyze)
            .arg("security")
            .arg("--offline=true")
            .arg(format!("--root={}", root.path().display()))
            .arg("--no-pager")
            .arg(UNIT)
            .env("SYSTEMD_COLORS", "0"),
        COMMAND_LIMIT,
    );
    println!(
        "--- systemd-analyze security --offline=true (exit {:?}):\n{}",
        out.code,
        out.both()
    );
    assert_eq!(out.code, Some(0), "systemd-analyze security failed");

    let overall = out
        .stdout
        .lines()
        .find_map(|l| {
            l.split_once("Overall exposure level for perihelix.service:")
                .map(|(_, rest)| rest)
        })
        .expect("an 'Overall exposure level' line");
    let exposure: f64 = overall
        .split_whitespace()
        .next()
        .and_then(|n| n.parse().ok())
        .unwrap_or_else(|| panic!("no number in '{overall}'"));
    println!("exposure {exposure} ({version}); issue 14 asks for <= {EXPOSURE_LIMIT:.1}");
    assert!(
        exposure <= EXPOSURE_LIMIT,
        "exposure {exposure} is above {EXPOSURE_LIMIT:.1}"
    );

    let open: Vec<&str> = out
        .stdout
        .lines()
        .filter_map(|l| l.trim_start().strip_prefix('✗'))
        .filter_map(|rest| rest.split_whitespace().next())
        .collect();
    let unexplained: Vec<&&str> = open
        .iter()
        .filter(|name| !LEFT_OPEN.iter().any(|(known, _)| known == *name))
        .collect();
    assert!(
        unexplained.is_empty(),
        "open in systemd-analyze security but not among the settings left open on purpose \
         (set them in deploy/perihelix.service, or justify them in LEFT_OPEN and \
         docs/operations.md): {unexplained:?}"
    );
    for (name, why) in LEFT_OPEN {
        if open.contains(name) {
            println!("left open: {name}: {why}");
        }
    }
}
