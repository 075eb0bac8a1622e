//! Readable text for numbers and posteriors (tables, summaries) and for the engine's
//! errors; CSV, JSON and Parquet keep full values.

/// Six significant digits, trailing zeros dropped.
pub fn short(v: f64) -> String {
    if v == 0.0 || !v.is_finite() {
        return format!("{v}");
    }
    let magnitude = v.abs().log10().floor() as i32;
    if !(-4..15).contains(&magnitude) {
        return format!("{v:.5e}");
    }
    let decimals = (5 - magnitude).max(0) as usize;
    let text = format!("{v:.decimals$}");
    if text.contains('.') {
        text.trim_end_matches('0').trim_end_matches('.').to_string()
    } else {
        text
    }
}

pub fn describe(p: &crate::layout::AnyPosterior) -> String {
    use crate::layout::AnyPosterior;
    match p {
        AnyPosterior::Beta(b) => {
            let (a, bb) = b.params();
            format!(
                "Beta({}, {}) from {} trials",
                short(a),
                short(bb),
                short(b.trials)
            )
        }
        AnyPosterior::Gamma(g) => {
            let (k, r) = g.params();
            format!(
                "Gamma({}, {}) from {} events",
                short(k),
                short(r),
                short(g.events)
            )
        }
        AnyPosterior::Nig(n) => {
            let q = n.params();
            format!(
                "NIG(mu {}, kappa {}, alpha {}, beta {}) from {} values",
                short(q.mu),
                short(q.kappa),
                short(q.alpha),
                short(q.beta),
                short(n.stats.n)
            )
        }
        AnyPosterior::Dirichlet(d) => {
            let parts: Vec<String> = d
                .prior
                .classes
                .iter()
                .zip(d.params())
                .map(|(c, a)| format!("{c} {}", short(a)))
                .collect();
            format!("Dirichlet({})", parts.join(", "))
        }
    }
}

/// DataFusion errors without the engine's internal prefixes or backtraces.
pub fn engine_error(e: datafusion::error::DataFusionError) -> String {
    use datafusion::error::DataFusionError;
    // The engine prefixes a planning rule's error with the rule's name; posterity's
    // own rules name the function and argument themselves.
    let e = match e {
        DataFusionError::Context(rule, inner) if rule.starts_with("posterity_") => *inner,
        e => e,
    };
    let text = e.to_string();
    let mut text = text
        .split("\n\nbacktrace")
        .next()
        .unwrap_or(&text)
        .to_string();
    // Our own argument errors arrive wrapped in the engine's signature-matching text.
    if let Some((_, inner)) = text
        .clone()
        .split_once("user-defined coercion failed with: ")
    {
        text = inner
            .split(". No function matches")
            .next()
            .unwrap_or(inner)
            .to_string();
    }
    let mut text = text
        .replace("Execution error: ", "")
        .replace("Error during planning: ", "");
    // A CSV value later in the file than the rows its column's type was inferred from.
    if text.contains("Error while parsing value") && text.contains("as type") {
        text.push_str(
            ". A CSV column's type is inferred from the first 1000 rows of each file: \
             --csv-infer-rows all reads whole files first (--csv-text COLUMN reads one as text)",
        );
    }
    // The engine lists every memory consumer before the one line a user needs.
    if let Some(at) = text.find("Failed to allocate") {
        if text.contains("Resources exhausted") {
            text = format!(
                "the work needs more memory than the memory limit allows ({}). Raise \
                 --memory-limit, or give fewer --threads (each thread holds its own share of \
                 a query's tables)",
                text[at..].trim().trim_start_matches("Error: ")
            );
        }
    }
    // A file exported in a legacy encoding (Latin-1, Windows-1252) is common.
    if text.contains("invalid utf-8") || text.contains("invalid UTF-8") {
        text.push_str(
            ". The file is not UTF-8 text (an export in Latin-1 or Windows-1252, say): convert \
             it first, for example iconv -f windows-1252 -t utf-8 FILE > FILE-utf8.csv",
        );
    }
    text
}
