//! The two HTML pages as a person sees them: the real `perihelix serve`
//! binary fed the invented outgassing body's nights
//! (tests/reference/fixtures/synthetic/hyperbolic_outgassing/noisy.psv) in
//! a few files, one solution each, and a real headless Chromium driven
//! over the Chrome DevTools Protocol (tests/common/browser.rs) loading the
//! index and the object's page from the daemon on loopback. Nothing leaves
//! the machine.
//!
//! Checked: both pages load with HTTP 200 and log no error in the browser
//! (console, uncaught exception, failed resource load); the index links
//! the object and the link leads to its page; on that page every plot is
//! an SVG the browser lays out with a nonzero size and at least one data
//! mark drawn inside it, and the 1/a plot has one mark per converged
//! solution the JSON API lists. Full-page screenshots of both pages go to
//! target/page-screenshots/ for a person to look at.
//!
//! Chromium: PERIHELIX_CHROMIUM, else chromium or chromium-browser on PATH
//! (bash tests/reference/setup-chromium.sh installs Debian's); without one
//! the test fails.

mod common;

use std::path::PathBuf;
use std::time::{Duration, Instant};

use common::browser::Browser;
use common::daemon::{
    encode, poll_until, psv_file, psv_nights, DaemonDir, Running, OUTGASSING_PAGE_PLOTS,
};
use common::repo;

const FIXTURE: &str = "tests/reference/fixtures/synthetic/hyperbolic_outgassing/noisy.psv";
const OBJECT: &str = "2026 ZB1";

/// Generous bounds for a loaded 2-core machine; polls and event waits end
/// as soon as the state is reached.
const START: Duration = Duration::from_secs(60);
const FIT: Duration = Duration::from_secs(240);
const POLL: Duration = Duration::from_millis(200);
const CHROMIUM_START: Duration = Duration::from_secs(60);
const LOAD: Duration = Duration::from_secs(60);
const STOP: Duration = Duration::from_secs(30);

const PNG_SIGNATURE: [u8; 8] = [0x89, b'P', b'N', b'G', b'\r', b'\n', 0x1a, b'\n'];

/// Solutions stored so far (0 while the object is unknown).
fn solution_count(d: &Running) -> usize {
    let (status, o) = d.get(&format!("/v1/objects/{}", encode(OBJECT)));
    if status == 200 {
        o["solutions"].as_u64().unwrap_or(0) as usize
    } else {
        0
    }
}

/// Each figure.plot as the browser lays it out: its SVG's box, its data
/// marks, and the marks actually painted inside that box (a mark with no
/// size, hidden, or outside the plot shows the reader nothing).
const FIGURES_JS: &str = r#"(() => {
  const shown = el => {
    const s = getComputedStyle(el);
    return s.display !== 'none' && s.visibility !== 'hidden' && s.opacity !== '0';
  };
  return [...document.querySelectorAll('figure.plot')].map(f => {
    const svg = f.querySelector('svg');
    if (!svg) return { id: f.id, svg: false, width: 0, height: 0, points: 0, drawn: 0 };
    const box = svg.getBoundingClientRect();
    const points = [...svg.querySelectorAll('[class~=point]')];
    const drawn = points.filter(p => {
      const r = p.getBoundingClientRect();
      return shown(p) && r.width > 0 && r.height > 0
        && r.right > box.left && r.left < box.right
        && r.bottom > box.top && r.top < box.bottom;
    });
    return { id: f.id, svg: true, width: box.width, height: box.height,
             points: points.length, drawn: drawn.length };
  });
})()"#;

/// Writes a screenshot under target/page-screenshots/ and checks it is a PNG.
fn save_screenshot(name: &str, png: &[u8]) -> PathBuf {
    assert!(
        png.starts_with(&PNG_SIGNATURE),
        "the {name} screenshot is not a PNG ({} bytes)",
        png.len()
    );
    let dir = repo().join("target/page-screenshots");
    std::fs::create_dir_all(&dir).expect("target/page-screenshots can be made");
    let path = dir.join(name);
    std::fs::write(&path, png).expect("the screenshot is written");
    let back = std::fs::read(&path).expect("the screenshot reads back");
    assert!(
        back.starts_with(&PNG_SIGNATURE),
        "{} is not a PNG",
        path.display()
    );
    println!("screenshot: {} ({} bytes)", path.display(), back.len());
    path
}

#[test]
fn the_pages_load_cleanly_in_a_real_browser_and_their_plots_show_data() {
    let started = Instant::now();
    // A missing browser fails at once, not after the fits.
    let chromium = common::browser::chromium_binary();
    println!("chromium: {}", chromium.display());
    let dir = DaemonDir::new("quiet_period_s = 1\nmax_delay_s = 120\nrescan_interval_s = 2");
    let d = Running::start(&dir, START);

    // Half the nights, a quarter, then the rest: three solutions, each
    // waited for so that none is coalesced with the next, and the plots
    // have a history to draw (the longer arcs fit slower).
    let (header, nights) = psv_nights(&repo().join(FIXTURE));
    let n = nights.len();
    assert!(n >= 3, "{n} nights in the fixture");
    for (k, range) in [0..n / 2, n / 2..3 * n / 4, 3 * n / 4..n]
        .into_iter()
        .enumerate()
    {
        let rows: Vec<String> = nights[range].iter().flat_map(|(_, r)| r.clone()).collect();
        dir.drop_file(&format!("part-{k}.psv"), &psv_file(&header, &rows));
        poll_until(&format!("solution {}", k + 1), FIT, POLL, || {
            (solution_count(&d) > k).then_some(())
        });
    }
    let solutions = d.solutions(OBJECT);
    assert!(solutions.len() >= 3, "{} solutions", solutions.len());
    let converged_now = || {
        d.solutions(OBJECT)
            .iter()
            .filter(|s| s["converged"] == true)
            .count()
    };
    let converged = converged_now();
    println!(
        "{} solutions ({converged} converged) after {:.1?}",
        solutions.len(),
        started.elapsed()
    );

    let mut browser = Browser::launch(CHROMIUM_START);
    let mut page = browser.open_page();

    // The index.
    let index = page.navigate(&d.url("/"), LOAD);
    assert_eq!(index.status, 200, "{}", index.url);
    let errors = page.console_errors();
    assert!(errors.is_empty(), "the index logged errors: {errors:#?}");
    // The object's page is wherever the index's link to it points (its
    // address is the store's id for the object, not necessarily the
    // designation).
    let link = page.evaluate(&format!(
        r#"(() => {{
          const name = {};
          const links = [...document.querySelectorAll('a[href]')];
          const hit = links.find(a => a.pathname.startsWith('/objects/')
                                      && a.textContent.trim() === name);
          return {{ all: links.map(a => a.getAttribute('href')),
                   href: hit ? hit.href : null,
                   path: hit ? hit.pathname : null }};
        }})()"#,
        serde_json::to_string(OBJECT).expect("a JSON string")
    ));
    let (Some(href), Some(object_path)) = (link["href"].as_str(), link["path"].as_str()) else {
        panic!("the index has no link named {OBJECT} to an object page: {link}");
    };
    let (href, object_path) = (href.to_string(), object_path.to_string());
    println!("the index links {OBJECT} to {object_path}");
    save_screenshot("index.png", &page.screenshot_png());

    // Following the link.
    page.clear_console_errors();
    let object = page.navigate(&href, LOAD);
    assert_eq!(object.status, 200, "{}", object.url);
    let errors = page.console_errors();
    assert!(
        errors.is_empty(),
        "the object page logged errors: {errors:#?}"
    );
    let here = page.evaluate(
        "({ path: location.pathname, h1: (document.querySelector('h1') || {}).textContent || null })",
    );
    assert_eq!(here["path"].as_str(), Some(object_path.as_str()), "{here}");
    assert_eq!(here["h1"].as_str(), Some(OBJECT), "{here}");

    let figures = page.evaluate(FIGURES_JS);
    let figures = figures.as_array().expect("a list of figures");
    let ids: Vec<&str> = figures.iter().filter_map(|f| f["id"].as_str()).collect();
    println!("figures: {ids:?}");
    for f in figures {
        println!(
            "  {}: {}x{} px, {} marks, {} drawn inside",
            f["id"], f["width"], f["height"], f["points"], f["drawn"]
        );
    }
    // Any plots beyond these are checked as well.
    for want in OUTGASSING_PAGE_PLOTS {
        assert!(ids.contains(&want), "no figure {want} among {ids:?}");
    }
    for f in figures {
        let id = &f["id"];
        let size = |k: &str| f[k].as_f64().unwrap_or(0.0);
        assert_eq!(f["svg"], true, "figure {id} holds no svg");
        assert!(
            size("width") > 0.0 && size("height") > 0.0,
            "figure {id}'s svg is laid out with no area: {f}"
        );
        assert!(
            f["points"].as_u64() > Some(0),
            "figure {id} has no data mark: {f}"
        );
        assert!(
            f["drawn"].as_u64() > Some(0),
            "figure {id} draws none of its marks inside the plot: {f}"
        );
    }
    let inverse_a = figures
        .iter()
        .find(|f| f["id"] == "plot-inverse-a")
        .expect("plot-inverse-a was found above");
    assert!(converged > 0, "no converged solution to plot");
    // Nothing is due after the last file, so the store is as it was when
    // the page was drawn; were it not, the count below would mislead.
    assert_eq!(
        converged_now(),
        converged,
        "a solution was stored while the page was read"
    );
    assert_eq!(
        inverse_a["points"].as_u64(),
        Some(converged as u64),
        "1/a marks against converged solutions: {inverse_a}"
    );
    save_screenshot("object.png", &page.screenshot_png());

    page.close();
    browser.close();
    let status = d.stop(STOP);
    assert!(status.success(), "exit status {status}");
    println!("page test took {:.1?}", started.elapsed());
}
