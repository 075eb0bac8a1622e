//! posterity on a Ballista cluster: the same functions, the same numbers.
//!
//! Three pieces make a stock Ballista cluster run posterity's SQL:
//!
//! * the scheduler plans with a session that knows every posterity function, the
//!   rule that binds fits to their constant prior, and the join rule
//!   ([`scheduler_session`]);
//! * executors look functions up in a registry that holds posterity's
//!   ([`function_registry`]);
//! * plans travel with [`PosterityCodec`]: functions go by name, so a fit's bound
//!   prior (what an empty window frame returns) travels beside the name and is bound
//!   again where the plan arrives.
//!
//! [`connect`] gives a client session on a cluster (the `posterity-cluster` shell).

mod numbered;

use std::sync::Arc;

use ballista::prelude::SessionContextExt;
use ballista_core::extension::SessionConfigExt;
use ballista_core::registry::BallistaFunctionRegistry;
use ballista_core::serde::{BallistaLogicalExtensionCodec, BallistaPhysicalExtensionCodec};
use datafusion::common::{DataFusionError, Result, ScalarValue};
use datafusion::execution::context::SessionState;
use datafusion::execution::runtime_env::RuntimeEnvBuilder;
use datafusion::execution::session_state::SessionStateBuilder;
use datafusion::execution::TaskContext;
use datafusion::logical_expr::AggregateUDF;
use datafusion::physical_plan::ExecutionPlan;
use datafusion::prelude::{SessionConfig, SessionContext};
use datafusion_proto::logical_plan::LogicalExtensionCodec;
use datafusion_proto::physical_plan::{PhysicalExtensionCodec, PhysicalProtoConverterExtension};
use datafusion_proto::protobuf;
use prost::Message;

use posterity::prior_binding::{bound_prior, rebind, BindPriors};

/// The physical plan codec of scheduler and executors: Ballista's own (shuffles),
/// plus posterity's fit aggregates with their bound prior.
#[derive(Debug, Default)]
pub struct PosterityCodec {
    ballista: BallistaPhysicalExtensionCodec,
}

/// A posterity aggregate by name (the fits and pools), unbound. Built once: every
/// aggregate of every task a plan holds is decoded through here.
fn posterity_aggregate(name: &str) -> Option<AggregateUDF> {
    static BY_NAME: std::sync::OnceLock<std::collections::HashMap<String, AggregateUDF>> =
        std::sync::OnceLock::new();
    BY_NAME
        .get_or_init(|| {
            posterity::aggregates()
                .into_iter()
                .map(|f| (f.name().to_string(), f))
                .collect()
        })
        .get(name)
        .cloned()
}

impl PhysicalExtensionCodec for PosterityCodec {
    fn try_decode(
        &self,
        buf: &[u8],
        inputs: &[Arc<dyn ExecutionPlan>],
        ctx: &TaskContext,
        converter: &dyn PhysicalProtoConverterExtension,
    ) -> Result<Arc<dyn ExecutionPlan>> {
        if let Some(scan) = numbered::decode_scan(buf, ctx, self)? {
            return Ok(scan);
        }
        self.ballista.try_decode(buf, inputs, ctx, converter)
    }

    fn try_encode(
        &self,
        node: Arc<dyn ExecutionPlan>,
        buf: &mut Vec<u8>,
        converter: &dyn PhysicalProtoConverterExtension,
    ) -> Result<()> {
        if numbered::encode_scan(&node, self, buf)? {
            return Ok(());
        }
        self.ballista.try_encode(node, buf, converter)
    }

    fn try_encode_udaf(&self, node: &AggregateUDF, buf: &mut Vec<u8>) -> Result<()> {
        encode_bound_prior(node, buf)
    }

    fn try_decode_udaf(&self, name: &str, buf: &[u8]) -> Result<Arc<AggregateUDF>> {
        decode_aggregate(name, buf)
    }
}

/// A bound fit writes its prior beside its name (the plan's prior argument is a
/// NULL once bound, see `posterity::prior_binding`); everything else goes by name.
fn encode_bound_prior(node: &AggregateUDF, buf: &mut Vec<u8>) -> Result<()> {
    if let Some(prior) = bound_prior(node) {
        let proto = protobuf::ScalarValue::try_from(&prior).map_err(|e| {
            DataFusionError::Internal(format!("{}: cannot encode its prior: {e}", node.name()))
        })?;
        proto
            .encode(buf)
            .map_err(|e| DataFusionError::Internal(e.to_string()))?;
    }
    Ok(())
}

/// Called with the bytes [`encode_bound_prior`] wrote, or with none for a
/// function the receiving registry does not hold.
fn decode_aggregate(name: &str, buf: &[u8]) -> Result<Arc<AggregateUDF>> {
    let Some(function) = posterity_aggregate(name) else {
        return Err(DataFusionError::Plan(format!(
            "this process does not know the aggregate function '{name}'"
        )));
    };
    if buf.is_empty() {
        return Ok(Arc::new(function));
    }
    let proto = protobuf::ScalarValue::decode(buf)
        .map_err(|e| DataFusionError::Internal(format!("{name}: prior: {e}")))?;
    let prior = ScalarValue::try_from(&proto)
        .map_err(|e| DataFusionError::Internal(format!("{name}: prior: {e}")))?;
    Ok(Arc::new(rebind(&function, prior)?.unwrap_or(function)))
}

/// The logical plan codec of client and scheduler: Ballista's, plus encode's
/// numbered training and scoring rows (a table provider of posterity's).
#[derive(Debug, Default)]
pub struct PosterityLogicalCodec {
    ballista: BallistaLogicalExtensionCodec,
}

impl LogicalExtensionCodec for PosterityLogicalCodec {
    fn try_decode(
        &self,
        buf: &[u8],
        inputs: &[datafusion::logical_expr::LogicalPlan],
        ctx: &TaskContext,
    ) -> Result<datafusion::logical_expr::Extension> {
        self.ballista.try_decode(buf, inputs, ctx)
    }

    fn try_encode(
        &self,
        node: &datafusion::logical_expr::Extension,
        buf: &mut Vec<u8>,
    ) -> Result<()> {
        self.ballista.try_encode(node, buf)
    }

    fn try_decode_table_provider(
        &self,
        buf: &[u8],
        table_ref: &datafusion::common::TableReference,
        schema: datafusion::arrow::datatypes::SchemaRef,
        ctx: &TaskContext,
    ) -> Result<Arc<dyn datafusion::catalog::TableProvider>> {
        if let Some(table) = numbered::decode_table(buf, ctx, self)? {
            return Ok(table);
        }
        self.ballista
            .try_decode_table_provider(buf, table_ref, schema, ctx)
    }

    fn try_encode_table_provider(
        &self,
        table_ref: &datafusion::common::TableReference,
        node: Arc<dyn datafusion::catalog::TableProvider>,
        buf: &mut Vec<u8>,
    ) -> Result<()> {
        if numbered::encode_table(&node, self, buf)? {
            return Ok(());
        }
        self.ballista
            .try_encode_table_provider(table_ref, node, buf)
    }

    fn try_decode_file_format(
        &self,
        buf: &[u8],
        ctx: &TaskContext,
    ) -> Result<Arc<dyn datafusion::datasource::file_format::FileFormatFactory>> {
        self.ballista.try_decode_file_format(buf, ctx)
    }

    fn try_encode_file_format(
        &self,
        buf: &mut Vec<u8>,
        node: Arc<dyn datafusion::datasource::file_format::FileFormatFactory>,
    ) -> Result<()> {
        self.ballista.try_encode_file_format(buf, node)
    }

    fn try_encode_udaf(&self, node: &AggregateUDF, buf: &mut Vec<u8>) -> Result<()> {
        encode_bound_prior(node, buf)
    }

    fn try_decode_udaf(&self, name: &str, buf: &[u8]) -> Result<Arc<AggregateUDF>> {
        decode_aggregate(name, buf)
    }
}

/// Every function an executor needs: Ballista's defaults and posterity's.
pub fn function_registry() -> BallistaFunctionRegistry {
    let mut registry = BallistaFunctionRegistry::default();
    for f in posterity::scalar::all() {
        registry
            .scalar_functions
            .insert(f.name().to_string(), Arc::new(f));
    }
    for f in posterity::aggregates() {
        registry
            .aggregate_functions
            .insert(f.name().to_string(), Arc::new(f));
    }
    for f in posterity::window_functions() {
        registry
            .window_functions
            .insert(f.name().to_string(), Arc::new(f));
    }
    registry
}

/// The session state the scheduler plans with: Ballista's optimizer rules, every
/// posterity function, the prior-binding rule and posterity's join rule.
pub fn scheduler_session(config: SessionConfig) -> Result<SessionState> {
    let builder = SessionStateBuilder::new()
        .with_default_features()
        .with_config(config)
        .with_runtime_env(Arc::new(RuntimeEnvBuilder::new().build()?))
        .with_optimizer_rules(ballista_core::optimizer::ballista_default_optimizer_rules())
        .with_analyzer_rule(Arc::new(BindPriors));
    let mut state = posterity::optimizer::with_build_on_aggregate(builder).build();
    register_functions(&mut state)?;
    Ok(state)
}

fn register_functions(state: &mut SessionState) -> Result<()> {
    use datafusion::execution::FunctionRegistry;
    for f in posterity::scalar::all() {
        state.register_udf(Arc::new(f))?;
    }
    for f in posterity::aggregates() {
        state.register_udaf(Arc::new(f))?;
    }
    for f in posterity::window_functions() {
        state.register_udwf(Arc::new(f))?;
    }
    Ok(())
}

/// The session config every process of a posterity cluster uses: Ballista's, with
/// [`PosterityCodec`] for physical plans and [`PosterityLogicalCodec`] for logical ones.
pub fn session_config() -> SessionConfig {
    SessionConfig::new_with_ballista()
        .with_ballista_physical_extension_codec(Arc::new(PosterityCodec::default()))
        .with_ballista_logical_extension_codec(Arc::new(PosterityLogicalCodec::default()))
}

/// A client session on the cluster whose scheduler listens at `url`
/// (`df://host:port`), with posterity registered for planning.
pub async fn connect(url: &str) -> Result<SessionContext> {
    let state = SessionStateBuilder::new()
        .with_default_features()
        .with_config(session_config())
        .build();
    let ctx = SessionContext::remote_with_state(url, state).await?;
    posterity::register(&ctx);
    Ok(ctx)
}

/// Run a cluster process's `serve` to its exit code. encode's training table is a
/// deep plan (a join per key and per indicator table, dozens of columns); planning,
/// encoding and decoding it recurse further than tokio's 2 MiB worker stacks allow
/// in a debug build (the scheduler aborted with a stack overflow), so workers get
/// 64 MiB (address space, touched only as deep as a plan goes). Huge pages are off,
/// as in the shell (the processes allocate with mimalloc too).
pub fn run_process(
    serve: impl std::future::Future<Output = std::process::ExitCode>,
) -> std::process::ExitCode {
    posterity::shell::without_huge_pages();
    let runtime = tokio::runtime::Builder::new_multi_thread()
        .thread_stack_size(64 << 20)
        .enable_all()
        .build();
    match runtime {
        Ok(runtime) => runtime.block_on(serve),
        Err(e) => {
            eprintln!("error: cannot start the runtime: {e}");
            std::process::ExitCode::from(1)
        }
    }
}

/// An in-process cluster (scheduler and executor in this process), for tests.
pub async fn standalone() -> Result<SessionContext> {
    let state = scheduler_session(session_config())?;
    let ctx = SessionContext::standalone_with_state(state).await?;
    posterity::register(&ctx);
    Ok(ctx)
}

#[cfg(test)]
mod tests {
    use super::*;
    use datafusion::arrow::array::{Array, Float64Array};
    use datafusion::arrow::util::pretty::pretty_format_batches;
    use datafusion::prelude::CsvReadOptions;

    async fn prior(sql: &str) -> ScalarValue {
        let ctx = SessionContext::new();
        posterity::register(&ctx);
        let batches = ctx.sql(sql).await.unwrap().collect().await.unwrap();
        ScalarValue::try_from_array(batches[0].column(0), 0).unwrap()
    }

    #[tokio::test]
    async fn a_bound_prior_travels_with_the_function() {
        let codec = PosterityCodec::default();
        let unbound = posterity_aggregate("beta_posterior").unwrap();
        let mut buf = Vec::new();
        codec.try_encode_udaf(&unbound, &mut buf).unwrap();
        assert!(buf.is_empty(), "an unbound fit goes by name alone");
        let value = prior("SELECT beta_prior(3, 7)").await;
        let bound = rebind(&unbound, value.clone()).unwrap().unwrap();
        codec.try_encode_udaf(&bound, &mut buf).unwrap();
        let decoded = codec.try_decode_udaf("beta_posterior", &buf).unwrap();
        assert_eq!(bound_prior(&decoded), Some(value));
        let err = codec.try_decode_udaf("no_such_fit", &[]).unwrap_err();
        assert!(err.to_string().contains("no_such_fit"), "{err}");
    }

    /// An in-process cluster (scheduler and executor in this process) against a
    /// plain session: a grouped fit and an as-of window whose first rows are empty
    /// frames (they must read the query's prior, 0.3, not a default).
    #[tokio::test(flavor = "multi_thread", worker_threads = 2)]
    async fn an_in_process_cluster_gives_the_local_numbers() {
        let dir =
            std::env::temp_dir().join(format!("posterity-cluster-unit-{}", std::process::id()));
        std::fs::create_dir_all(&dir).unwrap();
        let path = dir.join("visits.csv");
        let mut csv = String::from("clinic,day,missed\n");
        for i in 0..400u32 {
            csv.push_str(&format!("c{},{},{}\n", i % 7, i / 7, u32::from(i % 5 == 0)));
        }
        std::fs::write(&path, csv).unwrap();
        let sql = "SELECT clinic, day, posterior_mean(beta_posterior(missed, beta_prior(3, 7)) \
                   OVER (PARTITION BY clinic ORDER BY day RANGE BETWEEN UNBOUNDED PRECEDING AND \
                   1 PRECEDING)) AS m FROM visits ORDER BY clinic, day";
        let local = SessionContext::new();
        posterity::register(&local);
        let cluster = standalone().await.unwrap();
        let mut results = Vec::new();
        for ctx in [&local, &cluster] {
            ctx.register_csv("visits", path.to_str().unwrap(), CsvReadOptions::new())
                .await
                .unwrap();
            let batches = ctx.sql(sql).await.unwrap().collect().await.unwrap();
            results.push(pretty_format_batches(&batches).unwrap().to_string());
            let first = batches[0]
                .column(2)
                .as_any()
                .downcast_ref::<Float64Array>()
                .unwrap();
            assert!(first.is_valid(0) && (first.value(0) - 0.3).abs() < 1e-15);
        }
        assert_eq!(results[0], results[1]);
    }

    /// encode on an in-process cluster with a work directory against a plain
    /// session: the numbered rows travel to the scheduler and executors, the
    /// intermediate tables are Parquet files, and every number should be the same.
    ///
    /// Four files make four scan parts: the cluster reads the numbered rows as
    /// one part (its scheduler would give each task every part of a scan it does
    /// not know, and each row would be counted once per task).
    #[tokio::test(flavor = "multi_thread", worker_threads = 2)]
    async fn encode_on_an_in_process_cluster_gives_the_local_numbers() {
        use posterity::encode::{self, EncodeOptions};
        let dir =
            std::env::temp_dir().join(format!("posterity-cluster-encode-{}", std::process::id()));
        std::fs::remove_dir_all(&dir).ok();
        let data = dir.join("visits");
        std::fs::create_dir_all(&data).unwrap();
        for part in 0..4u32 {
            let mut csv = String::from("visit,clinic,breed,missed\n");
            for i in 0..300u32 {
                let v = part * 300 + i;
                let missed = u32::from(v.wrapping_mul(2654435761) % 7 < 2 + v % 5 / 2);
                // 11 clinics of about 109 visits (indicator columns) and 41 breeds
                // of about 29 (none: an empty table of indicator levels).
                csv.push_str(&format!("{v},c{},b{},{missed}\n", v % 11, v % 41));
            }
            std::fs::write(data.join(format!("part-{part}.csv")), csv).unwrap();
        }
        let local = SessionContext::new();
        posterity::register(&local);
        let cluster = standalone().await.unwrap();
        let mut results = Vec::new();
        for (ctx, work) in [(&local, None), (&cluster, Some(dir.join("work")))] {
            ctx.register_csv("visits", data.to_str().unwrap(), CsvReadOptions::new())
                .await
                .unwrap();
            let mut options = EncodeOptions::new("visits", "missed", &["clinic", "breed"]);
            options.work_dir = work;
            let plan = encode::resolve(ctx, &options).await.unwrap();
            let output = encode::run(ctx, &plan).await.unwrap();
            let train = output.train_encoded.clone().unwrap();
            let sorted = train
                .sort_by(vec![datafusion::prelude::col("visit")])
                .unwrap();
            let limit = std::time::Duration::from_secs(120);
            let batches = tokio::time::timeout(limit, sorted.collect())
                .await
                .expect("the training table within two minutes")
                .unwrap();
            results.push((
                pretty_format_batches(&batches).unwrap().to_string(),
                output.bundle.to_json(),
            ));
        }
        assert_eq!(results[0].1, results[1].1, "bundle");
        assert_eq!(results[0].0, results[1].0, "training table");
        std::fs::remove_dir_all(&dir).ok();
    }
}
