//! `report.html`: one self-contained page to hand on after a run: the cautions, the job
//! summary, each step's summary with its pictures (linked beside the page, relative paths), the
//! stage tables per well, the strongest outcome relations, the best lateral azimuths of the
//! scan, every note, and the inputs and outputs with their checksums. Plain HTML and CSS (no script, no network resource), readable
//! on a laptop screen and printable.

use super::run_record::{RunRecord, StepRecord};
use std::fmt::Write as _;
use std::path::Path;

/// File name of the report in the output folder.
pub const REPORT_FILE: &str = "report.html";

/// Section headings by step kind, in report order.
const SECTIONS: [(&str, &str); 8] = [
    ("render", "Maps"),
    ("anisotropy", "Azimuthal anisotropy"),
    ("stages", "Stages along the wells"),
    ("plan", "Lateral azimuth scan"),
    ("window_study", "Window size"),
    ("curvature", "Curvature"),
    ("sector_times", "Sector times measured from seismic"),
    ("grid", "Grids"),
];

/// Stage-table columns shown in the report, when present, with their headings.
const STAGE_COLUMNS: [(&str, &str); 11] = [
    ("stage", "stage"),
    ("md_top", "MD top"),
    ("md_base", "MD base"),
    ("md_unit", "MD unit"),
    ("fast_azimuth", "fast azimuth (deg)"),
    ("angle_to_well", "angle to well (deg)"),
    ("magnitude_mean", "magnitude (ms)"),
    ("resultant_length", "resultant length"),
    ("n_bins", "bins"),
    ("standoff_mean", "stand-off (m)"),
    ("flag", "flag"),
];

/// Scan columns shown for the best candidates.
const PLAN_COLUMNS: [(&str, &str); 8] = [
    ("azimuth", "lateral azimuth (deg)"),
    ("score", "score"),
    ("score_low", "90% low"),
    ("score_high", "90% high"),
    ("fast_azimuth", "fast azimuth (deg)"),
    ("angle_to_well", "angle to fast (deg)"),
    ("magnitude_mean", "magnitude (ms)"),
    ("flag", "flag"),
];

/// Outcome-test columns shown in the report.
const OUTCOME_COLUMNS: [(&str, &str); 9] = [
    ("outcome", "outcome"),
    ("metric", "stage metric"),
    ("level", "level"),
    ("n", "n"),
    ("rho", "Spearman rho"),
    ("ci_low", "95% low"),
    ("ci_high", "95% high"),
    ("p_value", "p"),
    ("q_value", "q (all tests)"),
];

/// Outcome tests listed in the report.
const OUTCOME_ROWS: usize = 10;

/// Candidates of the scan listed in the report.
const PLAN_ROWS: usize = 5;

const STYLE: &str = "body{font-family:system-ui,sans-serif;max-width:1100px;margin:1.5em auto;\
padding:0 1em;color:#222;line-height:1.4}h1{font-size:1.6em}h2{border-bottom:1px solid #ccc;\
padding-bottom:.2em;margin-top:1.6em}pre{background:#f6f6f6;padding:.6em;overflow-x:auto;\
font-size:.85em;white-space:pre-wrap}table{border-collapse:collapse;font-size:.85em;margin:.5em 0}\
td,th{border:1px solid #ccc;padding:.2em .5em;text-align:right}th{background:#eee}\
td.t,th.t{text-align:left}figure{margin:1em 0;break-inside:avoid}img{max-width:100%;height:auto;\
border:1px solid #ddd}figcaption{font-size:.85em;color:#555}.caution{border:2px solid #b35806;\
background:#fff4e6;padding:.6em 1em}code{font-size:.9em}@media print{body{max-width:none}\
h2{break-after:avoid}}";

/// The report of `record`, whose outputs are in `output` (read for the stage and scan tables).
pub fn report_html(record: &RunRecord, output: &Path) -> String {
    let mut page = String::new();
    let title = escape(&record.title);
    let _ = write!(
        page,
        "<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">\
<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\
<title>{title}</title><style>{STYLE}</style></head><body>\n<h1>{title}</h1>\n"
    );
    page += "<div class=\"caution\">";
    for caution in &record.cautions {
        let _ = write!(page, "<p>{}</p>", escape(caution));
    }
    page += "</div>\n";
    summary(&mut page, record);
    for (kind, heading) in SECTIONS {
        let steps: Vec<&StepRecord> = record.steps.iter().filter(|s| s.step == kind).collect();
        if steps.is_empty() {
            continue;
        }
        let _ = writeln!(page, "<h2>{heading}</h2>");
        for step in steps {
            step_section(&mut page, step, output);
        }
    }
    notes(&mut page, record);
    files(&mut page, record);
    page += "</body></html>\n";
    page
}

fn summary(page: &mut String, record: &RunRecord) {
    let _ = write!(
        page,
        "<h2>Run</h2><p>{} &middot; job file <code>{}</code> (SHA-256 <code>{}</code>) &middot; \
output folder <code>{}</code> &middot; {:.1} s</p>\n<table><tr><th class=\"t\">step</th>\
<th>line</th><th>files written</th><th>time (s)</th></tr>\n",
        escape(&record.flexure_version),
        escape(&record.job_file.path),
        &record.job_file.sha256,
        escape(&record.output_folder),
        record.total_seconds
    );
    for step in &record.steps {
        let _ = writeln!(
            page,
            "<tr><td class=\"t\">{}</td><td>{}</td><td>{}</td><td>{:.1}</td></tr>",
            escape(&step.step),
            step.line,
            step.outputs.len(),
            step.seconds
        );
    }
    page.push_str("</table>\n");
}

fn step_section(page: &mut String, step: &StepRecord, output: &Path) {
    let _ = writeln!(
        page,
        "<h3>{}</h3>\n<pre>{}</pre>",
        escape(&step.label()),
        escape(step.summary.trim_end())
    );
    for file in &step.outputs {
        let lower = file.to_lowercase();
        if lower.ends_with(".png") && !lower.contains("/roses/") {
            let _ = writeln!(
                page,
                "<figure><img src=\"{}\" alt=\"{}\"><figcaption>{}</figcaption></figure>",
                escape(&url_path(file)),
                escape(file),
                escape(file)
            );
        }
        if step.step == "stages" && lower.ends_with("stages.csv") {
            stage_tables(page, &output.join(file));
        }
        if step.step == "plan" && lower.ends_with(".csv") {
            plan_table(page, &output.join(file));
        }
        if step.step == "stages" && lower.ends_with("outcomes.csv") {
            outcome_table(page, &output.join(file));
        }
    }
}

/// The stage table of each well (selected columns).
fn stage_tables(page: &mut String, path: &Path) {
    let Some((header, rows)) = read_csv(path) else {
        return;
    };
    let Some(well) = header.iter().position(|h| h == "well") else {
        return;
    };
    let mut wells: Vec<&str> = rows.iter().map(|r| r[well].as_str()).collect();
    wells.dedup();
    for name in wells {
        let _ = writeln!(page, "<h4>Well {}</h4>", escape(name));
        let own: Vec<&Vec<String>> = rows.iter().filter(|r| r[well] == name).collect();
        table(page, &header, &own, &STAGE_COLUMNS);
    }
}

/// Which rows of a CSV the report lists: sorted by one numeric column, the first few.
struct Ranking {
    /// Column sorted on.
    column: &'static str,
    /// Largest first (else smallest first).
    descending: bool,
    /// Rows listed.
    rows: usize,
    /// Columns shown, with their headings.
    columns: &'static [(&'static str, &'static str)],
}

/// The best candidates of the scan by score.
const PLAN_RANKING: Ranking = Ranking {
    column: "score",
    descending: true,
    rows: PLAN_ROWS,
    columns: &PLAN_COLUMNS,
};

/// The outcome relations with the smallest p-values.
const OUTCOME_RANKING: Ranking = Ranking {
    column: "p_value",
    descending: false,
    rows: OUTCOME_ROWS,
    columns: &OUTCOME_COLUMNS,
};

fn plan_table(page: &mut String, path: &Path) {
    ranked_table(page, path, &PLAN_RANKING, |_| {
        format!("<h4>Best {PLAN_ROWS} candidates by score</h4>")
    });
}

fn outcome_table(page: &mut String, path: &Path) {
    ranked_table(page, path, &OUTCOME_RANKING, |tests| {
        format!(
            "<h4>Outcome relations: the {OUTCOME_ROWS} smallest p-values of {tests} tests</h4>\n<p>{}</p>",
            escape(super::outcomes::OUTCOME_CAUTION)
        )
    });
}

/// The rows of the CSV at `path` ranked as `ranking` says, under `heading(row count)`.
fn ranked_table(
    page: &mut String,
    path: &Path,
    ranking: &Ranking,
    heading: impl Fn(usize) -> String,
) {
    let Some((header, rows)) = read_csv(path) else {
        return;
    };
    let Some(k) = header.iter().position(|h| h == ranking.column) else {
        return;
    };
    let missing = if ranking.descending {
        f64::NEG_INFINITY
    } else {
        f64::INFINITY
    };
    let value = |r: &Vec<String>| r[k].parse::<f64>().unwrap_or(missing);
    let mut ranked: Vec<&Vec<String>> = rows.iter().collect();
    ranked.sort_by(|a, b| {
        let order = value(a).total_cmp(&value(b));
        if ranking.descending {
            order.reverse()
        } else {
            order
        }
    });
    ranked.truncate(ranking.rows);
    let _ = writeln!(page, "{}", heading(rows.len()));
    table(page, &header, &ranked, ranking.columns);
}

fn table(page: &mut String, header: &[String], rows: &[&Vec<String>], columns: &[(&str, &str)]) {
    let shown: Vec<(usize, &str)> = columns
        .iter()
        .filter_map(|(id, title)| header.iter().position(|h| h == id).map(|k| (k, *title)))
        .collect();
    page.push_str("<table><tr>");
    for (_, title) in &shown {
        let _ = write!(page, "<th>{}</th>", escape(title));
    }
    page.push_str("</tr>\n");
    for row in rows {
        page.push_str("<tr>");
        for (k, _) in &shown {
            let cell = row.get(*k).map(String::as_str).unwrap_or("");
            let class = if cell.parse::<f64>().is_ok() {
                ""
            } else {
                " class=\"t\""
            };
            let _ = write!(page, "<td{class}>{}</td>", escape(&rounded(cell)));
        }
        page.push_str("</tr>\n");
    }
    page.push_str("</table>\n");
}

/// Numbers with at most three decimals, for reading; other text as it is.
fn rounded(cell: &str) -> String {
    match cell.parse::<f64>() {
        Ok(v) if cell.contains('.') || cell.contains('e') => {
            let text = format!("{v:.3}");
            text.trim_end_matches('0').trim_end_matches('.').to_string()
        }
        _ => cell.to_string(),
    }
}

fn read_csv(path: &Path) -> Option<(Vec<String>, Vec<Vec<String>>)> {
    let mut reader = csv::Reader::from_path(path).ok()?;
    let header = reader.headers().ok()?.iter().map(str::to_string).collect();
    let rows = reader
        .records()
        .filter_map(|r| r.ok())
        .map(|r| r.iter().map(str::to_string).collect())
        .collect();
    Some((header, rows))
}

fn notes(page: &mut String, record: &RunRecord) {
    page.push_str("<h2>Notes and warnings</h2>\n");
    if record.warnings.is_empty() {
        page.push_str("<p>None.</p>\n");
        return;
    }
    page.push_str("<ul>\n");
    for w in &record.warnings {
        let _ = writeln!(page, "<li>{}</li>", escape(w));
    }
    page.push_str("</ul>\n");
}

fn files(page: &mut String, record: &RunRecord) {
    page.push_str("<h2>Inputs</h2>\n<table><tr><th class=\"t\">file</th><th class=\"t\">kind</th><th>bytes</th><th class=\"t\">SHA-256</th></tr>\n");
    for f in &record.inputs {
        let _ = writeln!(
            page,
            "<tr><td class=\"t\">{}</td><td class=\"t\">{}</td><td>{}</td><td class=\"t\"><code>{}</code></td></tr>",
            escape(&f.path),
            escape(&f.kind),
            f.bytes,
            f.sha256
        );
    }
    page.push_str("</table>\n<h2>Outputs</h2>\n<p>Listed with their checksums in <code>manifest.json</code>.</p>\n<table><tr><th class=\"t\">file</th><th class=\"t\">kind</th><th class=\"t\">step</th><th>bytes</th></tr>\n");
    for f in &record.outputs {
        let _ = writeln!(
            page,
            "<tr><td class=\"t\"><a href=\"{}\">{}</a></td><td class=\"t\">{}</td><td class=\"t\">{}</td><td>{}</td></tr>",
            escape(&url_path(&f.path)),
            escape(&f.path),
            escape(&f.kind),
            escape(f.step.as_deref().unwrap_or("")),
            f.bytes
        );
    }
    page.push_str("</table>\n");
}

/// A relative path as a URL path: `/` separators, spaces and other reserved bytes
/// percent-encoded (RFC 3986, section 2.1).
fn url_path(path: &str) -> String {
    let mut out = String::new();
    for byte in path.replace('\\', "/").bytes() {
        match byte {
            b'A'..=b'Z' | b'a'..=b'z' | b'0'..=b'9' | b'-' | b'.' | b'_' | b'~' | b'/' => {
                out.push(byte as char)
            }
            _ => {
                let _ = write!(out, "%{byte:02X}");
            }
        }
    }
    out
}

/// Text escaped for HTML content and attribute values.
fn escape(text: &str) -> String {
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

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn escaping_and_url_paths_follow_html_and_rfc_3986() {
        // HTML Living Standard (escaping text and attributes); RFC 3986 section 2.1.
        assert_eq!(escape("a<b & \"c\"'"), "a&lt;b &amp; &quot;c&quot;&#39;");
        assert_eq!(url_path("maps/k pos#1.png"), "maps/k%20pos%231.png");
    }
}
