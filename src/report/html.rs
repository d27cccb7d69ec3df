//! The review page `report.html`: one self-contained file (inline CSS, inline SVG charts, a
//! few lines of inline script to sort the table; nothing fetched from a network) that links to
//! the per-trial figures in `plots/`.

use std::fmt::Write;

use crate::measure::{Status, TrialRecord};
use crate::report::groups::MIN_N_BOOTSTRAP;

/// One row of the trial table.
#[derive(Debug, Clone, PartialEq)]
pub struct TrialRow {
    pub trial: String,
    pub group: String,
    pub status: Status,
    pub flags: String,
    /// Measures with their standard uncertainties.
    pub loading_ms: Option<(f64, Option<f64>)>,
    pub release_ms: Option<(f64, Option<f64>)>,
    pub amplification: Option<(f64, Option<f64>)>,
    pub residual_ms: Option<f64>,
    pub error: Option<String>,
    /// Figure file name inside `plots/`.
    pub figure: String,
}

impl TrialRow {
    /// The table row of a record whose figure is `plots/<figure>`.
    pub fn from_record(r: &TrialRecord, figure: String) -> Self {
        TrialRow {
            trial: r.trial.clone(),
            group: r.group.clone().unwrap_or_default(),
            status: r.status,
            flags: r.flags_joined(),
            loading_ms: r.loading_ms.map(|v| (v, r.loading_ms_sd)),
            release_ms: r.release_ms.map(|v| (v, r.release_ms_sd)),
            amplification: r.amplification.map(|v| (v, r.amplification_sd)),
            residual_ms: r.sync.as_ref().map(|s| s.residual_ms),
            error: r.error.clone(),
            figure,
        }
    }
}

/// What the page shows.
#[derive(Debug, Clone, Default)]
pub struct ReviewPage {
    pub title: String,
    pub rows: Vec<TrialRow>,
    /// Flag name and count, in display order.
    pub flag_counts: Vec<(String, usize)>,
    /// Inline SVG charts (strip charts per measure, residual chart).
    pub group_charts: Vec<String>,
    pub residual_chart: Option<String>,
    /// Where the residual chart's recording times came from.
    pub residual_note: String,
    /// What made the page: version, settings hash, rig file, run times, command.
    pub header: Vec<(String, String)>,
    /// Every setting the records were made with, as (name, value).
    pub settings: Vec<(String, String)>,
}

/// Escapes text for HTML element content and attribute values.
pub fn escape(text: &str) -> String {
    let mut out = String::with_capacity(text.len());
    for c in text.chars() {
        match c {
            '&' => out.push_str("&amp;"),
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '"' => out.push_str("&quot;"),
            '\'' => out.push_str("&#39;"),
            _ => out.push(c),
        }
    }
    out
}

/// Percent-encodes a file name for use in a relative link.
pub fn url_path(name: &str) -> String {
    name.bytes()
        .map(|b| {
            if b.is_ascii_alphanumeric() || matches!(b, b'-' | b'_' | b'.') {
                (b as char).to_string()
            } else {
                format!("%{b:02X}")
            }
        })
        .collect()
}

fn cell(v: Option<f64>, decimals: usize) -> String {
    match v {
        Some(v) => format!("<td data-v=\"{v}\">{v:.decimals$}</td>"),
        None => "<td data-v=\"\">-</td>".to_string(),
    }
}

/// A measure's cell with its standard uncertainty beside it; sorts by the value.
fn cell_sd(v: Option<(f64, Option<f64>)>, decimals: usize) -> String {
    match v {
        Some((v, Some(sd))) => {
            format!("<td data-v=\"{v}\">{v:.decimals$} <small>(sd {sd:.decimals$})</small></td>")
        }
        Some((v, None)) => cell(Some(v), decimals),
        None => cell(None, decimals),
    }
}

fn key_value_table(h: &mut String, class: &str, rows: &[(String, String)]) {
    let _ = writeln!(h, "<table class=\"{class}\">");
    for (k, v) in rows {
        let _ = writeln!(h, "<tr><th>{}</th><td>{}</td></tr>", escape(k), escape(v));
    }
    let _ = writeln!(h, "</table>");
}

const STYLE: &str = "body{font-family:sans-serif;margin:24px;color:#222;max-width:1200px}\
h1{font-size:22px}h2{font-size:18px;margin-top:28px}\
table{border-collapse:collapse;font-size:13px}td,th{border:1px solid #ccc;padding:3px 7px;text-align:left}\
th{background:#eee;cursor:pointer}tr.flagged td{background:#fdf0e6}tr.error td{background:#f6e0e0}\
.charts{display:flex;flex-wrap:wrap;gap:12px}.charts svg{border:1px solid #ddd}\
.counts td{min-width:60px}table.run th,table.settings th{cursor:auto;text-align:left;font-weight:normal}\
.mean-all{display:none}body.with-flagged .mean-all{display:inline}body.with-flagged .mean-clean{display:none}\
.switch{margin:8px 0;font-size:14px}\
@media print{th{cursor:auto}tr.flagged td,tr.error td{background:none;font-weight:bold}}";

const SORT_SCRIPT: &str = "document.querySelectorAll('table.sortable th').forEach(function(th,i){\
th.addEventListener('click',function(){var tb=th.closest('table').tBodies[0];\
var rows=Array.prototype.slice.call(tb.rows);var dir=th.dataset.dir==='a'?-1:1;th.dataset.dir=dir===1?'a':'d';\
rows.sort(function(a,b){var x=a.cells[i].dataset.v!==undefined?a.cells[i].dataset.v:a.cells[i].textContent;\
var y=b.cells[i].dataset.v!==undefined?b.cells[i].dataset.v:b.cells[i].textContent;\
var nx=parseFloat(x),ny=parseFloat(y);if(!isNaN(nx)&&!isNaN(ny)){return dir*(nx-ny);}\
return dir*String(x).localeCompare(String(y));});rows.forEach(function(r){tb.appendChild(r);});});});\
var sw=document.getElementById('with-flagged');if(sw){sw.addEventListener('change',function(){\
document.body.classList.toggle('with-flagged',sw.checked);});}";

/// Renders the page. Rows are shown errors first, then flagged, then by name.
pub fn render(page: &ReviewPage) -> String {
    let mut rows = page.rows.clone();
    let rank = |s: Status| match s {
        Status::Error => 0,
        Status::Flagged => 1,
        Status::Ok => 2,
    };
    rows.sort_by(|a, b| {
        rank(a.status)
            .cmp(&rank(b.status))
            .then_with(|| a.trial.cmp(&b.trial))
    });
    let count = |s: Status| rows.iter().filter(|r| r.status == s).count();
    let mut h = String::new();
    let _ = write!(
        h,
        "<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\"/>\n<title>{}</title>\n<style>{STYLE}</style>\n</head>\n<body>\n",
        escape(&page.title)
    );
    let _ = writeln!(h, "<h1>{}</h1>", escape(&page.title));
    key_value_table(&mut h, "run", &page.header);
    let _ = writeln!(
        h,
        "<p>{} trials: <b>{}</b> ok, <b>{}</b> flagged, <b>{}</b> errors.</p>",
        rows.len(),
        count(Status::Ok),
        count(Status::Flagged),
        count(Status::Error)
    );
    // Only the flags raised; the README lists them all.
    let raised: Vec<&(String, usize)> = page.flag_counts.iter().filter(|f| f.1 > 0).collect();
    if raised.is_empty() {
        let _ = writeln!(h, "<p>No trial carries a flag.</p>");
    } else {
        let _ = writeln!(
            h,
            "<table class=\"counts\"><tr><th>flag</th><th>trials</th></tr>"
        );
        for (flag, n) in raised {
            let _ = writeln!(h, "<tr><td>{}</td><td>{n}</td></tr>", escape(flag));
        }
        let _ = writeln!(h, "</table>");
    }
    let flagged = count(Status::Flagged);
    let _ = writeln!(
        h,
        "<h2>Groups</h2>\n<p>Points: trials, named on hover and linked to their figure; flagged \
trials are hollow triangles. Bar: the group's mean, with its bootstrap 95 % interval from \
{MIN_N_BOOTSTRAP} trials on. Under each group: clean + flagged trials.</p>\n\
<p class=\"switch\"><label><input type=\"checkbox\" id=\"with-flagged\"/> include the {flagged} \
flagged trial(s) in the group means (by default the means are of the clean trials only)</label></p>\n\
<div class=\"charts\">"
    );
    for svg in &page.group_charts {
        h.push_str(svg);
        h.push('\n');
    }
    let _ = writeln!(h, "</div>");
    if let Some(svg) = &page.residual_chart {
        let _ = writeln!(
            h,
            "<h2>Audio-video clock over the campaign</h2>\n<p>{}</p>\n<div class=\"charts\">{svg}</div>",
            escape(&page.residual_note)
        );
    }
    let _ = writeln!(h, "<h2>Trials</h2>\n<p>Click a column heading to sort. Errors and flagged trials come first.</p>");
    let _ = writeln!(
        h,
        "<table class=\"sortable\" id=\"trials\"><thead><tr><th>trial</th><th>group</th><th>status</th><th>flags</th>\
<th>loading ms</th><th>release ms</th><th>amplification</th><th>clock residual ms</th><th>figure</th></tr></thead><tbody>"
    );
    for r in &rows {
        let status = format!("{:?}", r.status).to_lowercase();
        let flags = match &r.error {
            Some(e) => format!("{} {}", r.flags, e),
            None => r.flags.clone(),
        };
        let _ = writeln!(
            h,
            "<tr class=\"{status}\"><td>{}</td><td>{}</td><td>{status}</td><td>{}</td>{}{}{}{}<td><a href=\"plots/{}\">figure</a></td></tr>",
            escape(&r.trial),
            escape(&r.group),
            escape(&flags),
            cell_sd(r.loading_ms, 1),
            cell_sd(r.release_ms, 2),
            cell_sd(r.amplification, 2),
            cell(r.residual_ms, 3),
            url_path(&r.figure),
        );
    }
    let _ = writeln!(h, "</tbody></table>");
    let _ = writeln!(h, "<h2>Settings</h2>\n<p>The effective settings every record was made with (rig profile after command-line overrides).</p>");
    key_value_table(&mut h, "settings", &page.settings);
    let _ = writeln!(
        h,
        "<script>//<![CDATA[\n{SORT_SCRIPT}\n//]]></script>\n</body>\n</html>"
    );
    h
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn names_are_escaped_and_links_encoded() {
        assert_eq!(escape("<a & \"b\">"), "&lt;a &amp; &quot;b&quot;&gt;");
        assert_eq!(url_path("trial 1#a.svg"), "trial%201%23a.svg");
    }

    #[test]
    fn errors_then_flagged_trials_come_first() {
        let mut ok = TrialRecord::empty("a-ok", None);
        ok.status = Status::Ok;
        let mut flagged = TrialRecord::empty("z-flagged", None);
        flagged.status = Status::Flagged;
        let failed = TrialRecord::failed("m-error", None, "bad <file>".into());
        let page = ReviewPage {
            title: "t".into(),
            rows: [&ok, &flagged, &failed]
                .iter()
                .map(|r| TrialRow::from_record(r, format!("{}.svg", r.trial)))
                .collect(),
            ..ReviewPage::default()
        };
        let html = render(&page);
        let pos = |s: &str| html.find(s).unwrap();
        assert!(pos("m-error") < pos("z-flagged") && pos("z-flagged") < pos("a-ok"));
        assert!(html.contains("bad &lt;file&gt;"));
    }
}
