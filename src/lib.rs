//! posterity: conjugate Bayesian encodings of categorical columns, as DataFusion
//! SQL functions.
//!
//! * [`family`] — the pure mathematics of the four conjugate families;
//! * [`layout`] — the posterior value format (Arrow structs);
//! * [`fit`], [`pool`] — aggregate functions; [`pool_window`] — the as-of window
//!   function; [`scalar`] — scalar functions;
//! * [`docs`] — the documentation table behind every function;
//! * [`encode`] — the encode workflow: plan, statements, outputs, refresh;
//! * [`bundle`] — the JSON serving bundle, for scoring without the engine;
//! * [`serve`] — scoring rows with a bundle, without the engine;
//! * [`shell`] — the command line (the `posterity` binary is a thin wrapper);
//! * [`report`] — the encode report: interval, shrinkage and prior plots in one HTML file;
//! * [`files`] — registering Parquet, CSV and JSON files as tables, with checks;
//! * [`prior_binding`] — a planning rule that binds fits to their constant prior;
//! * [`read_before_join`] — a planning rule that reads posteriors before a join, once per level;
//! * [`optimizer`] — a physical rule that builds joins on the (small) encoding side;
//! * [`window_priors`] — SQL that gives empty window frames their prior where those rules cannot run.
//!
//! ```no_run
//! # async fn demo() -> datafusion::error::Result<()> {
//! let ctx = datafusion::prelude::SessionContext::new();
//! posterity::register(&ctx);
//! ctx.sql("SELECT posterior_mean(beta_prior(2, 38))").await?.show().await?;
//! # Ok(()) }
//! ```

pub mod bundle;
pub mod clauses;
pub mod columnar_copy;
pub mod distinct;
pub mod docs;
pub mod encode;
pub mod family;
pub mod files;
pub mod fit;
pub mod key_text;
pub mod layout;
pub mod numbered;
pub mod optimizer;
pub mod pool;
pub mod pool_window;
pub mod prior_binding;
pub mod prior_fit;
pub mod read_before_join;
pub mod render;
pub mod report;
pub mod scalar;
pub mod serve;
pub mod shell;
pub mod window_priors;

pub use datafusion;

use datafusion::logical_expr::{AggregateUDF, WindowUDF};
use datafusion::prelude::SessionContext;

use fit::{BetaCounts, BetaOutcomes, DirichletClasses, FitAggregate, GammaCounts, NigValues};

/// Every aggregate function of the SQL surface.
pub fn aggregates() -> Vec<AggregateUDF> {
    aggregate_list(false)
}

/// The aggregates for an engine reached through DataFusion's foreign-function
/// interface (Python), which cannot run [`prior_binding`]: there an empty window
/// frame or group gives NULL, and the fits say their result may be NULL (SQL
/// prepared by [`window_priors`] reads the call's prior there instead).
pub fn foreign_aggregates() -> Vec<AggregateUDF> {
    aggregate_list(true)
}

fn aggregate_list(foreign: bool) -> Vec<AggregateUDF> {
    fn fit<K: fit::FitKernel>(foreign: bool) -> AggregateUDF {
        AggregateUDF::new_from_impl(match foreign {
            true => FitAggregate::<K>::for_foreign_engine(),
            false => FitAggregate::<K>::default(),
        })
    }
    vec![
        fit::<BetaOutcomes>(foreign),
        fit::<BetaCounts>(foreign),
        fit::<GammaCounts>(foreign),
        fit::<NigValues>(foreign),
        fit::<DirichletClasses>(foreign),
        AggregateUDF::new_from_impl(pool::PosteriorPool::default()),
        AggregateUDF::new_from_impl(prior_fit::FitPrior::new(false)),
        AggregateUDF::new_from_impl(prior_fit::FitPrior::new(true)),
        AggregateUDF::new_from_impl(prior_fit::FitStrength::default()),
    ]
}

/// Every window function of the SQL surface (the aggregates are window functions
/// too).
pub fn window_functions() -> Vec<WindowUDF> {
    vec![WindowUDF::new_from_impl(
        pool_window::PosteriorPoolBefore::default(),
    )]
}

/// The window functions for an engine reached through the foreign-function
/// interface (Python), which does not forward the planner's look at the OVER clause:
/// there the frame is read from the window expression's name, also when planned.
pub fn foreign_window_functions() -> Vec<WindowUDF> {
    vec![WindowUDF::new_from_impl(
        pool_window::PosteriorPoolBefore::for_foreign_engine(),
    )]
}

/// Register every posterity function on a DataFusion session, with the planning
/// rule that gives empty window frames and empty groups the call's own prior
/// ([`prior_binding`]). Registering the functions alone (from [`aggregates`])
/// leaves that rule out.
pub fn register(ctx: &SessionContext) {
    prior_binding::install(ctx);
    read_before_join::install(ctx);
    for f in scalar::all() {
        ctx.register_udf(f);
    }
    for f in aggregates() {
        ctx.register_udaf(f);
    }
    for f in window_functions() {
        ctx.register_udwf(f);
    }
}
