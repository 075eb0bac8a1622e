//! `DISTINCT` in a call of a posterity aggregate is refused, not ignored.
//!
//! A posterior counts every row it is given; `beta_posterior(DISTINCT y)` would
//! count each outcome value once (two rows at most), which no one means. The
//! engine also gives DISTINCT two meanings by the query's shape: a lone DISTINCT
//! aggregate sees the distinct values, one beside other aggregates (or in a
//! window) is handed the flag — and an aggregate that ignored it silently gave the
//! plain posterior. So every call is refused, in the planning
//! rule ([`crate::prior_binding`]) before the engine rewrites a lone DISTINCT
//! aggregate into a grouping of the distinct values, and by each accumulator for
//! engines without that rule (Python, where the rewritten form still runs).

use datafusion::common::{plan_err, Result};

/// Refuse a call of aggregate `name` whose arguments are DISTINCT.
pub fn refuse(name: &str, distinct: bool) -> Result<()> {
    if distinct {
        return plan_err!(
            "{name}: DISTINCT is not supported: {name} counts every row it is given, and \
             DISTINCT would count repeated values once. To count each distinct row once, select \
             the distinct rows in a subquery first"
        );
    }
    Ok(())
}
