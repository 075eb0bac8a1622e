//! Empty window frames in an engine posterity cannot plan for.
//!
//! In a session posterity plans for, [`crate::prior_binding`] gives an empty window
//! frame (a level's first rows in an as-of encoding) the call's own prior. Python's
//! engine reaches the functions through the foreign-function interface, which
//! carries neither planning rules nor an aggregate's value for no rows, so there an
//! empty frame would be NULL, and so would a correlated scalar subquery's fit over no
//! rows (the engine turns it into a join and a grouped aggregate). [`with_window_priors`]
//! writes each such call as `COALESCE(call, prior)` before that engine plans the
//! statement. A fit over rows is never NULL (rows it ignores leave it the prior),
//! so only the empty cases take the fallback.

use std::collections::HashMap;
use std::ops::ControlFlow;
use std::sync::OnceLock;

use datafusion::sql::parser::{CopyToSource, DFParser, Statement};
use datafusion::sql::sqlparser::ast::{
    visit_expressions_mut, Expr, Function, FunctionArg, FunctionArgExpr, FunctionArguments,
    GroupByExpr, SelectItem, SetExpr,
};
use datafusion::sql::sqlparser::dialect::GenericDialect;
use datafusion::sql::sqlparser::parser::Parser;

/// `sql` with every windowed fit call, and every scalar subquery of one fit,
/// wrapped in `COALESCE(call, prior)`: the call's prior argument, or the function's
/// default prior when it has none. `None` when nothing changes, `sql` does not parse
/// (the engine then reports it in its own words) or holds more than one statement.
pub fn with_window_priors(sql: &str) -> Option<String> {
    let mut statements = DFParser::parse_sql(sql).ok()?;
    let (Some(mut statement), None) = (statements.pop_front(), statements.pop_front()) else {
        return None;
    };
    let mut changed = false;
    let mut wrap = |expr: &mut Expr| -> ControlFlow<()> {
        if let Some(fallback) = fallback_prior(expr) {
            let coalesced = format!("COALESCE({expr}, {fallback})");
            match Parser::new(&GenericDialect {})
                .try_with_sql(&coalesced)
                .and_then(|mut p| p.parse_expr())
            {
                Ok(e) => {
                    *expr = e;
                    changed = true;
                }
                Err(_) => return ControlFlow::Break(()),
            }
        }
        ControlFlow::Continue(())
    };
    let flow = rewrite(&mut statement, &mut wrap);
    (changed && flow.is_continue()).then(|| statement.to_string())
}

/// Run `wrap` on every expression of `statement`, inside EXPLAIN and COPY too.
fn rewrite(
    statement: &mut Statement,
    wrap: &mut impl FnMut(&mut Expr) -> ControlFlow<()>,
) -> ControlFlow<()> {
    match statement {
        Statement::Statement(s) => visit_expressions_mut(s.as_mut(), wrap),
        Statement::CopyTo(copy) => match &mut copy.source {
            CopyToSource::Query(query) => visit_expressions_mut(query.as_mut(), wrap),
            CopyToSource::Relation(_) => ControlFlow::Continue(()),
        },
        Statement::Explain(explain) => rewrite(&mut explain.statement, wrap),
        Statement::CreateExternalTable(_) | Statement::Reset(_) => ControlFlow::Continue(()),
    }
}

/// The SQL of the prior `expr` falls back to when it is a windowed fit call, or a
/// scalar subquery whose one column is a fit over all its rows (decorrelated, the
/// engine gives a missing group the function's value for no rows, too); `None`
/// otherwise, or when the fit has no prior argument and its function no default.
fn fallback_prior(expr: &Expr) -> Option<String> {
    match expr {
        Expr::Function(f) if f.over.is_some() => prior_of(f),
        Expr::Subquery(query) => {
            let SetExpr::Select(select) = query.body.as_ref() else {
                return None;
            };
            let whole = matches!(&select.group_by, GroupByExpr::Expressions(e, _) if e.is_empty())
                && select.having.is_none();
            let [SelectItem::UnnamedExpr(Expr::Function(f))
            | SelectItem::ExprWithAlias {
                expr: Expr::Function(f),
                ..
            }] = select.projection.as_slice()
            else {
                return None;
            };
            (whole && f.over.is_none()).then(|| prior_of(f)).flatten()
        }
        _ => None,
    }
}

/// The prior SQL of fit call `f`: its prior argument, or its function's default.
fn prior_of(f: &Function) -> Option<String> {
    // Per fit function: the index of its prior argument and its default prior's SQL.
    static FITS: OnceLock<HashMap<&'static str, (usize, Option<String>)>> = OnceLock::new();
    let fits = FITS.get_or_init(|| {
        crate::fit::fit_priors()
            .into_iter()
            .map(|(name, at, default)| (name, (at, default.map(|p| p.prior_sql()))))
            .collect()
    });
    let (at, default) = fits.get(crate::clauses::function_name(f)?.as_str())?;
    let FunctionArguments::List(list) = &f.args else {
        return default.clone();
    };
    match list.args.get(*at) {
        Some(FunctionArg::Unnamed(FunctionArgExpr::Expr(prior))) => Some(prior.to_string()),
        Some(_) => None,
        None => default.clone(),
    }
}
