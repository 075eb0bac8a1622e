//! A planning rule that binds each fit aggregate call to its constant prior.
//!
//! The engine produces the value of an empty window frame (the first row of an
//! as-of encoding) and of an empty group under a decorrelated scalar subquery
//! without running the aggregate: it asks the function for its `default_value`,
//! which sees only the return type, not the call's arguments. Unbound, every such
//! row would get the default prior instead of the prior the query passed. This
//! rule runs right after type coercion, folds the prior argument of every fit call
//! (plain, filtered, windowed, inside subqueries) to a constant and swaps in an
//! instance of the function that carries it.
//!
//! A prior that does not fold to a constant is left alone: the fit then refuses
//! it when it runs ("the prior must be a constant").
//!
//! The same walk refuses DISTINCT in a call of any posterity aggregate or window
//! function, before the engine rewrites a lone DISTINCT call away
//! ([`crate::distinct`]).

use std::sync::Arc;

use datafusion::common::config::ConfigOptions;
use datafusion::common::tree_node::{Transformed, TreeNode};
use datafusion::common::{Result, ScalarValue};
use datafusion::logical_expr::expr::{AggregateFunction, WindowFunction};
use datafusion::logical_expr::simplify::SimplifyContext;
use datafusion::logical_expr::{AggregateUDF, Expr, LogicalPlan, WindowFunctionDefinition};
use datafusion::optimizer::analyzer::AnalyzerRule;
use datafusion::optimizer::simplify_expressions::ExprSimplifier;
use datafusion::prelude::SessionContext;

use crate::distinct::counts_every_row;
use crate::fit::{
    BetaCounts, BetaOutcomes, BindPrior, DirichletClasses, FitAggregate, GammaCounts, NigValues,
};

/// The analyzer rule; [`crate::register`] installs it.
#[derive(Debug, Default)]
pub struct BindPriors;

pub const RULE_NAME: &str = "posterity_bind_priors";

/// Install the rule on `ctx` once.
pub fn install(ctx: &SessionContext) {
    let installed = ctx
        .state()
        .analyzer()
        .rules
        .iter()
        .any(|r| r.name() == RULE_NAME);
    if !installed {
        ctx.add_analyzer_rule(Arc::new(BindPriors));
    }
}

impl AnalyzerRule for BindPriors {
    fn analyze(&self, plan: LogicalPlan, config: &ConfigOptions) -> Result<LogicalPlan> {
        let config = Arc::new(config.clone());
        plan.transform_up_with_subqueries(|node| {
            node.map_expressions(|e| e.transform_up(|e| bind_expr(e, &config)))
        })
        .map(|t| t.data)
    }

    fn name(&self) -> &str {
        RULE_NAME
    }
}

/// The constant prior a fit aggregate instance was bound to by this rule, for
/// engines that ship plans to other processes: functions travel by name, so the
/// binding has to travel beside them ([`rebind`] restores it).
pub fn bound_prior(f: &AggregateUDF) -> Option<ScalarValue> {
    as_fit(f)?.bound_prior().cloned()
}

/// `f` (a fit aggregate looked up by name) bound to `prior` again; `None` when `f`
/// is not a fit aggregate.
pub fn rebind(f: &AggregateUDF, prior: ScalarValue) -> Result<Option<AggregateUDF>> {
    as_fit(f).map(|fit| fit.bind(prior)).transpose()
}

/// The fit aggregates' binding interface, if `f` is one of them.
fn as_fit(f: &AggregateUDF) -> Option<&dyn BindPrior> {
    let inner = f.inner().as_ref();
    fn cast<K: crate::fit::FitKernel>(
        f: &dyn datafusion::logical_expr::AggregateUDFImpl,
    ) -> Option<&dyn BindPrior> {
        f.downcast_ref::<FitAggregate<K>>()
            .map(|a| a as &dyn BindPrior)
    }
    cast::<BetaOutcomes>(inner)
        .or_else(|| cast::<BetaCounts>(inner))
        .or_else(|| cast::<GammaCounts>(inner))
        .or_else(|| cast::<NigValues>(inner))
        .or_else(|| cast::<DirichletClasses>(inner))
}

/// The bound function for a call of `f` with `args`, when its prior is constant.
fn bound(
    f: &AggregateUDF,
    args: &[Expr],
    config: &Arc<ConfigOptions>,
) -> Result<Option<Arc<AggregateUDF>>> {
    let Some(fit) = as_fit(f) else {
        return Ok(None);
    };
    if fit.is_bound() {
        return Ok(None);
    }
    let Some(prior) = args.get(fit.prior_argument()) else {
        return Ok(None);
    };
    if !prior.column_refs().is_empty() {
        return Ok(None);
    }
    let context = SimplifyContext::builder()
        .with_config_options(Arc::clone(config))
        .build();
    // A prior that does not fold here (a column, or a constant that fails to
    // evaluate) is reported by the fit itself, in the user's words, when it runs.
    let Ok(Expr::Literal(value, _)) = ExprSimplifier::new(context).simplify(prior.clone()) else {
        return Ok(None);
    };
    Ok(Some(Arc::new(fit.bind(value)?)))
}

/// The bound instance carries its prior, so the call's prior argument is replaced
/// by a NULL: the engine evaluates every argument into a column per batch, and a
/// constant prior (a struct with lists for Dirichlet classes) repeated 8,192 times
/// per batch cost more than the fit itself. The NULL is aliased to the prior's
/// text, so the call keeps its name (and the output column its header).
fn drop_prior(f: &AggregateUDF, args: &mut [Expr]) {
    let Some(i) = as_fit(f).map(|fit| fit.prior_argument()) else {
        return;
    };
    if let Some(prior) = args.get_mut(i) {
        let name = prior.schema_name().to_string();
        *prior = Expr::Literal(ScalarValue::Null, None).alias(name);
    }
}

fn bind_expr(e: Expr, config: &Arc<ConfigOptions>) -> Result<Transformed<Expr>> {
    match e {
        Expr::AggregateFunction(AggregateFunction { func, mut params }) => {
            if counts_every_row(func.name()) {
                crate::distinct::refuse(func.name(), params.distinct)?;
            }
            match bound(&func, &params.args, config)? {
                Some(func) => {
                    drop_prior(&func, &mut params.args);
                    Ok(Transformed::yes(Expr::AggregateFunction(
                        AggregateFunction { func, params },
                    )))
                }
                None => Ok(Transformed::no(Expr::AggregateFunction(
                    AggregateFunction { func, params },
                ))),
            }
        }
        Expr::WindowFunction(mut w) => {
            let WindowFunction { fun, params } = w.as_mut();
            if counts_every_row(fun.name()) {
                crate::distinct::refuse(fun.name(), params.distinct)?;
            }
            if let WindowFunctionDefinition::AggregateUDF(f) = fun {
                if let Some(b) = bound(f, &params.args, config)? {
                    drop_prior(&b, &mut params.args);
                    *fun = WindowFunctionDefinition::AggregateUDF(b);
                    return Ok(Transformed::yes(Expr::WindowFunction(w)));
                }
            }
            Ok(Transformed::no(Expr::WindowFunction(w)))
        }
        other => Ok(Transformed::no(other)),
    }
}
