//! Alerts end to end: the real `perihelix serve` binary fed real files in
//! its watched directory, mail to a real SMTP server (aiosmtpd on loopback,
//! tests/common/smtp.rs; needs bash tests/reference/setup-smtp.sh) and
//! signed webhooks to a real HTTP receiver (tests/common/webhook.rs), and
//! the daemon's own API read back to see what it believes it delivered.
//!
//! The observations are the invented bodies of
//! tests/reference/fixtures/synthetic (made by
//! tests/reference/make_synthetic_astrometry.py): 2026 ZB1, hyperbolic with
//! radial outgassing, and 2026 ZC2, the same orbit under gravity alone.
//! They arrive a group of nights per file, and the next file only once the
//! previous one has its solution, so solution numbers do not depend on the
//! machine's pace.
//!
//! Every daemon here fits on DE421 (tests/reference/fetch-de421.sh): in a
//! trial of the outgassing stream the embedded ephemeris raised the same
//! alerts at the same solutions, but its first fit took about 50 s against
//! about 12 s. Where the non-gravitational rungs play no part (the
//! delivery tests), the ladder is gravity alone, so a fit takes a second
//! or two.

mod common;

use std::collections::{BTreeMap, BTreeSet};
use std::net::TcpListener;
use std::path::{Path, PathBuf};
use std::process::Command;
use std::time::{Duration, Instant};

use mailparse::MailHeaderMap;
use serde_json::Value;

use common::daemon::{
    encode, poll_until, psv_file, psv_nights, run_bounded, DaemonDir, Running, TOKEN,
};
use common::repo;
use common::smtp::{read_messages, wait_for_messages, ReceivedMail, SmtpServer};
use common::webhook::{ReceivedHook, WebhookReceiver};

const OUTGASSING: &str = "tests/reference/fixtures/synthetic/hyperbolic_outgassing/noisy.psv";
/// designation.provID of hyperbolic_outgassing/truth.json.
const OUTGASSING_OBJECT: &str = "2026 ZB1";
const GRAVITY_ONLY: &str = "tests/reference/fixtures/synthetic/hyperbolic_gravity/noisy.psv";
/// designation.provID of hyperbolic_gravity/truth.json.
const GRAVITY_OBJECT: &str = "2026 ZC2";

/// The signing secret shared by the daemon (through its secret file) and
/// the receiver; invented for these tests.
const SECRET: &str = "perihelix-alert-test-secret-5d1e";

/// Addresses under .test, which RFC 2606 section 2 reserves for testing.
const FROM: &str = "alerts@observatory.test";
const TO: &str = "duty@observatory.test";

/// The opening of the caution every alert message ends with (CAUTION in
/// service/alerts/text.rs).
const CAUTION_START: &str = "Predictions are for planning observations.";

/// The default thresholds of config/example.toml's [alerts], which these
/// daemons keep.
const UNBOUND_SIGMA: f64 = 3.0;
const NG_SIGMA: f64 = 3.0;

/// Bounds for a loaded 2-core machine; every poll returns as soon as its
/// state is reached.
const START: Duration = Duration::from_secs(60);
const FIT: Duration = Duration::from_secs(180);
const DELIVERY: Duration = Duration::from_secs(60);
/// The outbox sets its gauges at the start and the end of every pass.
const GAUGE: Duration = Duration::from_secs(60);
const COMMAND: Duration = Duration::from_secs(60);
const STOP: Duration = Duration::from_secs(60);
const POLL: Duration = Duration::from_millis(100);

/// Whether the process has a SIGTERM handler: bit 14 (signal 15) of the
/// SigCgt mask in /proc/PID/status (proc(5)).
fn catches_sigterm(pid: u32) -> bool {
    let Ok(status) = std::fs::read_to_string(format!("/proc/{pid}/status")) else {
        return false;
    };
    status
        .lines()
        .find_map(|l| l.strip_prefix("SigCgt:"))
        .and_then(|mask| u64::from_str_radix(mask.trim(), 16).ok())
        .is_some_and(|mask| mask & (1 << 14) != 0)
}

/// SIGTERM, and a clean exit within `limit` (the log when not). A ready
/// daemon has its stop-signal handler installed already (it is installed
/// before READY=1), so a stop sent at any moment after readiness is clean.
fn stop_cleanly(d: Running, limit: Duration) {
    assert!(
        catches_sigterm(d.pid()),
        "a ready daemon catches SIGTERM (SigCgt in /proc/PID/status)"
    );
    let log = d.log.clone();
    let status = d.stop(limit);
    assert!(
        status.success(),
        "the daemon stopped with {status}:\n{}",
        std::fs::read_to_string(&log).unwrap_or_default()
    );
}

fn de421() -> PathBuf {
    let spk = repo().join("tests/reference/data/de421.bsp");
    assert!(
        spk.is_file(),
        "{} is missing: run bash tests/reference/fetch-de421.sh",
        spk.display()
    );
    spk
}

/// What follows `[refit]` in a test daemon's configuration: a short quiet
/// period, DE421, the ladder, and `alerts` (the [alerts] tables).
fn daemon_config(gravity_only: bool, alerts: &str) -> String {
    let ladder = if gravity_only {
        "[fit]\nladder = [\"gravity\"]\n"
    } else {
        ""
    };
    format!(
        "quiet_period_s = 1\nmax_delay_s = 120\nrescan_interval_s = 2\n\
         [ephemeris]\nsource = \"spk\"\npath = \"{}\"\n{ladder}{alerts}",
        de421().display()
    )
}

fn smtp_email(port: u16) -> String {
    format!(
        "[alerts.email]\ntransport = \"smtp\"\nsmtp_host = \"127.0.0.1\"\nsmtp_port = {port}\n\
         security = \"none\"\nfrom = \"Perihelix <{FROM}>\"\nto = [\"{TO}\"]\n"
    )
}

/// The webhook table; the secret file is written by [`with_secret`].
fn webhook_table(url: &str) -> String {
    format!("[alerts.webhook]\nurl = \"{url}\"\nsecret_file = \"webhook-secret\"\n")
}

/// A daemon directory whose configuration is `config`, with the webhook
/// secret beside it. The newline is what `echo secret > file` leaves; the
/// daemon trims it (read_secret in service/config.rs), so the receiver,
/// which knows the secret without it, must still verify every signature.
fn with_secret(config: &str) -> DaemonDir {
    let dir = DaemonDir::new(config);
    std::fs::write(dir.path("webhook-secret"), format!("{SECRET}\n")).expect("the secret file");
    dir
}

/// A loopback port nobody listens on (free a moment ago; nothing in these
/// tests binds it afterwards).
fn dead_port() -> u16 {
    let l = TcpListener::bind("127.0.0.1:0").expect("a free port");
    l.local_addr().expect("its address").port()
}

/// The fixture's rows cut into files at the given night indices: the
/// nights before `cuts[0]` in the first file, and so on; the last file
/// runs to `end` nights.
fn night_files(fixture: &str, cuts: &[usize], end: usize) -> (String, Vec<Vec<String>>) {
    let (header, nights) = psv_nights(&repo().join(fixture));
    let end = end.min(nights.len());
    let mut bounds = vec![0];
    bounds.extend(cuts.iter().copied().filter(|c| *c < end));
    bounds.push(end);
    let files = bounds
        .windows(2)
        .map(|w| {
            nights[w[0]..w[1]]
                .iter()
                .flat_map(|(_, r)| r.clone())
                .collect()
        })
        .collect();
    (header, files)
}

/// Six nights give the first solution (as in tests/daemon_serve.rs), then
/// `per_file` nights a file to the end of the 88 nights of truth.json.
fn stream_cuts(per_file: usize) -> Vec<usize> {
    (6..88).step_by(per_file).collect()
}

fn solution_count(d: &Running, object: &str) -> u64 {
    let (status, o) = d.get(&format!("/v1/objects/{}", encode(object)));
    if status == 200 {
        o["solutions"].as_u64().unwrap_or(0)
    } else {
        0
    }
}

/// Drops `rows` as one file and waits for the solution that takes them in.
fn drop_and_fit(
    d: &Running,
    dir: &DaemonDir,
    name: &str,
    header: &str,
    rows: &[String],
    object: &str,
) -> u64 {
    let before = solution_count(d, object);
    dir.drop_file(name, &psv_file(header, rows));
    poll_until(&format!("the solution after {name}"), FIT, POLL, || {
        let n = solution_count(d, object);
        (n > before).then_some(n)
    })
}

fn solution(d: &Running, object: &str, seq: u64) -> Value {
    let (status, s) = d.get(&format!("/v1/objects/{}/solutions/{seq}", encode(object)));
    assert_eq!(status, 200, "solution {seq}: {s}");
    s
}

/// Every alert the API lists, newest first, all pages.
fn all_alerts(d: &Running) -> Vec<Value> {
    let mut out = Vec::new();
    let mut cursor: Option<String> = None;
    loop {
        let mut path = "/v1/alerts?limit=1000".to_string();
        if let Some(c) = &cursor {
            path.push_str(&format!("&cursor={c}"));
        }
        let (status, page) = d.get(&path);
        assert_eq!(status, 200, "{page}");
        out.extend(page["alerts"].as_array().cloned().unwrap_or_default());
        match page["next_cursor"].as_str() {
            Some(c) => cursor = Some(c.to_string()),
            None => return out,
        }
    }
}

fn str_of<'a>(v: &'a Value, key: &str) -> &'a str {
    v[key]
        .as_str()
        .unwrap_or_else(|| panic!("no text '{key}' in {v}"))
}

fn deliveries(alert: &Value) -> &[Value] {
    alert["deliveries"].as_array().map_or(&[], Vec::as_slice)
}

fn delivery<'a>(alert: &'a Value, channel: &str) -> &'a Value {
    deliveries(alert)
        .iter()
        .find(|d| d["channel"] == channel)
        .unwrap_or_else(|| panic!("no {channel} delivery in {alert}"))
}

/// Every alert has its one delivery per channel, and none is pending.
fn outbox_settled(alerts: &[Value]) -> bool {
    alerts.iter().all(|a| {
        let channels = a["channels"].as_array().map_or(0, Vec::len);
        let list = deliveries(a);
        list.len() == channels && list.iter().all(|d| d["state"] != "pending")
    })
}

fn wait_outbox_settled(d: &Running) -> Vec<Value> {
    poll_until("every delivery to be made", DELIVERY, POLL, || {
        let alerts = all_alerts(d);
        outbox_settled(&alerts).then_some(alerts)
    })
}

/// /metrics as name -> value.
fn metrics(d: &Running) -> BTreeMap<String, f64> {
    d.get_text("/metrics")
        .lines()
        .filter(|l| !l.starts_with('#'))
        .filter_map(|l| {
            let (k, v) = l.rsplit_once(' ')?;
            Some((k.to_string(), v.parse().ok()?))
        })
        .collect()
}

fn metric(d: &Running, name: &str) -> f64 {
    *metrics(d)
        .get(name)
        .unwrap_or_else(|| panic!("{name} is not in /metrics"))
}

/// Waits for a gauge to read `want`; how long it took.
fn wait_gauge(d: &Running, name: &str, want: impl Fn(f64) -> bool) -> Duration {
    let started = Instant::now();
    poll_until(&format!("{name} in /metrics"), GAUGE, POLL, || {
        want(metric(d, name)).then_some(())
    });
    started.elapsed()
}

fn ids(alerts: &[Value]) -> BTreeSet<String> {
    alerts.iter().map(|a| str_of(a, "id").to_string()).collect()
}

fn of_rule<'a>(alerts: &'a [Value], rule: &str) -> Vec<&'a Value> {
    alerts.iter().filter(|a| a["rule"] == rule).collect()
}

/// A short list for assertion messages.
fn summary(alerts: &[Value]) -> Vec<String> {
    alerts
        .iter()
        .map(|a| format!("{} {} {}", a["id"], a["edge"], a["value_after"]))
        .collect()
}

/// The recommended model of a stored solution document.
fn recommended_model(document: &Value) -> &Value {
    let name = str_of(document, "recommended");
    document["models"]
        .as_array()
        .and_then(|m| m.iter().find(|m| m["name"] == name))
        .unwrap_or_else(|| panic!("no model '{name}' in the document"))
}

/// A value with its sigma as the alert text prints it, "v ± s" or
/// "(v ± s)eN": the value, the sigma and the unit of their last printed
/// digit. The sign between them is "±" in the committed
/// service/alerts/text.rs and "+/-" in the shared
/// service/solve/verdicts.rs the alert text is moving to; the numbers are
/// what is checked, so either is read.
fn printed_value_sigma(printed: &str) -> (f64, f64, f64) {
    let printed = printed.trim();
    let (pair, exponent) = match printed.strip_prefix('(') {
        Some(rest) => {
            let (pair, e) = rest
                .split_once(")e")
                .unwrap_or_else(|| panic!("'{printed}' is neither v ± s nor (v ± s)eN"));
            (pair, e.parse::<i32>().expect("a power of ten"))
        }
        None => (printed, 0),
    };
    let (v, s) = pair
        .split_once(" ± ")
        .or_else(|| pair.split_once(" +/- "))
        .unwrap_or_else(|| panic!("no ' ± ' (or ' +/- ') in '{printed}'"));
    let decimals = s.split_once('.').map_or(0, |(_, f)| f.len() as i32);
    let scale = 10f64.powi(exponent);
    let number = |t: &str| t.parse::<f64>().unwrap_or_else(|e| panic!("'{t}': {e}"));
    (
        number(v) * scale,
        number(s) * scale,
        10f64.powi(exponent - decimals),
    )
}

/// The text between `before` and the next `after`.
fn between<'a>(text: &'a str, before: &str, after: &str) -> &'a str {
    let start = text
        .find(before)
        .unwrap_or_else(|| panic!("no '{before}' in:\n{text}"))
        + before.len();
    let len = text[start..]
        .find(after)
        .unwrap_or_else(|| panic!("no '{after}' after '{before}' in:\n{text}"));
    &text[start..start + len]
}

/// Whether `printed`, rounded to `unit`, can be `exact`.
fn rounds_to(printed: f64, exact: f64, unit: f64) -> bool {
    (printed - exact).abs() <= unit / 2.0 * (1.0 + 1e-9)
}

/// The alert as the webhook should carry it: the API's record less what
/// the store adds (its journal place, the acknowledgement, the deliveries).
fn event_of(alert: &Value) -> Value {
    let mut event = alert.clone();
    let o = event.as_object_mut().expect("an alert object");
    for key in ["journal_seq", "acknowledged", "deliveries"] {
        o.remove(key);
    }
    event
}

/// Checks the hooks a receiver got against the alerts: every request
/// signed right; each alert accepted exactly once when counted by delivery
/// id, with the id in the header and the body, and the alert as stored.
fn check_hooks(received: &[ReceivedHook], alerts: &[Value]) {
    for h in received {
        assert!(
            h.signature_ok,
            "a webhook request whose signature does not verify: {:?} {:?}",
            h.delivery_id, h.signature
        );
        assert_eq!(h.method, "POST");
        assert_eq!(h.content_type.as_deref(), Some("application/json"));
    }
    let mut accepted: BTreeMap<String, Vec<&ReceivedHook>> = BTreeMap::new();
    for h in received.iter().filter(|h| h.accepted()) {
        let id = h.delivery_id.clone().expect("X-Perihelix-Delivery");
        accepted.entry(id).or_default().push(h);
    }
    let expected: BTreeSet<String> = alerts
        .iter()
        .map(|a| format!("{}.webhook", str_of(a, "id")))
        .collect();
    assert_eq!(
        accepted.keys().cloned().collect::<BTreeSet<_>>(),
        expected,
        "webhook deliveries accepted against the alerts listed"
    );
    for a in alerts {
        let id = format!("{}.webhook", str_of(a, "id"));
        for h in &accepted[&id] {
            // A repeat after a crash is allowed, but it must be the same
            // delivery, byte for byte what the first one said.
            assert_eq!(h.raw, accepted[&id][0].raw, "{id} repeated differently");
            assert_eq!(h.body["delivery_id"], id.as_str());
            assert_eq!(h.body["alert"], event_of(a), "{id}: the alert as stored");
        }
    }
}

/// Checks the mail against the alerts: one message per alert by its
/// Message-ID (repeats only as copies of the same message), From, To,
/// and the subject and text as stored.
fn check_mail(mail: &[ReceivedMail], alerts: &[Value]) -> BTreeMap<String, Vec<ReceivedMail>> {
    let mut by_id: BTreeMap<String, Vec<ReceivedMail>> = BTreeMap::new();
    for m in mail {
        let id = m
            .delivery_id()
            .unwrap_or_else(|| panic!("Message-ID {:?} is not <ID@perihelix>", m.message_id))
            .to_string();
        by_id.entry(id).or_default().push(m.clone());
    }
    let expected: BTreeSet<String> = alerts
        .iter()
        .map(|a| format!("{}.email", str_of(a, "id")))
        .collect();
    assert_eq!(
        by_id.keys().cloned().collect::<BTreeSet<_>>(),
        expected,
        "Message-IDs received against the alerts listed"
    );
    for a in alerts {
        let id = format!("{}.email", str_of(a, "id"));
        let copies = &by_id[&id];
        for m in copies {
            assert_eq!(m.subject.as_deref(), Some(str_of(a, "subject")), "{id}");
            assert_eq!(m.text.as_deref(), Some(str_of(a, "text")), "{id}");
            assert_eq!(m.text, copies[0].text, "{id} repeated differently");
            assert_eq!(m.from.as_deref(), Some(FROM), "{id}");
            assert_eq!(m.to, [TO], "{id}");
            assert_eq!(m.envelope_to, [TO], "{id}");
            assert!(
                m.html
                    .as_deref()
                    .is_some_and(|h| h.contains(str_of(a, "designation"))),
                "{id}: an HTML part naming the object"
            );
        }
    }
    by_id
}

/// The last paragraph of an alert's words is the caution.
fn assert_ends_with_caution(text: &str, what: &str) {
    let last = text.trim_end().rsplit("\n\n").next().unwrap_or_default();
    assert!(
        last.starts_with(CAUTION_START),
        "{what} does not end with the caution:\n{text}"
    );
}

#[test]
fn streaming_the_outgassing_nights_raises_each_expected_alert_once() {
    let maildir = tempfile::tempdir().expect("a maildir");
    let smtp = SmtpServer::start(maildir.path());
    let hooks = WebhookReceiver::start(SECRET.as_bytes());
    let dir = with_secret(&daemon_config(
        false,
        &format!("{}{}", smtp_email(smtp.port()), webhook_table(&hooks.url())),
    ));
    let d = Running::start(&dir, START);

    let (header, files) = night_files(OUTGASSING, &stream_cuts(8), 88);
    for (k, rows) in files.iter().enumerate() {
        let seq = drop_and_fit(
            &d,
            &dir,
            &format!("nights-{k:02}.psv"),
            &header,
            rows,
            OUTGASSING_OBJECT,
        );
        assert_eq!(seq, k as u64 + 1, "one solution per file");
    }
    let last = solution_count(&d, OUTGASSING_OBJECT);
    let alerts = wait_outbox_settled(&d);
    let listed = summary(&alerts);
    eprintln!("alerts raised by the stream: {listed:#?}");

    // Once per crossing: the body stays unbound and its non-gravitational
    // significance above 3 sigma for every later solution, and each of
    // those must not raise the alert again.
    let unbound = of_rule(&alerts, "unbound");
    assert_eq!(unbound.len(), 1, "{listed:#?}");
    let unbound = unbound[0];
    assert_eq!(unbound["edge"], "raised");
    assert_eq!(unbound["solution_seq"], 1, "raised by the first solution");
    let ng = of_rule(&alerts, "ng_needed");
    assert_eq!(ng.len(), 1, "{listed:#?}");
    let ng = ng[0];
    assert_eq!(ng["edge"], "raised");
    assert!(of_rule(&alerts, "fit_failed").is_empty(), "{listed:#?}");
    assert_eq!(ids(&alerts).len(), alerts.len(), "an alert id listed twice");

    // The rules still hold at the last solution (so "once" above is not
    // "cleared and never raised again"): its own record says so.
    let newest = solution(&d, OUTGASSING_OBJECT, last);
    for rule in ["unbound", "ng_needed"] {
        assert_eq!(
            newest["alert_states"][rule]["active"], true,
            "{rule} at solution {last}: {}",
            newest["alert_states"]
        );
    }

    // Every delivery made, each at the first attempt: both servers were up
    // the whole time.
    for a in &alerts {
        assert_eq!(deliveries(a).len(), 2, "{a}");
        for channel in ["email", "webhook"] {
            let del = delivery(a, channel);
            assert_eq!(del["state"], "delivered", "{del}");
            assert_eq!(del["attempts"], 1, "{del}");
            assert_eq!(str_of(del, "id"), format!("{}.{channel}", str_of(a, "id")));
        }
    }
    let mail = wait_for_messages(maildir.path(), alerts.len(), DELIVERY);
    assert_eq!(mail.len(), alerts.len(), "one message per alert");
    let by_id = check_mail(&mail, &alerts);
    check_hooks(&hooks.received(), &alerts);
    assert_eq!(
        hooks.received().len(),
        alerts.len(),
        "no failed webhook request"
    );

    let n = alerts.len() as f64;
    assert_eq!(metric(&d, "perihelix_alerts_raised_total"), n);
    assert_eq!(metric(&d, "perihelix_alert_deliveries_total"), 2.0 * n);
    assert_eq!(metric(&d, "perihelix_alert_delivery_failures_total"), 0.0);
    let lag = wait_gauge(&d, "perihelix_alert_deliveries_pending", |v| v == 0.0);
    eprintln!("perihelix_alert_deliveries_pending reached 0 {lag:?} after the API showed every delivery made");
    assert_eq!(metric(&d, "perihelix_alert_deliveries_dead"), 0.0);

    // The words. Subjects name the object and the condition.
    for a in &alerts {
        let subject = str_of(a, "subject");
        assert!(
            subject.starts_with(&format!("{OUTGASSING_OBJECT}: ")),
            "{subject}"
        );
        assert_ends_with_caution(str_of(a, "text"), str_of(a, "id"));
        // The link the message gives leads to the solution that raised it
        // on this daemon.
        let url = str_of(&a["details"], "solution_url");
        assert!(str_of(a, "text").contains(url), "{url}");
        let path = url
            .strip_prefix(&d.url(""))
            .unwrap_or_else(|| panic!("{url} is not on this daemon"));
        let (status, linked) = d.get(path);
        assert_eq!(status, 200, "{url}");
        assert_eq!(linked["seq"], a["solution_seq"], "{url}");
    }
    let unbound_mail = &by_id[&format!("{}.email", str_of(unbound, "id"))][0];
    let ng_mail = &by_id[&format!("{}.email", str_of(ng, "id"))][0];
    let unbound_subject = unbound_mail.subject.clone().unwrap_or_default();
    let ng_subject = ng_mail.subject.clone().unwrap_or_default();
    assert!(
        unbound_subject.contains("came in unbound"),
        "{unbound_subject}"
    );
    assert!(
        ng_subject.contains("non-gravitational terms needed"),
        "{ng_subject}"
    );

    // The unbound message's 1/a is the stored solution's: the daemon's own
    // record of solution 1, its recommended model's original 1/a.
    let record = solution(&d, OUTGASSING_OBJECT, 1);
    let original = &recommended_model(&record["document"])["one_over_a_original"];
    let (a_value, a_sigma) = (
        original["value"].as_f64().expect("1/a"),
        original["sigma"].as_f64().expect("sigma(1/a)"),
    );
    let text = unbound_mail.text.clone().unwrap_or_default();
    let (value, sigma, unit) =
        printed_value_sigma(between(&text, "Original barycentric 1/a = ", " 1/au"));
    assert!(
        rounds_to(value, a_value, unit) && rounds_to(sigma, a_sigma, unit),
        "the mail says 1/a = {value} ± {sigma} (to {unit}); solution 1 says {a_value} ± {a_sigma}"
    );
    // Two significant figures of the sigma: its last printed digit is the
    // second (the rule of service/alerts/text.rs, value_sigma).
    assert!(
        (10.0..100.0).contains(&(sigma / unit).round()),
        "sigma {sigma} printed to {unit}"
    );
    let below = -a_value / a_sigma;
    let said: f64 = between(&text, " 1/au: ", " sigma below zero")
        .parse()
        .expect("the sigmas below zero");
    assert!(
        rounds_to(said, below, 0.1),
        "{said} sigma said, {below} from the record"
    );
    assert!(below >= UNBOUND_SIGMA, "{below}");
    let value_after = unbound["value_after"].as_f64().unwrap();
    assert!(
        (value_after - below).abs() <= 1e-9 * below,
        "{value_after} against {below}"
    );

    // The non-gravitational message's significance is the stored one
    // (document.ng_significance_sigma of the solution that raised it),
    // printed to 0.1.
    let seq = ng["solution_seq"].as_u64().unwrap();
    let record = solution(&d, OUTGASSING_OBJECT, seq);
    let significance = record["document"]["ng_significance_sigma"]
        .as_f64()
        .expect("the significance");
    let text = ng_mail.text.clone().unwrap_or_default();
    let said: f64 = between(
        &text,
        "Gravity alone against the best model with non-gravitational terms: ",
        " sigma",
    )
    .parse()
    .expect("a significance");
    assert!(
        rounds_to(said, significance, 0.1),
        "the mail says {said} sigma; solution {seq} says {significance}"
    );
    assert!(
        ng_subject.contains(&format!("({said:.1} sigma)")),
        "{ng_subject}"
    );
    assert!(significance >= NG_SIGMA, "{significance}");
    assert_eq!(ng["value_after"].as_f64(), Some(significance));

    stop_cleanly(d, STOP);
    smtp.stop();
    hooks.stop();
}

#[test]
fn the_gravity_only_body_raises_no_non_gravitational_alert() {
    let dir = DaemonDir::new(&daemon_config(
        false,
        "[alerts.email]\ntransport = \"file\"\ndirectory = \"mail\"\n",
    ));
    let d = Running::start(&dir, START);
    let (header, files) = night_files(GRAVITY_ONLY, &stream_cuts(8), 88);
    for (k, rows) in files.iter().enumerate() {
        drop_and_fit(
            &d,
            &dir,
            &format!("nights-{k:02}.psv"),
            &header,
            rows,
            GRAVITY_OBJECT,
        );
    }
    let last = solution_count(&d, GRAVITY_OBJECT);
    assert_eq!(last, files.len() as u64, "one solution per file");
    let alerts = wait_outbox_settled(&d);
    let listed = summary(&alerts);
    eprintln!("alerts raised for the gravity-only body: {listed:#?}");

    assert!(of_rule(&alerts, "ng_needed").is_empty(), "{listed:#?}");
    // Not a rule that never ran: every solution computed a significance,
    // and each is under the threshold (the daemon's own records).
    for seq in 1..=last {
        let record = solution(&d, GRAVITY_OBJECT, seq);
        let s = record["document"]["ng_significance_sigma"].as_f64();
        assert!(
            s.is_some_and(|s| s < NG_SIGMA),
            "solution {seq}: significance {s:?}"
        );
        assert_eq!(
            record["document"]["recommended"], "gravity",
            "solution {seq}"
        );
    }
    assert!(of_rule(&alerts, "model_changed").is_empty(), "{listed:#?}");

    // The truth is the outgassing body's state without the outgassing, so
    // hyperbolic (e = 2 in hyperbolic_gravity/truth.json): unbound, once.
    let unbound = of_rule(&alerts, "unbound");
    assert_eq!(unbound.len(), 1, "{listed:#?}");
    assert_eq!(unbound[0]["solution_seq"], 1);
    assert_eq!(unbound[0]["edge"], "raised");
    let subject = str_of(unbound[0], "subject");
    assert!(
        subject.starts_with(&format!("{GRAVITY_OBJECT}: came in unbound")),
        "{subject}"
    );

    // The file transport: one .eml per delivery, named by its id and
    // carrying it as the Message-ID.
    for a in &alerts {
        let del = delivery(a, "email");
        assert_eq!(del["state"], "delivered", "{del}");
        let id = str_of(del, "id");
        let raw = std::fs::read(dir.path("mail").join(format!("{id}.eml")))
            .unwrap_or_else(|e| panic!("{id}.eml: {e}"));
        let parsed = mailparse::parse_mail(&raw).expect("the .eml parses");
        assert_eq!(
            parsed
                .headers
                .get_first_value("Message-ID")
                .map(|v| v.trim().to_string()),
            Some(format!("<{id}@perihelix>"))
        );
        assert_eq!(
            parsed.headers.get_first_value("Subject").as_deref(),
            Some(str_of(a, "subject"))
        );
    }
    stop_cleanly(d, STOP);
}

#[test]
fn alerts_wait_out_a_mail_server_outage_and_a_kill_9() {
    let maildir = tempfile::tempdir().expect("a maildir");
    // Started only to learn a port the server can have again later.
    let smtp = SmtpServer::start(maildir.path());
    let port = smtp.port();
    smtp.stop();
    let hooks = WebhookReceiver::start(SECRET.as_bytes());
    hooks.set_failing(true);
    let dir = with_secret(&daemon_config(
        false,
        &format!(
            "[alerts]\nretry_first_s = 0.5\nretry_max_s = 2\ngive_up_after = 1000\n{}{}",
            smtp_email(port),
            webhook_table(&hooks.url())
        ),
    ));
    // Six nights make the body unbound; to night 30 its outgassing shows
    // (about 7 sigma in a trial run), so more than one alert is in the
    // outbox when the daemon is killed.
    let (header, files) = night_files(OUTGASSING, &[6, 30], 40);
    let d = Running::start(&dir, START);
    drop_and_fit(
        &d,
        &dir,
        "nights-00.psv",
        &header,
        &files[0],
        OUTGASSING_OBJECT,
    );

    let failing = poll_until(
        "both deliveries of the first alert to fail",
        DELIVERY,
        POLL,
        || {
            let alerts = all_alerts(&d);
            let unbound = *of_rule(&alerts, "unbound").first()?;
            let both = ["email", "webhook"].map(|c| delivery(unbound, c).clone());
            both.iter()
                .all(|del| del["attempts"].as_u64() >= Some(1))
                .then_some(both)
        },
    );
    for del in &failing {
        assert_eq!(del["state"], "pending", "{del}");
        assert!(
            del["last_error"].as_str().is_some_and(|e| !e.is_empty()),
            "{del}"
        );
        assert!(del["not_before_unix_ms"].as_u64().is_some(), "{del}");
    }
    let email_error = str_of(&failing[0], "last_error");
    assert!(email_error.contains(&port.to_string()), "{email_error}");
    // 503: what the receiver answers while told to fail (tests/common/webhook.rs).
    let hook_error = str_of(&failing[1], "last_error");
    assert!(hook_error.contains("503"), "{hook_error}");
    assert!(metric(&d, "perihelix_alert_delivery_failures_total") > 0.0);
    assert_eq!(metric(&d, "perihelix_alert_deliveries_total"), 0.0);

    drop_and_fit(
        &d,
        &dir,
        "nights-01.psv",
        &header,
        &files[1],
        OUTGASSING_OBJECT,
    );
    let before_kill = poll_until("every alert tried once", DELIVERY, POLL, || {
        let alerts = all_alerts(&d);
        alerts
            .iter()
            .flat_map(deliveries)
            .all(|del| del["attempts"].as_u64() >= Some(1))
            .then_some(alerts)
    });
    eprintln!(
        "alerts in the outbox at the kill: {:#?}",
        summary(&before_kill)
    );
    assert!(
        before_kill.len() >= 2,
        "more than one alert should wait out the outage: {:#?}",
        summary(&before_kill)
    );
    assert!(
        read_messages(maildir.path()).is_empty(),
        "mail with no server"
    );
    d.kill9();

    let smtp = SmtpServer::start_on(port, maildir.path());
    let d = Running::start(&dir, START);
    // Journaled with their solutions, the alerts are all there after the
    // kill, and a restart raises none of them again.
    assert_eq!(
        ids(&all_alerts(&d)),
        ids(&before_kill),
        "alerts after the restart"
    );
    poll_until(
        "the mail to go out after the restart",
        DELIVERY,
        POLL,
        || {
            let alerts = all_alerts(&d);
            alerts
                .iter()
                .all(|a| delivery(a, "email")["state"] == "delivered")
                .then_some(())
        },
    );
    // The receiver still fails: its deliveries wait, retried.
    for a in all_alerts(&d) {
        let del = delivery(&a, "webhook");
        assert_eq!(del["state"], "pending", "{del}");
    }

    // A refit after the restart reads the rule states of the solution
    // before the kill: what was raised stays raised, not raised again.
    let seq = drop_and_fit(
        &d,
        &dir,
        "nights-02.psv",
        &header,
        &files[2],
        OUTGASSING_OBJECT,
    );
    assert_eq!(seq, 3);
    hooks.set_failing(false);
    let alerts = wait_outbox_settled(&d);
    eprintln!("alerts at the end: {:#?}", summary(&alerts));
    assert!(ids(&before_kill).is_subset(&ids(&alerts)), "an alert lost");
    for a in &alerts {
        if a["solution_seq"] == 3 {
            assert!(
                a["rule"] != "unbound" && a["rule"] != "ng_needed",
                "raised again after the restart: {a}"
            );
        }
        for channel in ["email", "webhook"] {
            let del = delivery(a, channel);
            assert_eq!(del["state"], "delivered", "{del}");
        }
        for del in deliveries(a) {
            // Both channels were down when the alerts of the first two
            // solutions were first tried, so each delivered at a retry.
            if a["solution_seq"].as_u64() < Some(3) {
                assert!(del["attempts"].as_u64() > Some(1), "{del}");
            }
        }
    }

    let mail = wait_for_messages(maildir.path(), alerts.len(), DELIVERY);
    let by_id = check_mail(&mail, &alerts);
    let repeats: Vec<_> = by_id
        .iter()
        .filter(|(_, copies)| copies.len() > 1)
        .map(|(id, copies)| (id.clone(), copies.len()))
        .collect();
    eprintln!("mail repeated after the kill: {repeats:?}");
    check_hooks(&hooks.received(), &alerts);
    let refused = hooks.received().iter().filter(|h| h.status == 503).count();
    assert!(refused >= before_kill.len(), "{refused} requests refused");

    stop_cleanly(d, STOP);
    smtp.stop();
    hooks.stop();
}

#[test]
fn a_delivery_that_keeps_failing_is_shown_dead() {
    let port = dead_port();
    let dir = DaemonDir::new(&daemon_config(
        true,
        &format!(
            "[alerts]\nretry_first_s = 0.5\nretry_max_s = 1\ngive_up_after = 2\n{}",
            smtp_email(port)
        ),
    ));
    let mut d = Running::start(&dir, START);
    let (header, files) = night_files(OUTGASSING, &[6], 10);
    drop_and_fit(
        &d,
        &dir,
        "nights-00.psv",
        &header,
        &files[0],
        OUTGASSING_OBJECT,
    );

    let dead = poll_until("the mail delivery to be given up", DELIVERY, POLL, || {
        let alerts = all_alerts(&d);
        let unbound = *of_rule(&alerts, "unbound").first()?;
        let del = delivery(unbound, "email");
        (del["state"] == "dead").then(|| del.clone())
    });
    let seen_dead = Instant::now();
    // give_up_after = 2: two attempts, then no more.
    assert_eq!(dead["attempts"], 2, "{dead}");
    let error = str_of(&dead, "last_error");
    assert!(error.contains(&port.to_string()), "{error}");
    assert!(dead["at_utc"].as_str().is_some(), "{dead}");
    wait_gauge(&d, "perihelix_alert_deliveries_dead", |v| v >= 1.0);
    eprintln!(
        "perihelix_alert_deliveries_dead reached 1 {:?} after the API showed the delivery dead",
        seen_dead.elapsed()
    );
    let alerts = all_alerts(&d);
    let attempts: u64 = alerts
        .iter()
        .flat_map(deliveries)
        .filter_map(|del| del["attempts"].as_u64())
        .sum();
    assert_eq!(
        metric(&d, "perihelix_alert_delivery_failures_total"),
        attempts as f64
    );
    assert_eq!(metric(&d, "perihelix_alert_deliveries_total"), 0.0);

    // Given up, not stuck: the daemon goes on taking files and fitting, and
    // the dead delivery is not tried again.
    assert!(d.child.try_wait().expect("the daemon's status").is_none());
    assert_eq!(d.get("/healthz").0, 200);
    let seq = drop_and_fit(
        &d,
        &dir,
        "nights-01.psv",
        &header,
        &files[1],
        OUTGASSING_OBJECT,
    );
    assert_eq!(seq, 2);
    let again = all_alerts(&d);
    let unbound = of_rule(&again, "unbound")[0];
    assert_eq!(delivery(unbound, "email")["attempts"], 2);
    assert_eq!(delivery(unbound, "email")["state"], "dead");
    stop_cleanly(d, STOP);
}

fn alert_test(config: &Path) -> (i32, Vec<String>) {
    let (status, out, err) = run_bounded(
        Command::new(env!("CARGO_BIN_EXE_perihelix"))
            .arg("alert-test")
            .arg("--config")
            .arg(config),
        COMMAND,
    );
    let code = status
        .code()
        .unwrap_or_else(|| panic!("killed by a signal:\n{err}"));
    (code, out.lines().map(str::to_string).collect())
}

fn line_of<'a>(lines: &'a [String], channel: &str) -> &'a str {
    let matching: Vec<_> = lines
        .iter()
        .filter(|l| l.split_whitespace().next() == Some(channel))
        .collect();
    assert_eq!(matching.len(), 1, "one {channel} line in {lines:?}");
    matching[0]
}

#[test]
fn alert_test_reports_every_channel() {
    let maildir = tempfile::tempdir().expect("a maildir");
    let smtp = SmtpServer::start(maildir.path());
    let port = smtp.port();
    let hooks = WebhookReceiver::start(SECRET.as_bytes());
    let dir = with_secret(&daemon_config(
        true,
        &format!("{}{}", smtp_email(port), webhook_table(&hooks.url())),
    ));

    let (code, lines) = alert_test(&dir.config);
    assert_eq!(code, 0, "{lines:?}");
    assert_eq!(lines.len(), 2, "one line per channel: {lines:?}");
    let email = line_of(&lines, "email");
    assert!(email.contains(&format!("127.0.0.1:{port}")), "{email}");
    assert!(email.ends_with(": sent"), "{email}");
    let webhook = line_of(&lines, "webhook");
    assert!(webhook.contains(&hooks.url()), "{webhook}");
    assert!(webhook.ends_with(": sent"), "{webhook}");

    let mail = wait_for_messages(maildir.path(), 1, DELIVERY);
    assert_eq!(mail.len(), 1);
    let m = &mail[0];
    assert_eq!(m.envelope_to, [TO]);
    assert!(
        m.delivery_id().is_some_and(|id| id.ends_with(".email")),
        "{:?}",
        m.message_id
    );
    let text = m.text.clone().unwrap_or_default();
    assert!(text.contains("perihelix alert-test"), "{text}");
    assert_ends_with_caution(&text, "the test message");
    let got = hooks.received();
    assert_eq!(got.len(), 1);
    assert!(got[0].signature_ok && got[0].accepted(), "{:?}", got[0]);
    assert_eq!(got[0].body["test"], true);
    assert_eq!(
        got[0].body["delivery_id"].as_str(),
        got[0].delivery_id.as_deref()
    );

    smtp.stop();
    let (code, lines) = alert_test(&dir.config);
    assert_eq!(code, 1, "{lines:?}");
    let email = line_of(&lines, "email");
    assert!(email.contains("FAILED"), "{email}");
    let webhook = line_of(&lines, "webhook");
    assert!(webhook.ends_with(": sent"), "{webhook}");
    assert_eq!(
        read_messages(maildir.path()).len(),
        1,
        "no mail with no server"
    );
    let got = hooks.received();
    assert_eq!(got.len(), 2);
    assert!(got[1].signature_ok && got[1].accepted(), "{:?}", got[1]);
    hooks.stop();
}

#[test]
fn an_alert_is_acknowledged_with_the_token_only() {
    let dir = DaemonDir::new(&daemon_config(
        true,
        "[alerts.email]\ntransport = \"file\"\ndirectory = \"mail\"\n",
    ));
    let d = Running::start(&dir, START);
    let (header, files) = night_files(OUTGASSING, &[6], 6);
    drop_and_fit(
        &d,
        &dir,
        "nights-00.psv",
        &header,
        &files[0],
        OUTGASSING_OBJECT,
    );
    let alerts = poll_until("the unbound alert", DELIVERY, POLL, || {
        let alerts = all_alerts(&d);
        (!of_rule(&alerts, "unbound").is_empty()).then_some(alerts)
    });
    let id = str_of(of_rule(&alerts, "unbound")[0], "id").to_string();
    let path = format!("/v1/alerts/{id}/ack");
    let by = br#"{"by":"test analyst"}"#.to_vec();

    let (status, body) = d.post(&path, None, "application/json", by.clone());
    assert_eq!(status, 401, "{body}");
    let (status, body) = d.post(&path, Some("not-the-token"), "application/json", by.clone());
    assert_eq!(status, 401, "{body}");
    let unacknowledged = all_alerts(&d);
    assert!(unacknowledged.iter().all(|a| a["acknowledged"].is_null()));

    let (status, body) = d.post(&path, Some(TOKEN), "application/json", by.clone());
    assert_eq!(status, 200, "{body}");
    assert_eq!(body["acknowledged"]["by"], "test analyst");
    let listed = all_alerts(&d);
    let acked = listed
        .iter()
        .find(|a| a["id"] == id.as_str())
        .expect("the alert");
    assert_eq!(acked["acknowledged"]["by"], "test analyst");
    assert_eq!(acked["acknowledged"]["alert_id"], id.as_str());
    assert!(acked["acknowledged"]["at_utc"].as_str().is_some());

    // A second analyst does not overwrite the first.
    let (status, body) = d.post(
        &path,
        Some(TOKEN),
        "application/json",
        br#"{"by":"another analyst"}"#.to_vec(),
    );
    assert_eq!(status, 200, "{body}");
    assert_eq!(body["acknowledged"]["by"], "test analyst");

    // Well formed but never raised: the same object and rule at a
    // solution that does not exist.
    let object_id = str_of(acked, "object_id");
    let (status, body) = d.post(
        &format!("/v1/alerts/{object_id}.99.unbound/ack"),
        Some(TOKEN),
        "application/json",
        by,
    );
    assert_eq!(status, 404, "{body}");

    // Journaled: a restarted daemon still knows who acknowledged it.
    stop_cleanly(d, STOP);
    let d = Running::start(&dir, START);
    let listed = all_alerts(&d);
    let acked = listed
        .iter()
        .find(|a| a["id"] == id.as_str())
        .expect("the alert");
    assert_eq!(acked["acknowledged"]["by"], "test analyst");
    stop_cleanly(d, STOP);
}

/// A relay that accepts and then says nothing: lettre's own timeout
/// bounds the connect only, so the daemon bounds the whole conversation
/// (SMTP_TIMEOUT, 30 s, in service/alerts/email.rs), delivers the webhook
/// beside the mail rather than behind it, and a stop does not wait for the
/// hung send.
#[test]
fn a_silent_mail_relay_holds_up_neither_the_webhook_nor_a_stop() {
    let silent = TcpListener::bind("127.0.0.1:0").expect("a silent relay");
    let port = silent.local_addr().expect("its address").port();
    // Accepted connections are kept open and never answered, as a relay
    // wedged after accept would.
    std::thread::spawn(move || {
        let mut held = Vec::new();
        for connection in silent.incoming() {
            held.push(connection);
        }
    });
    let hooks = WebhookReceiver::start(SECRET.as_bytes());
    let dir = with_secret(&daemon_config(
        true,
        &format!(
            "[alerts]\nretry_first_s = 0.5\nretry_max_s = 2\n{}{}",
            smtp_email(port),
            webhook_table(&hooks.url())
        ),
    ));
    let d = Running::start(&dir, START);
    let (header, files) = night_files(OUTGASSING, &[6], 6);
    drop_and_fit(
        &d,
        &dir,
        "nights-00.psv",
        &header,
        &files[0],
        OUTGASSING_OBJECT,
    );
    // 30 s: SMTP_TIMEOUT of service/alerts/email.rs; the rest is slack.
    let bound = Duration::from_secs(60);
    hooks.wait_until("the webhook despite the silent relay", bound, |r| {
        r.iter().any(|h| h.accepted())
    });
    poll_until("a recorded failure of the mail", bound, POLL, || {
        let alerts = all_alerts(&d);
        let del = delivery(*of_rule(&alerts, "unbound").first()?, "email").clone();
        (del["attempts"].as_u64() >= Some(1) && del["last_error"].is_string()).then_some(())
    });
    stop_cleanly(d, Duration::from_secs(15));
    hooks.stop();
}
