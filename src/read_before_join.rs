//! A logical optimizer rule for readers over a join: in
//!
//! ```sql
//! SELECT t.*, posterior_mean(e.p) FROM t LEFT JOIN enc e USING (key)
//! ```
//!
//! the engine would carry each level's whole posterior (a struct of four or more
//! fields) through the join, gathering it once per row, and then read one number
//! from it. This rule computes such readers on the join's input instead, once per
//! level, so the join gathers one float per row; a quantile reader then also runs
//! once per level instead of once per row.
//!
//! A reader call moves when it reads a posterior column of one side of an inner,
//! left, right or full join, with constants for its other arguments. Rows that an
//! outer join pads with NULL read NULL either way, because every reader of a NULL
//! posterior is NULL. Output names are kept: moved calls are aliased back to what
//! the user wrote. The price is one reader per row of that side, matched or not;
//! the join reads that side whole anyway, and it is usually the smaller one (a
//! level table), so no size estimate is needed.

use std::sync::Arc;

use datafusion::common::tree_node::{Transformed, TreeNode, TreeNodeRecursion};
use datafusion::common::{Column, DFSchema, Result};
use datafusion::logical_expr::expr_rewriter::NamePreserver;
use datafusion::logical_expr::{
    Aggregate, Expr, Join, JoinType, LogicalPlan, Projection, ScalarUDFImpl,
};
use datafusion::optimizer::optimizer::ApplyOrder;
use datafusion::optimizer::{OptimizerConfig, OptimizerRule};
use datafusion::prelude::SessionContext;

use crate::scalar::ScalarFunction;

/// The rule; [`crate::register`] installs it.
#[derive(Debug, Default)]
pub struct ReadBeforeJoin;

pub const RULE_NAME: &str = "posterity_read_before_join";

/// Install the rule on `ctx` once.
pub fn install(ctx: &SessionContext) {
    let state = ctx.state();
    if !state.optimizers().iter().any(|r| r.name() == RULE_NAME) {
        ctx.add_optimizer_rule(Arc::new(ReadBeforeJoin));
    }
}

impl OptimizerRule for ReadBeforeJoin {
    fn name(&self) -> &str {
        RULE_NAME
    }

    fn apply_order(&self) -> Option<ApplyOrder> {
        Some(ApplyOrder::BottomUp)
    }

    fn supports_rewrite(&self) -> bool {
        true
    }

    fn rewrite(
        &self,
        plan: LogicalPlan,
        _config: &dyn OptimizerConfig,
    ) -> Result<Transformed<LogicalPlan>> {
        match plan {
            LogicalPlan::Projection(p) => match p.input.as_ref() {
                LogicalPlan::Join(join) if moves_readers(join) => {
                    let join = join.clone();
                    project_over_join(p, join)
                }
                _ => Ok(Transformed::no(LogicalPlan::Projection(p))),
            },
            LogicalPlan::Aggregate(a) => match a.input.as_ref() {
                LogicalPlan::Join(join) if moves_readers(join) => {
                    let join = join.clone();
                    aggregate_over_join(a, join)
                }
                // The engine prunes columns with a projection between the two.
                LogicalPlan::Projection(p) if matches!(p.input.as_ref(), LogicalPlan::Join(j) if moves_readers(j)) =>
                {
                    let p = p.clone();
                    aggregate_over_projection(a, p)
                }
                _ => Ok(Transformed::no(LogicalPlan::Aggregate(a))),
            },
            other => Ok(Transformed::no(other)),
        }
    }
}

/// Join types whose output rows are input rows, possibly padded with NULLs.
fn moves_readers(join: &Join) -> bool {
    matches!(
        join.join_type,
        JoinType::Inner | JoinType::Left | JoinType::Right | JoinType::Full
    )
}

/// The posterior column a movable reader call reads: a posterity reader
/// (posterior_mean, posterior_quantile, ...) whose posterior is a column and whose
/// other arguments are constants. A computed posterior stays where it is:
/// `COALESCE(e.p, prior)` is not NULL on the rows an outer join pads, so its reader
/// is not NULL there either.
fn movable_posterior(e: &Expr) -> Option<&Column> {
    let Expr::ScalarFunction(f) = e else {
        return None;
    };
    let inner: &dyn ScalarUDFImpl = f.func.inner().as_ref();
    if !inner
        .downcast_ref::<ScalarFunction>()
        .is_some_and(ScalarFunction::is_reader)
    {
        return None;
    }
    let (Expr::Column(column), rest) = f.args.split_first()? else {
        return None;
    };
    let constants = rest.iter().all(|a| matches!(a, Expr::Literal(..)));
    constants.then_some(column)
}

/// Replace, inside `e`, each call that `claim` takes by a column named like the
/// call (the name it has in the plan); `claim` records where the call goes.
fn replace_calls(e: Expr, mut claim: impl FnMut(&Expr) -> bool) -> Result<Transformed<Expr>> {
    e.transform_down(|e| {
        if !claim(&e) {
            return Ok(Transformed::no(e));
        }
        let name = e.schema_name().to_string();
        Ok(Transformed::new(
            Expr::Column(Column::new_unqualified(name)),
            true,
            TreeNodeRecursion::Jump,
        ))
    })
}

/// The reader calls to compute on each side of a join, and their column names.
#[derive(Default)]
struct Moved {
    left: Vec<Expr>,
    right: Vec<Expr>,
}

impl Moved {
    /// Replace, inside `e`, each reader call that reads one side only by a
    /// column of that side's new projection.
    fn take(&mut self, e: Expr, join: &Join) -> Result<Transformed<Expr>> {
        replace_calls(e, |e| {
            let Some(side) = one_side(e, join) else {
                return false;
            };
            let name = e.schema_name().to_string();
            let (exprs, schema) = match side {
                Side::Left => (&mut self.left, join.left.schema()),
                Side::Right => (&mut self.right, join.right.schema()),
            };
            // A side that already has a column of that name keeps the call here.
            if schema.fields().iter().any(|f| f.name() == &name) {
                return false;
            }
            if !exprs.iter().any(|m| m.schema_name().to_string() == name) {
                exprs.push(e.clone());
            }
            true
        })
    }

    fn is_empty(&self) -> bool {
        self.left.is_empty() && self.right.is_empty()
    }

    /// The join with each side's moved calls projected on that side.
    fn join(self, join: Join) -> Result<LogicalPlan> {
        let side = |input: Arc<LogicalPlan>, calls: Vec<Expr>| -> Result<Arc<LogicalPlan>> {
            if calls.is_empty() {
                return Ok(input);
            }
            let mut exprs: Vec<Expr> = input
                .schema()
                .columns()
                .into_iter()
                .map(Expr::Column)
                .collect();
            exprs.extend(calls);
            Ok(Arc::new(LogicalPlan::Projection(Projection::try_new(
                exprs, input,
            )?)))
        };
        let left = side(join.left, self.left)?;
        let right = side(join.right, self.right)?;
        Ok(LogicalPlan::Join(Join::try_new(
            left,
            right,
            join.on,
            join.filter,
            join.join_type,
            join.join_constraint,
            join.null_equality,
            join.null_aware,
        )?))
    }
}

enum Side {
    Left,
    Right,
}

/// The one side of `join` whose posterior column a movable reader call reads.
fn one_side(e: &Expr, join: &Join) -> Option<Side> {
    let column = movable_posterior(e)?;
    let within = |schema: &DFSchema| schema.has_column(column);
    match (within(join.left.schema()), within(join.right.schema())) {
        (true, false) => Some(Side::Left),
        (false, true) => Some(Side::Right),
        _ => None,
    }
}

fn project_over_join(p: Projection, join: Join) -> Result<Transformed<LogicalPlan>> {
    let names = NamePreserver::new_for_projection();
    let mut moved = Moved::default();
    let mut exprs = Vec::with_capacity(p.expr.len());
    for e in p.expr.iter().cloned() {
        let saved = names.save(&e);
        exprs.push(saved.restore(moved.take(e, &join)?.data));
    }
    if moved.is_empty() {
        return Ok(Transformed::no(LogicalPlan::Projection(p)));
    }
    let input = Arc::new(moved.join(join)?);
    let projection = Projection::try_new(exprs, input)?;
    Ok(Transformed::yes(LogicalPlan::Projection(projection)))
}

/// An aggregate's output names come from its expressions, so after moving readers
/// out of them a projection gives each output column its old name back.
fn aggregate_over_join(a: Aggregate, join: Join) -> Result<Transformed<LogicalPlan>> {
    let mut moved = Moved::default();
    let mut rewrite = |exprs: &[Expr]| -> Result<Vec<Expr>> {
        exprs
            .iter()
            .map(|e| moved.take(e.clone(), &join).map(|t| t.data))
            .collect()
    };
    let group = rewrite(&a.group_expr)?;
    let aggr = rewrite(&a.aggr_expr)?;
    if moved.is_empty() {
        return Ok(Transformed::no(LogicalPlan::Aggregate(a)));
    }
    let input = Arc::new(moved.join(join)?);
    renamed_aggregate(&a, input, group, aggr)
}

/// An aggregate over `Projection(columns) <- Join`: each reader call whose
/// posterior the projection passes through is computed in the projection
/// instead, which [`project_over_join`] then moves below the join.
fn aggregate_over_projection(a: Aggregate, p: Projection) -> Result<Transformed<LogicalPlan>> {
    let mut added: Vec<Expr> = Vec::new();
    let mut rewrite = |exprs: &[Expr]| -> Result<Vec<Expr>> {
        let mut claim = |e: &Expr| {
            let Some(call) = through_projection(e, &p) else {
                return false;
            };
            let name = e.schema_name().to_string();
            if !added.iter().any(|m| m.schema_name().to_string() == name) {
                added.push(call.alias(name));
            }
            true
        };
        exprs
            .iter()
            .map(|e| replace_calls(e.clone(), &mut claim).map(|t| t.data))
            .collect()
    };
    let group = rewrite(&a.group_expr)?;
    let aggr = rewrite(&a.aggr_expr)?;
    if added.is_empty() {
        return Ok(Transformed::no(LogicalPlan::Aggregate(a)));
    }
    let LogicalPlan::Join(join) = p.input.as_ref() else {
        return Ok(Transformed::no(LogicalPlan::Aggregate(a)));
    };
    let join = join.clone();
    let mut exprs = p.expr.clone();
    exprs.extend(added);
    let projection = Projection::try_new(exprs, Arc::clone(&p.input))?;
    let input = Arc::new(project_over_join(projection, join)?.data);
    renamed_aggregate(&a, input, group, aggr)
}

/// For a movable reader call over a column that projection `p` passes through
/// unchanged, the same call over the projection's input column.
fn through_projection(e: &Expr, p: &Projection) -> Option<Expr> {
    let column = movable_posterior(e)?;
    let i = p.schema.index_of_column(column).ok()?;
    let source = match &p.expr[i] {
        Expr::Column(c) => c.clone(),
        Expr::Alias(alias) => match alias.expr.as_ref() {
            Expr::Column(c) => c.clone(),
            _ => return None,
        },
        _ => return None,
    };
    let Expr::ScalarFunction(mut f) = e.clone() else {
        return None;
    };
    f.args[0] = Expr::Column(source);
    Some(Expr::ScalarFunction(f))
}

/// `a` with `group` and `aggr` over `input`, under a projection that gives every
/// output column its old name.
fn renamed_aggregate(
    a: &Aggregate,
    input: Arc<LogicalPlan>,
    group: Vec<Expr>,
    aggr: Vec<Expr>,
) -> Result<Transformed<LogicalPlan>> {
    let aggregate = LogicalPlan::Aggregate(Aggregate::try_new(input, group, aggr)?);
    let renamed: Vec<Expr> = aggregate
        .schema()
        .columns()
        .into_iter()
        .zip(a.schema.iter())
        .map(|(now, (qualifier, field))| {
            Expr::Column(now).alias_qualified(qualifier.cloned(), field.name())
        })
        .collect();
    let projection = Projection::try_new(renamed, Arc::new(aggregate))?;
    Ok(Transformed::yes(LogicalPlan::Projection(projection)))
}
