//! Training and scoring rows numbered in file order, streamed rather than held in
//! memory.
//!
//! encode needs a stable number per row: folds are a hash of it and the outputs come
//! back in file order. The number is the row's position in the table's scan: the
//! scan's partitions are contiguous stretches of the input (whole files or byte
//! ranges of one), so counting each partition's rows once gives every partition its
//! first number, and every later scan numbers its rows as they stream past, with no
//! copy of the table. Each scan also declares its rows sorted by the number within a
//! partition, so a plan that keeps that order writes the outputs in file order by
//! merging instead of sorting.
//!
//! The numbering depends on every scan producing the same partitions with the same
//! rows in the same order: the scan runs without the engine's work stealing (which
//! lets an idle partition read a sibling's byte ranges), and each stream checks at
//! its end that it saw the rows the count promised.

use std::collections::HashMap;
use std::fmt;
use std::sync::atomic::{AtomicI64, Ordering};
use std::sync::Arc;

use async_trait::async_trait;
use datafusion::arrow::array::{ArrayRef, Int64Array, RecordBatch, RecordBatchOptions};
use datafusion::arrow::compute::{cast, SortOptions};
use datafusion::arrow::datatypes::{DataType, Field, Schema, SchemaRef};
use datafusion::catalog::Session;
use datafusion::common::stats::Precision;
use datafusion::common::tree_node::TreeNodeRecursion;
use datafusion::common::{DataFusionError, Result, Statistics};
use datafusion::datasource::{TableProvider, TableType};
use datafusion::execution::session_state::SessionState;
use datafusion::execution::{SendableRecordBatchStream, TaskContext};
use datafusion::logical_expr::Expr;
use datafusion::physical_expr::expressions::Column;
use datafusion::physical_expr::{EquivalenceProperties, PhysicalExpr, PhysicalSortExpr};
use datafusion::physical_plan::execution_plan::{Boundedness, EmissionType};
use datafusion::physical_plan::statistics::StatisticsArgs;
use datafusion::physical_plan::stream::RecordBatchStreamAdapter;
use datafusion::physical_plan::{
    DisplayAs, DisplayFormatType, ExecutionPlan, ExecutionPlanProperties, Partitioning,
    PlanProperties,
};
use datafusion::prelude::SessionContext;
use futures::stream::BoxStream;
use futures::StreamExt;

/// The column holding each row's number (internal: never in an output).
pub const ROW: &str = "__row";

/// A table's rows with a [`ROW`] column numbering them in scan order.
#[derive(Debug)]
pub struct NumberedTable {
    source: Arc<dyn TableProvider>,
    /// The source's columns and `__row`.
    schema: SchemaRef,
    /// The first row number of each scan partition, and the total at the end.
    starts: Arc<Vec<i64>>,
    /// How many parts the scan was asked for when the rows were counted: every
    /// later scan asks for the same, whatever the session that plans it says.
    parts: usize,
    /// Scans read all parts as one (see [`NumberedScan::new`]).
    serial: bool,
}

impl NumberedTable {
    /// `source` numbered from the first row number of each of its scan's parts
    /// (`starts`, with the total at the end) when scanned in `parts` parts.
    pub fn new(source: Arc<dyn TableProvider>, starts: Vec<i64>, parts: usize) -> Self {
        let mut fields: Vec<Field> = source.schema().fields().iter().map(|f| plain(f)).collect();
        fields.push(Field::new(ROW, DataType::Int64, false));
        NumberedTable {
            source,
            schema: Arc::new(Schema::new(fields)),
            starts: Arc::new(starts),
            parts,
            serial: false,
        }
    }

    /// The same table, scanned as one part (for a cluster's scheduler).
    pub fn serial(mut self) -> Self {
        self.serial = true;
        self
    }

    pub fn source(&self) -> &Arc<dyn TableProvider> {
        &self.source
    }

    pub fn starts(&self) -> &[i64] {
        &self.starts
    }

    pub fn parts(&self) -> usize {
        self.parts
    }
}

/// Register `source` as `name` with its rows numbered (one counting pass over the
/// source; nothing is kept in memory).
pub async fn register(ctx: &SessionContext, source: &str, name: &str) -> Result<()> {
    let provider = ctx.table_provider(source).await?;
    let state = ctx.state();
    let parts = state.config().target_partitions().max(1);
    let counting = source_scan(provider.as_ref(), &state, Some(&vec![]), parts).await?;
    let task = ctx.task_ctx();
    let mut counts = Vec::new();
    for partition in 0..counting.output_partitioning().partition_count() {
        let mut stream = counting.execute(partition, without_work_stealing(&task))?;
        let mut rows = 0i64;
        while let Some(batch) = stream.next().await {
            rows += batch?.num_rows() as i64;
        }
        counts.push(rows);
    }
    let mut starts = vec![0i64];
    for c in counts {
        starts.push(starts.last().copied().unwrap_or(0) + c);
    }
    let table = NumberedTable::new(provider, starts, parts);
    ctx.deregister_table(name)?;
    ctx.register_table(name, Arc::new(table))?;
    Ok(())
}

/// The source's scan of `projection` in `parts` parts, split exactly as every scan
/// of it is (the same byte ranges whatever the projection).
async fn source_scan(
    source: &dyn TableProvider,
    state: &dyn Session,
    projection: Option<&Vec<usize>>,
    parts: usize,
) -> Result<Arc<dyn ExecutionPlan>> {
    // A view (a CSV file read with a NULL marker is one) plans its scan with the
    // session's optimizer, which may deal batches round-robin among parts: a row
    // would land in another part on every scan, and the numbers would not follow
    // it. Planned without that, every part reads its own byte ranges in order.
    let mut in_order = None;
    if let Some(session) = state.as_any().downcast_ref::<SessionState>() {
        let mut session = session.clone();
        session
            .config_mut()
            .options_mut()
            .optimizer
            .enable_round_robin_repartition = false;
        in_order = Some(session);
    }
    let state: &dyn Session = match &in_order {
        Some(session) => session,
        None => state,
    };
    let plan = source.scan(state, projection, &[], None).await?;
    Ok(plan
        .repartitioned(parts, state.config_options())?
        .unwrap_or(plan))
}

/// The task's context with the file scan's work stealing turned off, so that each
/// partition reads exactly its own files and byte ranges.
fn without_work_stealing(task: &Arc<TaskContext>) -> Arc<TaskContext> {
    let mut config = task.session_config().clone();
    config
        .options_mut()
        .execution
        .enable_file_stream_work_stealing = false;
    Arc::new(TaskContext::new(
        task.task_id(),
        task.session_id(),
        config,
        HashMap::new(),
        HashMap::new(),
        HashMap::new(),
        HashMap::new(),
        task.runtime_env(),
    ))
}

#[async_trait]
impl TableProvider for NumberedTable {
    fn schema(&self) -> SchemaRef {
        self.schema.clone()
    }

    fn table_type(&self) -> TableType {
        TableType::Base
    }

    async fn scan(
        &self,
        state: &dyn Session,
        projection: Option<&Vec<usize>>,
        _filters: &[Expr],
        _limit: Option<usize>,
    ) -> Result<Arc<dyn ExecutionPlan>> {
        let row_index = self.schema.fields().len() - 1;
        let wanted: Vec<usize> = match projection {
            Some(p) => p.clone(),
            None => (0..self.schema.fields().len()).collect(),
        };
        let from_source: Vec<usize> = wanted.iter().copied().filter(|&i| i != row_index).collect();
        let inner =
            source_scan(self.source.as_ref(), state, Some(&from_source), self.parts).await?;
        if inner.output_partitioning().partition_count() + 1 != self.starts.len() {
            return Err(DataFusionError::Execution(
                "encode: the training or scoring table changed while encoding (its scan has \
                 a different number of parts than when its rows were counted)"
                    .into(),
            ));
        }
        // Where each output column comes from: the source's projected column or the number.
        let mut sources = Vec::with_capacity(wanted.len());
        let mut next = 0;
        for &i in &wanted {
            if i == row_index {
                sources.push(None);
            } else {
                sources.push(Some(next));
                next += 1;
            }
        }
        Ok(Arc::new(NumberedScan::new(
            inner,
            sources,
            self.starts.to_vec(),
            self.serial,
        )))
    }

    fn statistics(&self) -> Option<Statistics> {
        let total = self.starts.last().copied().unwrap_or(0) as usize;
        Some(Statistics::new_unknown(&self.schema).with_num_rows(Precision::Exact(total)))
    }
}

/// The scan of a [`NumberedTable`]: the source's scan, run partition by partition
/// without work stealing, with the row numbers added. A leaf to the optimizer, so
/// nothing it does can change the inner scan's partitions or drop rows before they
/// are numbered.
#[derive(Debug)]
pub struct NumberedScan {
    inner: Arc<dyn ExecutionPlan>,
    schema: SchemaRef,
    /// Per output column: `Some(i)` the inner scan's column `i`, `None` the number.
    sources: Vec<Option<usize>>,
    starts: Arc<Vec<i64>>,
    /// All parts in order as one output partition (on a cluster).
    serial: bool,
    properties: Arc<PlanProperties>,
}

impl NumberedScan {
    /// The rows of `inner` (one part per part of `starts`) as the columns `sources`
    /// says: `Some(i)` the inner scan's column `i`, `None` the row number.
    ///
    /// `serial` reads every part in order as one: what a cluster needs, whose
    /// scheduler splits only the scans it knows into its tasks and would hand each
    /// task every part of this one.
    pub fn new(
        inner: Arc<dyn ExecutionPlan>,
        sources: Vec<Option<usize>>,
        starts: Vec<i64>,
        serial: bool,
    ) -> Self {
        let inner_schema = inner.schema();
        let fields: Vec<Field> = sources
            .iter()
            .map(|s| match s {
                Some(i) => plain(inner_schema.field(*i)),
                None => Field::new(ROW, DataType::Int64, false),
            })
            .collect();
        let schema = Arc::new(Schema::new(fields));
        let starts = Arc::new(starts);
        let ordering = sources.iter().position(Option::is_none).map(|i| {
            PhysicalSortExpr::new(
                Arc::new(Column::new(ROW, i)),
                SortOptions {
                    descending: false,
                    nulls_first: false,
                },
            )
        });
        let equivalences = match ordering {
            Some(o) => EquivalenceProperties::new_with_orderings(schema.clone(), [[o]]),
            None => EquivalenceProperties::new(schema.clone()),
        };
        let properties = PlanProperties::new(
            equivalences,
            Partitioning::UnknownPartitioning(match serial {
                true => 1,
                false => starts.len().saturating_sub(1),
            }),
            EmissionType::Incremental,
            Boundedness::Bounded,
        );
        Self {
            inner,
            schema,
            sources,
            starts,
            serial,
            properties: Arc::new(properties),
        }
    }
}

impl NumberedScan {
    pub fn inner(&self) -> &Arc<dyn ExecutionPlan> {
        &self.inner
    }

    pub fn sources(&self) -> &[Option<usize>] {
        &self.sources
    }

    pub fn starts(&self) -> &[i64] {
        &self.starts
    }

    pub fn serial(&self) -> bool {
        self.serial
    }
}

impl DisplayAs for NumberedScan {
    fn fmt_as(&self, _t: DisplayFormatType, f: &mut fmt::Formatter) -> fmt::Result {
        write!(
            f,
            "NumberedScan: partitions={}",
            self.starts.len().saturating_sub(1)
        )
    }
}

impl ExecutionPlan for NumberedScan {
    fn name(&self) -> &str {
        "NumberedScan"
    }

    fn properties(&self) -> &Arc<PlanProperties> {
        &self.properties
    }

    fn children(&self) -> Vec<&Arc<dyn ExecutionPlan>> {
        vec![]
    }

    fn apply_expressions(
        &self,
        _f: &mut dyn FnMut(&Arc<dyn PhysicalExpr>) -> Result<TreeNodeRecursion>,
    ) -> Result<TreeNodeRecursion> {
        Ok(TreeNodeRecursion::Continue)
    }

    fn with_new_children(
        self: Arc<Self>,
        _children: Vec<Arc<dyn ExecutionPlan>>,
    ) -> Result<Arc<dyn ExecutionPlan>> {
        Ok(self)
    }

    fn statistics_from_inputs(
        &self,
        _input_stats: &[Arc<Statistics>],
        args: &StatisticsArgs,
    ) -> Result<Arc<Statistics>> {
        let rows = match args.partition() {
            Some(p) if !self.serial && p + 1 < self.starts.len() => {
                self.starts[p + 1] - self.starts[p]
            }
            _ => self.starts.last().copied().unwrap_or(0),
        };
        Ok(Arc::new(
            Statistics::new_unknown(&self.schema).with_num_rows(Precision::Exact(rows as usize)),
        ))
    }

    fn execute(
        &self,
        partition: usize,
        context: Arc<TaskContext>,
    ) -> Result<SendableRecordBatchStream> {
        let stream: BoxStream<'static, Result<RecordBatch>> = match self.serial {
            false => self.numbered_part(partition, &context)?,
            true if partition == 0 => {
                let parts = (0..self.starts.len().saturating_sub(1))
                    .map(|p| self.numbered_part(p, &context))
                    .collect::<Result<Vec<_>>>()?;
                futures::stream::iter(parts).flatten().boxed()
            }
            true => {
                return Err(DataFusionError::Execution(format!(
                    "encode: no part {partition} in the numbered rows (read as one part)"
                )))
            }
        };
        Ok(Box::pin(RecordBatchStreamAdapter::new(
            self.schema.clone(),
            stream,
        )))
    }
}

impl NumberedScan {
    /// Part `part` of the source with its row numbers, checked against the count.
    fn numbered_part(
        &self,
        part: usize,
        context: &Arc<TaskContext>,
    ) -> Result<BoxStream<'static, Result<RecordBatch>>> {
        let (Some(&start), Some(&end)) = (self.starts.get(part), self.starts.get(part + 1)) else {
            return Err(DataFusionError::Execution(format!(
                "encode: no part {part} in the numbered rows"
            )));
        };
        let inner = self.inner.execute(part, without_work_stealing(context))?;
        let schema = self.schema.clone();
        let sources = self.sources.clone();
        let position = Arc::new(AtomicI64::new(start));
        let counter = position.clone();
        let numbered = inner.map(move |batch| {
            let batch = batch?;
            let next = counter.load(Ordering::Relaxed);
            let n = batch.num_rows() as i64;
            if next + n > end {
                return Err(changed());
            }
            let columns: Vec<ArrayRef> = sources
                .iter()
                .zip(schema.fields())
                .map(|(s, field)| match s {
                    Some(i) if batch.column(*i).data_type() != field.data_type() => {
                        Ok(cast(batch.column(*i), field.data_type())?)
                    }
                    Some(i) => Ok(batch.column(*i).clone()),
                    None => Ok(Arc::new(Int64Array::from_iter_values(next..next + n)) as ArrayRef),
                })
                .collect::<Result<_>>()?;
            counter.store(next + n, Ordering::Relaxed);
            let options = RecordBatchOptions::new().with_row_count(Some(n as usize));
            Ok(RecordBatch::try_new_with_options(
                schema.clone(),
                columns,
                &options,
            )?)
        });
        // A part that ends early would leave numbers unused: the table changed.
        let short = futures::stream::once(async move {
            (position.load(Ordering::Relaxed) != end).then(|| Err(changed()))
        })
        .filter_map(futures::future::ready);
        Ok(numbered.chain(short).boxed())
    }
}

/// `field` with string and binary views read as plain strings and bytes. A view
/// array that a hash join gathers keeps every buffer of its input, and encode's
/// chain of joins (one or two per key) multiplied them: 15 keys read as of their
/// times on 200,000 rows of a Parquet file written with views took 143 s and
/// 9.5 GB, 7.5 s and 1.2 GB read plain (BENCHMARKS.md, "with many keys"; the
/// level columns built in SQL are plain since `key_text` returns Utf8).
fn plain(field: &Field) -> Field {
    match field.data_type() {
        DataType::Utf8View => field.clone().with_data_type(DataType::Utf8),
        DataType::BinaryView => field.clone().with_data_type(DataType::Binary),
        _ => field.clone(),
    }
}

fn changed() -> DataFusionError {
    DataFusionError::Execution(
        "encode: the training or scoring table changed while encoding (a part of it has \
         more or fewer rows than when its rows were counted)"
            .into(),
    )
}
