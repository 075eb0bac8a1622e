//! A physical optimizer rule for the join users write most: `rows LEFT JOIN
//! (SELECT key, beta_posterior(y) AS p FROM rows GROUP BY key)`. The engine cannot
//! tell how many groups an aggregate yields, so it keeps the millions of rows on
//! the hash join's build side. When the build side has at least as many rows as
//! the aggregate's own input, the aggregate's output cannot be larger, so building
//! on it instead is never worse — and with a few thousand levels it is several
//! times faster.

use std::sync::Arc;

use datafusion::common::config::ConfigOptions;
use datafusion::common::tree_node::{Transformed, TreeNode};
use datafusion::common::Result;
use datafusion::execution::session_state::SessionStateBuilder;
use datafusion::physical_optimizer::optimizer::PhysicalOptimizer;
use datafusion::physical_optimizer::PhysicalOptimizerRule;
use datafusion::physical_plan::aggregates::AggregateExec;
use datafusion::physical_plan::joins::HashJoinExec;
use datafusion::physical_plan::projection::ProjectionExec;
use datafusion::physical_plan::statistics::{StatisticsArgs, StatisticsContext};
use datafusion::physical_plan::ExecutionPlan;

/// Swap a hash join's inputs so that it builds on a grouped aggregate.
#[derive(Debug, Default)]
pub struct BuildOnAggregate;

fn rows(plan: &Arc<dyn ExecutionPlan>) -> Option<usize> {
    let stats = StatisticsContext::new()
        .compute(plan.as_ref(), &StatisticsArgs::new())
        .ok()?;
    stats.num_rows.get_value().copied()
}

/// For a grouped aggregate (possibly under projections): the row count of the
/// data it aggregates.
fn aggregate_input_rows(plan: &Arc<dyn ExecutionPlan>) -> Option<usize> {
    if let Some(projection) = plan.downcast_ref::<ProjectionExec>() {
        return aggregate_input_rows(projection.input());
    }
    let aggregate = plan.downcast_ref::<AggregateExec>()?;
    if aggregate.group_expr().is_empty() {
        return None;
    }
    let mut source = aggregate.input().clone();
    while let Some(inner) = source.clone().downcast_ref::<AggregateExec>() {
        source = inner.input().clone();
    }
    rows(&source)
}

impl PhysicalOptimizerRule for BuildOnAggregate {
    fn optimize(
        &self,
        plan: Arc<dyn ExecutionPlan>,
        _config: &ConfigOptions,
    ) -> Result<Arc<dyn ExecutionPlan>> {
        plan.transform_up(|node| {
            let Some(join) = node.downcast_ref::<HashJoinExec>() else {
                return Ok(Transformed::no(node));
            };
            let left_is_aggregate = aggregate_input_rows(join.left()).is_some();
            let swap = match (rows(join.left()), aggregate_input_rows(join.right())) {
                (Some(build), Some(aggregated)) => !left_is_aggregate && build >= aggregated,
                _ => false,
            };
            if swap {
                Ok(Transformed::yes(join.swap_inputs(*join.partition_mode())?))
            } else {
                Ok(Transformed::no(node))
            }
        })
        .map(|t| t.data)
    }

    fn name(&self) -> &str {
        "posterity_build_on_aggregate"
    }

    fn schema_check(&self) -> bool {
        true
    }
}

/// The engine's default physical rules with [`BuildOnAggregate`] right after join
/// selection (it must run before dynamic filters are attached to joins).
pub fn physical_rules() -> Vec<Arc<dyn PhysicalOptimizerRule + Send + Sync>> {
    let mut rules = PhysicalOptimizer::new().rules;
    let at = rules
        .iter()
        .position(|r| r.name() == "join_selection")
        .map_or(0, |i| i + 1);
    rules.insert(at, Arc::new(BuildOnAggregate));
    rules
}

/// Install the rule on a session being built.
pub fn with_build_on_aggregate(builder: SessionStateBuilder) -> SessionStateBuilder {
    builder.with_physical_optimizer_rules(physical_rules())
}
