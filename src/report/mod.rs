//! The encode report (`encode --report`): one self-contained HTML file that shows,
//! for each encoded column, which levels are reliably high or low, how hard rare
//! levels were pulled toward the prior, whether the prior fits the spread of the
//! levels, and how much data the levels have. Pictures are inline SVG; the file
//! fetches nothing when it is opened.
//!
//! * [`levels`] — the numbers behind the pictures and which levels to draw;
//! * [`plots`] — the pictures;
//! * [`query_svg`] — an interval plot of any query result (the shell's `--format svg`).

pub mod levels;
pub mod plots;
mod query;

pub use query::query_svg;

use std::fmt::Write;

use crate::bundle::Bundle;
use crate::encode::ColumnSummary;
use crate::layout::AnyPosterior;
use crate::render::short;
use levels::{data_counts, interval_selection, panels_of, scatter_selection, Panel};

/// Levels with the most data drawn in an interval plot.
pub const MOST_DATA: usize = 15;
/// Levels with the highest lower bound, and with the lowest upper bound, drawn too.
pub const EXTREMES: usize = 10;
/// Points in a shrinkage plot at most: 30,000 circles would weigh megabytes and
/// hide each other.
pub const SCATTER_LIMIT: usize = 1500;
/// Levels with fewer rows than this are left out of the histogram under the prior:
/// their raw means are mostly noise (common practice, no source).
pub const HISTOGRAM_MIN_DATA: f64 = 10.0;
/// At most this many classes of a Dirichlet column are drawn.
pub const CLASS_LIMIT: usize = 8;

/// Escape text for HTML.
pub fn escape(text: &str) -> String {
    let mut out = String::with_capacity(text.len());
    for c in text.chars() {
        match c {
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '&' => out.push_str("&amp;"),
            '"' => out.push_str("&quot;"),
            '\'' => out.push_str("&#39;"),
            c => out.push(c),
        }
    }
    out
}

/// The report of an encode run: its bundle (every level's posterior) and summary.
pub fn html(bundle: &Bundle, summary: &[ColumnSummary]) -> Result<String, String> {
    let mut page = String::new();
    let target = escape(&bundle.target);
    let _ = write!(
        page,
        "<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n\
         <title>posterity encode report: {target}</title>\n<style>{STYLE}</style>\n</head>\n<body>\n\
         <h1>Encodings of <code>{target}</code></h1>\n\
         <p>Family: {}. Each level's posterior comes from all training rows; intervals are \
         central 90&nbsp;% posterior intervals; marker size grows with the level's data.</p>\n\
         <p class=\"caution\">Before these encodings score people: a key such as a postcode can \
         stand in for a protected attribute (proxy discrimination), and local law may restrict \
         or require explanations for automated decisions. Check both first.</p>\n",
        escape(&bundle.family)
    );
    for s in summary {
        let Some(column) = bundle.columns.get(&s.key) else {
            continue;
        };
        let _ = write!(
            page,
            "<section>\n<h2><code>{}</code></h2>\n",
            escape(&s.key)
        );
        let _ = write!(page, "{}", facts_table(s));
        let levels: Vec<(&str, &AnyPosterior)> =
            column.levels.iter().map(|(l, p)| (l.as_str(), p)).collect();
        let panels = panels_of(&s.key, &bundle.target, &column.prior, &levels)
            .map_err(|e| format!("report, column '{}': {e}", s.key))?;
        if let AnyPosterior::Dirichlet(d) = &column.prior {
            if d.prior.classes.len() > CLASS_LIMIT {
                let _ = writeln!(
                    page,
                    "<p>The first {CLASS_LIMIT} of {} classes are drawn.</p>",
                    d.prior.classes.len()
                );
            }
        }
        if let Some(first) = panels.first() {
            let _ = write!(page, "{}", data_table(first));
        }
        for panel in panels.iter().take(CLASS_LIMIT) {
            page.push_str(&panel_html(panel, s.prior_text.as_str())?);
        }
        page.push_str("</section>\n");
    }
    page.push_str("</body>\n</html>\n");
    Ok(page)
}

const STYLE: &str = "body{font-family:sans-serif;max-width:800px;margin:2em auto;color:#222;\
line-height:1.4}table{border-collapse:collapse;margin:.5em 0}td,th{border:1px solid #ccc;\
padding:2px 8px;text-align:left}figure{margin:1em 0}figcaption{font-size:90%;color:#444}\
.caution{border-left:4px solid #D55E00;padding-left:8px}svg{max-width:100%;height:auto}";

fn facts_table(s: &ColumnSummary) -> String {
    let mut rows = vec![
        ("levels", s.levels.to_string()),
        ("rows with the key", s.rows.to_string()),
        ("prior", s.prior_text.clone()),
        ("prior strength (rows)", short(s.strength)),
    ];
    if let Some(why) = s.weight_differs() {
        rows.insert(
            2,
            (
                "their weight in the encodings",
                format!("{} ({why})", short(s.weight)),
            ),
        );
    }
    if let Some(unseen) = s.unseen_share {
        rows.push((
            "scored rows at unseen levels",
            format!("{} %", short(100.0 * unseen)),
        ));
    }
    let mut table = String::from("<table>\n");
    for (name, value) in rows {
        let _ = writeln!(table, "<tr><th>{name}</th><td>{}</td></tr>", escape(&value));
    }
    table.push_str("</table>\n");
    table
}

fn data_table(panel: &Panel) -> String {
    let mut table = String::from("<table>\n<tr><th>data behind the level: fewer than</th>");
    let counts = data_counts(&panel.levels);
    for (threshold, _) in counts {
        let unit = if threshold == 1.0 { "row" } else { "rows" };
        let _ = write!(table, "<th>{} {unit}</th>", thousands(threshold));
    }
    table.push_str("</tr>\n<tr><th>levels</th>");
    for (_, count) in counts {
        let _ = write!(table, "<td>{count}</td>");
    }
    table.push_str("</tr>\n</table>\n");
    table
}

/// 1000 as "1,000".
fn thousands(v: f64) -> String {
    let digits = format!("{}", v.round() as u64);
    let mut out = String::new();
    for (i, c) in digits.chars().enumerate() {
        if i > 0 && (digits.len() - i) % 3 == 0 {
            out.push(',');
        }
        out.push(c);
    }
    out
}

fn panel_html(panel: &Panel, prior_text: &str) -> Result<String, String> {
    let mut out = String::new();
    let title = escape(&panel.title);
    if panel.levels.is_empty() {
        let _ = writeln!(
            out,
            "<p><code>{title}</code>: no levels with data to draw.</p>"
        );
        return Ok(out);
    }
    let chosen = interval_selection(&panel.levels, MOST_DATA, EXTREMES);
    let _ = write!(
        out,
        "<figure>\n{}\n<figcaption><code>{title}</code>: posterior mean and 90&nbsp;% interval \
         of {} of {} levels (the {MOST_DATA} with the most data, the {EXTREMES} with the highest \
         lower bound and the {EXTREMES} with the lowest upper bound), highest first; dashed: the \
         prior's mean.</figcaption>\n</figure>\n",
        plots::interval_svg(panel, &chosen, None)?,
        chosen.len(),
        panel.levels.len()
    );
    let scatter = scatter_selection(&panel.levels, SCATTER_LIMIT);
    let _ = write!(
        out,
        "<figure>\n{}\n<figcaption><code>{title}</code>: shrinkage — each level's own in-sample \
         value against its posterior mean ({} of {} levels); grey dashed: no shrinkage; \
         vermillion dashed: the prior's mean, where a level with no data would sit.\
         </figcaption>\n</figure>\n",
        plots::shrinkage_svg(panel, &scatter)?,
        scatter.len(),
        panel.levels.len()
    );
    let raw_means = |min_data: f64| -> Vec<f64> {
        panel
            .levels
            .iter()
            .filter(|l| l.data >= min_data)
            .filter_map(|l| l.raw)
            .collect()
    };
    let (mut min_data, mut means) = (HISTOGRAM_MIN_DATA, raw_means(HISTOGRAM_MIN_DATA));
    if means.len() < 5 {
        (min_data, means) = (0.0, raw_means(0.0));
    }
    let _ = write!(
        out,
        "<figure>\n{}\n<figcaption><code>{title}</code>: the prior ({}) as a density, over a \
         histogram of the raw means of the {} levels with at least {} rows. A prior much \
         narrower than the bars pulls levels too hard; much wider, too little (the raw means \
         also carry sampling noise, so the bars are somewhat wider than the prior).\
         </figcaption>\n</figure>\n",
        plots::prior_svg(panel, &means)?,
        escape(prior_text),
        means.len(),
        short(min_data)
    );
    Ok(out)
}
