//! `DISTINCT` in a call of a posterity aggregate is refused, not ignored.
//!
//! A posterior counts every row it is given; `beta_posterior(DISTINCT y)` would
//! count each outcome value once (two rows at most), which no one means. The
//! engine also gives DISTINCT two meanings by the query's shape: a lone DISTINCT
//! aggregate sees the distinct values, one beside other aggregates (or in a
//! window) is handed the flag — and an aggregate that ignored it silently gave the
//! plain posterior. So every call is refused: in the planning rule
//! ([`crate::prior_binding`]), before the engine rewrites a lone DISTINCT
//! aggregate into a grouping of the distinct values; by the SQL check that the
//! shell and Python's `ctx.sql` run ([`crate::clauses`]); and by each accumulator,
//! for engines that run neither (Python's DataFrame API, where a lone DISTINCT
//! call is still rewritten into plain rows first).

use std::collections::HashSet;
use std::sync::OnceLock;

use datafusion::common::{plan_err, Result};

/// Refuse a call of aggregate `name` whose arguments are DISTINCT.
pub fn refuse(name: &str, distinct: bool) -> Result<()> {
    match distinct {
        true => plan_err!("{}", refusal(name)),
        false => Ok(()),
    }
}

/// Why a DISTINCT call of `name` is refused, for the user.
pub fn refusal(name: &str) -> String {
    format!(
        "{name}: DISTINCT is not supported: {name} counts every row it is given, and DISTINCT \
         would count repeated values once. To count each distinct row once, select the \
         distinct rows in a subquery first"
    )
}

/// Whether `name` (as the planner looks it up) is one of posterity's aggregate or
/// window functions, which refuse DISTINCT. The SQL check ([`crate::clauses`])
/// uses it to refuse the call before an engine without the planning rule could
/// rewrite a lone DISTINCT aggregate into plain rows.
pub fn counts_every_row(name: &str) -> bool {
    static NAMES: OnceLock<HashSet<String>> = OnceLock::new();
    NAMES
        .get_or_init(|| {
            let aggregates = crate::aggregates()
                .into_iter()
                .map(|f| f.name().to_string());
            let windows = crate::window_functions()
                .into_iter()
                .map(|f| f.name().to_string());
            aggregates.chain(windows).collect()
        })
        .contains(name)
}
