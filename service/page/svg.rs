//! A small SVG chart writer for the pages: points with error bars, joined or
//! not, dashed reference lines and a legend, drawn on the server so a page
//! needs no JavaScript and prints as it shows.
//!
//! Every drawn datum carries its value (`data-x`, `data-y`, `data-err`)
//! beside its pixel position (`data-cx`, `data-cy`), and the plot group
//! carries its domains, so a test (or a curious analyst) can check the
//! picture against the numbers by parsing it. Marks differ in shape as well
//! as colour, so a series stays identifiable on a grey printout and for
//! colour-blind readers.

use std::fmt::{self, Write as _};

use crate::astro::time::UtcTime;

/// Okabe, M. & Ito, K. (2008), "Color Universal Design (CUD): how to make
/// figures and presentations that are friendly to colorblind people",
/// <https://jfly.uni-koeln.de/color/>: their eight colours, in their order
/// (black, orange, sky blue, bluish green, yellow, blue, vermillion,
/// reddish purple).
pub const OKABE_ITO: [&str; 8] = [
    "#000000", "#E69F00", "#56B4E9", "#009E73", "#F0E442", "#0072B2", "#D55E00", "#CC79A7",
];

/// One of the Okabe & Ito colours; the discriminant is its index in
/// [`OKABE_ITO`].
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Colour {
    Black = 0,
    Orange = 1,
    SkyBlue = 2,
    BluishGreen = 3,
    Yellow = 4,
    Blue = 5,
    Vermillion = 6,
    ReddishPurple = 7,
}

impl Colour {
    /// The order series take colours in. Yellow is left out: on white paper
    /// it is too faint for a mark (it stays available to a caller who asks).
    pub const SERIES_ORDER: [Colour; 7] = [
        Colour::Black,
        Colour::Blue,
        Colour::Vermillion,
        Colour::BluishGreen,
        Colour::ReddishPurple,
        Colour::Orange,
        Colour::SkyBlue,
    ];

    pub fn hex(self) -> &'static str {
        OKABE_ITO[self as usize]
    }
}

/// The shape of a data mark; one per station in the residual plots.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Mark {
    Circle,
    Square,
    Triangle,
    Diamond,
    /// A plus sign drawn as a closed outline, so it can be hollow too.
    Cross,
}

impl Mark {
    pub const ALL: [Mark; 5] = [
        Mark::Circle,
        Mark::Square,
        Mark::Triangle,
        Mark::Diamond,
        Mark::Cross,
    ];

    pub fn name(self) -> &'static str {
        match self {
            Mark::Circle => "circle",
            Mark::Square => "square",
            Mark::Triangle => "triangle",
            Mark::Diamond => "diamond",
            Mark::Cross => "cross",
        }
    }
}

/// How a series is drawn.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Style {
    pub mark: Mark,
    pub colour: Colour,
    /// Consecutive drawable points joined by a line (a time series); a
    /// skipped point breaks the line rather than bridging the gap.
    pub joined: bool,
}

impl Style {
    /// The `index`-th series' style: shape and colour both change, so two
    /// series never differ by colour alone.
    pub fn nth(index: usize, joined: bool) -> Self {
        Self {
            mark: Mark::ALL[index % Mark::ALL.len()],
            colour: Colour::SERIES_ORDER[index % Colour::SERIES_ORDER.len()],
            joined,
        }
    }
}

/// One datum. A point whose x, y or error is not finite (or whose error is
/// negative) is not drawn and is counted in the chart's `<desc>`.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Point {
    pub x: f64,
    pub y: f64,
    /// Half-length of the error bar (one sigma, in y's units).
    pub y_err: Option<f64>,
    /// Drawn as an outline, e.g. an observation the fit rejected.
    pub hollow: bool,
}

impl Point {
    pub fn new(x: f64, y: f64) -> Self {
        Self {
            x,
            y,
            y_err: None,
            hollow: false,
        }
    }

    pub fn with_err(self, y_err: f64) -> Self {
        Self {
            y_err: Some(y_err),
            ..self
        }
    }

    pub fn hollow(self) -> Self {
        Self {
            hollow: true,
            ..self
        }
    }

    fn is_drawable(&self) -> bool {
        self.x.is_finite()
            && self.y.is_finite()
            && self.y_err.is_none_or(|e| e.is_finite() && e >= 0.0)
    }

    fn y_extent(&self) -> (f64, f64) {
        let e = self.y_err.unwrap_or(0.0);
        (clamp_finite(self.y - e), clamp_finite(self.y + e))
    }
}

#[derive(Debug, Clone, PartialEq)]
pub struct Series {
    pub label: String,
    pub points: Vec<Point>,
    pub style: Style,
}

/// What the x values are.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Axis {
    Linear,
    /// x is days since MJD `epoch_mjd` (UTC days, MJD 0 = 1858-11-17 0h);
    /// ticks fall on whole MJDs and read as ISO dates (YYYY-MM-DD). A
    /// fractional epoch is allowed (J2000 is MJD 51544.5).
    Time {
        epoch_mjd: f64,
    },
}

/// How y values map onto the plot's height.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum YScale {
    Linear,
    /// Whole decades, for a quantity that spans orders of magnitude (how
    /// far a prediction moved, from degrees early to arcsec later). Values
    /// at or below zero cannot be placed and are skipped; error bars are
    /// not drawn. The marks' `data-y` (and the plot's `data-y-domain`)
    /// then hold log10 of the value, as the plot's `data-y-scale` says.
    Log10,
}

/// A second row of x tick labels along the top of the plot, reading
/// `x - origin` at the primary ticks (e.g. arc length in days when `origin`
/// is the first observation).
#[derive(Debug, Clone, PartialEq)]
pub struct SecondaryAxis {
    pub label: String,
    pub origin: f64,
}

#[derive(Debug, Clone, PartialEq)]
pub struct Chart {
    pub title: String,
    /// With units, e.g. "date (UTC)"; an empty label is refused.
    pub x_label: String,
    /// With units, e.g. "1/a (1/au)"; an empty label is refused.
    pub y_label: String,
    pub series: Vec<Series>,
    /// Dashed, labelled horizontal lines (zero, an alert threshold).
    pub hlines: Vec<(f64, String)>,
    pub x_axis: Axis,
    pub secondary_x: Option<SecondaryAxis>,
    pub y_scale: YScale,
    pub width: u32,
    pub height: u32,
}

impl Chart {
    /// A 640 x 360 px chart with a linear x axis and nothing in it yet.
    pub fn new(title: &str, x_label: &str, y_label: &str) -> Self {
        Self {
            title: title.to_string(),
            x_label: x_label.to_string(),
            y_label: y_label.to_string(),
            series: Vec::new(),
            hlines: Vec::new(),
            x_axis: Axis::Linear,
            secondary_x: None,
            y_scale: YScale::Linear,
            width: 640,
            height: 360,
        }
    }
}

#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum ChartError {
    #[error("chart {field} is empty: every chart needs a title, axis labels with units and named series and reference lines")]
    EmptyText { field: String },
    #[error("chart {field} is {value}, not a finite number")]
    NotFinite { field: String, value: f64 },
    #[error("a chart of {width} x {height} px leaves a plot area of {plot_width:.0} x {plot_height:.0} px, below the {MIN_PLOT_WIDTH} x {MIN_PLOT_HEIGHT} px that can be read")]
    TooSmall {
        width: u32,
        height: u32,
        plot_width: f64,
        plot_height: f64,
    },
}

/// Below this a plot cannot show a handful of ticks legibly.
const MIN_PLOT_WIDTH: f64 = 80.0;
const MIN_PLOT_HEIGHT: f64 = 60.0;

/// Maps `value` linearly from `domain` onto `range` (either may be reversed;
/// the y axis uses a reversed range so larger values sit higher). A zero-width
/// domain maps everything to the middle of the range.
pub fn scale(value: f64, domain: (f64, f64), range: (f64, f64)) -> f64 {
    // Halving first keeps the differences finite for values near f64::MAX;
    // for ordinary numbers it changes no bit of the result.
    let width = domain.1 / 2.0 - domain.0 / 2.0;
    if width == 0.0 {
        return range.0 / 2.0 + range.1 / 2.0;
    }
    let t = (value / 2.0 - domain.0 / 2.0) / width;
    range.0 + t * (range.1 - range.0)
}

/// A step of `n` x 10^`k`, `n` in {1, 2, 5}: kept as integers so tick
/// values come out as the nearest doubles to their decimals (0.6, not
/// 0.6000000000000001).
#[derive(Debug, Clone, Copy, PartialEq)]
struct Step {
    n: i64,
    k: i32,
}

impl Step {
    fn value(self) -> f64 {
        self.at(1.0)
    }

    fn at(self, index: f64) -> f64 {
        let units = index * self.n as f64;
        let tick = if self.k >= 0 {
            units * 10f64.powi(self.k)
        } else {
            units / 10f64.powi(-self.k)
        };
        tick + 0.0 // -0.0 would print as "-0"
    }

    fn decimals(self) -> usize {
        usize::try_from(-self.k).unwrap_or(0)
    }
}

/// The smallest 1-2-5 step that splits `span` into at most about `target`
/// intervals.
fn nice_step(span: f64, target: usize) -> Option<Step> {
    let raw = span / target.max(1) as f64;
    if !(raw.is_finite() && raw > 0.0) {
        return None;
    }
    let k = raw.log10().floor() as i32;
    let norm = raw / 10f64.powi(k);
    // A little slack so that a raw step of exactly 0.2 (which log10 and the
    // division may leave a hair above 2) stays 0.2.
    let slack = 1e-9;
    Some(match norm {
        n if n <= 1.0 + slack => Step { n: 1, k },
        n if n <= 2.0 + slack => Step { n: 2, k },
        n if n <= 5.0 + slack => Step { n: 5, k },
        _ => Step { n: 1, k: k + 1 },
    })
}

/// More ticks than this means the step lost to rounding (a tiny span far
/// from zero); the axis then falls back to its two ends.
const MAX_TICKS: f64 = 1000.0;

/// Multiples of `step` from the last at or below `lo` to the first at or
/// above `hi` (to a billionth of a step, so rounding in `lo / step` cannot
/// add a tick).
fn ticks_with(lo: f64, hi: f64, step: Step) -> Option<Vec<f64>> {
    let s = step.value();
    let first = (lo / s + 1e-9).floor();
    let last = (hi / s - 1e-9).ceil();
    if !(first.is_finite() && last.is_finite()) || last - first > MAX_TICKS || last <= first {
        return None;
    }
    let ticks: Vec<f64> = (0..=(last - first) as i64)
        .map(|i| step.at(first + i as f64))
        .collect();
    let increasing = ticks.windows(2).all(|w| w[0] < w[1]);
    (increasing && ticks.iter().all(|t| t.is_finite())).then_some(ticks)
}

/// "Nice" tick values enclosing `min..max`: multiples of a 1, 2 or 5 x 10^k
/// step giving at most about `target` intervals. A zero range is widened
/// first, so the result always has at least two distinct values; non-finite
/// input gives none.
pub fn nice_ticks(min: f64, max: f64, target: usize) -> Vec<f64> {
    if !(min.is_finite() && max.is_finite()) {
        return Vec::new();
    }
    let (lo, hi) = widen_if_degenerate(min.min(max), min.max(max), None);
    step_for(lo, hi, target, false)
        .and_then(|step| ticks_with(lo, hi, step))
        .unwrap_or_else(|| vec![lo, hi])
}

/// The 1-2-5 step for `lo..hi`, at least 1 if `whole` (whole days on a
/// time axis, so no two ticks read as the same date). A span that
/// overflows gives none.
fn step_for(lo: f64, hi: f64, target: usize, whole: bool) -> Option<Step> {
    let step = nice_step(hi - lo, target)?;
    Some(if whole && step.k < 0 {
        Step { n: 1, k: 0 }
    } else {
        step
    })
}

fn clamp_finite(v: f64) -> f64 {
    v.clamp(-f64::MAX, f64::MAX)
}

/// A zero (or vanishing) range cannot be scaled; open it around its centre
/// by `half_width`, or by a tenth of the centre's size, or by 1.
fn widen_if_degenerate(lo: f64, hi: f64, half_width: Option<f64>) -> (f64, f64) {
    let half_span = hi / 2.0 - lo / 2.0;
    let size = lo.abs().max(hi.abs());
    if half_span > size * 5e-13 && half_span > 1e-200 {
        return (lo, hi);
    }
    let centre = lo / 2.0 + hi / 2.0;
    let tenth = centre.abs() * 0.1;
    let delta = half_width.unwrap_or(if tenth > 1e-200 { tenth } else { 1.0 });
    (clamp_finite(centre - delta), clamp_finite(centre + delta))
}

/// Five per cent of the span on each side, so no mark sits on an axis line.
fn padded(lo: f64, hi: f64) -> (f64, f64) {
    let margin = (hi / 2.0 - lo / 2.0) * 0.1;
    (clamp_finite(lo - margin), clamp_finite(hi + margin))
}

/// The UTC date of MJD `mjd` as YYYY-MM-DD, for years 1 to 9999 (beyond
/// them the four-digit form does not hold).
pub fn iso_date_of_mjd(mjd: i64) -> Option<String> {
    // 0001-01-01 and 9999-12-31 as MJDs (Python datetime, from 1858-11-17).
    const FIRST: i64 = -678_575;
    const LAST: i64 = 2_973_483;
    if !(FIRST..=LAST).contains(&mjd) {
        return None;
    }
    let (year, month, day) = UtcTime::from_mjd_seconds(mjd, 0.0).ok()?.calendar_date();
    Some(format!("{year:04}-{month:02}-{day:02}"))
}

/// An axis ready to draw: its domain (the outermost ticks) and labelled ticks.
#[derive(Debug, Clone, PartialEq)]
struct AxisPlan {
    domain: (f64, f64),
    ticks: Vec<f64>,
    labels: Vec<String>,
    /// Decimals that the secondary labels need (those of the step).
    decimals: Option<usize>,
}

fn plan_linear(lo: f64, hi: f64, target: usize) -> AxisPlan {
    let (lo, hi) = padded_range(lo, hi, None);
    match step_for(lo, hi, target, false).and_then(|s| Some((s, ticks_with(lo, hi, s)?))) {
        Some((step, ticks)) => AxisPlan {
            domain: (ticks[0], ticks[ticks.len() - 1]),
            labels: number_labels(&ticks),
            ticks,
            decimals: Some(step.decimals()),
        },
        None => two_end_axis(lo, hi, |t| format!("{t:.3e}")),
    }
}

/// `lo..hi` are log10 values: ticks on whole decades, labelled with the
/// values themselves (0.1, 1, 10).
fn plan_decades(lo: f64, hi: f64, target: usize) -> AxisPlan {
    let (lo, hi) = padded_range(lo, hi, Some(0.5));
    match step_for(lo, hi, target, true).and_then(|s| ticks_with(lo, hi, s)) {
        Some(ticks) => {
            let values: Vec<f64> = ticks.iter().map(|t| decade(*t)).collect();
            AxisPlan {
                domain: (ticks[0], ticks[ticks.len() - 1]),
                labels: number_labels(&values),
                ticks,
                decimals: None,
            }
        }
        None => two_end_axis(lo, hi, |t| format!("{:.3e}", 10f64.powf(t))),
    }
}

/// 10^k for a whole k, as the nearest double to its decimal (0.01, not
/// what powf may leave a unit off): powers up to 10^22 are exact, and
/// one division of exact values rounds correctly.
fn decade(k: f64) -> f64 {
    let k = k.round().clamp(-300.0, 300.0) as i32;
    if k >= 0 {
        10f64.powi(k)
    } else {
        1.0 / 10f64.powi(-k)
    }
}

fn plan_time(lo: f64, hi: f64, target: usize, epoch_mjd: f64) -> AxisPlan {
    let (lo, hi) = padded_range(
        clamp_finite(lo + epoch_mjd),
        clamp_finite(hi + epoch_mjd),
        Some(1.0),
    );
    let date =
        |mjd: f64| iso_date_of_mjd(mjd.round() as i64).unwrap_or_else(|| format!("MJD {mjd:.0}"));
    // A time axis spans the data (padded), not the outermost ticks: dates
    // fall on multiples of the step, so enclosing ticks could add up to a
    // whole step of empty days before the first observation. Only when
    // fewer than two dates fall inside (under a day of data) does the axis
    // reach out to the enclosing midnights.
    let planned = step_for(lo, hi, target, true).and_then(|s| {
        let all = ticks_with(lo, hi, s)?;
        let inside: Vec<f64> = all
            .iter()
            .copied()
            .filter(|t| (lo..=hi).contains(t))
            .collect();
        Some(if inside.len() >= 2 {
            (s, (lo, hi), inside)
        } else {
            (s, (all[0], all[all.len() - 1]), all)
        })
    });
    let mut plan = match planned {
        Some((step, domain, mjds)) => AxisPlan {
            domain,
            labels: mjds.iter().map(|&m| date(m)).collect(),
            ticks: mjds,
            decimals: Some(step.decimals()),
        },
        None => two_end_axis(lo, hi, date),
    };
    // Back from MJD to the caller's x.
    plan.domain = (plan.domain.0 - epoch_mjd, plan.domain.1 - epoch_mjd);
    plan.ticks.iter_mut().for_each(|t| *t -= epoch_mjd);
    plan
}

fn padded_range(lo: f64, hi: f64, degenerate_half_width: Option<f64>) -> (f64, f64) {
    let (lo, hi) = widen_if_degenerate(lo, hi, degenerate_half_width);
    padded(lo, hi)
}

fn two_end_axis(lo: f64, hi: f64, label: impl Fn(f64) -> String) -> AxisPlan {
    AxisPlan {
        domain: (lo, hi),
        ticks: vec![lo, hi],
        labels: vec![label(lo), label(hi)],
        decimals: None,
    }
}

/// Plain decimals where every tick's stay short, exponent form for the
/// whole axis otherwise (one axis mixing 8e-4 and 0.001 reads badly). Tick
/// values are the nearest doubles to short decimals, so the shortest
/// round-trip form is that decimal.
fn number_labels(ticks: &[f64]) -> Vec<String> {
    let plain = ticks
        .iter()
        .all(|&v| v == 0.0 || (1e-3..1e6).contains(&v.abs()));
    ticks
        .iter()
        .map(|&v| match v {
            0.0 => "0".to_string(),
            _ if plain => format!("{v}"),
            _ => format!("{v:e}"),
        })
        .collect()
}

/// A value as a data attribute: the shortest text that reads back as the
/// same double.
fn data_num(v: f64) -> String {
    format!("{:?}", v + 0.0)
}

/// A pixel coordinate: a ten-millionth of a pixel is far below anything
/// visible and keeps the text short.
struct Px(f64);

impl fmt::Display for Px {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let text = format!("{:.7}", self.0 + 0.0);
        let text = text.trim_end_matches('0').trim_end_matches('.');
        f.write_str(if text == "-0" { "0" } else { text })
    }
}

/// Text for XML character data and attribute values. Control characters
/// XML 1.0 forbids become U+FFFD so the document always parses.
fn esc(text: &str) -> String {
    let mut out = String::with_capacity(text.len());
    for c in text.chars() {
        match c {
            '&' => out.push_str("&amp;"),
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '"' => out.push_str("&quot;"),
            '\'' => out.push_str("&apos;"),
            '\t' | '\n' | '\r' => out.push(c),
            c if c < ' ' || ('\u{7f}'..='\u{9f}').contains(&c) => out.push('\u{fffd}'),
            '\u{fffe}' | '\u{ffff}' => out.push('\u{fffd}'),
            c => out.push(c),
        }
    }
    out
}

/// Average glyph width of a sans-serif face, as a share of its size: enough
/// to reserve room for labels without measuring fonts.
fn text_width(text: &str, font_px: f64) -> f64 {
    text.chars().count() as f64 * 0.6 * font_px
}

const TITLE_PX: f64 = 15.0;
const LABEL_PX: f64 = 12.0;
const TICK_PX: f64 = 11.0;
const MARK_R: f64 = 4.0;
const LEGEND_ROW: f64 = 18.0;
const AXIS_COLOUR: &str = "#000000";
const GRID_COLOUR: &str = "#E6E6E6";
const REFERENCE_COLOUR: &str = "#555555";

/// The plot area's edges in pixels and where the legend rows go.
#[derive(Debug, Clone, PartialEq)]
struct Layout {
    left: f64,
    right: f64,
    top: f64,
    bottom: f64,
    legend_rows: Vec<Vec<usize>>,
}

impl Layout {
    fn x_range(&self) -> (f64, f64) {
        (self.left, self.right)
    }

    /// Reversed: larger y values are drawn higher.
    fn y_range(&self) -> (f64, f64) {
        (self.bottom, self.top)
    }
}

/// The series' drawable points, in order, with `None` where a point was
/// skipped (so a joined line breaks there).
struct Drawable<'a> {
    series: &'a Series,
    points: Vec<Option<&'a Point>>,
}

impl Chart {
    /// The chart as a standalone SVG document, or why it cannot be drawn.
    pub fn to_svg(&self) -> Result<String, ChartError> {
        self.validate()?;
        match self.y_scale {
            YScale::Linear => self.draw(),
            // Drawn as a linear chart of log10(y) whose y ticks are decades.
            YScale::Log10 => self.in_log_space().draw(),
        }
    }

    /// The same chart with every y (and reference line) as its log10;
    /// values that have none become NaN, so they are skipped and counted.
    fn in_log_space(&self) -> Self {
        let log = |y: f64| if y > 0.0 { y.log10() } else { f64::NAN };
        Self {
            series: self
                .series
                .iter()
                .map(|s| Series {
                    points: s
                        .points
                        .iter()
                        .map(|p| Point {
                            y: log(p.y),
                            y_err: None,
                            ..*p
                        })
                        .collect(),
                    ..s.clone()
                })
                .collect(),
            hlines: self
                .hlines
                .iter()
                .filter(|(v, _)| *v > 0.0)
                .map(|(v, l)| (v.log10(), l.clone()))
                .collect(),
            ..self.clone()
        }
    }

    fn draw(&self) -> Result<String, ChartError> {
        let drawable: Vec<Drawable> = self
            .series
            .iter()
            .map(|series| Drawable {
                series,
                points: series
                    .points
                    .iter()
                    .map(|p| p.is_drawable().then_some(p))
                    .collect(),
            })
            .collect();
        let (layout, x_plan, y_plan) = self.plan(&drawable)?;
        let mut out = Out(String::new());
        self.write_document(&mut out, &drawable, &layout, &x_plan, &y_plan);
        Ok(out.0)
    }

    fn validate(&self) -> Result<(), ChartError> {
        require_text("title", &self.title)?;
        require_text("x axis label", &self.x_label)?;
        require_text("y axis label", &self.y_label)?;
        for (i, s) in self.series.iter().enumerate() {
            require_text(&format!("series {} label", i + 1), &s.label)?;
        }
        for (i, (value, label)) in self.hlines.iter().enumerate() {
            require_text(&format!("reference line {} label", i + 1), label)?;
            require_finite(&format!("reference line {label:?} value"), *value)?;
        }
        if let Axis::Time { epoch_mjd } = self.x_axis {
            require_finite("time axis epoch (MJD)", epoch_mjd)?;
        }
        if let Some(secondary) = &self.secondary_x {
            require_text("secondary x axis label", &secondary.label)?;
            require_finite("secondary x axis origin", secondary.origin)?;
        }
        Ok(())
    }

    fn plan(&self, drawable: &[Drawable]) -> Result<(Layout, AxisPlan, AxisPlan), ChartError> {
        let (width, height) = (f64::from(self.width), f64::from(self.height));
        let legend_rows = self.legend_rows(width);
        let top = 34.0
            + if self.secondary_x.is_some() {
                34.0
            } else {
                0.0
            };
        let bottom_margin = match legend_rows.len() {
            0 => 46.0,
            rows => 58.0 + (rows - 1) as f64 * LEGEND_ROW + 10.0,
        };
        let bottom = height - bottom_margin;
        let right = width
            - match self.x_axis {
                Axis::Time { .. } => 40.0,
                Axis::Linear => 24.0,
            };

        let (y_lo, y_hi) = self.y_data_range(drawable);
        let y_target = ((bottom - top) / 45.0) as usize;
        let y_plan = match self.y_scale {
            YScale::Linear => plan_linear(y_lo, y_hi, y_target),
            YScale::Log10 => plan_decades(y_lo, y_hi, y_target),
        };
        let widest = y_plan
            .labels
            .iter()
            .map(|l| text_width(l, TICK_PX))
            .fold(0.0, f64::max);
        let left = 34.0 + widest + 8.0;
        self.check_area(right - left, bottom - top)?;

        let (x_lo, x_hi) = x_data_range(drawable);
        let x_plan = match self.x_axis {
            Axis::Linear => plan_linear(x_lo, x_hi, ((right - left) / 80.0) as usize),
            Axis::Time { epoch_mjd } => {
                plan_time(x_lo, x_hi, ((right - left) / 110.0) as usize, epoch_mjd)
            }
        };
        let layout = Layout {
            left,
            right,
            top,
            bottom,
            legend_rows,
        };
        Ok((layout, x_plan, y_plan))
    }

    fn check_area(&self, plot_width: f64, plot_height: f64) -> Result<(), ChartError> {
        if plot_width >= MIN_PLOT_WIDTH && plot_height >= MIN_PLOT_HEIGHT {
            return Ok(());
        }
        Err(ChartError::TooSmall {
            width: self.width,
            height: self.height,
            plot_width: plot_width.max(0.0),
            plot_height: plot_height.max(0.0),
        })
    }

    /// Error bars and reference lines are part of the picture, so they are
    /// part of the range; with nothing drawable the axis spans 0..1.
    fn y_data_range(&self, drawable: &[Drawable]) -> (f64, f64) {
        let ends = drawable
            .iter()
            .flat_map(|d| d.points.iter().flatten())
            .map(|p| p.y_extent())
            .chain(self.hlines.iter().map(|(v, _)| (*v, *v)));
        fold_range(ends)
    }

    /// Greedy rows of legend entries, each entry as wide as its label.
    fn legend_rows(&self, width: f64) -> Vec<Vec<usize>> {
        let available = width - 24.0;
        let mut rows: Vec<Vec<usize>> = Vec::new();
        let mut used = f64::INFINITY;
        for (i, s) in self.series.iter().enumerate() {
            let entry = legend_entry_width(s);
            match rows.last_mut() {
                Some(row) if used + entry <= available => row.push(i),
                _ => {
                    rows.push(vec![i]);
                    used = 0.0;
                }
            }
            used += entry;
        }
        rows
    }
}

fn legend_entry_width(series: &Series) -> f64 {
    30.0 + text_width(&series.label, LABEL_PX) + 18.0
}

fn x_data_range(drawable: &[Drawable]) -> (f64, f64) {
    fold_range(
        drawable
            .iter()
            .flat_map(|d| d.points.iter().flatten())
            .map(|p| (p.x, p.x)),
    )
}

fn fold_range(ends: impl Iterator<Item = (f64, f64)>) -> (f64, f64) {
    let (lo, hi) = ends.fold((f64::INFINITY, f64::NEG_INFINITY), |(lo, hi), (a, b)| {
        (lo.min(a), hi.max(b))
    });
    if lo <= hi {
        (lo, hi)
    } else {
        (0.0, 1.0)
    }
}

fn require_text(field: &str, text: &str) -> Result<(), ChartError> {
    if text.trim().is_empty() {
        return Err(ChartError::EmptyText {
            field: field.to_string(),
        });
    }
    Ok(())
}

fn require_finite(field: &str, value: f64) -> Result<(), ChartError> {
    if !value.is_finite() {
        return Err(ChartError::NotFinite {
            field: field.to_string(),
            value,
        });
    }
    Ok(())
}

/// The document being written. Writing into a `String` cannot fail, so the
/// `fmt::Result` is dropped here once rather than threaded everywhere.
struct Out(String);

impl Out {
    fn line(&mut self, args: fmt::Arguments<'_>) {
        let _ = self.0.write_fmt(args);
        self.0.push('\n');
    }
}

/// Fill and stroke of a mark.
struct Paint<'a> {
    colour: &'a str,
    hollow: bool,
}

impl fmt::Display for Paint<'_> {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        if self.hollow {
            // White rather than none: a joined line must not show through
            // and make a rejected point look accepted.
            write!(
                f,
                r#"fill="white" stroke="{}" stroke-width="1.5""#,
                self.colour
            )
        } else {
            write!(
                f,
                r#"fill="{0}" stroke="{0}" stroke-width="1""#,
                self.colour
            )
        }
    }
}

/// Writes a mark centred on (cx, cy); `attrs` carries its class and data.
fn write_mark(out: &mut Out, mark: Mark, cx: f64, cy: f64, paint: &Paint, attrs: &str) {
    let centre = format!(r#"data-cx="{}" data-cy="{}""#, Px(cx), Px(cy));
    if mark == Mark::Circle {
        out.line(format_args!(
            r#"<circle {attrs} {centre} cx="{}" cy="{}" r="{}" {paint}/>"#,
            Px(cx),
            Px(cy),
            Px(MARK_R)
        ));
        return;
    }
    let d: String = mark_outline(mark)
        .iter()
        .enumerate()
        .map(|(i, (dx, dy))| {
            let command = if i == 0 { "M" } else { "L" };
            format!("{command}{} {} ", Px(cx + dx), Px(cy + dy))
        })
        .collect();
    out.line(format_args!(r#"<path {attrs} {centre} d="{d}Z" {paint}/>"#));
}

/// Vertex offsets from the centre, each outline symmetric about it so the
/// centre of its bounding box is the datum.
fn mark_outline(mark: Mark) -> Vec<(f64, f64)> {
    let (a, t) = (MARK_R + 0.5, 1.5);
    match mark {
        Mark::Circle => Vec::new(),
        Mark::Square => vec![(-3.5, -3.5), (3.5, -3.5), (3.5, 3.5), (-3.5, 3.5)],
        Mark::Triangle => vec![(0.0, -MARK_R), (a, MARK_R), (-a, MARK_R)],
        Mark::Diamond => vec![(0.0, -5.0), (5.0, 0.0), (0.0, 5.0), (-5.0, 0.0)],
        Mark::Cross => vec![
            (-t, -a),
            (t, -a),
            (t, -t),
            (a, -t),
            (a, t),
            (t, t),
            (t, a),
            (-t, a),
            (-t, t),
            (-a, t),
            (-a, -t),
            (-t, -t),
        ],
    }
}

impl Chart {
    fn write_document(
        &self,
        out: &mut Out,
        drawable: &[Drawable],
        layout: &Layout,
        x: &AxisPlan,
        y: &AxisPlan,
    ) {
        let (w, h) = (self.width, self.height);
        out.line(format_args!(
            r#"<svg xmlns="http://www.w3.org/2000/svg" viewBox="0 0 {w} {h}" width="{w}" height="{h}" role="img" class="chart" font-family="sans-serif">"#
        ));
        out.line(format_args!("<title>{}</title>", esc(&self.title)));
        self.write_desc(out, drawable);
        out.line(format_args!(
            r#"<rect class="background" x="0" y="0" width="{w}" height="{h}" fill="white"/>"#
        ));
        out.line(format_args!(
            r#"<text class="title" x="{}" y="22" font-size="{TITLE_PX}" font-weight="bold" text-anchor="middle" fill="{AXIS_COLOUR}">{}</text>"#,
            Px(f64::from(w) / 2.0),
            esc(&self.title)
        ));
        write_grid(out, layout, x, y);
        self.write_x_axis(out, layout, x);
        self.write_secondary_axis(out, layout, x);
        self.write_y_axis(out, layout, y);
        self.write_plot(out, drawable, layout, x, y);
        self.write_legend(out, layout);
        out.line(format_args!("</svg>"));
    }

    fn write_desc(&self, out: &mut Out, drawable: &[Drawable]) {
        let drawn = count_drawn(drawable);
        let skipped = count_skipped(drawable);
        out.line(format_args!(
            r#"<desc data-skipped="{skipped}">{}: {drawn} points in {} series, {} against {}; {skipped} points skipped (not finite)</desc>"#,
            esc(&self.title),
            self.series.len(),
            esc(&self.y_label),
            esc(&self.x_label),
        ));
    }

    fn write_x_axis(&self, out: &mut Out, layout: &Layout, x: &AxisPlan) {
        let (l, r, b) = (layout.left, layout.right, layout.bottom);
        out.line(format_args!(
            r#"<g class="axis x" font-size="{TICK_PX}" fill="{AXIS_COLOUR}" stroke="{AXIS_COLOUR}">"#
        ));
        write_axis_line(out, (l, b), (r, b));
        for (tick, label) in x.ticks.iter().zip(&x.labels) {
            let px = scale(*tick, x.domain, layout.x_range());
            write_tick(
                out,
                *tick,
                (px, b),
                (px, b + 5.0),
                (px, b + 17.0),
                "middle",
                label,
            );
        }
        write_axis_label(out, ((l + r) / 2.0, b + 36.0), &self.x_label);
        out.line(format_args!("</g>"));
    }

    fn write_secondary_axis(&self, out: &mut Out, layout: &Layout, x: &AxisPlan) {
        let Some(secondary) = &self.secondary_x else {
            return;
        };
        let (l, r, t) = (layout.left, layout.right, layout.top);
        out.line(format_args!(
            r#"<g class="axis x2" font-size="{TICK_PX}" fill="{AXIS_COLOUR}" stroke="{AXIS_COLOUR}" data-origin="{}">"#,
            data_num(secondary.origin)
        ));
        write_axis_line(out, (l, t), (r, t));
        for tick in &x.ticks {
            let px = scale(*tick, x.domain, layout.x_range());
            let label = secondary_label(tick - secondary.origin, x.decimals);
            write_tick(
                out,
                *tick,
                (px, t),
                (px, t - 5.0),
                (px, t - 8.0),
                "middle",
                &label,
            );
        }
        write_axis_label(out, ((l + r) / 2.0, t - 24.0), &secondary.label);
        out.line(format_args!("</g>"));
    }

    fn write_y_axis(&self, out: &mut Out, layout: &Layout, y: &AxisPlan) {
        let (l, t, b) = (layout.left, layout.top, layout.bottom);
        out.line(format_args!(
            r#"<g class="axis y" font-size="{TICK_PX}" fill="{AXIS_COLOUR}" stroke="{AXIS_COLOUR}">"#
        ));
        write_axis_line(out, (l, b), (l, t));
        for (tick, label) in y.ticks.iter().zip(&y.labels) {
            let py = scale(*tick, y.domain, layout.y_range());
            write_tick(
                out,
                *tick,
                (l - 5.0, py),
                (l, py),
                (l - 8.0, py + 4.0),
                "end",
                label,
            );
        }
        // Rotated a quarter turn: the text's (x, y) is the page's (y, -x).
        out.line(format_args!(
            r#"<text class="axis-label" transform="rotate(-90)" x="{}" y="16" font-size="{LABEL_PX}" text-anchor="middle" stroke="none">{}</text>"#,
            Px(-(t + b) / 2.0),
            esc(&self.y_label)
        ));
        out.line(format_args!("</g>"));
    }

    fn write_plot(
        &self,
        out: &mut Out,
        drawable: &[Drawable],
        layout: &Layout,
        x: &AxisPlan,
        y: &AxisPlan,
    ) {
        out.line(format_args!(
            r#"<g class="plot" data-series-count="{}" data-point-count="{}" data-skipped="{}" data-x-domain="{} {}" data-y-domain="{} {}" data-y-scale="{}">"#,
            self.series.len(),
            count_drawn(drawable),
            count_skipped(drawable),
            data_num(x.domain.0),
            data_num(x.domain.1),
            data_num(y.domain.0),
            data_num(y.domain.1),
            match self.y_scale {
                YScale::Linear => "linear",
                YScale::Log10 => "log10",
            },
        ));
        out.line(format_args!(
            r#"<rect class="plot-area" x="{}" y="{}" width="{}" height="{}" fill="none" stroke="none"/>"#,
            Px(layout.left),
            Px(layout.top),
            Px(layout.right - layout.left),
            Px(layout.bottom - layout.top)
        ));
        let to_px = |p: &Point| {
            (
                scale(p.x, x.domain, layout.x_range()),
                scale(p.y, y.domain, layout.y_range()),
            )
        };
        for (value, label) in &self.hlines {
            write_reference(out, layout, *value, label, y);
        }
        for d in drawable {
            write_series(out, d, &to_px, |v| scale(v, y.domain, layout.y_range()));
        }
        out.line(format_args!("</g>"));
    }

    fn write_legend(&self, out: &mut Out, layout: &Layout) {
        if layout.legend_rows.is_empty() {
            return;
        }
        out.line(format_args!(
            r#"<g class="legend" font-size="{LABEL_PX}" fill="{AXIS_COLOUR}">"#
        ));
        for (row_index, row) in layout.legend_rows.iter().enumerate() {
            let y = layout.bottom + 58.0 + row_index as f64 * LEGEND_ROW;
            let mut x = 12.0;
            for &i in row {
                let series = &self.series[i];
                write_legend_entry(out, series, x, y);
                x += legend_entry_width(series);
            }
        }
        out.line(format_args!("</g>"));
    }
}

/// An axis' own line.
fn write_axis_line(out: &mut Out, (x1, y1): (f64, f64), (x2, y2): (f64, f64)) {
    out.line(format_args!(
        r#"<line class="axis-line" x1="{}" y1="{}" x2="{}" y2="{}"/>"#,
        Px(x1),
        Px(y1),
        Px(x2),
        Px(y2)
    ));
}

/// One tick of an axis: its mark from `from` to `to`, its label anchored
/// at `text`, and the value it stands for.
fn write_tick(
    out: &mut Out,
    value: f64,
    from: (f64, f64),
    to: (f64, f64),
    text: (f64, f64),
    anchor: &str,
    label: &str,
) {
    out.line(format_args!(
        r#"<g class="tick" data-value="{}"><line x1="{}" y1="{}" x2="{}" y2="{}"/><text x="{}" y="{}" text-anchor="{anchor}" stroke="none">{}</text></g>"#,
        data_num(value),
        Px(from.0),
        Px(from.1),
        Px(to.0),
        Px(to.1),
        Px(text.0),
        Px(text.1),
        esc(label)
    ));
}

/// A horizontal axis' label, centred on `at`.
fn write_axis_label(out: &mut Out, (x, y): (f64, f64), label: &str) {
    out.line(format_args!(
        r#"<text class="axis-label" x="{}" y="{}" font-size="{LABEL_PX}" text-anchor="middle" stroke="none">{}</text>"#,
        Px(x),
        Px(y),
        esc(label)
    ));
}

fn secondary_label(value: f64, decimals: Option<usize>) -> String {
    let text = match decimals {
        Some(d) => format!("{:.*}", d, value + 0.0),
        None => format!("{value:.3e}"),
    };
    // Rounding a tiny negative value leaves "-0" or "-0.0".
    if text.starts_with('-') && text.trim_start_matches(['-', '0', '.']).is_empty() {
        text[1..].to_string()
    } else {
        text
    }
}

fn count_drawn(drawable: &[Drawable]) -> usize {
    drawable
        .iter()
        .map(|d| d.points.iter().flatten().count())
        .sum()
}

fn count_skipped(drawable: &[Drawable]) -> usize {
    drawable
        .iter()
        .map(|d| d.points.iter().filter(|p| p.is_none()).count())
        .sum()
}

fn write_grid(out: &mut Out, layout: &Layout, x: &AxisPlan, y: &AxisPlan) {
    out.line(format_args!(
        r#"<g class="grid" stroke="{GRID_COLOUR}" stroke-width="1">"#
    ));
    for tick in &x.ticks {
        let px = scale(*tick, x.domain, layout.x_range());
        out.line(format_args!(
            r#"<line x1="{}" y1="{}" x2="{}" y2="{}"/>"#,
            Px(px),
            Px(layout.top),
            Px(px),
            Px(layout.bottom)
        ));
    }
    for tick in &y.ticks {
        let py = scale(*tick, y.domain, layout.y_range());
        out.line(format_args!(
            r#"<line x1="{}" y1="{}" x2="{}" y2="{}"/>"#,
            Px(layout.left),
            Px(py),
            Px(layout.right),
            Px(py)
        ));
    }
    out.line(format_args!("</g>"));
}

fn write_reference(out: &mut Out, layout: &Layout, value: f64, label: &str, y: &AxisPlan) {
    let py = scale(value, y.domain, layout.y_range());
    out.line(format_args!(
        r#"<g class="reference" data-value="{}"><line class="reference-line" x1="{}" y1="{}" x2="{}" y2="{}" stroke="{REFERENCE_COLOUR}" stroke-width="1" stroke-dasharray="6 4"/><text class="reference-label" x="{}" y="{}" font-size="{TICK_PX}" text-anchor="end" fill="{REFERENCE_COLOUR}">{}</text></g>"#,
        data_num(value),
        Px(layout.left),
        Px(py),
        Px(layout.right),
        Px(py),
        Px(layout.right - 4.0),
        Px(py - 4.0),
        esc(label)
    ));
}

fn write_series(
    out: &mut Out,
    d: &Drawable,
    to_px: &impl Fn(&Point) -> (f64, f64),
    y_px: impl Fn(f64) -> f64,
) {
    let style = d.series.style;
    let colour = style.colour.hex();
    let label = esc(&d.series.label);
    out.line(format_args!(
        r#"<g class="series" data-series="{label}" data-mark="{}" data-colour="{colour}">"#,
        style.mark.name()
    ));
    if style.joined {
        write_joins(out, d, to_px, &label, colour);
    }
    for p in d.points.iter().flatten() {
        if let Some(err) = p.y_err {
            let (cx, _) = to_px(p);
            let (low, high) = p.y_extent();
            let (top, bottom) = (y_px(high), y_px(low));
            write_error_bar(out, p, err, cx, (top, bottom), &label, colour);
        }
    }
    for p in d.points.iter().flatten() {
        let (cx, cy) = to_px(p);
        let err = p.y_err.map(|e| format!(r#" data-err="{}""#, data_num(e)));
        let attrs = format!(
            r#"class="point" data-series="{label}" data-x="{}" data-y="{}"{} data-hollow="{}""#,
            data_num(p.x),
            data_num(p.y),
            err.unwrap_or_default(),
            p.hollow
        );
        let paint = Paint {
            colour,
            hollow: p.hollow,
        };
        write_mark(out, style.mark, cx, cy, &paint, &attrs);
    }
    out.line(format_args!("</g>"));
}

/// One polyline per run of consecutive drawn points: a skipped point is a
/// gap, not something to draw across.
fn write_joins(
    out: &mut Out,
    d: &Drawable,
    to_px: &impl Fn(&Point) -> (f64, f64),
    label: &str,
    colour: &str,
) {
    for run in d.points.split(|p| p.is_none()) {
        if run.len() < 2 {
            continue;
        }
        let points: Vec<String> = run
            .iter()
            .flatten()
            .map(|p| {
                let (cx, cy) = to_px(p);
                format!("{},{}", Px(cx), Px(cy))
            })
            .collect();
        out.line(format_args!(
            r#"<polyline class="series-line" data-series="{label}" points="{}" fill="none" stroke="{colour}" stroke-width="1.5"/>"#,
            points.join(" ")
        ));
    }
}

fn write_error_bar(
    out: &mut Out,
    p: &Point,
    err: f64,
    cx: f64,
    (top, bottom): (f64, f64),
    label: &str,
    colour: &str,
) {
    let cap = MARK_R;
    out.line(format_args!(
        r#"<g class="error-bar" data-series="{label}" data-x="{}" data-y="{}" data-err="{}" stroke="{colour}" stroke-width="1"><line class="bar" x1="{}" y1="{}" x2="{}" y2="{}"/><line class="cap" x1="{}" y1="{}" x2="{}" y2="{}"/><line class="cap" x1="{}" y1="{}" x2="{}" y2="{}"/></g>"#,
        data_num(p.x),
        data_num(p.y),
        data_num(err),
        Px(cx),
        Px(top),
        Px(cx),
        Px(bottom),
        Px(cx - cap),
        Px(top),
        Px(cx + cap),
        Px(top),
        Px(cx - cap),
        Px(bottom),
        Px(cx + cap),
        Px(bottom),
    ));
}

fn write_legend_entry(out: &mut Out, series: &Series, x: f64, y: f64) {
    let style = series.style;
    let colour = style.colour.hex();
    let label = esc(&series.label);
    out.line(format_args!(
        r#"<g class="legend-entry" data-series="{label}" data-mark="{}" data-colour="{colour}">"#,
        style.mark.name()
    ));
    let mark_y = y - 4.0;
    if style.joined {
        out.line(format_args!(
            r#"<line class="legend-line" x1="{}" y1="{}" x2="{}" y2="{}" stroke="{colour}" stroke-width="1.5"/>"#,
            Px(x),
            Px(mark_y),
            Px(x + 22.0),
            Px(mark_y)
        ));
    }
    let paint = Paint {
        colour,
        hollow: false,
    };
    write_mark(
        out,
        style.mark,
        x + 11.0,
        mark_y,
        &paint,
        r#"class="legend-mark""#,
    );
    out.line(format_args!(
        r#"<text x="{}" y="{}">{label}</text>"#,
        Px(x + 30.0),
        Px(y)
    ));
    out.line(format_args!("</g>"));
}

#[cfg(test)]
mod tests {
    //! The SVG is parsed with roxmltree (already a dependency, for ADES
    //! XML), which also proves every document well-formed.

    use super::*;
    use proptest::prelude::*;
    use roxmltree::{Document, Node};

    const PX_TOL: f64 = 1e-6;

    fn svg_of(chart: &Chart) -> String {
        match chart.to_svg() {
            Ok(svg) => svg,
            Err(e) => panic!("chart refused: {e}"),
        }
    }

    fn parse(svg: &str) -> Document<'_> {
        match Document::parse(svg) {
            Ok(doc) => doc,
            Err(e) => panic!("not well-formed XML: {e}\n{svg}"),
        }
    }

    fn with_class<'a>(doc: &'a Document, class: &str) -> Vec<Node<'a, 'a>> {
        doc.descendants()
            .filter(|n| n.attribute("class") == Some(class))
            .collect()
    }

    fn num(node: Node, name: &str) -> f64 {
        let text = node
            .attribute(name)
            .unwrap_or_else(|| panic!("<{}> has no {name}", node.tag_name().name()));
        text.parse()
            .unwrap_or_else(|_| panic!("{name}={text:?} is not a number"))
    }

    fn pair(node: Node, name: &str) -> (f64, f64) {
        let text = node.attribute(name).unwrap_or("");
        let v: Vec<f64> = text.split(' ').filter_map(|t| t.parse().ok()).collect();
        assert_eq!(v.len(), 2, "{name}={text:?}");
        (v[0], v[1])
    }

    /// The plot's domains and pixel ranges, as the SVG states them.
    struct Frame {
        x_domain: (f64, f64),
        y_domain: (f64, f64),
        x_range: (f64, f64),
        y_range: (f64, f64),
    }

    impl Frame {
        fn of(doc: &Document) -> Self {
            let plot = with_class(doc, "plot")[0];
            let area = with_class(doc, "plot-area")[0];
            let (x, y) = (num(area, "x"), num(area, "y"));
            let (w, h) = (num(area, "width"), num(area, "height"));
            Self {
                x_domain: pair(plot, "data-x-domain"),
                y_domain: pair(plot, "data-y-domain"),
                x_range: (x, x + w),
                y_range: (y + h, y),
            }
        }

        fn px(&self, x: f64, y: f64) -> (f64, f64) {
            (
                scale(x, self.x_domain, self.x_range),
                scale(y, self.y_domain, self.y_range),
            )
        }
    }

    /// Centre of a mark's geometry: the circle's centre, or the middle of a
    /// path outline's bounding box.
    fn drawn_centre(node: Node) -> (f64, f64) {
        if node.tag_name().name() == "circle" {
            return (num(node, "cx"), num(node, "cy"));
        }
        let d = node.attribute("d").unwrap_or("");
        let coords: Vec<f64> = d
            .split(['M', 'L', 'Z', ' '])
            .filter_map(|t| t.parse().ok())
            .collect();
        assert!(
            coords.len() >= 6 && coords.len().is_multiple_of(2),
            "d={d:?}"
        );
        (
            middle(coords.iter().step_by(2)),
            middle(coords.iter().skip(1).step_by(2)),
        )
    }

    fn middle<'a>(it: impl Iterator<Item = &'a f64>) -> f64 {
        let (lo, hi) = it.fold((f64::INFINITY, f64::NEG_INFINITY), |(lo, hi), &v| {
            (lo.min(v), hi.max(v))
        });
        (lo + hi) / 2.0
    }

    fn assert_close(got: f64, want: f64, what: &str) {
        assert!(
            (got - want).abs() <= PX_TOL,
            "{what}: got {got}, want {want}"
        );
    }

    /// Two series and a zero line; the expected values below are worked by
    /// hand from these numbers.
    fn sample() -> Chart {
        let mut chart = Chart::new("Original 1/a", "x (d)", "1/a (1/au)");
        chart.series = vec![
            Series {
                label: "recommended".into(),
                points: vec![
                    Point::new(0.0, 1.0).with_err(0.5),
                    Point::new(5.0, 2.0).with_err(0.25),
                    Point::new(10.0, 3.0),
                ],
                style: Style::nth(0, true),
            },
            Series {
                label: "gravity only".into(),
                points: vec![Point::new(2.0, -1.0).hollow(), Point::new(8.0, 0.5)],
                style: Style::nth(1, false),
            },
        ];
        chart.hlines = vec![(0.0, "zero".into())];
        chart
    }

    #[test]
    fn nice_ticks_follow_the_1_2_5_rule() {
        // Expected values worked by hand from the 1-2-5 rule (common
        // practice for axis ticks): the smallest step of 1, 2 or 5 x 10^k
        // at least span / target, ticks enclosing the range.
        // 1 / 5 = 0.2 -> step 0.2.
        assert_eq!(nice_ticks(0.0, 1.0, 5), vec![0.0, 0.2, 0.4, 0.6, 0.8, 1.0]);
        // 2.47 / 5 = 0.494 -> 0.5; floor(-0.37 / 0.5) = -1, ceil(2.1 / 0.5) = 5.
        assert_eq!(
            nice_ticks(-0.37, 2.1, 5),
            vec![-0.5, 0.0, 0.5, 1.0, 1.5, 2.0, 2.5]
        );
        // 1000 / 4 = 250 -> 500.
        assert_eq!(nice_ticks(0.0, 1000.0, 4), vec![0.0, 500.0, 1000.0]);
        // 0.00047 / 5 = 9.4e-5 -> 1e-4; from 1e-4 (floor(1.2)) to 6e-4 (ceil(5.9)).
        assert_eq!(
            nice_ticks(1.2e-4, 5.9e-4, 5),
            vec![1e-4, 2e-4, 3e-4, 4e-4, 5e-4, 6e-4]
        );
        // Reversed bounds are the same range.
        assert_eq!(nice_ticks(1.0, 0.0, 5), nice_ticks(0.0, 1.0, 5));
    }

    #[test]
    fn nice_ticks_widen_a_zero_range_and_refuse_non_finite_bounds() {
        // Hand arithmetic: 3 widened by a tenth of itself is 2.7..3.3;
        // 0.6 / 5 = 0.12 -> step 0.2; floor(13.5) = 13, ceil(16.5) = 17.
        assert_eq!(nice_ticks(3.0, 3.0, 5), vec![2.6, 2.8, 3.0, 3.2, 3.4]);
        // Zero has no size to take a tenth of: widened by 1 to -1..1,
        // 2 / 5 = 0.4 -> step 0.5.
        assert_eq!(nice_ticks(0.0, 0.0, 5), vec![-1.0, -0.5, 0.0, 0.5, 1.0]);
        assert!(nice_ticks(f64::NAN, 1.0, 5).is_empty());
        assert!(nice_ticks(0.0, f64::INFINITY, 5).is_empty());
        // A target of zero asks for one interval: 1 / 1 -> step 1.
        assert_eq!(nice_ticks(0.0, 1.0, 0), vec![0.0, 1.0]);
    }

    #[test]
    fn an_axis_labels_all_its_ticks_in_one_form() {
        // Hand-chosen: 0.0008 alone would print 8e-4, next to 0.001 plain.
        assert_eq!(number_labels(&[0.0, 0.5, 1.0]), vec!["0", "0.5", "1"]);
        assert_eq!(
            number_labels(&[8e-4, 1e-3, 1.2e-3]),
            vec!["8e-4", "1e-3", "1.2e-3"]
        );
        assert_eq!(
            number_labels(&[-1e-4, 0.0, 1e-4]),
            vec!["-1e-4", "0", "1e-4"]
        );
        assert_eq!(number_labels(&[0.0, 1e6]), vec!["0", "1e6"]);
    }

    #[test]
    fn scale_maps_linearly_and_survives_a_zero_domain() {
        // Hand arithmetic.
        assert_eq!(scale(5.0, (0.0, 10.0), (0.0, 100.0)), 50.0);
        assert_eq!(scale(2.5, (0.0, 10.0), (400.0, 0.0)), 300.0);
        assert_eq!(scale(-1.0, (-2.0, 4.0), (292.0, 34.0)), 249.0);
        assert_eq!(scale(7.0, (3.0, 3.0), (0.0, 100.0)), 50.0);
        let huge = scale(0.0, (-f64::MAX, f64::MAX), (0.0, 100.0));
        assert_eq!(huge, 50.0);
    }

    #[test]
    fn iso_dates_of_known_mjds() {
        // MJD 0 = 1858-11-17 by definition; the others are Python's
        // datetime.date(1858, 11, 17) + timedelta(days=n).
        assert_eq!(iso_date_of_mjd(0).as_deref(), Some("1858-11-17"));
        assert_eq!(iso_date_of_mjd(51_544).as_deref(), Some("2000-01-01"));
        assert_eq!(iso_date_of_mjd(61_000).as_deref(), Some("2025-11-21"));
        assert_eq!(iso_date_of_mjd(-678_575).as_deref(), Some("0001-01-01"));
        assert_eq!(iso_date_of_mjd(2_973_483).as_deref(), Some("9999-12-31"));
        assert_eq!(iso_date_of_mjd(-678_576), None);
        assert_eq!(iso_date_of_mjd(i64::MAX), None);
    }

    #[test]
    fn the_sample_axes_are_the_hand_worked_ones() {
        let svg = svg_of(&sample());
        let doc = parse(&svg);
        let frame = Frame::of(&doc);
        // Hand arithmetic from the layout constants: one legend row, so the
        // plot spans y 34..292 px (258 px, 258 / 45 -> 5 ticks wanted); y
        // data with error bars and the zero line is -1..3, padded 5% to
        // -1.2..3.2; 4.4 / 5 = 0.88 -> step 1 -> -2..4.
        assert_eq!(frame.y_domain, (-2.0, 4.0));
        assert_eq!(frame.y_range, (292.0, 34.0));
        // x: 0..10 padded to -0.5..10.5; the widest y label "-2" is 13.2 px,
        // so the plot starts at 55.2 px and ends at 616 px (560.8 px,
        // 560.8 / 80 -> 7 wanted); 11 / 7 = 1.57 -> step 2 -> -2..12.
        assert_eq!(frame.x_domain, (-2.0, 12.0));
        assert_close(frame.x_range.0, 55.2, "plot left");
        assert_close(frame.x_range.1, 616.0, "plot right");
        let y_ticks: Vec<f64> = axis_ticks(&doc, "axis y")
            .iter()
            .map(|t| num(*t, "data-value"))
            .collect();
        assert_eq!(y_ticks, vec![-2.0, -1.0, 0.0, 1.0, 2.0, 3.0, 4.0]);
        let labels: Vec<&str> = axis_ticks(&doc, "axis y")
            .iter()
            .map(|t| tick_text(*t))
            .collect();
        assert_eq!(labels, vec!["-2", "-1", "0", "1", "2", "3", "4"]);
    }

    fn axis_ticks<'a>(doc: &'a Document, axis: &str) -> Vec<Node<'a, 'a>> {
        let group = with_class(doc, axis)[0];
        group
            .children()
            .filter(|n| n.attribute("class") == Some("tick"))
            .collect()
    }

    fn tick_text<'a>(tick: Node<'a, 'a>) -> &'a str {
        tick.children()
            .find(|n| n.has_tag_name("text"))
            .and_then(|n| n.text())
            .unwrap_or("")
    }

    #[test]
    fn ticks_sit_where_their_values_say() {
        let svg = svg_of(&sample());
        let doc = parse(&svg);
        let frame = Frame::of(&doc);
        for tick in axis_ticks(&doc, "axis y") {
            let line = tick.children().find(|n| n.has_tag_name("line")).unwrap();
            let want = scale(num(tick, "data-value"), frame.y_domain, frame.y_range);
            assert_close(num(line, "y1"), want, "y tick");
            assert_close(num(line, "y2"), want, "y tick");
        }
        for tick in axis_ticks(&doc, "axis x") {
            let line = tick.children().find(|n| n.has_tag_name("line")).unwrap();
            let want = scale(num(tick, "data-value"), frame.x_domain, frame.x_range);
            assert_close(num(line, "x1"), want, "x tick");
        }
        // The outermost ticks are the domain's ends.
        let x_ticks = axis_ticks(&doc, "axis x");
        assert_eq!(num(x_ticks[0], "data-value"), frame.x_domain.0);
        assert_eq!(
            num(x_ticks[x_ticks.len() - 1], "data-value"),
            frame.x_domain.1
        );
    }

    #[test]
    fn points_land_where_the_values_say() {
        let chart = sample();
        let svg = svg_of(&chart);
        let doc = parse(&svg);
        let frame = Frame::of(&doc);
        let marks = with_class(&doc, "point");
        assert_eq!(marks.len(), 5);
        for mark in &marks {
            let (want_x, want_y) = frame.px(num(*mark, "data-x"), num(*mark, "data-y"));
            assert_close(num(*mark, "data-cx"), want_x, "data-cx");
            assert_close(num(*mark, "data-cy"), want_y, "data-cy");
            let (cx, cy) = drawn_centre(*mark);
            assert_close(cx, want_x, "drawn x");
            assert_close(cy, want_y, "drawn y");
        }
        // The data values are carried exactly, in the order given.
        let xy: Vec<(f64, f64)> = marks
            .iter()
            .map(|m| (num(*m, "data-x"), num(*m, "data-y")))
            .collect();
        let given: Vec<(f64, f64)> = chart
            .series
            .iter()
            .flat_map(|s| s.points.iter().map(|p| (p.x, p.y)))
            .collect();
        assert_eq!(xy, given);
    }

    #[test]
    fn positions_are_proportional_and_y_grows_upward() {
        // Independent of the domains: x = 0, 5, 10 must sit at equal
        // spacing, y = 1, 2, 3 likewise, and larger y higher on the page
        // (smaller cy), by hand arithmetic on a linear map.
        let svg = svg_of(&sample());
        let doc = parse(&svg);
        let first: Vec<(f64, f64)> = with_class(&doc, "point")
            .iter()
            .filter(|m| m.attribute("data-series") == Some("recommended"))
            .map(|m| (num(*m, "data-cx"), num(*m, "data-cy")))
            .collect();
        assert_eq!(first.len(), 3);
        assert_close(
            first[1].0 - first[0].0,
            first[2].0 - first[1].0,
            "x spacing",
        );
        assert_close(
            first[1].1 - first[0].1,
            first[2].1 - first[1].1,
            "y spacing",
        );
        assert!(first[0].1 > first[1].1 && first[1].1 > first[2].1);
        assert!(first[0].0 < first[1].0);
    }

    #[test]
    fn error_bars_span_y_minus_err_to_y_plus_err() {
        let svg = svg_of(&sample());
        let doc = parse(&svg);
        let frame = Frame::of(&doc);
        let bars = with_class(&doc, "error-bar");
        // Two of the five points have errors.
        assert_eq!(bars.len(), 2);
        for bar in bars {
            let (x, y, err) = (num(bar, "data-x"), num(bar, "data-y"), num(bar, "data-err"));
            let (px, top) = frame.px(x, y + err);
            let (_, bottom) = frame.px(x, y - err);
            let lines: Vec<Node> = bar.children().filter(|n| n.has_tag_name("line")).collect();
            let stem = lines
                .iter()
                .find(|l| l.attribute("class") == Some("bar"))
                .unwrap();
            assert_close(num(*stem, "x1"), px, "bar x1");
            assert_close(num(*stem, "x2"), px, "bar x2");
            assert_close(num(*stem, "y1"), top, "bar top");
            assert_close(num(*stem, "y2"), bottom, "bar bottom");
            let caps: Vec<f64> = lines
                .iter()
                .filter(|l| l.attribute("class") == Some("cap"))
                .map(|l| {
                    assert_close(num(*l, "y1"), num(*l, "y2"), "cap level");
                    assert_close((num(*l, "x1") + num(*l, "x2")) / 2.0, px, "cap centre");
                    num(*l, "y1")
                })
                .collect();
            assert_eq!(caps.len(), 2);
            assert_close(caps[0], top, "top cap");
            assert_close(caps[1], bottom, "bottom cap");
        }
        // Hand arithmetic for the first bar: y = 1 +- 0.5 on a -2..4
        // domain over 292..34 px runs from 1.5, 292 - (3.5 / 6) * 258 =
        // 141.5 px, to 0.5, 292 - (2.5 / 6) * 258 = 184.5 px.
        let first = with_class(&doc, "error-bar")[0];
        let stem = first.children().find(|n| n.has_tag_name("line")).unwrap();
        assert_close(num(stem, "y1"), 141.5, "hand top");
        assert_close(num(stem, "y2"), 184.5, "hand bottom");
    }

    #[test]
    fn non_finite_points_are_skipped_and_counted() {
        let mut chart = sample();
        chart.series[0].points.extend([
            Point::new(f64::NAN, 1.0),
            Point::new(1.0, f64::INFINITY),
            Point::new(2.0, 1.0).with_err(f64::NAN),
            Point::new(3.0, 1.0).with_err(-0.1),
        ]);
        let svg = svg_of(&chart);
        let doc = parse(&svg);
        // 5 finite points in the sample; the 4 added are all skipped.
        assert_eq!(with_class(&doc, "point").len(), 5);
        let plot = with_class(&doc, "plot")[0];
        assert_eq!(num(plot, "data-point-count"), 5.0);
        assert_eq!(num(plot, "data-skipped"), 4.0);
        let desc = doc.descendants().find(|n| n.has_tag_name("desc")).unwrap();
        assert_eq!(num(desc, "data-skipped"), 4.0);
        assert!(desc.text().unwrap_or("").contains("4 points skipped"));
        let lower = svg.to_lowercase();
        assert!(!lower.contains("nan") && !lower.contains("inf"), "{svg}");
    }

    #[test]
    fn hollow_marks_are_outlines_and_filled_marks_are_filled() {
        let svg = svg_of(&sample());
        let doc = parse(&svg);
        let marks = with_class(&doc, "point");
        let hollow: Vec<_> = marks
            .iter()
            .filter(|m| m.attribute("data-hollow") == Some("true"))
            .collect();
        assert_eq!(hollow.len(), 1);
        // Style::nth(1) is blue, #0072B2 (Okabe & Ito 2008).
        assert_eq!(hollow[0].attribute("fill"), Some("white"));
        assert_eq!(hollow[0].attribute("stroke"), Some("#0072B2"));
        assert!(num(*hollow[0], "stroke-width") > 0.0);
        for filled in marks
            .iter()
            .filter(|m| m.attribute("data-hollow") == Some("false"))
        {
            assert_eq!(filled.attribute("fill"), filled.attribute("stroke"));
            assert_ne!(filled.attribute("fill"), Some("white"));
        }
    }

    #[test]
    fn reference_lines_are_dashed_labelled_and_at_their_value() {
        let mut chart = sample();
        chart.hlines.push((2.5, "alert threshold (3 sigma)".into()));
        let svg = svg_of(&chart);
        let doc = parse(&svg);
        let frame = Frame::of(&doc);
        let refs = with_class(&doc, "reference");
        assert_eq!(refs.len(), 2);
        let zero_line = refs[0].first_element_child().unwrap();
        // Hand arithmetic: 0 on -2..4 over 292..34 px is 292 - 2/6 * 258 = 206.
        assert_close(num(zero_line, "y1"), 206.0, "zero line");
        for (r, (value, label)) in refs.iter().zip(&chart.hlines) {
            let line = r
                .children()
                .find(|n| n.attribute("class") == Some("reference-line"))
                .unwrap();
            let want = scale(*value, frame.y_domain, frame.y_range);
            assert_close(num(line, "y1"), want, "reference y1");
            assert_close(num(line, "y2"), want, "reference y2");
            assert_close(num(line, "x1"), frame.x_range.0, "reference from left");
            assert_close(num(line, "x2"), frame.x_range.1, "reference to right");
            assert!(line.attribute("stroke-dasharray").is_some());
            let text = r
                .children()
                .find(|n| n.attribute("class") == Some("reference-label"))
                .and_then(|n| n.text());
            assert_eq!(text, Some(label.as_str()));
        }
    }

    #[test]
    fn reference_lines_and_error_bars_widen_the_y_range() {
        let mut chart = Chart::new("t", "x (d)", "y (au)");
        chart.series = vec![Series {
            label: "s".into(),
            points: vec![Point::new(0.0, 1.0).with_err(3.0), Point::new(1.0, 1.5)],
            style: Style::nth(0, false),
        }];
        chart.hlines = vec![(-7.0, "floor".into())];
        let svg = svg_of(&chart);
        let (lo, hi) = Frame::of(&parse(&svg)).y_domain;
        // The range must hold y + err = 4 and the line at -7.
        assert!(lo < -7.0 && hi > 4.0, "{lo}..{hi}");
    }

    #[test]
    fn time_axis_labels_are_iso_dates_on_whole_days() {
        let mut chart = Chart::new("t", "date (UTC)", "e");
        chart.x_axis = Axis::Time {
            epoch_mjd: 61_000.0,
        };
        chart.series = vec![Series {
            label: "e".into(),
            points: (0..=30).map(|d| Point::new(f64::from(d), 1.0)).collect(),
            style: Style::nth(0, true),
        }];
        let svg = svg_of(&chart);
        let doc = parse(&svg);
        let ticks = axis_ticks(&doc, "axis x");
        // Day 0 after MJD 61000 is 2025-11-21 (Python: date(1858, 11, 17) +
        // timedelta(61000)); every step of 1, 2 or 5 x 10^k days with k >= 0
        // divides 61000, so day 0 is a tick.
        let zero = ticks
            .iter()
            .find(|t| num(**t, "data-value") == 0.0)
            .expect("a tick at day 0");
        assert_eq!(tick_text(*zero), "2025-11-21");
        assert_labels_are_distinct_dates(&ticks);
    }

    fn assert_labels_are_distinct_dates(ticks: &[Node]) {
        let labels: Vec<&str> = ticks.iter().map(|t| tick_text(*t)).collect();
        for (tick, label) in ticks.iter().zip(&labels) {
            let bytes = label.as_bytes();
            let digits = [0, 1, 2, 3, 5, 6, 8, 9];
            assert!(
                bytes.len() == 10
                    && bytes[4] == b'-'
                    && bytes[7] == b'-'
                    && digits.iter().all(|&i| bytes[i].is_ascii_digit()),
                "{label:?} is not YYYY-MM-DD"
            );
            assert_eq!(num(*tick, "data-value").fract(), 0.0);
        }
        let mut unique = labels.clone();
        unique.dedup();
        assert_eq!(unique, labels);
    }

    #[test]
    fn a_log_axis_places_values_by_their_decade() {
        // A shift of 0.5, 20 and 3000 arcsec, and one of zero, which has
        // no place on a log axis (the values are the test's own).
        let mut chart = Chart::new("shift", "x (d)", "shift (arcsec)");
        chart.y_scale = YScale::Log10;
        chart.series = vec![Series {
            label: "7 days ahead".into(),
            points: vec![
                Point::new(1.0, 0.5),
                Point::new(2.0, 20.0),
                Point::new(3.0, 3000.0),
                Point::new(4.0, 0.0),
            ],
            style: Style::nth(0, true),
        }];
        let svg = svg_of(&chart);
        let doc = parse(&svg);
        let plot = with_class(&doc, "plot")[0];
        assert_eq!(plot.attribute("data-y-scale"), Some("log10"));
        assert_eq!(num(plot, "data-skipped"), 1.0);
        // Ticks on whole decades, labelled with the values.
        let ticks = axis_ticks(&doc, "axis y");
        let labels: Vec<&str> = ticks.iter().map(|t| tick_text(*t)).collect();
        for tick in &ticks {
            assert_eq!(num(*tick, "data-value").fract(), 0.0);
        }
        for wanted in ["0.1", "1", "10", "100", "1000"] {
            assert!(labels.contains(&wanted), "{labels:?}");
        }
        // Each mark sits at log10 of its value: 20 is 1.30103 decades
        // up, between the 10 and 100 ticks.
        let frame = Frame::of(&doc);
        let points = with_class(&doc, "point");
        assert_eq!(points.len(), 3);
        for (p, value) in points.iter().zip([0.5f64, 20.0, 3000.0]) {
            assert!((num(*p, "data-y") - value.log10()).abs() < 1e-12);
            let (_, want) = frame.px(num(*p, "data-x"), value.log10());
            assert!((drawn_centre(*p).1 - want).abs() < 1e-6);
        }
    }

    #[test]
    fn a_time_axis_spans_the_data_not_a_whole_step_before_it() {
        // 60 days of data starting 40 days after an MJD multiple of 50:
        // enclosing ticks would start the axis 40 days early.
        let mut chart = Chart::new("t", "date (UTC)", "e");
        chart.x_axis = Axis::Time {
            epoch_mjd: 61_040.0,
        };
        chart.series = vec![Series {
            label: "e".into(),
            points: vec![Point::new(0.0, 1.0), Point::new(60.0, 2.0)],
            style: Style::nth(0, false),
        }];
        let svg = svg_of(&chart);
        let doc = parse(&svg);
        let frame = Frame::of(&doc);
        // Padded by 5% of the span (3 days) on each side, no more.
        assert!(
            (frame.x_domain.0 - -3.0).abs() < 1e-9,
            "{:?}",
            frame.x_domain
        );
        assert!(
            (frame.x_domain.1 - 63.0).abs() < 1e-9,
            "{:?}",
            frame.x_domain
        );
        let ticks = axis_ticks(&doc, "axis x");
        assert!(ticks.len() >= 2);
        for tick in &ticks {
            let v = num(*tick, "data-value");
            assert!(v >= frame.x_domain.0 && v <= frame.x_domain.1, "{v}");
        }
    }

    #[test]
    fn a_short_time_axis_still_steps_whole_days() {
        // Half a day of data with J2000's fractional epoch: the ticks must
        // still be midnights, i.e. x + 51544.5 whole.
        let mut chart = Chart::new("t", "date (UTC)", "e");
        chart.x_axis = Axis::Time {
            epoch_mjd: 51_544.5,
        };
        chart.series = vec![Series {
            label: "e".into(),
            points: vec![Point::new(0.1, 1.0), Point::new(0.4, 2.0)],
            style: Style::nth(0, false),
        }];
        let svg = svg_of(&chart);
        let doc = parse(&svg);
        let ticks = axis_ticks(&doc, "axis x");
        assert!(ticks.len() >= 2);
        for tick in &ticks {
            assert_eq!((num(*tick, "data-value") + 51_544.5).fract(), 0.0);
        }
        // x = 0.1 d after J2000's MJD 51544.5 is 2000-01-01 (hand
        // arithmetic), so that date is on the axis or next to it.
        let labels: Vec<&str> = ticks.iter().map(|t| tick_text(*t)).collect();
        assert!(labels.contains(&"2000-01-01") || labels.contains(&"2000-01-02"));
    }

    #[test]
    fn secondary_labels_read_x_minus_origin() {
        let mut chart = sample();
        chart.secondary_x = Some(SecondaryAxis {
            label: "arc (d)".into(),
            origin: 3.0,
        });
        let svg = svg_of(&chart);
        let doc = parse(&svg);
        let frame = Frame::of(&doc);
        let ticks = axis_ticks(&doc, "axis x2");
        assert!(!ticks.is_empty());
        for tick in ticks {
            let x = num(tick, "data-value");
            let label: f64 = tick_text(tick).parse().unwrap();
            assert_eq!(label, x - 3.0);
            let line = tick.children().find(|n| n.has_tag_name("line")).unwrap();
            assert_close(
                num(line, "x1"),
                scale(x, frame.x_domain, frame.x_range),
                "x2 tick",
            );
        }
        let label = with_class(&doc, "axis x2")[0]
            .children()
            .find(|n| n.attribute("class") == Some("axis-label"))
            .and_then(|n| n.text());
        assert_eq!(label, Some("arc (d)"));
    }

    #[test]
    fn text_is_escaped() {
        let mut chart = sample();
        chart.title = "a < b & \"c\"".into();
        chart.y_label = "RA cos Dec residual (\") <O-C>".into();
        chart.series[0].label = "ZQ1 <'x'> & \u{1}".into();
        let svg = svg_of(&chart);
        assert!(svg.contains("a &lt; b &amp; &quot;c&quot;"));
        let doc = parse(&svg);
        let title = doc.root_element().first_element_child().unwrap();
        assert_eq!(title.text(), Some("a < b & \"c\""));
        // The control character XML forbids became U+FFFD.
        let series = with_class(&doc, "point")[0].attribute("data-series");
        assert_eq!(series, Some("ZQ1 <'x'> & \u{fffd}"));
        let y_label = with_class(&doc, "axis y")[0]
            .children()
            .find(|n| n.attribute("class") == Some("axis-label"))
            .and_then(|n| n.text());
        assert_eq!(y_label, Some("RA cos Dec residual (\") <O-C>"));
    }

    #[test]
    fn empty_labels_and_impossible_sizes_are_refused() {
        let refused = |edit: &dyn Fn(&mut Chart)| {
            let mut chart = sample();
            edit(&mut chart);
            chart.to_svg().err()
        };
        let empty = |field: &str| {
            Some(ChartError::EmptyText {
                field: field.into(),
            })
        };
        assert_eq!(refused(&|c| c.x_label.clear()), empty("x axis label"));
        assert_eq!(refused(&|c| c.y_label = "  ".into()), empty("y axis label"));
        assert_eq!(refused(&|c| c.title.clear()), empty("title"));
        assert_eq!(
            refused(&|c| c.series[1].label.clear()),
            empty("series 2 label")
        );
        assert_eq!(
            refused(&|c| c.hlines[0].1.clear()),
            empty("reference line 1 label")
        );
        assert!(matches!(
            refused(&|c| c.hlines[0].0 = f64::NAN),
            Some(ChartError::NotFinite { .. })
        ));
        assert!(matches!(
            refused(&|c| c.x_axis = Axis::Time {
                epoch_mjd: f64::INFINITY
            }),
            Some(ChartError::NotFinite { .. })
        ));
        for (w, h) in [(0, 0), (640, 0), (0, 360), (120, 100)] {
            assert!(matches!(
                refused(&|c| {
                    c.width = w;
                    c.height = h;
                }),
                Some(ChartError::TooSmall { .. })
            ));
        }
        let message = refused(&|c| c.x_label.clear()).unwrap().to_string();
        assert!(message.contains("x axis label") && message.contains("units"));
    }

    #[test]
    fn one_point_zero_ranges_and_no_data_give_proper_axes() {
        let cases: Vec<Vec<Point>> = vec![
            vec![Point::new(4.0, 7.0)],
            vec![Point::new(0.0, 0.0)],
            vec![Point::new(1.0, 2.0), Point::new(1.0, 2.0)],
            vec![],
            vec![Point::new(f64::NAN, f64::NAN)],
        ];
        for points in cases {
            for x_axis in [
                Axis::Linear,
                Axis::Time {
                    epoch_mjd: 60_000.0,
                },
            ] {
                let mut chart = Chart::new("t", "x (d)", "y (au)");
                chart.x_axis = x_axis;
                chart.series = vec![Series {
                    label: "s".into(),
                    points: points.clone(),
                    style: Style::nth(0, true),
                }];
                let svg = svg_of(&chart);
                let doc = parse(&svg);
                let frame = Frame::of(&doc);
                for (lo, hi) in [frame.x_domain, frame.y_domain] {
                    assert!(lo.is_finite() && hi.is_finite() && lo < hi, "{lo}..{hi}");
                }
                assert!(axis_ticks(&doc, "axis x").len() >= 2);
                assert!(axis_ticks(&doc, "axis y").len() >= 2);
                for mark in with_class(&doc, "point") {
                    assert_close(
                        num(mark, "data-cx"),
                        (frame.x_range.0 + frame.x_range.1) / 2.0,
                        "lone x centred",
                    );
                }
            }
        }
    }

    #[test]
    fn extreme_values_stay_finite_and_inside_the_plot() {
        let mut chart = Chart::new("t", "x (d)", "y (au)");
        chart.series = vec![Series {
            label: "s".into(),
            points: vec![
                Point::new(-f64::MAX, f64::MAX),
                Point::new(f64::MAX, -f64::MAX).with_err(f64::MAX),
                Point::new(5e-324, 1e-310),
            ],
            style: Style::nth(0, true),
        }];
        assert_marks_inside(&chart);
        chart.series[0].points = vec![Point::new(1e-310, 1e-320), Point::new(2e-310, 3e-320)];
        assert_marks_inside(&chart);
        chart.series[0].points = vec![Point::new(1e15, 1.0), Point::new(1e15 + 0.25, 1.0 + 1e-15)];
        assert_marks_inside(&chart);
    }

    fn assert_marks_inside(chart: &Chart) {
        let svg = svg_of(chart);
        let lower = svg.to_lowercase();
        assert!(!lower.contains("nan") && !lower.contains("inf"), "{svg}");
        let doc = parse(&svg);
        let frame = Frame::of(&doc);
        let marks = with_class(&doc, "point");
        assert_eq!(marks.len(), chart.series[0].points.len());
        for mark in marks {
            let (cx, cy) = (num(mark, "data-cx"), num(mark, "data-cy"));
            assert!(cx >= frame.x_range.0 - PX_TOL && cx <= frame.x_range.1 + PX_TOL);
            assert!(cy >= frame.y_range.1 - PX_TOL && cy <= frame.y_range.0 + PX_TOL);
        }
    }

    #[test]
    fn every_shape_is_centred_on_its_datum() {
        let mut chart = Chart::new("shapes", "x (d)", "y (au)");
        chart.series = Mark::ALL
            .iter()
            .enumerate()
            .map(|(i, &mark)| Series {
                label: mark.name().into(),
                points: vec![
                    Point::new(i as f64, 0.3 * i as f64),
                    Point::new(i as f64 + 0.5, 1.0).hollow(),
                ],
                style: Style {
                    mark,
                    colour: Colour::SERIES_ORDER[i],
                    joined: false,
                },
            })
            .collect();
        let svg = svg_of(&chart);
        let doc = parse(&svg);
        let frame = Frame::of(&doc);
        let marks = with_class(&doc, "point");
        assert_eq!(marks.len(), 10);
        for mark in marks {
            let (x, y) = frame.px(num(mark, "data-x"), num(mark, "data-y"));
            let (cx, cy) = drawn_centre(mark);
            assert_close(cx, x, "shape x");
            assert_close(cy, y, "shape y");
        }
    }

    #[test]
    fn the_legend_has_one_entry_per_series_with_its_mark_and_colour() {
        let mut chart = Chart::new("stations", "date (UTC)", "RA cos Dec (arcsec)");
        chart.series = (0..7)
            .map(|i| Series {
                label: format!("ZQ{i} a long station name to force wrapping"),
                points: vec![Point::new(f64::from(i), 0.1)],
                style: Style::nth(i as usize, false),
            })
            .collect();
        chart.height = 480;
        let svg = svg_of(&chart);
        let doc = parse(&svg);
        let entries = with_class(&doc, "legend-entry");
        assert_eq!(entries.len(), 7);
        for (entry, series) in entries.iter().zip(&chart.series) {
            assert_eq!(entry.attribute("data-series"), Some(series.label.as_str()));
            assert_eq!(entry.attribute("data-mark"), Some(series.style.mark.name()));
            let mark = entry
                .children()
                .find(|n| n.attribute("class") == Some("legend-mark"))
                .unwrap();
            assert_eq!(mark.attribute("fill"), Some(series.style.colour.hex()));
            let want_tag = if series.style.mark == Mark::Circle {
                "circle"
            } else {
                "path"
            };
            assert_eq!(mark.tag_name().name(), want_tag);
        }
        // Wrapped onto several rows, all inside the picture.
        let rows: Vec<f64> = entries
            .iter()
            .map(|e| num(e.children().find(|n| n.has_tag_name("text")).unwrap(), "y"))
            .collect();
        assert!(rows.iter().any(|&y| y != rows[0]));
        assert!(rows.iter().all(|&y| y < 480.0));
        // Two series never share both shape and colour (5 shapes, 7 colours).
        let styles: Vec<(Mark, Colour)> = (0..35)
            .map(|i| {
                let s = Style::nth(i, false);
                (s.mark, s.colour)
            })
            .collect();
        for (i, a) in styles.iter().enumerate() {
            assert!(!styles[i + 1..].contains(a));
        }
    }

    #[test]
    fn the_palette_is_okabe_and_ito() {
        // Okabe & Ito (2008), "Color Universal Design", the eight colours.
        assert_eq!(
            OKABE_ITO,
            [
                "#000000", "#E69F00", "#56B4E9", "#009E73", "#F0E442", "#0072B2", "#D55E00",
                "#CC79A7"
            ]
        );
        assert_eq!(Colour::Vermillion.hex(), "#D55E00");
        assert_eq!(Colour::SkyBlue.hex(), "#56B4E9");
        assert!(!Colour::SERIES_ORDER.contains(&Colour::Yellow));
    }

    #[test]
    fn the_document_is_accessible_and_self_contained() {
        let svg = svg_of(&sample());
        let doc = parse(&svg);
        let root = doc.root_element();
        assert_eq!(root.tag_name().name(), "svg");
        assert_eq!(
            root.tag_name().namespace(),
            Some("http://www.w3.org/2000/svg")
        );
        assert_eq!(root.attribute("viewBox"), Some("0 0 640 360"));
        assert_eq!(root.attribute("width"), Some("640"));
        assert_eq!(root.attribute("height"), Some("360"));
        assert_eq!(root.attribute("role"), Some("img"));
        assert_eq!(root.attribute("font-family"), Some("sans-serif"));
        let first = root.first_element_child().unwrap();
        assert_eq!(
            (first.tag_name().name(), first.text()),
            ("title", Some("Original 1/a"))
        );
        let background = with_class(&doc, "background")[0];
        assert_eq!(background.attribute("fill"), Some("white"));
        assert!(!svg.contains("<script") && !svg.contains("href") && !svg.contains("url("));
        assert!(!svg.contains("<image") && !svg.contains("@import"));
        let plot = with_class(&doc, "plot")[0];
        assert_eq!(plot.tag_name().name(), "g");
        assert_eq!(num(plot, "data-series-count"), 2.0);
        assert_eq!(with_class(&doc, "axis x").len(), 1);
        assert_eq!(with_class(&doc, "axis y").len(), 1);
        for axis in ["axis x", "axis y"] {
            let line = with_class(&doc, axis)[0].first_element_child().unwrap();
            assert_eq!(line.attribute("class"), Some("axis-line"));
        }
    }

    #[test]
    fn joined_series_break_at_skipped_points() {
        let mut chart = sample();
        chart.series[0].points.insert(1, Point::new(f64::NAN, 0.0));
        chart.series[0].points.push(Point::new(12.0, 2.5));
        let svg = svg_of(&chart);
        let doc = parse(&svg);
        let lines = with_class(&doc, "series-line");
        // Runs: [x=0] alone (no line), then [5, 10, 12].
        assert_eq!(lines.len(), 1);
        let marks: Vec<String> = with_class(&doc, "point")
            .iter()
            .filter(|m| m.attribute("data-series") == Some("recommended"))
            .skip(1)
            .map(|m| {
                format!(
                    "{},{}",
                    m.attribute("data-cx").unwrap(),
                    m.attribute("data-cy").unwrap()
                )
            })
            .collect();
        assert_eq!(lines[0].attribute("points"), Some(marks.join(" ").as_str()));
        // Unjoined series draw no line.
        assert!(lines
            .iter()
            .all(|l| l.attribute("data-series") == Some("recommended")));
    }

    proptest! {
        #![proptest_config(ProptestConfig::with_cases(64))]

        #[test]
        fn any_data_gives_a_parseable_chart_with_one_mark_per_drawable_point(
            raw in proptest::collection::vec(
                (prop_oneof![Just(f64::NAN), -1e6..1e6f64, Just(f64::INFINITY)],
                 prop_oneof![Just(f64::NAN), -1e3..1e3f64, Just(0.0)],
                 proptest::option::of(0.0..10.0f64),
                 any::<bool>()),
                0..40),
            time in any::<bool>(),
        ) {
            let points: Vec<Point> = raw
                .iter()
                .map(|&(x, y, y_err, hollow)| Point { x, y, y_err, hollow })
                .collect();
            let drawable = points.iter().filter(|p| p.is_drawable()).count();
            let mut chart = Chart::new("t", "x (d)", "y (au)");
            if time {
                chart.x_axis = Axis::Time { epoch_mjd: 60_000.0 };
            }
            chart.series = vec![Series { label: "s".into(), points, style: Style::nth(0, true) }];
            let svg = svg_of(&chart);
            let lower = svg.to_lowercase();
            prop_assert!(!lower.contains("nan") && !lower.contains("inf"));
            let doc = parse(&svg);
            let frame = Frame::of(&doc);
            let marks = with_class(&doc, "point");
            prop_assert_eq!(marks.len(), drawable);
            for mark in marks {
                let (x, y) = frame.px(num(mark, "data-x"), num(mark, "data-y"));
                prop_assert!((num(mark, "data-cx") - x).abs() <= PX_TOL);
                prop_assert!((num(mark, "data-cy") - y).abs() <= PX_TOL);
                prop_assert!(x >= frame.x_range.0 && x <= frame.x_range.1);
                prop_assert!(y >= frame.y_range.1 && y <= frame.y_range.0);
            }
        }
    }
}
