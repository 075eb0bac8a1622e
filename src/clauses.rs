//! Refusing the clauses the engine would drop without a word.
//!
//! DataFusion's SQL planner accepts the clauses of aggregate and window calls —
//! `OVER`, `FILTER`, `DISTINCT`, `ORDER BY` inside the arguments, `WITHIN GROUP`,
//! `IGNORE NULLS` — on a scalar function too, and then drops them. Written on a
//! reader instead of on the fit inside it, they give wrong numbers with no error:
//! `posterior_mean(beta_posterior(y, q)) FILTER (WHERE c)` reads every row, and
//! `posterior_mean(beta_posterior(y, q)) OVER (PARTITION BY k)` gives one row for
//! the whole table. [`check_sql`] finds such a clause before the statement is
//! planned and names it; the shell and Python's `SessionContext.sql` run it.
//!
//! DISTINCT in a call of one of posterity's aggregates is refused here too
//! ([`crate::distinct`]).
//!
//! The same goes for the `SELECT *` a query that starts with `FROM` implies: the
//! planner reads `FROM t` alone as a query of no columns, which the shell could
//! only report as "done", so it is refused with the query to write instead.

use std::ops::ControlFlow;

use datafusion::common::{plan_err, Result};
use datafusion::prelude::SessionContext;
use datafusion::sql::parser::{CopyToSource, Statement};
use datafusion::sql::sqlparser::ast::{
    visit_expressions, DuplicateTreatment, Expr, Function, FunctionArgumentClause,
    FunctionArguments, NullTreatment, Query, SelectFlavor, SetExpr, Visit, Visitor,
};

use crate::distinct::counts_every_row;

/// Refuse `sql` when it puts an aggregate or window clause on a function `ctx`
/// knows only as a scalar function. A statement that does not parse is left to
/// the engine, which reports it in its own words.
pub fn check_sql(ctx: &SessionContext, sql: &str) -> Result<()> {
    let state = ctx.state();
    let dialect = state.config().options().sql_parser.dialect;
    let Ok(statement) = state.sql_to_statement(sql, &dialect) else {
        return Ok(());
    };
    let scalar_only = |name: &str| {
        state.scalar_functions().contains_key(name)
            && !state.aggregate_functions().contains_key(name)
            && !state.window_functions().contains_key(name)
    };
    match ignored_clause(&statement, scalar_only) {
        Some(why) => plan_err!("{why}"),
        None => Ok(()),
    }
}

/// The first clause of `statement` that sits on a function for which
/// `scalar_only(name)` holds (names as the planner looks them up: unquoted names
/// in lower case), described for the user; `None` when there is none.
pub fn ignored_clause(statement: &Statement, scalar_only: impl Fn(&str) -> bool) -> Option<String> {
    let found = |expr: &Expr| {
        let Expr::Function(f) = expr else {
            return ControlFlow::Continue(());
        };
        let Some(name) = function_name(f) else {
            return ControlFlow::Continue(());
        };
        if is_distinct(f) && counts_every_row(&name) {
            return ControlFlow::Break(crate::distinct::refusal(&name));
        }
        match clause_of(f) {
            Some(clause) if scalar_only(&name) => {
                let example = match clause {
                    "OVER" => ", as in posterior_mean(beta_posterior(y, prior) OVER (...))",
                    "FILTER" => {
                        ", as in posterior_mean(beta_posterior(y, prior) FILTER (WHERE ...))"
                    }
                    _ => "",
                };
                ControlFlow::Break(format!(
                    "{name}: {clause} would be ignored: {name} is a scalar function, and the \
                     engine drops the clause there without a word; put it on the aggregate or \
                     window function inside{example}"
                ))
            }
            _ => ControlFlow::Continue(()),
        }
    };
    let flow = match statement {
        Statement::Statement(s) => queries_then_calls(s.as_ref(), found),
        Statement::CopyTo(copy) => match &copy.source {
            CopyToSource::Query(query) => queries_then_calls(query.as_ref(), found),
            CopyToSource::Relation(_) => ControlFlow::Continue(()),
        },
        Statement::Explain(explain) => {
            return ignored_clause(&explain.statement, scalar_only);
        }
        Statement::CreateExternalTable(_) | Statement::Reset(_) => ControlFlow::Continue(()),
    };
    match flow {
        ControlFlow::Break(why) => Some(why),
        ControlFlow::Continue(()) => None,
    }
}

/// The first query without a SELECT in `node`, else the first call `found` breaks on.
fn queries_then_calls<V: Visit>(
    node: &V,
    found: impl FnMut(&Expr) -> ControlFlow<String>,
) -> ControlFlow<String> {
    match node.visit(&mut FromWithoutSelect) {
        ControlFlow::Continue(()) => visit_expressions(node, found),
        refused => refused,
    }
}

/// Finds a query, at any depth, that starts with `FROM` and has no `SELECT`.
struct FromWithoutSelect;

impl Visitor for FromWithoutSelect {
    type Break = String;

    fn pre_visit_query(&mut self, query: &Query) -> ControlFlow<String> {
        fn lacks_select(body: &SetExpr) -> bool {
            match body {
                SetExpr::Select(select) => select.flavor == SelectFlavor::FromFirstNoSelect,
                SetExpr::SetOperation { left, right, .. } => {
                    lacks_select(left) || lacks_select(right)
                }
                SetExpr::Query(query) => lacks_select(&query.body),
                _ => false,
            }
        }
        match lacks_select(&query.body) {
            true => ControlFlow::Break(
                "a query that starts with FROM needs a SELECT: the engine reads FROM ... alone \
                 as a query of no columns; write FROM ... SELECT * or SELECT * FROM ..."
                    .to_string(),
            ),
            false => ControlFlow::Continue(()),
        }
    }
}

/// The name the planner looks `f` up by: its last part, in lower case unless quoted.
pub(crate) fn function_name(f: &Function) -> Option<String> {
    let ident = f.name.0.last()?.as_ident()?;
    Some(match ident.quote_style {
        Some(_) => ident.value.clone(),
        None => ident.value.to_ascii_lowercase(),
    })
}

/// Whether call `f` reads `DISTINCT` arguments.
fn is_distinct(f: &Function) -> bool {
    matches!(&f.args, FunctionArguments::List(list)
        if list.duplicate_treatment == Some(DuplicateTreatment::Distinct))
}

/// The aggregate or window clause on call `f`, in the words of the SQL, if any.
fn clause_of(f: &Function) -> Option<&'static str> {
    if f.over.is_some() {
        return Some("OVER");
    }
    if f.filter.is_some() {
        return Some("FILTER");
    }
    if !f.within_group.is_empty() {
        return Some("WITHIN GROUP");
    }
    if f.null_treatment == Some(NullTreatment::IgnoreNulls) {
        return Some("IGNORE NULLS");
    }
    if is_distinct(f) {
        return Some("DISTINCT");
    }
    let FunctionArguments::List(list) = &f.args else {
        return None;
    };
    list.clauses.iter().find_map(|c| match c {
        FunctionArgumentClause::OrderBy(_) => Some("ORDER BY"),
        FunctionArgumentClause::IgnoreOrRespectNulls(NullTreatment::IgnoreNulls) => {
            Some("IGNORE NULLS")
        }
        _ => None,
    })
}

/// [`check_sql`] for an engine posterity cannot look into (Python's, through the
/// function interface): the functions are those of a default session with
/// posterity's registered, and the dialect is the engine's default.
pub fn check_sql_default(sql: &str) -> Result<()> {
    static SCALAR_ONLY: std::sync::OnceLock<std::collections::HashSet<String>> =
        std::sync::OnceLock::new();
    let names = SCALAR_ONLY.get_or_init(|| {
        let ctx = SessionContext::new();
        crate::register(&ctx);
        let state = ctx.state();
        state
            .scalar_functions()
            .keys()
            .filter(|n| {
                !state.aggregate_functions().contains_key(*n)
                    && !state.window_functions().contains_key(*n)
            })
            .cloned()
            .collect()
    });
    let Ok(mut statements) = datafusion::sql::parser::DFParser::parse_sql(sql) else {
        return Ok(());
    };
    for statement in statements.drain(..) {
        if let Some(why) = ignored_clause(&statement, |n| names.contains(n)) {
            return plan_err!("{why}");
        }
    }
    Ok(())
}
