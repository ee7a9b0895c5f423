//! The pages' HTML: plain, printable, no scripts, readable without
//! JavaScript. Pure functions of what the store holds.

use std::fmt::Write;

use serde_json::Value;

use crate::alerts::event::{AlertRecord, Edge};
use crate::solve::numbers::{fixed, rounded};
use crate::solve::plan::Plan;
use crate::store::{ObjectState, SolutionSummary};

/// Text made safe for HTML content and attribute values.
pub fn escape(text: &str) -> String {
    let mut out = String::with_capacity(text.len());
    for c in text.chars() {
        match c {
            '&' => out.push_str("&amp;"),
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '"' => out.push_str("&quot;"),
            '\'' => out.push_str("&#39;"),
            c => out.push(c),
        }
    }
    out
}

const STYLE: &str = "body{font-family:sans-serif;margin:1.5em;color:#000;background:#fff;max-width:70em}\
table{border-collapse:collapse;margin:0.5em 0}th,td{border:1px solid #bbb;padding:0.2em 0.5em;text-align:left}\
td.n{text-align:right;font-variant-numeric:tabular-nums}figure{margin:1em 0}\
.verdict{border-left:4px solid #0072B2;padding-left:0.8em}.warning{border-left-color:#D55E00}\
.caution{font-size:0.9em;color:#333}figure svg{max-width:100%;height:auto}.pair{display:grid;grid-template-columns:repeat(auto-fit,minmax(26em,1fr));gap:0 1em}";

fn page(title: &str, body: &str) -> String {
    format!(
        "<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\"><title>{}</title>\
         <meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\
         <link rel=\"icon\" href=\"data:,\">\
         <style>{STYLE}</style></head>\n<body>\n{body}\n<p class=\"caution\">Predictions are for \
         planning observations. This service computes no impact probabilities and does not \
         replace the official orbit-computing services or review by a qualified analyst.</p>\n\
         </body></html>\n",
        escape(title)
    )
}

/// One line of the index.
#[derive(Debug, Clone)]
pub struct IndexRow {
    pub object: ObjectState,
    pub name: String,
    pub open_alerts: usize,
}

fn sigma_cell(v: Option<f64>) -> String {
    v.map_or("-".into(), |s| fixed(s, 1))
}

fn bound_words(s: &SolutionSummary) -> String {
    match s.one_over_a_original_per_au {
        Some(v) if v.sigma > 0.0 => {
            let sigmas = v.value / v.sigma;
            let word = if sigmas <= -3.0 {
                "unbound"
            } else if sigmas >= 3.0 {
                "bound"
            } else {
                "not determined"
            };
            format!("{word} ({} sigma)", fixed(sigmas, 1))
        }
        _ => "-".into(),
    }
}

/// `/`: every object with its latest verdict in one line, most recent
/// change first.
pub fn index(rows: &[IndexRow]) -> String {
    let mut body = String::from("<h1>Objects</h1>\n");
    if rows.is_empty() {
        body.push_str("<p>No object yet: observations dropped into the watched directory appear here once they are fitted.</p>");
        return page("perihelix: objects", &body);
    }
    body.push_str(
        "<table id=\"objects\"><thead><tr><th>object</th><th>observations</th><th>arc (days)</th>\
         <th>recommended model</th><th>bound or unbound (1/a in sigma)</th><th>non-gravitational significance (sigma)</th>\
         <th>last solution (UTC)</th><th>open alerts (raised, not cleared, not acknowledged)</th></tr></thead><tbody>\n",
    );
    for r in rows {
        let o = &r.object;
        let latest = o.latest.as_ref();
        let _ = writeln!(
            body,
            "<tr><td><a href=\"/objects/{}\">{}</a></td><td class=\"n\">{}</td><td class=\"n\">{}</td>\
             <td>{}</td><td>{}</td><td class=\"n\">{}</td><td>{}</td><td class=\"n\">{}</td></tr>",
            escape(&o.id),
            escape(&r.name),
            o.observations,
            latest
                .and_then(|s| s.arc_days)
                .map_or("-".into(), |a| fixed(a, 1)),
            escape(
                latest
                    .and_then(|s| s.recommended.as_deref())
                    .unwrap_or("none converged")
            ),
            latest.map_or("-".into(), bound_words),
            sigma_cell(latest.and_then(|s| s.ng_significance_sigma)),
            escape(latest.map_or("-", |s| s.created_utc.as_str())),
            r.open_alerts
        );
    }
    body.push_str("</tbody></table>");
    page("perihelix: objects", &body)
}

/// What the object page shows.
pub struct ObjectView<'a> {
    pub object: &'a ObjectState,
    pub name: &'a str,
    pub solutions: usize,
    /// (element id, SVG) in page order: the solution history...
    pub history: Vec<(&'static str, String)>,
    /// ...and the latest residuals, set two to a row.
    pub residuals: Vec<(&'static str, String)>,
    /// The latest solution's document, its plan and the object's alerts.
    pub document: Option<&'a Value>,
    pub plan: Option<&'a Plan>,
    pub alerts: &'a [AlertRecord],
}

fn verdict_block(doc: &Value) -> String {
    let mut lines = Vec::new();
    for key in ["no_model_explains", "many_rejected", "arc_too_short"] {
        if let Some(t) = doc["refusals"][key].as_str() {
            lines.push(format!("<p class=\"verdict warning\">{}</p>", escape(t)));
        }
    }
    for path in [
        ["terms", "text"],
        ["bound", "text"],
        ["law", "text"],
        ["cost_of_honesty", "text"],
    ] {
        if let Some(t) = doc[path[0]][path[1]].as_str() {
            lines.push(format!("<p class=\"verdict\">{}</p>", escape(t)));
        }
    }
    lines.join("\n")
}

fn ladder_table(doc: &Value) -> String {
    let models = doc["models"].as_array().cloned().unwrap_or_default();
    let best = models
        .iter()
        .filter(|m| m["converged"].as_bool() == Some(true))
        .filter_map(|m| m["bic"].as_f64())
        .fold(f64::INFINITY, f64::min);
    let mut t = String::from(
        "<table id=\"ladder\"><thead><tr><th>model</th><th>converged</th><th>normalised RMS</th>\
         <th>BIC above the best</th><th>against gravity alone (sigma)</th><th>terms (au/day^2)</th>\
         </tr></thead><tbody>\n",
    );
    for m in &models {
        let name = m["name"].as_str().unwrap_or("?");
        let star = if m["recommended"].as_bool() == Some(true) {
            " (recommended)"
        } else {
            ""
        };
        let terms: Vec<String> = m["nongrav"]
            .as_object()
            .map(|o| {
                o.iter()
                    .filter_map(|(k, v)| {
                        Some(format!(
                            "{k} = {}",
                            rounded(v["value"].as_f64()?, v["sigma"].as_f64()?)
                        ))
                    })
                    .collect()
            })
            .unwrap_or_default();
        let _ = writeln!(
            t,
            "<tr><td>{}{}</td><td>{}</td><td class=\"n\">{}</td><td class=\"n\">{}</td><td class=\"n\">{}</td><td>{}</td></tr>",
            escape(name),
            star,
            if m["converged"].as_bool() == Some(true) { "yes" } else { "no" },
            m["normalized_rms"].as_f64().map_or("-".into(), |x| fixed(x, 2)),
            m["bic"]
                .as_f64()
                .filter(|_| best.is_finite())
                .map_or("-".into(), |b| fixed(b - best, 1)),
            m["test_against_gravity"]["sigma"]
                .as_f64()
                .map_or("-".into(), |x| fixed(x, 1)),
            escape(&terms.join("; "))
        );
    }
    t.push_str("</tbody></table>");
    t
}

fn outlook_block(doc: &Value) -> String {
    let o = &doc["outlook"];
    let Some(models) = o["models"].as_array() else {
        return String::new();
    };
    let mut t = format!(
        "<h2>Pointing {} days after the arc ({} UTC, from the geocentre)</h2>\n\
         <table id=\"outlook\"><thead><tr><th>model</th><th>1-sigma semi-major axis (arcsec)</th></tr></thead><tbody>\n",
        o["days_after_arc"].as_f64().map_or("-".into(), |d| fixed(d, 0)),
        escape(o["utc"].as_str().unwrap_or("-"))
    );
    for m in models {
        let _ = writeln!(
            t,
            "<tr><td>{}</td><td class=\"n\">{}</td></tr>",
            escape(m["model"].as_str().unwrap_or("?")),
            m["semi_major_arcsec"]
                .as_f64()
                .map_or("-".into(), |x| fixed(x, 3))
        );
    }
    let _ = writeln!(
        t,
        "<tr><td>averaged over the models (weights exp(-dBIC/2))</td><td class=\"n\">{}</td></tr></tbody></table>",
        o["averaged"]["semi_major_arcsec"]
            .as_f64()
            .map_or("-".into(), |x| fixed(x, 3))
    );
    t
}

/// The model-averaged place on the nights after the arc.
fn ahead_block(doc: &Value) -> String {
    let Some(rows) = doc["outlook"]["ahead"].as_array().filter(|r| !r.is_empty()) else {
        return String::new();
    };
    let mut t = String::from(
        "<h2>Where to point next (averaged over the models, from the geocentre)</h2>\n\
         <table id=\"ahead\"><thead><tr><th>days after the last observation</th><th>UTC</th>\
         <th>RA (deg)</th><th>Dec (deg)</th><th>1-sigma ellipse (arcsec)</th>\
         <th>position angle (deg)</th><th>of which the models' disagreement (arcsec)</th>\
         </tr></thead><tbody>\n",
    );
    let num = |v: &Value, d: usize| v.as_f64().map_or("-".into(), |x| fixed(x, d));
    for r in rows {
        let _ = writeln!(
            t,
            "<tr><td class=\"n\">{}</td><td>{}</td><td class=\"n\">{}</td><td class=\"n\">{}</td>\
             <td class=\"n\">{} x {}</td><td class=\"n\">{}</td><td class=\"n\">{}</td></tr>",
            num(&r["days_after_arc"], 0),
            escape(r["utc"].as_str().unwrap_or("-")),
            num(&r["ra_deg"], 5),
            num(&r["dec_deg"], 5),
            num(&r["semi_major_arcsec"], 2),
            num(&r["semi_minor_arcsec"], 2),
            num(&r["position_angle_deg"], 0),
            num(&r["between_models_arcsec"], 2),
        );
    }
    t.push_str("</tbody></table>");
    t
}

fn plan_block(plan: &Plan) -> String {
    let mut t = format!(
        "<h2>Nights that would tell {} from its rivals ({} to {})</h2>\n\
         <table id=\"plan\"><thead><tr><th>station</th><th>night of</th><th>best time (UTC)</th>\
         <th>hours dark</th><th>expected separation (sigma)</th><th>split from {} (arcsec)</th>\
         <th>nights to 3 sigma</th></tr></thead><tbody>\n",
        escape(&plan.model),
        escape(&plan.from_utc),
        escape(&plan.to_utc),
        escape(&plan.rival)
    );
    for n in plan.nights.iter().take(10) {
        let _ = writeln!(
            t,
            "<tr><td>{}</td><td>{}</td><td>{}</td><td class=\"n\">{}</td><td class=\"n\">{}</td><td class=\"n\">{}</td><td class=\"n\">{}</td></tr>",
            escape(&n.station),
            escape(&n.night),
            escape(&n.utc),
            fixed(n.observable_hours, 1),
            fixed(n.expected_sigma, 2),
            fixed(n.separation_arcsec, 3),
            n.nights_to_3_sigma.map_or("not enough".into(), |k| k.to_string())
        );
    }
    t.push_str("</tbody></table>");
    t
}

fn alerts_block(alerts: &[AlertRecord]) -> String {
    if alerts.is_empty() {
        return "<h2>Alerts</h2>\n<p>None.</p>".into();
    }
    let mut t = String::from(
        "<h2>Alerts</h2>\n<table id=\"alerts\"><thead><tr><th>at (UTC)</th><th>solution</th>\
         <th>raised or cleared</th><th>alert</th><th>acknowledged</th></tr></thead><tbody>\n",
    );
    for a in alerts {
        let _ = writeln!(
            t,
            "<tr><td>{}</td><td class=\"n\">{}</td><td>{}</td><td>{}</td><td>{}</td></tr>",
            escape(&a.event.raised_utc),
            a.event.solution_seq,
            match a.event.edge {
                Edge::Raised => "raised",
                Edge::Cleared => "cleared",
            },
            escape(&a.event.subject),
            a.acknowledged
                .as_ref()
                .map_or("no".to_string(), |k| format!("by {}", escape(&k.by)))
        );
    }
    t.push_str("</tbody></table>");
    t
}

/// `/objects/{id}`.
pub fn object(view: &ObjectView) -> String {
    let o = view.object;
    let mut body = format!(
        "<p><a href=\"/\">All objects</a></p>\n<h1>{}</h1>\n<p>{} observations from {} to {}; \
         {} solutions. JSON: <a href=\"/v1/objects/{}/solutions\">solutions</a>, \
         <a href=\"/v1/objects/{}/plan\">plan</a>.</p>\n",
        escape(view.name),
        o.observations,
        escape(o.first_obs_utc.as_deref().unwrap_or("-")),
        escape(o.last_obs_utc.as_deref().unwrap_or("-")),
        view.solutions,
        escape(&o.id),
        escape(&o.id)
    );
    if let Some(doc) = view.document {
        body.push_str("<h2>The latest verdict</h2>\n");
        body.push_str(&verdict_block(doc));
        body.push('\n');
    }
    body.push_str("<h2>How the picture moved</h2>\n<div class=\"pair\">\n");
    for (id, svg) in &view.history {
        let _ = writeln!(body, "<figure class=\"plot\" id=\"{id}\">{svg}</figure>");
    }
    body.push_str("</div>\n");
    if !view.residuals.is_empty() {
        body.push_str(
            "<h2>The latest residuals</h2>\n<p>Under the recommended model and, when it is not \
             gravity alone, under gravity alone beside it: a trend on the right that is gone on \
             the left is what the extra terms absorb.</p>\n<div class=\"pair\">\n",
        );
        for (id, svg) in &view.residuals {
            let _ = writeln!(body, "<figure class=\"plot\" id=\"{id}\">{svg}</figure>");
        }
        body.push_str("</div>\n");
    }
    if let Some(doc) = view.document {
        body.push_str("<h2>The latest ladder</h2>\n");
        body.push_str(&ladder_table(doc));
        body.push('\n');
        body.push_str(&ahead_block(doc));
        body.push('\n');
        body.push_str(&outlook_block(doc));
        body.push('\n');
    }
    if let Some(plan) = view.plan {
        body.push_str(&plan_block(plan));
        body.push('\n');
    }
    body.push_str(&alerts_block(view.alerts));
    page(&format!("perihelix: {}", view.name), &body)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn text_is_escaped() {
        assert_eq!(
            escape("<a href=\"x\">&'"),
            "&lt;a href=&quot;x&quot;&gt;&amp;&#39;"
        );
    }

    #[test]
    fn an_empty_index_says_what_to_do() {
        let html = index(&[]);
        assert!(html.contains("No object yet"), "{html}");
        assert!(!html.contains("<script"), "{html}");
    }
}
